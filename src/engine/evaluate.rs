//! One evaluation from start to report: prepare (load, bind, check), the
//! offline pass, scoring, single-stream latency, then gates and ranking.

use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use tract_onnx::prelude::*;
use uuid::Uuid;

use super::cache::TeacherCache;
use super::dataset::EvalSet;
use super::environment::Environment;
use super::error::{EngineError, EngineResult};
use super::feed::{Feed, bind};
use super::gates::judge;
use super::latency::{self, Entry};
use super::logits::{Logits, OutputKind, OutputKindChoice, to_logits};
use super::metrics::accuracy::{
    Accuracy, StudentAccuracy, StudentInputs, accuracy, student_accuracy,
};
use super::metrics::fidelity::{Fidelity, fidelity};
use super::model::Model;
use super::offline::{self, Offline, Prepared};
use super::ranking::{mark_pareto, rank, verdict};
use super::settings::Settings;
use crate::report::{
    Candidate, DatasetSummary, ModelSummary, Report, ReportSettings, Size, StudentLatency,
    TeacherEntry, TeacherSize,
};

/// A stored model file, as the service hands it to the engine.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ModelRef {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    pub bytes: u64,
    pub path: PathBuf,
}

/// A stored evaluation set.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DatasetRef {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    pub path: PathBuf,
}

/// Everything an evaluation needs; serializable so that a child process can
/// receive it.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Job {
    pub evaluation: Uuid,
    pub project: String,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    pub teacher: ModelRef,
    pub students: Vec<ModelRef>,
    pub dataset: DatasetRef,
    pub settings: Settings,
}

/// How the engine may use the machine.
#[derive(Debug, Clone, Default)]
pub struct Options {
    pub teacher_cache: Option<PathBuf>,
    /// Models run at once in the offline pass; 0 means one per logical core.
    pub offline_threads: usize,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Stage {
    Loading,
    Offline,
    Scoring,
    Warmup,
    Latency,
}

/// How an evaluation shares the machine with others: offline passes may run
/// side by side, but latency rounds must not share the CPU with anyone's
/// inference. Each call holds until the lease is granted.
pub trait CpuLease: Sync {
    fn shared(&self) -> EngineResult<()>;
    fn exclusive(&self) -> EngineResult<()>;
}

/// The lease of an evaluation that is alone on the machine.
pub struct Alone;

impl CpuLease for Alone {
    fn shared(&self) -> EngineResult<()> {
        Ok(())
    }
    fn exclusive(&self) -> EngineResult<()> {
        Ok(())
    }
}

/// Progress reports, the cancellation flag (checked between batches and
/// rounds), and the machine lease.
pub struct Hooks<'a> {
    pub progress: &'a (dyn Fn(Stage, u64, u64) + Sync),
    pub cancel: &'a AtomicBool,
    pub cpu: &'a dyn CpuLease,
}

/// How the evaluation ran, beyond what the report says.
#[derive(Debug, Clone, Default)]
pub struct Timings {
    /// The teacher's scores came from the cache; its offline pass did not run.
    pub teacher_from_cache: bool,
}

pub struct Outcome {
    pub report: Report,
    pub timings: Timings,
}

/// The models of an evaluation, loaded once per distinct file and bound to the set.
pub struct Setup {
    pub set: EvalSet,
    models: Vec<Prepared>,
    teacher: usize,
    students: Vec<usize>,
}

fn labelled(name: &str, e: EngineError) -> EngineError {
    match e {
        EngineError::InvalidModel(m) => EngineError::InvalidModel(format!("model '{name}': {m}")),
        EngineError::Mismatch(m) if !m.contains(name) => {
            EngineError::Mismatch(format!("model '{name}': {m}"))
        }
        other => other,
    }
}

