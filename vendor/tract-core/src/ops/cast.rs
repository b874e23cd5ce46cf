use crate::internal::*;
use crate::ops::array::MultiBroadcastTo;

pub fn cast(to: DatumType) -> Cast {
    Cast { to }
}

pub fn wire_cast(
    prefix: impl AsRef<str>,
    target: &mut TypedModel,
    inputs: &[OutletId],
    operating_datum_type: DatumType,
) -> TractResult<TVec<OutletId>> {
    let prefix = prefix.as_ref();
    let mut wires = tvec!();
    for mut wire in inputs.iter().copied() {
        if target.outlet_fact(wire)?.datum_type != operating_datum_type {
            wire = target.wire_node(
                target.unique_name(format!("{prefix}.cast")),
                crate::ops::cast::cast(operating_datum_type),
                &[wire],
            )?[0];
        }
        wires.push(wire);
    }
    Ok(wires)
}

#[derive(Debug, Clone, new, Hash, PartialEq, Eq)]
pub struct Cast {
    pub to: DatumType,
}

impl Op for Cast {
    fn name(&self) -> StaticName {
        "Cast".into()
    }

    op_as_typed_op!();
}

impl EvalOp for Cast {
    op_out_of_plan!();

    fn eval(&self, ctx: &EvalContext, inputs: TVec<TValue>) -> TractResult<TVec<TValue>> {
        let input = args_1!(inputs);
        if input.datum_type() == self.to {
            Ok(tvec!(input))
        } else if input.datum_type() == TDim::datum_type() {
            let mut tmp = Tensor::zero_dt(i64::datum_type(), input.shape())?;
            let input_plain = input.try_as_plain_ram()?;
            let mut tmp_plain = tmp.try_as_plain_ram_mut()?;
            for (dim, i) in tract_itertools::izip!(
                input_plain.as_slice::<TDim>()?,
                tmp_plain.as_slice_mut::<i64>()?
            ) {
                *i = dim.eval(ctx.symbols).to_i64()?
            }
            Ok(tvec!(tmp.cast_to_dt(self.to)?.into_owned().into_tvalue()))
        } else {
            Ok(tvec!(input.cast_to_dt(self.to)?.into_owned().into_tvalue()))
        }
    }
}

impl TypedOp for Cast {
    fn output_facts(&self, inputs: &[&TypedFact]) -> TractResult<TVec<TypedFact>> {
        let mut fact = self.to.fact(inputs[0].shape.clone());
        fact.uniform_tdim = inputs[0].uniform_tdim.clone();
        if fact.uniform_tdim.is_none() {
            // a symbolic scalar konst or uniform keeps its value as metadata:
            // the concrete cast cannot evaluate it, but downstream consumers
            // (a Range limit, say) can still reason about it
            for t in
                [inputs[0].uniform.as_deref(), inputs[0].konst.as_deref()].into_iter().flatten()
            {
                if t.datum_type() == TDim::datum_type() && t.volume() == 1 {
                    fact.uniform_tdim = Some(
                        t.try_as_plain_ram()?.to_scalar::<TDim>()?.eval(&SymbolValues::default()),
                    );
                    break;
                }
            }
        }
        if let Some(u) = &inputs[0].uniform
            && let Ok(cast_u) = u.cast_to_dt(self.to)
        {
            fact.uniform = Some(std::sync::Arc::new(cast_u.into_owned()));
        }
        Ok(tvec!(fact))
    }

    fn input_roi(
        &self,
        model: &TypedModel,
        node: &TypedNode,
    ) -> TractResult<Option<TVec<Option<TDim>>>> {
        crate::optim::propagate_roi::bubble_roi(model, node)
    }

    fn declutter(
        &self,
        model: &TypedModel,
        node: &TypedNode,
    ) -> TractResult<Option<TypedModelPatch>> {
        if model.outlet_fact(node.inputs[0])?.datum_type == self.to {
            return TypedModelPatch::shunt_one_op(model, node);
        }
        // linear_prec (fan-in=1, fan-out=1) rather than single_prec: swapping
        // through a fan-out predecessor clones it, and the clone breaks
        // downstream pattern detectors (e.g. Square+Reduce<Sum>+Mul fusion into
        // Reduce<MeanOfSquares>, which then feeds RmsNorm detection).
        //
        // AxisOp is intentionally NOT in the predicate: pulling Cast above an
        // AxisOp (Reshape/Move/Add/Rm) prevents the CUDA conversion from
        // fusing the post-AxisOp Cast into the downstream GEMM-class kernel,
        // leaving ~64 standalone CudaCast ops on OpenELM-270M (TG128 -4%).
        if let Some(prec) = model.linear_prec(node.id)?
            && (prec.op_is::<IntoShape>() || prec.op_is::<MultiBroadcastTo>())
        {
            let mut patch = TypedModelPatch::default();
            let mut wire = tvec!(patch.tap_model(model, prec.inputs[0])?);
            wire = patch.wire_node(&node.name, &node.op, &wire)?;
            wire = patch.wire_node(&prec.name, &prec.op, &wire)?;
            patch.shunt_outside(model, node.id.into(), wire[0])?;
            return Ok(Some(patch));
        }
        Ok(None)
    }

    fn axes_mapping(
        &self,
        inputs: &[&TypedFact],
        outputs: &[&TypedFact],
    ) -> TractResult<AxesMapping> {
        AxesMapping::natural(inputs, outputs)
    }

    fn change_axes(
        &self,
        model: &TypedModel,
        node: &TypedNode,
        _io: InOut,
        change: &AxisOp,
    ) -> TractResult<Option<AxisChangeConsequence>> {
        Ok(Some(AxisChangeConsequence::new(model, node, None, change)))
    }

    fn slice(
        &self,
        patch: &mut TypedModelPatch,
        _model: &TypedModel,
        node: &TypedNode,
        _prefix: &str,
        inputs: &[OutletId],
        _output_axis: usize,
        _start: &TDim,
        _end: &TDim,
    ) -> TractResult<Option<TVec<OutletId>>> {
        patch.wire_node(&node.name, &node.op, inputs).map(Some)
    }

    as_op!();
}
