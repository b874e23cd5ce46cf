//! Quantized models in the QDQ format, as onnxruntime's quantizer writes
//! them: each quantized operator is a float operator between
//! DequantizeLinear and QuantizeLinear nodes. Run as written, tract computes
//! those in float, so an int8 student is timed slower than its float twin.
//!
//! `fold` rewrites the common form of a quantized convolution, DQ(x), DQ(w),
//! DQ(int32 bias) → Conv → Q, into the standard QLinearConv, which tract runs
//! on integer kernels; an integer runtime does the same rewrite. What cannot
//! be folded is named in the model's notes, since its latency then reflects
//! float emulation. For those, the DequantizeLinear of each quantized weight
//! is computed once, when the model is loaded: tract would compute it again
//! at every call, and pack the float weights again at every call, which made
//! a QDQ MLP 15 times slower than its float original. tract's own integer
//! matrix product (QLinearMatMul, MatMulInteger) was slower still on this
//! project's machine, so MatMul and Gemm are not rewritten into it.

use std::collections::{BTreeMap, HashMap, HashSet};

use tract_onnx::pb;

/// Operators whose quantized form is the QDQ pattern around them.
const COMPUTE: [&str; 4] = ["Conv", "ConvTranspose", "MatMul", "Gemm"];

fn float_data(t: &pb::TensorProto) -> Option<Vec<f32>> {
    if t.data_type != pb::tensor_proto::DataType::Float as i32 {
        return None;
    }
    if !t.float_data.is_empty() {
        return Some(t.float_data.clone());
    }
    t.raw_data.len().is_multiple_of(4).then(|| {
        t.raw_data
            .chunks_exact(4)
            .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
            .collect()
    })
}

fn int_data(t: &pb::TensorProto) -> Option<Vec<i64>> {
    use pb::tensor_proto::DataType as D;
    let raw = &t.raw_data;
    if raw.is_empty() {
        return Some(t.int32_data.iter().map(|&v| v as i64).collect());
    }
    Some(match D::try_from(t.data_type).ok()? {
        D::Int8 => raw.iter().map(|&b| b as i8 as i64).collect(),
        D::Uint8 => raw.iter().map(|&b| b as i64).collect(),
        D::Int32 => raw
            .chunks_exact(4)
            .map(|b| i32::from_le_bytes([b[0], b[1], b[2], b[3]]) as i64)
            .collect(),
        _ => return None,
    })
}

fn attr_int(node: &pb::NodeProto, name: &str) -> Option<i64> {
    node.attribute.iter().find(|a| a.name == name).map(|a| a.i)
}

/// Every value a subgraph reads (its nodes' inputs and its outputs), at
/// any depth, named as the outer graph may name them.
fn subgraph_reads(g: &pb::GraphProto) -> Vec<&str> {
    let mut out: Vec<&str> = g.output.iter().map(|o| o.name.as_str()).collect();
    for n in &g.node {
        out.extend(n.input.iter().map(String::as_str));
        for a in &n.attribute {
            for sub in a.g.iter().chain(&a.graphs) {
                out.extend(subgraph_reads(sub));
            }
        }
    }
    out
}

/// Whether an initializer holds 8-bit integers, the only zero points
/// QLinearConv takes.
fn eight_bit(t: &pb::TensorProto) -> bool {
    use pb::tensor_proto::DataType as D;
    t.data_type == D::Int8 as i32 || t.data_type == D::Uint8 as i32
}

/// The graph's names: who makes each value, how often it is read and by
/// which node of the graph (the last one, when there are several).
struct Index<'g> {
    producer: HashMap<&'g str, usize>,
    readers: HashMap<&'g str, usize>,
    reader: HashMap<&'g str, usize>,
    initializers: HashMap<&'g str, &'g pb::TensorProto>,
    outputs: HashSet<&'g str>,
}

