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
#[path = "../support/objects.rs"]
mod objects;
mod openapi;
#[path = "../support/postgres.rs"]
mod postgres;
mod postgresql;
mod projects;
mod resilience;
mod sandbox;
mod scaleout;
mod stalls;
mod storage;
mod tls;
mod upgrade;
mod uploads;
#[path = "../support/worker.rs"]
mod worker;
