"""Seeded teachers, students and evaluation sets for the notebook benchmark.

Every model is written by hand with onnx.helper (opset 17, weights inside the
file) and every number comes from a fixed seed, so a case is the same files
on every machine. Nothing is trained. Each teacher has random weights, grown
from a narrow core network by repeating its channels, heads or hidden units
with independent noise on every copy, and a random head that spreads its
decisions over the classes. Each student is a slimmed copy of its teacher
(fewer channels, heads, hidden units or layers, cut from the teacher's own
weights) whose head is then fitted by ridge regression to the teacher's
logits on a transfer set: a cheap stand-in for pruning plus distillation
that leaves the students agreeing with the teacher on most, not all,
samples, so the figures are not at chance.

Cases (MACs per sample, counted from the graph with notebook.count_macs):
  cnn      ResNet-style CNN on 3x32x32 images, 10 classes, about 106 M
  encoder  4-layer transformer text encoder, 64 tokens, 4 classes, about 210 M
  mlp      wide MLP on 784 features, 10 classes, about 4.9 M

Labels are the teacher's decisions with a share replaced by another class at
random, so the teacher's top1 is about 0.88.

Needs numpy, onnx and onnxruntime (used to read the backbones' features).
"""
import hashlib
import math
import os

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OPSET = 17
IR_VERSION = 8
PRODUCER = "proctor-bench-notebook"
LABEL_NOISE = 0.12
TEACHER_LOGIT_STD = 2.5
RIDGE = 1e-2
# Noise on each repeated unit, times the core weights' spread, per case.
NOISE = {"cnn": 0.1, "encoder": 0.25, "mlp": 0.25}

# Per case: evaluation samples (full run, quick run) and transfer samples.
SAMPLES = {"cnn": (512, 128), "encoder": (256, 64), "mlp": (4096, 1024)}
TRANSFER = {"cnn": 1024, "encoder": 768, "mlp": 8192}
CASES = tuple(SAMPLES)


class Graph:
    """Collects nodes and initializers of one graph."""

    def __init__(self):
        self.nodes, self.inits, self.n = [], [], 0

    def w(self, name, array):
        self.inits.append(numpy_helper.from_array(np.ascontiguousarray(array), name))
        return name

    def op(self, op_type, inputs, out=None, **attrs):
        self.n += 1
        out = out or f"{op_type.lower()}_{self.n}"
        self.nodes.append(helper.make_node(op_type, inputs, [out], name=f"{op_type}_{self.n}", **attrs))
        return out

    def model(self, name, inputs, outputs):
        graph = helper.make_graph(
            self.nodes, name,
            [helper.make_tensor_value_info(n, t, s) for n, t, s in inputs],
            [helper.make_tensor_value_info(n, t, s) for n, t, s in outputs],
            initializer=self.inits)
        m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)],
                              producer_name=PRODUCER)
        m.ir_version = IR_VERSION
        onnx.checker.check_model(m, full_check=True)
        return m


def f32(a):
    return np.asarray(a, dtype=np.float32)


def fit_head(feats, target):
    """Ridge regression of row-centred logits on standardised features,
    folded back into one Gemm: returns (W [f, C], b [C])."""
    f = feats.astype(np.float64)
    mu, sd = f.mean(0), f.std(0) + 1e-6
    fs = (f - mu) / sd
    z = target.astype(np.float64)
    z = z - z.mean(1, keepdims=True)
    a = fs.T @ fs + RIDGE * len(fs) * np.eye(fs.shape[1])
    w = np.linalg.solve(a, fs.T @ (z - z.mean(0)))
    b = z.mean(0) - (mu / sd) @ w
    return f32(w / sd[:, None]), f32(b)


