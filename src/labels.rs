//! Worker labels: `key=value` pairs that say what a worker runs on (e.g.
//! `pool=edge-arm`). An evaluation's `runs_on` names the labels a worker
//! must carry; the store matches them as `key=value` text.

use std::collections::BTreeMap;

pub type Labels = BTreeMap<String, String>;

pub const MAX_LABELS: usize = 16;
pub const MAX_PART: usize = 64;

fn part_ok(s: &str) -> bool {
    !s.is_empty()
        && s.len() <= MAX_PART
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '/' | '-'))
}

/// Whether every key and value is 1 to 64 of `A-Z a-z 0-9 . _ / -`, so
/// that `key=value,…` reads back unchanged.
pub fn check(labels: &Labels) -> Result<(), String> {
    if labels.len() > MAX_LABELS {
        return Err(format!("at most {MAX_LABELS} labels"));
    }
    for (key, value) in labels {
        for part in [key, value] {
            if !part_ok(part) {
                return Err(format!(
                    "label '{}={}': keys and values are 1 to {MAX_PART} of A-Z a-z 0-9 . _ / -",
                    key.chars().take(80).collect::<String>(),
                    value.chars().take(80).collect::<String>()
                ));
            }
        }
    }
    Ok(())
}

/// Reads `key=value,key=value` (empty: no labels).
pub fn parse(text: &str) -> Result<Labels, String> {
    let mut labels = Labels::new();
    for pair in text.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        let (key, value) = pair
            .split_once('=')
            .ok_or_else(|| format!("label '{pair}' is not key=value"))?;
        if labels.insert(key.to_string(), value.to_string()).is_some() {
            return Err(format!("label key '{key}' is given twice"));
        }
    }
    check(&labels)?;
    Ok(labels)
}

/// Each label as the `key=value` text the store matches on.
pub fn as_pairs(labels: &Labels) -> Vec<String> {
    labels.iter().map(|(k, v)| format!("{k}={v}")).collect()
}

/// Whether a worker carrying `has` may run an evaluation that needs `needs`.
pub fn satisfies(has: &Labels, needs: &Labels) -> bool {
    needs.iter().all(|(k, v)| has.get(k) == Some(v))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_read_back_as_written() {
        let l = parse("pool=edge-arm, cpu=cortex-a72").unwrap();
        assert_eq!(as_pairs(&l), ["cpu=cortex-a72", "pool=edge-arm"]);
        assert_eq!(parse("").unwrap(), Labels::new());
    }

    #[test]
    fn malformed_labels_are_refused_with_the_pair_named() {
        assert!(parse("pool").unwrap_err().contains("'pool'"));
        assert!(parse("a=1,a=2").unwrap_err().contains("twice"));
        assert!(
            parse("a=b=c").is_err(),
            "'=' inside a value would not read back"
        );
        assert!(parse("a=").is_err());
        let many: String = (0..17).map(|i| format!("k{i}=v,")).collect();
        assert!(parse(&many).is_err());
    }

    #[test]
    fn a_worker_satisfies_the_labels_it_carries_and_no_others() {
        let has = parse("pool=edge-arm,cpu=a72").unwrap();
        assert!(satisfies(&has, &Labels::new()));
        assert!(satisfies(&has, &parse("pool=edge-arm").unwrap()));
        assert!(!satisfies(&has, &parse("pool=x86").unwrap()));
        assert!(!satisfies(&has, &parse("gpu=none").unwrap()));
    }
}
