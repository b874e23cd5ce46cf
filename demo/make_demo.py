#!/usr/bin/env python3
"""Build the bundled Proctor demo scenario: a teacher and four students.

Scenario (fictional, all data synthetic): a wind-farm operator classifies
one-second acoustic frames from nacelle microphones -- 64 spectral band
energies per frame -- into six turbine states. A wide teacher MLP is trained
on a large labelled split; small students are trained on a small transfer
split, either by knowledge distillation from the teacher's softened logits
or on hard labels only. Everything is exported as ONNX for Proctor to gate.

Distillation loss (source: G. Hinton, O. Vinyals, J. Dean, "Distilling the
Knowledge in a Neural Network", 2015):

    L = alpha * T^2 * CE(softmax(z_t / T), softmax(z_s / T))
        + (1 - alpha) * CE(y, softmax(z_s))

    dL/dz_s = alpha * T * (p_s^T - p_t^T) + (1 - alpha) * (p_s - onehot(y))

Only numpy and onnx are needed (onnxruntime is used for a cross-check when
installed). Run from anywhere:  python3 demo/make_demo.py
"""
import os

# Single-threaded, deterministic BLAS; must be set before numpy is imported.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse
import sys
import time

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT_DIR = os.path.dirname(os.path.abspath(__file__))
N_BANDS = 64
N_CLASSES = 6
STATES = ["normal", "blade_crack", "bearing_wear", "yaw_misalignment",
          "ice_load", "loose_panel"]

N_TEACHER_TRAIN = 20000
N_TRANSFER = 1500
N_EVAL = 2000
LABEL_NOISE = 0.03        # fraction of training labels replaced at random
FEATURE_STEP = 1.0 / 32   # features are quantised, as a frame encoder would
AGREEMENT_MARGIN = 0.02   # distilled_64 must beat hard_64 by at least this

DEFAULT_SEED = 7


# --------------------------------------------------------------------------
# Synthetic acoustic frames
# --------------------------------------------------------------------------
K = np.arange(N_BANDS, dtype=np.float64)


def bump(center, width, amp):
    """Gaussian bump(s) over band index. center/amp may be [N, 1] arrays."""
    return amp * np.exp(-0.5 * ((K[None, :] - center) / width) ** 2)


def synth_frames(n, rng):
    """Return (log-energy features [n, 64] float64, clean labels [n])."""
    y = rng.integers(0, N_CLASSES, size=n)
    col = lambda a: np.asarray(a, dtype=np.float64).reshape(-1, 1)

    # Shared machine sound: pink-ish broadband floor plus rotor/gearbox
    # harmonics whose position drifts with rotor speed.
    speed = col(rng.normal(1.0, 0.03, n))
    spec = 1.0 / (1.0 + K[None, :] / 6.0) + np.zeros((n, 1))
    for h, a in [(1, 0.9), (2, 0.6), (3, 0.4), (4, 0.25)]:
        spec += bump(5.0 * h * speed, 1.2, a)
    spec += bump(27.0 * speed, 2.0, 0.15)          # gear mesh

    # Fault severity: low severity makes a fault sound like its look-alike.
    sev = col(rng.beta(1.6, 1.4, n))

    m = col(y == 2)   # bearing wear: faint high-frequency tones (~ normal)
    spec += m * (bump(46.0, 1.8, 0.16 * sev) + bump(51.0, 2.2, 0.10 * sev))

    m = col(y == 1)   # blade crack: mid-band tones plus a broad click floor
    spec += m * (bump(21.0 * speed, 2.2, 0.45 * sev)
                 + bump(33.0 * speed, 2.8, 0.30 * sev)
                 + bump(36.0, 8.0, 0.06 * sev))

    m = col(y == 4)   # ice load: the same tones, shifted down, + imbalance
    spec += m * (bump(19.5 * speed, 2.2, 0.45 * sev)
                 + bump(31.0 * speed, 2.8, 0.30 * sev)
                 + bump(36.0, 8.0, 0.04 * sev)
                 + bump(5.0 * speed, 1.2, 0.25 * sev))

    m = col(y == 3)   # yaw misalignment: 3x harmonic up, broad low swell
    spec += m * (bump(15.0 * speed, 1.5, 0.35 * sev) + bump(10.0, 5.0, 0.3 * sev))

    m = col(y == 5)   # loose panel: rattle comb high in the spectrum
    pitch = col(rng.uniform(2.5, 3.5, n))
    rattle = np.zeros((n, N_BANDS))
    for j in range(4):
        rattle += bump(52.0 + j * pitch, 0.9, 0.12 * sev)
    spec += m * rattle

    # Per-frame nuisance: overall gain (wind, distance), spectral tilt
    # (microphone housing), and per-band estimation noise.
    gain = np.exp(col(rng.normal(0.0, 0.35, n)))
    tilt = np.exp(col(rng.normal(0.0, 0.20, n)) * (K[None, :] - 32.0) / 32.0)
    band_noise = np.exp(rng.normal(0.0, 0.12, (n, N_BANDS)))
    energy = gain * tilt * spec * band_noise + 0.01
    return np.log(energy), y


