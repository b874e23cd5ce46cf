//! The durable evaluation queue: workers claim queued evaluations from the
//! store, run each in a child process under limits, and write the outcome.
//! Upload checks use the same child process and limits.

pub mod child;
pub mod cpu_lock;
pub mod protocol;
pub mod task;
mod worker;

pub use worker::{JobParts, Queue, QueueConfig, build_job};
