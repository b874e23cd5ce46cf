//! The durable evaluation queue and its workers: a worker claims the oldest
//! queued evaluation from the store, runs it through the sandbox, records
//! its progress and writes the outcome. Evaluations live in the store, so a
//! restart loses nothing: what was running goes back to the queue.

mod worker;

pub use worker::{WorkerSetup, Workers};
