//! The teacher's bulk-pass scores, kept on disk by (teacher SHA-256, set
//! SHA-256, output name), so that a later evaluation of new students against
//! the same teacher and set does not run the teacher's bulk pass again.
//!
//! Scores are stored as an NPY float64 [N, C] array (readable with
//! `numpy.load`) beside a small JSON file with the engine time per batch size
//! (throughput is a figure of the batch size). Files are written to a
//! temporary name and renamed, so a canceled or crashed run leaves no half entry.

use std::collections::BTreeMap;
use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Duration;

use sha2::{Digest, Sha256};

use super::error::{EngineError, EngineResult};
use super::logits::Scores;
use super::npy;

pub struct TeacherCache {
    dir: PathBuf,
}

/// A cached entry: the scores, and the engine time at the batch size asked
/// for if that batch size was ever run.
pub struct Cached {
    pub raw: Scores,
    pub engine_time: Option<Duration>,
}

impl TeacherCache {
    pub fn new(dir: impl Into<PathBuf>) -> Self {
        TeacherCache { dir: dir.into() }
    }

    fn stem(&self, teacher_sha: &str, set_sha: &str, output: Option<&str>) -> PathBuf {
        let out = hex::encode(Sha256::digest(output.unwrap_or("").as_bytes()));
        self.dir
            .join(format!("{teacher_sha}-{set_sha}-{}", &out[..16]))
    }

    pub fn get(
        &self,
        teacher_sha: &str,
        set_sha: &str,
        output: Option<&str>,
        batch: usize,
    ) -> Option<Cached> {
        let stem = self.stem(teacher_sha, set_sha, output);
        let raw = read_f64_matrix(&stem.with_extension("npy")).ok()?;
        let times = read_times(&stem.with_extension("json"));
        Some(Cached {
            raw,
            engine_time: times.get(&batch).map(|s| Duration::from_secs_f64(*s)),
        })
    }

    pub fn put(
        &self,
        teacher_sha: &str,
        set_sha: &str,
        output: Option<&str>,
        batch: usize,
        raw: &Scores,
        engine_time: Duration,
    ) -> EngineResult<()> {
        fs::create_dir_all(&self.dir).map_err(EngineError::io("creating the teacher cache"))?;
        let stem = self.stem(teacher_sha, set_sha, output);
        let npy_path = stem.with_extension("npy");
        if !npy_path.exists() {
            write_atomic(&npy_path, &f64_matrix_bytes(raw))?;
        }
        let json_path = stem.with_extension("json");
        let mut times = read_times(&json_path);
        times.insert(batch, engine_time.as_secs_f64());
        let text = serde_json::to_vec(&times).expect("a map of numbers serializes");
        write_atomic(&json_path, &text)
    }
}

fn read_times(path: &Path) -> BTreeMap<usize, f64> {
    fs::read(path)
        .ok()
        .and_then(|b| serde_json::from_slice(&b).ok())
        .unwrap_or_default()
}

fn write_atomic(path: &Path, bytes: &[u8]) -> EngineResult<()> {
    let tmp = path.with_extension(format!("tmp-{}", std::process::id()));
    let mut f = fs::File::create(&tmp).map_err(EngineError::io("writing the teacher cache"))?;
    f.write_all(bytes)
        .map_err(EngineError::io("writing the teacher cache"))?;
    f.sync_all()
        .map_err(EngineError::io("writing the teacher cache"))?;
    fs::rename(&tmp, path).map_err(EngineError::io("writing the teacher cache"))
}

/// An NPY float64 [n, c] array, readable with `numpy.load`.
fn f64_matrix_bytes(m: &Scores) -> Vec<u8> {
    let mut out = npy::header_bytes("<f8", &[m.n, m.c]);
    out.reserve(m.data.len() * 8);
    for v in &m.data {
        out.extend_from_slice(&v.to_le_bytes());
    }
    out
}

fn read_f64_matrix(path: &Path) -> EngineResult<Scores> {
    match npy::read_f64(path)? {
        (shape, data) if shape.len() == 2 && shape[1] > 0 => Ok(Scores::from_rows(shape[1], data)),
        _ => Err(EngineError::InvalidDataset(
            "malformed teacher cache entry".into(),
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scores_survive_a_round_trip_bit_for_bit() {
        let dir = tempfile::tempdir().unwrap();
        let cache = TeacherCache::new(dir.path());
        let raw = Scores::from_rows(3, vec![0.1, -2.5, 1e-300, 7.0, f64::MAX, -0.0]);
        cache
            .put("aa", "bb", None, 32, &raw, Duration::from_millis(5))
            .unwrap();
        let hit = cache.get("aa", "bb", None, 32).unwrap();
        assert_eq!(hit.raw, raw);
        assert_eq!(hit.engine_time, Some(Duration::from_millis(5)));
        assert!(
            cache
                .get("aa", "bb", None, 16)
                .unwrap()
                .engine_time
                .is_none()
        );
        assert!(cache.get("aa", "bb", Some("probs"), 32).is_none());
    }
}
