//! The table of known gates (metrics.md, "Gates"): each gate's name, what
//! it needs from the evaluation, and the request's `gates` object, which is
//! generated from the same table so that a gate cannot be known to one and
//! unknown to the other.

use serde::{Deserialize, Serialize};

/// What a gate needs besides the teacher and the candidates.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Needs {
    Nothing,
    Labels,
    /// A `slices` array in the set.
    Slices,
    Baseline,
    BaselineAndLabels,
}

impl Needs {
    pub fn labels(self) -> bool {
        matches!(self, Needs::Labels | Needs::BaselineAndLabels)
    }

    pub fn baseline(self) -> bool {
        matches!(self, Needs::Baseline | Needs::BaselineAndLabels)
    }
}

macro_rules! gate_table {
    ($( $variant:ident => $field:ident, $needs:ident; )*) => {
        /// Every known gate, in the order of metrics.md's table; reports list
        /// checks in this order.
        #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
        #[serde(rename_all = "snake_case")]
        pub enum GateName {
            $( $variant, )*
        }

        impl GateName {
            pub const ALL: &'static [GateName] = &[$( GateName::$variant, )*];

            pub fn as_str(self) -> &'static str {
                match self {
                    $( GateName::$variant => stringify!($field), )*
                }
            }

            pub fn needs(self) -> Needs {
                match self {
                    $( GateName::$variant => Needs::$needs, )*
                }
            }
        }

        /// The `gates` object of a request: a threshold per gate, all
        /// optional, and the `confidence` that makes gates judge the
        /// cautious end of their interval. Unknown names are refused with
        /// the list of known ones.
        #[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
        #[serde(deny_unknown_fields)]
        pub struct Gates {
            $(
                #[serde(default, skip_serializing_if = "Option::is_none")]
                pub $field: Option<f64>,
            )*
            #[serde(default, skip_serializing_if = "Option::is_none")]
            pub confidence: Option<f64>,
        }

        impl Gates {
            /// Sets (or replaces) one gate's threshold.
            pub fn set(&mut self, gate: GateName, threshold: f64) {
                match gate {
                    $( GateName::$variant => self.$field = Some(threshold), )*
                }
            }

            /// The thresholds given, in table order.
            pub fn thresholds(&self) -> Vec<(GateName, f64)> {
                let mut out = Vec::new();
                $( if let Some(v) = self.$field { out.push((GateName::$variant, v)); } )*
                out
            }
        }
    };
}

gate_table! {
    MinAgreement => min_agreement, Nothing;
    MaxKl => max_kl, Nothing;
    MinTop1 => min_top1, Labels;
    MaxTop1Drop => max_top1_drop, Labels;
    MinRetention => min_retention, Labels;
    MaxNegativeFlipRate => max_negative_flip_rate, Labels;
    MaxEce => max_ece, Labels;
    MaxP50Ms => max_p50_ms, Nothing;
    MaxP90Ms => max_p90_ms, Nothing;
    MinSpeedup => min_speedup, Nothing;
    MaxBytes => max_bytes, Nothing;
    MaxSizeRatio => max_size_ratio, Nothing;
    MaxParameters => max_parameters, Nothing;
    MinClassAgreement => min_class_agreement, Nothing;
    MinSliceAgreement => min_slice_agreement, Slices;
    MinBaselineAgreementDelta => min_baseline_agreement_delta, Baseline;
    MaxBaselineTeacherFlipRate => max_baseline_teacher_flip_rate, Baseline;
    MinBaselineTop1Delta => min_baseline_top1_delta, BaselineAndLabels;
    MaxBaselineNegativeFlipRate => max_baseline_negative_flip_rate, BaselineAndLabels;
    MinBaselineSpeedup => min_baseline_speedup, Baseline;
}

impl GateName {
    pub fn parse(name: &str) -> Option<GateName> {
        GateName::ALL.iter().copied().find(|g| g.as_str() == name)
    }