/// Everything that can be checked before running: settings, every model
/// loads, the set fits every model, teacher and students agree on C, labels
/// fit C.
pub fn prepare(job: &Job) -> EngineResult<Setup> {
    let set = EvalSet::open(&job.dataset.path)?;
    job.settings.check(set.labels().is_some())?;
    let mut by_sha: HashMap<String, usize> = HashMap::new();
    let mut models: Vec<Prepared> = Vec::new();
    let mut index = |m: &ModelRef, models: &mut Vec<Prepared>| -> EngineResult<usize> {
        if let Some(&ix) = by_sha.get(m.sha256.as_str()) {
            return Ok(ix);
        }
        let model = Model::load(&m.path).map_err(|e| labelled(&m.name, e))?;
        let output = model
            .output_index(job.settings.output.as_deref())
            .map_err(|e| labelled(&m.name, e))?;
        let binding = bind(&model, &set, &m.name)?;
        models.push(Prepared::new(m.name.clone(), model, binding, output)?);
        by_sha.insert(m.sha256.clone(), models.len() - 1);
        Ok(models.len() - 1)
    };
    let teacher = index(&job.teacher, &mut models)?;
    let students = job
        .students
        .iter()
        .map(|s| index(s, &mut models))
        .collect::<EngineResult<Vec<_>>>()?;
    let c = models[teacher].classes;
    for (&ix, s) in students.iter().zip(&job.students) {
        if models[ix].classes != c {
            return Err(EngineError::Mismatch(format!(
                "teacher '{}' scores {c} classes but student '{}' scores {}",
                job.teacher.name, s.name, models[ix].classes
            )));
        }
    }
    if let Some(labels) = set.labels()
        && let Some((i, y)) = labels
            .iter()
            .enumerate()
            .find(|(_, y)| **y as u64 >= c as u64)
    {
        return Err(EngineError::Mismatch(format!(
            "label {y} at sample {i} is outside [0, {c}): the models score {c} classes"
        )));
    }
    Ok(Setup {
        set,
        models,
        teacher,
        students,
    })
}

pub fn evaluate(job: &Job, options: &Options, hooks: &Hooks<'_>) -> EngineResult<Outcome> {
    (hooks.progress)(Stage::Loading, 0, 1);
    let setup = prepare(job)?;
    (hooks.progress)(Stage::Loading, 1, 1);
    let mut timings = Timings::default();
    let n = setup.set.samples();
    let batch = job.settings.batch_size as usize;
    let threads = match options.offline_threads {
        0 => super::environment::logical_cores(),
        t => t,
    };

    let cache = options.teacher_cache.as_ref().map(TeacherCache::new);
    let teacher_batch = setup.models[setup.teacher].offline_batch(batch, n);
    let output = job.settings.output.as_deref();
    let cached = cache
        .as_ref()
        .and_then(|c| {
            c.get(
                &job.teacher.sha256,
                &job.dataset.sha256,
                output,
                teacher_batch,
            )
        })
        .filter(|hit| hit.raw.n == n && hit.raw.c == setup.models[setup.teacher].classes);
    let cached_teacher = cached.and_then(|hit| {
        hit.engine_time.map(|engine_time| Offline {
            raw: hit.raw,
            engine_time,
        })
    });
    timings.teacher_from_cache = cached_teacher.is_some();

    hooks.cpu.shared()?;
    let mut results = run_offline(&setup, batch, threads, cached_teacher.is_none(), hooks)?;
    if let Some(hit) = cached_teacher {
        results[setup.teacher] = Some(hit);
    } else if let (Some(cache), Some(r)) = (&cache, &results[setup.teacher]) {
        cache.put(
            &job.teacher.sha256,
            &job.dataset.sha256,
            output,
            teacher_batch,
            &r.raw,
            r.engine_time,
        )?;
    }
    let results: Vec<Offline> = results
        .into_iter()
        .map(|r| r.expect("every model ran or was cached"))
        .collect();

    (hooks.progress)(Stage::Scoring, 0, job.students.len() as u64);
    let scores = score(job, &setup, &results, hooks);

    hooks.cpu.exclusive()?;
    let latencies = measure_latency(job, &setup, hooks)?;

    let throughput = |ix: usize| n as f64 / results[ix].engine_time.as_secs_f64().max(1e-12);
    let report = assemble(
        job,
        &setup,
        scores,
        &latencies,
        throughput,
        threads.min(setup.models.len()),
    );
    Ok(Outcome { report, timings })
}

