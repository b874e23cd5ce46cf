#!/usr/bin/env python3
"""Build the bundled Proctor demo scenario: a teacher, a production student and
four candidate students, all convolutional networks over spectrogram patches.

Invented scenario, no real data: a fictional wind-farm operator classifies
one-second acoustic patches (32 time steps x 32 frequency bands of log
energy) from microphones at four invented mounting positions into six turbine
states. Every patch is synthesised here from hand-written templates and a
fixed seed.

The team already runs a small distilled student in production (the baseline
of the evaluation) and asks whether a new candidate is at least as good,
whether it breaks what the old one got right, and whether it is faster:

  teacher.onnx                 CNN 24-24 / 48-48 / 96-96, hard labels
  student_production.onnx      8-16-32 CNN, distilled on an older transfer set
  student_distilled_64.onnx    16-32-64 CNN, distilled (Hinton et al. 2015)
  student_hard_64.onnx         16-32-64 CNN, hard labels only (alpha = 0)
  student_tiny_16.onnx         4-8-16 CNN, distilled (for the Pareto front)
  student_wide_96.onnx         24-48-96 CNN, distilled on a larger transfer set
                               that has almost no tower_base patches
  frames.npz                   evaluation set

Distillation loss (source: G. Hinton, O. Vinyals, J. Dean, "Distilling the
Knowledge in a Neural Network", 2015):

    L = alpha * T^2 * CE(softmax(z_t / T), softmax(z_s / T))
        + (1 - alpha) * CE(y, softmax(z_s))

Needs numpy, onnx, onnxruntime and torch (CPU). torch is needed by this
script only; nothing else in the repository imports it.
Run from anywhere:
  python3 demo/make_demo.py           train, write every file, check the story
  python3 demo/make_demo.py --check   check the files in demo/ (no torch, no
                                      training): figures, latency, size
"""
import os

# Pinned threads: set before numpy / torch are imported.
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse
import io
import sys
import time
import zipfile

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT_DIR = os.path.dirname(os.path.abspath(__file__))
DEFAULT_SEED = 7

# --------------------------------------------------------------------------
# Scenario constants
# --------------------------------------------------------------------------
N_TIME = 32               # time steps per patch (about 31 ms each)
N_BANDS = 32              # frequency bands per time step
N_CLASSES = 6
STATES = ["normal", "blade_crack", "bearing_wear", "yaw_misalignment",
          "ice_load", "loose_panel"]
# Invented microphone mounting positions (the evaluation's slices).
POSITIONS = ["nacelle_roof", "gearbox_bay", "rear_hatch", "tower_base"]
TOWER = POSITIONS.index("tower_base")
P_FLEET = [0.32, 0.28, 0.28, 0.12]       # share of each position in the fleet
P_CAMPAIGN = [0.38, 0.32, 0.297, 0.003]  # the wide student's transfer data

# Patches are stored as uint8 codes of natural-log energy:
#   code = clip(round(16 * (ln E + 6)), 0, 255)
# and every model standardises them in-graph (Mul, Add) with constants fixed
# from the teacher's training split.
CODE_OFFSET = 6.0
CODE_SCALE = 16.0

N_TEACHER_TRAIN = 8000
N_TRANSFER_OLD = 1000     # transfer set the production student was built on
N_TRANSFER = 1500         # current transfer set (distilled / hard / tiny)
N_CAMPAIGN = 3000         # the wide student's transfer set
N_EVAL = 1500
TEACHER_LABEL_NOISE = 0.02
TRANSFER_LABEL_NOISE = 0.05

INPUT_NAME = "spectrogram"

# name, stages (channels of the 3x3 convolutions; 2x2 max-pool between
# stages), transfer set, temperature, alpha, epochs
TEACHER_STAGES = [[24, 24], [48, 48], [96, 96]]
STUDENTS = [
    ("student_production", [[8], [16], [32]], "old", 4.0, 0.9, 60),
    ("student_distilled_64", [[16], [32], [64]], "current", 4.0, 0.9, 60),
    ("student_hard_64", [[16], [32], [64]], "current", 4.0, 0.0, 60),
    ("student_tiny_16", [[4], [8], [16]], "current", 4.0, 0.9, 60),
    ("student_wide_96", [[24], [48], [96]], "campaign", 4.0, 0.9, 40),
]

