//! Per-call latency of ONNX models at batch 1, measured as the timed rounds
//! measure it (`engine::latency::measure`: one thread, a spawned state per
//! model, rotated rounds). Prints figures and asserts nothing.
//!
//! ```sh
//! cargo bench --bench percall -- MODEL.onnx [MODEL.onnx …] [--calls N] [--warmup N] [--batch B]
//! ```
//!
//! `--batch B` (default 1) times calls on B samples at once, as the bulk
//! pass makes them, still on one thread. It prints each model's median and
//! p90 per call in milliseconds, its median per sample, its multiply-adds
//! per sample with the rate they imply, the time to load and to plan it, and
//! the matrix-multiply kernels and convolution ops its plan picked (eager
//! `Im2col` or `LazyIm2col`, see vendor/README.md). Inputs are pseudo-random
//! floats, or ones for integer inputs (token ids, masks), so any model whose
//! axes other than the batch axis are fixed can be timed.

use std::collections::HashMap;
use std::path::PathBuf;
use std::time::Instant;

use proctor::engine::latency::{Entry, measure};
use proctor::engine::model::{Dim, Model, TensorSpec};
use proctor::engine::stats::nearest_rank;
use tract_onnx::prelude::*;

#[path = "support/inputs.rs"]
mod inputs;

fn sample(spec: &TensorSpec, batch: usize, seed: &mut u64) -> Tensor {
    let shape: Vec<usize> = spec
        .shape
        .iter()
        .enumerate()
        .map(|(axis, d)| match d {
            Dim::Fixed(n) => *n,
            Dim::Symbol(_) if axis == 0 => batch,
            Dim::Symbol(s) => panic!("input {} has a free axis {s}", spec.name),
        })
        .collect();
    let dt = match spec.dtype.as_str() {
        "float32" => f32::datum_type(),
        "int64" => i64::datum_type(),
        "int32" => i32::datum_type(),
        other => panic!("input {} has dtype {other}", spec.name),
    };
    inputs::filled(shape, dt, seed)
}

fn main() {
    let mut args = std::env::args().skip(1).filter(|a| a != "--bench");
    let mut models = Vec::new();
    let (mut calls, mut warmup, mut batch) = (200u32, 20u32, 1usize);
    while let Some(arg) = args.next() {
        match arg.as_str() {
            "--calls" => calls = args.next().and_then(|v| v.parse().ok()).expect("--calls N"),
            "--warmup" => {
                warmup = args
                    .next()
                    .and_then(|v| v.parse().ok())
                    .expect("--warmup N")
            }
            "--batch" => batch = args.next().and_then(|v| v.parse().ok()).expect("--batch B"),
            _ => models.push(PathBuf::from(arg)),
        }
    }
    assert!(
        !models.is_empty(),
        "usage: percall MODEL.onnx … [--calls N]"
    );

    let mut seed = inputs::SEED;
    let mut loaded = Vec::new();
    for path in &models {
        let started = Instant::now();
        let model = Model::load(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        let load_s = started.elapsed().as_secs_f64();
        let dims = HashMap::new();
        let scored = model
            .scored_output(None, &dims, &path.display().to_string())
            .unwrap();
        let started = Instant::now();
        let plan = model.plan(batch, &dims, scored.index).unwrap();
        let plan_s = started.elapsed().as_secs_f64();
        let inputs: TVec<TValue> = model
            .info
            .inputs
            .iter()
            .map(|spec| sample(spec, batch, &mut seed).into())
            .collect();
        loaded.push((path, model, plan, vec![inputs], load_s, plan_s));
    }
    let entries: Vec<Entry<'_>> = loaded
        .iter()
        .map(|(_, _, plan, samples, _, _)| Entry {
            plan: plan.clone(),
            samples,
        })
        .collect();
    let times = measure(&entries, warmup, calls, &|_| {}).unwrap();

    println!(
        "model\tbatch\tp50_ms\tp90_ms\tms/sample\tGMAC/s\tload_s\tplan_s\tkernels\tconvolutions"
    );
    for ((path, model, plan, _, load_s, plan_s), ms) in loaded.iter().zip(times) {
        let mut sorted = ms;
        sorted.sort_by(f64::total_cmp);
        let p50 = nearest_rank(&sorted, 50);
        let rate = model.info.macs.map_or("-".into(), |m| {
            format!("{:.1}", (m * batch as u64) as f64 / p50 / 1e6)
        });
        println!(
            "{}\t{batch}\t{p50:.3}\t{:.3}\t{:.3}\t{rate}\t{load_s:.3}\t{plan_s:.3}\t{}\t{}",
            path.file_stem().unwrap().to_string_lossy(),
            nearest_rank(&sorted, 90),
            p50 / batch as f64,
            plan.matmul_kernels().join(","),
            plan.convolution_ops().join(",")
        );
    }
}