    /// Every gate's name, comma-separated, for help texts and errors.
    pub fn all_names() -> String {
        GateName::ALL
            .iter()
            .map(|g| g.as_str())
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// True for `min_*` gates (judged >= threshold), false for `max_*`.
    pub fn is_floor(self) -> bool {
        self.as_str().starts_with("min_")
    }
}

impl GateName {
    /// Which end of which interval the gate judges under `confidence`;
    /// `None` for gates that always judge the estimate.
    pub fn cautious_end(self) -> Option<&'static str> {
        Some(match self {
            GateName::MinAgreement | GateName::MinTop1 => "Wilson lower bound",
            GateName::MaxNegativeFlipRate => "Wilson upper bound",
            GateName::MaxTop1Drop => "paired Wald bound",
            GateName::MaxP50Ms | GateName::MaxP90Ms => "order-statistic upper bound",
            GateName::MinSpeedup => "order-statistic lower bound",
            GateName::MinClassAgreement => "lowest Wilson lower bound over the classes",
            GateName::MinSliceAgreement => "lowest Wilson lower bound over the slices",
            GateName::MinBaselineAgreementDelta | GateName::MinBaselineTop1Delta => {
                "paired Wald lower bound"
            }
            GateName::MaxBaselineTeacherFlipRate | GateName::MaxBaselineNegativeFlipRate => {
                "Wilson upper bound"
            }
            GateName::MinBaselineSpeedup => "order-statistic lower bound",
            GateName::MaxKl
            | GateName::MinRetention
            | GateName::MaxEce
            | GateName::MaxBytes
            | GateName::MaxSizeRatio
            | GateName::MaxParameters => return None,
        })
    }

    /// What the judged value of this gate is, in words: the estimate, or
    /// the cautious end at the given confidence.
    pub fn judged_as(self, confidence: Option<f64>) -> String {
        match (confidence, self.cautious_end()) {
            (Some(c), Some(end)) => format!("{end} at {}", percent(c)),
            _ => "estimate".to_string(),
        }
    }

    /// The comparison that passes, for messages: ">=" or "<=".
    pub fn passes_when(self) -> &'static str {
        if self.is_floor() { ">=" } else { "<=" }
    }
}

/// 0.95 as "95 %".
fn percent(c: f64) -> String {
    let p = c * 100.0;
    if (p - p.round()).abs() < 1e-9 {
        format!("{} %", p.round())
    } else {
        format!("{p} %")
    }
}

impl std::fmt::Display for GateName {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl Gates {
    /// The first gate given whose needs `met` does not meet, if any.
    pub fn first_unmet(&self, met: impl Fn(Needs) -> bool) -> Option<GateName> {
        self.thresholds()
            .into_iter()
            .map(|(g, _)| g)
            .find(|g| !met(g.needs()))
    }

    pub fn is_empty(&self) -> bool {
        self.thresholds().is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_gate_name_round_trips_through_the_request_object() {
        for &g in GateName::ALL {
            let body = serde_json::json!({ g.as_str(): 1.5 });
            let gates: Gates = serde_json::from_value(body.clone()).unwrap();
            assert_eq!(gates.thresholds(), vec![(g, 1.5)], "{g}");
            assert_eq!(serde_json::to_value(&gates).unwrap(), body);
            assert_eq!(GateName::parse(g.as_str()), Some(g));
            assert_eq!(serde_json::to_value(g).unwrap(), g.as_str());
            let mut set = Gates::default();
            set.set(g, 1.5);
            assert_eq!(set, gates);
        }
    }

    #[test]
    fn an_unknown_gate_is_refused_naming_it_and_the_known_ones() {
        let err = serde_json::from_value::<Gates>(serde_json::json!({"min_agreemnt": 0.9}))
            .unwrap_err()
            .to_string();
        assert!(err.contains("min_agreemnt"), "{err}");
        for &g in GateName::ALL {
            assert!(err.contains(g.as_str()), "{err} lacks {g}");
        }
    }
}