# The story the script asserts.
DISTILL_MARGIN = 0.02     # distilled_64 - hard_64 agreement, at least
WIDE_SLICE_DROP = 0.08    # wide worse than production on tower_base by this
TEACHER_ORT_MS = (0.3, 1.0)
MIN_SPEEDUP = 2.0         # every student vs the teacher, onnxruntime
SIZE_BUDGET = 4 * 1024 * 1024


# --------------------------------------------------------------------------
# Synthetic spectrogram patches
# --------------------------------------------------------------------------
_T = np.arange(N_TIME, dtype=np.float64)[None, :, None]   # (1, T, 1)
_B = np.arange(N_BANDS, dtype=np.float64)[None, None, :]  # (1, 1, B)


def _col(a):
    return np.asarray(a, dtype=np.float64).reshape(-1, 1, 1)


def bump(center, width, amp):
    """Gaussian bump over band index."""
    return amp * np.exp(-0.5 * ((_B - center) / width) ** 2)


def pulse(center, width):
    """Gaussian pulse over time index."""
    return np.exp(-0.5 * ((_T - center) / width) ** 2)


def synth(n, rng, position_p):
    """Return (uint8 codes [n, 1, T, B], clean labels [n], positions [n])."""
    y = rng.integers(0, N_CLASSES, size=n)
    pos = rng.choice(len(POSITIONS), size=n, p=position_p)
    speed = _col(rng.normal(1.0, 0.03, n))          # rotor-speed drift
    sev = _col(rng.beta(1.6, 1.4, n))               # fault severity
    blade = _col(rng.uniform(8.0, 12.0, n)) / speed  # blade-pass period
    phase = _col(rng.uniform(0.0, 2.0 * np.pi, n))
    bp = np.cos(2.0 * np.pi * _T / blade + phase)

    def is_state(k):
        return _col(y == k)

    def at(k):
        return _col(pos == k)

    # Shared machine sound: pink-ish floor, rotor harmonics, gear mesh,
    # a faint blade-pass swish.
    spec = 1.0 / (1.0 + _B / 5.0) + np.zeros((n, N_TIME, 1))
    for h, a in [(1, 0.9), (2, 0.6), (3, 0.4), (4, 0.25)]:
        spec = spec + bump(2.5 * h * speed, 0.8, a)
    spec = spec + bump(16.0 * speed, 1.2, 0.2)
    spec = spec * (1.0 + 0.08 * bp)

    # blade crack: a broadband click once per rotor turn + a mid-band tone
    turn = _col(rng.uniform(9.0, 14.0, n))
    t0 = _col(rng.uniform(0.0, 14.0, n))
    clicks = sum(pulse(t0 + k * turn, 0.6) for k in range(4))
    spec = spec + is_state(1) * (clicks * bump(20.0, 6.0, 0.6 * sev)
                                 + bump(13.0 * speed, 1.2, 0.25 * sev))
    # ice load: the crack tone shifted down, plus rotor imbalance (a slow
    # swell of the first harmonic); no clicks
    slow = _col(rng.uniform(14.0, 22.0, n))
    swell = 1.0 + np.cos(2.0 * np.pi * _T / slow + phase)
    spec = spec + is_state(4) * (bump(12.0 * speed, 1.2, 0.25 * sev)
                                 + swell * bump(2.5 * speed, 0.8, 0.45 * sev))
    # bearing wear: faint high tones with a fast flutter
    flutter = 1.0 + 0.5 * np.cos(2.0 * np.pi * _T / 3.0 + phase)
    spec = spec + is_state(2) * flutter * (bump(25.0, 0.9, 0.10 * sev)
                                           + bump(28.0, 0.9, 0.07 * sev))
    # yaw misalignment: raised 3rd harmonic, low swell at blade pass
    spec = spec + is_state(3) * (bump(7.5 * speed, 0.8, 0.3 * sev)
                                 + (1.0 + 0.6 * bp) * bump(4.0, 3.0, 0.3 * sev))
    # loose panel: irregular rattle bursts on a comb high in the spectrum
    bursts = rng.poisson(3.0 + 3.0 * sev.ravel())
    pitch = _col(rng.uniform(2.6, 3.4, n))
    comb = sum(bump(23.0 + j * pitch, 0.6, 1.0) for j in range(3))
    rattle = np.zeros((n, N_TIME, N_BANDS))
    for k in range(int(bursts.max())):
        when = _col(rng.uniform(0.0, N_TIME, n))
        rattle = rattle + _col(k < bursts) * pulse(when, 0.5) * comb
    spec = spec + is_state(5) * rattle * 0.18 * sev

    # Microphone position.
    # gearbox_bay: next to the gearbox, loud gear mesh and a sideband
    spec = spec + at(1) * (bump(16.0 * speed, 1.2, 0.5)
                           + bump(19.0 * speed, 1.0, 0.2))
    # rear_hatch: behind a panel, a gentle high-band roll-off (and gusts)
    spec = spec * np.where(at(2) > 0, np.exp(-0.5 * _B / 31.0), 1.0)
    # tower_base: far below the nacelle; strong high-band loss, a tower
    # mode near band 6.4, reverberation smearing each step into the next
    tower = spec * np.exp(-3.0 * _B / 31.0) + bump(6.4, 0.7, 0.5)
    reverb = tower.copy()
    for t in range(1, N_TIME):
        reverb[:, t] = 0.55 * reverb[:, t - 1] + 0.45 * tower[:, t]
    spec = np.where(at(TOWER) > 0, reverb, spec)

    # Nuisance: gain (wind, distance), spectral tilt, low-band wind gusts
    # (worse at the hatch and the tower), per-cell estimation noise.
    gain = np.exp(_col(rng.normal(0.0, 0.35, n)))
    tilt = np.exp(_col(rng.normal(0.0, 0.2, n)) * (_B - 16.0) / 16.0)
    gust_amp = _col(rng.uniform(0.0, 0.4, n)) * (1.0 + at(2) + at(TOWER))
    gust_per = _col(rng.uniform(16.0, 40.0, n))
    gust = (gust_amp * (1.0 + np.cos(2.0 * np.pi * _T / gust_per + 2 * phase))
            * bump(0.0, 3.0, 1.0))
    sigma = np.where(pos == TOWER, 0.2, 0.15).reshape(-1, 1, 1)
    noise = np.exp(rng.normal(0.0, 1.0, (n, N_TIME, N_BANDS)) * sigma)
    floor = np.where(pos == TOWER, 0.03, 0.01).reshape(-1, 1, 1)
    energy = (gain * tilt * spec + gust) * noise + floor
    code = np.round((np.log(energy) + CODE_OFFSET) * CODE_SCALE)
    return np.clip(code, 0, 255).astype(np.uint8)[:, None], y, pos


