//! Turning a model's scored output into logits [N, C] in f64: squeezing the
//! output to two axes and deciding whether it holds logits or probabilities.

use serde::{Deserialize, Serialize};

use super::error::{EngineError, EngineResult};

/// What a model's scored output holds, as used for scoring.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum OutputKind {
    Logits,
    Probabilities,
}

/// What a request asks for: a kind, or `auto` to decide from the values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum OutputKindChoice {
    #[default]
    Auto,
    Logits,
    Probabilities,
}

/// Row-major [n, c] scores of one model over the whole set, as its output
/// gave them: logits or probabilities, not yet known which.
#[derive(Debug, Clone, PartialEq)]
pub struct Scores {
    pub n: usize,
    pub c: usize,
    pub data: Vec<f64>,
}

/// Scores that are logits (or log-probabilities, which softmax treats
/// alike): what every metric takes. Only `to_logits` makes them from a
/// model's output, so a metric never sees raw probabilities.
#[derive(Debug, Clone, PartialEq)]
pub struct Logits(Scores);

impl std::ops::Deref for Logits {
    type Target = Scores;

    fn deref(&self) -> &Scores {
        &self.0
    }
}

impl Logits {
    /// Rows given as logits, e.g. by a test or a tool that computed them.
    pub fn from_rows(c: usize, data: Vec<f64>) -> Self {
        Logits(Scores::from_rows(c, data))
    }
}

impl Scores {
    pub fn new(c: usize) -> Self {
        Scores {
            n: 0,
            c,
            data: Vec::new(),
        }
    }

    pub fn from_rows(c: usize, data: Vec<f64>) -> Self {
        assert_eq!(data.len() % c, 0, "data is not a whole number of rows");
        Scores {
            n: data.len() / c,
            c,
            data,
        }
    }

    pub fn row(&self, i: usize) -> &[f64] {
        &self.data[i * self.c..(i + 1) * self.c]
    }

    pub fn rows(&self) -> impl Iterator<Item = &[f64]> {
        self.data.chunks_exact(self.c)
    }

    pub fn push_rows(&mut self, rows: &[f64]) {
        debug_assert_eq!(rows.len() % self.c, 0);
        self.data.extend_from_slice(rows);
        self.n = self.data.len() / self.c;
    }
}

/// The class count of an output of this shape, whose first axis is the
/// batch: exactly one other axis may exceed 1.
pub fn class_count(shape: &[usize]) -> EngineResult<usize> {
    let rest = shape.get(1..).unwrap_or_default();
    let big: Vec<usize> = rest.iter().copied().filter(|&d| d != 1).collect();
    match (shape.len(), big.as_slice()) {
        (0 | 1, _) => Err(EngineError::Mismatch(format!(
            "the scored output has shape {shape:?}: it needs a batch axis and a class axis"
        ))),
        (_, [c]) if *c >= 2 => Ok(*c),
        (_, []) => Err(EngineError::Mismatch(format!(
            "the scored output has shape {shape:?}, a single score per sample: \
             Proctor needs one score per class (at least 2 classes)"
        ))),
        _ => Err(EngineError::Mismatch(format!(
            "the scored output has shape {shape:?}: it must squeeze to [batch, classes]"
        ))),
    }
}

/// `auto`'s rule: probabilities when every value lies in [0, 1] and every
/// row sums to 1 within 1e-3, else logits.
pub fn detect(raw: &Scores) -> OutputKind {
    let in_range = raw.data.iter().all(|&v| (0.0..=1.0).contains(&v));
    let normalized = raw
        .rows()
        .all(|r| (r.iter().sum::<f64>() - 1.0).abs() <= 1e-3);
    if in_range && normalized {
        OutputKind::Probabilities
    } else {
        OutputKind::Logits
    }
}

/// Applies a request's choice to a model's whole raw output.
pub fn to_logits(mut raw: Scores, choice: OutputKindChoice) -> (Logits, OutputKind) {
    let kind = match choice {
        OutputKindChoice::Auto => detect(&raw),
        OutputKindChoice::Logits => OutputKind::Logits,
        OutputKindChoice::Probabilities => OutputKind::Probabilities,
    };
    if kind == OutputKind::Probabilities {
        for v in &mut raw.data {
            *v = v.max(1e-12).ln();
        }
    }
    (Logits(raw), kind)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn trailing_unit_axes_squeeze_away() {
        assert_eq!(class_count(&[8, 10]).unwrap(), 10);
        assert_eq!(class_count(&[8, 1, 10, 1]).unwrap(), 10);
        assert_eq!(class_count(&[1, 3]).unwrap(), 3);
    }

    #[test]
    fn outputs_that_are_not_one_score_per_class_are_refused() {
        assert!(class_count(&[8]).is_err());
        assert!(class_count(&[8, 1]).is_err());
        assert!(class_count(&[8, 4, 10]).is_err());
    }

    #[test]
    fn auto_sees_probabilities_only_when_rows_sum_to_one() {
        let probs = Scores::from_rows(2, vec![0.25, 0.75, 0.5, 0.5005]);
        assert_eq!(detect(&probs), OutputKind::Probabilities);
        let off = Scores::from_rows(2, vec![0.25, 0.75, 0.5, 0.502]);
        assert_eq!(detect(&off), OutputKind::Logits);
        let negative = Scores::from_rows(2, vec![-0.25, 1.25]);
        assert_eq!(detect(&negative), OutputKind::Logits);
    }

    #[test]
    fn probabilities_become_clamped_logs() {
        let (l, kind) = to_logits(Scores::from_rows(2, vec![0.0, 1.0]), OutputKindChoice::Auto);
        assert_eq!(kind, OutputKind::Probabilities);
        assert_eq!(l.data, vec![1e-12f64.ln(), 0.0]);
    }
}
