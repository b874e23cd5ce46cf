#!/usr/bin/env python3
"""The notebook path of the benchmark: what an engineer would write instead of
calling Proctor, with onnxruntime, numpy, scipy and statsmodels.

It runs the evaluation set through the teacher and each student in batches,
computes the figures of docs/metrics.md from the logits (in f64), measures
single-stream latency the way metrics.md section 5 describes Proctor's timed
rounds, and writes everything as JSON. compare.py runs it in a fresh
interpreter, so that the imports count as they would in a notebook, and
reports the import time separately.

  python3 notebook.py --teacher T.onnx --student S1.onnx --student S2.onnx \
      --data eval.npz --threads 1 --warmup 10 --iterations 100 --json out.json

--threads N sets onnxruntime's intra_op_num_threads for the bulk pass (0 is
onnxruntime's default). The timed rounds always use sessions with one thread,
as Proctor's do; with --threads other than 1 that means a second session per
model.

  python3 notebook.py --per-call MODEL.onnx --data eval.npz --calls 200

prints the median per-call time of one model at batch 1 on one thread.
"""
import time

_T0 = time.perf_counter()
import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import os  # noqa: E402
import sys  # noqa: E402
from fractions import Fraction  # noqa: E402

IMPORTS_S = {}  # seconds per third-party import, in import order


def _timed(label, t):
    IMPORTS_S[label] = time.perf_counter() - t
    return time.perf_counter()


_t = _timed("stdlib", _T0)
import numpy as np  # noqa: E402
_t = _timed("numpy", _t)
import onnxruntime as ort  # noqa: E402
_t = _timed("onnxruntime", _t)
import scipy.special  # noqa: E402
import scipy.stats  # noqa: E402
_t = _timed("scipy", _t)
from statsmodels.stats.proportion import proportion_confint  # noqa: E402
_t = _timed("statsmodels", _t)
import onnx  # noqa: E402  (only for parameters and MACs)
_t = _timed("onnx", _t)

IMPORT_S = time.perf_counter() - _T0

NOT_INPUTS = {"labels", "class_names", "slices"}
ECE_BINS = 15
Z95 = float(scipy.stats.norm.ppf(0.975))  # 1.959963984540054


# --------------------------------------------------------------------------
# size (metrics.md section 4)

def count_macs(path):
    """Multiply-accumulates of one sample, counted from the graph: Conv
    (output elements x input channels per group x kernel), Gemm and MatMul
    (output elements x the shared dimension). onnx.shape_inference gives the
    shapes with every symbolic dimension set to 1."""
    m = onnx.load(path)
    for vi in m.graph.input:
        for d in vi.type.tensor_type.shape.dim:
            if not d.HasField("dim_value"):
                d.dim_value = 1
    m = onnx.shape_inference.infer_shapes(m, strict_mode=True)
    shapes = {i.name: list(i.dims) for i in m.graph.initializer}
    for vi in list(m.graph.input) + list(m.graph.value_info) + list(m.graph.output):
        shapes[vi.name] = [d.dim_value for d in vi.type.tensor_type.shape.dim]
    macs = 0
    for node in m.graph.node:
        out = shapes.get(node.output[0])
        if node.op_type == "Conv":
            wt = shapes[node.input[1]]
            macs += math.prod(out) * math.prod(wt[1:])
        elif node.op_type == "Gemm":
            a = shapes[node.input[0]]
            trans_a = next((x.i for x in node.attribute if x.name == "transA"), 0)
            macs += math.prod(out) * (a[0] if trans_a else a[1])
        elif node.op_type == "MatMul":
            macs += math.prod(out) * shapes[node.input[0]][-1]
    return macs


def size_figures(path):
    """bytes: os.path.getsize; parameters: onnx.load, sum over
    graph.initializer of prod(dims); macs: count_macs."""
    m = onnx.load(path)
    return {"bytes": os.path.getsize(path),
            "parameters": int(sum(math.prod(i.dims) for i in m.graph.initializer)),
            "macs": count_macs(path)}


