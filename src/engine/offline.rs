//! The offline pass: one model over the whole set at the evaluation's batch
//! size, keeping only its scores [N, C] and the time spent in engine calls.

use std::collections::HashMap;
use std::sync::Mutex;
use std::time::{Duration, Instant};

use tract_onnx::prelude::*;

use super::dataset::EvalSet;
use super::error::{EngineError, EngineResult};
use super::feed::{Binding, Feed};
use super::logits::{Logits, class_count};
use super::model::{BatchAxis, Model, Plan};

/// A model made ready for one evaluation: bound to the set, with its plans
/// built once per batch size and reused.
#[derive(Debug)]
pub struct Prepared {
    pub label: String,
    pub model: Model,
    pub binding: Binding,
    pub output: usize,
    pub classes: usize,
    plans: Mutex<HashMap<usize, Plan>>,
}

impl Prepared {
    pub fn new(label: String, model: Model, binding: Binding, output: usize) -> EngineResult<Self> {
        let shape = model.output_shape(1, &binding.dims, output)?;
        let classes = class_count(&shape)
            .map_err(|e| EngineError::Mismatch(format!("model '{label}': {e}")))?;
        Ok(Prepared {
            label,
            model,
            binding,
            output,
            classes,
            plans: Mutex::new(HashMap::new()),
        })
    }

    /// The batch size this model runs at in the offline pass.
    pub fn offline_batch(&self, requested: usize, samples: usize) -> usize {
        match self.model.batch {
            BatchAxis::Fixed(b) => b,
            BatchAxis::Symbolic(_) => requested.min(samples),
        }
    }

    pub fn plan(&self, batch: usize) -> EngineResult<Plan> {
        let mut plans = self.plans.lock().unwrap_or_else(|p| p.into_inner());
        if let Some(p) = plans.get(&batch) {
            return Ok(p.clone());
        }
        let plan = self
            .model
            .plan(batch, &self.binding.dims, self.output)
            .map_err(|e| EngineError::InvalidModel(format!("model '{}': {e}", self.label)))?;
        plans.insert(batch, plan.clone());
        Ok(plan)
    }
}

/// One model's scores over the set and the summed time of its engine calls.
#[derive(Debug, Clone)]
pub struct Offline {
    pub raw: Logits,
    pub engine_time: Duration,
}

/// Batches read ahead of the engine: reading and decompressing the set
/// overlaps inference instead of adding to it.
const READ_AHEAD: usize = 2;

pub fn run(
    m: &Prepared,
    set: &EvalSet,
    batch: usize,
    stop: &(dyn Fn() -> bool + Sync),
    tick: &(dyn Fn(u64) + Sync),
) -> EngineResult<Offline> {
    let n = set.samples();
    let mut feed = Feed::open(set, &m.binding)?;
    let mut raw = Logits::new(m.classes);
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
                return Err(EngineError::Canceled);
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
        Ok(())
    })?;
    Ok(Offline { raw, engine_time })
}

/// Checks one batch's output and appends it as f64 rows.
pub(crate) fn append_scores(
    m: &Prepared,
    out: &Tensor,
    rows: usize,
    first_sample: usize,
    into: &mut Logits,
) -> EngineResult<()> {
    let shape = out.shape();
    let bad = |what: String| EngineError::BadOutput(format!("model '{}': {what}", m.label));
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
    if let Some(i) = values.iter().position(|v| v.is_nan()) {
        return Err(bad(format!(
            "the output is NaN at sample {}",
            first_sample + i / m.classes
        )));
    }
    into.push_rows(values);
    Ok(())
}
