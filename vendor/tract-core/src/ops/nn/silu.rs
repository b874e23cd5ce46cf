use crate::internal::*;
use crate::ops::element_wise::ElementWiseOp;
use crate::ops::math::Mul;
use crate::ops::nn::Sigmoid;

use tract_data::half::f16;
use tract_linalg::routines::Func;

element_wise!(silu, Silu,
    [f16] => |_, xs| { Func::Silu.ew_f16()?.run(xs) },
    [f32] => |_, xs| { Func::Silu.ew_f32()?.run(xs) };
    cost: |dt| {tvec!((Cost::FMA(dt), 12), (Cost::Div(dt), 1))};
    declutter: detect_silu
);

/// Search pattern => A = A * SIGMOID(A)
pub fn detect_silu(model: &TypedModel, node: &TypedNode) -> TractResult<Option<TypedModelPatch>> {
    rule_if!(node.op_as::<ElementWiseOp>().is_some_and(|op| op.0.is::<Sigmoid>()));

    let in_fact = model.node_input_facts(node.id)?[0];
    let dt = in_fact.datum_type;

    // Only F16 and F32 is supported.
    rule_if!(matches!(dt, DatumType::F32 | DatumType::F16));

    // Identify Mul successor: Sigmoid(A) * A
    rule_if_some!(mul_succ = model.find_succ_bin_with_outlet::<Mul>(node, &node.inputs[0]));

    let mut patch = TypedModelPatch::default();
    let silu_input = patch.taps(model, &node.inputs)?;
    let out = patch.wire_node(format!("{}.silu", node.name), silu(), &silu_input)?;
    patch.shunt_outside(model, mul_succ.id.into(), out[0])?;
    Ok(Some(patch))
}
