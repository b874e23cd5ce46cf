//! An evaluation's settings as applied (defaults filled in), and their
//! validation against the limits of metrics.md, so that a request that
//! cannot run is refused before anything is stored.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use uuid::Uuid;

use super::gates::{Gates, Needs};
use super::logits::OutputKindChoice;

/// A setting that is out of its limits, with the input it came from.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{message}")]
pub struct SettingsError {
    pub field: String,
    pub message: String,
}

fn refuse(field: &str, message: impl Into<String>) -> SettingsError {
    SettingsError {
        field: field.to_string(),
        message: message.into(),
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OutputKinds {
    #[serde(default)]
    pub teacher: OutputKindChoice,
    #[serde(default)]
    pub students: OutputKindChoice,
}

impl Default for OutputKinds {
    fn default() -> Self {
        OutputKinds {
            teacher: OutputKindChoice::Auto,
            students: OutputKindChoice::Auto,
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LatencySettings {
    #[serde(default = "default_warmup")]
    pub warmup: u32,
    #[serde(default = "default_iterations")]
    pub iterations: u32,
    /// Relative difference in speed below which two models are equally
    /// fast (metrics.md, "Comparing two models' speed").
    #[serde(default = "default_tolerance")]
    pub tolerance: f64,
}

fn default_warmup() -> u32 {
    10
}
fn default_iterations() -> u32 {
    100
}
fn default_tolerance() -> f64 {
    0.03
}

impl Default for LatencySettings {
    fn default() -> Self {
        LatencySettings {
            warmup: default_warmup(),
            iterations: default_iterations(),
            tolerance: default_tolerance(),
        }
    }
}

/// The figure that orders candidates inside each gate group.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum RankBy {
    #[default]
    Agreement,
    Kl,
    Top1,
    P50Ms,
    Bytes,
}

/// Which output of each model is scored (metrics.md, "Turning outputs into
/// logits"): one name that every model must have, or a name per model id;
/// a model left out takes the default rule.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum OutputChoice {
    Every(String),
    PerModel(BTreeMap<Uuid, String>),
}

impl OutputChoice {
    /// The output named for this model, if any.
    pub fn for_model(&self, id: Uuid) -> Option<&str> {
        match self {
            OutputChoice::Every(name) => Some(name),
            OutputChoice::PerModel(map) => map.get(&id).map(String::as_str),
        }
    }
}

impl<'de> Deserialize<'de> for OutputChoice {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct Visitor;
        impl<'de> serde::de::Visitor<'de> for Visitor {
            type Value = OutputChoice;

            fn expecting(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
                f.write_str("an output name, or an object mapping model ids to output names")
            }

            fn visit_str<E: serde::de::Error>(self, v: &str) -> Result<OutputChoice, E> {
                Ok(OutputChoice::Every(v.to_string()))
            }

            fn visit_map<A: serde::de::MapAccess<'de>>(
                self,
                map: A,
            ) -> Result<OutputChoice, A::Error> {
                BTreeMap::deserialize(serde::de::value::MapAccessDeserializer::new(map))
                    .map(OutputChoice::PerModel)
            }
        }
        d.deserialize_any(Visitor)
    }
}

/// Every setting of an evaluation, defaults filled in.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    pub temperature: f64,
    pub alpha: f64,
    pub output: Option<OutputChoice>,
    pub output_kind: OutputKinds,
    pub batch_size: u32,
    pub latency: LatencySettings,
    pub rank_by: RankBy,
    pub gates: Gates,
    /// Labels a worker must carry to run the evaluation; empty: any worker.
    #[serde(default)]
    pub runs_on: BTreeMap<String, String>,
}

impl Default for Settings {
    fn default() -> Self {
        Settings {
            temperature: 4.0,
            alpha: 0.5,
            output: None,
            output_kind: OutputKinds::default(),
            batch_size: 32,
            latency: LatencySettings::default(),
            rank_by: RankBy::Agreement,
            gates: Gates::default(),
            runs_on: BTreeMap::new(),
        }
    }
}

/// What an evaluation has beside its teacher and students, for the gates
/// and rankings that need it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Context {
    pub labels: bool,
    pub slices: bool,
    pub baseline: bool,
}

