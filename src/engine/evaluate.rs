//! One evaluation from start to report: load and fit the models, the bulk
//! pass (scores and throughput), the timed rounds (latency), then scoring,
//! gates and ranking. The bulk pass shares the CPU with other evaluations;
//! the timed rounds hold it alone; scoring needs no lock.

use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

use tract_onnx::prelude::*;

use super::assemble::assemble;
use super::bulk::{self, BulkScores};
use super::cache::{Pace, TeacherCache};
use super::dataset::EvalSet;
use super::error::{EngineError, EngineResult};
use super::feed::Feed;
use super::job::{Hooks, Job, Options, Stage};
use super::latency::{self, Entry};
use super::model::Model;
use super::scoring::score;
use super::setup::{Prepared, Setup, prepare};
use crate::report::{Report, StageTimes};

/// What an evaluation produced: the report, and how it got there.
pub struct Outcome {
    pub report: Report,
    /// The teacher's scores came from the cache; its bulk pass did not run.
    pub teacher_from_cache: bool,
    /// Milliseconds of every timed run: one row per round, one column per
    /// timed model (the teacher, the baseline if any, then each student in
    /// request order).
    pub rounds: Vec<Vec<f64>>,
    /// Wall time of each stage the engine ran.
    pub stage_times: Vec<(Stage, Duration)>,
}

pub fn evaluate(job: &Job, options: &Options, hooks: &Hooks<'_>) -> EngineResult<Outcome> {
    let mut clock = StageClock::new();
    (hooks.progress)(Stage::Loading, 0, 1);
    let setup = prepare(job)?;
    (hooks.progress)(Stage::Loading, 1, 1);
    clock.lap(Stage::Loading);
    let n = setup.set.samples();
    let batch = job.settings.batch_size as usize;
    let threads = match options.bulk_threads {
        0 => super::environment::logical_cores(),
        t => t,
    };

    let teacher = &setup.models[setup.teacher];
    let cache = options.teacher_cache.as_ref().map(TeacherCache::new);
    let teacher_batch = teacher.bulk_batch(batch, n);
    let output = Some(teacher.output_name.as_str());
    let pace = Pace {
        batch: teacher_batch,
        threads,
    };
    let cached_teacher = cache
        .as_ref()
        .and_then(|c| c.get(&job.teacher.sha256, &job.dataset.sha256, output, pace))
        .filter(|hit| hit.raw.n == n && hit.raw.c == teacher.classes)
        .and_then(|hit| {
            hit.engine_time.map(|engine_time| BulkScores {
                raw: hit.raw,
                engine_time,
            })
        });
    let teacher_from_cache = cached_teacher.is_some();

    hooks.cpu.shared()?;
    let mut results = run_bulk(&setup, batch, threads, !teacher_from_cache, hooks)?;
    if let Some(hit) = cached_teacher {
        results[setup.teacher] = Some(hit);
    } else if let (Some(cache), Some(r)) = (&cache, &results[setup.teacher]) {
        cache.put(
            &job.teacher.sha256,
            &job.dataset.sha256,
            output,
            pace,
            &r.raw,
            r.engine_time,
        )?;
    }
    let results: Vec<BulkScores> = results
        .into_iter()
        .map(|r| r.expect("every model ran or was cached"))
        .collect();
    clock.lap(Stage::Bulk);

    hooks.cpu.exclusive()?;
    let per_entry = measure_latency(job, &setup, hooks)?;
    hooks.cpu.release()?;
    clock.lap(Stage::Timing);

    let scores = score(job, &setup, &results, hooks);
    let throughput = |ix: usize| n as f64 / results[ix].engine_time.as_secs_f64().max(1e-12);
    let mut report = assemble(job, &setup, scores, &per_entry, throughput, threads);
    clock.lap(Stage::Scoring);
    report.timings = clock.times(job);
    if let Some(path) = crate::report::first_non_finite(&report) {
        return Err(EngineError::NonFinite(path));
    }
    Ok(Outcome {
        report,
        teacher_from_cache,
        rounds: transpose(&per_entry),
        stage_times: clock.laps,
    })
}

/// Wall time per stage, measured as laps of one clock.
struct StageClock {
    since: Instant,
    laps: Vec<(Stage, Duration)>,
}

impl StageClock {
    fn new() -> Self {
        StageClock {
            since: Instant::now(),
            laps: Vec::new(),
        }
    }

    fn lap(&mut self, stage: Stage) {
        let now = Instant::now();
        self.laps.push((stage, now - self.since));
        self.since = now;
    }

