//! Would caching a model across evaluations save time? Times each step of
//! getting an ONNX model ready to run, and the one cache tract offers: a
//! typed model written as NNEF and read back. Prints figures and asserts
//! nothing.
//!
//! ```sh
//! cargo bench --bench reload -- MODEL.onnx [MODEL.onnx …] [--batch B] [--repeat N]
//! ```
//!
//! For each model, in seconds (the median of `--repeat` runs, default 5,
//! by nearest rank):
//! - `proctor_load`: `Model::load` as an evaluation runs it (decode, checks,
//!   QDQ folding, typing, decluttering);
//! - `typed`: tract alone, from the file to a decluttered typed model;
//! - `plan_B` and `plan_1`: one plan at batch B (default 32, the bulk pass)
//!   and one at batch 1 (the timed rounds), every symbol bound;
//! - `nnef_write`, `nnef_read`, `nnef_mb`: the decluttered model written to
//!   an in-memory NNEF tar and read back, and the tar's size;
//! - `same`: whether the plan made from the reloaded model gives the same
//!   output, bit for bit, as the plan made from the ONNX file.
//!
//! tract writes typed models only: optimized plans (packed weights, chosen
//! kernels) have no serialized form, so a cache could skip `typed` but
//! never `plan_B` and `plan_1`. Some typed ops have no NNEF form either (the
//! exact GELU that tract makes of an ONNX `Erf` pattern): the row says so.

use std::path::{Path, PathBuf};
use std::time::Instant;

use proctor::engine::model::Model;
use proctor::engine::stats::nearest_rank;
use tract_nnef::framework::Nnef;
use tract_onnx::WithOnnx;
use tract_onnx::prelude::*;

/// The median of `repeat` runs of `f`, in seconds, with the last result.
fn timed<T>(repeat: usize, mut f: impl FnMut() -> T) -> (f64, T) {
    let mut times = Vec::with_capacity(repeat);
    let mut last = None;
    for _ in 0..repeat {
        let started = Instant::now();
        last = Some(f());
        times.push(started.elapsed().as_secs_f64());
    }
    times.sort_by(f64::total_cmp);
    (
        nearest_rank(&times, 50),
        last.expect("repeat is at least 1"),
    )
}

fn typed_from_onnx(path: &Path) -> TypedModel {
    tract_onnx::onnx()
        .model_for_path(path)
        .and_then(|m| m.into_typed())
        .and_then(|m| m.into_decluttered())
        .unwrap_or_else(|e| panic!("{}: {e:?}", path.display()))
}

/// Binds every symbol of the model (the benchmark's models have only their
/// batch axis free) to `batch` and optimizes it.
fn plan(typed: &TypedModel, batch: usize) -> Arc<TypedSimplePlan> {
    let subs = typed
        .symbols
        .all_symbols()
        .into_iter()
        .map(|s| (s, TDim::from(batch as i64)))
        .collect();
    typed
        .clone()
        .set_symbols(&subs)
        .and_then(|m| m.into_optimized())
        .and_then(|m| m.into_runnable())
        .expect("the model plans")
}

#[path = "support/inputs.rs"]
mod inputs;

/// One batch for the plan's concrete input facts (see `inputs::filled`).
fn inputs(plan: &Arc<TypedSimplePlan>) -> TVec<TValue> {
    let model = plan.model();
    let mut seed = inputs::SEED;
    model
        .input_outlets()
        .expect("inputs")
        .iter()
        .map(|outlet| {
            let fact = model.outlet_fact(*outlet).expect("input fact");
            let shape = fact.shape.as_concrete().expect("concrete").to_vec();
            inputs::filled(shape, fact.datum_type, &mut seed).into_tvalue()
        })
        .collect()
}

fn main() {
    let mut args = std::env::args().skip(1).filter(|a| a != "--bench");
    let mut models = Vec::new();
    let (mut batch, mut repeat) = (32usize, 5usize);
    while let Some(arg) = args.next() {
        match arg.as_str() {
            "--batch" => batch = args.next().and_then(|v| v.parse().ok()).expect("--batch B"),
            "--repeat" => {
                repeat = args
                    .next()
                    .and_then(|v| v.parse().ok())
                    .filter(|&n| n > 0)
                    .expect("--repeat N")
            }
            _ => models.push(PathBuf::from(arg)),
        }
    }
    assert!(!models.is_empty(), "usage: reload MODEL.onnx … [--batch B]");
    let nnef: Nnef = tract_nnef::nnef().with_onnx();

    println!(
        "model\tproctor_load\ttyped\tplan_{batch}\tplan_1\tnnef_write\tnnef_read\tnnef_mb\tsame"
    );
    for path in &models {
        let (proctor_load, _) = timed(repeat, || Model::load(path).expect("Proctor loads it"));
        let (typed_s, typed) = timed(repeat, || typed_from_onnx(path));
        let (plan_b, original) = timed(repeat, || plan(&typed, batch));
        let (plan_1, _) = timed(repeat, || plan(&typed, 1));
        let name = path.file_stem().unwrap().to_string_lossy();
        let written = timed(repeat, || nnef.write_to_tar(&typed, Vec::new()));
        let (write_s, tar) = match written {
            (s, Ok(tar)) => (s, tar),
            (_, Err(e)) => {
                println!(
                    "{name}\t{proctor_load:.3}\t{typed_s:.3}\t{plan_b:.3}\t{plan_1:.3}\tcannot write NNEF: {e:#}"
                );
                continue;
            }
        };
        let (read_s, reloaded) = timed(repeat, || nnef.model_for_read(&mut tar.as_slice()));
        let same = match reloaded {
            Ok(reloaded) => {
                let replanned = plan(&reloaded, batch);
                let feed = inputs(&original);
                let a = original.run(feed.clone()).expect("runs");
                let b = replanned.run(feed).expect("runs");
                a.len() == b.len() && a.iter().zip(&b).all(|(a, b)| **a == **b)
            }
            Err(e) => {
                println!("{name}: cannot read its NNEF back: {e:#}");
                continue;
            }
        };
        println!(
            "{name}\t{proctor_load:.3}\t{typed_s:.3}\t{plan_b:.3}\t{plan_1:.3}\t{write_s:.3}\t{read_s:.3}\t{:.1}\t{same}",
            tar.len() as f64 / 1e6
        );
    }
}