# --------------------------------------------------------------------------
# running the models

def session(path, threads):
    so = ort.SessionOptions()
    so.intra_op_num_threads = threads
    if threads == 1:
        so.inter_op_num_threads = 1
    so.log_severity_level = 3
    return ort.InferenceSession(path, so, providers=["CPUExecutionProvider"])


def load_set(path):
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    feeds = {k: v for k, v in arrays.items() if k not in NOT_INPUTS}
    return feeds, arrays.get("labels")


def scored_output(sess):
    """The first float output (metrics.md: the first float tensor that
    squeezes to [N, C])."""
    for i, o in enumerate(sess.get_outputs()):
        if o.type in ("tensor(float)", "tensor(double)", "tensor(float16)"):
            return i, o.name
    raise SystemExit("no float output")


def bulk(sess, feeds, batch_size):
    """Every sample through one model at batch_size; returns (outputs,
    summed engine seconds)."""
    names = [i.name for i in sess.get_inputs()]
    idx, _ = scored_output(sess)
    n = len(next(iter(feeds.values())))
    outs, engine = [], 0.0
    for s in range(0, n, batch_size):
        batch = {k: feeds[k][s:s + batch_size] for k in names}
        t = time.perf_counter()
        out = sess.run(None, batch)[idx]
        engine += time.perf_counter() - t
        outs.append(out)
    out = np.concatenate(outs)
    return out.reshape(n, -1), engine


def to_logits(out):
    """Output kind `auto` (metrics.md section 1): probabilities when every
    value is in [0, 1] and every row sums to 1 within 1e-3, then
    ln(max(p, 1e-12)); else logits. Both in f64."""
    z = out.astype(np.float64)
    if z.min() >= 0 and z.max() <= 1 and np.all(np.abs(z.sum(1) - 1) <= 1e-3):
        return np.log(np.maximum(z, 1e-12)), "probabilities"
    return z, "logits"


# --------------------------------------------------------------------------
# fidelity and accuracy (metrics.md sections 2 and 3)

def soft(z, t=1.0):
    """softmax_T as exp(scipy.special.log_softmax(z / T))."""
    return np.exp(scipy.special.log_softmax(z / t, axis=1))


def wilson(count, n):
    """statsmodels proportion_confint(count, n, alpha=0.05, method="wilson")."""
    lo, hi = proportion_confint(int(count), int(n), alpha=0.05, method="wilson")
    return [float(lo), float(hi)]


def in_topk(z, target, k):
    """[target among the k largest of z], ties by lowest index: numpy rank
    counting (classes strictly larger, or equal with a lower index)."""
    v = z[np.arange(len(z)), target][:, None]
    cls = np.arange(z.shape[1])[None, :]
    rank = np.sum((z > v) | ((z == v) & (cls < target[:, None])), axis=1)
    return rank < k


def kl_mean(zt, zs, t):
    """scipy.special.rel_entr(q, p).sum(axis=1).mean() at temperature t."""
    return float(scipy.special.rel_entr(soft(zt, t), soft(zs, t)).sum(axis=1).mean())


def ece(z, y):
    """15 equal-width bins of max softmax, bin = min(15, max(1, ceil(15 c)));
    numpy.bincount over the bins."""
    conf = soft(z).max(axis=1)
    hit = (np.argmax(z, axis=1) == y).astype(np.float64)
    b = np.minimum(ECE_BINS, np.maximum(1, np.ceil(ECE_BINS * conf))).astype(np.int64)
    n_m = np.bincount(b, minlength=ECE_BINS + 1)
    gap = np.abs(np.bincount(b, hit, ECE_BINS + 1) - np.bincount(b, conf, ECE_BINS + 1))
    return float(gap.sum() / len(z))  # sum_m n_m/N |acc_m - conf_m| = sum_m |sum hit - sum conf| / N


