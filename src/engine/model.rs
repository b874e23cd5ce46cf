//! ONNX models through tract: loading, introspection and planning.
//!
//! Every call into tract is guarded: malformed graphs can make it panic, and a
//! panic must become a typed error, never a crash. Tensors stored as ONNX
//! external data are refused before tract sees the model, so Proctor never
//! reads a file that a model names (bundles are inlined first, in `bundle`).

use std::collections::HashMap;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::Path;
use std::sync::Arc;

use serde::{Deserialize, Serialize};
use tract_onnx::pb;
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::Cost;

use super::bundle::{for_each_tensor, is_external};
use super::error::{EngineError, EngineResult};
use super::fit::{Classes, OutputFacts, Scored, choose_output};
use super::logits::class_count;
use super::{operators, quantized};

/// One axis of a tensor: a size, or the name of a symbolic dimension.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum Dim {
    Fixed(usize),
    Symbol(String),
}

/// A model input or output as the API shows it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct TensorSpec {
    pub name: String,
    pub dtype: String,
    pub shape: Vec<Dim>,
}

/// What an upload check learns about a model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ModelInfo {
    pub parameters: u64,
    /// Multiply-accumulates for one sample, from tract's cost model; `None`
    /// when it depends on a dimension other than the batch axis or tract
    /// cannot tell.
    pub macs: Option<u64>,
    pub opset: Option<i64>,
    pub producer: String,
    pub inputs: Vec<TensorSpec>,
    pub outputs: Vec<TensorSpec>,
    /// Bytes the upload held outside the graph as ONNX external data (a
    /// bundle's data files), 0 for a self-contained upload.
    #[serde(default)]
    pub external_data: u64,
    /// What a reader of the model's figures should know about how the
    /// engine runs it, e.g. that its latency reflects float emulation.
    #[serde(default)]
    pub notes: Vec<String>,
}

/// How the first axis of a model's inputs may be filled.
#[derive(Debug, Clone, PartialEq)]
pub enum BatchAxis {
    /// A symbolic batch axis: any batch size plans.
    Symbolic(Symbol),
    /// Fixed to this size (1 runs sample by sample; other sizes are refused).
    Fixed(usize),
}

/// A loaded, typed and decluttered model, ready to be planned per batch size.
#[derive(Debug)]
pub struct Model {
    pub info: ModelInfo,
    typed: TypedModel,
    pub batch: BatchAxis,
}

/// A runnable plan for one batch size, shared between threads.
#[derive(Debug, Clone)]
pub struct Plan {
    pub(crate) runnable: Arc<TypedRunnableModel>,
    pub batch: usize,
}

fn invalid(msg: impl Into<String>) -> EngineError {
    EngineError::InvalidModel(msg.into())
}

/// Runs `f`, turning tract errors and panics into typed errors.
pub(crate) fn guarded<T>(what: &str, f: impl FnOnce() -> TractResult<T>) -> EngineResult<T> {
    match catch_unwind(AssertUnwindSafe(f)) {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(e)) => Err(invalid(format!("{what}: {e:#}"))),
        Err(panic) => {
            let msg = panic
                .downcast_ref::<String>()
                .map(String::as_str)
                .or_else(|| panic.downcast_ref::<&str>().copied())
                .unwrap_or("no message");
            if msg.contains("allocate") || msg.contains("capacity overflow") {
                return Err(invalid(format!(
                    "{what}: the model needs more memory than an evaluation may use ({msg})"
                )));
            }
            Err(invalid(format!(
                "{what}: the engine failed on this graph ({msg})"
            )))
        }
    }
}

impl Model {
    pub fn load(path: &Path) -> EngineResult<Model> {
        let bytes = std::fs::read(path).map_err(EngineError::io("reading the model"))?;
        Self::from_bytes(&bytes)
    }

    pub fn from_bytes(bytes: &[u8]) -> EngineResult<Model> {
        let proto = <pb::ModelProto as prost::Message>::decode(bytes)
            .map_err(|e| invalid(format!("not an ONNX model: {e}")))?;
        Self::from_proto(proto)
    }