impl<'g> Index<'g> {
    fn of(g: &'g pb::GraphProto) -> Index<'g> {
        let mut producer = HashMap::new();
        let mut readers: HashMap<&str, usize> = HashMap::new();
        let mut reader = HashMap::new();
        for (i, n) in g.node.iter().enumerate() {
            for o in &n.output {
                producer.insert(o.as_str(), i);
            }
            for input in &n.input {
                *readers.entry(input.as_str()).or_default() += 1;
                reader.insert(input.as_str(), i);
            }
            // A subgraph may read any outer value, at any depth.
            for a in &n.attribute {
                for sub in a.g.iter().chain(&a.graphs) {
                    for name in subgraph_reads(sub) {
                        *readers.entry(name).or_default() += 1;
                    }
                }
            }
        }
        Index {
            producer,
            readers,
            reader,
            initializers: g.initializer.iter().map(|t| (t.name.as_str(), t)).collect(),
            outputs: g.output.iter().map(|o| o.name.as_str()).collect(),
        }
    }

    /// The DequantizeLinear node making `value`, with its scale and zero
    /// point given (QLinearConv needs both).
    fn dequantized(&self, g: &'g pb::GraphProto, value: &str) -> Option<&'g pb::NodeProto> {
        let n = &g.node[*self.producer.get(value)?];
        (n.op_type == "DequantizeLinear" && n.input.len() == 3 && n.domain.is_empty()).then_some(n)
    }

    /// Whether a DequantizeLinear node, of any form, makes `value`.
    fn made_by_dequantize(&self, g: &pb::GraphProto, value: &str) -> bool {
        self.producer
            .get(value)
            .is_some_and(|&p| g.node[p].op_type == "DequantizeLinear")
    }

    fn floats(&self, name: &str) -> Option<Vec<f32>> {
        float_data(self.initializers.get(name)?)
    }

    fn ints(&self, name: &str) -> Option<Vec<i64>> {
        int_data(self.initializers.get(name)?)
    }
}

/// The QLinearConv that replaces `conv` and its QuantizeLinear, and the
/// index of that QuantizeLinear; `None` when the pattern is not exact.
fn fold_one(
    g: &pb::GraphProto,
    ix: &Index<'_>,
    conv: &pb::NodeProto,
) -> Option<(pb::NodeProto, usize)> {
    if conv.input.len() < 2 || conv.output.len() != 1 {
        return None;
    }
    let y = conv.output[0].as_str();
    if ix.outputs.contains(y) || ix.readers.get(y) != Some(&1) {
        return None;
    }
    let q_ix = *ix.reader.get(y)?;
    let q = &g.node[q_ix];
    if q.input.first().map(String::as_str) != Some(y)
        || q.op_type != "QuantizeLinear"
        || q.input.len() != 3
        || !q.domain.is_empty()
    {
        return None;
    }
    let dx = ix.dequantized(g, &conv.input[0])?;
    let dw = ix.dequantized(g, &conv.input[1])?;
    // Activations quantized per tensor; weights per tensor or per output
    // channel (axis 0; DequantizeLinear's default axis is 1).
    if ix.floats(&dx.input[1])?.len() != 1 || ix.floats(&q.input[1])?.len() != 1 {
        return None;
    }
    let channels = *ix.initializers.get(dw.input[0].as_str())?.dims.first()?;
    let per_channel = ix.floats(&dw.input[1])?.len();
    if per_channel != 1 && (attr_int(dw, "axis") != Some(0) || per_channel as i64 != channels) {
        return None;
    }
    // 8-bit zero points only (opset 21 also allows 16-bit and 4-bit types,
    // and blocked scales, which QLinearConv does not take).
    for zp in [&dx.input[2], &dw.input[2], &q.input[2]] {
        if !eight_bit(ix.initializers.get(zp.as_str())?) {
            return None;
        }
    }
    if [dx, dw, q]
        .iter()
        .any(|n| attr_int(n, "block_size").is_some_and(|b| b != 0))
    {
        return None;
    }
    ix.initializers.get(dw.input[0].as_str())?;
    let mut inputs = vec![
        dx.input[0].clone(),
        dx.input[1].clone(),
        dx.input[2].clone(),
        dw.input[0].clone(),
        dw.input[1].clone(),
        dw.input[2].clone(),
        q.input[1].clone(),
        q.input[2].clone(),
    ];
    if let Some(b) = conv.input.get(2).filter(|b| !b.is_empty()) {
        // QLinearConv's bias is int32 at scale x_scale * w_scale, zero point 0.
        let db = ix.dequantized(g, b).or_else(|| {
            let n = &g.node[*ix.producer.get(b.as_str())?];
            (n.op_type == "DequantizeLinear" && n.input.len() == 2).then_some(n)
        })?;
        let bias = ix.initializers.get(db.input[0].as_str())?;
        if bias.data_type != pb::tensor_proto::DataType::Int32 as i32 {
            return None;
        }
        if let Some(zp) = db.input.get(2)
            && ix.ints(zp)?.iter().any(|&z| z != 0)
        {
            return None;
        }
        let xs = ix.floats(&dx.input[1])?[0];
        let ws = ix.floats(&dw.input[1])?;
        let bs = ix.floats(&db.input[1])?;
        if bs.len() != 1 && bs.len() != ws.len().max(1) && bs.len() as i64 != channels {
            return None;
        }
        let at = |v: &[f32], i: usize| if v.len() == 1 { v[0] } else { v[i] };
        let matches = |i: usize| {
            let (w, b) = (at(&ws, i), at(&bs, i));
            ((xs * w) - b).abs() <= 1e-6 * b.abs().max(f32::MIN_POSITIVE)
        };
        if (ws.len() != 1 && bs.len() != 1 && ws.len() != bs.len())
            || !(0..ws.len().max(bs.len())).all(matches)
        {
            return None;
        }
        inputs.push(db.input[0].clone());
    }
    let node = pb::NodeProto {
        input: inputs,
        output: q.output.clone(),
        name: format!("{}_int8", conv.name),
        op_type: "QLinearConv".into(),
        domain: String::new(),
        attribute: conv.attribute.clone(),
        doc_string: String::new(),
    };
    Some((node, q_ix))
}

/// The float initializer a DequantizeLinear of initializers computes, as
/// the operator defines it per element: `(x - zero_point) * scale`, in
/// float32, per tensor or along `axis`. `None` for any other form (blocked
/// scales, float16 scales, a value the graph puts out).
fn dequantized_initializer(ix: &Index<'_>, n: &pb::NodeProto) -> Option<pb::TensorProto> {
    use pb::tensor_proto::DataType as D;
    if n.op_type != "DequantizeLinear" || !n.domain.is_empty() || n.output.len() != 1 {
        return None;
    }
    let out = n.output[0].as_str();
    if ix.outputs.contains(out) || attr_int(n, "block_size").is_some_and(|b| b != 0) {
        return None;
    }
    let x = ix.initializers.get(n.input.first()?.as_str())?;
    if ![D::Int8, D::Uint8, D::Int32]
        .map(|d| d as i32)
        .contains(&x.data_type)
    {
        return None;
    }
    let values = ix.ints(&x.name)?;
    let scale = ix.floats(n.input.get(1)?)?;
    let zero = match n.input.get(2).filter(|z| !z.is_empty()) {
        Some(z) => ix.ints(z)?,
        None => vec![0],
    };
    let dims: Vec<usize> = x
        .dims
        .iter()
        .map(|&d| usize::try_from(d).ok())
        .collect::<Option<_>>()?;
    if values.len() != dims.iter().product::<usize>() {
        return None;
    }
    // Per-axis: one scale (and zero point) per index along `axis`.
    let (channels, inner) = if scale.len() == 1 && zero.len() == 1 {
        (1, 1)
    } else {
        let rank = dims.len() as i64;
        let axis = attr_int(n, "axis").unwrap_or(1);
        let axis = usize::try_from(if axis < 0 { axis + rank } else { axis }).ok()?;
        let channels = *dims.get(axis)?;
        if scale.len() != channels || (zero.len() != 1 && zero.len() != channels) {
            return None;
        }
        (channels, dims[axis + 1..].iter().product::<usize>())
    };
    fn at<T: Copy>(v: &[T], c: usize) -> T {
        if v.len() == 1 { v[0] } else { v[c] }
    }
    let mut raw = Vec::with_capacity(values.len() * 4);
    for (i, &q) in values.iter().enumerate() {
        let c = (i / inner) % channels;
        let y = (q - at(&zero, c)) as f32 * at(&scale, c);
        raw.extend_from_slice(&y.to_le_bytes());
    }
    Some(pb::TensorProto {
        name: out.to_string(),
        dims: x.dims.clone(),
        data_type: D::Float as i32,
        raw_data: raw,
        ..Default::default()
    })
}

/// Rewrites QDQ convolutions of the main graph into QLinearConv, computes
/// the DequantizeLinear of initializers once, then drops DequantizeLinear
/// nodes that nothing reads any more.
pub fn fold(model: &mut pb::ModelProto) {
    let Some(g) = model.graph.as_mut() else {
        return;
    };
    fold_convolutions(g);
    let folded: Vec<(usize, pb::TensorProto)> = {
        let ix = Index::of(g);
        g.node
            .iter()
            .enumerate()
            .filter_map(|(i, n)| Some((i, dequantized_initializer(&ix, n)?)))
            .collect()
    };
    let mut drop: HashSet<usize> = HashSet::new();
    for (i, tensor) in folded {
        drop.insert(i);
        g.initializer.push(tensor);
    }
    let mut ix = 0;
    g.node.retain(|_| {
        ix += 1;
        !drop.contains(&(ix - 1))
    });
}

fn fold_convolutions(g: &mut pb::GraphProto) {
    let mut replaced: Vec<(usize, pb::NodeProto, usize)> = Vec::new();
    {
        let ix = Index::of(g);
        for (i, n) in g.node.iter().enumerate() {
            if n.op_type == "Conv"
                && n.domain.is_empty()
                && let Some((node, q)) = fold_one(g, &ix, n)
            {
                replaced.push((i, node, q));
            }
        }
    }
    if replaced.is_empty() {
        return;
    }
    let mut drop: HashSet<usize> = HashSet::new();
    for (i, node, q) in replaced {
        g.node[i] = node;
        drop.insert(q);
    }
    let mut ix = 0;
    g.node.retain(|_| {
        ix += 1;
        !drop.contains(&(ix - 1))
    });
    // Dequantized weights and biases the convolutions read are now unread.
    loop {
        let read: HashSet<String> = subgraph_reads(g).into_iter().map(str::to_string).collect();
        let before = g.node.len();
        g.node.retain(|n| {
            n.op_type != "DequantizeLinear" || n.output.iter().any(|o| read.contains(o))
        });
        if g.node.len() == before {
            break;
        }
    }
}

/// What the model's readers should know about its quantized operators:
/// those left between DequantizeLinear and QuantizeLinear run in float.
pub fn notes(model: &pb::ModelProto) -> Vec<String> {
    let Some(g) = model.graph.as_ref() else {
        return Vec::new();
    };
    let ix = Index::of(g);
    let emulated: Vec<&str> = g
        .node
        .iter()
        .filter(|n| COMPUTE.contains(&n.op_type.as_str()))
        .filter(|n| n.input.iter().any(|i| ix.made_by_dequantize(g, i)))
        .map(|n| n.op_type.as_str())
        .collect();
    if emulated.is_empty() {
        return Vec::new();
    }
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    for op in emulated {
        *counts.entry(op).or_default() += 1;
    }
    let listed: Vec<String> = counts.iter().map(|(op, n)| format!("{n} {op}")).collect();
    vec![format!(
        "its latency reflects float emulation: {} quantized in the QDQ format run as float \
         arithmetic between DequantizeLinear and QuantizeLinear, which an integer runtime would \
         run on integer kernels (the engine runs only QDQ Conv with an int32 bias on integer \
         kernels; it dequantizes the weights of the others once, when it loads the model)",
        listed.join(", ")
    )]
}

#[cfg(test)]
mod tests {
    use super::*;
    use pb::tensor_proto::DataType as D;

    fn tensor(name: &str, dt: D, dims: &[i64], raw: Vec<u8>) -> pb::TensorProto {
        pb::TensorProto {
            name: name.into(),
            dims: dims.to_vec(),
            data_type: dt as i32,
            raw_data: raw,
            ..Default::default()
        }
    }

    fn floats(v: &[f32]) -> Vec<u8> {
        v.iter().flat_map(|f| f.to_le_bytes()).collect()
    }

    /// One DequantizeLinear of initializers, folded; the initializer it becomes.
    fn folded(inits: Vec<pb::TensorProto>, inputs: &[&str], axis: Option<i64>) -> Vec<f32> {
        let node = pb::NodeProto {
            input: inputs.iter().map(|s| s.to_string()).collect(),
            output: vec!["y".into()],
            op_type: "DequantizeLinear".into(),
            attribute: axis
                .map(|a| pb::AttributeProto {
                    name: "axis".into(),
                    i: a,
                    ..Default::default()
                })
                .into_iter()
                .collect(),
            ..Default::default()
        };
        let g = pb::GraphProto {
            node: vec![node],
            initializer: inits,
            ..Default::default()
        };
        let ix = Index::of(&g);
        float_data(&dequantized_initializer(&ix, &g.node[0]).unwrap()).unwrap()
    }

    #[test]
    fn a_per_tensor_dequantize_is_the_operators_example() {
        // The example of DequantizeLinear in the ONNX operator documentation
        // (from memory): x = [0, 3, 128, 255], scale 2, zero point 128.
        let got = folded(
            vec![
                tensor("x", D::Uint8, &[4], vec![0, 3, 128, 255]),
                tensor("s", D::Float, &[], floats(&[2.0])),
                tensor("z", D::Uint8, &[], vec![128]),
            ],
            &["x", "s", "z"],
            None,
        );
        assert_eq!(got, [-256.0, -250.0, 0.0, 254.0]);
    }

    #[test]
    fn a_per_axis_dequantize_scales_each_index_along_its_axis() {
        // [2, 3] int8 along axis 1 (a MatMul weight's output columns) and
        // along axis -2 (its rows); (x - zero point) * scale per the ONNX
        // definition of DequantizeLinear.
        let x = || {
            tensor(
                "x",
                D::Int8,
                &[2, 3],
                [1i8, -2, 3, 4, 5, -6].map(|v| v as u8).to_vec(),
            )
        };
        let cols = folded(
            vec![
                x(),
                tensor("s", D::Float, &[3], floats(&[0.5, 0.25, 2.0])),
                tensor("z", D::Int8, &[3], vec![0, 1, 255]),
            ],
            &["x", "s", "z"],
            Some(1),
        );
        assert_eq!(cols, [0.5, -0.75, 8.0, 2.0, 1.0, -10.0]);
        let rows = folded(
            vec![x(), tensor("s", D::Float, &[2], floats(&[0.5, 2.0]))],
            &["x", "s"],
            Some(-2),
        );
        assert_eq!(rows, [0.5, -1.0, 1.5, 8.0, 10.0, -12.0]);
    }
}