def accuracy(z, y, k):
    hit = np.argmax(z, axis=1) == y
    return {
        "top1": float(hit.mean()),                                      # numpy.mean
        "top1_ci": wilson(hit.sum(), len(y)),                           # statsmodels wilson
        "topk": float(in_topk(z, y, k).mean()),                         # rank counting
        "ece": ece(z, y),                                               # numpy.bincount
        "ece_bins": ECE_BINS,
        "nll": float(-scipy.special.log_softmax(z, axis=1)[np.arange(len(y)), y].mean()),  # log_softmax
    }


def fidelity(zt, zs, t, k):
    n, c = zt.shape
    at, as_ = np.argmax(zt, axis=1), np.argmax(zs, axis=1)              # numpy.argmax
    same = at == as_
    q1, p1 = soft(zt), soft(zs)
    m = 0.5 * (q1 + p1)
    qt = soft(zt, t)
    ct = zt - zt.mean(axis=1, keepdims=True)
    cs = zs - zs.mean(axis=1, keepdims=True)
    counts = np.bincount(at, minlength=c)
    agree = np.bincount(at[same], minlength=c)
    if (~same).any():
        pairs, cnt = np.unique(np.stack([at[~same], as_[~same]], axis=1), axis=0, return_counts=True)
    else:
        pairs, cnt = np.zeros((0, 2), np.int64), np.zeros(0, np.int64)
    dis = sorted(zip((-cnt).tolist(), pairs[:, 0].tolist(), pairs[:, 1].tolist()))[:10]
    return {
        "agreement": float(same.mean()),                                # numpy.mean
        "agreement_ci": wilson(same.sum(), n),                          # statsmodels wilson
        "topk_agreement": float(in_topk(zs, at, k).mean()),             # rank counting
        "kl": kl_mean(zt, zs, t),                                       # scipy.special.rel_entr
        "kl_t1": kl_mean(zt, zs, 1.0),                                  # scipy.special.rel_entr
        "js": float(np.mean(0.5 * scipy.special.rel_entr(q1, m).sum(1)
                            + 0.5 * scipy.special.rel_entr(p1, m).sum(1))),  # scipy.special.rel_entr
        "soft_cross_entropy": float(np.mean(-np.sum(qt * scipy.special.log_softmax(zs / t, axis=1), axis=1))),
        "logit_mse": float(np.mean((cs - ct) ** 2)),                    # numpy
        "class_agreement": [{"class": int(i), "samples": int(counts[i]),
                             "agreement": float(agree[i] / counts[i])} for i in range(c) if counts[i]],
        "disagreements": [{"teacher_class": a, "student_class": b, "count": -nc} for nc, a, b in dis],
    }


def student_accuracy(zt, zs, y, t, alpha, k, teacher_acc, sce):
    acc = accuracy(zs, y, k)
    n = len(y)
    tr, sr = np.argmax(zt, axis=1) == y, np.argmax(zs, axis=1) == y
    b, c = int(np.sum(~tr & sr)), int(np.sum(tr & ~sr))
    d = (b - c) / n
    se = math.sqrt((b + c) - (b - c) ** 2 / n) / n
    acc.update({
        "kd_loss": alpha * t * t * sce + (1 - alpha) * acc["nll"],
        "delta": acc["top1"] - teacher_acc["top1"],
        "delta_ci": [d - Z95 * se, d + Z95 * se],                       # z = scipy.stats.norm.ppf(0.975)
        "retention": acc["top1"] / teacher_acc["top1"] if teacher_acc["top1"] > 0 else None,
        # exact two-sided McNemar: scipy.stats.binomtest
        "mcnemar_p": 1.0 if b + c == 0 else
        float(scipy.stats.binomtest(min(b, c), b + c, 0.5, alternative="two-sided").pvalue),
        "negative_flip_rate": c / n,
    })
    return acc


