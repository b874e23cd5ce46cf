//! Figures per slice of the evaluation set (metrics.md, "Slices"): how a
//! model fares on each group of samples a team cares about, so that an
//! average cannot hide a regression that hurts one site or device.

use serde::{Deserialize, Serialize};

use super::argmax;
use crate::engine::logits::Logits;
use crate::engine::slices::Slices;
use crate::engine::stats::{Z95, wilson};
use crate::report::Key;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SliceFigures {
    pub slice: Key,
    pub samples: u64,
    /// Agreement with the teacher within the slice.
    pub agreement: f64,
    pub agreement_ci: [f64; 2],
    /// Accuracy against the labels within the slice (null without labels).
    pub top1: Option<f64>,
    pub top1_ci: Option<[f64; 2]>,
    /// Of the slice's samples, the share the teacher gets right and the
    /// model wrong (null without labels).
    pub negative_flip_rate: Option<f64>,
    /// Samples of the slice where the model agrees with the teacher.
    #[serde(skip)]
    pub agreed: u64,
}

/// One entry per slice value, ascending by value.
pub fn slice_figures(
    teacher: &Logits,
    model: &Logits,
    labels: Option<&[i64]>,
    slices: &Slices,
) -> Vec<SliceFigures> {
    let t: Vec<usize> = teacher.rows().map(argmax).collect();
    let m: Vec<usize> = model.rows().map(argmax).collect();
    slices
        .members()
        .into_iter()
        .zip(&slices.values)
        .map(|(samples, value)| {
            let n = samples.len() as u64;
            let agreed = samples.iter().filter(|&&i| t[i] == m[i]).count() as u64;
            let (top1, top1_ci, nfr) = match labels {
                Some(y) => {
                    let right = |p: &[usize], i: usize| p[i] as i64 == y[i];
                    let correct = samples.iter().filter(|&&i| right(&m, i)).count() as u64;
                    let lost = samples
                        .iter()
                        .filter(|&&i| right(&t, i) && !right(&m, i))
                        .count() as u64;
                    (
                        Some(correct as f64 / n as f64),
                        Some(wilson(correct, n, Z95)),
                        Some(lost as f64 / n as f64),
                    )
                }
                None => (None, None, None),
            };
            SliceFigures {
                slice: value.clone(),
                samples: n,
                agreement: agreed as f64 / n as f64,
                agreement_ci: wilson(agreed, n, Z95),
                top1,
                top1_ci,
                negative_flip_rate: nfr,
                agreed,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_slice_of_one_sample_gets_its_own_entry_and_interval() {
        // Common practice: each distinct value is one slice, even a single sample.
        let t = Logits::from_rows(2, vec![1.0, 0.0, 1.0, 0.0, 0.0, 1.0]);
        let s = Logits::from_rows(2, vec![1.0, 0.0, 0.0, 1.0, 0.0, 1.0]);
        let slices = Slices::new(vec![Key::Int(7), Key::Int(7), Key::Int(-1)]);
        let f = slice_figures(&t, &s, Some(&[0, 0, 1]), &slices);
        assert_eq!(f.len(), 2);
        assert_eq!(
            (f[0].slice.clone(), f[0].samples, f[0].agreement),
            (Key::Int(-1), 1, 1.0)
        );
        assert_eq!((f[1].samples, f[1].agreement), (2, 0.5));
        // Sample 1: the teacher is right (label 0), the student wrong.
        assert_eq!(f[1].negative_flip_rate, Some(0.5));
        assert_eq!(f[0].agreement_ci, wilson(1, 1, Z95));
    }
}