    /// Loads a decoded model (a bundle's, once its data is inlined).
    pub fn from_proto(mut proto: pb::ModelProto) -> EngineResult<Model> {
        let onnx = tract_onnx::onnx();
        refuse_external_data(&mut proto)?;
        let graph = proto
            .graph
            .as_ref()
            .ok_or_else(|| invalid("the ONNX model has no graph"))?;
        operators::check(graph, &onnx.op_register)?;
        // Counted on the model as uploaded, before any rewrite.
        let parameters = count_parameters(graph);
        quantized::fold(&mut proto);
        let notes = quantized::notes(&proto);
        let graph = proto.graph.as_ref().expect("folding keeps the graph");
        let initializers: std::collections::HashSet<&str> =
            graph.initializer.iter().map(|t| t.name.as_str()).collect();
        let declared: Vec<&pb::ValueInfoProto> = graph
            .input
            .iter()
            .filter(|i| !initializers.contains(i.name.as_str()))
            .collect();

        let mut model = guarded("the engine cannot load this ONNX graph", || {
            onnx.model_for_proto_model(&proto)
        })?;
        let shapes = name_input_axes(&declared)?;
        let mut inputs = Vec::with_capacity(declared.len());
        for (ix, (value, dims)) in declared.iter().zip(&shapes).enumerate() {
            let dt = input_datum_type(value)?;
            let tdims: Vec<TDim> = dims
                .iter()
                .map(|d| match d {
                    Dim::Fixed(n) => TDim::from(*n as i64),
                    Dim::Symbol(s) => model.symbols.sym(s).into(),
                })
                .collect();
            guarded("the engine cannot set this model's input", || {
                model.set_input_fact(ix, InferenceFact::dt_shape(dt, tdims))
            })?;
            inputs.push(TensorSpec {
                name: value.name.clone(),
                dtype: numpy_name(dt)?.to_string(),
                shape: dims.clone(),
            });
        }
        let typed = guarded("the engine cannot type this graph", || {
            model.into_typed()?.into_decluttered()
        })?;
        let batch = batch_axis(&typed, &shapes)?;
        let outputs = output_specs(&typed)?;
        let info = ModelInfo {
            parameters,
            macs: None,
            opset: proto
                .opset_import
                .iter()
                .find(|o| o.domain.is_empty() || o.domain == "ai.onnx")
                .map(|o| o.version),
            producer: [
                proto.producer_name.as_str(),
                proto.producer_version.as_str(),
            ]
            .join(" ")
            .trim()
            .to_string(),
            inputs,
            outputs,
            external_data: 0,
            notes,
        };
        let mut model = Model { info, typed, batch };
        model.info.macs = model.macs_per_sample(&HashMap::new());
        Ok(model)
    }

    /// The scored output for a request's choice (`None`: the default rule),
    /// with the set's dimensions bound so that every shape is known.
    pub fn scored_output(
        &self,
        requested: Option<&str>,
        dims: &HashMap<String, usize>,
        label: &str,
    ) -> EngineResult<Scored> {
        let shapes = (0..self.info.outputs.len())
            .map(|ix| self.output_shape(1, dims, ix).ok())
            .collect::<Vec<_>>();
        let facts: Vec<OutputFacts<'_>> = self
            .info
            .outputs
            .iter()
            .zip(&shapes)
            .map(|(o, shape)| OutputFacts {
                name: &o.name,
                float: matches!(o.dtype.as_str(), "float16" | "float32" | "float64"),
                classes: match shape {
                    Some(s) => match class_count(s) {
                        Ok(c) => Classes::Squeezes(c),
                        Err(_) => Classes::DoesNot,
                    },
                    None => Classes::DoesNot,
                },
                shape: format!("{:?}", shape.as_deref().unwrap_or_default()),
            })
            .collect();
        choose_output(&facts, requested, label)?.ok_or_else(|| {
            invalid(format!(
                "model '{label}': the shape of its outputs cannot be worked out from the set"
            ))
        })
    }

