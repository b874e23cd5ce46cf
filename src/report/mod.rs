//! The JSON shape of an evaluation report (api.md, "Report"). These types
//! only describe; the engine fills them and the service stores and serves
//! them unchanged.

pub mod csv;
mod finite;
pub mod numbers;

pub use finite::first_non_finite;

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use uuid::Uuid;

use crate::engine::environment::Environment;
use crate::engine::gates::GateOutcome;
use crate::engine::gates::Gates;
use crate::engine::logits::OutputKind;
use crate::engine::metrics::accuracy::{Accuracy, StudentAccuracy};
use crate::engine::metrics::fidelity::Fidelity;
use crate::engine::metrics::slices::SliceFigures;
use crate::engine::settings::{LatencySettings, OutputChoice, RankBy};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Report {
    pub evaluation: Uuid,
    pub project: String,
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    #[serde(with = "time::serde::rfc3339")]
    pub finished_at: OffsetDateTime,
    pub environment: Environment,
    pub settings: ReportSettings,
    pub dataset: DatasetSummary,
    pub teacher: TeacherEntry,
    /// The student in production, when the evaluation names one.
    pub baseline: Option<BaselineEntry>,
    pub candidates: Vec<Candidate>,
    /// Where the evaluation's wall time went.
    pub timings: StageTimes,
    pub verdict: Verdict,
    pub recommended: Option<Uuid>,
}

/// Every timed run of an evaluation (`GET /v1/evaluations/{id}/timings`):
/// one row per round in round order, one column per model in `models`
/// order (the teacher, the baseline if any, then the candidates in request
/// order), so that any
/// latency figure of the report can be recomputed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RoundTimings {
    pub models: Vec<Uuid>,
    pub rounds: Vec<Vec<f64>>,
}

/// Seconds spent queued and in each stage the engine ran.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct StageTimes {
    /// From creation until a worker claimed the attempt that ran.
    pub queued_s: f64,
    pub loading_s: f64,
    pub bulk_s: f64,
    pub timing_s: f64,
    pub scoring_s: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReportSettings {
    pub temperature: f64,
    pub alpha: f64,
    pub batch_size: u32,
    pub latency: LatencySettings,
    pub rank_by: RankBy,
    pub gates: Gates,
    pub output: Option<OutputChoice>,
    /// The baseline model's id, as resolved when the evaluation was created.
    pub baseline: Option<Uuid>,
    /// The labels a worker needed to run it (absent from reports stored
    /// before workers had labels).
    #[serde(default)]
    pub runs_on: BTreeMap<String, String>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DatasetSummary {
    pub id: Uuid,
    pub name: String,
    pub samples: u64,
    pub has_labels: bool,
    pub class_names: Option<Vec<String>>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelSummary {
    pub id: Uuid,
    pub name: String,
    pub sha256: String,
    /// The model's notes (see `ModelInfo::notes`), e.g. that its latency
    /// reflects float emulation; left out when there are none.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub notes: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TeacherSize {
    pub bytes: u64,
    pub parameters: u64,
    pub macs: Option<u64>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Size {
    pub bytes: u64,
    pub parameters: u64,
    pub macs: Option<u64>,
    pub size_ratio: f64,
    pub parameter_ratio: Option<f64>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Latency {
    pub p50_ms: f64,
    /// Distribution-free 95 % interval of p50 (order statistics).
    pub p50_ci_ms: [f64; 2],
    pub p90_ms: f64,
    pub p90_ci_ms: [f64; 2],
    pub p99_ms: f64,
    pub mean_ms: f64,
    /// Sample standard deviation; null with a single iteration.
    pub stdev_ms: Option<f64>,
    pub throughput_sps: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StudentLatency {
    #[serde(flatten)]
    pub own: Latency,
    /// Median over rounds of teacher_ms / student_ms.
    pub speedup: f64,
    pub speedup_ci: [f64; 2],
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TeacherEntry {
    pub model: ModelSummary,
    /// The name of the scored output.
    pub output: String,
    pub output_kind: OutputKind,
    pub accuracy: Option<Accuracy>,
    pub size: TeacherSize,
    pub latency: Latency,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Candidate {
    pub rank: u32,
    pub model: ModelSummary,
    /// The name of the scored output.
    pub output: String,
    pub output_kind: OutputKind,
    pub fidelity: Fidelity,
    pub accuracy: Option<StudentAccuracy>,
    pub size: Size,
    pub latency: StudentLatency,
    /// Figures per slice, when the set has slices.
    pub slices: Option<Vec<SliceFigures>>,
    /// Against the baseline, when the evaluation names one.
    pub versus_baseline: Option<VersusBaseline>,
    pub pareto_optimal: bool,
    pub gates: GateOutcome,
}

/// The baseline in a report: a candidate's fields without rank, gates or
/// Pareto flag; its ratios and speedup are against the teacher.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BaselineEntry {
    pub model: ModelSummary,
    pub output: String,
    pub output_kind: OutputKind,
    pub fidelity: Fidelity,
    pub accuracy: Option<StudentAccuracy>,
    pub size: Size,
    pub latency: StudentLatency,
    pub slices: Option<Vec<SliceFigures>>,
}

/// A candidate against the baseline (metrics.md, "Baseline").
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VersusBaseline {
    /// How often the candidate and the baseline decide alike.
    pub agreement: f64,
    pub agreement_delta: f64,
    pub agreement_delta_ci: [f64; 2],
    pub teacher_flip_rate: f64,
    pub top1_delta: Option<f64>,
    pub top1_delta_ci: Option<[f64; 2]>,
    pub mcnemar_p: Option<f64>,
    pub negative_flip_rate: Option<f64>,
    /// Median over rounds of baseline_ms / candidate_ms.
    pub speedup: f64,
    pub speedup_ci: [f64; 2],
    pub size_ratio: f64,
    /// The paired counts behind the intervals, for gates.
    #[serde(skip)]
    pub counts: FlipCounts,
}

/// b and c of the paired comparisons with the baseline.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct FlipCounts {
    pub gained_agreement: u64,
    pub lost_agreement: u64,
    pub gained_top1: u64,
    pub lost_top1: u64,
}

/// A class index or a slice value: an integer or a string.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(untagged)]
pub enum Key {
    Int(i64),
    Text(String),
}

impl std::fmt::Display for Key {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Key::Int(i) => write!(f, "{i}"),
            Key::Text(s) => f.write_str(s),
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Verdict {
    #[serde(rename = "go")]
    Go,
    #[serde(rename = "no-go")]
    NoGo,
}

impl Verdict {
    /// The name used in JSON, in the database and in query strings.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Go => "go",
            Verdict::NoGo => "no-go",
        }
    }

    pub fn parse(s: &str) -> Option<Verdict> {
        [Verdict::Go, Verdict::NoGo]
            .into_iter()
            .find(|v| v.as_str() == s)
    }
}

impl Report {
    /// Every model's notes as (model name, note): teacher, baseline, then
    /// the candidates in rank order.
    pub fn model_notes(&self) -> Vec<(&str, &str)> {
        std::iter::once(&self.teacher.model)
            .chain(self.baseline.iter().map(|b| &b.model))
            .chain(self.candidates.iter().map(|c| &c.model))
            .flat_map(|m| m.notes.iter().map(|n| (m.name.as_str(), n.as_str())))
            .collect()
    }
}
