use crate::internal::*;
use crate::model::*;
use crate::ops;
use crate::ops::konst::Const;
use crate::optim::OptimizerSession;
use crate::plan::{SimplePlan, SimpleState};
use crate::transform::ModelTransform;
use tract_data::TooEarly;
use tract_num_traits::Zero;

/// A model with completely determined types and shapes.
pub type TypedModel = Graph<TypedFact, Box<dyn TypedOp>>;
/// Node for TypedModel graph
pub type TypedNode = Node<TypedFact, Box<dyn TypedOp>>;
/// A ModelPatch for TypedModel.
pub type TypedModelPatch = ModelPatch<TypedFact, Box<dyn TypedOp>>;
/// An execution plan for TypedModel.
pub type TypedSimplePlan = SimplePlan<TypedFact, Box<dyn TypedOp>>;
/// A runnable TypedModel (new name for SimplePlan).
pub type TypedRunnableModel = RunnableModel<TypedFact, Box<dyn TypedOp>>;
/// An execution state for TypedModel.
pub type TypedSimpleState = SimpleState<TypedFact, Box<dyn TypedOp>>;
/// A runnable model with fixed inputs and outputs.
pub type RunnableModel<F, O> = SimplePlan<F, O>;

/// Property key recording how far through the pipeline a graph went.
pub const TRACT_STAGE: &str = "tract.stage";

/// [`TRACT_STAGE`] value set by [`TypedModel::optimize_with_session`].
pub const STAGE_OPTIMIZED: &str = "optimized";

/// Property key holding the mnemonic an application knows this graph by.
pub const TRACT_NAME: &str = "tract.name";

/// Whether `properties` carry [`TRACT_STAGE`] = [`STAGE_OPTIMIZED`], marking a
/// graph the optimizer already lowered to target-specific ops.
pub fn stage_is_optimized(properties: &HashMap<String, Arc<Tensor>>) -> bool {
    properties
        .get(TRACT_STAGE)
        .and_then(|t| t.as_plain_ram()?.to_scalar::<String>().ok())
        .is_some_and(|s| s == STAGE_OPTIMIZED)
}

impl SpecialOps<TypedFact, Box<dyn TypedOp>> for TypedModel {
    fn is_source(op: &Box<dyn TypedOp>) -> bool {
        op.as_op().downcast_ref::<ops::source::TypedSource>().is_some()
    }

    fn create_dummy(&self) -> Box<dyn TypedOp> {
        Box::new(crate::ops::dummy::Dummy::new())
    }

    fn create_source(&self, fact: TypedFact) -> Box<dyn TypedOp> {
        Box::new(crate::ops::source::TypedSource::new(fact))
    }

    fn wire_node(
        &mut self,
        name: impl Into<String>,
        op: impl Into<Box<dyn TypedOp>>,
        inputs: &[OutletId],
    ) -> TractResult<TVec<OutletId>> {
        let op = op.into();
        let name = name.into();
        if let Some(konst) = op.downcast_ref::<Const>() {
            for node in &self.nodes {
                if node.op_as::<Const>().is_some_and(|other| other == konst) {
                    return Ok(tvec!(node.id.into()));
                }
            }
        }
        if self.nodes.iter().any(|n| n.name == name) {
            bail!("Duplicate node name: {name}");
        }
        {
            let input_facts = inputs
                .iter()
                .map(|o| self.outlet_fact(*o).cloned())
                .collect::<TractResult<TVec<_>>>()?;

            let input_facts: TVec<_> = input_facts.iter().collect();
            let mut output_facts = op
                .output_facts(&input_facts)
                .with_context(|| format!("in output_facts invocation for {name}: {}", op.name()))?;

            #[cfg(all(debug_assertions, feature = "paranoid_assertions"))]
            for o in &output_facts {
                o.consistent()?;
            }

            if input_facts.len() > 0
                && let Some(tensors) = input_facts
                    .iter()
                    .map(|f| {
                        f.konst
                            .as_ref()
                            .filter(|k| k.volume() < 16 && k.is_plain_ram())
                            .cloned()
                            .map(|t| t.into_tvalue())
                    })
                    .collect::<Option<TVec<_>>>()
                && let Ok(Some(outputs)) = op.eval_out_of_plan(tensors)
            {
                return outputs
                    .into_iter()
                    .enumerate()
                    .map(|(ix, o)| {
                        let name = if ix == 0 { name.clone() } else { format!("{name}.{ix}") };
                        self.wire_node(
                            name.clone(),
                            Const::new_with_opt_exotic_fact(
                                o.into_tensor().into(),
                                output_facts[ix].exotic_fact.clone(),
                            )?,
                            &[],
                        )
                        .with_context(|| format!("Eager const-folding {name}"))
                        .map(|vec| vec[0])
                    })
                    .collect::<TractResult<TVec<OutletId>>>();
            }

            for fact in &mut output_facts {
                if fact.konst.is_none()
                    && fact.exotic_fact.is_none()
                    && fact.shape.is_concrete()
                    && fact.shape.volume().is_zero()
                {
                    let tensor =
                        Tensor::zero_dt(fact.datum_type, fact.shape.as_concrete().unwrap())?;
                    fact.konst = Some(tensor.into_arc_tensor());
                }
            }
            let id = self.add_node(&name, &op, output_facts)?;
            inputs
                .iter()
                .enumerate()
                .try_for_each(|(ix, i)| self.add_edge(*i, InletId::new(id, ix)))?;
            TractResult::Ok(
                self.node(id)
                    .outputs
                    .iter()
                    .enumerate()
                    .map(|(ix, _)| OutletId::new(id, ix))
                    .collect(),
            )
        }
        .with_context(|| format!("Wiring node \"{name}\", {op:?}"))
    }

