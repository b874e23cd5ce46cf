#!/usr/bin/env python3
"""Reference fixtures for Proctor's engine and report figures.

Builds small teacher and student ONNX models with random weights (fixed
seeds), an evaluation set for each case, runs every model with onnxruntime on
CPU, and computes every figure of docs/metrics.md with numpy / scipy /
statsmodels from onnxruntime's outputs.  Each figure is cross-checked against
a second, independent computation before it is written.

Run from the repository root:  python3 tests/reference/generate.py
It deletes and rewrites tests/reference/cases/.
"""

import hashlib
import io
import json
import math
import os
import shutil
import sys
import zipfile
from fractions import Fraction

import numpy as np
import onnx
import onnxruntime as ort
import scipy
import scipy.spatial.distance
import scipy.special
import scipy.stats
import statsmodels
from onnx import TensorProto, helper, numpy_helper
from statsmodels.stats.proportion import proportion_confint

HERE = os.path.dirname(os.path.abspath(__file__))
CASES = os.path.join(HERE, "cases")

OPSET = 17
IR_VERSION = 8
PRODUCER = "proctor-reference"
PRODUCER_VERSION = "1"

ECE_BINS = 15
PROB_FLOOR = 1e-12
# A sample is kept in a set only when every decision on it is robust to
# float32 rounding differences between inference engines.
MIN_GAP = 1e-3          # logit gap at the top-1 and at the top-k boundary
MIN_BIN_DISTANCE = 1e-6  # distance of ECE_BINS * confidence to an integer

NP_TO_ONNX = {
    np.dtype("float32"): TensorProto.FLOAT,
    np.dtype("int64"): TensorProto.INT64,
}
ONNX_TO_NAME = {
    TensorProto.FLOAT: "float32", TensorProto.DOUBLE: "float64",
    TensorProto.FLOAT16: "float16", TensorProto.INT64: "int64",
    TensorProto.INT32: "int32", TensorProto.INT8: "int8",
    TensorProto.UINT8: "uint8", TensorProto.BOOL: "bool",
}

SOURCES = {
    "ort/*.npy": "onnxruntime.InferenceSession(providers=['CPUExecutionProvider']).run, first output, float32 as produced",
    "models.parameters": "onnx.load: sum over graph.initializer of prod(dims), a scalar counts 1 (metrics.md)",
    "models.bytes": "os.path.getsize",
    "models.sha256": "hashlib.sha256",
    "models.opset": "onnx.load: opset_import of the default domain",
    "models.producer": "onnx.load: producer_name",
    "models.inputs": "onnx.load: graph.input (symbolic dims by dim_param)",
    "models.outputs": "onnx.load: graph.output (symbolic dims by dim_param)",
    "models.output_kind": "numpy, 'auto' rule of metrics.md on the onnxruntime output over the whole set",
    "models.macs_analytic": "numpy, sum of in*out over the Gemm layers (common practice); null for other graphs",
    "logits": "numpy: ort output cast to float64; probabilities become numpy.log(numpy.maximum(p, 1e-12)) (metrics.md)",
    "softmax_T": "numpy.exp(scipy.special.log_softmax(z / T, axis=1))",
    "argmax": "numpy.argmax (lowest index on ties)",
    "k largest": "numpy.lexsort by (value descending, index ascending), k = min(5, C) (common practice)",
    "fidelity.agreement": "numpy.argmax, numpy.mean; numpy, formula of metrics.md (Stanton et al. 2021)",
    "fidelity.agreement_ci": "statsmodels.stats.proportion.proportion_confint(count, nobs, alpha=0.05, method='wilson') (Wilson 1927)",
    "fidelity.topk_agreement": "numpy.lexsort; common practice",
    "fidelity.kl": "scipy.special.rel_entr(q, p).sum(axis=1).mean() at temperature T (Stanton et al. 2021; Hinton et al. 2015)",
    "fidelity.kl_t1": "scipy.special.rel_entr(q, p).sum(axis=1).mean() at T = 1 (Stanton et al. 2021)",
    "fidelity.js": "scipy.spatial.distance.jensenshannon(p, q, axis=1) ** 2, natural log, mean (Lin 1991)",
    "fidelity.soft_cross_entropy": "numpy, formula of metrics.md (Hinton et al. 2015, section 2), with scipy.special.log_softmax",
    "fidelity.logit_mse": "numpy, formula of metrics.md (Hinton et al. 2015, section 2.1)",
    "fidelity.class_agreement": "numpy.bincount; common practice",
    "fidelity.disagreements": "numpy.unique over (teacher_class, student_class) pairs; common practice",
    "accuracy.top1": "numpy.argmax, numpy.mean",
    "accuracy.top1_ci": "statsmodels.stats.proportion.proportion_confint(count, nobs, alpha=0.05, method='wilson') (Wilson 1927)",
    "accuracy.topk": "numpy.lexsort; common practice",
    "accuracy.ece": "numpy, formula of metrics.md (Guo et al. 2017, eq. 3), 15 bins, bin m = min(15, max(1, ceil(15 * confidence)))",
    "accuracy.ece_bins": "metrics.md (Guo et al. 2017, 15 bins)",
    "accuracy.nll": "scipy.special.log_softmax; common practice",
    "accuracy.kd_loss": "numpy, formula of metrics.md (Hinton et al. 2015, section 2)",
    "accuracy.delta": "numpy, formula of metrics.md",
    "accuracy.delta_ci": "numpy, formula of metrics.md with z = scipy.stats.norm.ppf(0.975) (Agresti, Categorical Data Analysis, section 10.1)",
    "accuracy.retention": "numpy, formula of metrics.md (Sanh et al. 2019)",
    "accuracy.mcnemar_p": "scipy.stats.binomtest(min(b, c), b + c, 0.5, alternative='two-sided').pvalue; 1.0 when b + c = 0 (McNemar 1947; Dietterich 1998)",
    "accuracy.negative_flip_rate": "numpy, formula of metrics.md (Yan et al. 2021)",
    "accuracy.b, accuracy.c": "numpy: b = teacher wrong and student right, c = teacher right and student wrong",
    "sanity checks": "common practice: identical student has agreement 1, kl 0, mcnemar_p 1; KL >= 0; JS <= ln 2",
}


# --------------------------------------------------------------------------
# graph building

class Graph:
    """A small helper around onnx.helper for building one graph."""

    def __init__(self):
        self.nodes = []
        self.inits = []
        self.count = 0

    def w(self, name, array):
        self.inits.append(numpy_helper.from_array(np.asarray(array), name))
        return name

    def op(self, op_type, inputs, out=None, **attrs):
        self.count += 1
        out = out or f"{op_type.lower()}_{self.count}"
        self.nodes.append(helper.make_node(op_type, inputs, [out], name=f"n{self.count}_{op_type}", **attrs))
        return out

    def const(self, name, array):
        """A Constant node (not an initializer: it does not count as a parameter)."""
        self.count += 1
        self.nodes.append(helper.make_node(
            "Constant", [], [name], name=f"n{self.count}_Constant",
            value=numpy_helper.from_array(np.asarray(array), name + "_value")))
        return name

    def model(self, graph_name, inputs, outputs):
        graph = helper.make_graph(
            self.nodes, graph_name,
            [helper.make_tensor_value_info(n, t, s) for n, t, s in inputs],
            [helper.make_tensor_value_info(n, t, s) for n, t, s in outputs],
            initializer=self.inits)
        model = helper.make_model(
            graph, opset_imports=[helper.make_opsetid("", OPSET)], ir_version=IR_VERSION,
            producer_name=PRODUCER, producer_version=PRODUCER_VERSION)
        onnx.checker.check_model(model, full_check=True)
        return model.SerializeToString()


def he(rng, fan_in, fan_out):
    return (rng.standard_normal((fan_in, fan_out)) * math.sqrt(2.0 / fan_in)).astype(np.float32)


def small(rng, *shape, scale=0.1):
    return (rng.standard_normal(shape) * scale).astype(np.float32)


def mlp_model(layers, name, in_dim, input_name="features", batch="batch",
              softmax=False, classes=None, out_name=None):
    """Gemm (+ Relu between layers) MLP; layers = [(W [in, out], b [out]), ...]."""
    g = Graph()
    x = input_name
    for i, (w, b) in enumerate(layers):
        x = g.op("Gemm", [x, g.w(f"fc{i}.weight", w), g.w(f"fc{i}.bias", b)])
        if i < len(layers) - 1:
            x = g.op("Relu", [x])
    out_name = out_name or ("probabilities" if softmax else "logits")
    classes = classes or layers[-1][0].shape[1]
    if softmax:
        g.op("Softmax", [x], out=out_name, axis=-1)
    else:
        g.nodes[-1].output[0] = out_name
    return g.model(name, [(input_name, TensorProto.FLOAT, [batch, in_dim])],
                   [(out_name, TensorProto.FLOAT, [batch, classes])])


def cnn_model(p, name, features_only=False):
    g = Graph()
    x = g.op("Conv", ["image", g.w("conv1.weight", p["c1w"]), g.w("conv1.bias", p["c1b"])],
             kernel_shape=[3, 3], pads=[1, 1, 1, 1])
    x = g.op("BatchNormalization", [x, g.w("bn1.scale", p["bns"]), g.w("bn1.bias", p["bnb"]),
                                    g.w("bn1.mean", p["bnm"]), g.w("bn1.var", p["bnv"])], epsilon=1e-5)
    x = g.op("Relu", [x])
    x = g.op("MaxPool", [x], kernel_shape=[2, 2], strides=[2, 2])
    x = g.op("Conv", [x, g.w("conv2.weight", p["c2w"]), g.w("conv2.bias", p["c2b"])],
             kernel_shape=[3, 3], pads=[1, 1, 1, 1])
    x = g.op("GlobalAveragePool", [x])
    width = p["c2w"].shape[0]
    if features_only:
        g.op("Flatten", [x], out="pooled", axis=1)
        outputs = [("pooled", TensorProto.FLOAT, ["batch", width])]
    else:
        x = g.op("Flatten", [x], axis=1)
        g.op("Gemm", [x, g.w("head.weight", p["hw"]), g.w("head.bias", p["hb"])], out="logits")
        outputs = [("logits", TensorProto.FLOAT, ["batch", p["hw"].shape[1]])]
    return g.model(name, [("image", TensorProto.FLOAT, ["batch", 3, 16, 16])], outputs)


SEQ = 12
VOCAB = 50


