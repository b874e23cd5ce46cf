#![allow(unreachable_pub)]
//! The service end to end: the real binary on a free port, spoken to over HTTP.

#[path = "../support/mod.rs"]
mod support;

mod access;
mod errors;
mod evaluations;
mod exports;
mod fuzz;
#[path = "../support/server.rs"]
#[allow(dead_code)]
mod harness;
mod limits;
mod load;
#[path = "../support/mutate.rs"]
mod mutate;
mod openapi;
mod projects;
mod resilience;
mod sandbox;
mod stalls;
mod storage;
mod tls;
mod upgrade;
mod uploads;
