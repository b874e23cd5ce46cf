//! The teacher's bulk-pass scores, kept on disk by (teacher SHA-256, set
//! SHA-256, output name, engine and service versions), so that a later
//! evaluation of new students against the same teacher and set does not run
//! the teacher's bulk pass again, and an upgrade never reuses scores another
//! engine computed. An entry that does not read is removed and computed anew.
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

use super::environment::TRACT_VERSION;
use super::error::{EngineError, EngineResult};
use super::logits::Scores;
use super::npy;

pub struct TeacherCache {
    dir: PathBuf,
    /// The engine and service versions, part of every key.
    versions: String,
}

/// A cached entry: the scores, and the engine time at the batch size asked
/// for if that batch size was ever run.
pub struct Cached {
    pub raw: Scores,
    pub engine_time: Option<Duration>,
}

impl TeacherCache {
    pub fn new(dir: impl Into<PathBuf>) -> Self {
        TeacherCache {
            dir: dir.into(),
            versions: format!("{TRACT_VERSION}\0{}", env!("CARGO_PKG_VERSION")),
        }
    }

    fn stem(&self, teacher_sha: &str, set_sha: &str, output: Option<&str>) -> PathBuf {
        let key = format!("{}\0{}", output.unwrap_or(""), self.versions);
        let key = hex::encode(Sha256::digest(key.as_bytes()));
        self.dir
            .join(format!("{teacher_sha}-{set_sha}-{}", &key[..16]))
    }

    pub fn get(
        &self,
        teacher_sha: &str,
        set_sha: &str,
        output: Option<&str>,
        pace: Pace,
    ) -> Option<Cached> {
        let stem = self.stem(teacher_sha, set_sha, output);
        let npy_path = stem.with_extension("npy");
        let raw = match read_f64_matrix(&npy_path) {
            Ok(raw) => raw,
            Err(_) => {
                // Missing, or unreadable: a corrupt entry is dropped so that
                // this evaluation's scores replace it.
                let _ = fs::remove_file(&npy_path);
                let _ = fs::remove_file(stem.with_extension("json"));
                return None;
            }
        };
        let times = read_times(&stem.with_extension("json"));
        // A hit counts as a use, so that eviction drops the longest unused.
        if let Ok(f) = fs::File::options().write(true).open(&npy_path) {
            let _ = f.set_modified(std::time::SystemTime::now());
        }
        Some(Cached {
            raw,
            engine_time: times.get(&pace.key()).map(|s| Duration::from_secs_f64(*s)),
        })
    }

    pub fn put(
        &self,
        teacher_sha: &str,
        set_sha: &str,
        output: Option<&str>,
        pace: Pace,
        raw: &Scores,
        engine_time: Duration,
    ) -> EngineResult<()> {
        fs::create_dir_all(&self.dir).map_err(EngineError::io("creating the teacher cache"))?;
        let stem = self.stem(teacher_sha, set_sha, output);
        write_atomic(&stem.with_extension("npy"), &f64_matrix_bytes(raw))?;
        let json_path = stem.with_extension("json");
        let mut times = read_times(&json_path);
        times.insert(pace.key(), engine_time.as_secs_f64());
        let text = serde_json::to_vec(&times).expect("a map of numbers serializes");
        write_atomic(&json_path, &text)
    }
}

/// Removes the longest unused entries until the cache holds at most
/// `max_bytes`; returns the bytes freed.
pub fn evict(dir: &Path, max_bytes: u64) -> std::io::Result<u64> {
    let mut entries = Vec::new();
    let mut total = 0u64;
    for e in fs::read_dir(dir)? {
        let path = e?.path();
        if path.extension().is_some_and(|x| x == "npy") {
            let meta = fs::metadata(&path)?;
            let times = path.with_extension("json");
            let bytes = meta.len() + fs::metadata(&times).map_or(0, |m| m.len());
            total += bytes;
            entries.push((meta.modified()?, bytes, path));
        }
    }
    entries.sort();
    let mut freed = 0;
    for (_, bytes, path) in entries {
        if total - freed <= max_bytes {
            break;
        }
        let _ = fs::remove_file(&path);
        let _ = fs::remove_file(path.with_extension("json"));
        freed += bytes;
    }
    Ok(freed)
}