# --------------------------------------------------------------------------
# latency (metrics.md section 5)

def nearest_rank(values, q):
    """sorted[ceil(q R) - 1] with q exact (numpy.sort, fractions.Fraction)."""
    s = np.sort(values)
    return float(s[math.ceil(Fraction(q) * len(s)) - 1])


def order_interval(values, q):
    """[t(max(l, 1)), t(min(u, R))]: l = scipy.stats.binom.ppf(0.025, R, q),
    u = scipy.stats.binom.ppf(0.975, R, q) + 1 (1-based order statistics)."""
    s = np.sort(values)
    r = len(s)
    lo = int(scipy.stats.binom.ppf(0.025, r, float(q)))
    hi = int(scipy.stats.binom.ppf(0.975, r, float(q))) + 1
    return [float(s[max(lo, 1) - 1]), float(s[min(hi, r) - 1])]


def latency_figures(ms):
    ms = np.asarray(ms)
    return {
        "p50_ms": nearest_rank(ms, Fraction(1, 2)), "p50_ci_ms": order_interval(ms, Fraction(1, 2)),
        "p90_ms": nearest_rank(ms, Fraction(9, 10)), "p90_ci_ms": order_interval(ms, Fraction(9, 10)),
        "p99_ms": nearest_rank(ms, Fraction(99, 100)),
        "mean_ms": float(ms.mean()),
        "stdev_ms": float(ms.std(ddof=1)) if len(ms) > 1 else None,
    }


def one_sample_feeds(sess, feeds, k):
    names = [i.name for i in sess.get_inputs()]
    return [{n: feeds[n][i:i + 1] for n in names} for i in range(k)]


def timed_rounds(sessions, feeds, warmup, iterations):
    """Batch 1; K = min(N, iterations, 32) samples, round r on sample r mod K;
    each model warms up `warmup` times over the same K samples, then every
    round runs each model once in an order rotated by one each round; each
    run timed with time.perf_counter around sess.run alone (at least 1 ns).
    Returns ms[round][model]."""
    n = len(next(iter(feeds.values())))
    k = min(n, iterations, 32)
    per_model = [one_sample_feeds(s, feeds, k) for s in sessions]
    for s, f in zip(sessions, per_model):
        for w in range(warmup):
            s.run(None, f[w % k])
    m = len(sessions)
    rounds = np.zeros((iterations, m))
    for r in range(iterations):
        for j in range(m):
            i = (r + j) % m
            sess, f = sessions[i], per_model[i][r % k]
            t = time.perf_counter()
            sess.run(None, f)
            rounds[r, i] = max(time.perf_counter() - t, 1e-9) * 1e3
    return rounds


# --------------------------------------------------------------------------

