//! Models as the usual exporters write them (tests/reference/exports.py):
//! the engine's outputs against onnxruntime's, the operators it refuses,
//! and how quantized models are run.

use proctor::engine::evaluate::model_scores;
use proctor::engine::model::Model;
use proctor::engine::{EngineError, inspect_model, npy};
use prost::Message;
use tract_onnx::pb;

use crate::support::{ENGINES_F32, case_dir, expected};

/// onnxruntime's scored output of `stem`, as the generator saved it; the
/// dynamically quantized student depends on the batch, so it is compared
/// at the engine's batch of 32.
fn reference(case: &str, stem: &str) -> (Vec<usize>, Vec<f64>) {
    let file = if stem == "student_dynamic" {
        "student_dynamic_batch32".to_string()
    } else {
        stem.to_string()
    };
    npy::read_f64(&case_dir(case).join(format!("ort/{file}.npy"))).unwrap()
}

#[test]
fn tract_reproduces_onnxruntime_on_exported_models() {
    for case in ["torch_external", "tabular_tree", "int8"] {
        let exp = expected(case);
        for (stem, info) in exp["models"].as_object().unwrap() {
            let dir = case_dir(case);
            let path = dir.join(info["file"].as_str().unwrap());
            let got = model_scores(&path, &dir.join("data.npz"), 32, None)
                .unwrap_or_else(|e| panic!("{case}/{stem}: {e}"));
            let (shape, want) = reference(case, stem);
            assert_eq!(vec![got.n, got.c], shape, "{case}/{stem}: shape");
            for (i, (g, w)) in got.data.iter().zip(&want).enumerate() {
                assert!(
                    ENGINES_F32.accepts(*g, *w),
                    "{case}/{stem}: element {i}: tract {g}, onnxruntime {w}"
                );
            }
        }
    }
}

#[test]
fn qdq_convolutions_run_on_integer_kernels_and_match_onnxruntime_exactly() {
    // onnxruntime runs a QDQ convolution as QLinearConv; folded the same
    // way, the engine's logits are the same multiples of the output step.
    for stem in ["student_qdq", "student_qdq_channel"] {
        let dir = case_dir("int8");
        let got = model_scores(
            &dir.join(format!("{stem}.onnx")),
            &dir.join("data.npz"),
            32,
            None,
        )
        .unwrap();
        let (_, want) = reference("int8", stem);
        assert_eq!(got.data, want, "{stem}");
    }
}

#[test]
fn only_quantized_operators_left_in_float_are_noted() {
    let dir = case_dir("int8");
    let float = inspect_model(&dir.join("float_student_qdq.onnx")).unwrap();
    assert!(float.notes.is_empty(), "{:?}", float.notes);
    let qdq = inspect_model(&dir.join("student_qdq.onnx")).unwrap();
    assert_eq!(qdq.notes.len(), 1, "{:?}", qdq.notes);
    assert!(
        qdq.notes[0].contains(": 1 Gemm quantized"),
        "{}",
        qdq.notes[0]
    );
    // Integer operators (DynamicQuantizeLinear, ConvInteger, MatMulInteger)
    // run as integers already.
    let dynamic = inspect_model(&dir.join("student_dynamic.onnx")).unwrap();
    assert!(dynamic.notes.is_empty(), "{:?}", dynamic.notes);
}

/// The mlp teacher with its first node moved to another domain and renamed.
fn with_first_node(domain: &str, op_type: &str) -> Vec<u8> {
    let bytes = std::fs::read(case_dir("mlp").join("teacher.onnx")).unwrap();
    let mut model = pb::ModelProto::decode(bytes.as_slice()).unwrap();
    let node = &mut model.graph.as_mut().unwrap().node[0];
    node.domain = domain.into();
    node.op_type = op_type.into();
    model.encode_to_vec()
}

fn refusal(bytes: &[u8]) -> String {
    match Model::from_bytes(bytes) {
        Err(EngineError::InvalidModel(m)) => m,
        other => panic!("expected a refused model, got {other:?}"),
    }
}

#[test]
fn contrib_operators_are_refused_naming_their_domain_and_the_qdq_format() {
    let msg = refusal(&with_first_node("com.microsoft", "QLinearAdd"));
    assert!(
        msg.contains("'com.microsoft'") && msg.contains("QLinearAdd"),
        "{msg}"
    );
    assert!(msg.contains("QDQ"), "{msg}");
    assert!(!msg.contains("ToTypedTranslator"), "{msg}");
}

#[test]
fn a_standard_name_in_another_domain_is_not_run_as_the_standard_operator() {
    // tract looks operators up by name alone; Gemm of a custom domain must
    // not run as ONNX Gemm.
    let msg = refusal(&with_first_node("example.custom", "Gemm"));
    assert!(msg.contains("'example.custom'"), "{msg}");
}

#[test]
fn a_standard_operator_is_not_taken_from_the_ml_domain() {
    // Relu is no operator of the ONNX-ML set (onnx/docs/Operators-ml.md).
    let msg = refusal(&with_first_node("ai.onnx.ml", "Relu"));
    assert!(
        msg.contains("'Relu'") && msg.contains("'ai.onnx.ml'"),
        "{msg}"
    );
}

#[test]
fn an_unknown_operator_is_named() {
    let msg = refusal(&with_first_node("", "NoSuchOperator"));
    assert!(
        msg.contains("NoSuchOperator") && msg.contains("does not implement"),
        "{msg}"
    );
}

#[test]
fn a_bias_at_another_scale_than_x_scale_times_w_scale_is_not_folded() {
    // QLinearConv's bias is int32 at x_scale * w_scale (ONNX operator
    // specification); a model whose bias scale differs keeps its float
    // convolution, and the note says so.
    let bytes = std::fs::read(case_dir("int8").join("student_qdq.onnx")).unwrap();
    let mut model = pb::ModelProto::decode(bytes.as_slice()).unwrap();
    let g = model.graph.as_mut().unwrap();
    let int32 = pb::tensor_proto::DataType::Int32 as i32;
    let biases: Vec<String> = g
        .initializer
        .iter()
        .filter(|t| t.data_type == int32)
        .map(|t| t.name.clone())
        .collect();
    let scales: Vec<String> = g
        .node
        .iter()
        .filter(|n| n.op_type == "DequantizeLinear" && biases.contains(&n.input[0]))
        .map(|n| n.input[1].clone())
        .collect();
    assert!(!scales.is_empty(), "the fixture quantizes its biases");
    for t in g
        .initializer
        .iter_mut()
        .filter(|t| scales.contains(&t.name))
    {
        let doubled: Vec<u8> = t
            .raw_data
            .chunks_exact(4)
            .flat_map(|b| (2.0 * f32::from_le_bytes([b[0], b[1], b[2], b[3]])).to_le_bytes())
            .collect();
        t.raw_data = doubled;
    }
    let m = Model::from_bytes(&model.encode_to_vec()).unwrap();
    assert!(m.info.notes[0].contains("Conv"), "{:?}", m.info.notes);
}