/// Runs every model that needs it over the set, `threads` models at a time.
fn run_offline(
    setup: &Setup,
    batch: usize,
    threads: usize,
    run_teacher: bool,
    hooks: &Hooks<'_>,
) -> EngineResult<Vec<Option<Offline>>> {
    let n = setup.set.samples() as u64;
    let todo: Vec<usize> = (0..setup.models.len())
        .filter(|&i| run_teacher || i != setup.teacher)
        .collect();
    let total = n * todo.len() as u64;
    let done = AtomicU64::new(0);
    let next = AtomicUsize::new(0);
    let failed = AtomicBool::new(false);
    let results: Mutex<Vec<Option<EngineResult<Offline>>>> =
        Mutex::new((0..setup.models.len()).map(|_| None).collect());
    (hooks.progress)(Stage::Offline, 0, total);
    let stop = || failed.load(Ordering::Relaxed) || hooks.cancel.load(Ordering::Relaxed);
    let tick = |rows: u64| {
        let d = done.fetch_add(rows, Ordering::Relaxed) + rows;
        (hooks.progress)(Stage::Offline, d, total);
    };
    std::thread::scope(|scope| {
        for _ in 0..threads.clamp(1, todo.len().max(1)) {
            scope.spawn(|| {
                while let Some(&ix) = todo.get(next.fetch_add(1, Ordering::Relaxed)) {
                    let m = &setup.models[ix];
                    let r = offline::run(
                        m,
                        &setup.set,
                        m.offline_batch(batch, n as usize),
                        &stop,
                        &tick,
                    );
                    if r.is_err() {
                        failed.store(true, Ordering::Relaxed);
                    }
                    results.lock().unwrap_or_else(|p| p.into_inner())[ix] = Some(r);
                }
            });
        }
    });
    let results = results.into_inner().unwrap_or_else(|p| p.into_inner());
    if hooks.cancel.load(Ordering::Relaxed) {
        return Err(EngineError::Canceled);
    }
    // The first real error, not a `Canceled` that another model's failure caused.
    let mut out = Vec::with_capacity(results.len());
    let mut first_err = None;
    for r in results {
        match r {
            Some(Ok(v)) => out.push(Some(v)),
            Some(Err(EngineError::Canceled)) | None => out.push(None),
            Some(Err(e)) => {
                first_err.get_or_insert(e);
                out.push(None);
            }
        }
    }
    match first_err {
        Some(e) => Err(e),
        None => Ok(out),
    }
}

struct Scores {
    teacher_kind: OutputKind,
    teacher_accuracy: Option<Accuracy>,
    students: Vec<(OutputKind, Fidelity, Option<StudentAccuracy>)>,
}

fn score(job: &Job, setup: &Setup, results: &[Offline], hooks: &Hooks<'_>) -> Scores {
    let s = &job.settings;
    let convert = |ix: usize, choice: OutputKindChoice| -> (Logits, OutputKind) {
        to_logits(results[ix].raw.clone(), choice)
    };
    let (teacher, teacher_kind) = convert(setup.teacher, s.output_kind.teacher);
    let labels = setup.set.labels();
    let teacher_accuracy = labels.map(|y| accuracy(&teacher, y));
    let students = setup
        .students
        .iter()
        .enumerate()
        .map(|(done, &ix)| {
            let (student, kind) = convert(ix, s.output_kind.students);
            let fid = fidelity(&teacher, &student, s.temperature);
            let acc = labels.zip(teacher_accuracy.as_ref()).map(|(y, ta)| {
                student_accuracy(&StudentInputs {
                    teacher: &teacher,
                    teacher_accuracy: ta,
                    student: &student,
                    labels: y,
                    temperature: s.temperature,
                    alpha: s.alpha,
                    soft_cross_entropy: fid.soft_cross_entropy,
                })
            });
            (hooks.progress)(Stage::Scoring, done as u64 + 1, setup.students.len() as u64);
            (kind, fid, acc)
        })
        .collect();
    Scores {
        teacher_kind,
        teacher_accuracy,
        students,
    }
}

/// Samples cycled through in the latency rounds: enough to vary the input,
/// few enough to hold in memory whatever the set's size.
const LATENCY_SAMPLES: usize = 32;

/// Timings per entry: the teacher first, then each student in request order.
fn measure_latency(job: &Job, setup: &Setup, hooks: &Hooks<'_>) -> EngineResult<Vec<Vec<f64>>> {
    let lat = job.settings.latency;
    let k = setup
        .set
        .samples()
        .min(LATENCY_SAMPLES)
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
    (hooks.progress)(Stage::Warmup, 0, 1);
    let rounds = lat.iterations as u64;
    let done = AtomicU64::new(0);
    latency::measure(&entries, lat.warmup, lat.iterations, hooks.cancel, &|r| {
        let d = done.fetch_add(r, Ordering::Relaxed) + r;
        (hooks.progress)(Stage::Latency, d, rounds);
    })
}