def make_split(n, rng, label_noise):
    x, y = synth_frames(n, rng)
    if label_noise > 0:
        flip = rng.random(n) < label_noise
        y = y.copy()
        y[flip] = rng.integers(0, N_CLASSES, size=int(flip.sum()))
    return x, y


# --------------------------------------------------------------------------
# MLP with manual backprop
# --------------------------------------------------------------------------
def init_mlp(sizes, rng):
    params = []
    for fan_in, fan_out in zip(sizes[:-1], sizes[1:]):
        w = rng.normal(0.0, np.sqrt(2.0 / fan_in), (fan_in, fan_out))
        params.append([w.astype(np.float32), np.zeros(fan_out, np.float32)])
    return params


def forward(params, x):
    """Return logits and the list of layer inputs (for backprop)."""
    acts = [x]
    h = x
    for i, (w, b) in enumerate(params):
        h = h @ w + b
        if i < len(params) - 1:
            h = np.maximum(h, 0.0)
            acts.append(h)
    return h, acts


def backward(params, acts, dz):
    grads = []
    for i in range(len(params) - 1, -1, -1):
        w, _ = params[i]
        a = acts[i]
        grads.append([a.T @ dz, dz.sum(axis=0)])
        if i > 0:
            dz = (dz @ w.T) * (a > 0)
    return grads[::-1]


def softmax(z):
    z = z - z.max(axis=1, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=1, keepdims=True)


class Adam:
    def __init__(self, params, lr, wd=0.0, b1=0.9, b2=0.999, eps=1e-8):
        self.lr, self.wd, self.b1, self.b2, self.eps = lr, wd, b1, b2, eps
        self.m = [[np.zeros_like(p) for p in layer] for layer in params]
        self.v = [[np.zeros_like(p) for p in layer] for layer in params]
        self.t = 0

    def step(self, params, grads, lr=None):
        lr = self.lr if lr is None else lr
        self.t += 1
        c1 = 1.0 - self.b1 ** self.t
        c2 = 1.0 - self.b2 ** self.t
        for layer, glayer, mlayer, vlayer in zip(params, grads, self.m, self.v):
            for j in range(2):
                g = glayer[j]
                if self.wd and j == 0:          # decoupled decay on weights
                    layer[j] -= (lr * self.wd) * layer[j]
                mlayer[j] = self.b1 * mlayer[j] + (1 - self.b1) * g
                vlayer[j] = self.b2 * vlayer[j] + (1 - self.b2) * g * g
                upd = lr * (mlayer[j] / c1) / (np.sqrt(vlayer[j] / c2) + self.eps)
                layer[j] -= upd.astype(np.float32)


