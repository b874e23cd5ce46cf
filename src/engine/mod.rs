//! The evaluation engine: runs a teacher and its students on CPU with tract
//! and turns their outputs into the figures of metrics.md. It knows nothing
//! of HTTP or SQL; the service hands it files and settings and stores what it
//! returns.
//!
//! The data's path: `model` and `dataset` read what was uploaded; `fit`
//! decides whether a set fits a model (from records or loaded models);
//! `setup` loads an evaluation's models once; `feed` streams the set into
//! them; `bulk` runs the whole set; `latency` times single samples;
//! `logits` and `metrics` score the outputs; `gates` and `ranking` judge;
//! `assemble` writes the report; `evaluate` ties it together.

pub mod assemble;
pub mod bulk;
pub mod bundle;
pub mod cache;
pub mod dataset;
pub mod environment;
pub mod error;
pub mod evaluate;
pub mod feed;
pub mod fit;
pub mod gates;
pub mod job;
pub mod latency;
pub mod logits;
pub mod metrics;
pub mod model;
pub mod npy;
pub mod operators;
pub mod quantized;
pub mod ranking;
pub mod scoring;
pub mod settings;
pub mod setup;
pub mod slices;
pub mod speed;
pub mod stats;

pub use error::{EngineError, EngineResult};
pub use evaluate::{Outcome, evaluate};
pub use job::{Alone, CpuLock, DatasetRef, Hooks, Job, ModelRef, Options, Stage};
pub use setup::prepare;

use std::path::Path;

/// The upload inspection of a model: it loads, types and plans at batch 1.
pub fn inspect_model(path: &Path) -> EngineResult<model::ModelInfo> {
    let m = model::Model::load(path)?;
    m.plan(1, &Default::default(), 0)?;
    Ok(m.info)
}

/// The upload inspection of a zip bundle: its model with the data inlined
/// is inspected as a plain upload would be, then written to `out` for the
/// service to store.
pub fn inspect_bundle(bundle: &Path, out: &Path) -> EngineResult<model::ModelInfo> {
    let inlined = bundle::inline(bundle)?;
    std::fs::write(out, prost::Message::encode_to_vec(&inlined.model))
        .map_err(EngineError::io("writing the self-contained model"))?;
    let m = model::Model::from_proto(inlined.model)?;
    m.plan(1, &Default::default(), 0)?;
    let mut info = m.info;
    info.external_data = inlined.external_data;
    Ok(info)
}

/// The upload inspection of an evaluation set: headers, lengths, labels,
/// and every array read to its end.
pub fn inspect_dataset(path: &Path) -> EngineResult<dataset::DatasetInfo> {
    let set = dataset::EvalSet::open(path)?;
    set.verify()?;
    Ok(set.info())
}