def text_model(p, name, features_only=False, extra_output=False):
    """Embedding, one masked self-attention, LayerNormalization, Erf GELU, masked mean pool, Gemm."""
    g = Graph()
    dim = p["emb"].shape[1]
    one = g.w("one", np.array(1.0, np.float32))
    ax1 = g.w("axis_1", np.array([1], np.int64))
    ax2 = g.w("axis_2", np.array([2], np.int64))
    x = g.op("Gather", [g.w("embedding", p["emb"]), "input_ids"], axis=0)           # [B, S, D]
    mask = g.op("Cast", ["attention_mask"], to=TensorProto.FLOAT)                      # [B, S]
    bias = g.op("Mul", [g.op("Sub", [one, mask]), g.w("mask_fill", np.array(-1e4, np.float32))])
    bias = g.op("Unsqueeze", [bias, ax1])                                              # [B, 1, S]
    q = g.op("MatMul", [x, g.w("attn.q", p["wq"])])
    k = g.op("MatMul", [x, g.w("attn.k", p["wk"])])
    v = g.op("MatMul", [x, g.w("attn.v", p["wv"])])
    s = g.op("MatMul", [q, g.op("Transpose", [k], perm=[0, 2, 1])])                    # [B, S, S]
    s = g.op("Mul", [s, g.const("attn_scale", np.array(1.0 / math.sqrt(dim), np.float32))])
    a = g.op("Softmax", [g.op("Add", [s, bias])], axis=-1)
    h = g.op("Add", [x, g.op("MatMul", [a, v])])
    h = g.op("LayerNormalization", [h, g.w("ln.scale", p["lns"]), g.w("ln.bias", p["lnb"])],
             axis=-1, epsilon=1e-5)
    h = g.op("Add", [g.op("MatMul", [h, g.w("ffn.weight", p["w1"])]), g.w("ffn.bias", p["b1"])])
    erf = g.op("Erf", [g.op("Div", [h, g.w("sqrt2", np.array(math.sqrt(2.0), np.float32))])])
    h = g.op("Mul", [g.op("Mul", [h, g.op("Add", [erf, one])]), g.w("half", np.array(0.5, np.float32))])
    h = g.op("Mul", [h, g.op("Unsqueeze", [mask, ax2])])
    total = g.op("ReduceSum", [h, ax1], keepdims=0)                                    # [B, H]
    count = g.op("ReduceSum", [mask, ax1], keepdims=1)                                 # [B, 1]
    width = p["w1"].shape[1]
    inputs = [("input_ids", TensorProto.INT64, ["batch", SEQ]),
              ("attention_mask", TensorProto.INT64, ["batch", SEQ])]
    if features_only:
        g.op("Div", [total, count], out="pooled")
        return g.model(name, inputs, [("pooled", TensorProto.FLOAT, ["batch", width])])
    pooled = g.op("Div", [total, count], out="pooled")
    g.op("Gemm", [pooled, g.w("head.weight", p["hw"]), g.w("head.bias", p["hb"])], out="logits")
    outputs = [("logits", TensorProto.FLOAT, ["batch", p["hw"].shape[1]])]
    if extra_output:
        outputs.append(("pooled", TensorProto.FLOAT, ["batch", width]))
    return g.model(name, inputs, outputs)


def matmul_model(w, name):
    g = Graph()
    g.op("MatMul", ["features", g.w("weight", w)], out="logits")
    return g.model(name, [("features", TensorProto.FLOAT, ["batch", w.shape[0]])],
                   [("logits", TensorProto.FLOAT, ["batch", w.shape[1]])])


# --------------------------------------------------------------------------
# running

def session(model_bytes):
    so = ort.SessionOptions()
    so.intra_op_num_threads = 1
    so.inter_op_num_threads = 1
    so.log_severity_level = 3
    return ort.InferenceSession(model_bytes, so, providers=["CPUExecutionProvider"])


def run(model_bytes, feeds, one_by_one=False):
    """First output of the model over the whole set (float32 as produced)."""
    sess = session(model_bytes)
    if not one_by_one:
        return sess.run(None, feeds)[0]
    n = len(next(iter(feeds.values())))
    return np.concatenate([sess.run(None, {k: v[i:i + 1] for k, v in feeds.items()})[0] for i in range(n)])


def fit_head(feats, target, rng, agree_max=0.9):
    """Least-squares linear head from student features to the teacher's logits.

    Noise is added to the fitted head until training agreement is at most
    agree_max, so that students are good but not perfect."""
    a = np.hstack([feats.astype(np.float64), np.ones((len(feats), 1))])
    sol = np.linalg.lstsq(a, target.astype(np.float64), rcond=None)[0]
    t_arg = target.argmax(1)
    noise = rng.standard_normal(sol.shape)
    spread = sol.std()
    for sigma in [0.0, 0.05, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5, 0.7, 1.0]:
        cand = sol + sigma * spread * noise
        if np.mean((a @ cand).argmax(1) == t_arg) <= agree_max:
            break
    return cand[:-1].astype(np.float32), cand[-1].astype(np.float32)


def balanced_head(feats, w, b, scale=2.0):
    """Rescale a teacher's last layer so that every class logit has mean 0 and
    standard deviation `scale` over the given features: no class dominates."""
    z = feats.astype(np.float64) @ w.astype(np.float64) + b
    mu, sd = z.mean(axis=0), z.std(axis=0)
    return (w / sd * scale).astype(np.float32), ((b - mu) / sd * scale).astype(np.float32)


def linear_directions(x, target):
    """Unit columns of the least-squares linear map from inputs to the teacher's logits."""
    a = np.hstack([x.astype(np.float64), np.ones((len(x), 1))])
    lin = np.linalg.lstsq(a, target.astype(np.float64), rcond=None)[0][:-1]
    return lin / np.sqrt((lin ** 2).sum(axis=0, keepdims=True))


# --------------------------------------------------------------------------
# metrics (float64, from the ort outputs)

def auto_kind(out):
    o = out.astype(np.float64)
    if np.all((o >= 0.0) & (o <= 1.0)) and np.all(np.abs(o.sum(axis=1) - 1.0) <= 1e-3):
        return "probabilities"
    return "logits"


def to_logits(out, kind):
    z = out.astype(np.float64)
    return np.log(np.maximum(z, PROB_FLOOR)) if kind == "probabilities" else z


def soft(z, t=1.0):
    return np.exp(scipy.special.log_softmax(z / t, axis=1))


def topk_order(z):
    """Class indices per row sorted by (value descending, index ascending)."""
    idx = np.broadcast_to(np.arange(z.shape[1]), z.shape)
    return np.lexsort((idx, -z), axis=-1)


def in_topk(z, target, k):
    hit = (topk_order(z)[:, :k] == target[:, None]).any(axis=1)
    # cross-check: rank by counting (strictly larger, or equal with a lower index)
    tv = z[np.arange(len(z)), target][:, None]
    cols = np.arange(z.shape[1])[None, :]
    rank = (z > tv).sum(1) + ((z == tv) & (cols < target[:, None])).sum(1)
    assert np.array_equal(hit, rank < k)
    return hit


def argmax(z):
    a = np.argmax(z, axis=1)
    first = np.array([np.flatnonzero(row == row.max())[0] for row in z])
    assert np.array_equal(a, first)
    return a


def wilson(count, n):
    lo, hi = proportion_confint(int(count), int(n), alpha=0.05, method="wilson")
    z = scipy.stats.norm.ppf(0.975)
    p = count / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    assert abs(lo - (centre - half)) < 1e-12 and abs(hi - (centre + half)) < 1e-12
    return [float(lo), float(hi)]


def close(a, b, rel=1e-10, absolute=1e-14):
    assert abs(a - b) <= max(rel * max(abs(a), abs(b)), absolute), (a, b)


def ece(z, y):
    conf = soft(z).max(axis=1)
    correct = (argmax(z) == y).astype(np.float64)
    bins = np.minimum(ECE_BINS, np.maximum(1, np.ceil(ECE_BINS * conf))).astype(np.int64)
    n = len(z)
    total = 0.0
    for m in range(1, ECE_BINS + 1):
        sel = bins == m
        if sel.any():
            total += sel.sum() / n * abs(correct[sel].mean() - conf[sel].mean())
    # cross-check with the interval form ((m-1)/15, m/15], 0 in bin 1
    alt = 0.0
    for m in range(1, ECE_BINS + 1):
        sel = (conf > (m - 1) / ECE_BINS) & (conf <= m / ECE_BINS)
        if m == 1:
            sel |= conf <= 0.0
        if sel.any():
            alt += np.sum(correct[sel] - conf[sel]).__abs__() / n
    close(total, alt, rel=1e-9)
    return float(total)


def nll(z, y):
    v = float(np.mean(-scipy.special.log_softmax(z, axis=1)[np.arange(len(z)), y]))
    close(v, float(np.mean(scipy.special.logsumexp(z, axis=1) - z[np.arange(len(z)), y])), rel=1e-9)
    return v


def accuracy(z, y, k):
    hits = argmax(z) == y
    return {
        "top1": float(hits.mean()),
        "top1_ci": wilson(hits.sum(), len(y)),
        "topk": float(in_topk(z, y, k).mean()),
        "ece": ece(z, y),
        "ece_bins": ECE_BINS,
        "nll": nll(z, y),
    }


def kl_mean(zt, zs, t):
    q, p = soft(zt, t), soft(zs, t)
    v = float(scipy.special.rel_entr(q, p).sum(axis=1).mean())
    lq, lp = scipy.special.log_softmax(zt / t, axis=1), scipy.special.log_softmax(zs / t, axis=1)
    close(v, float(np.mean(np.sum(q * (lq - lp), axis=1))), rel=1e-8, absolute=1e-15)
    close(v, float(np.mean(scipy.stats.entropy(q, p, axis=1))), rel=1e-8, absolute=1e-15)
    return v


def mcnemar(b, c):
    if b + c == 0:
        return 1.0
    p = float(scipy.stats.binomtest(min(b, c), b + c, 0.5, alternative="two-sided").pvalue)
    exact = min(Fraction(1), 2 * Fraction(sum(math.comb(b + c, i) for i in range(min(b, c) + 1)), 2 ** (b + c)))
    close(p, float(exact), rel=1e-9)
    return p