    /// Every symbol's value: the batch axis, then the set's other dimensions.
    fn bindings(&self, batch: usize, dims: &HashMap<String, usize>) -> Vec<(Symbol, i64)> {
        let mut out = Vec::new();
        if let BatchAxis::Symbolic(s) = &self.batch {
            out.push((s.clone(), batch as i64));
        }
        for (name, v) in dims {
            if let Some(s) = self.typed.symbols.get(name) {
                out.push((s, *v as i64));
            }
        }
        out
    }

    fn symbol_values(&self, batch: usize, dims: &HashMap<String, usize>) -> SymbolValues {
        let mut values = SymbolValues::default();
        for (s, v) in self.bindings(batch, dims) {
            values.set(&s, v);
        }
        values
    }

    /// MACs for one sample with the given non-batch dimensions.
    pub fn macs_per_sample(&self, dims: &HashMap<String, usize>) -> Option<u64> {
        let values = self.symbol_values(1, dims);
        let total = guarded("cost", || {
            let mut total = TDim::from(0i64);
            for node in self.typed.nodes() {
                let inputs = self.typed.node_input_facts(node.id)?;
                for (cost, count) in node.op.cost(&inputs)? {
                    if matches!(cost, Cost::FMA(_)) {
                        total += count;
                    }
                }
            }
            total
                .eval(&values)
                .to_i64()
                .map_err(|e| anyhow::anyhow!("{e:?}"))
        })
        .ok()?;
        let per_batch = u64::try_from(total).ok()?;
        match self.batch {
            BatchAxis::Fixed(b) if b > 1 => Some(per_batch / b as u64),
            _ => Some(per_batch),
        }
    }

    /// The scored output's shape with every symbol bound, before squeezing.
    pub fn output_shape(
        &self,
        batch: usize,
        dims: &HashMap<String, usize>,
        output: usize,
    ) -> EngineResult<Vec<usize>> {
        let values = self.symbol_values(batch, dims);
        let outlet = self
            .typed
            .output_outlets()
            .map_err(|e| invalid(e.to_string()))?[output];
        let fact = self
            .typed
            .outlet_fact(outlet)
            .map_err(|e| invalid(e.to_string()))?;
        fact.shape
            .iter()
            .map(|d| {
                d.eval(&values)
                    .to_i64()
                    .ok()
                    .and_then(|v| usize::try_from(v).ok())
                    .ok_or_else(|| {
                        invalid(format!(
                            "the size of output axis '{d}' cannot be worked out from the inputs"
                        ))
                    })
            })
            .collect()
    }

    /// Optimizes the model for one batch size with every symbol bound, keeping
    /// only the scored output. Concrete plans run markedly faster than
    /// symbolic ones in tract.
    pub fn plan(
        &self,
        batch: usize,
        dims: &HashMap<String, usize>,
        output: usize,
    ) -> EngineResult<Plan> {
        if let BatchAxis::Fixed(b) = self.batch
            && b != batch
        {
            return Err(EngineError::Mismatch(format!(
                "the model's batch axis is fixed to {b}, so it cannot run batches of {batch}"
            )));
        }
        let subs: HashMap<Symbol, TDim> = self
            .bindings(batch, dims)
            .into_iter()
            .map(|(s, v)| (s, TDim::from(v)))
            .collect();
        let runnable = guarded("the engine cannot plan this graph", || {
            let mut m = self.typed.clone();
            let outlet = m.output_outlets()?[output];
            m.select_output_outlets(&[outlet])?;
            m.set_symbols(&subs)?.into_optimized()?.into_runnable()
        })?;
        Ok(Plan { runnable, batch })
    }
}

impl Plan {
    /// The matrix-multiply kernels the engine picked for this plan.
    pub fn matmul_kernels(&self) -> Vec<String> {
        use tract_onnx::tract_core::ops::matmul::optimized::OptMatMul;
        let mut names: Vec<String> = self
            .runnable
            .model()
            .nodes()
            .iter()
            .filter_map(|n| n.op_as::<OptMatMul>())
            .flat_map(|op| op.mmm.iter().map(|k| k.name().to_string()))
            .collect();
        names.sort();
        names.dedup();
        names
    }