def make_split(n, rng, position_p, label_noise):
    x, y, pos = synth(n, rng, position_p)
    if label_noise > 0:
        flip = rng.random(n) < label_noise
        y = y.copy()
        y[flip] = rng.integers(0, N_CLASSES, size=int(flip.sum()))
    return x, y, pos


def make_sets(seed):
    """Every split from its own random stream, so that changing one split
    leaves the others as they were."""
    def rng(k):
        return np.random.default_rng([seed, k])
    return {
        "teacher": make_split(N_TEACHER_TRAIN, rng(1), P_FLEET, TEACHER_LABEL_NOISE),
        "old": make_split(N_TRANSFER_OLD, rng(2), P_FLEET, TRANSFER_LABEL_NOISE),
        "current": make_split(N_TRANSFER, rng(3), P_FLEET, TRANSFER_LABEL_NOISE),
        "campaign": make_split(N_CAMPAIGN, rng(4), P_CAMPAIGN, TRANSFER_LABEL_NOISE),
        "eval": make_split(N_EVAL, rng(5), P_FLEET, 0.0),  # clean labels
    }


# --------------------------------------------------------------------------
# Models (torch)
# --------------------------------------------------------------------------
def _torch():
    import torch
    return torch


def make_net(stages, scale, shift):
    torch = _torch()
    nn = torch.nn

    class Net(nn.Module):
        """codes -> Mul, Add -> [MaxPool] (Conv3x3, Relu)+ per stage ->
        mean over time -> Flatten -> Gemm. Averaging over time only keeps
        the band axis, where the states differ."""

        def __init__(self):
            super().__init__()
            self.stages = stages
            self.register_buffer("scale", torch.tensor(scale, dtype=torch.float32))
            self.register_buffer("shift", torch.tensor(shift, dtype=torch.float32))
            layers, cin = [], 1
            for si, st in enumerate(stages):
                if si:
                    layers.append(nn.MaxPool2d(2))
                for c in st:
                    layers += [nn.Conv2d(cin, c, 3, padding=1), nn.ReLU()]
                    cin = c
            self.body = nn.Sequential(*layers)
            self.bands_out = N_BANDS >> (len(stages) - 1)
            self.time_out = N_TIME >> (len(stages) - 1)
            self.head = nn.Linear(cin * self.bands_out, N_CLASSES)
            for mod in self.modules():
                if isinstance(mod, (nn.Conv2d, nn.Linear)):
                    nn.init.kaiming_normal_(mod.weight, nonlinearity="relu")
                    nn.init.zeros_(mod.bias)
            nn.init.normal_(self.head.weight, std=0.01)

        def forward(self, code):
            x = self.body(code * self.scale + self.shift)
            return self.head(x.mean(dim=2).flatten(1))

    return Net()