def train(sizes, x, y, epochs, lr, batch, init_seed, order_seed,
          teacher_logits=None, temperature=1.0, alpha=0.0, wd=0.0):
    """Train an MLP. With teacher_logits and alpha > 0 this is distillation
    (Hinton et al. 2015); alpha = 0 is plain cross-entropy on hard labels."""
    params = init_mlp(sizes, np.random.default_rng(init_seed))
    order_rng = np.random.default_rng(order_seed)
    opt = Adam(params, lr, wd=wd)
    n = len(x)
    onehot = np.eye(N_CLASSES, dtype=np.float32)[y]
    T = np.float32(temperature)
    if teacher_logits is not None:
        soft_targets = softmax(teacher_logits / T).astype(np.float32)
    steps_per_epoch = int(np.ceil(n / batch))
    total = epochs * steps_per_epoch
    step = 0
    for _ in range(epochs):
        perm = order_rng.permutation(n)
        for s in range(steps_per_epoch):
            idx = perm[s * batch:(s + 1) * batch]
            z, acts = forward(params, x[idx])
            # gradient of the loss w.r.t. the student logits, batch-averaged
            dz = (1.0 - alpha) * (softmax(z) - onehot[idx])
            if alpha > 0:
                dz = dz + alpha * T * (softmax(z / T) - soft_targets[idx])
            dz = (dz / len(idx)).astype(np.float32)
            grads = backward(params, acts, dz)
            # cosine learning-rate decay
            cur_lr = lr * 0.5 * (1.0 + np.cos(np.pi * step / total))
            opt.step(params, grads, cur_lr)
            step += 1
    return params


def distill_loss(z_s, z_t, y, T, alpha):
    """The loss itself, used only by the gradient self-check."""
    pt = softmax(z_t / T)
    log_ps_T = np.log(softmax(z_s / T))
    log_ps = np.log(softmax(z_s))
    soft = -(pt * log_ps_T).sum(axis=1).mean()
    hard = -log_ps[np.arange(len(y)), y].mean()
    return alpha * T * T * soft + (1 - alpha) * hard


def check_distill_gradient():
    rng = np.random.default_rng(0)
    z_s = rng.normal(size=(5, N_CLASSES))
    z_t = rng.normal(size=(5, N_CLASSES)) * 3
    y = rng.integers(0, N_CLASSES, 5)
    T, alpha = 4.0, 0.9
    analytic = (alpha * T * (softmax(z_s / T) - softmax(z_t / T))
                + (1 - alpha) * (softmax(z_s) - np.eye(N_CLASSES)[y])) / 5
    numeric = np.zeros_like(z_s)
    eps = 1e-6
    for i in range(z_s.shape[0]):
        for j in range(z_s.shape[1]):
            zp, zm = z_s.copy(), z_s.copy()
            zp[i, j] += eps
            zm[i, j] -= eps
            numeric[i, j] = (distill_loss(zp, z_t, y, T, alpha)
                             - distill_loss(zm, z_t, y, T, alpha)) / (2 * eps)
    err = np.abs(analytic - numeric).max()
    assert err < 1e-6, f"distillation gradient mismatch: {err}"