impl Settings {
    /// The limits of metrics.md, and those that keep every figure defined.
    pub fn validate(&self, has: Context) -> Result<(), SettingsError> {
        if !(self.temperature.is_finite() && self.temperature > 0.0) {
            return Err(refuse(
                "temperature",
                "temperature must be a positive number",
            ));
        }
        if !(0.0..=1.0).contains(&self.alpha) {
            return Err(refuse("alpha", "alpha must lie between 0 and 1"));
        }
        if !(1..=4096).contains(&self.batch_size) {
            return Err(refuse(
                "batch_size",
                "batch_size must lie between 1 and 4096",
            ));
        }
        if self.latency.warmup > 10_000 {
            return Err(refuse(
                "latency.warmup",
                "latency.warmup must lie between 0 and 10000",
            ));
        }
        if !(1..=100_000).contains(&self.latency.iterations) {
            return Err(refuse(
                "latency.iterations",
                "latency.iterations must lie between 1 and 100000",
            ));
        }
        if !(0.0..=0.5).contains(&self.latency.tolerance) {
            return Err(refuse(
                "latency.tolerance",
                "latency.tolerance must lie between 0 and 0.5",
            ));
        }
        if let Some(c) = self.gates.confidence
            && !(c > 0.0 && c < 1.0)
        {
            return Err(refuse(
                "gates.confidence",
                "confidence must lie strictly between 0 and 1",
            ));
        }
        let unmet = |n: Needs| -> Option<&'static str> {
            if n.baseline() && !has.baseline {
                Some("a baseline, and the evaluation names none")
            } else if n.labels() && !has.labels {
                Some("labels, and the evaluation set has none")
            } else if n == Needs::Slices && !has.slices {
                Some("a slices array, and the evaluation set has none")
            } else {
                None
            }
        };
        if let Some(g) = self.gates.first_unmet(|n| unmet(n).is_none()) {
            return Err(refuse(
                &format!("gates.{}", g.as_str()),
                format!(
                    "gate '{}' needs {}",
                    g.as_str(),
                    unmet(g.needs()).unwrap_or_default()
                ),
            ));
        }
        if !has.labels && self.rank_by == RankBy::Top1 {
            return Err(refuse(
                "rank_by",
                "rank_by 'top1' needs labels, and the evaluation set has none",
            ));
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::{Value, json};

    fn gates(v: Value) -> Gates {
        serde_json::from_value(v).unwrap()
    }

    #[test]
    fn confidence_must_lie_strictly_inside_zero_and_one() {
        for c in [0.0, 1.0, 1.5] {
            let s = Settings {
                gates: gates(json!({"confidence": c})),
                ..Settings::default()
            };
            assert_eq!(s.validate(ALL).unwrap_err().field, "gates.confidence");
        }
        let s = Settings {
            gates: gates(json!({"confidence": 0.9})),
            ..Settings::default()
        };
        assert!(s.validate(ALL).is_ok());
    }

    const ALL: Context = Context {
        labels: true,
        slices: true,
        baseline: true,
    };

    #[test]
    fn gates_that_need_a_baseline_or_slices_are_refused_without_them() {
        let s = Settings {
            gates: gates(json!({"min_baseline_top1_delta": -0.01, "min_slice_agreement": 0.8})),
            ..Settings::default()
        };
        let no_baseline = Context {
            baseline: false,
            ..ALL
        };
        let err = s.validate(no_baseline).unwrap_err();
        assert_eq!(err.field, "gates.min_baseline_top1_delta");
        assert!(err.message.contains("baseline"), "{}", err.message);
        let no_slices = Context {
            slices: false,
            ..ALL
        };
        assert_eq!(
            s.validate(no_slices).unwrap_err().field,
            "gates.min_slice_agreement"
        );
        assert!(s.validate(ALL).is_ok());
    }

    #[test]
    fn label_gates_on_an_unlabelled_set_are_refused() {
        let s = Settings {
            gates: gates(json!({"min_top1": 0.8})),
            ..Settings::default()
        };
        let unlabelled = Context {
            labels: false,
            ..ALL
        };
        assert_eq!(s.validate(unlabelled).unwrap_err().field, "gates.min_top1");
        assert!(s.validate(ALL).is_ok());
    }

    #[test]
    fn limits_of_metrics_md_are_enforced() {
        let mut s = Settings::default();
        s.latency.iterations = 0;
        assert_eq!(s.validate(ALL).unwrap_err().field, "latency.iterations");
        let s = Settings {
            batch_size: 4097,
            ..Settings::default()
        };
        assert_eq!(s.validate(ALL).unwrap_err().field, "batch_size");
        let s = Settings {
            temperature: 0.0,
            ..Settings::default()
        };
        assert_eq!(s.validate(ALL).unwrap_err().field, "temperature");
    }

    #[test]
    fn an_output_is_one_name_or_a_name_per_model() {
        let id = Uuid::now_v7();
        let every: OutputChoice = serde_json::from_value(json!("logits")).unwrap();
        assert_eq!(every.for_model(id), Some("logits"));
        let per: OutputChoice =
            serde_json::from_value(json!({ id.to_string(): "probabilities" })).unwrap();
        assert_eq!(per.for_model(id), Some("probabilities"));
        assert_eq!(per.for_model(Uuid::now_v7()), None);
        assert_eq!(
            serde_json::to_value(&per).unwrap(),
            json!({ id.to_string(): "probabilities" })
        );
        assert!(serde_json::from_value::<OutputChoice>(json!(3)).is_err());
    }
}