def evaluate(args):
    t_start = time.perf_counter()
    paths = [args.teacher] + args.student
    feeds, labels = load_set(args.data)
    bulk_sess = [session(p, args.threads) for p in paths]
    time_sess = bulk_sess if args.threads == 1 else [session(p, 1) for p in paths]
    t_loaded = time.perf_counter()

    outs, engine_s = zip(*(bulk(s, feeds, args.batch_size) for s in bulk_sess))
    t_bulk = time.perf_counter()

    rounds = timed_rounds(time_sess, feeds, args.warmup, args.iterations)
    t_timing = time.perf_counter()

    n = len(outs[0])
    logits, kinds = zip(*(to_logits(o) for o in outs))
    zt = logits[0]
    c = zt.shape[1]
    k = min(5, c)
    T, alpha = args.temperature, args.alpha
    sizes = [size_figures(p) for p in paths]
    t_acc = accuracy(zt, labels, k) if labels is not None else None
    teacher = {"model": os.path.basename(args.teacher), "output_kind": kinds[0], "accuracy": t_acc,
               "size": sizes[0],
               "latency": latency_figures(rounds[:, 0]) | {"throughput_sps": n / engine_s[0]}}
    candidates = []
    for j, path in enumerate(args.student, start=1):
        zs = logits[j]
        fid = fidelity(zt, zs, T, k)
        acc = (student_accuracy(zt, zs, labels, T, alpha, k, t_acc, fid["soft_cross_entropy"])
               if labels is not None else None)
        ratio = rounds[:, 0] / rounds[:, j]
        lat = latency_figures(rounds[:, j]) | {
            "throughput_sps": n / engine_s[j],
            "speedup": nearest_rank(ratio, Fraction(1, 2)),             # median of per-round ratios
            "speedup_ci": order_interval(ratio, Fraction(1, 2))}
        size = sizes[j] | {"size_ratio": sizes[j]["bytes"] / sizes[0]["bytes"],
                           "parameter_ratio": (sizes[j]["parameters"] / sizes[0]["parameters"]
                                               if sizes[0]["parameters"] else None)}
        candidates.append({"model": os.path.basename(path), "output_kind": kinds[j], "fidelity": fid,
                           "accuracy": acc, "size": size, "latency": lat})
    # Ranking without gates: agreement (high first), then bytes; every
    # candidate passes, so the verdict is go and rank 1 is recommended.
    order = sorted(range(len(candidates)),
                   key=lambda i: (-candidates[i]["fidelity"]["agreement"], candidates[i]["size"]["bytes"], i))
    for rank, i in enumerate(order, start=1):
        candidates[i]["rank"] = rank
    t_end = time.perf_counter()
    return {
        "threads": args.threads,
        "imports_s": IMPORTS_S,
        "stages_s": {"imports": IMPORT_S, "loading": t_loaded - t_start, "bulk": t_bulk - t_loaded,
                     "timing": t_timing - t_bulk, "scoring": t_end - t_timing,
                     "in_process": t_end - _T0},
        "report": {"samples": n, "temperature": T, "alpha": alpha, "teacher": teacher,
                   "candidates": candidates, "verdict": "go",
                   "recommended": candidates[order[0]]["model"]},
        "rounds": rounds.tolist(),
    }


def per_call(args):
    """Median over `calls` runs at batch 1 on one thread, after `warmup` runs,
    cycling over the first min(N, 32) samples; time.perf_counter."""
    feeds, _ = load_set(args.data)
    sess = session(args.per_call, 1)
    k = min(len(next(iter(feeds.values()))), 32)
    f = one_sample_feeds(sess, feeds, k)
    for w in range(args.warmup):
        sess.run(None, f[w % k])
    ms = []
    for i in range(args.calls):
        t = time.perf_counter()
        sess.run(None, f[i % k])
        ms.append((time.perf_counter() - t) * 1e3)
    return {"model": os.path.basename(args.per_call), "calls": args.calls,
            "median_ms": float(np.median(ms)), "min_ms": float(np.min(ms))}


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--teacher")
    ap.add_argument("--student", action="append", default=[])
    ap.add_argument("--data", required=True)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--batch-size", type=int, default=32)
    ap.add_argument("--temperature", type=float, default=4.0)
    ap.add_argument("--alpha", type=float, default=0.5)
    ap.add_argument("--warmup", type=int, default=10)
    ap.add_argument("--iterations", type=int, default=100)
    ap.add_argument("--per-call", metavar="MODEL")
    ap.add_argument("--calls", type=int, default=200)
    ap.add_argument("--json", metavar="FILE")
    args = ap.parse_args()
    if args.per_call:
        result = per_call(args)
    else:
        if not args.teacher or not args.student:
            ap.error("--teacher and at least one --student are needed")
        result = evaluate(args)
    text = json.dumps(result, indent=1)
    if args.json:
        with open(args.json, "w") as f:
            f.write(text)
    else:
        sys.stdout.write(text + "\n")


if __name__ == "__main__":
    main()