# --------------------------------------------------------------------------
# ONNX export
# --------------------------------------------------------------------------
def export_onnx(params, path, graph_name, doc):
    inp = helper.make_tensor_value_info("features", TensorProto.FLOAT,
                                        ["batch", N_BANDS])
    out = helper.make_tensor_value_info("logits", TensorProto.FLOAT,
                                        ["batch", N_CLASSES])
    nodes, inits = [], []
    prev = "features"
    for i, (w, b) in enumerate(params):
        wn, bn = f"layer{i}.weight", f"layer{i}.bias"
        inits.append(numpy_helper.from_array(w.astype(np.float32), wn))
        inits.append(numpy_helper.from_array(b.astype(np.float32), bn))
        last = i == len(params) - 1
        gemm_out = "logits" if last else f"layer{i}.linear"
        nodes.append(helper.make_node("Gemm", [prev, wn, bn], [gemm_out],
                                      name=f"layer{i}.gemm", alpha=1.0,
                                      beta=1.0, transA=0, transB=0))
        if not last:
            relu_out = f"layer{i}.relu"
            nodes.append(helper.make_node("Relu", [gemm_out], [relu_out],
                                          name=f"layer{i}.relu"))
            prev = relu_out
    graph = helper.make_graph(nodes, graph_name, [inp], [out], inits)
    graph.doc_string = doc
    model = helper.make_model(graph, producer_name="proctor-demo",
                              producer_version="1",
                              opset_imports=[helper.make_opsetid("", 17)])
    model.ir_version = 8
    model.doc_string = doc
    onnx.checker.check_model(model, full_check=True)
    onnx.save(model, path)
    onnx.checker.check_model(path, full_check=True)


# --------------------------------------------------------------------------
# Scenario
# --------------------------------------------------------------------------
STUDENTS = [
    # name, hidden width, temperature, alpha
    ("student_distilled_64", 64, 4.0, 0.9),
    ("student_distilled_32", 32, 4.0, 0.9),
    ("student_hard_64", 64, 4.0, 0.0),
    ("student_tiny_16", 16, 4.0, 0.9),
]
STUDENT_EPOCHS = 150
STUDENT_LR = 3e-3
STUDENT_BATCH = 64


def quantise(x):
    return (np.round(x / FEATURE_STEP) * FEATURE_STEP).astype(np.float32)


def build(seed, verbose=True):
    t0 = time.time()
    rng = np.random.default_rng(seed)
    x_tr, y_tr = make_split(N_TEACHER_TRAIN, rng, LABEL_NOISE)
    x_tf, y_tf = make_split(N_TRANSFER, rng, LABEL_NOISE)
    x_ev, y_ev = make_split(N_EVAL, rng, 0.0)   # evaluation labels are clean

    # Features are per-band standardised log energies (constants fixed from
    # the teacher split), then quantised; frames.npz stores exactly these.
    mu = x_tr.mean(axis=0)
    sd = x_tr.std(axis=0)
    x_tr, x_tf, x_ev = (quantise((a - mu) / sd) for a in (x_tr, x_tf, x_ev))

    teacher = train([N_BANDS, 256, 256, N_CLASSES], x_tr, y_tr, epochs=30,
                    lr=1e-3, batch=128, init_seed=seed + 1,
                    order_seed=seed + 2, wd=1e-4)
    if verbose:
        print(f"[{time.time() - t0:5.1f}s] teacher trained", flush=True)
    z_t_tf, _ = forward(teacher, x_tf)
    z_t_ev, _ = forward(teacher, x_ev)
    pred_t = z_t_ev.argmax(axis=1)

    models = {"teacher": teacher}
    for name, width, T, alpha in STUDENTS:
        # same init seed and batch order for every student of a given width,
        # so distilled_64 and hard_64 differ only in the loss
        models[name] = train([N_BANDS, width, N_CLASSES], x_tf, y_tf,
                             epochs=STUDENT_EPOCHS, lr=STUDENT_LR,
                             batch=STUDENT_BATCH, init_seed=seed + 100 + width,
                             order_seed=seed + 200,
                             teacher_logits=z_t_tf, temperature=T, alpha=alpha)
    if verbose:
        print(f"[{time.time() - t0:5.1f}s] students trained", flush=True)

    figures = {"teacher": {"accuracy": float((pred_t == y_ev).mean())}}
    for name, *_ in STUDENTS:
        z_s, _ = forward(models[name], x_ev)
        p = z_s.argmax(axis=1)
        figures[name] = {"agreement": float((p == pred_t).mean()),
                         "accuracy": float((p == y_ev).mean())}
    return models, figures, (x_ev, y_ev), (x_tr, y_tr, x_tf, y_tf)


