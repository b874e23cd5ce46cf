//! Property-based intake fuzzing shared by the unit run (tests/service/
//! fuzz.rs, few cases) and the long run (benches/intake_fuzz.rs): valid
//! files, mutated by proptest, fed to the same intake an upload goes
//! through. The properties: evaluation sets are read by our own code in
//! this process and never panic; models go through the sandbox's check
//! child and are either accepted or refused as the user's input (422),
//! never a fault of the service (5xx).

use std::path::{Path, PathBuf};
use std::time::Duration;

use proctor::engine::{EngineError, Options, inspect_dataset};
use proctor::error::AppError;
use proctor::sandbox::{Limits, Sandbox, SandboxConfig};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed, TestCaseError, TestError, TestRunner};

/// One edit of a file's bytes. Positions are fractions of the length, so
/// that one strategy serves files of every size.
#[derive(Debug, Clone)]
pub enum Edit {
    Set(f64, u8),
    /// Overwrites four bytes with a little-endian number: lengths, counts
    /// and offsets of the formats are such fields.
    Number(f64, u32),
    Cut(f64),
    Insert(f64, Vec<u8>),
    Remove(f64, usize),
}

fn edit() -> impl Strategy<Value = Edit> {
    let at = 0.0..1.0f64;
    let numbers = prop_oneof![
        Just(0u32),
        Just(1),
        Just(u32::MAX),
        Just(0x7fff_ffff),
        any::<u32>()
    ];
    prop_oneof![
        4 => (at.clone(), any::<u8>()).prop_map(|(a, b)| Edit::Set(a, b)),
        3 => (at.clone(), numbers).prop_map(|(a, n)| Edit::Number(a, n)),
        1 => at.clone().prop_map(Edit::Cut),
        1 => (at.clone(), prop::collection::vec(any::<u8>(), 1..16)).prop_map(|(a, b)| Edit::Insert(a, b)),
        1 => (at, 1usize..64).prop_map(|(a, n)| Edit::Remove(a, n)),
    ]
}

pub fn apply(mut bytes: Vec<u8>, edits: &[Edit]) -> Vec<u8> {
    for e in edits {
        let pos = |f: f64, len: usize| ((f * len as f64) as usize).min(len.saturating_sub(1));
        let len = bytes.len();
        if len == 0 {
            break;
        }
        match e {
            Edit::Set(f, b) => bytes[pos(*f, len)] = *b,
            Edit::Number(f, n) => {
                let at = pos(*f, len).min(len.saturating_sub(4));
                for (i, b) in n.to_le_bytes().iter().enumerate() {
                    if at + i < len {
                        bytes[at + i] = *b;
                    }
                }
            }
            Edit::Cut(f) => bytes.truncate(pos(*f, len)),
            Edit::Insert(f, b) => {
                let at = pos(*f, len);
                bytes.splice(at..at, b.iter().copied());
            }
            Edit::Remove(f, n) => {
                let at = pos(*f, len);
                bytes.drain(at..(at + n).min(len));
            }
        }
    }
    bytes
}

pub fn edits() -> impl Strategy<Value = Vec<Edit>> {
    prop::collection::vec(edit(), 1..6)
}

/// A runner with a fixed seed: the same cases on every machine and run.
pub fn runner(cases: u32, seed: u64) -> TestRunner {
    TestRunner::new(Config {
        cases,
        failure_persistence: None,
        rng_seed: RngSeed::Fixed(seed),
        max_shrink_iters: 256,
        ..Config::default()
    })
}

fn reference(case: &str, file: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/cases")
        .join(case)
        .join(file)
}

/// Seeds for the set reader: plain, compressed and string-holding archives
/// and a single NPY.
pub fn set_seeds() -> Vec<PathBuf> {
    vec![
        reference("mlp", "data.npz"),
        reference("text", "data.npz"),
        reference("baseline", "data.npz"),
        reference("text", "ort/teacher.npy"),
    ]
}

pub fn model_seeds() -> Vec<PathBuf> {
    vec![
        reference("mlp", "teacher.onnx"),
        reference("cnn", "student_rank5.onnx"),
    ]
}

/// What a run found.
#[derive(Debug, Default)]
pub struct Tally {
    pub cases: u64,
    pub accepted: u64,
    pub refused: u64,
}

fn run<F>(cases: u32, seed: u64, seeds: &[PathBuf], check: F) -> Result<Tally, String>
where
    F: Fn(&Path) -> Result<bool, String>,
{
    // The runner takes a shared closure; the counts live in cells.
    let tally = std::cell::RefCell::new(Tally::default());
    let dir = tempfile::tempdir().unwrap();
    for (n, path) in seeds.iter().enumerate() {
        let original = std::fs::read(path).unwrap();
        let file = dir.path().join(format!(
            "case{n}.{}",
            path.extension().unwrap().to_string_lossy()
        ));
        // A runner counts its cases across runs: one per seed file.
        let outcome = runner(cases, seed.wrapping_add(n as u64)).run(&edits(), |edits| {
            std::fs::write(&file, apply(original.clone(), &edits)).unwrap();
            let mut t = tally.borrow_mut();
            match check(&file) {
                Ok(true) => t.accepted += 1,
                Ok(false) => t.refused += 1,
                Err(why) => return Err(TestCaseError::fail(why)),
            }
            t.cases += 1;
            Ok(())
        });
        match outcome {
            Ok(()) => {}
            Err(TestError::Fail(why, edits)) => {
                return Err(format!(
                    "{}: {why}; minimal edits {edits:?}",
                    path.display()
                ));
            }
            Err(e) => return Err(format!("{}: {e}", path.display())),
        }
    }
    Ok(tally.into_inner())
}

/// Mutated evaluation sets: read or refused as invalid, never a panic.
pub fn sets(cases: u32, seed: u64) -> Result<Tally, String> {
    run(
        cases,
        seed,
        &set_seeds(),
        |path| match std::panic::catch_unwind(|| inspect_dataset(path)) {
            Ok(Ok(_)) => Ok(true),
            Ok(Err(EngineError::InvalidDataset(_))) => Ok(false),
            Ok(Err(other)) => Err(format!("not a refusal of the input: {other:?}")),
            Err(_) => Err("the reader panicked".into()),
        },
    )
}

/// Mutated models through the sandbox's check child.
pub fn models(cases: u32, seed: u64) -> Result<Tally, String> {
    let dir = tempfile::tempdir().unwrap();
    let limits = Limits {
        memory_bytes: Some(2 << 30),
        wall_time: Duration::from_secs(60),
    };
    let sandbox = Sandbox::new(SandboxConfig {
        exe: PathBuf::from(env!("CARGO_BIN_EXE_proctor")),
        limits: limits.clone(),
        check_limits: limits,
        check_slots: 1,
        check_waiting: 1,
        cpu_lock: dir.path().join("cpu.lock"),
        options: Options::default(),
        hold: None,
    });
    let rt = tokio::runtime::Runtime::new().unwrap();
    run(cases, seed, &model_seeds(), |path| {
        match rt.block_on(sandbox.inspect_model(path)) {
            Ok(_) => Ok(true),
            Err(e) => {
                let e = AppError::from(e);
                match e.status_code() {
                    422 => Ok(false),
                    s => Err(format!("answered {s}: {e}")),
                }
            }
        }
    })
}
