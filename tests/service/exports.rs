//! Models as the usual exporters write them: torch's default export with
//! ONNX external data (sent as a zip bundle), scikit-learn students whose
//! first output is the predicted label, and int8 students in the QDQ format.
//! The fixtures and their onnxruntime figures come from
//! tests/reference/exports.py.

use std::time::Duration;

use serde_json::{Value, json};

use crate::harness::Server;
use crate::support::{ENGINES_F32, assert_matches, case_dir, expected};

const LONG: Duration = Duration::from_secs(120);

fn bundle(file: &str) -> std::path::PathBuf {
    case_dir("bundles").join(file)
}

fn bundle_cases() -> Vec<Value> {
    expected("bundles")["files"].as_array().unwrap().clone()
}

/// Zips a folder of the torch_external case as a user would.
fn zip_folder(folder: &str) -> tempfile::NamedTempFile {
    use std::io::Write;
    let dir = case_dir("torch_external").join(folder);
    let out = tempfile::NamedTempFile::new().unwrap();
    let mut zip = zip::ZipWriter::new(out.reopen().unwrap());
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        zip.start_file(name, zip::write::SimpleFileOptions::default())
            .unwrap();
        zip.write_all(&std::fs::read(&path).unwrap()).unwrap();
    }
    zip.finish().unwrap();
    out
}

#[tokio::test]
async fn every_bundle_is_stored_or_refused_as_the_contract_says() {
    // api.md "Models": exactly one .onnx, every location relative, inside
    // the bundle, without '..', existing; ranges inside their file; 422
    // naming the tensor otherwise.
    let s = Server::start(&[]);
    let mut first_id = None;
    for case in bundle_cases() {
        let file = case["file"].as_str().unwrap();
        let a = s.upload_bundle(&bundle(file), file).await;
        let mut want = case["expect"].as_u64().unwrap() as u16;
        if want == 201 && first_id.is_some() {
            // The same weights as a bundle stored before: the same model.
            want = 200;
        }
        assert_eq!(a.status, want, "{file} ({}): {}", case["why"], a.body);
        if want == 422 {
            let detail = a.body["detail"].as_str().unwrap();
            if let Some(tensor) = case["tensor"].as_str() {
                assert!(
                    detail.contains(tensor),
                    "{file}: '{detail}' should name {tensor}"
                );
            }
            assert!(
                !detail.contains("ToTypedTranslator") && !detail.contains("panicked"),
                "{file}: {detail}"
            );
        } else {
            assert_eq!(a.body["external_data"], case["external_data"], "{file}");
            let id = first_id.get_or_insert_with(|| a.body["id"].clone());
            assert_eq!(&a.body["id"], id, "{file}");
        }
    }
    assert!(first_id.is_some(), "the fixtures hold good bundles");
    let listed = s.get("/v1/models?limit=200").await;
    assert_eq!(
        listed.body["items"].as_array().unwrap().len(),
        1,
        "every good bundle of the same weights is one model: {}",
        listed.body
    );
}

#[tokio::test]
async fn the_same_weights_bundled_twice_are_one_model() {
    let s = Server::start(&[]);
    let first = s.upload_bundle(&bundle("good.zip"), "teacher").await;
    assert_eq!(first.status, 201, "{}", first.body);
    for case in bundle_cases() {
        let file = case["file"].as_str().unwrap();
        if case["expect"] != 201 || file == "good.zip" {
            continue;
        }
        let again = s.upload_bundle(&bundle(file), "again").await;
        assert_eq!(again.status, 200, "{file}: {}", again.body);
        assert_eq!(again.body["id"], first.body["id"], "{file}");
        assert_eq!(again.body["name"], "teacher", "the stored name is kept");
    }
}

#[tokio::test]
async fn a_bundled_model_is_stored_self_contained_and_reads_as_onnx_does() {
    let s = Server::start(&[]);
    let a = s.upload_bundle(&bundle("good.zip"), "teacher").await;
    assert_eq!(a.status, 201, "{}", a.body);
    let want = &expected("torch_external")["models"]["teacher"];
    // Values read by the onnx package from the exporter's folder.
    assert_eq!(a.body["parameters"], want["parameters"]);
    assert_eq!(a.body["opset"], want["opset"]);
    assert_eq!(a.body["inputs"], want["inputs"]);
    assert_eq!(a.body["outputs"], want["outputs"]);
    assert_eq!(a.body["external_data"], want["external_data"]);
    // The stored file is the self-contained model; its hash and size are
    // that file's (api.md "Models").
    let sha = a.body["sha256"].as_str().unwrap();
    let stored = s.data_dir().join("models").join(sha);
    let bytes = std::fs::read(&stored).unwrap();
    assert_eq!(a.body["bytes"], bytes.len());
    use sha2::Digest;
    assert_eq!(hex::encode(sha2::Sha256::digest(&bytes)), sha);
}

