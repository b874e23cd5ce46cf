//! An evaluation's settings as applied (defaults filled in) and the checks
//! that keep them within their limits. Gates are parsed here too, so an
//! unknown gate name is refused before anything runs.

use serde::{Deserialize, Serialize};
use serde_json::{Map, Value};

use super::gates::GateName;
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

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct LatencySettings {
    #[serde(default = "default_warmup")]
    pub warmup: u32,
    #[serde(default = "default_iterations")]
    pub iterations: u32,
}

fn default_warmup() -> u32 {
    10
}
fn default_iterations() -> u32 {
    100
}

impl Default for LatencySettings {
    fn default() -> Self {
        LatencySettings {
            warmup: default_warmup(),
            iterations: default_iterations(),
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

/// Gates as given: thresholds by name, and the optional confidence that
/// makes proportion gates judge the cautious end of their interval.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Gates {
    /// In the order of metrics.md's gate table, so reports list them stably.
    pub thresholds: Vec<(GateName, f64)>,
    pub confidence: Option<f64>,
}

impl Gates {
    pub fn parse(value: &Map<String, Value>) -> Result<Gates, SettingsError> {
        let mut gates = Gates::default();
        for (key, v) in value {
            let field = format!("gates.{key}");
            let number = v
                .as_f64()
                .filter(|x| x.is_finite())
                .ok_or_else(|| refuse(&field, format!("gate '{key}' needs a finite number")))?;
            if key == "confidence" {
                if !(number > 0.0 && number < 1.0) {
                    return Err(refuse(
                        &field,
                        "confidence must lie strictly between 0 and 1",
                    ));
                }
                gates.confidence = Some(number);
                continue;
            }
            let name = GateName::parse(key).ok_or_else(|| {
                refuse(
                    &field,
                    format!(
                        "unknown gate '{key}'; known gates: {}",
                        GateName::all_names()
                    ),
                )
            })?;
            gates.thresholds.push((name, number));
        }
        gates.thresholds.sort_by_key(|(name, _)| *name);
        Ok(gates)
    }

    pub fn needs_labels(&self) -> Option<GateName> {
        self.thresholds
            .iter()
            .map(|(g, _)| *g)
            .find(|g| g.needs_labels())
    }

    pub fn to_json(&self) -> Map<String, Value> {
        let mut map: Map<String, Value> = self
            .thresholds
            .iter()
            .map(|(g, v)| (g.as_str().to_string(), Value::from(*v)))
            .collect();
        if let Some(c) = self.confidence {
            map.insert("confidence".into(), Value::from(c));
        }
        map
    }
}

impl Serialize for Gates {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        self.to_json().serialize(s)
    }
}

impl<'de> Deserialize<'de> for Gates {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let map = Map::<String, Value>::deserialize(d)?;
        Gates::parse(&map).map_err(serde::de::Error::custom)
    }
}

/// Every setting of an evaluation, defaults filled in.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    pub temperature: f64,
    pub alpha: f64,
    pub output: Option<String>,
    pub output_kind: OutputKinds,
    pub batch_size: u32,
    pub latency: LatencySettings,
    pub rank_by: RankBy,
    pub gates: Gates,
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
        }
    }
}

impl Settings {
    /// The limits of metrics.md, and those that keep every figure defined.
    pub fn check(&self, has_labels: bool) -> Result<(), SettingsError> {
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
        if !has_labels {
            if let Some(g) = self.gates.needs_labels() {
                return Err(refuse(
                    &format!("gates.{}", g.as_str()),
                    format!(
                        "gate '{}' needs labels, and the evaluation set has none",
                        g.as_str()
                    ),
                ));
            }
            if self.rank_by == RankBy::Top1 {
                return Err(refuse(
                    "rank_by",
                    "rank_by 'top1' needs labels, and the evaluation set has none",
                ));
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn gates(v: Value) -> Result<Gates, SettingsError> {
        Gates::parse(v.as_object().unwrap())
    }

    #[test]
    fn unknown_gate_names_are_refused_with_their_field() {
        let err = gates(json!({"min_agreemnt": 0.9})).unwrap_err();
        assert_eq!(err.field, "gates.min_agreemnt");
        assert!(err.message.contains("min_agreement"), "{}", err.message);
    }

    #[test]
    fn confidence_must_lie_strictly_inside_zero_and_one() {
        assert!(gates(json!({"confidence": 1.0})).is_err());
        assert!(gates(json!({"confidence": 0.0})).is_err());
        assert_eq!(
            gates(json!({"confidence": 0.9})).unwrap().confidence,
            Some(0.9)
        );
    }

    #[test]
    fn label_gates_on_an_unlabelled_set_are_refused() {
        let s = Settings {
            gates: gates(json!({"min_top1": 0.8})).unwrap(),
            ..Settings::default()
        };
        assert_eq!(s.check(false).unwrap_err().field, "gates.min_top1");
        assert!(s.check(true).is_ok());
    }

    #[test]
    fn limits_of_metrics_md_are_enforced() {
        let mut s = Settings::default();
        s.latency.iterations = 0;
        assert_eq!(s.check(true).unwrap_err().field, "latency.iterations");
        let s = Settings {
            batch_size: 4097,
            ..Settings::default()
        };
        assert_eq!(s.check(true).unwrap_err().field, "batch_size");
        let s = Settings {
            temperature: 0.0,
            ..Settings::default()
        };
        assert_eq!(s.check(true).unwrap_err().field, "temperature");
    }
}
