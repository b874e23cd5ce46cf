//! Proctor: scores distilled student models against their teacher on CPU,
//! keeps every evaluation, and answers go or no-go against a team's gates.
//!
//! The data's path: `http` takes uploads and requests; `service` decides;
//! `store` keeps rows and files; `queue` hands each evaluation to a worker;
//! `sandbox` runs the engine in a child process; `engine` runs the models
//! and computes the figures; `report` is the JSON shape that goes back out.

/// `proctor submit` and `proctor demo`: the client side.
pub mod cli;
/// Command-line settings of `proctor serve`.
pub mod config;
/// Runs models with tract and computes every figure of a report.
pub mod engine;
/// The application's one error type.
pub mod error;
/// Routes, extractors and problem+json rendering.
pub mod http;
/// Worker labels and how `runs_on` matches them.
pub mod labels;
/// RFC 9457 problem objects.
pub mod problem;
/// The durable queue and its workers.
pub mod queue;
/// The JSON shape of a report.
pub mod report;
/// The engine's child process: typed entry points, limits, check slots.
pub mod sandbox;
/// Starting and stopping the service.
pub mod server;
/// Uploads and evaluations between the HTTP edge and the store.
pub mod service;
/// All SQL and stored files.
pub mod store;
/// Counters and histograms for `GET /metrics`.
pub mod telemetry;
/// The dashboard: server-rendered pages under `/`.
pub mod web;