    fn add_const(
        &mut self,
        name: impl Into<String>,
        v: impl IntoArcTensor,
    ) -> TractResult<OutletId> {
        let v = v.into_arc_tensor();
        for node in &self.nodes {
            if node.op_is::<Const>() && node.outputs[0].fact.konst.as_ref() == Some(&v) {
                return Ok(node.id.into());
            }
        }
        let fact = TypedFact::try_from(v.clone())?;
        let name = self.unique_name(name.into()).into_owned();
        let op = if let Some(exotic) = &fact.exotic_fact {
            crate::ops::konst::Const::new_with_exotic_fact(v, exotic.clone())?
        } else {
            crate::ops::konst::Const::new(v)?
        };
        self.add_node(name, op, tvec!(fact)).map(|id| id.into())
    }
}

impl TypedModel {
    /// The mnemonic this graph is known by, from the [`TRACT_NAME`] property.
    pub fn name(&self) -> Option<&str> {
        let name = self.properties.get(TRACT_NAME)?;
        Some(name.as_plain_ram()?.to_scalar::<String>().ok()?)
    }

    /// Set the [`TRACT_NAME`] property.
    pub fn set_name(&mut self, name: impl Into<String>) {
        self.properties.insert(TRACT_NAME.to_string(), rctensor0(name.into()));
    }

    pub fn into_optimized(mut self) -> TractResult<TypedModel> {
        self.declutter()?;
        self.optimize()?;
        Ok(self)
    }
    #[cfg(not(all(debug_assertions, feature = "paranoid_assertions")))]
    #[inline]
    pub fn check_consistency(&self) -> TractResult<()> {
        Ok(())
    }

    #[cfg(all(debug_assertions, feature = "paranoid_assertions"))]
    pub fn check_consistency(&self) -> TractResult<()> {
        self.check_edges()?;
        for node_id in &self.eval_order()? {
            let input_facts = self.node_input_facts(*node_id)?;
            let node = &self.nodes[*node_id];
            if node.id != *node_id {
                bail!("Node at position {} has id {}", node_id, node.id);
            }
            let output_facts = node.op.output_facts(&input_facts)?;
            if node.outputs.len() != output_facts.len() {
                bail!(
                    "Inconsistent model, node output count mismatch. Op says {}, node says {}. {}",
                    output_facts.len(),
                    node.outputs.len(),
                    node
                );
            }
            if node
                .outputs
                .iter()
                .map(|o| &o.fact)
                .zip(output_facts.iter())
                .any(|(a, b)| a.datum_type != b.datum_type || a.shape != b.shape)
            {
                bail!(
                    "Inconsistent model, output types mismatch. Op says: {:?}, node says: {:?}. {} with inputs {:?}. {}",
                    output_facts,
                    node.outputs.iter().map(|o| &o.fact).collect::<Vec<_>>(),
                    node,
                    input_facts,
                    node
                )
            }
        }
        for node in &self.nodes {
            for (ix, output) in node.outputs.iter().enumerate() {
                output.fact.consistent().with_context(|| {
                    format!("Inconsistent fact {:?}: {:?}", OutletId::new(node.id, ix), output.fact)
                })?
            }
        }
        self.axes_mapping().context("Checking model axes mapping")?;
        Ok(())
    }

    /// Re-run `output_facts` for every node in topological order, updating stored facts in-place.
    ///
    /// Call this after operations that rewire graph topology (e.g. `TypedModelPatch::apply`)
    /// without rebuilding the model, so that derived fact fields like `uniform_tdim` reflect
    /// the new input facts.
    pub fn refresh_output_facts(&mut self) -> TractResult<()> {
        let order = self.eval_order()?;
        for node_id in order {
            let output_facts = {
                let input_facts = self.node_input_facts(node_id)?;
                self.nodes[node_id].op.output_facts(&input_facts)?
            };
            for (ix, fact) in output_facts.into_iter().enumerate() {
                self.set_outlet_fact(OutletId::new(node_id, ix), fact)?;
            }
        }
        Ok(())
    }

