#![allow(unreachable_pub)]
//! The evaluation engine checked against libraries outside the project:
//! onnxruntime for model outputs, numpy/scipy/statsmodels for every figure
//! (fixtures from tests/reference/generate.py).

#[path = "../support/mod.rs"]
mod support;

mod bad_inputs;
mod baseline;
mod bombs;
mod evaluation;
mod exports;
mod reference;
mod timing;