fn summary(m: &super::evaluate::ModelRef) -> ModelSummary {
    ModelSummary {
        id: m.id,
        name: m.name.clone(),
        sha256: m.sha256.clone(),
    }
}

fn assemble(
    job: &Job,
    setup: &Setup,
    scores: Scores,
    latencies: &[Vec<f64>],
    throughput: impl Fn(usize) -> f64,
    offline_threads: usize,
) -> Report {
    let s = &job.settings;
    let n = setup.set.samples() as u64;
    let teacher_model = &setup.models[setup.teacher];
    let teacher_size = TeacherSize {
        bytes: job.teacher.bytes,
        parameters: teacher_model.model.info.parameters,
        macs: teacher_model
            .model
            .macs_per_sample(&teacher_model.binding.dims),
    };
    let teacher_latency = latency::summarize(&latencies[0], throughput(setup.teacher));
    let mut candidates: Vec<Candidate> = job
        .students
        .iter()
        .zip(&setup.students)
        .zip(scores.students)
        .zip(&latencies[1..])
        .map(|(((student, &ix), (kind, fid, acc)), ms)| {
            let m = &setup.models[ix];
            let own = latency::summarize(ms, throughput(ix));
            let parameters = m.model.info.parameters;
            let mut c = Candidate {
                rank: 0,
                model: summary(student),
                output_kind: kind,
                fidelity: fid,
                accuracy: acc,
                size: Size {
                    bytes: student.bytes,
                    parameters,
                    macs: m.model.macs_per_sample(&m.binding.dims),
                    size_ratio: student.bytes as f64 / job.teacher.bytes as f64,
                    parameter_ratio: (teacher_size.parameters > 0)
                        .then(|| parameters as f64 / teacher_size.parameters as f64),
                },
                latency: StudentLatency {
                    speedup: teacher_latency.p50_ms / own.p50_ms,
                    own,
                },
                pareto_optimal: false,
                gates: Default::default(),
            };
            c.gates = judge(&s.gates, &c, n);
            c
        })
        .collect();
    rank(&mut candidates, s.rank_by);
    mark_pareto(&mut candidates, s.rank_by);
    let (verdict, recommended) = verdict(&candidates);
    Report {
        evaluation: job.evaluation,
        project: job.project.clone(),
        created_at: job.created_at,
        finished_at: OffsetDateTime::now_utc(),
        environment: Environment::current(offline_threads),
        settings: ReportSettings {
            temperature: s.temperature,
            alpha: s.alpha,
            batch_size: s.batch_size,
            latency: s.latency,
            rank_by: s.rank_by,
            gates: s.gates.clone(),
            output: s.output.clone(),
        },
        dataset: DatasetSummary {
            id: job.dataset.id,
            name: job.dataset.name.clone(),
            samples: n,
            has_labels: setup.set.labels().is_some(),
        },
        teacher: TeacherEntry {
            model: summary(&job.teacher),
            output_kind: scores.teacher_kind,
            accuracy: scores.teacher_accuracy,
            size: teacher_size,
            latency: teacher_latency,
        },
        candidates,
        verdict,
        recommended,
    }
}

/// One model's raw scores over a set, exactly as the offline pass computes
/// them (for checks against other engines, and for tools).
pub fn model_scores(
    model: &std::path::Path,
    set: &std::path::Path,
    batch: usize,
    output: Option<&str>,
) -> EngineResult<Logits> {
    let set = EvalSet::open(set)?;
    let m = Model::load(model)?;
    let out = m.output_index(output)?;
    let label = model
        .file_name()
        .map_or("model".into(), |f| f.to_string_lossy().into_owned());
    let binding = bind(&m, &set, &label)?;
    let p = Prepared::new(label, m, binding, out)?;
    let never = || false;
    Ok(offline::run(
        &p,
        &set,
        p.offline_batch(batch, set.samples()),
        &never,
        &|_| {},
    )?
    .raw)
}