def fidelity(zt, zs, t, k):
    n, classes = zt.shape
    at, as_ = argmax(zt), argmax(zs)
    same = at == as_
    q1, p1 = soft(zt), soft(zs)
    js = float(np.mean(scipy.spatial.distance.jensenshannon(q1, p1, axis=1) ** 2))
    m = 0.5 * (q1 + p1)
    close(js, float(np.mean(0.5 * scipy.special.rel_entr(q1, m).sum(1) + 0.5 * scipy.special.rel_entr(p1, m).sum(1))),
          rel=1e-8, absolute=1e-15)
    qt = soft(zt, t)
    sce = float(np.mean(-np.sum(qt * scipy.special.log_softmax(zs / t, axis=1), axis=1)))
    close(sce, float(np.mean(scipy.stats.entropy(qt, axis=1))) + kl_mean(zt, zs, t), rel=1e-9)
    cs = zs - zs.mean(axis=1, keepdims=True)
    ct = zt - zt.mean(axis=1, keepdims=True)
    mse = float(np.mean((cs - ct) ** 2))
    counts = np.bincount(at, minlength=classes)
    agree_counts = np.bincount(at[same], minlength=classes)
    class_agreement = [{"class": int(c), "samples": int(counts[c]), "agreement": float(agree_counts[c] / counts[c])}
                       for c in range(classes) if counts[c] > 0]
    pairs, pair_counts = np.unique(np.stack([at[~same], as_[~same]], axis=1), axis=0, return_counts=True) \
        if (~same).any() else (np.zeros((0, 2), np.int64), np.zeros(0, np.int64))
    dis = sorted(((int(cnt), int(a), int(b)) for (a, b), cnt in zip(pairs, pair_counts)),
                 key=lambda r: (-r[0], r[1], r[2]))[:10]
    return {
        "agreement": float(same.mean()),
        "agreement_ci": wilson(same.sum(), n),
        "topk_agreement": float(in_topk(zs, at, k).mean()),
        "kl": kl_mean(zt, zs, t),
        "kl_t1": kl_mean(zt, zs, 1.0),
        "js": js,
        "soft_cross_entropy": sce,
        "logit_mse": mse,
        "class_agreement": class_agreement,
        "disagreements": [{"teacher_class": a, "student_class": b, "count": cnt} for cnt, a, b in dis],
    }


def student_accuracy(zt, zs, y, t, alpha, k, teacher_acc, soft_ce):
    acc = accuracy(zs, y, k)
    n = len(y)
    tr, sr = argmax(zt) == y, argmax(zs) == y
    b = int(np.sum(~tr & sr))
    c = int(np.sum(tr & ~sr))
    z = float(scipy.stats.norm.ppf(0.975))
    d = (b - c) / n
    se = math.sqrt((b + c) - (b - c) ** 2 / n) / n
    acc.update({
        "kd_loss": alpha * t * t * soft_ce + (1 - alpha) * acc["nll"],
        "delta": acc["top1"] - teacher_acc["top1"],
        "delta_ci": [d - z * se, d + z * se],
        "retention": (acc["top1"] / teacher_acc["top1"]) if teacher_acc["top1"] > 0 else None,
        "mcnemar_p": mcnemar(b, c),
        "negative_flip_rate": c / n,
        "b": b,
        "c": c,
    })
    close(acc["delta"], d, rel=1e-9, absolute=1e-15)
    return acc


def fragile(z, k, exact_ties_ok=False):
    """Samples whose argmax, top-k set or ECE bin could change under float32 rounding."""
    s = np.sort(z, axis=1)[:, ::-1]
    def near(gap):
        return (gap < MIN_GAP) & ~((gap == 0) & exact_ties_ok)
    bad = near(s[:, 0] - s[:, 1])
    if z.shape[1] > k:
        bad |= near(s[:, k - 1] - s[:, k])
    # bin edges 1/15 .. 14/15 (rounding across 0 or 1 cannot change the bin)
    scaled = ECE_BINS * soft(z).max(axis=1)
    nearest = np.round(scaled)
    bad |= (np.abs(scaled - nearest) < MIN_BIN_DISTANCE) & (nearest >= 1) & (nearest <= ECE_BINS - 1)
    return bad


# --------------------------------------------------------------------------
# writing

def save_npz(path, arrays):
    """np.savez_compressed, then the zip entries' timestamps fixed so reruns are byte-identical."""
    buf = io.BytesIO()
    np.savez_compressed(buf, **arrays)
    src = zipfile.ZipFile(io.BytesIO(buf.getvalue()))
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            entry = zipfile.ZipInfo(info.filename, date_time=(1980, 1, 1, 0, 0, 0))
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = 0o644 << 16
            with dst.open(entry, "w", force_zip64=True) as f:
                f.write(src.read(info.filename))
    with np.load(path) as back:  # round-trip check
        assert list(back.keys()) == list(arrays.keys())
        for key, arr in arrays.items():
            assert back[key].dtype == arr.dtype and np.array_equal(back[key], arr)


def value_infos(values):
    out = []
    for v in values:
        dims = [d.dim_param if d.HasField("dim_param") else int(d.dim_value) for d in v.type.tensor_type.shape.dim]
        out.append({"name": v.name, "dtype": ONNX_TO_NAME[v.type.tensor_type.elem_type], "shape": dims})
    return out


def describe_model(path, kind, macs):
    m = onnx.load(path)
    params = 0
    for init in m.graph.initializer:
        params += int(np.prod(init.dims, dtype=np.int64)) if len(init.dims) else 1
    with open(path, "rb") as f:
        digest = hashlib.sha256(f.read()).hexdigest()
    return {
        "file": os.path.basename(path),
        "parameters": params,
        "opset": int(next(o.version for o in m.opset_import if o.domain in ("", "ai.onnx"))),
        "producer": m.producer_name,
        "inputs": value_infos(m.graph.input),
        "outputs": value_infos(m.graph.output),
        "output_kind": kind,
        "bytes": os.path.getsize(path),
        "sha256": digest,
        "macs_analytic": macs,
    }


def gemm_macs(layers):
    return int(sum(w.shape[0] * w.shape[1] for w, _ in layers))


class Case:
    """Collects the models and data of one case, then writes the folder."""

    def __init__(self, name, temperature=4.0, alpha=0.5, exact_ties_ok=False, one_by_one=False):
        self.name = name
        self.t = temperature
        self.alpha = alpha
        self.exact_ties_ok = exact_ties_ok
        self.one_by_one = one_by_one
        self.models = {}  # stem -> (bytes, macs)
        self.teacher = None

    def add(self, stem, model_bytes, macs=None, teacher=False):
        self.models[stem] = (model_bytes, macs)
        if teacher:
            self.teacher = stem

    def outputs(self, feeds):
        return {stem: run(mb, feeds, self.one_by_one) for stem, (mb, _) in self.models.items()}

    def select(self, feeds, n):
        """Keep the first n samples on which no model's decisions are fragile."""
        outs = self.outputs(feeds)
        bad = np.zeros(len(next(iter(feeds.values()))), bool)
        for out in outs.values():
            z = to_logits(out, auto_kind(out))
            bad |= fragile(z, min(5, z.shape[1]), self.exact_ties_ok)
        keep = np.flatnonzero(~bad)[:n]
        assert len(keep) == n, f"{self.name}: only {len(keep)} robust samples"
        return {k: v[keep] for k, v in feeds.items()}, int(bad.sum())

    def write(self, data, labels, data_names=None, extra_arrays=None):
        folder = os.path.join(CASES, self.name)
        os.makedirs(os.path.join(folder, "ort"))
        outs = self.outputs(data)
        kinds = {stem: auto_kind(o) for stem, o in outs.items()}
        zs = {stem: to_logits(o, kinds[stem]) for stem, o in outs.items()}
        n, classes = zs[self.teacher].shape
        k = min(5, classes)
        for stem, z in zs.items():
            assert z.shape == (n, classes)
            assert not fragile(z, k, self.exact_ties_ok).any(), (self.name, stem)
        arrays = dict(data) if data_names is None else {data_names[k_]: v for k_, v in data.items()}
        if labels is not None:
            arrays["labels"] = labels.astype(np.int64)
        # arrays that are no model input (class_names, slices), stored after the labels
        arrays.update(extra_arrays or {})
        save_npz(os.path.join(folder, "data.npz"), arrays)
        models = {}
        for stem, (mb, macs) in self.models.items():
            path = os.path.join(folder, f"{stem}.onnx")
            with open(path, "wb") as f:
                f.write(mb)
            np.save(os.path.join(folder, "ort", f"{stem}.npy"), outs[stem])
            models[stem] = describe_model(path, kinds[stem], macs)
        zt = zs[self.teacher]
        t_acc = accuracy(zt, labels, k) if labels is not None else None
        students = {}
        for stem in self.models:
            if stem == self.teacher:
                continue
            fid = fidelity(zt, zs[stem], self.t, k)
            acc = None
            if labels is not None:
                acc = student_accuracy(zt, zs[stem], labels, self.t, self.alpha, k, t_acc, fid["soft_cross_entropy"])
            students[stem] = {"fidelity": fid, "accuracy": acc}
            # sanity checks (common practice)
            assert fid["kl"] >= 0 and fid["kl_t1"] >= 0
            assert 0 <= fid["js"] <= math.log(2)
            assert fid["soft_cross_entropy"] >= 0 and fid["logit_mse"] >= 0
        doc = {
            "case": self.name,
            "samples": n,
            "classes": classes,
            "k": k,
            "temperature": self.t,
            "alpha": self.alpha,
            "has_labels": labels is not None,
            "data_arrays": [{"name": a, "dtype": str(v.dtype), "shape": list(v.shape)} for a, v in arrays.items()],
            "models": models,
            "teacher": self.teacher,
            "teacher_accuracy": t_acc,
            "students": students,
            "ort_outputs": {stem: {"file": f"ort/{stem}.npy", "dtype": str(o.dtype), "shape": list(o.shape),
                                   "min_top1_gap": float(np.min(np.diff(np.sort(zs[stem], 1)[:, -2:], axis=1)))}
                            for stem, o in outs.items()},
            "sources": SOURCES,
        }
        with open(os.path.join(folder, "expected.json"), "w") as f:
            json.dump(doc, f, indent=1, allow_nan=False)
            f.write("\n")
        return doc, outs, zs


def make_labels(rng, zt, classes, wrong=0.18):
    """The teacher's argmax, with a share of samples given a random class (possibly the same one):
    the teacher's top1 comes out near 1 - wrong."""
    y = argmax(zt).astype(np.int64)
    replace = wrong / (1 - 1 / classes)
    idx = rng.choice(len(y), size=int(round(replace * len(y))), replace=False)
    y[idx] = rng.integers(0, classes, size=len(idx))
    return y


def check_band(doc, lo=0.6, hi=0.95, skip=()):
    for stem, s in doc["students"].items():
        if stem in skip:
            continue
        a = s["fidelity"]["agreement"]
        assert lo <= a <= hi, f"{doc['case']}/{stem}: agreement {a}"
    if doc["teacher_accuracy"] is not None:
        t1 = doc["teacher_accuracy"]["top1"]
        assert 0.7 <= t1 <= 0.9, f"{doc['case']}: teacher top1 {t1}"


# --------------------------------------------------------------------------
# cases

