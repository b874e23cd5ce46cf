//! The timed rounds (metrics.md, "Latency and throughput"): batch of 1,
//! the same sample for every model in a round, every model once per round in
//! an order rotated by one each round, each run timed around the engine call
//! alone. Runs on the calling thread; the caller makes sure nothing else runs.

use std::time::Instant;

use tract_onnx::prelude::*;

use super::error::EngineResult;
use super::model::{Plan, guarded};
use super::speed::{CONFIDENCE_95, paired_median};
use super::stats::{mean, nearest_rank, quantile_interval, sample_stdev};
use crate::report::{Latency, StudentLatency};

/// One timed model: its batch-1 plan and the samples it cycles through
/// (already converted to its input types; slot r % len serves round r).
pub struct Entry<'a> {
    pub plan: Plan,
    pub samples: &'a [TVec<TValue>],
}

/// Milliseconds of every timed run, per entry, in round order.
pub fn measure(
    entries: &[Entry<'_>],
    warmup: u32,
    iterations: u32,
    tick: &dyn Fn(u64),
) -> EngineResult<Vec<Vec<f64>>> {
    let mut states = entries
        .iter()
        .map(|e| guarded("preparing a run", || e.plan.runnable.spawn()))
        .collect::<EngineResult<Vec<_>>>()?;
    for (e, state) in entries.iter().zip(&mut states) {
        for w in 0..warmup as usize {
            let inputs = e.samples[w % e.samples.len()].clone();
            guarded("warm-up run", || state.run(inputs))?;
        }
    }
    let count = entries.len();
    let mut times = vec![Vec::with_capacity(iterations as usize); count];
    for round in 0..iterations as usize {
        for step in 0..count {
            let ix = (round + step) % count;
            let e = &entries[ix];
            let inputs = e.samples[round % e.samples.len()].clone();
            let state = &mut states[ix];
            let started = Instant::now();
            let out = guarded("timed run", || state.run(inputs));
            let elapsed = started.elapsed();
            out?;
            // A run shorter than the clock can tell counts as 1 ns, so
            // that every ratio of two runs is defined.
            times[ix].push(elapsed.as_secs_f64().max(1e-9) * 1e3);
        }
        tick(1);
    }
    Ok(times)
}

/// Summarizes one model's timings; throughput comes from the bulk pass.
pub fn summarize(ms: &[f64], throughput_sps: f64) -> Latency {
    let mut sorted = ms.to_vec();
    sorted.sort_by(f64::total_cmp);
    Latency {
        p50_ms: nearest_rank(&sorted, 50),
        p50_ci_ms: quantile_interval(ms, 0.5, CONFIDENCE_95),
        p90_ms: nearest_rank(&sorted, 90),
        p90_ci_ms: quantile_interval(ms, 0.9, CONFIDENCE_95),
        p99_ms: nearest_rank(&sorted, 99),
        mean_ms: mean(ms),
        stdev_ms: sample_stdev(ms),
        throughput_sps,
    }
}

/// A student's summary with its paired speedup over the reference
/// (the teacher): the median over rounds of reference_ms / student_ms.
pub fn summarize_against(ms: &[f64], reference: &[f64], throughput_sps: f64) -> StudentLatency {
    let (speedup, speedup_ci) = paired_median(reference, ms, CONFIDENCE_95);
    StudentLatency {
        own: summarize(ms, throughput_sps),
        speedup,
        speedup_ci,
    }
}
