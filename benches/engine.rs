//! Engine benchmark: prints figures, asserts nothing (targets are judged by
//! a person, on a quiet machine). Run with `cargo bench --bench engine`.
//!
//! 1. Peak RSS while evaluating a set of at least 1 GB (streamed from disk).
//! 2. The bulk pass's time per sample against a bare tract run of the
//!    same plan and batch.
//! 3. Metric computation time as a share of inference time.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use proctor::engine::bulk;
use proctor::engine::dataset::EvalSet;
use proctor::engine::environment::logical_cores;
use proctor::engine::feed::Feed;
use proctor::engine::logits::{OutputKindChoice, to_logits};
use proctor::engine::metrics::accuracy::{StudentInputs, accuracy, student_accuracy};
use proctor::engine::metrics::fidelity::fidelity;
use proctor::engine::model::Model;
use proctor::engine::settings::Settings;
use proctor::engine::setup::Prepared;
use proctor::engine::{Alone, DatasetRef, Hooks, Job, ModelRef, Options, evaluate};
use sha2::Digest;

fn cases() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/cases")
}

fn peak_rss_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find_map(|l| l.strip_prefix("VmHWM:"))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse::<f64>().ok())
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

fn model_ref(path: &Path) -> ModelRef {
    let bytes = std::fs::read(path).unwrap();
    ModelRef {
        id: uuid::Uuid::now_v7(),
        name: path.file_stem().unwrap().to_string_lossy().into(),
        sha256: hex::encode(sha2::Sha256::digest(&bytes)),
        bytes: bytes.len() as u64,
        path: path.to_owned(),
    }
}

/// Writes an NPY float32 [n, 3, 16, 16] array of pseudo-random values.
fn write_big_set(path: &Path, n: usize) {
    let mut f = std::io::BufWriter::new(std::fs::File::create(path).unwrap());
    f.write_all(&proctor::engine::npy::header_bytes("<f4", &[n, 3, 16, 16]))
        .unwrap();
    let mut state = 0x2545F4914F6CDD1Du64;
    let mut row = Vec::with_capacity(768 * 4);
    for _ in 0..n {
        row.clear();
        for _ in 0..768 {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            let v = (state >> 40) as f32 / (1u64 << 24) as f32 * 2.0 - 1.0;
            row.extend_from_slice(&v.to_le_bytes());
        }
        f.write_all(&row).unwrap();
    }
}