/// How a bulk pass ran. Engine time depends on the batch size and on how
/// many threads shared the pass (their call times are summed), so it is
/// kept per both.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Pace {
    pub batch: usize,
    pub threads: usize,
}

impl Pace {
    /// Keys of the batch alone, written before threads shared a model,
    /// never match one of these.
    fn key(self) -> String {
        format!("{}x{}", self.batch, self.threads)
    }
}

fn read_times(path: &Path) -> BTreeMap<String, f64> {
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

    fn one_thread(batch: usize) -> Pace {
        Pace { batch, threads: 1 }
    }

    #[test]
    fn scores_survive_a_round_trip_bit_for_bit() {
        let dir = tempfile::tempdir().unwrap();
        let cache = TeacherCache::new(dir.path());
        let raw = Scores::from_rows(3, vec![0.1, -2.5, 1e-300, 7.0, f64::MAX, -0.0]);
        cache
            .put(
                "aa",
                "bb",
                None,
                one_thread(32),
                &raw,
                Duration::from_millis(5),
            )
            .unwrap();
        let hit = cache.get("aa", "bb", None, one_thread(32)).unwrap();
        assert_eq!(hit.raw, raw);
        assert_eq!(hit.engine_time, Some(Duration::from_millis(5)));
        // Engine time summed over two threads is another figure.
        let two = Pace {
            batch: 32,
            threads: 2,
        };
        assert_eq!(cache.get("aa", "bb", None, two).unwrap().engine_time, None);
        assert!(
            cache
                .get("aa", "bb", None, one_thread(16))
                .unwrap()
                .engine_time
                .is_none()
        );
        assert!(
            cache
                .get("aa", "bb", Some("probs"), one_thread(32))
                .is_none()
        );
    }

    #[test]
    fn scores_another_engine_or_service_version_computed_are_no_hit() {
        let dir = tempfile::tempdir().unwrap();
        let older = TeacherCache {
            dir: dir.path().into(),
            versions: "0.21.0\u{0}0.0.9".into(),
        };
        let raw = Scores::from_rows(2, vec![1.0, 2.0]);
        older
            .put(
                "aa",
                "bb",
                None,
                one_thread(8),
                &raw,
                Duration::from_millis(1),
            )
            .unwrap();
        assert!(older.get("aa", "bb", None, one_thread(8)).is_some());
        assert!(
            TeacherCache::new(dir.path())
                .get("aa", "bb", None, one_thread(8))
                .is_none()
        );
    }

    #[test]
    fn a_corrupt_entry_is_dropped_and_replaced_by_the_next_scores() {
        let dir = tempfile::tempdir().unwrap();
        let cache = TeacherCache::new(dir.path());
        let raw = Scores::from_rows(2, vec![1.0, 2.0]);
        cache
            .put(
                "aa",
                "bb",
                None,
                one_thread(8),
                &raw,
                Duration::from_millis(1),
            )
            .unwrap();
        let npy = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().path())
            .find(|p| p.extension().is_some_and(|e| e == "npy"))
            .unwrap();
        std::fs::write(&npy, b"not an array").unwrap();
        assert!(
            cache.get("aa", "bb", None, one_thread(8)).is_none(),
            "a corrupt entry is no hit"
        );
        assert!(!npy.exists(), "and it is removed");
        let fresh = Scores::from_rows(2, vec![3.0, 4.0]);
        cache
            .put(
                "aa",
                "bb",
                None,
                one_thread(8),
                &fresh,
                Duration::from_millis(2),
            )
            .unwrap();
        assert_eq!(
            cache.get("aa", "bb", None, one_thread(8)).unwrap().raw,
            fresh
        );
    }
}