def mlp_pair_case(name, seed, in_dim, teacher_hidden, student_hiddens, classes, n,
                  labelled=True, data_name=None, temperature=4.0, alpha=0.5, twin=False,
                  teacher_softmax=False, batch="batch", teacher_bias=2.0, student_bias=0.5):
    # positive hidden biases keep most units active (a smoother teacher that small students can follow)
    rng = np.random.default_rng(seed)
    dims = [in_dim, *teacher_hidden, classes]
    t_layers = [(he(rng, a, b), small(rng, b) + np.float32(teacher_bias)) for a, b in zip(dims[:-2], dims[1:-1])]
    train = {"features": rng.standard_normal((3000, in_dim)).astype(np.float32)}
    t_feats = np.maximum(run(mlp_model(t_layers, "body", in_dim, out_name="hidden"), train), 0)
    t_layers.append(balanced_head(t_feats, he(rng, dims[-2], classes), small(rng, classes)))
    one_by_one = batch != "batch"
    case = Case(name, temperature, alpha, one_by_one=one_by_one)
    case.add("teacher", mlp_model(t_layers, "teacher", in_dim, softmax=teacher_softmax, batch=batch),
             gemm_macs(t_layers), teacher=True)
    t_logits_model = mlp_model(t_layers, "teacher_logits", in_dim)
    zt_train = run(t_logits_model, train)
    directions = linear_directions(train["features"], zt_train)
    for sname, hidden in student_hiddens:
        # the student's hidden units read the directions along which the teacher's logits vary
        w0 = (directions @ rng.standard_normal((classes, hidden)) / math.sqrt(classes)).astype(np.float32)
        b0 = small(rng, hidden) + np.float32(student_bias)
        feats = np.maximum(run(mlp_model([(w0, b0)], "body", in_dim, out_name="hidden"), train), 0)
        layers = [(w0, b0), fit_head(feats, zt_train, rng)]
        case.add(f"student_{sname}", mlp_model(layers, f"student_{sname}", in_dim, batch=batch), gemm_macs(layers))
    if twin:
        case.add("student_twin", mlp_model(t_layers, "student_twin", in_dim, batch=batch), gemm_macs(t_layers))
    x = rng.standard_normal((n + 60, in_dim)).astype(np.float32)
    if teacher_softmax:
        # a fifth of the samples are scaled up so that the teacher saturates:
        # some probabilities underflow to 0 in float32 and hit the 1e-12 floor
        rows = rng.choice(len(x), size=len(x) // 5, replace=False)
        x[rows] *= rng.uniform(10.0, 60.0, size=(len(rows), 1)).astype(np.float32)
    data, dropped = case.select({"features": x}, n)
    zt = run(t_logits_model, data)
    labels = make_labels(rng, zt, classes) if labelled else None
    doc, outs, zs = case.write(data, labels, data_names={"features": data_name} if data_name else None)
    return doc, outs, zs, dropped


def case_cnn(seed=2, n=200):
    rng = np.random.default_rng(seed)
    c1, c2, classes = 8, 16, 10
    tp = {
        "c1w": (rng.standard_normal((c1, 3, 3, 3)) * math.sqrt(2 / 27)).astype(np.float32),
        "c1b": small(rng, c1),
        "bns": (1 + 0.2 * rng.standard_normal(c1)).astype(np.float32),
        "bnb": small(rng, c1),
        "bnm": small(rng, c1, scale=0.3),
        "bnv": rng.uniform(0.5, 2.0, c1).astype(np.float32),
        "c2w": (rng.standard_normal((c2, c1, 3, 3)) * math.sqrt(2 / (9 * c1))).astype(np.float32),
        "c2b": small(rng, c2),
    }

    def images(count):
        # low-resolution random patterns, upsampled, plus pixel noise
        low = rng.standard_normal((count, 3, 4, 4))
        up = np.kron(low, np.ones((1, 1, 4, 4)))
        pixels = up + 0.3 * rng.standard_normal(up.shape)
        return (np.round(pixels * 32) / 32).astype(np.float32)  # multiples of 1/32: the set compresses well

    train = {"image": images(1500)}
    t_feats = run(cnn_model(tp, "body", features_only=True), train)
    tp["hw"], tp["hb"] = balanced_head(t_feats, he(rng, c2, classes), small(rng, classes))
    case = Case("cnn", temperature=2.0, alpha=0.25)
    teacher = cnn_model(tp, "teacher")
    case.add("teacher", teacher, teacher=True)
    zt_train = run(teacher, train)
    # student: the teacher's first block, and a second convolution of `rank` channels that
    # are the teacher's channels combined along the leading directions of its logits
    # (Conv and GlobalAveragePool are linear, so this is exact for those directions); head refitted
    rank = 5
    centred = t_feats.astype(np.float64) - t_feats.mean(axis=0)
    _, _, vt = np.linalg.svd(centred @ tp["hw"].astype(np.float64), full_matrices=False)
    mix = tp["hw"].astype(np.float64) @ vt[:rank].T                       # [c2, rank]
    sp = {key: tp[key] for key in ("c1w", "c1b", "bns", "bnb", "bnm", "bnv")}
    sp["c2w"] = np.einsum("ir,iabc->rabc", mix, tp["c2w"]).astype(np.float32)
    sp["c2b"] = (mix.T @ tp["c2b"]).astype(np.float32)
    feats = run(cnn_model(sp, "body", features_only=True), train)
    sp["hw"], sp["hb"] = fit_head(feats, zt_train, rng)
    case.add(f"student_rank{rank}", cnn_model(sp, f"student_rank{rank}"))
    data, dropped = case.select({"image": images(n + 60)}, n)
    labels = make_labels(rng, run(teacher, data), classes)
    doc, outs, zs = case.write(data, labels)
    return doc, dropped


def case_text(seed=3, n=240):
    rng = np.random.default_rng(seed)
    dim, hidden, classes = 16, 32, 4
    tp = {
        "emb": rng.standard_normal((VOCAB, dim)).astype(np.float32),
        "wq": he(rng, dim, dim), "wk": he(rng, dim, dim), "wv": he(rng, dim, dim),
        "lns": (1 + 0.1 * rng.standard_normal(dim)).astype(np.float32),
        "lnb": small(rng, dim),
        "w1": he(rng, dim, hidden), "b1": small(rng, hidden),
    }

    def tokens(count):
        ids = rng.integers(0, VOCAB, size=(count, SEQ), dtype=np.int64)
        lengths = rng.integers(1, SEQ + 1, size=count)
        mask = (np.arange(SEQ)[None, :] < lengths[:, None]).astype(np.int64)
        return {"input_ids": ids, "attention_mask": mask}

    train = tokens(2000)
    t_feats = run(text_model(tp, "body", features_only=True), train)
    tp["hw"], tp["hb"] = balanced_head(t_feats, he(rng, hidden, classes), small(rng, classes))
    case = Case("text", temperature=8.0, alpha=0.9)
    teacher = text_model(tp, "teacher")
    case.add("teacher", teacher, teacher=True)
    zt_train = run(teacher, train)
    # student: half the feed-forward width, taken from the teacher, attention perturbed, head refitted
    sp = dict(tp)
    sp["w1"], sp["b1"] = tp["w1"][:, :hidden // 2], tp["b1"][:hidden // 2]
    for key in ("wq", "wk"):
        sp[key] = (tp[key] + 0.3 * rng.standard_normal(tp[key].shape)).astype(np.float32)
    feats = run(text_model(sp, "body", features_only=True), train)
    sp["hw"], sp["hb"] = fit_head(feats, zt_train, rng)
    student = text_model(sp, "student_narrow", extra_output=True)
    case.add("student_narrow", student)
    data, dropped = case.select(tokens(n + 60), n)
    # labels from the summed logits of teacher and student: each is right where the other is
    # wrong on some samples, so that b and c are both well above 0 and McNemar's p is moderate
    labels = make_labels(rng, run(teacher, data) + run(student, data), classes, wrong=0.1)
    doc, outs, zs = case.write(data, labels)
    return doc, dropped


def case_ties(seed=5, n=240):
    rng = np.random.default_rng(seed)
    in_dim, classes = 4, 6
    wt = rng.integers(-2, 3, size=(in_dim, classes)).astype(np.float32)
    wt[:, 1] = wt[:, 0]          # classes 0 and 1 always tie in the teacher
    wt[:, 4] = wt[:, 3]
    ws = wt.copy()
    ws[:, 2] = ws[:, 1]          # the student ties classes 0, 1, 2 and 3, 4
    ws[:, 5] = rng.integers(-2, 3, size=in_dim)
    case = Case("ties", exact_ties_ok=True)
    case.add("teacher", matmul_model(wt, "teacher"), teacher=True)
    case.add("student_dup", matmul_model(ws, "student_dup"))
    x = rng.integers(0, 3, size=(n + 60, in_dim)).astype(np.float32)
    data, dropped = case.select({"features": x}, n)
    zt = data["features"].astype(np.float64) @ wt.astype(np.float64)
    labels = make_labels(rng, zt, classes)
    doc, outs, zs = case.write(data, labels)
    # ort's float32 output must be exact (small integers) and must hold ties
    assert np.array_equal(outs["teacher"].astype(np.float64), zt)
    assert np.array_equal(outs["student_dup"].astype(np.float64), data["features"].astype(np.float64) @ ws.astype(np.float64))
    k = doc["k"]
    t, s = zs["teacher"], zs["student_dup"]
    def ties_at_top(z):
        return int(np.sum((z == z.max(1, keepdims=True)).sum(1) > 1))
    def ties_at_k(z):
        srt = np.sort(z, 1)[:, ::-1]
        return int(np.sum(srt[:, k - 1] == srt[:, k]))
    assert ties_at_top(t) > 0 and ties_at_top(s) > 0 and ties_at_k(s) > 0 and ties_at_k(t) > 0
    # the tie-breaking rule must change the figures: compare with highest-index breaking
    def argmax_last(z):
        return z.shape[1] - 1 - np.argmax(z[:, ::-1], axis=1)
    def in_topk_last(z, target):
        idx = np.broadcast_to(np.arange(z.shape[1]), z.shape)
        return (np.lexsort((-idx, -z), axis=-1)[:, :k] == target[:, None]).any(1)
    fid = doc["students"]["student_dup"]["fidelity"]
    alt_agree = float(np.mean(argmax_last(t) == argmax_last(s)))
    alt_topk = float(np.mean(in_topk_last(s, argmax(t))))
    alt_top1 = float(np.mean(argmax_last(t) == labels))
    alt_topk_acc = float(np.mean(in_topk_last(t, labels)))
    assert alt_agree != fid["agreement"] and alt_topk != fid["topk_agreement"]
    assert alt_top1 != doc["teacher_accuracy"]["top1"] and alt_topk_acc != doc["teacher_accuracy"]["topk"]
    info = {"teacher_rows_tied_at_top1": ties_at_top(t), "student_rows_tied_at_top1": ties_at_top(s),
            "teacher_rows_tied_at_k": ties_at_k(t), "student_rows_tied_at_k": ties_at_k(s),
            "agreement_if_highest_index_won": alt_agree, "topk_agreement_if_highest_index_won": alt_topk,
            "teacher_top1_if_highest_index_won": alt_top1, "teacher_topk_if_highest_index_won": alt_topk_acc}
    path = os.path.join(CASES, "ties", "expected.json")
    with open(path) as f:
        full = json.load(f)
    full["tie_checks"] = info
    full["sources"] = dict(full["sources"], tie_checks="numpy: exact ties counted in the ort outputs, and the figures "
                           "that highest-index tie-breaking would give, for contrast only (not report figures)")
    with open(path, "w") as f:
        json.dump(full, f, indent=1, allow_nan=False)
        f.write("\n")
    return doc, dropped, info


# --------------------------------------------------------------------------
# Baseline, class names and slices (docs/metrics.md version 2)

# Sources of the figures that only the "baseline" case holds.  Kept apart from
# SOURCES so that the expected.json of the other cases stays as it was.
BASELINE_SOURCES = {
    "baseline": "the stem of the model that plays the student in production (metrics.md, 'Baseline')",
    "baseline_figures": "the baseline against the teacher, computed exactly as a student's fidelity and accuracy "
                        "(same functions and sources as students.*)",
    "class_names": "invented names of a fictional scenario, as stored in data.npz (numpy '<U' array)",
    "versus_baseline.agreement": "numpy.argmax, numpy.mean of [argmax z_s == argmax z_b], cross-checked by the trace "
                                 "of the baseline-by-candidate confusion matrix; agreement between two students as "
                                 "common practice",
    "versus_baseline.agreement_delta": "numpy: fidelity.agreement of the candidate minus that of the baseline, as floats; "
                                       "cross-checked against (b_agree - c_agree) / N",
    "versus_baseline.agreement_delta_ci": "numpy, paired Wald interval of metrics.md on b_agree, c_agree, "
                                          "z = scipy.stats.norm.ppf(0.975) (Agresti, Categorical Data Analysis, "
                                          "section 10.1); cross-checked as mean +- z * sqrt(var / N) of the per-sample "
                                          "differences in {-1, 0, 1}",
    "versus_baseline.teacher_flip_rate": "numpy: c_agree / N (flips as in Yan et al. 2021, 'Positive-Congruent "
                                         "Training', read against the teacher)",
    "versus_baseline.top1_delta": "numpy: accuracy.top1 of the candidate minus that of the baseline, as floats; "
                                  "cross-checked against (b_top1 - c_top1) / N",
    "versus_baseline.top1_delta_ci": "numpy, paired Wald interval of metrics.md on b_top1, c_top1, "
                                     "z = scipy.stats.norm.ppf(0.975) (Agresti, Categorical Data Analysis, section 10.1)",
    "versus_baseline.mcnemar_p": "scipy.stats.binomtest(min(b_top1, c_top1), b_top1 + c_top1, 0.5, "
                                 "alternative='two-sided').pvalue, 1.0 when b_top1 + c_top1 = 0, cross-checked by "
                                 "exact rational arithmetic (McNemar 1947; exact form as in Dietterich 1998)",
    "versus_baseline.negative_flip_rate": "numpy: c_top1 / N, baseline right and candidate wrong (Yan et al. 2021, "
                                          "'Positive-Congruent Training')",
    "versus_baseline.size_ratio": "os.path.getsize(candidate) / os.path.getsize(baseline)",
    "versus_baseline.b_agree, c_agree": "numpy: b = baseline disagrees with the teacher and candidate agrees, "
                                        "c = the reverse",
    "versus_baseline.b_top1, c_top1": "numpy: b = baseline wrong and candidate right, c = the reverse",
    "slices": "one entry per distinct value, ascending: integers numerically, strings by code point (Python sorted(), "
              "cross-checked with numpy.unique and with a sort on the code point tuples); per-slice figures as "
              "common practice",
    "slices[].agreement, top1": "numpy.argmax, numpy.mean over the slice's samples",
    "slices[].agreement_ci, top1_ci": "statsmodels.stats.proportion.proportion_confint(count, nobs, alpha=0.05, "
                                      "method='wilson') over the slice's samples (Wilson 1927), cross-checked with "
                                      "the closed form",
    "slices[].negative_flip_rate": "numpy: samples of the slice the teacher gets right and the model wrong, divided "
                                   "by the slice's samples (Yan et al. 2021, 'Positive-Congruent Training')",
    "sets": "the same models over the case's other evaluation sets (same features, other arrays); label fields null "
            "without labels; 'expect' from api.md and metrics.md ('Class names')",
}

Z95 = float(scipy.stats.norm.ppf(0.975))
assert Z95 == 1.959963984540054  # the constant metrics.md writes out


def paired_wald(b, c, n, new_ok, old_ok):
    """(b - c) / N and its paired Wald 95 % interval (Agresti, section 10.1).

    new_ok / old_ok are the per-sample booleans the counts come from; the
    interval is cross-checked as the normal interval of the mean of their
    differences, whose variance (divisor N) is the same quantity."""
    assert b == int(np.sum(new_ok & ~old_ok)) and c == int(np.sum(~new_ok & old_ok))
    d = (b - c) / n
    se = math.sqrt((b + c) - (b - c) ** 2 / n) / n
    diff = new_ok.astype(np.float64) - old_ok.astype(np.float64)
    close(d, float(diff.mean()), rel=1e-12, absolute=1e-15)
    close(se, math.sqrt(max(0.0, float(np.mean(diff ** 2) - diff.mean() ** 2)) / n), rel=1e-9, absolute=1e-15)
    return d, [d - Z95 * se, d + Z95 * se]


def versus_baseline(zt, zs, zb, y, bytes_s, bytes_b, fid_s, fid_b, acc_s, acc_b):
    """metrics.md 'Baseline' for one candidate, less speedup (that comes from timing)."""
    n, classes = zt.shape
    at, as_, ab = argmax(zt), argmax(zs), argmax(zb)
    agreement = float(np.mean(as_ == ab))
    confusion = np.zeros((classes, classes), np.int64)
    np.add.at(confusion, (ab, as_), 1)
    close(agreement, float(np.trace(confusion)) / n, rel=1e-12)
    # "right" read as "agrees with the teacher"
    s_ok, b_ok = as_ == at, ab == at
    b_agree, c_agree = int(np.sum(s_ok & ~b_ok)), int(np.sum(~s_ok & b_ok))
    d, ci = paired_wald(b_agree, c_agree, n, s_ok, b_ok)
    out = {
        "agreement": agreement,
        "agreement_delta": fid_s["agreement"] - fid_b["agreement"],
        "agreement_delta_ci": ci,
        "teacher_flip_rate": c_agree / n,
        "top1_delta": None,
        "top1_delta_ci": None,
        "mcnemar_p": None,
        "negative_flip_rate": None,
        "size_ratio": bytes_s / bytes_b,
        "b_agree": b_agree,
        "c_agree": c_agree,
        "b_top1": None,
        "c_top1": None,
    }
    close(out["agreement_delta"], d, rel=1e-9, absolute=1e-15)
    if y is not None:
        s_ok, b_ok = as_ == y, ab == y
        b_top1, c_top1 = int(np.sum(s_ok & ~b_ok)), int(np.sum(~s_ok & b_ok))
        d, ci = paired_wald(b_top1, c_top1, n, s_ok, b_ok)
        out.update({
            "top1_delta": acc_s["top1"] - acc_b["top1"],
            "top1_delta_ci": ci,
            "mcnemar_p": mcnemar(b_top1, c_top1),
            "negative_flip_rate": c_top1 / n,
            "b_top1": b_top1,
            "c_top1": c_top1,
        })
        close(out["top1_delta"], d, rel=1e-9, absolute=1e-15)
    return out


def slice_order(values):
    """Distinct slice values, ascending: integers numerically, strings by code point."""
    keys = sorted(set(values.tolist()))
    assert keys == np.unique(values).tolist()
    if values.dtype.kind == "U":
        assert keys == sorted(keys, key=lambda v: tuple(ord(ch) for ch in v))
    else:
        assert values.dtype.kind == "i"
        assert keys == sorted(keys, key=int)
    return keys


def slice_figures(values, zt, zm, y):
    """metrics.md 'Slices' for one model (a candidate or the baseline)."""
    at, am = argmax(zt), argmax(zm)
    out = []
    for key in slice_order(values):
        sel = values == key
        n = int(sel.sum())
        agree = am[sel] == at[sel]
        entry = {"slice": key, "samples": n, "agreement": float(agree.mean()),
                 "agreement_ci": wilson(int(agree.sum()), n),
                 "top1": None, "top1_ci": None, "negative_flip_rate": None}
        if y is not None:
            t_ok, m_ok = at[sel] == y[sel], am[sel] == y[sel]
            entry.update({"top1": float(m_ok.mean()), "top1_ci": wilson(int(m_ok.sum()), n),
                          "negative_flip_rate": int(np.sum(t_ok & ~m_ok)) / n})
        out.append(entry)
    # cross-check: the slices partition the set, and their sample-weighted
    # agreement (and top1) is the whole set's
    assert sum(e["samples"] for e in out) == len(values)
    close(sum(e["agreement"] * e["samples"] for e in out) / len(values), float(np.mean(am == at)), rel=1e-12)
    if y is not None:
        close(sum(e["top1"] * e["samples"] for e in out) / len(values), float(np.mean(am == y)), rel=1e-12)
    return out


# A fictional scenario: a camera line that grades seed kernels at five
# cooperative sorting sites.  Every name is invented.
KERNEL_GRADES = ["sound", "cracked", "mouldy", "shrivelled", "discoloured", "foreign matter"]
# Code point order is B, F, O, k, É: a case-blind sort would put "kestrel reach"
# before "Oriel Flats", and a locale sort would put "Élanmoor" second.
SORTING_SITES = ["Brannoch Mill", "Fennick Hollow", "Oriel Flats", "kestrel reach", "Élanmoor"]
SINGLE_SITE = "Oriel Flats"     # the slice that holds exactly one sample
INT_SLICES = [3, 10, -2, 7]     # numeric order -2, 3, 7, 10; string order "-2", "10", "3", "7"


def case_baseline(seed=31, n=300):
    name, in_dim, hidden, classes = "baseline", 24, 64, len(KERNEL_GRADES)
    rng = np.random.default_rng(seed)
    t_layers = [(he(rng, in_dim, hidden), small(rng, hidden) + np.float32(2.0))]
    train = {"features": rng.standard_normal((3000, in_dim)).astype(np.float32)}
    t_feats = np.maximum(run(mlp_model(t_layers, "body", in_dim, out_name="hidden"), train), 0)
    t_layers.append(balanced_head(t_feats, he(rng, hidden, classes), small(rng, classes)))
    case = Case(name)
    teacher = mlp_model(t_layers, "teacher", in_dim)
    case.add("teacher", teacher, gemm_macs(t_layers), teacher=True)
    zt_train = run(teacher, train)
    directions = linear_directions(train["features"], zt_train)

    def student(width, agree_max):
        # as in mlp_pair_case: hidden units read the directions of the teacher's logits, head fitted
        w0 = (directions @ rng.standard_normal((classes, width)) / math.sqrt(classes)).astype(np.float32)
        b0 = small(rng, width) + np.float32(0.5)
        feats = np.maximum(run(mlp_model([(w0, b0)], "body", in_dim, out_name="hidden"), train), 0)
        return [(w0, b0), fit_head(feats, zt_train, rng, agree_max)]

    # the student in production, and the candidates that may replace it
    production = student(12, 0.85)
    case.add("production", mlp_model(production, "production", in_dim), gemm_macs(production))
    for stem, width, agree_max in (("candidate_wide", 32, 0.92), ("candidate_lean", 6, 0.8)):
        layers = student(width, agree_max)
        case.add(stem, mlp_model(layers, stem, in_dim), gemm_macs(layers))
    # the production weights again under another graph name: same logits, other bytes and SHA-256
    case.add("twin", mlp_model(production, "twin", in_dim), gemm_macs(production))

    data, dropped = case.select({"features": rng.standard_normal((n + 60, in_dim)).astype(np.float32)}, n)
    labels = make_labels(rng, run(teacher, data), classes)
    class_names = np.array(KERNEL_GRADES)
    # four sites drawn with unequal shares, and one sample moved to a fifth site of its own:
    # a sample that the lean candidate gets wrong against the teacher while production and
    # the wide candidate agree, so that the lean one's lowest slice is the single-sample one
    # (agreement 0) and the slice gate's `at` must name it
    others = [site for site in SORTING_SITES if site != SINGLE_SITE]
    sites = np.array(others)[rng.choice(len(others), size=n, p=[0.4, 0.3, 0.2, 0.1])]
    top = {stem: argmax(to_logits(o, auto_kind(o))) for stem, o in case.outputs(data).items()}
    pick = np.flatnonzero((top["candidate_lean"] != top["teacher"]) & (top["candidate_wide"] == top["teacher"])
                          & (top["production"] == top["teacher"]))
    sites[pick[rng.integers(len(pick))]] = SINGLE_SITE
    int_slices = np.array(INT_SLICES, np.int64)[rng.choice(len(INT_SLICES), size=n, p=[0.35, 0.3, 0.2, 0.15])]
    assert class_names.dtype.kind == "U" and sites.dtype.kind == "U"
    assert int(np.sum(sites == SINGLE_SITE)) == 1 and len(np.unique(sites)) == len(SORTING_SITES)
    assert len(np.unique(int_slices)) == len(INT_SLICES)

    doc, outs, zs = case.write(data, labels, extra_arrays={"class_names": class_names, "slices": sites})
    folder = os.path.join(CASES, name)
    features = data["features"]
    # the case's other sets: the same samples with other arrays beside them
    other_sets = {
        "data_int_slices.npz": {"features": features, "labels": labels, "slices": int_slices},
        "unlabelled.npz": {"features": features, "slices": sites},
        # one name too many: C + 1 names for C classes
        "bad_class_names.npz": {"features": features, "labels": labels,
                                "class_names": np.array(KERNEL_GRADES + ["husk"])},
    }
    for file, arrays in other_sets.items():
        save_npz(os.path.join(folder, file), arrays)
    # the baseline's identity: same logits as production, other file
    assert np.array_equal(outs["twin"], outs["production"])
    assert doc["models"]["twin"]["sha256"] != doc["models"]["production"]["sha256"]

    zt = zs["teacher"]
    base = doc["students"].pop("production")
    candidates = doc["students"]
    bytes_b = doc["models"]["production"]["bytes"]
    for stem, s in candidates.items():
        s["versus_baseline"] = versus_baseline(zt, zs[stem], zs["production"], labels,
                                               doc["models"][stem]["bytes"], bytes_b,
                                               s["fidelity"], base["fidelity"], s["accuracy"], base["accuracy"])
        s["slices"] = slice_figures(sites, zt, zs[stem], labels)
    baseline_slices = slice_figures(sites, zt, zs["production"], labels)

    twin = candidates["twin"]
    v = twin["versus_baseline"]
    assert v["agreement"] == 1.0 and v["agreement_delta"] == 0.0 and v["agreement_delta_ci"] == [0.0, 0.0]
    assert v["teacher_flip_rate"] == 0.0 and v["top1_delta"] == 0.0 and v["top1_delta_ci"] == [0.0, 0.0]
    assert v["mcnemar_p"] == 1.0 and v["negative_flip_rate"] == 0.0
    assert twin["fidelity"] == base["fidelity"] and twin["accuracy"] == base["accuracy"]
    assert twin["slices"] == baseline_slices
    # the fixture must tell the candidates apart from the baseline in both directions
    assert candidates["candidate_wide"]["versus_baseline"]["agreement_delta"] > 0
    assert candidates["candidate_lean"]["versus_baseline"]["agreement_delta"] < 0
    for stem in ("candidate_wide", "candidate_lean"):
        v = candidates[stem]["versus_baseline"]
        assert min(v["b_agree"], v["c_agree"], v["b_top1"], v["c_top1"]) > 0, stem

    stems = [*candidates, "production"]

    def arrays_of(file):
        return [{"name": a, "dtype": str(v.dtype), "shape": list(v.shape)} for a, v in other_sets[file].items()]

    sets = {
        "data_int_slices.npz": {
            "data_arrays": arrays_of("data_int_slices.npz"),
            "has_labels": True,
            "slices": {stem: slice_figures(int_slices, zt, zs[stem], labels) for stem in stems},
        },
        "unlabelled.npz": {
            "data_arrays": arrays_of("unlabelled.npz"),
            "has_labels": False,
            "slices": {stem: slice_figures(sites, zt, zs[stem], None) for stem in stems},
            "versus_baseline": {stem: versus_baseline(zt, zs[stem], zs["production"], None,
                                                      doc["models"][stem]["bytes"], bytes_b,
                                                      candidates[stem]["fidelity"], base["fidelity"], None, None)
                                for stem in candidates},
        },
        "bad_class_names.npz": {
            "data_arrays": arrays_of("bad_class_names.npz"),
            "has_labels": True,
            "expect": "422 with field dataset when the evaluation is created",
        },
    }
    ints = [e["slice"] for e in sets["data_int_slices.npz"]["slices"]["production"]]
    assert ints == sorted(INT_SLICES) and ints != sorted(INT_SLICES, key=str)
    assert all(type(i) is int for i in ints)
    names = [e["slice"] for e in baseline_slices]
    assert names != sorted(names, key=str.casefold)
    lean = candidates["candidate_lean"]["slices"]
    assert min(lean, key=lambda e: e["agreement"]) == next(e for e in lean if e["slice"] == SINGLE_SITE)
    assert next(e for e in lean if e["slice"] == SINGLE_SITE)["agreement"] == 0.0
    # without labels the agreement figures are those of the labelled set
    for stem in candidates:
        u = sets["unlabelled.npz"]["versus_baseline"][stem]
        for key in ("agreement", "agreement_delta", "agreement_delta_ci", "teacher_flip_rate", "size_ratio"):
            assert u[key] == candidates[stem]["versus_baseline"][key]

    full = {}
    for key, value in doc.items():
        if key == "students":
            full["baseline"] = "production"
            full["baseline_figures"] = base
            full["baseline_slices"] = baseline_slices
            full["class_names"] = class_names.tolist()
        full[key] = value
        if key == "students":
            full["sets"] = sets
    full["sources"] = dict(SOURCES, **BASELINE_SOURCES)
    with open(os.path.join(folder, "expected.json"), "w") as f:
        json.dump(full, f, indent=1, allow_nan=False)
        f.write("\n")
    return full, dropped


# --------------------------------------------------------------------------
# unusable inputs

def case_bad(mlp_teacher_path):
    folder = os.path.join(CASES, "bad")
    os.makedirs(folder)
    rng = np.random.default_rng(99)
    with open(os.path.join(folder, "random.onnx"), "wb") as f:
        f.write(rng.bytes(4096))
    with open(mlp_teacher_path, "rb") as f:
        whole = f.read()
    with open(os.path.join(folder, "truncated.onnx"), "wb") as f:
        f.write(whole[:len(whole) // 2])
    # a valid graph whose one initializer points outside the model's folder.
    # The fields are set by hand and the proto is serialised directly: nothing
    # here (onnx or onnxruntime) ever opens the referenced path.
    weight = TensorProto()
    weight.name = "weight"
    weight.data_type = TensorProto.FLOAT
    weight.dims.extend([4, 3])
    weight.data_location = TensorProto.EXTERNAL
    for key, value in (("location", "../../etc/hostname"), ("offset", "0"), ("length", str(4 * 3 * 4))):
        entry = weight.external_data.add()
        entry.key, entry.value = key, value
    graph = helper.make_graph(
        [helper.make_node("MatMul", ["features", "weight"], ["logits"], name="n1_MatMul")], "external",
        [helper.make_tensor_value_info("features", TensorProto.FLOAT, ["batch", 4])],
        [helper.make_tensor_value_info("logits", TensorProto.FLOAT, ["batch", 3])],
        initializer=[weight])
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)], ir_version=IR_VERSION,
                              producer_name=PRODUCER, producer_version=PRODUCER_VERSION)
    with open(os.path.join(folder, "external.onnx"), "wb") as f:
        f.write(model.SerializeToString())
    for name in ("random.onnx", "truncated.onnx"):
        with open(os.path.join(folder, name), "rb") as f:
            try:
                onnx.load_model_from_string(f.read())
            except Exception:
                continue
        raise AssertionError(f"{name} parses as ONNX")
    back = onnx.load_model_from_string(model.SerializeToString())
    assert back.graph.initializer[0].data_location == TensorProto.EXTERNAL
    save_npz(os.path.join(folder, "mismatch.npz"),
             {"features": rng.standard_normal((10, 63)).astype(np.float32)})
    save_npz(os.path.join(folder, "bad_labels.npz"),
             {"features": rng.standard_normal((10, 64)).astype(np.float32),
              "labels": rng.integers(0, 10, size=10).astype(np.float64)})
    # A model that fits the mlp set but scores 6 classes instead of 10.
    six = mlp_model([(small(rng, 64, 6), np.zeros(6, np.float32))], "six_classes", 64)
    with open(os.path.join(folder, "six_classes.onnx"), "wb") as f:
        f.write(six)
    # A model that fits the mlp set, scores 10 classes, and outputs NaN: Log of
    # negative logits.
    g = Graph()
    z = g.op("Gemm", ["features", g.w("fc.weight", small(rng, 64, 10)), g.w("fc.bias", np.zeros(10, np.float32))])
    g.op("Log", [z], out="logits")
    nan = g.model("nan_output", [("features", TensorProto.FLOAT, ["batch", 64])],
                  [("logits", TensorProto.FLOAT, ["batch", 10])])
    with open(os.path.join(folder, "nan_output.onnx"), "wb") as f:
        f.write(nan)
    # A tiny file that asks the engine for a 40000 x 40000 float tensor
    # (6.4 GB) while it is loaded: the memory cap must stop it.
    shape = helper.make_tensor("shape", TensorProto.INT64, [2], [40000, 40000])
    bomb_graph = helper.make_graph(
        [helper.make_node("ConstantOfShape", ["shape"], ["big"], name="fill",
                          value=helper.make_tensor("v", TensorProto.FLOAT, [1], [1.0])),
         helper.make_node("ReduceSum", ["big"], ["total"], name="sum", keepdims=0),
         helper.make_node("Add", ["features", "total"], ["logits"], name="add")],
        "memory_bomb",
        [helper.make_tensor_value_info("features", TensorProto.FLOAT, ["batch", 64])],
        [helper.make_tensor_value_info("logits", TensorProto.FLOAT, ["batch", 64])],
        initializer=[shape])
    bomb = helper.make_model(bomb_graph, opset_imports=[helper.make_opsetid("", OPSET)], ir_version=IR_VERSION,
                             producer_name=PRODUCER, producer_version=PRODUCER_VERSION)
    with open(os.path.join(folder, "memory_bomb.onnx"), "wb") as f:
        f.write(bomb.SerializeToString())
    # A model that loads and plans at batch 1 but needs about 25.6 MB per
    # sample: at batch 32 it needs about 820 MB, past a small memory cap.
    g = Graph()
    tiled = g.op("Tile", ["features", g.const("repeats", np.array([1, 100000], np.int64))])
    folded = g.op("Reshape", [tiled, g.const("fold", np.array([0, 10, 640000], np.int64))])
    g.op("ReduceSum", [folded, g.const("axes", np.array([2], np.int64))], out="logits", keepdims=0)
    hungry = g.model("batch_hungry", [("features", TensorProto.FLOAT, ["batch", 64])],
                     [("logits", TensorProto.FLOAT, ["batch", 10])])
    with open(os.path.join(folder, "batch_hungry.onnx"), "wb") as f:
        f.write(hungry)
    save_npz(os.path.join(folder, "big_labels.npz"),
             {"features": rng.standard_normal((10, 64)).astype(np.float32),
              "labels": np.array([0, 1, 2, 3, 4, 5, 6, 7, 8, 12], np.int64)})
    save_npz(os.path.join(folder, "negative_labels.npz"),
             {"features": rng.standard_normal((10, 64)).astype(np.float32),
              "labels": np.array([0, 1, 2, 3, 4, 5, 6, 7, 8, -1], np.int64)})
    # Its own generator, so that the files above stay byte for byte as they were.
    later = np.random.default_rng(77)
    # A head that underflows to -inf wherever a logit is not positive: Log of ReLU.
    g = Graph()
    z = g.op("Gemm", ["features", g.w("fc.weight", small(later, 64, 10)), g.w("fc.bias", np.zeros(10, np.float32))])
    g.op("Log", [g.op("Relu", [z])], out="logits")
    with open(os.path.join(folder, "neg_inf_output.onnx"), "wb") as f:
        f.write(g.model("neg_inf_output", [("features", TensorProto.FLOAT, ["batch", 64])],
                        [("logits", TensorProto.FLOAT, ["batch", 10])]))
    # A model whose class count is the size of its input's second axis, so
    # only the evaluation set says how many classes it scores.
    g = Graph()
    g.op("Identity", ["scores"], out="logits")
    with open(os.path.join(folder, "passthrough.onnx"), "wb") as f:
        f.write(g.model("passthrough", [("scores", TensorProto.FLOAT, ["batch", "classes"])],
                        [("logits", TensorProto.FLOAT, ["batch", "classes"])]))
    save_npz(os.path.join(folder, "scores10.npz"),
             {"scores": later.standard_normal((12, 10)).astype(np.float32),
              "labels": np.arange(12, dtype=np.int64) % 10})
    # Version 2's class names and slices.  Again a generator of their own, so
    # that every file above stays byte for byte as it was.
    v2 = np.random.default_rng(78)
    # class_names as an object array, which numpy can only store pickled.
    # save_npz reads every file back with allow_pickle=False, so this one is
    # written by hand: numpy's own format writer with allow_pickle=True, in a
    # zip laid out as save_npz lays it out (fixed timestamps, zip64 entries).
    pickled = {"features": v2.standard_normal((10, 64)).astype(np.float32),
               "labels": np.arange(10, dtype=np.int64),
               "class_names": np.array([f"grade {i}" for i in range(10)], dtype=object)}
    pickled_path = os.path.join(folder, "pickled_class_names.npz")
    with zipfile.ZipFile(pickled_path, "w", compression=zipfile.ZIP_DEFLATED) as dst:
        for key, arr in pickled.items():
            buf = io.BytesIO()
            np.lib.format.write_array(buf, arr, allow_pickle=True)
            entry = zipfile.ZipInfo(key + ".npy", date_time=(1980, 1, 1, 0, 0, 0))
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = 0o644 << 16
            with dst.open(entry, "w", force_zip64=True) as f:
                f.write(buf.getvalue())
    with np.load(pickled_path) as back:  # a reader that refuses pickles must refuse it
        assert back["features"].dtype == np.float32
        try:
            back["class_names"]
        except ValueError:
            pass
        else:
            raise AssertionError("class_names loads without allow_pickle")
    with np.load(pickled_path, allow_pickle=True) as back:
        assert back["class_names"].dtype == object and list(back["class_names"]) == list(pickled["class_names"])
    # 1001 samples, each its own slice: one distinct value past the limit of 1000.
    # Features in steps of 1/4 so that the file stays small.
    many = 1001
    save_npz(os.path.join(folder, "many_slices.npz"),
             {"features": (np.round(v2.standard_normal((many, 64)) * 4) / 4).astype(np.float32),
              "labels": np.arange(many, dtype=np.int64) % 10,
              "slices": np.arange(many, dtype=np.int64)})
    doc = {
        "case": "bad",
        "files": {
            "random.onnx": {"what": "4096 random bytes (numpy.random.default_rng(99).bytes)", "expect": "422 at model upload: not ONNX"},
            "truncated.onnx": {"what": f"cases/mlp/teacher.onnx cut to its first {len(whole) // 2} of {len(whole)} bytes",
                               "expect": "422 at model upload: not a complete ONNX model"},
            "external.onnx": {"what": "MatMul graph whose initializer 'weight' [4, 3] float32 uses external data, location '../../etc/hostname', offset 0, length 48",
                              "expect": "422 at model upload: external data is refused; the path must never be opened"},
            "mismatch.npz": {"what": "array 'features' float32 [10, 63]; the mlp models take [batch, 64]",
                             "expect": "201 at set upload; 422 when an evaluation pairs it with the mlp models"},
            "bad_labels.npz": {"what": "array 'features' float32 [10, 64] and 'labels' float64 [10]",
                               "expect": "422 at set upload: labels must be integers"},
            "six_classes.onnx": {"what": "Gemm 64 -> 6: fits the mlp set but scores 6 classes", "expect": "422 when paired with a 10-class teacher"},
            "nan_output.onnx": {"what": "Gemm 64 -> 10 then Log: NaN wherever a logit is negative", "expect": "the evaluation fails naming the model and the sample"},
            "memory_bomb.onnx": {"what": "ConstantOfShape [40000, 40000] float32 (6.4 GB) in a file of a few hundred bytes", "expect": "refused under the memory cap; the service stays up"},
            "batch_hungry.onnx": {"what": "Tile [batch, 64] x 100000, Reshape, ReduceSum -> [batch, 10]: about 25.6 MB per sample", "expect": "201 at upload; the evaluation fails under a small memory cap at batch 32"},
            "big_labels.npz": {"what": "mlp-shaped features with one label of 12", "expect": "201 at set upload; 422 when paired with 10-class models"},
            "negative_labels.npz": {"what": "mlp-shaped features with one label of -1", "expect": "422 at set upload"},
            "neg_inf_output.onnx": {"what": "Gemm 64 -> 10, Relu, Log: -inf wherever a logit is not positive", "expect": "the evaluation fails naming the model, the sample and -inf"},
            "passthrough.onnx": {"what": "Identity of input 'scores' [batch, classes]: C is the set's second axis", "expect": "the records cannot say C; creation loads the model to check"},
            "scores10.npz": {"what": "'scores' float32 [12, 10] and labels 0..9", "expect": "fits passthrough.onnx with C = 10"},
            "pickled_class_names.npz": {"what": "mlp-shaped 'features' float32 [10, 64], 'labels' int64 0..9, and "
                                                "'class_names' an object array of 10 strings, stored pickled "
                                                "(numpy.lib.format.write_array with allow_pickle=True)",
                                        "expect": "422 at set upload: class_names must be a numpy string array, "
                                                  "never pickled objects; nothing is unpickled"},
            "many_slices.npz": {"what": f"mlp-shaped 'features' float32 [{many}, 64], 'labels' int64 0..9, and "
                                        f"'slices' int64 0..{many - 1}: {many} distinct values",
                                "expect": "422 at set upload: at most 1000 distinct slice values"},
        },
        "sources": {"expect": "api.md (status codes of the HTTP contract); metrics.md, 'Class names' and "
                              "'Slices' (version 2) for pickled_class_names.npz and many_slices.npz"},
    }
    with open(os.path.join(folder, "expected.json"), "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")


# --------------------------------------------------------------------------
# Latency from recorded rounds (docs/metrics.md, "Latency and throughput")

def nearest_rank(values, q):
    """sorted[ceil(q * R) - 1], with q exact (Fraction) so 0.9 * 100 is 90."""
    s = np.sort(np.asarray(values, dtype=np.float64))
    return float(s[math.ceil(Fraction(q) * len(s)) - 1])


def quantile_ranks(r, q, confidence):
    """1-based ranks of the order-statistic interval, from scipy.stats.binom.ppf
    (Conover, Practical Nonparametric Statistics, 3rd ed., section 3.2)."""
    lo = int(scipy.stats.binom.ppf((1 - confidence) / 2, r, q))
    hi = int(scipy.stats.binom.ppf((1 + confidence) / 2, r, q)) + 1
    return max(lo, 1), min(hi, r), lo, hi


def quantile_interval(values, q, confidence=0.95):
    s = np.sort(np.asarray(values, dtype=np.float64))
    l, u, _, _ = quantile_ranks(len(s), q, confidence)
    return [float(s[l - 1]), float(s[u - 1])]


def pace(a, b, tol):
    """A against B: faster, slower or equal, from the median ratio's 95 % interval."""
    lo, hi = quantile_interval(np.asarray(a) / np.asarray(b), 0.5)
    if hi < 1 / (1 + tol):
        return "faster"
    if lo > 1 + tol:
        return "slower"
    return "equal"


def case_timing(seed=21):
    folder = os.path.join(CASES, "timing")
    os.makedirs(folder)
    intervals = []
    for r in list(range(1, 41)) + [59, 60, 99, 100, 101, 250, 1000, 100000]:
        for q in (0.5, 0.9):
            for c in (0.95, 0.9, 0.99):
                l, u, raw_l, raw_u = quantile_ranks(r, q, c)
                intervals.append({"r": r, "q": q, "confidence": c, "l": l, "u": u,
                                  "ppf_low": raw_l, "ppf_high_plus_1": raw_u})
    # The one worked example the definition gives: R = 100, q = 0.5 -> [t(40), t(61)].
    assert quantile_ranks(100, 0.5, 0.95)[:2] == (40, 61)

    rng = np.random.default_rng(seed)
    rounds_n = 100
    # A shared drift per round (the machine), and each model's own noise.
    drift = np.exp(rng.normal(0, 0.05, rounds_n)) * np.where(np.arange(rounds_n) >= 60, 1.4, 1.0)
    base = {"teacher": 2.0, "close": 0.5, "closer": 0.505, "slow": 1.2}
    rounds = {name: (ms * drift * np.exp(rng.normal(0, 0.01, rounds_n))).tolist()
              for name, ms in base.items()}
    models = list(base)
    figures = {}
    for name in models:
        x = np.asarray(rounds[name])
        f = {"p50_ms": nearest_rank(x, "1/2"), "p50_ci_ms": quantile_interval(x, 0.5),
             "p90_ms": nearest_rank(x, "9/10"), "p90_ci_ms": quantile_interval(x, 0.9),
             "p99_ms": nearest_rank(x, "99/100"), "mean_ms": float(np.mean(x)),
             "stdev_ms": float(np.std(x, ddof=1))}
        if name != "teacher":
            ratios = np.asarray(rounds["teacher"]) / x
            f["speedup"] = nearest_rank(ratios, "1/2")
            f["speedup_ci"] = quantile_interval(ratios, 0.5)
        figures[name] = f
    paces = {f"{a}/{b}": pace(rounds[a], rounds[b], 0.03) for a in models for b in models if a != b}
    assert paces["close/closer"] == "equal" and paces["slow/close"] == "slower"
    doc = {
        "case": "timing",
        "sources": {
            "intervals": "scipy.stats.binom.ppf: l = ppf((1 - c) / 2, R, q), u = ppf((1 + c) / 2, R, q) + 1, "
                         "clamped to [1, R] (Conover 1999, section 3.2)",
            "figures": "numpy: nearest-rank percentiles with exact q, mean, std(ddof=1); paired median of "
                       "teacher_ms / student_ms per round",
            "paces": "the median ratio's 95 % interval against 1 / (1 + tol) and 1 + tol, tol = 0.03",
        },
        "intervals": intervals,
        "models": models,
        "rounds": [[rounds[m][i] for m in models] for i in range(rounds_n)],
        "tolerance": 0.03,
        "figures": figures,
        "paces": paces,
    }
    with open(os.path.join(folder, "expected.json"), "w") as f:
        json.dump(doc, f, indent=1, allow_nan=False)
        f.write("\n")


# Convolutions of several layouts, each run over a set larger than one bulk batch
# (32 images), so that images 2 to 32 of a batch and a last short batch go through
# every im2col path of the engine. The whole output is compared, element by element.
CONV_LAYOUTS = {
    # stem: (input [C, H, W], output channels, Conv attributes)
    "grouped": ((8, 12, 10), 8, dict(kernel_shape=[3, 3], pads=[1, 1, 1, 1], group=4)),
    "strided_dilated": ((3, 13, 11), 6, dict(kernel_shape=[3, 3], strides=[2, 2], dilations=[2, 2],
                                             pads=[2, 1, 0, 1])),
    "wide_kernel": ((4, 9, 9), 5, dict(kernel_shape=[5, 5], pads=[2, 2, 2, 2])),
    "depthwise": ((6, 10, 10), 6, dict(kernel_shape=[3, 3], pads=[1, 1, 1, 1], group=6)),
}


def case_conv_layouts(seed=41, n=45):
    folder = os.path.join(CASES, "conv_layouts")
    os.makedirs(os.path.join(folder, "ort"))
    rng = np.random.default_rng(seed)
    models = {}
    for stem, ((c, h, w), out_c, attrs) in CONV_LAYOUTS.items():
        kh, kw = attrs["kernel_shape"]
        g = Graph()
        weight = small(rng, out_c, c // attrs.get("group", 1), kh, kw, scale=0.3)
        x = g.op("Conv", ["image", g.w("conv.weight", weight), g.w("conv.bias", small(rng, out_c))], **attrs)
        g.op("Flatten", [x], out="features", axis=1)
        mb = g.model(stem, [("image", TensorProto.FLOAT, ["batch", c, h, w])],
                     [("features", TensorProto.FLOAT, ["batch", "width"])])
        image = rng.normal(size=(n, c, h, w)).astype(np.float32)
        out = run(mb, {"image": image})
        path = os.path.join(folder, f"{stem}.onnx")
        with open(path, "wb") as f:
            f.write(mb)
        save_npz(os.path.join(folder, f"{stem}.npz"), {"image": image})
        np.save(os.path.join(folder, "ort", f"{stem}.npy"), out)
        models[stem] = {"file": f"{stem}.onnx", "data": f"{stem}.npz", "input": [c, h, w],
                        "conv": {k: v for k, v in attrs.items()}, "output": list(out.shape)}
    doc = {
        "case": "conv_layouts",
        "samples": n,
        "models": models,
        "sources": {"ort/*.npy": SOURCES["ort/*.npy"]},
    }
    with open(os.path.join(folder, "expected.json"), "w") as f:
        json.dump(doc, f, indent=1, allow_nan=False)
        f.write("\n")


# --------------------------------------------------------------------------

def main():
    if os.path.isdir(CASES):
        shutil.rmtree(CASES)
    os.makedirs(CASES)
    summary = {}

    doc, outs, zs, dropped = mlp_pair_case("mlp", 1, 64, [256, 128], [("wide", 64), ("narrow", 32)], 10, 300, twin=True)
    check_band(doc, skip=("student_twin",))
    twin = doc["students"]["student_twin"]
    assert np.array_equal(outs["teacher"], outs["student_twin"])
    assert twin["fidelity"]["agreement"] == 1.0 and abs(twin["fidelity"]["kl"]) < 1e-12
    assert abs(twin["fidelity"]["kl_t1"]) < 1e-12 and abs(twin["fidelity"]["js"]) < 1e-12
    assert twin["accuracy"]["mcnemar_p"] == 1.0 and twin["accuracy"]["b"] == twin["accuracy"]["c"] == 0
    summary["mlp"] = (doc, dropped)

    cdoc, dropped = case_cnn()
    check_band(cdoc)
    summary["cnn"] = (cdoc, dropped)

    tdoc, dropped = case_text()
    check_band(tdoc)
    summary["text"] = (tdoc, dropped)

    sdoc, outs, zs, dropped = mlp_pair_case("softmax_head", 4, 24, [64], [("logits", 16)], 5, 250, teacher_softmax=True)
    check_band(sdoc)
    assert sdoc["models"]["teacher"]["output_kind"] == "probabilities"
    assert sdoc["models"]["student_logits"]["output_kind"] == "logits"
    assert np.any(outs["teacher"] == 0.0) and np.any(outs["teacher"] < PROB_FLOOR)
    summary["softmax_head"] = (sdoc, dropped)

    xdoc, dropped, info = case_ties()
    for s in xdoc["students"].values():
        assert 0 < s["fidelity"]["agreement"] < 1
    summary["ties"] = (xdoc, dropped)

    bdoc, _, _, dropped = mlp_pair_case("binary", 6, 16, [32], [("small", 4)], 2, 300)
    check_band(bdoc)
    summary["binary"] = (bdoc, dropped)

    wdoc, _, _, dropped = mlp_pair_case("wide", 7, 32, [128], [("half", 64)], 100, 300,
                                     teacher_bias=3.0, student_bias=2.0)
    check_band(wdoc)
    summary["wide"] = (wdoc, dropped)

    fdoc, _, _, dropped = mlp_pair_case("fixed_batch", 8, 8, [16], [("tiny", 4)], 3, 50, batch=1)
    check_band(fdoc)
    summary["fixed_batch"] = (fdoc, dropped)

    udoc, _, _, dropped = mlp_pair_case("unlabeled", 9, 20, [64], [("small", 16)], 10, 200,
                                        labelled=False, data_name="x")
    check_band(udoc)
    assert udoc["teacher_accuracy"] is None
    summary["unlabeled"] = (udoc, dropped)

    ldoc, dropped = case_baseline()
    check_band(ldoc, skip=("twin",))
    summary["baseline"] = (ldoc, dropped)

    case_bad(os.path.join(CASES, "mlp", "teacher.onnx"))
    case_timing()
    case_conv_layouts()

    print(f"numpy {np.__version__}, scipy {scipy.__version__}, statsmodels {statsmodels.__version__}, "
          f"onnx {onnx.__version__}, onnxruntime {ort.__version__}")
    for name, (d, dropped) in summary.items():
        ta = d["teacher_accuracy"]
        line = f"{name:13s} N={d['samples']:3d} C={d['classes']:3d} dropped={dropped:2d}"
        line += f" teacher_top1={ta['top1']:.3f}" if ta else " unlabeled"
        line += " " + " ".join(f"{s}:agree={v['fidelity']['agreement']:.3f}" for s, v in d["students"].items())
        print(line)
    return 0


if __name__ == "__main__":
    sys.exit(main())