def train(net, x, y, epochs, lr, batch, seed, z_teacher=None, T=4.0,
          alpha=0.0, wd=0.0, log=None):
    """Adam (decoupled weight decay), cosine decay, fixed batch order.
    With z_teacher and alpha > 0 the loss is the distillation loss of
    Hinton et al. 2015; alpha = 0 is cross-entropy on hard labels."""
    torch = _torch()
    F = torch.nn.functional
    gen = torch.Generator().manual_seed(seed)
    net = net.to(memory_format=torch.channels_last)
    opt = torch.optim.AdamW(net.parameters(), lr=lr, weight_decay=wd)
    n = len(x)
    total = epochs * ((n + batch - 1) // batch)
    sched = torch.optim.lr_scheduler.LambdaLR(
        opt, lambda s: 0.5 * (1.0 + np.cos(np.pi * s / total)))
    X = torch.from_numpy(x.astype(np.float32)).contiguous(
        memory_format=torch.channels_last)
    Y = torch.from_numpy(y.astype(np.int64))
    if z_teacher is not None:
        p_teacher = F.softmax(torch.from_numpy(z_teacher) / T, dim=1)
    for ep in range(epochs):
        t0 = time.time()
        perm = torch.randperm(n, generator=gen)
        run = 0.0
        for s in range(0, n, batch):
            idx = perm[s:s + batch]
            z = net(X[idx])
            loss = (1.0 - alpha) * F.cross_entropy(z, Y[idx])
            if alpha > 0:
                soft = -(p_teacher[idx] * F.log_softmax(z / T, dim=1)).sum(1).mean()
                loss = loss + alpha * T * T * soft
            opt.zero_grad()
            loss.backward()
            opt.step()
            sched.step()
            run += loss.item() * len(idx)
        if log:
            log(f"epoch {ep + 1}/{epochs} loss {run / n:.4f} ({time.time() - t0:.1f}s)")
    return net.eval()


def torch_logits(net, x, batch=500):
    torch = _torch()
    with torch.no_grad():
        out = [net(torch.from_numpy(x[i:i + batch].astype(np.float32)))
               for i in range(0, len(x), batch)]
    return torch.cat(out).numpy()


def macs_of(stages):
    macs, cin, hw_t, hw_b = 0, 1, N_TIME, N_BANDS
    for si, st in enumerate(stages):
        if si:
            hw_t, hw_b = hw_t // 2, hw_b // 2
        for c in st:
            macs += c * cin * 9 * hw_t * hw_b
            cin = c
    return macs + cin * hw_b * N_CLASSES


# --------------------------------------------------------------------------
# ONNX export (graph written by hand, weights inside the file)
# --------------------------------------------------------------------------
def export_onnx(net, path, graph_name, doc):
    def arr(t):
        return t.detach().cpu().contiguous().numpy().astype(np.float32)

    inp = helper.make_tensor_value_info(INPUT_NAME, TensorProto.FLOAT,
                                        ["batch", 1, N_TIME, N_BANDS])
    out = helper.make_tensor_value_info("logits", TensorProto.FLOAT,
                                        ["batch", N_CLASSES])
    inits = [numpy_helper.from_array(arr(net.scale), "input.scale"),
             numpy_helper.from_array(arr(net.shift), "input.shift")]
    nodes = [helper.make_node("Mul", [INPUT_NAME, "input.scale"], ["input.scaled"],
                              name="input.mul"),
             helper.make_node("Add", ["input.scaled", "input.shift"], ["input.std"],
                              name="input.add")]
    prev = "input.std"
    convs = [m for m in net.body if m.__class__.__name__ == "Conv2d"]
    k = 0
    for si, st in enumerate(net.stages):
        if si:
            name = f"stage{si}.pool"
            nodes.append(helper.make_node("MaxPool", [prev], [name], name=name,
                                          kernel_shape=[2, 2], strides=[2, 2]))
            prev = name
        for j in range(len(st)):
            conv = convs[k]
            k += 1
            base = f"stage{si}.conv{j}"
            inits.append(numpy_helper.from_array(arr(conv.weight), base + ".weight"))
            inits.append(numpy_helper.from_array(arr(conv.bias), base + ".bias"))
            nodes.append(helper.make_node(
                "Conv", [prev, base + ".weight", base + ".bias"], [base],
                name=base, kernel_shape=[3, 3], pads=[1, 1, 1, 1],
                strides=[1, 1], dilations=[1, 1], group=1))
            nodes.append(helper.make_node("Relu", [base], [base + ".relu"],
                                          name=base + ".relu"))
            prev = base + ".relu"
    nodes.append(helper.make_node("AveragePool", [prev], ["head.time_mean"],
                                  name="head.time_mean",
                                  kernel_shape=[net.time_out, 1],
                                  strides=[net.time_out, 1]))
    nodes.append(helper.make_node("Flatten", ["head.time_mean"], ["head.flat"],
                                  name="head.flatten", axis=1))
    inits.append(numpy_helper.from_array(arr(net.head.weight), "head.weight"))
    inits.append(numpy_helper.from_array(arr(net.head.bias), "head.bias"))
    nodes.append(helper.make_node("Gemm", ["head.flat", "head.weight", "head.bias"],
                                  ["logits"], name="head.gemm", alpha=1.0,
                                  beta=1.0, transA=0, transB=1))
    graph = helper.make_graph(nodes, graph_name, [inp], [out], inits)
    graph.doc_string = doc
    model = helper.make_model(graph, producer_name="proctor-demo",
                              producer_version="2",
                              opset_imports=[helper.make_opsetid("", 17)])
    model.ir_version = 8
    model.doc_string = doc
    onnx.checker.check_model(model, full_check=True)
    onnx.save(model, path, save_as_external_data=False)
    onnx.checker.check_model(path, full_check=True)


# --------------------------------------------------------------------------
# frames.npz, written with fixed zip timestamps so that reruns are identical
# --------------------------------------------------------------------------
def save_npz(path, arrays):
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED,
                         compresslevel=9) as zf:
        for name, a in arrays.items():
            buf = io.BytesIO()
            np.lib.format.write_array(buf, np.ascontiguousarray(a),
                                      allow_pickle=False)
            info = zipfile.ZipInfo(name + ".npy", date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            zf.writestr(info, buf.getvalue(), compress_type=zipfile.ZIP_DEFLATED,
                        compresslevel=9)


# --------------------------------------------------------------------------
# onnxruntime: logits and single-thread latency
# --------------------------------------------------------------------------
def ort_session(path):
    import onnxruntime as ort
    opts = ort.SessionOptions()
    opts.intra_op_num_threads = 1
    opts.inter_op_num_threads = 1
    return ort.InferenceSession(path, opts, providers=["CPUExecutionProvider"])


def ort_logits(path, x):
    (z,) = ort_session(path).run(["logits"], {INPUT_NAME: x.astype(np.float32)})
    return z


def ort_latency_ms(paths, x, warmup=50, runs=600, rounds=3):
    """Median single-sample latency per model, batch 1, one thread. Models
    are measured round-robin in `rounds` rounds so that a burst of load on
    the machine spreads over all of them."""
    sessions = {k: ort_session(p) for k, p in paths.items()}
    samples = [x[i:i + 1].astype(np.float32) for i in range(64)]
    times = {k: [] for k in paths}
    for k, s in sessions.items():
        for i in range(warmup):
            s.run(["logits"], {INPUT_NAME: samples[i % 64]})
    per_round = runs // rounds
    for _ in range(rounds):
        for k, s in sessions.items():
            for i in range(per_round):
                feed = {INPUT_NAME: samples[i % 64]}
                t0 = time.perf_counter()
                s.run(["logits"], feed)
                times[k].append(time.perf_counter() - t0)
    return {k: float(np.median(v)) * 1e3 for k, v in times.items()}


# --------------------------------------------------------------------------
# Scenario
# --------------------------------------------------------------------------
def log_line(msg, t_start=[time.time()]):
    print(f"[{time.time() - t_start[0]:6.1f}s] {msg}", flush=True)


def build(seed, threads, verbose=True):
    torch = _torch()
    torch.set_num_threads(threads)
    torch.use_deterministic_algorithms(True)
    log = log_line if verbose else None

    sets = make_sets(seed)
    codes = sets["teacher"][0].astype(np.float64)
    mean, sd = codes.mean(), codes.std()
    scale, shift = float(np.float32(1.0 / sd)), float(np.float32(-mean / sd))

    if log:
        log(f"teacher {TEACHER_STAGES}: {N_TEACHER_TRAIN} patches")
    torch.manual_seed(seed + 1)
    teacher = train(make_net(TEACHER_STAGES, scale, shift), *sets["teacher"][:2],
                    epochs=12, lr=2e-3, batch=64, seed=seed + 2, wd=1e-4, log=log)
    nets = {"teacher": teacher}
    z_t = {k: torch_logits(teacher, sets[k][0]) for k in ("old", "current", "campaign")}

    for i, (name, stages, data, T, alpha, epochs) in enumerate(STUDENTS):
        x, y, _ = sets[data]
        if log:
            log(f"{name} {stages}: {len(x)} patches ({data}), "
                f"T={T:g} alpha={alpha:g}, {epochs} epochs")
        # distilled_64 and hard_64 share init seed and batch order: they
        # differ only in the loss
        torch.manual_seed(seed + 100 + stages[0][0])
        nets[name] = train(make_net(stages, scale, shift), x, y, epochs=epochs,
                           lr=3e-3, batch=64, seed=seed + 200, z_teacher=z_t[data],
                           T=T, alpha=alpha, wd=1e-4)
    return nets, sets


def figures(z, y, pos):
    """Agreement with the teacher (top-1), accuracy, per-slice agreement."""
    pred_t = z["teacher"].argmax(1)
    out = {}
    for name, zz in z.items():
        p = zz.argmax(1)
        f = {"accuracy": float((p == y).mean()),
             "agreement": float((p == pred_t).mean()),
             "slices": {POSITIONS[k]: float((p == pred_t)[pos == k].mean())
                        for k in range(len(POSITIONS))},
             "slice_accuracy": {POSITIONS[k]: float((p == y)[pos == k].mean())
                                for k in range(len(POSITIONS))}}
        out[name] = f
    return out


def print_figures(fig, extra=None):
    cols = "".join(f" {p:>12}" for p in POSITIONS)
    print(f"  {'model':<22} {'agreement':>9} {'accuracy':>8}{cols}")
    for name, f in fig.items():
        agr = "-" if name == "teacher" else f"{f['agreement']:.4f}"
        sl = ("".join(f" {'acc ' + format(f['slice_accuracy'][p], '.3f'):>12}" for p in POSITIONS)
              if name == "teacher" else
              "".join(f" {f['slices'][p]:12.4f}" for p in POSITIONS))
        print(f"  {name:<22} {agr:>9} {f['accuracy']:8.4f}{sl}")


def check_story(fig):
    """The claims the demo is built to show; returns the headline numbers."""
    prod, dist, hard, wide = (fig[k] for k in ("student_production",
                                               "student_distilled_64",
                                               "student_hard_64",
                                               "student_wide_96"))
    gap = dist["agreement"] - hard["agreement"]
    assert gap >= DISTILL_MARGIN, (
        f"distilled_64 - hard_64 agreement gap {gap:+.4f} < {DISTILL_MARGIN}")
    assert dist["agreement"] > prod["agreement"], "distilled_64 does not beat production"
    assert wide["agreement"] > prod["agreement"], (
        "wide_96 does not beat production on average agreement")
    drop = prod["slices"]["tower_base"] - wide["slices"]["tower_base"]
    assert drop >= WIDE_SLICE_DROP, (
        f"wide_96 is not clearly worse than production on tower_base ({drop:+.4f})")
    for p in POSITIONS:
        assert dist["slices"][p] >= prod["slices"][p], (
            f"distilled_64 regresses on {p}")
        if p != "tower_base":
            assert wide["slices"][p] >= prod["slices"][p], (
                f"wide_96 regresses on {p} as well")
    return gap, drop


def check_file(path):
    """The properties Proctor's demo relies on, read back from the file."""
    onnx.checker.check_model(path, full_check=True)
    m = onnx.load(path)
    assert m.ir_version == 8 and m.producer_name == "proctor-demo", path
    assert [(o.domain, o.version) for o in m.opset_import] == [("", 17)], path
    assert all(t.data_location == TensorProto.DEFAULT and not t.external_data
               for t in m.graph.initializer), f"{path}: external data"
    (inp,), (out,) = m.graph.input, m.graph.output
    dims = lambda v: [d.dim_param or d.dim_value for d in v.type.tensor_type.shape.dim]
    assert inp.name == INPUT_NAME and dims(inp) == ["batch", 1, N_TIME, N_BANDS], path
    assert out.name == "logits" and dims(out) == ["batch", N_CLASSES], path
    assert out.type.tensor_type.elem_type == TensorProto.FLOAT, path


def load_frames(path):
    with np.load(path, allow_pickle=False) as f:
        x, y = f[INPUT_NAME], f["labels"]
        names, slices = f["class_names"], f["slices"]
    assert x.dtype == np.uint8 and x.shape[1:] == (1, N_TIME, N_BANDS)
    assert y.dtype == np.int64 and y.shape == (len(x),)
    assert names.dtype.kind == "U" and list(names) == STATES
    assert slices.dtype.kind == "U" and slices.shape == (len(x),)
    assert set(slices) == set(POSITIONS)
    pos = np.array([POSITIONS.index(s) for s in slices])
    return x, y, pos


def verify(paths, x_ev, y_ev, pos_ev, timing_asserts, z_torch=None):
    """Figures from onnxruntime, the story's assertions, latency and size."""
    z = {name: ort_logits(path, x_ev) for name, path in paths.items()}
    if z_torch is not None:
        for name in paths:
            diff = np.abs(z[name] - z_torch[name]).max()
            same = (z[name].argmax(1) == z_torch[name].argmax(1)).mean()
            assert diff < 1e-3, f"{name}: onnxruntime vs torch logits differ by {diff}"
            assert same >= 0.999, f"{name}: onnxruntime vs torch argmax agree {same}"
        log_line("onnxruntime matches torch (max |dlogit| < 1e-3, same argmax)")

    fig = figures(z, y_ev, pos_ev)
    print(f"\nevaluation set: {len(x_ev)} patches; agreement = top-1 agreement "
          "with the teacher; slice columns = agreement (teacher row: accuracy)")
    print_figures(fig)
    gap, drop = check_story(fig)
    print(f"distilled_64 - hard_64 agreement: {gap:+.4f}")
    print(f"production - wide_96 agreement on tower_base: {drop:+.4f}")

    lat = ort_latency_ms(paths, x_ev)
    print("\nonnxruntime, 1 thread, batch 1, median latency per sample:")
    print(f"  {'model':<22} {'MACs':>11} {'bytes':>10} {'ms':>8} {'vs teacher':>10}")
    stages_of = dict([("teacher", TEACHER_STAGES)] + [(s[0], s[1]) for s in STUDENTS])
    for name in paths:
        print(f"  {name:<22} {macs_of(stages_of[name]):>11,} "
              f"{os.path.getsize(paths[name]):>10,} {lat[name]:8.3f} "
              f"{lat['teacher'] / lat[name]:9.1f}x")
    total = 0
    print("\nfiles in demo/:")
    for fn in sorted(os.listdir(OUT_DIR)):
        full = os.path.join(OUT_DIR, fn)
        if os.path.isfile(full):
            total += os.path.getsize(full)
            print(f"  {fn:<28} {os.path.getsize(full):>10,} bytes")
    print(f"  {'total':<28} {total:>10,} bytes")
    assert total <= SIZE_BUDGET, f"demo/ is {total} bytes > {SIZE_BUDGET}"
    if timing_asserts:
        lo, hi = TEACHER_ORT_MS
        assert lo <= lat["teacher"] <= hi, (
            f"teacher latency {lat['teacher']:.3f} ms outside [{lo}, {hi}]: "
            "the machine may be busy; rerun `make_demo.py --check` when it is idle")
        for name in paths:
            if name != "teacher":
                assert lat["teacher"] / lat[name] >= MIN_SPEEDUP, (
                    f"{name} only {lat['teacher'] / lat[name]:.1f}x faster "
                    "than the teacher")
    print("\nall checks passed" + ("" if timing_asserts else " (timing not asserted)"))


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED)
    ap.add_argument("--threads", type=int, default=1,
                    help="torch threads for training (default 1; figures and "
                         "bytes are only reproducible for the same value)")
    ap.add_argument("--check", action="store_true",
                    help="train nothing: check the files already in demo/, "
                         "print their figures and latencies (no torch needed)")
    ap.add_argument("--sweep", type=int, nargs="*", metavar="SEED",
                    help="train and print figures for these seeds (robustness "
                         "check, about 10 minutes each); writes nothing")
    ap.add_argument("--no-timing-asserts", action="store_true",
                    help="print latencies but do not assert them (busy machine)")
    args = ap.parse_args()
    names = ["teacher"] + [s[0] for s in STUDENTS]
    paths = {name: os.path.join(OUT_DIR, f"{name}.onnx") for name in names}

    if args.check:
        for path in paths.values():
            check_file(path)
        x_ev, y_ev, pos_ev = load_frames(os.path.join(OUT_DIR, "frames.npz"))
        verify(paths, x_ev, y_ev, pos_ev, not args.no_timing_asserts)
        return 0

    if args.sweep:
        for s in args.sweep:
            nets, sets = build(s, args.threads, verbose=False)
            x, y, pos = sets["eval"]
            fig = figures({k: torch_logits(n, x) for k, n in nets.items()}, y, pos)
            print(f"seed {s}:")
            print_figures(fig)
            try:
                gap, drop = check_story(fig)
                print(f"  story holds: distilled-hard {gap:+.4f}, "
                      f"wide tower_base drop {drop:+.4f}")
            except AssertionError as e:
                print(f"  story FAILS: {e}")
        return 0

    nets, sets = build(args.seed, args.threads)
    x_ev, y_ev, pos_ev = sets["eval"]
    z_torch = {name: torch_logits(net, x_ev) for name, net in nets.items()}
    check_story(figures(z_torch, y_ev, pos_ev))   # before anything is written
    for name, net in nets.items():
        if name == "teacher":
            doc = f"Teacher CNN {TEACHER_STAGES}, cross-entropy on hard labels"
        else:
            _, stages, data, T, alpha, _ = next(s for s in STUDENTS if s[0] == name)
            kind = (f"distilled at T={T:g}, alpha={alpha:g}" if alpha > 0
                    else "hard labels only (alpha=0)")
            doc = f"Student CNN {stages}, {kind}, transfer set '{data}'"
        export_onnx(net, paths[name], name.replace("_", "-"),
                    "Proctor demo, invented scenario, synthetic data "
                    "(wind-turbine acoustic patches): " + doc)
        check_file(paths[name])
    frames = os.path.join(OUT_DIR, "frames.npz")
    save_npz(frames, {
        INPUT_NAME: x_ev,
        "labels": y_ev.astype(np.int64),
        "class_names": np.array(STATES, dtype=f"<U{max(map(len, STATES))}"),
        "slices": np.array(POSITIONS, dtype=f"<U{max(map(len, POSITIONS))}")[pos_ev],
    })
    x_chk, y_chk, pos_chk = load_frames(frames)
    assert (x_chk == x_ev).all() and (y_chk == y_ev).all() and (pos_chk == pos_ev).all()
    log_line(f"wrote {len(paths)} models and frames.npz to {OUT_DIR}")
    verify(paths, x_ev, y_ev, pos_ev, not args.no_timing_asserts, z_torch)
    return 0


if __name__ == "__main__":
    sys.exit(main())