    fn times(&self, job: &Job) -> StageTimes {
        let of = |stage| {
            self.laps
                .iter()
                .filter(|(s, _)| *s == stage)
                .map(|(_, d)| d.as_secs_f64())
                .sum()
        };
        let queued = job
            .claimed_at
            .map_or(0.0, |at| (at - job.created_at).as_seconds_f64().max(0.0));
        StageTimes {
            queued_s: queued,
            loading_s: of(Stage::Loading),
            bulk_s: of(Stage::Bulk),
            timing_s: of(Stage::Timing),
            scoring_s: of(Stage::Scoring),
        }
    }
}

/// Rows per entry to rows per round.
fn transpose(per_entry: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let rounds = per_entry.first().map_or(0, Vec::len);
    (0..rounds)
        .map(|r| per_entry.iter().map(|e| e[r]).collect())
        .collect()
}

/// Runs every model that needs it over the set, one model after another,
/// each on `threads` engine threads.
fn run_bulk(
    setup: &Setup,
    batch: usize,
    threads: usize,
    run_teacher: bool,
    hooks: &Hooks<'_>,
) -> EngineResult<Vec<Option<BulkScores>>> {
    let n = setup.set.samples() as u64;
    let todo: Vec<usize> = (0..setup.models.len())
        .filter(|&i| run_teacher || i != setup.teacher)
        .collect();
    let total = n * todo.len() as u64;
    let done = AtomicU64::new(0);
    (hooks.progress)(Stage::Bulk, 0, total);
    let tick = |rows: u64| {
        let d = done.fetch_add(rows, Ordering::Relaxed) + rows;
        (hooks.progress)(Stage::Bulk, d, total);
    };
    let mut out: Vec<Option<BulkScores>> = (0..setup.models.len()).map(|_| None).collect();
    for ix in todo {
        let m = &setup.models[ix];
        let batch = m.bulk_batch(batch, n as usize);
        out[ix] = Some(bulk::run(m, &setup.set, batch, threads, &tick)?);
    }
    Ok(out)
}

/// Samples cycled through in the timed rounds: enough to vary the input,
/// few enough to hold in memory whatever the set's size.
const TIMING_SAMPLES: usize = 32;

/// Milliseconds per timed entry (the teacher first, then the baseline if
/// any, then each student in request order), in round order.
fn measure_latency(job: &Job, setup: &Setup, hooks: &Hooks<'_>) -> EngineResult<Vec<Vec<f64>>> {
    let lat = job.settings.latency;
    let k = setup
        .set
        .samples()
        .min(TIMING_SAMPLES)
        .min(lat.iterations as usize)
        .max(1);
    let samples = setup
        .models
        .iter()
        .map(|m| {
            let mut feed = Feed::open(&setup.set, &m.binding)?;
            (0..k)
                .map(|_| feed.next_batch(1))
                .collect::<EngineResult<Vec<TVec<TValue>>>>()
        })
        .collect::<EngineResult<Vec<_>>>()?;
    let order: Vec<usize> = std::iter::once(setup.teacher)
        .chain(setup.baseline)
        .chain(setup.students.iter().copied())
        .collect();
    let entries = order
        .iter()
        .map(|&ix| {
            Ok(Entry {
                plan: setup.models[ix].plan(1)?,
                samples: &samples[ix],
            })
        })
        .collect::<EngineResult<Vec<_>>>()?;
    let rounds = lat.iterations as u64;
    (hooks.progress)(Stage::Timing, 0, rounds);
    let done = AtomicU64::new(0);
    latency::measure(&entries, lat.warmup, lat.iterations, &|r| {
        let d = done.fetch_add(r, Ordering::Relaxed) + r;
        (hooks.progress)(Stage::Timing, d, rounds);
    })
}

/// One model's logits over a set, exactly as the bulk pass computes them
/// (for checks against other engines, and for tools).
pub fn model_scores(
    model: &std::path::Path,
    set: &std::path::Path,
    batch: usize,
    output: Option<&str>,
) -> EngineResult<super::logits::Scores> {
    let set = EvalSet::open(set)?;
    let m = Model::load(model)?;
    let label = model
        .file_name()
        .map_or("model".into(), |f| f.to_string_lossy().into_owned());
    let p = Prepared::new("model", label, m, &set, output)?;
    bulk::run(&p, &set, p.bulk_batch(batch, set.samples()), 1, &|_| {}).map(|b| b.raw)
}
