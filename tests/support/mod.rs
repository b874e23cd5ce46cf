//! Helpers shared by the integration tests: the reference fixtures, and
//! comparisons of figures with named tolerances that report the first value
//! that is off.
#![allow(dead_code, unreachable_pub)]

use std::path::{Path, PathBuf};

use serde_json::Value;

/// Figures computed from the same f64 logits agree to this (metrics.md).
pub const SAME_LOGITS: Tolerance = Tolerance {
    rel: 1e-9,
    abs: 1e-12,
};
/// tract and onnxruntime both compute in float32 and differ by a few ulps.
pub const ENGINES_F32: Tolerance = Tolerance {
    rel: 1e-4,
    abs: 1e-5,
};

#[derive(Debug, Clone, Copy)]
pub struct Tolerance {
    pub rel: f64,
    pub abs: f64,
}

impl Tolerance {
    pub fn accepts(self, got: f64, want: f64) -> bool {
        got == want || (got - want).abs() <= self.abs + self.rel * want.abs()
    }
}

pub fn reference_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/cases")
}

/// The ids of one page of a list answer (`{items: [{id, ...}], next_cursor}`), in order.
pub fn page_ids(page: &Value) -> Vec<String> {
    page["items"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["id"].as_str().unwrap().to_string())
        .collect()
}

pub fn case_dir(case: &str) -> PathBuf {
    reference_dir().join(case)
}

pub fn expected(case: &str) -> Value {
    let text = std::fs::read_to_string(case_dir(case).join("expected.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

/// The labelled cases with a teacher and students.
pub const CASES: [&str; 10] = [
    "mlp",
    "cnn",
    "text",
    "softmax_head",
    "ties",
    "binary",
    "wide",
    "fixed_batch",
    "unlabeled",
    "baseline",
];

/// Compares every field of `got` with `want`: numbers within `tol`, all else
/// exactly. Every field of `got` must be present in `want`, so that no figure
/// goes unchecked. Panics naming the first field that is off.
pub fn assert_matches(got: &Value, want: &Value, tol: Tolerance, path: &str) {
    match (got, want) {
        (Value::Number(g), Value::Number(w)) => {
            let (g, w) = (g.as_f64().unwrap(), w.as_f64().unwrap());
            assert!(
                tol.accepts(g, w),
                "{path}: got {g:e}, reference {w:e} (tolerance {tol:?})"
            );
        }
        (Value::Array(g), Value::Array(w)) => {
            assert_eq!(
                g.len(),
                w.len(),
                "{path}: got {} elements, reference {}",
                g.len(),
                w.len()
            );
            for (i, (g, w)) in g.iter().zip(w).enumerate() {
                assert_matches(g, w, tol, &format!("{path}[{i}]"));
            }
        }
        (Value::Object(g), Value::Object(w)) => {
            for (k, gv) in g {
                let wv = w
                    .get(k)
                    .unwrap_or_else(|| panic!("{path}.{k} has no reference value"));
                assert_matches(gv, wv, tol, &format!("{path}.{k}"));
            }
        }
        _ => assert_eq!(got, want, "{path}"),
    }
}