    /// How the plan computes each convolution: the names of the engine's
    /// convolution ops with their counts, such as `LazyIm2col×3`. Which one
    /// runs decides much of a CNN's speed, and it can differ between the
    /// batch-1 and the bulk plan.
    pub fn convolution_ops(&self) -> Vec<String> {
        const CONV_OPS: [&str; 5] = [
            "Im2col",
            "LazyIm2col",
            "DepthWiseConv",
            "DirectSpatialConv",
            "BlockedConv",
        ];
        let mut counts = std::collections::BTreeMap::<String, usize>::new();
        for node in self.runnable.model().nodes() {
            let name = node.op().name();
            if CONV_OPS.contains(&name.as_ref()) {
                *counts.entry(name.to_string()).or_default() += 1;
            }
        }
        counts
            .into_iter()
            .map(|(op, n)| format!("{op}×{n}"))
            .collect()
    }

    /// Runs the plan once on a full batch of inputs.
    pub fn run(&self, inputs: TVec<TValue>) -> EngineResult<Tensor> {
        let mut out = guarded("the engine failed while running the model", || {
            self.runnable.run(inputs)
        })?;
        let first = out.remove(0);
        Ok(first.into_tensor())
    }
}

/// Gives every input axis a size or a symbol name. Unnamed symbolic axes
/// would get auto-named symbols that tract cannot unify across inputs, so an
/// unnamed first axis becomes the batch symbol and other unnamed axes get a
/// name derived from the input and axis.
fn name_input_axes(declared: &[&pb::ValueInfoProto]) -> EngineResult<Vec<Vec<Dim>>> {
    use pb::tensor_shape_proto::dimension::Value;
    let raw: Vec<Vec<Option<Dim>>> = declared
        .iter()
        .map(|v| {
            let Some(pb::type_proto::Value::TensorType(t)) =
                v.r#type.as_ref().and_then(|t| t.value.as_ref())
            else {
                return Err(invalid(format!("input '{}' is not a tensor", v.name)));
            };
            let shape = t
                .shape
                .as_ref()
                .ok_or_else(|| invalid(format!("input '{}' has no declared shape", v.name)))?;
            Ok(shape
                .dim
                .iter()
                .map(|d| match &d.value {
                    Some(Value::DimValue(n)) if *n >= 0 => Some(Dim::Fixed(*n as usize)),
                    Some(Value::DimParam(s)) if !s.is_empty() => Some(Dim::Symbol(s.clone())),
                    _ => None,
                })
                .collect())
        })
        .collect::<EngineResult<_>>()?;
    let batch_name = raw
        .iter()
        .find_map(|dims| match dims.first() {
            Some(Some(Dim::Symbol(s))) => Some(s.clone()),
            _ => None,
        })
        .unwrap_or_else(|| "batch".to_string());
    Ok(raw
        .into_iter()
        .zip(declared)
        .map(|(dims, v)| {
            dims.into_iter()
                .enumerate()
                .map(|(axis, d)| match d {
                    Some(d) => d,
                    None if axis == 0 => Dim::Symbol(batch_name.clone()),
                    None => Dim::Symbol(format!("{}_axis{axis}", v.name)),
                })
                .collect()
        })
        .collect())
}

fn batch_axis(typed: &TypedModel, shapes: &[Vec<Dim>]) -> EngineResult<BatchAxis> {
    let firsts: Vec<&Dim> = shapes.iter().filter_map(|s| s.first()).collect();
    if firsts.len() != shapes.len() || firsts.is_empty() {
        return Err(invalid("every model input needs a first (batch) axis"));
    }
    match firsts[0] {
        Dim::Symbol(name) if firsts.iter().all(|d| *d == firsts[0]) => {
            let sym = typed
                .symbols
                .get(name)
                .ok_or_else(|| invalid("batch symbol lost"))?;
            Ok(BatchAxis::Symbolic(sym))
        }
        Dim::Fixed(n) if firsts.iter().all(|d| *d == firsts[0]) => Ok(BatchAxis::Fixed(*n)),
        _ => Err(invalid(
            "the model's inputs disagree on the batch axis (their first axes differ)",
        )),
    }
}

