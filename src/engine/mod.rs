//! The evaluation engine: runs a teacher and its students on CPU with tract
//! and turns their outputs into the figures of metrics.md. It knows nothing
//! of HTTP or SQL; the service hands it files and settings and stores what it
//! returns.
//!
//! The data's path: `model` and `dataset` read what was uploaded; `feed` fits
//! the set to each model; `offline` runs the whole set; `logits` and
//! `metrics` score the outputs; `latency` times single-stream runs; `gates`
//! and `ranking` judge; `evaluate` ties it together.

pub mod cache;
pub mod dataset;
pub mod environment;
pub mod error;
pub mod evaluate;
pub mod feed;
pub mod gates;
pub mod latency;
pub mod logits;
pub mod metrics;
pub mod model;
pub mod npy;
pub mod offline;
pub mod ranking;
pub mod settings;
pub mod stats;

pub use error::{EngineError, EngineResult};
pub use evaluate::{
    Alone, CpuLease, DatasetRef, Hooks, Job, ModelRef, Options, Outcome, Stage, evaluate, prepare,
};

use std::path::Path;

/// The upload check of a model: it loads, types and plans at batch 1.
pub fn inspect_model(path: &Path) -> EngineResult<model::ModelInfo> {
    let m = model::Model::load(path)?;
    m.plan(1, &Default::default(), 0)?;
    Ok(m.info)
}

/// The upload check of an evaluation set: headers, lengths and labels.
pub fn inspect_dataset(path: &Path) -> EngineResult<dataset::DatasetInfo> {
    Ok(dataset::EvalSet::open(path)?.info())
}