    pub fn into_decluttered(mut self) -> TractResult<TypedModel> {
        self.declutter()?;
        Ok(self)
    }

    /// Perform declutter passes on the network.
    pub fn transform(&mut self, transform: &dyn ModelTransform) -> TractResult<()> {
        transform.transform(self)
    }

    /// Perform declutter passes on the network.
    pub fn declutter(&mut self) -> TractResult<()> {
        crate::optim::Optimizer::declutter().session().optimize(self)
    }

    /// Perform optimization passes on the model, using a given optimizer session.
    pub fn optimize_with_session(&mut self, session: &mut OptimizerSession) -> TractResult<()> {
        session.optimize(self)?;
        self.properties.insert(TRACT_STAGE.to_string(), rctensor0(STAGE_OPTIMIZED.to_string()));
        Ok(())
    }

    /// Bind one or more symbols to concrete values or TDim expressions across
    /// the whole graph.
    pub fn set_symbols(&self, subs: &HashMap<Symbol, TDim>) -> TractResult<TypedModel> {
        crate::model::translator::Translate::translate_model(subs, self)
    }

    pub fn prop_consts(&mut self) -> TractResult<()> {
        crate::optim::Optimizer::prop_consts().optimize(self)
    }

    /// Translate the graph to locally optimized operators (LIR or MIR ops).
    pub fn optimize(&mut self) -> TractResult<()> {
        self.optimize_with_session(&mut crate::optim::Optimizer::codegen().session())
    }

    pub fn node_axes_mapping(&self, id: usize) -> TractResult<AxesMapping> {
        let (inputs, outputs) = self.node_facts(id)?;
        self.nodes[id].op.axes_mapping(&inputs, &outputs)
    }

    pub fn axes_mapping(&self) -> TractResult<AxesMapping> {
        crate::axes::for_model(self)
    }

    pub fn compute_const_facts(&mut self) -> TractResult<()> {
        for n in self.eval_order()? {
            let node = self.node(n);
            let (inputs, outputs) = self.node_facts(n)?;
            if inputs.iter().all(|i| i.konst.as_ref().is_some_and(|k| k.is_plain_ram()))
                && outputs.iter().any(|o| o.konst.is_none())
            {
                let inputs_ref =
                    inputs.iter().map(|f| f.konst.clone().unwrap().into_tvalue()).collect();
                match node.op.eval_out_of_plan(inputs_ref) {
                    Ok(None) => (),
                    Ok(Some(res)) => {
                        drop(inputs);
                        drop(outputs);
                        for (ix, output) in res.into_iter().enumerate() {
                            self.nodes[n].outputs[ix].fact.konst = Some(output.into_arc_tensor());
                        }
                    }
                    Err(e) => {
                        if !e.root_cause().is::<TooEarly>() {
                            Err(e).with_context(|| {
                                format!("Eager eval {} during const fact computation", self.node(n))
                            })?;
                        }
                    }
                }
            }
        }
        Ok(())
    }
}

use crate::model::translator::Translate;
impl Translate<TypedFact, Box<dyn TypedOp>, TypedFact, Box<dyn TypedOp>> for HashMap<Symbol, TDim> {
    fn translate_node(
        &self,
        source: &TypedModel,
        node: &TypedNode,
        target: &mut TypedModel,
        mapping: &HashMap<OutletId, OutletId>,
    ) -> TractResult<TVec<OutletId>> {
        target.check_consistency()?;
        let outlets = node.op.set_symbols(source, node, target, mapping, self)?;
        for &outlet in &outlets {
            let fact = &mut target.nodes[outlet.node].outputs[outlet.slot].fact;
            if fact.shape.volume().is_zero()
                && let Some(shape) = fact.shape.as_concrete()
            {
                let tensor = Tensor::zero_dt(fact.datum_type, shape)?;
                fact.konst = Some(tensor.into_arc_tensor());
            }
            fact.consistent()?;
        }
        Ok(outlets)
    }
}

#[cfg(test)]
mod test {
    use super::*;

    #[test]
    fn test() {
        fn is_sync<T: Sync>() {}
        is_sync::<TypedModel>();
    }

    #[test]
    fn add_const_does_not_reuse_a_taken_name() {
        let mut model = TypedModel::default();
        let first = model.add_const("konst", tensor1(&[0.0f32])).unwrap();
        let second = model.add_const("konst", tensor1(&[1.0f32])).unwrap();
        assert_ne!(first.node, second.node);
        assert_ne!(model.node(first.node).name, model.node(second.node).name);
    }

    #[test]
    fn add_const_still_shares_an_identical_value() {
        let mut model = TypedModel::default();
        let first = model.add_const("a", tensor1(&[0.0f32])).unwrap();
        let second = model.add_const("b", tensor1(&[0.0f32])).unwrap();
        assert_eq!(first.node, second.node);
    }
}
