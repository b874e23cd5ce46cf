//! Bad inputs give typed errors with messages a user can act on, never a panic.

use proctor::engine::dataset::EvalSet;
use proctor::engine::model::Model;
use proctor::engine::{EngineError, inspect_dataset, inspect_model};

use crate::support::case_dir;

fn bad(file: &str) -> std::path::PathBuf {
    case_dir("bad").join(file)
}

#[test]
fn random_bytes_are_not_an_onnx_model() {
    let err = inspect_model(&bad("random.onnx")).unwrap_err();
    assert!(matches!(err, EngineError::InvalidModel(_)), "{err:?}");
    assert!(err.to_string().contains("not an ONNX model"), "{err}");
}

#[test]
fn a_truncated_model_is_refused() {
    let err = inspect_model(&bad("truncated.onnx")).unwrap_err();
    assert!(matches!(err, EngineError::InvalidModel(_)), "{err:?}");
}

#[test]
fn external_data_is_refused_without_reading_the_named_file() {
    // The model names ../../etc/hostname; the refusal comes from the graph
    // itself, before any file it names could be opened.
    let err = inspect_model(&bad("external.onnx")).unwrap_err();
    assert!(matches!(err, EngineError::InvalidModel(_)), "{err:?}");
    let msg = err.to_string();
    assert!(msg.contains("external data"), "{msg}");
    assert!(
        !msg.contains("Canonicalizing") && !msg.contains("hostname"),
        "{msg}"
    );
}

#[test]
fn an_empty_file_is_not_a_model() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("empty.onnx");
    std::fs::write(&path, b"").unwrap();
    assert!(matches!(
        inspect_model(&path),
        Err(EngineError::InvalidModel(_))
    ));
}

#[test]
fn float_labels_are_refused_at_upload() {
    let err = inspect_dataset(&bad("bad_labels.npz")).unwrap_err();
    assert!(matches!(err, EngineError::InvalidDataset(_)), "{err:?}");
    assert!(err.to_string().contains("integer"), "{err}");
}

#[test]
fn a_set_that_does_not_fit_the_model_names_the_array_and_the_axis() {
    let model = Model::load(&case_dir("mlp").join("teacher.onnx")).unwrap();
    let set = EvalSet::open(&bad("mismatch.npz")).unwrap();
    let err = proctor::engine::fit::bind(&model.info, &set.info().arrays, "teacher").unwrap_err();
    assert!(matches!(err, EngineError::Mismatch(_)), "{err:?}");
    let msg = err.to_string();
    assert!(
        msg.contains("'features'") && msg.contains("axis 1"),
        "{msg}"
    );
}

#[test]
fn a_set_that_is_not_npy_or_npz_is_refused() {
    let err = inspect_dataset(&case_dir("mlp").join("teacher.onnx")).unwrap_err();
    assert!(matches!(err, EngineError::InvalidDataset(_)), "{err:?}");
}

#[test]
fn a_truncated_npz_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let bytes = std::fs::read(case_dir("mlp").join("data.npz")).unwrap();
    let path = dir.path().join("cut.npz");
    std::fs::write(&path, &bytes[..bytes.len() / 2]).unwrap();
    assert!(matches!(
        inspect_dataset(&path),
        Err(EngineError::InvalidDataset(_))
    ));
}

#[test]
fn negative_labels_are_refused_at_upload() {
    let err = inspect_dataset(&bad("negative_labels.npz")).unwrap_err();
    assert!(err.to_string().contains("label -1 at sample 9"), "{err}");
}
