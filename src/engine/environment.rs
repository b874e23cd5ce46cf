//! The `environment` block of a report: where and with what the figures
//! were measured, so that two reports can be compared honestly.

use serde::{Deserialize, Serialize};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Threads {
    /// Engine threads in the bulk pass, sharing each model's batches.
    pub bulk: usize,
    /// Threads in the timed rounds (always 1: one sample, one model at a time).
    pub timing: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EngineVersion {
    pub name: String,
    pub version: String,
    /// Which of the engine's kernel families ran: the machine's instruction
    /// set as the engine sees it (e.g. "x86_64 avx512") and the
    /// matrix-multiply kernels the timed plans picked. Another CPU picks
    /// others, and runs at another speed. Absent from reports stored before
    /// the engine said.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub kernels: Option<Kernels>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Kernels {
    /// The instruction-set step the engine dispatches on, after its
    /// architecture, and the features it found.
    pub isa: String,
    /// Names of the matrix-multiply kernels in the models' timed plans.
    pub matmul: Vec<String>,
}

impl Kernels {
    pub fn of_this_machine(matmul: Vec<String>) -> Kernels {
        let isa = tract_onnx::tract_core::tract_linalg::isa::native();
        let arch = isa.arch().map_or("generic".to_string(), |a| a.to_string());
        Kernels {
            isa: format!("{arch} {} ({isa:?})", isa.nickname()),
            matmul,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Environment {
    pub cpu: String,
    pub logical_cores: usize,
    pub threads: Threads,
    pub engine: EngineVersion,
    pub service_version: String,
    pub os: String,
    /// The worker that measured, when workers run apart from the service.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub worker: Option<WorkerName>,
}

/// A worker as a report names it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WorkerName {
    pub id: uuid::Uuid,
    pub hostname: String,
    pub labels: std::collections::BTreeMap<String, String>,
}

pub const TRACT_VERSION: &str = env!("PROCTOR_TRACT_VERSION");

pub fn logical_cores() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

impl Environment {
    pub fn current(bulk_threads: usize, matmul_kernels: Vec<String>) -> Environment {
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
                kernels: Some(Kernels::of_this_machine(matmul_kernels)),
            },
            service_version: env!("CARGO_PKG_VERSION").into(),
            os: os_name(),
            worker: None,
        }
    }
}

pub fn cpu_model() -> String {
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