#[tokio::test]
async fn a_plain_upload_naming_external_data_is_told_to_send_the_bundle() {
    let s = Server::start(&[]);
    let a = s
        .upload_model(
            &case_dir("torch_external").join("teacher/teacher.onnx"),
            "t",
        )
        .await;
    assert_eq!(a.status, 422, "{}", a.body);
    let detail = a.body["detail"].as_str().unwrap();
    assert!(detail.contains("zip bundle"), "{detail}");
    assert!(detail.contains("layers.0.weight"), "{detail}");
}

/// Runs an evaluation and checks each candidate's figures against the
/// generator's onnxruntime + numpy figures.
async fn run_and_compare(s: &Server, case: &str, teacher: String, students: Vec<String>) -> Value {
    let set = s.dataset_id(&case_dir(case).join("data.npz")).await;
    let exp = expected(case);
    let a = s
        .create_evaluation(&json!({
            "teacher": teacher, "students": students, "dataset": set,
            "temperature": exp["temperature"], "alpha": exp["alpha"],
            "latency": {"warmup": 1, "iterations": 5},
        }))
        .await;
    assert_eq!(a.status, 202, "{}", a.body);
    let id = a.body["id"].as_str().unwrap().to_string();
    let done = s.wait_finished(&id, LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    let report = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    for c in report["candidates"].as_array().unwrap() {
        let stem = c["model"]["name"].as_str().unwrap();
        let mut want = exp["students"][stem].clone();
        if let Some(acc) = want["accuracy"].as_object_mut() {
            acc.remove("b");
            acc.remove("c");
        }
        let got = json!({"fidelity": c["fidelity"], "accuracy": c["accuracy"]});
        assert_matches(&got, &want, ENGINES_F32, stem);
    }
    report
}

#[tokio::test]
async fn torch_exports_with_external_data_evaluate_as_onnxruntime_scores_them() {
    let s = Server::start(&[]);
    let teacher = zip_folder("teacher");
    let student = zip_folder("student_small");
    let t = s.upload_bundle(teacher.path(), "teacher").await;
    let st = s.upload_bundle(student.path(), "student_small").await;
    assert_eq!((t.status, st.status), (201, 201), "{} {}", t.body, st.body);
    let ids = |a: &crate::harness::Answer| a.body["id"].as_str().unwrap().to_string();
    run_and_compare(&s, "torch_external", ids(&t), vec![ids(&st)]).await;
}

#[tokio::test]
async fn scikit_learn_students_are_scored_on_their_probabilities_not_their_label() {
    // metrics.md "Turning outputs into logits": the first float output
    // squeezing to [N, C]; the converter's int64 label comes first.
    let s = Server::start(&[]);
    let case = "tabular_tree";
    let exp = expected(case);
    let teacher = s.model_id(&case_dir(case).join("teacher.onnx")).await;
    let mut students = Vec::new();
    for stem in exp["students"].as_object().unwrap().keys() {
        let a = s
            .upload_model(&case_dir(case).join(format!("{stem}.onnx")), stem)
            .await;
        assert_eq!(a.status, 201, "{stem}: {}", a.body);
        assert_eq!(
            a.body["outputs"][0]["dtype"], "int64",
            "{stem}: label first"
        );
        students.push(a.body["id"].as_str().unwrap().to_string());
    }
    let report = run_and_compare(&s, case, teacher, students).await;
    for c in report["candidates"].as_array().unwrap() {
        assert_eq!(c["output"], "probabilities", "{}", c["model"]["name"]);
        assert_eq!(c["output_kind"], "probabilities", "{}", c["model"]["name"]);
    }
}

#[tokio::test]
async fn an_int8_qdq_student_scores_as_onnxruntime_and_says_what_runs_in_float() {
    let s = Server::start(&[]);
    let case = "int8";
    let teacher = s.model_id(&case_dir(case).join("teacher.onnx")).await;
    let t = s.get(&format!("/v1/models/{teacher}")).await;
    assert_eq!(t.body["notes"], json!([]), "a float model has no notes");
    let mut students = Vec::new();
    for stem in ["student_qdq", "student_qdq_channel"] {
        let a = s
            .upload_model(&case_dir(case).join(format!("{stem}.onnx")), stem)
            .await;
        assert_eq!(a.status, 201, "{stem}: {}", a.body);
        // The quantized head (QDQ Gemm) stays float arithmetic; the
        // convolutions are folded into integer QLinearConv.
        let notes = a.body["notes"].as_array().unwrap();
        assert_eq!(notes.len(), 1, "{stem}: {notes:?}");
        let note = notes[0].as_str().unwrap();
        assert!(note.contains("float emulation: 1 Gemm quantized"), "{note}");
        students.push(a.body["id"].as_str().unwrap().to_string());
    }
    let report = run_and_compare(&s, case, teacher, students).await;
    // The report carries the note beside the figures it qualifies, and
    // the evaluation's page shows it.
    for c in report["candidates"].as_array().unwrap() {
        assert_eq!(c["model"]["notes"].as_array().map(Vec::len), Some(1), "{c}");
    }
    assert!(report["teacher"]["model"].get("notes").is_none());
    let id = report["evaluation"].as_str().unwrap();
    let page = s
        .request(reqwest::Method::GET, &format!("/evaluations/{id}"))
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    assert!(page.contains("id=\"model-notes\"") && page.contains("float emulation"));
}
