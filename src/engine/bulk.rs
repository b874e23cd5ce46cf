//! The bulk pass: one model over the whole set at the evaluation's batch
//! size, keeping only its scores [N, C] and the time spent in engine calls.

use std::sync::Mutex;
use std::time::{Duration, Instant};

use tract_onnx::prelude::*;

use super::dataset::EvalSet;
use super::error::{EngineError, EngineResult};
use super::feed::Feed;
use super::logits::{Scores, class_count};
use super::setup::Prepared;

/// One model's scores over the set and the summed time of its engine calls.
#[derive(Debug, Clone)]
pub struct BulkScores {
    pub raw: Scores,
    pub engine_time: Duration,
}

/// Batches read ahead of each engine thread: reading and decompressing the
/// set overlaps inference instead of adding to it.
const READ_AHEAD: usize = 2;

/// One batch on its way to an engine thread: its index and its inputs.
type Batch = (usize, EngineResult<Vec<Tensor>>);

/// Runs `m` over the whole set with `threads` engine threads taking batches
/// in turn (plans are shared; every call has its own state), so one large
/// model keeps every core busy.
pub fn run(
    m: &Prepared,
    set: &EvalSet,
    batch: usize,
    threads: usize,
    tick: &(dyn Fn(u64) + Sync),
) -> EngineResult<BulkScores> {
    let n = set.samples();
    let batches = n.div_ceil(batch.max(1));
    let threads = threads.clamp(1, batches.max(1));
    let mut feed = Feed::open(set, &m.binding)?;
    let outputs: Mutex<Vec<Option<Vec<f64>>>> = Mutex::new(vec![None; batches]);
    let engine_time = Mutex::new(Duration::ZERO);
    // The failure of the earliest batch, so the message does not depend on
    // which thread got there first.
    let failed: Mutex<Option<(usize, EngineError)>> = Mutex::new(None);
    let (tx, rx) = std::sync::mpsc::sync_channel::<Batch>(READ_AHEAD * threads);
    // Taken by the engine threads in turn; dropped by the first that ends
    // (see `EndsReader`), which ends the reader (its send fails) and the
    // other threads.
    let rx = Mutex::new(Some(rx));
    let next = || lock(&rx).as_ref().and_then(|r| r.recv().ok());
    let give_up = |ix: usize, e: EngineError| {
        let mut failed = lock(&failed);
        if failed.as_ref().is_none_or(|(first, _)| ix < *first) {
            *failed = Some((ix, e));
        }
    };
    /// Drops the receiver when its engine thread ends, however it ends (the
    /// set read through, a failure, a panic), so that the reader never
    /// waits on a channel nobody reads.
    struct EndsReader<'a, T>(&'a Mutex<Option<T>>);
    impl<T> Drop for EndsReader<'_, T> {
        fn drop(&mut self) {
            *lock(self.0) = None;
        }
    }
    std::thread::scope(|scope| {
        scope.spawn(move || {
            for ix in 0..batches {
                let rows = batch.min(n - ix * batch);
                let next = feed.next_tensors(rows);
                let broken = next.is_err();
                if tx.send((ix, next)).is_err() || broken {
                    return;
                }
            }
        });
        for _ in 0..threads {
            scope.spawn(|| {
                let _ends = EndsReader(&rx);
                while let Some((ix, tensors)) = next() {
                    let rows = batch.min(n - ix * batch);
                    let scored = tensors.and_then(|tensors| {
                        let plan = m.plan(rows)?;
                        let inputs: TVec<TValue> =
                            tensors.into_iter().map(Tensor::into_tvalue).collect();
                        let started = Instant::now();
                        let out = plan.run(inputs)?;
                        *lock(&engine_time) += started.elapsed();
                        batch_scores(m, &out, rows)
                    });
                    match scored {
                        Ok(values) => {
                            lock(&outputs)[ix] = Some(values);
                            tick(rows as u64);
                        }
                        Err(e) => return give_up(ix, e),
                    }
                }
            });
        }
    });
    if let Some((_, e)) = failed.into_inner().unwrap_or_else(|p| p.into_inner()) {
        return Err(e);
    }
    let outputs = outputs.into_inner().unwrap_or_else(|p| p.into_inner());
    let mut raw = Scores::new(m.classes);
    raw.data.reserve(n * m.classes);
    for values in outputs {
        let values = values
            .ok_or_else(|| EngineError::InvalidDataset("the evaluation set ended early".into()))?;
        raw.push_rows(&values);
    }
    refuse_non_finite(m, &raw.data)?;
    Ok(BulkScores {
        raw,
        engine_time: engine_time.into_inner().unwrap_or_else(|p| p.into_inner()),
    })
}

fn lock<T>(m: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    m.lock().unwrap_or_else(|p| p.into_inner())
}

/// Checks one batch's output and returns it as f64 rows.
pub(crate) fn batch_scores(m: &Prepared, out: &Tensor, rows: usize) -> EngineResult<Vec<f64>> {
    let shape = out.shape();
    let bad = |what: String| EngineError::BadOutput(format!("{} '{}': {what}", m.role, m.label));
    if shape.first() != Some(&rows) || class_count(shape).ok() != Some(m.classes) {
        return Err(bad(format!(
            "a batch of {rows} gave an output of shape {shape:?}, expected [{rows}, {}]",
            m.classes
        )));
    }
    if !out.datum_type().is_float() {
        return Err(bad(format!(
            "the scored output is {:?}, not a float tensor",
            out.datum_type()
        )));
    }
    let cast = out.cast_to::<f64>().map_err(|e| bad(e.to_string()))?;
    let plain = cast.try_as_plain_ram().map_err(|e| bad(e.to_string()))?;
    let values = plain.as_slice::<f64>().map_err(|e| bad(e.to_string()))?;
    Ok(values.to_vec())
}

/// metrics.md, "Outputs that are not finite": the evaluation fails naming
/// the model, the first such sample and its value.
pub(crate) fn refuse_non_finite(m: &Prepared, values: &[f64]) -> EngineResult<()> {
    match values.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(i) => Err(EngineError::BadOutput(format!(
            "{} '{}' gave {} for sample {}",
            m.role,
            m.label,
            non_finite_name(values[i]),
            i / m.classes
        ))),
    }
}

/// NaN, inf or -inf, as numpy prints them.
fn non_finite_name(v: f64) -> &'static str {
    if v.is_nan() {
        "NaN"
    } else if v > 0.0 {
        "inf"
    } else {
        "-inf"
    }
}
