//! The bulk pass: one model over the whole set at the evaluation's batch
//! size, keeping only its scores [N, C] and the time spent in engine calls.

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

/// Batches read ahead of the engine: reading and decompressing the set
/// overlaps inference instead of adding to it.
const READ_AHEAD: usize = 2;

/// Runs `m` over the whole set; `stop` is raised when another model of the
/// same pass failed, so that this one gives up early.
pub fn run(
    m: &Prepared,
    set: &EvalSet,
    batch: usize,
    stop: &(dyn Fn() -> bool + Sync),
    tick: &(dyn Fn(u64) + Sync),
) -> EngineResult<Option<BulkScores>> {
    let n = set.samples();
    let mut feed = Feed::open(set, &m.binding)?;
    let mut raw = Scores::new(m.classes);
    raw.data.reserve(n * m.classes);
    let mut engine_time = Duration::ZERO;
    std::thread::scope(|scope| {
        let (tx, rx) = std::sync::mpsc::sync_channel::<EngineResult<Vec<Tensor>>>(READ_AHEAD);
        scope.spawn(move || {
            let mut read = 0;
            while read < n {
                let rows = batch.min(n - read);
                let next = feed.next_tensors(rows);
                let failed = next.is_err();
                // A closed channel means the engine side stopped; so do we.
                if tx.send(next).is_err() || failed {
                    return;
                }
                read += rows;
            }
        });
        let mut done = 0;
        while done < n {
            if stop() {
                return Ok(false);
            }
            let rows = batch.min(n - done);
            let plan = m.plan(rows)?;
            let tensors = rx.recv().map_err(|_| {
                EngineError::InvalidDataset("the evaluation set ended early".into())
            })??;
            let inputs: TVec<TValue> = tensors.into_iter().map(Tensor::into_tvalue).collect();
            let started = Instant::now();
            let out = plan.run(inputs)?;
            engine_time += started.elapsed();
            append_scores(m, &out, rows, done, &mut raw)?;
            done += rows;
            tick(rows as u64);
        }
        Ok(true)
    })
    .map(|finished| finished.then_some(BulkScores { raw, engine_time }))
}

/// Checks one batch's output and appends it as f64 rows.
pub(crate) fn append_scores(
    m: &Prepared,
    out: &Tensor,
    rows: usize,
    first_sample: usize,
    into: &mut Scores,
) -> EngineResult<()> {
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
    // metrics.md, "Outputs that are not finite": the evaluation fails
    // naming the model, the first such sample and its value.
    if let Some(i) = values.iter().position(|v| !v.is_finite()) {
        return Err(EngineError::BadOutput(format!(
            "{} '{}' gave {} for sample {}",
            m.role,
            m.label,
            non_finite_name(values[i]),
            first_sample + i / m.classes
        )));
    }
    into.push_rows(values);
    Ok(())
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