def print_figures(figures, header):
    print(header)
    print(f"  {'model':<22} {'agreement':>10} {'accuracy':>9}")
    print(f"  {'teacher':<22} {'-':>10} {figures['teacher']['accuracy']:9.4f}")
    for name, *_ in STUDENTS:
        f = figures[name]
        print(f"  {name:<22} {f['agreement']:10.4f} {f['accuracy']:9.4f}")


def check_with_onnxruntime(paths, x_ev, figures):
    try:
        import onnxruntime as ort
    except ImportError:
        print("onnxruntime not installed; skipping runtime cross-check")
        return
    opts = ort.SessionOptions()
    opts.intra_op_num_threads = 1
    opts.inter_op_num_threads = 1
    preds = {}
    for name, path in paths.items():
        sess = ort.InferenceSession(path, opts, providers=["CPUExecutionProvider"])
        (logits,) = sess.run(["logits"], {"features": x_ev})
        assert logits.shape == (len(x_ev), N_CLASSES)
        preds[name] = logits.argmax(axis=1)
    for name, *_ in STUDENTS:
        agree = float((preds[name] == preds["teacher"]).mean())
        assert agree == figures[name]["agreement"], (
            f"{name}: onnxruntime agreement {agree} != numpy "
            f"{figures[name]['agreement']}")
    print(f"onnxruntime {ort.__version__}: agreement figures match numpy")


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED)
    ap.add_argument("--sweep", type=int, nargs="*", metavar="SEED",
                    help="only train and print figures for these seeds "
                         "(robustness check); writes nothing")
    args = ap.parse_args()
    check_distill_gradient()

    if args.sweep:
        for s in args.sweep:
            _, fig, _, _ = build(s, verbose=False)
            print_figures(fig, f"seed {s}:")
            gap = (fig["student_distilled_64"]["agreement"]
                   - fig["student_hard_64"]["agreement"])
            print(f"  distilled_64 - hard_64 agreement gap: {gap:+.4f}")
        return

    models, figures, (x_ev, y_ev), _ = build(args.seed)
    print_figures(figures, f"evaluation set: {N_EVAL} frames, seed {args.seed}")
    gap = (figures["student_distilled_64"]["agreement"]
           - figures["student_hard_64"]["agreement"])
    print(f"distilled_64 - hard_64 agreement gap: {gap:+.4f}")
    assert gap >= AGREEMENT_MARGIN, (
        f"distillation did not buy enough agreement: gap {gap:.4f} "
        f"< {AGREEMENT_MARGIN}")

    paths = {}
    docs = {"teacher": "Teacher MLP 64-256-256-6 (cross-entropy, hard labels)"}
    for name, width, T, alpha in STUDENTS:
        kind = (f"distilled at T={T:g}, alpha={alpha:g}" if alpha > 0
                else "hard labels only (alpha=0)")
        docs[name] = f"Student MLP 64-{width}-6, {kind}"
    for name, params in models.items():
        path = os.path.join(OUT_DIR, f"{name}.onnx")
        export_onnx(params, path, name.replace("_", "-"),
                    "Proctor demo (synthetic wind-turbine acoustic frames): "
                    + docs[name])
        paths[name] = path
    np.savez_compressed(os.path.join(OUT_DIR, "frames.npz"),
                        features=x_ev.astype(np.float32),
                        labels=y_ev.astype(np.int64))
    check_with_onnxruntime(paths, x_ev, figures)

    total = 0
    for fn in sorted(os.listdir(OUT_DIR)):
        if fn.endswith((".onnx", ".npz")):
            size = os.path.getsize(os.path.join(OUT_DIR, fn))
            total += size
            print(f"  {fn:<28} {size:>8} bytes")
    print(f"  {'total':<28} {total:>8} bytes")


if __name__ == "__main__":
    sys.exit(main())