fn output_specs(typed: &TypedModel) -> EngineResult<Vec<TensorSpec>> {
    let outlets = typed.output_outlets().map_err(|e| invalid(e.to_string()))?;
    outlets
        .iter()
        .map(|&o| {
            let fact = typed.outlet_fact(o).map_err(|e| invalid(e.to_string()))?;
            let name = typed
                .outlet_label(o)
                .map(str::to_string)
                .unwrap_or_else(|| typed.node(o.node).name.clone());
            Ok(TensorSpec {
                name,
                dtype: numpy_name(fact.datum_type).unwrap_or("other").to_string(),
                shape: fact
                    .shape
                    .iter()
                    .map(|d| match d.to_i64() {
                        Ok(n) => Dim::Fixed(n as usize),
                        Err(_) => Dim::Symbol(d.to_string()),
                    })
                    .collect(),
            })
        })
        .collect()
}

fn input_datum_type(value: &pb::ValueInfoProto) -> EngineResult<DatumType> {
    use pb::tensor_proto::DataType as D;
    let Some(pb::type_proto::Value::TensorType(t)) =
        value.r#type.as_ref().and_then(|t| t.value.as_ref())
    else {
        return Err(invalid(format!("input '{}' is not a tensor", value.name)));
    };
    let dt = match D::try_from(t.elem_type) {
        Ok(D::Float) => DatumType::F32,
        Ok(D::Double) => DatumType::F64,
        Ok(D::Float16) => DatumType::F16,
        Ok(D::Int64) => DatumType::I64,
        Ok(D::Int32) => DatumType::I32,
        Ok(D::Int16) => DatumType::I16,
        Ok(D::Int8) => DatumType::I8,
        Ok(D::Uint8) => DatumType::U8,
        Ok(D::Uint16) => DatumType::U16,
        Ok(D::Uint32) => DatumType::U32,
        Ok(D::Uint64) => DatumType::U64,
        Ok(D::Bool) => DatumType::Bool,
        _ => {
            return Err(invalid(format!(
                "input '{}' has an element type Proctor cannot feed (ONNX type {})",
                value.name, t.elem_type
            )));
        }
    };
    Ok(dt)
}

/// The tract type of a numpy dtype name, as records spell it.
pub(crate) fn datum_type_of(name: &str) -> Option<DatumType> {
    [
        DatumType::F32,
        DatumType::F64,
        DatumType::F16,
        DatumType::I64,
        DatumType::I32,
        DatumType::I16,
        DatumType::I8,
        DatumType::U8,
        DatumType::U16,
        DatumType::U32,
        DatumType::U64,
        DatumType::Bool,
    ]
    .into_iter()
    .find(|&dt| numpy_name(dt).ok() == Some(name))
}

pub(crate) fn numpy_name(dt: DatumType) -> EngineResult<&'static str> {
    Ok(match dt {
        DatumType::F32 => "float32",
        DatumType::F64 => "float64",
        DatumType::F16 => "float16",
        DatumType::I64 => "int64",
        DatumType::I32 => "int32",
        DatumType::I16 => "int16",
        DatumType::I8 => "int8",
        DatumType::U8 => "uint8",
        DatumType::U16 => "uint16",
        DatumType::U32 => "uint32",
        DatumType::U64 => "uint64",
        DatumType::Bool => "bool",
        other => return Err(invalid(format!("unsupported tensor type {other:?}"))),
    })
}

/// Sum over the main graph's initializers of the product of their dims.
fn count_parameters(graph: &pb::GraphProto) -> u64 {
    graph
        .initializer
        .iter()
        .map(|t| t.dims.iter().map(|&d| d.max(0) as u64).product::<u64>())
        .sum()
}

/// Refuses any tensor, at any depth of the model, stored as external data:
/// a plain upload is one file, and the engine never opens a path a model names.
fn refuse_external_data(proto: &mut pb::ModelProto) -> EngineResult<()> {
    for_each_tensor(proto, &mut |t| {
        if is_external(t) {
            return Err(invalid(format!(
                "tensor '{}' is stored as ONNX external data: send the model as a zip bundle \
                 (content-type application/zip) holding the .onnx file and its data files; \
                 `proctor submit` builds it from the model's folder",
                t.name
            )));
        }
        Ok(())
    })
}