def teacher_head(feats, classes, rng):
    """A random linear head on standardised features, scaled so the logits
    have a standard deviation of TEACHER_LOGIT_STD."""
    f = feats.astype(np.float64)
    mu, sd = f.mean(0), f.std(0) + 1e-6
    g = rng.standard_normal((f.shape[1], classes))
    z = ((f - mu) / sd) @ g
    g *= TEACHER_LOGIT_STD / z.std()
    return f32(g / sd[:, None]), f32(-(mu / sd) @ g)


# --------------------------------------------------------------------------
# Redundant teachers. Each teacher is grown from a narrow core network by
# repeating its channels, heads or hidden units and adding independent noise
# to every copy (the redundancy that makes pruning work on trained networks).
# A student keeps the first units of each layer, which include the core, and
# rescales for the units it dropped, so it computes nearly what the teacher
# computes; the noise and any dropped layers make up the difference.

def grow(core, rng, noise, out_axis, out_rep, in_axis=None, in_rep=1):
    """Tile `core` out_rep times along out_axis and in_rep times along
    in_axis (dividing by in_rep, so repeated inputs sum to the core's
    value), then add noise of `noise` times the core's spread."""
    reps = [1] * core.ndim
    reps[out_axis] = out_rep
    if in_axis is not None:
        reps[in_axis] = in_rep
    t = np.tile(core, reps) / in_rep
    return t + noise * core.std() / in_rep * rng.standard_normal(t.shape)


def cut(t, in_axis, n_in, out_axis=None, n_out=None):
    """The first n_in inputs (and n_out outputs) of a teacher weight,
    rescaled for the dropped inputs."""
    idx = [slice(None)] * t.ndim
    idx[in_axis] = slice(0, n_in)
    if out_axis is not None:
        idx[out_axis] = slice(0, n_out)
    return t[tuple(idx)] * (t.shape[in_axis] / n_in)


# --------------------------------------------------------------------------
# cnn: ResNet-style, 3 stages of basic blocks (widths w, 2w, 4w)

CNN_WIDTH, CNN_CORE, CNN_BLOCKS, CNN_CLASSES = 26, 13, 3, 10


def he_conv(rng, co, ci, k, gain=1.0):
    return rng.standard_normal((co, ci, k, k)) * gain * math.sqrt(2.0 / (ci * k * k))


def cnn_teacher_params(rng):
    """Core of width CNN_CORE, grown by 2 to CNN_WIDTH."""
    m, rep, noise = CNN_CORE, CNN_WIDTH // CNN_CORE, NOISE["cnn"]
    p = {"stem": grow(he_conv(rng, m, 3, 3), rng, noise, 0, rep), "blocks": []}
    cin = m
    for stage, width in enumerate((m, 2 * m, 4 * m)):
        for i in range(CNN_BLOCKS):
            stride = 2 if stage and i == 0 else 1
            proj = None
            if stride != 1 or cin != width:
                proj = grow(he_conv(rng, width, cin, 1), rng, noise, 0, rep, 1, rep)
            p["blocks"].append({
                "stride": stride,
                "c1": grow(he_conv(rng, width, cin, 3), rng, noise, 0, rep, 1, rep),
                "c2": grow(he_conv(rng, width, width, 3, gain=0.5), rng, noise, 0, rep, 1, rep),
                "proj": proj})
            cin = width
    return p


def cnn_student_params(t, w, blocks_per_stage):
    p = {"stem": t["stem"][:w], "blocks": []}
    cin = w
    for stage, width in enumerate((w, 2 * w, 4 * w)):
        for i in range(blocks_per_stage):
            blk = t["blocks"][stage * CNN_BLOCKS + i]
            p["blocks"].append({
                "stride": blk["stride"], "c1": cut(blk["c1"], 1, cin, 0, width),
                "c2": cut(blk["c2"], 1, width, 0, width),
                "proj": None if blk["proj"] is None else cut(blk["proj"], 1, cin, 0, width)})
            cin = width
    return p