fn bench_peak_rss() {
    let dir = tempfile::tempdir().unwrap();
    let set = dir.path().join("big.npy");
    let n = 360_000; // 360,000 x 3 KiB = 1.105 GB
    write_big_set(&set, n);
    let bytes = std::fs::metadata(&set).unwrap().len();
    let before = peak_rss_mib();
    let job = Job {
        evaluation: uuid::Uuid::now_v7(),
        project: "bench".into(),
        created_at: time::OffsetDateTime::now_utc(),
        teacher: model_ref(&cases().join("cnn/teacher.onnx")),
        baseline: None,
        students: vec![model_ref(&cases().join("cnn/student_rank5.onnx"))],
        dataset: DatasetRef {
            id: uuid::Uuid::now_v7(),
            name: "big".into(),
            sha256: "bench".into(),
            path: set.clone(),
        },
        settings: Settings {
            latency: proctor::engine::settings::LatencySettings {
                warmup: 2,
                iterations: 20,
                ..Default::default()
            },
            ..Settings::default()
        },
        claimed_at: None,
        worker: None,
    };
    let started = Instant::now();
    let out = evaluate(
        &job,
        &Options::default(),
        &Hooks {
            progress: &|_, _, _| {},
            cpu: &Alone,
        },
    )
    .unwrap();
    println!(
        "peak RSS: {:.0} MiB while evaluating {:.2} GB ({n} samples, cnn teacher + 1 student) \
         in {:.1} s; {:.0} MiB before the evaluation; agreement {:.4}",
        peak_rss_mib(),
        bytes as f64 / 1e9,
        started.elapsed().as_secs_f64(),
        before,
        out.report.candidates[0].fidelity.agreement
    );
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn bench_bulk_overhead(case: &str, model: &str, batch: usize) -> Duration {
    let dir = cases().join(case);
    let set = EvalSet::open(&dir.join("data.npz")).unwrap();
    let m = Model::load(&dir.join(model)).unwrap();
    let prepared = Prepared::new("teacher", model.into(), m, &set, None).unwrap();
    let n = set.samples();
    let plan = prepared.plan(batch).unwrap();
    let inputs = Feed::open(&set, &prepared.binding)
        .unwrap()
        .next_batch(batch)
        .unwrap();
    // Bare tract: the same plan on one prepared batch, nothing else.
    let reps = 200;
    let mut bare = Vec::new();
    for _ in 0..5 {
        let t = Instant::now();
        for _ in 0..reps {
            plan.run(inputs.clone()).unwrap();
        }
        bare.push(t.elapsed().as_secs_f64() / (reps * batch) as f64);
    }
    let mut total_engine = Duration::ZERO;
    let mut pass_on = |threads: usize| {
        let mut pass = Vec::new();
        for _ in 0..5 {
            let t = Instant::now();
            let mut samples = 0;
            while samples < reps * batch {
                let r = bulk::run(&prepared, &set, batch, threads, &|_| {}).unwrap();
                total_engine += r.engine_time;
                samples += n;
            }
            pass.push(t.elapsed().as_secs_f64() / samples as f64);
        }
        median(pass)
    };
    let (one, every) = (pass_on(1), pass_on(logical_cores()));
    let bare = median(bare);
    println!(
        "bulk pass {case}/{model} batch {batch}: 1 thread {:.2} us/sample (bare tract {:.2}, ratio {:.3}); \
         {} threads {:.2} us/sample, {:.2}x the one-thread throughput",
        one * 1e6,
        bare * 1e6,
        one / bare,
        logical_cores(),
        every * 1e6,
        one / every
    );
    total_engine
}

fn bench_metric_share(case: &str, teacher: &str, student: &str) {
    let dir = cases().join(case);
    let set_path = dir.join("data.npz");
    let run = |file: &str| {
        let t = Instant::now();
        let raw =
            proctor::engine::evaluate::model_scores(&dir.join(file), &set_path, 32, None).unwrap();
        (raw, t.elapsed())
    };
    let (zt, t_time) = run(teacher);
    let (zs, s_time) = run(student);
    let set = EvalSet::open(&set_path).unwrap();
    let labels = set.labels().unwrap().to_vec();
    let (zt, _) = to_logits(zt, OutputKindChoice::Auto);
    let (zs, _) = to_logits(zs, OutputKindChoice::Auto);
    let reps = 20;
    let t = Instant::now();
    for _ in 0..reps {
        let f = fidelity(&zt, &zs, 4.0);
        let ta = accuracy(&zt, &labels);
        std::hint::black_box(student_accuracy(&StudentInputs {
            teacher: &zt,
            teacher_accuracy: &ta,
            student: &zs,
            labels: &labels,
            temperature: 4.0,
            alpha: 0.5,
            soft_cross_entropy: f.soft_cross_entropy,
        }));
    }
    let metrics = t.elapsed() / reps;
    let inference = t_time + s_time;
    println!(
        "metrics {case}: {:.3} ms for N={} C={}, inference {:.1} ms (teacher + student): share {:.2} %",
        metrics.as_secs_f64() * 1e3,
        zt.n,
        zt.c,
        inference.as_secs_f64() * 1e3,
        100.0 * metrics.as_secs_f64() / inference.as_secs_f64()
    );
}

fn main() {
    if std::env::args().any(|a| a == "--skip-rss") {
        println!("peak RSS: skipped");
    } else {
        bench_peak_rss();
    }
    for (case, model) in [
        ("mlp", "teacher.onnx"),
        ("cnn", "teacher.onnx"),
        ("text", "teacher.onnx"),
        ("wide", "teacher.onnx"),
    ] {
        bench_bulk_overhead(case, model, 32);
    }
    for (case, t, s) in [
        ("mlp", "teacher.onnx", "student_wide.onnx"),
        ("cnn", "teacher.onnx", "student_rank5.onnx"),
        ("wide", "teacher.onnx", "student_half.onnx"),
    ] {
        bench_metric_share(case, t, s);
    }
}
