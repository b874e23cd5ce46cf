//! The `environment` block of a report: where and with what the figures
//! were measured, so that two reports can be compared honestly.

use serde::{Deserialize, Serialize};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Threads {
    /// Threads running models at once in the bulk pass.
    pub bulk: usize,
    /// Threads in the timed rounds (always 1: one sample, one model at a time).
    pub timing: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EngineVersion {
    pub name: String,
    pub version: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Environment {
    pub cpu: String,
    pub logical_cores: usize,
    pub threads: Threads,
    pub engine: EngineVersion,
    pub service_version: String,
    pub os: String,
}

pub const TRACT_VERSION: &str = env!("PROCTOR_TRACT_VERSION");

pub fn logical_cores() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

impl Environment {
    pub fn current(bulk_threads: usize) -> Environment {
        Environment {
            cpu: cpu_model(),
            logical_cores: logical_cores(),
            threads: Threads {
                bulk: bulk_threads,
                timing: 1,
            },
            engine: EngineVersion {
                name: "tract".into(),
                version: TRACT_VERSION.into(),
            },
            service_version: env!("CARGO_PKG_VERSION").into(),
            os: os_name(),
        }
    }
}

fn cpu_model() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|text| {
            text.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, v)| v.trim().to_string())
        })
        .unwrap_or_else(|| std::env::consts::ARCH.to_string())
}

fn os_name() -> String {
    let pretty = std::fs::read_to_string("/etc/os-release")
        .ok()
        .and_then(|text| {
            text.lines()
                .find_map(|l| l.strip_prefix("PRETTY_NAME="))
                .map(|v| v.trim_matches('"').to_string())
        });
    let base = format!("{} {}", std::env::consts::OS, std::env::consts::ARCH);
    match pretty {
        Some(p) => format!("{base} ({p})"),
        None => base,
    }
}