def cnn_model(p, name, head=None):
    g = Graph()

    def conv(x, wt, stride, tag):
        k = wt.shape[-1]
        return g.op("Conv", [x, g.w(tag + ".weight", f32(wt)), g.w(tag + ".bias", np.zeros(wt.shape[0], np.float32))],
                    kernel_shape=[k, k], strides=[stride, stride], pads=[k // 2] * 4)

    x = g.op("Relu", [conv("image", p["stem"], 1, "stem")])
    for i, blk in enumerate(p["blocks"]):
        h = g.op("Relu", [conv(x, blk["c1"], blk["stride"], f"block{i}.conv1")])
        h = conv(h, blk["c2"], 1, f"block{i}.conv2")
        s = x if blk["proj"] is None else conv(x, blk["proj"], blk["stride"], f"block{i}.proj")
        x = g.op("Relu", [g.op("Add", [h, s])])
    x = g.op("Flatten", [g.op("GlobalAveragePool", [x])], axis=1,
             out="features" if head is None else None)
    width = p["blocks"][-1]["c1"].shape[0]
    inputs = [("image", TensorProto.FLOAT, ["batch", 3, 32, 32])]
    if head is None:
        return g.model(name, inputs, [("features", TensorProto.FLOAT, ["batch", width])])
    g.op("Gemm", [x, g.w("head.weight", head[0]), g.w("head.bias", head[1])], out="logits")
    return g.model(name, inputs, [("logits", TensorProto.FLOAT, ["batch", head[0].shape[1]])])


def cnn_inputs(rng, n):
    # Smooth random images: white noise blurred by a 3x3 box, per-channel gain.
    x = rng.standard_normal((n, 3, 34, 34))
    x = sum(x[:, :, i:i + 32, j:j + 32] for i in range(3) for j in range(3)) / 3.0
    x *= rng.uniform(0.5, 1.5, (n, 3, 1, 1))
    return {"image": f32(x)}


def cnn_case(rng):
    t = cnn_teacher_params(rng)
    half = cnn_student_params(t, CNN_CORE, CNN_BLOCKS)
    lite = cnn_student_params(t, CNN_CORE, 1)
    return (lambda head=None: cnn_model(t, "cnn-teacher", head),
            {"student_half": lambda head=None: cnn_model(half, "cnn-student-half", head),
             "student_lite": lambda head=None: cnn_model(lite, "cnn-student-lite", head)},
            cnn_inputs, CNN_CLASSES)


# --------------------------------------------------------------------------
# encoder: token embedding + positions, L post-norm transformer layers
# (multi-head self-attention with a padding mask, Erf GELU feed-forward),
# masked mean pool, linear head

SEQ, VOCAB, ENC_DIM, ENC_HEADS, ENC_FFN, ENC_LAYERS, ENC_CLASSES = 64, 2000, 256, 4, 1024, 4, 4
ENC_CORE_HEADS, ENC_CORE_FFN = 2, 256


def encoder_teacher_params(rng):
    """Core of 2 heads and 256 hidden units per layer, grown to 4 and 1024."""
    d, dh = ENC_DIM, ENC_DIM // ENC_HEADS
    hr, fr, noise = ENC_HEADS // ENC_CORE_HEADS, ENC_FFN // ENC_CORE_FFN, NOISE["encoder"]
    inner = ENC_CORE_HEADS * dh
    p = {"emb": rng.standard_normal((VOCAB, d)), "pos": 0.5 * rng.standard_normal((SEQ, d)),
         "heads": ENC_HEADS, "layers": []}
    for _ in range(ENC_LAYERS):
        lp = {k: grow(rng.standard_normal((d, inner)) / math.sqrt(d), rng, noise, 1, hr) for k in ("q", "k", "v")}
        lp["o"] = grow(rng.standard_normal((inner, d)) / math.sqrt(d), rng, noise, 1, 1, 0, hr)
        lp["w1"] = grow(rng.standard_normal((d, ENC_CORE_FFN)) * math.sqrt(2.0 / d), rng, noise, 1, fr)
        lp["w2"] = grow(rng.standard_normal((ENC_CORE_FFN, d)) * 0.5 / math.sqrt(ENC_CORE_FFN), rng, noise, 1, 1, 0, fr)
        p["layers"].append(lp)
    return p


def encoder_student_params(t, heads, ffn, layers):
    """The first `heads` attention heads and `ffn` hidden units of the listed
    teacher layers (head and unit pruning, plus layer dropping)."""
    inner = heads * (ENC_DIM // ENC_HEADS)
    p = {"emb": t["emb"], "pos": t["pos"], "heads": heads, "layers": []}
    for i in layers:
        lt = t["layers"][i]
        p["layers"].append({"q": lt["q"][:, :inner], "k": lt["k"][:, :inner], "v": lt["v"][:, :inner],
                            "o": cut(lt["o"], 0, inner), "w1": lt["w1"][:, :ffn], "w2": cut(lt["w2"], 0, ffn)})
    return p


def encoder_model(p, name, head=None):
    g = Graph()
    d, heads = ENC_DIM, p["heads"]
    dh = d // ENC_HEADS
    inner = heads * dh
    one = g.w("one", np.array(1.0, np.float32))
    ones_d, zeros_d = np.ones(d, np.float32), np.zeros(d, np.float32)
    split = g.w("split_heads", np.array([-1, SEQ, heads, dh], np.int64))
    merge = g.w("merge_heads", np.array([-1, SEQ, inner], np.int64))
    ax1 = g.w("axis_1", np.array([1], np.int64))
    ax12 = g.w("axis_1_2", np.array([1, 2], np.int64))
    ax2 = g.w("axis_2", np.array([2], np.int64))

    def ln(x, tag):
        return g.op("LayerNormalization", [x, g.w(tag + ".scale", ones_d), g.w(tag + ".bias", zeros_d)],
                    axis=-1, epsilon=1e-5)

    def lin(x, wt, tag):
        return g.op("Add", [g.op("MatMul", [x, g.w(tag + ".weight", f32(wt))]),
                            g.w(tag + ".bias", np.zeros(wt.shape[1], np.float32))])

    x = g.op("Gather", [g.w("embedding", f32(p["emb"])), "input_ids"], axis=0)           # [B, S, d]
    x = ln(g.op("Add", [x, g.w("positions", f32(p["pos"]))]), "embed.norm")
    mask = g.op("Cast", ["attention_mask"], to=TensorProto.FLOAT)                          # [B, S]
    bias = g.op("Mul", [g.op("Sub", [one, mask]), g.w("mask_fill", np.array(-1e4, np.float32))])
    bias = g.op("Unsqueeze", [bias, ax12])                                                 # [B, 1, 1, S]
    scale = g.w("attn_scale", np.array(1.0 / math.sqrt(dh), np.float32))
    for i, lp in enumerate(p["layers"]):
        tag = f"layer{i}"
        q = g.op("Transpose", [g.op("Reshape", [lin(x, lp["q"], tag + ".q"), split])], perm=[0, 2, 1, 3])
        k = g.op("Transpose", [g.op("Reshape", [lin(x, lp["k"], tag + ".k"), split])], perm=[0, 2, 3, 1])
        v = g.op("Transpose", [g.op("Reshape", [lin(x, lp["v"], tag + ".v"), split])], perm=[0, 2, 1, 3])
        s = g.op("Add", [g.op("Mul", [g.op("MatMul", [q, k]), scale]), bias])              # [B, H, S, S]
        ctx = g.op("MatMul", [g.op("Softmax", [s], axis=-1), v])                           # [B, H, S, dh]
        ctx = g.op("Reshape", [g.op("Transpose", [ctx], perm=[0, 2, 1, 3]), merge])
        x = ln(g.op("Add", [x, lin(ctx, lp["o"], tag + ".o")]), tag + ".norm1")
        h = lin(x, lp["w1"], tag + ".ffn1")
        erf = g.op("Erf", [g.op("Mul", [h, g.w(tag + ".inv_sqrt2", np.array(1 / math.sqrt(2), np.float32))])])
        h = g.op("Mul", [g.op("Mul", [h, g.op("Add", [erf, one])]), g.w(tag + ".half", np.array(0.5, np.float32))])
        x = ln(g.op("Add", [x, lin(h, lp["w2"], tag + ".ffn2")]), tag + ".norm2")
    total = g.op("ReduceSum", [g.op("Mul", [x, g.op("Unsqueeze", [mask, ax2])]), ax1], keepdims=0)  # [B, d]
    count = g.op("ReduceSum", [mask, ax1], keepdims=1)                                             # [B, 1]
    inputs = [("input_ids", TensorProto.INT64, ["batch", SEQ]),
              ("attention_mask", TensorProto.INT64, ["batch", SEQ])]
    if head is None:
        g.op("Div", [total, count], out="features")
        return g.model(name, inputs, [("features", TensorProto.FLOAT, ["batch", d])])
    pooled = g.op("Div", [total, count])
    g.op("Gemm", [pooled, g.w("head.weight", head[0]), g.w("head.bias", head[1])], out="logits")
    return g.model(name, inputs, [("logits", TensorProto.FLOAT, ["batch", head[0].shape[1]])])


def encoder_inputs(rng, n):
    lengths = rng.integers(16, SEQ + 1, n)
    mask = (np.arange(SEQ)[None, :] < lengths[:, None]).astype(np.int64)
    # Zipf-like token frequencies; 0 is the padding id.
    ranks = np.arange(1, VOCAB)
    prob = 1.0 / ranks ** 0.8
    ids = rng.choice(ranks, size=(n, SEQ), p=prob / prob.sum()).astype(np.int64) * mask
    return {"input_ids": ids, "attention_mask": mask}


def encoder_case(rng):
    t = encoder_teacher_params(rng)
    pruned = encoder_student_params(t, ENC_CORE_HEADS, 512, range(ENC_LAYERS))
    shallow = encoder_student_params(t, ENC_CORE_HEADS, ENC_CORE_FFN, (0, 2))
    return (lambda head=None: encoder_model(t, "encoder-teacher", head),
            {"student_pruned": lambda head=None: encoder_model(pruned, "encoder-student-pruned", head),
             "student_shallow": lambda head=None: encoder_model(shallow, "encoder-student-shallow", head)},
            encoder_inputs, ENC_CLASSES)


# --------------------------------------------------------------------------
# mlp: Gemm + Relu layers, 784 -> 2048 -> 1600 -> 10

MLP_IN, MLP_HIDDEN, MLP_CORE, MLP_CLASSES = 784, (2048, 1600), (256, 200), 10


def mlp_model(ws, name, head=None):
    g = Graph()
    x = "features_in"
    for i, wt in enumerate(ws):
        x = g.op("Relu", [g.op("Gemm", [x, g.w(f"fc{i}.weight", f32(wt)),
                                         g.w(f"fc{i}.bias", np.zeros(wt.shape[1], np.float32))])],
                 out="features" if head is None and i == len(ws) - 1 else None)
    inputs = [("features_in", TensorProto.FLOAT, ["batch", MLP_IN])]
    if head is None:
        return g.model(name, inputs, [("features", TensorProto.FLOAT, ["batch", ws[-1].shape[1]])])
    g.op("Gemm", [x, g.w("head.weight", head[0]), g.w("head.bias", head[1])], out="logits")
    return g.model(name, inputs, [("logits", TensorProto.FLOAT, ["batch", head[0].shape[1]])])


def mlp_case(rng):
    rep, noise = MLP_HIDDEN[0] // MLP_CORE[0], NOISE["mlp"]
    w0 = grow(rng.standard_normal((MLP_IN, MLP_CORE[0])) * math.sqrt(2.0 / MLP_IN), rng, noise, 1, rep)
    w1 = grow(rng.standard_normal(MLP_CORE) * math.sqrt(2.0 / MLP_CORE[0]), rng, noise, 1, rep, 0, rep)
    t = [w0, w1]

    def student(hidden):
        return [w0[:, :hidden[0]], cut(w1, 0, hidden[0], 1, hidden[1])]

    s1, s2 = student((1024, 800)), student((512, 400))

    def inputs(r, n):
        # Correlated features: a random low-rank mix plus noise.
        base = r.standard_normal((n, 64)) @ r.standard_normal((64, MLP_IN)) / 8.0
        return {"features_in": f32(base + 0.5 * r.standard_normal((n, MLP_IN)))}

    return (lambda head=None: mlp_model(t, "mlp-teacher", head),
            {"student_1024": lambda head=None: mlp_model(s1, "mlp-student-1024", head),
             "student_512": lambda head=None: mlp_model(s2, "mlp-student-512", head)},
            inputs, MLP_CLASSES)


BUILDERS = {"cnn": cnn_case, "encoder": encoder_case, "mlp": mlp_case}


# --------------------------------------------------------------------------

def _run(model, feeds, batch=256):
    import onnxruntime as ort
    so = ort.SessionOptions()
    so.log_severity_level = 3
    sess = ort.InferenceSession(model.SerializeToString(), so, providers=["CPUExecutionProvider"])
    n = len(next(iter(feeds.values())))
    return np.concatenate([sess.run(None, {k: v[i:i + batch] for k, v in feeds.items()})[0]
                           for i in range(0, n, batch)])


def _save_npz(path, arrays):
    np.savez(path, **arrays)


def source_digest():
    with open(os.path.abspath(__file__), "rb") as f:
        return hashlib.sha256(f.read()).hexdigest()[:12]


def build_case(case, seed, out_dir, log=print):
    """Write teacher.onnx, one ONNX file per student, eval.npz (full N) and
    eval_quick.npz into out_dir. Returns the list of student names."""
    rng = np.random.default_rng([seed, CASES.index(case)])
    teacher, students, make_inputs, classes = BUILDERS[case](rng)
    n_full, n_quick = SAMPLES[case]
    transfer = make_inputs(np.random.default_rng([seed, CASES.index(case), 1]), TRANSFER[case])
    evalset = make_inputs(np.random.default_rng([seed, CASES.index(case), 2]), n_full)

    head = teacher_head(_run(teacher(), transfer), classes, rng)
    t_model = teacher(head)
    onnx.save(t_model, os.path.join(out_dir, "teacher.onnx"), save_as_external_data=False)
    z_transfer = _run(t_model, transfer)
    for name, build in students.items():
        s_model = build(fit_head(_run(build(), transfer), z_transfer))
        onnx.save(s_model, os.path.join(out_dir, name + ".onnx"), save_as_external_data=False)
        log(f"  {case}: wrote {name}")

    z_eval = _run(t_model, evalset)
    y = np.argmax(z_eval, axis=1).astype(np.int64)
    flip = rng.random(n_full) < LABEL_NOISE
    y[flip] = (y[flip] + rng.integers(1, classes, flip.sum())) % classes
    _save_npz(os.path.join(out_dir, "eval.npz"), {**evalset, "labels": y})
    _save_npz(os.path.join(out_dir, "eval_quick.npz"),
              {**{k: v[:n_quick] for k, v in evalset.items()}, "labels": y[:n_quick]})
    with open(os.path.join(out_dir, "students.txt"), "w") as f:
        f.write("\n".join(students) + "\n")
    return list(students)


def ensure_case(case, seed, cache_dir, log=print):
    """The case's folder in the cache, built first if missing."""
    d = os.path.join(cache_dir, f"{case}-seed{seed}-{source_digest()}")
    done = os.path.join(d, "students.txt")
    if not os.path.exists(done):
        os.makedirs(d, exist_ok=True)
        log(f"generating case {case} into {d}")
        build_case(case, seed, d, log)
    with open(done) as f:
        students = f.read().split()
    return d, students
