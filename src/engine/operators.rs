//! Which ONNX operators the engine runs, checked on the graph before tract
//! builds it, so that a refusal names the operator and its domain instead
//! of an engine internal.

use std::collections::BTreeSet;

use tract_onnx::model::OnnxOpRegister;
use tract_onnx::pb;

use super::error::{EngineError, EngineResult};

/// The operator sets tract implements: the ONNX standard and its
/// traditional-ML set. tract looks operators up by name alone, so a node of
/// another domain would otherwise run as a standard operator of the same
/// name, or fail deep inside the engine.
const DOMAINS: [&str; 3] = ["", "ai.onnx", "ai.onnx.ml"];

/// The traditional-ML operators tract implements (ONNX-ML operator set);
/// only these may come from `ai.onnx.ml`, and none of them from the
/// standard set. ArrayFeatureExtractor is registered among tract's array
/// operators.
const ML_OPERATORS: [&str; 6] = [
    "ArrayFeatureExtractor",
    "CategoryMapper",
    "LinearClassifier",
    "LinearRegressor",
    "Normalizer",
    "TreeEnsembleClassifier",
];

/// The domain of onnxruntime's contrib operators (QLinearAdd and the like),
/// written by its quantizer in the operator-oriented format.
const CONTRIB: &str = "com.microsoft";

fn invalid(msg: impl Into<String>) -> EngineError {
    EngineError::InvalidModel(msg.into())
}

/// Every node of the graph and of its subgraphs.
fn nodes(graph: &pb::GraphProto) -> Vec<&pb::NodeProto> {
    let mut out = Vec::new();
    let mut stack = vec![graph];
    while let Some(g) = stack.pop() {
        for node in &g.node {
            out.push(node);
            for attr in &node.attribute {
                stack.extend(attr.g.iter().chain(&attr.graphs));
            }
        }
    }
    out
}

/// Refuses operators of a domain the engine does not implement, operators
/// it does not know by name, and ZipMap.
pub(crate) fn check(graph: &pb::GraphProto, known: &OnnxOpRegister) -> EngineResult<()> {
    let all = nodes(graph);
    let foreign: BTreeSet<(&str, &str)> = all
        .iter()
        .filter(|n| !DOMAINS.contains(&n.domain.as_str()))
        .map(|n| (n.domain.as_str(), n.op_type.as_str()))
        .collect();
    if let Some(&(domain, _)) = foreign.iter().next() {
        let ops: Vec<&str> = foreign
            .iter()
            .filter(|(d, _)| *d == domain)
            .map(|(_, op)| *op)
            .collect();
        let hint = if domain == CONTRIB {
            "; these are onnxruntime's own operators: quantize in the QDQ format \
             (quant_format=QuantFormat.QDQ), which uses standard operators only"
        } else {
            ""
        };
        return Err(invalid(format!(
            "the model uses operators of the domain '{domain}' ({}), which the engine does not \
             run: it runs the standard ONNX operators and those of 'ai.onnx.ml'{hint}",
            ops.join(", ")
        )));
    }
    let misplaced: BTreeSet<(&str, &str)> = all
        .iter()
        .filter(|n| (n.domain == "ai.onnx.ml") != ML_OPERATORS.contains(&n.op_type.as_str()))
        .filter(|n| n.op_type != "ZipMap")
        .map(|n| (n.domain.as_str(), n.op_type.as_str()))
        .collect();
    if let Some((domain, op)) = misplaced.into_iter().next() {
        let domain = if domain.is_empty() { "ai.onnx" } else { domain };
        return Err(invalid(format!(
            "the model uses '{op}' of the domain '{domain}', which the engine does not implement \
             in that domain"
        )));
    }
    if all.iter().any(|n| n.op_type == "ZipMap") {
        return Err(invalid(
            "the model ends in ZipMap, which the engine cannot run: export it without ZipMap \
             (e.g. skl2onnx options {'zipmap': False}) or name a tensor output",
        ));
    }
    let unknown: BTreeSet<&str> = all
        .iter()
        .map(|n| n.op_type.as_str())
        .filter(|op| !known.0.contains_key(*op))
        .collect();
    if !unknown.is_empty() {
        return Err(invalid(format!(
            "the model uses ONNX operators the engine does not implement: {}",
            unknown.into_iter().collect::<Vec<_>>().join(", ")
        )));
    }
    Ok(())
}
