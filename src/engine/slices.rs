//! Slices of an evaluation set (metrics.md, "Slices"): groups of samples a
//! team cares about (a site, a device model, a language), given per sample
//! as an integer or a string.

use crate::report::Key;

/// Each sample's slice, as an index into the distinct values in order
/// (integers numerically, strings by code point).
#[derive(Debug, Clone, PartialEq)]
pub struct Slices {
    pub values: Vec<Key>,
    pub of_sample: Vec<u32>,
}

impl Slices {
    pub fn new(keys: Vec<Key>) -> Slices {
        let mut values = keys.clone();
        values.sort();
        values.dedup();
        let of_sample = keys
            .iter()
            .map(|k| values.binary_search(k).expect("every key is a value") as u32)
            .collect();
        Slices { values, of_sample }
    }

    /// The sample indices of each slice, in value order.
    pub fn members(&self) -> Vec<Vec<usize>> {
        let mut out = vec![Vec::new(); self.values.len()];
        for (i, &s) in self.of_sample.iter().enumerate() {
            out[s as usize].push(i);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn integer_slices_sort_numerically_and_strings_by_code_point() {
        // metrics.md: ascending by slice value, integers numerically, strings
        // by code point (so 'Z' before 'a' before 'É').
        let ints = Slices::new([10, 3, -2, 3].map(Key::Int).to_vec());
        assert_eq!(ints.values, [-2, 3, 10].map(Key::Int).to_vec());
        assert_eq!(ints.of_sample, vec![2, 1, 0, 1]);
        let texts = Slices::new(["a", "É", "Z", "a"].map(|s| Key::Text(s.into())).to_vec());
        assert_eq!(
            texts.values,
            ["Z", "a", "É"].map(|s| Key::Text(s.into())).to_vec()
        );
        assert_eq!(texts.members(), vec![vec![2], vec![0, 3], vec![1]]);
    }
}
