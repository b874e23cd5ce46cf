#![allow(unreachable_pub)]
//! The service end to end: the real binary on a free port, spoken to over HTTP.

#[path = "../support/mod.rs"]
mod support;

mod errors;
mod evaluations;
#[path = "../support/server.rs"]
#[allow(dead_code)]
mod harness;
mod openapi;
mod projects;
mod resilience;
mod sandbox;
mod upgrade;
mod uploads;
