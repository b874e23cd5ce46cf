#!/usr/bin/env python3
"""Reference fixtures of models as real exporters write them.

Where generate.py builds every graph by hand, this generator lets the
exporters write the files: torch.onnx.export on its default (dynamo) path,
which keeps weights as ONNX external data; skl2onnx for scikit-learn trees
and linear models (a label output first, the probabilities second); and
onnxruntime's own quantization tools for int8 students.  It also writes zip
bundles of an exporter's folder, good and hostile, for the upload path.

The figures reuse generate.py's functions (same definitions, same
cross-checks); only the choice of the scored output differs: a model's
scored output is its first float output squeezing to [N, C].

Run from the repository root, after generate.py (which deletes cases/):
    python3 tests/reference/exports.py
It deletes and rewrites cases/torch_external, cases/tabular_tree,
cases/int8 and cases/bundles only.  Needs torch, onnxscript, scikit-learn,
skl2onnx and onnxruntime (see requirements-exports.txt); CI needs none of
them, only the files.
"""

import contextlib
import hashlib
import io
import json
import logging
import math
import os
import shutil
import sys
import tempfile
import time
import warnings
import zipfile

# skl2onnx gathers the opset imports in a set of strings, so their order in the
# file follows Python's per-process string hashing: fix the hash seed, or the
# student files change from run to run.
if __name__ == "__main__" and os.environ.get("PYTHONHASHSEED") != "0":
    os.execve(sys.executable, [sys.executable] + sys.argv, dict(os.environ, PYTHONHASHSEED="0"))

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)

import generate as G  # noqa: E402  (the figures, the Case machinery, SOURCES)
import numpy as np  # noqa: E402
import onnx  # noqa: E402
import onnxruntime as ort  # noqa: E402
import sklearn  # noqa: E402
import skl2onnx  # noqa: E402
import torch  # noqa: E402
from onnx import TensorProto  # noqa: E402
from onnxruntime.quantization import (  # noqa: E402
    CalibrationDataReader, QuantFormat, QuantType, quantize_dynamic, quantize_static)
from skl2onnx import convert_sklearn  # noqa: E402
from skl2onnx.common.data_types import FloatTensorType  # noqa: E402
from sklearn.ensemble import GradientBoostingClassifier, RandomForestClassifier  # noqa: E402
from sklearn.linear_model import LogisticRegression  # noqa: E402

CASES = G.CASES
EXPORT_CASES = ("torch_external", "tabular_tree", "int8", "bundles")
FIXED_TIME = (1980, 1, 1, 0, 0, 0)

EXPORT_SOURCES = {
    "ort/*.npy": "onnxruntime.InferenceSession(providers=['CPUExecutionProvider']).run, 1 thread, default graph "
                 "optimisation; the SCORED output (first float output squeezing to [N, C], metrics.md version 2), "
                 "float32 as produced",
    "models.file": "the self-contained model the figures were run on",
    "models.scored_output": "onnxruntime: name of the first output that is a float tensor squeezing to [N, C] "
                            "(metrics.md version 2)",
    "models.inputs, models.outputs": "onnx.load: graph.input / graph.output; a symbolic dim by its dim_param, "
                                     "a dim with neither name nor size (skl2onnx's None) as null",
    "models.export_dir": "the folder torch.onnx.export wrote (default dynamo path, external_data=True), bytes as written",
    "models.external_data": "onnx.load(load_external_data=False): sum over tensors stored outside the graph of "
                            "their external_data 'length' (their raw size when absent)",
    "models.export_files": "os.path.getsize, hashlib.sha256 of each file of export_dir",
    "ort_outputs.min_top1_gap": "numpy: smallest gap between the two largest logits over the set, after the "
                                "output-kind conversion",
    "ort_outputs.output_step": "onnx.load: y_scale of the DequantizeLinear that produces the scored output "
                               "(one quantization step of the logits); null for float outputs",
    "ort_outputs.unoptimised_max_abs_diff": "numpy: max |ort default - ort with GraphOptimizationLevel.ORT_DISABLE_ALL| "
                                            "over the set (fused integer kernels against the plain QDQ graph)",
    "ort_outputs.batch_dependence": "numpy: max |whole-set run - run in batches of b| of the scored output",
    "float_originals": "the float model each int8 student was quantised from (onnxruntime.quantization input)",
    "quantization": "onnxruntime.quantization.quantize_static / quantize_dynamic arguments as called",
}


# --------------------------------------------------------------------------
# running: the scored output

def session(model, optimised=True):
    """onnxruntime on CPU, one thread; `model` is bytes or a path (a path lets
    onnxruntime find external data beside the file)."""
    so = ort.SessionOptions()
    so.intra_op_num_threads = 1
    so.inter_op_num_threads = 1
    so.log_severity_level = 3
    if not optimised:
        so.graph_optimization_level = ort.GraphOptimizationLevel.ORT_DISABLE_ALL
    return ort.InferenceSession(model, so, providers=["CPUExecutionProvider"])


def scored_index(outputs):
    """Index of the first output that is a float tensor squeezing to [N, C]."""
    for i, o in enumerate(outputs):
        a = np.asarray(o)
        if a.dtype.kind != "f" or a.ndim < 2:
            continue
        if sum(d != 1 for d in a.shape[1:]) == 1:
            return i
    raise AssertionError(f"no float output squeezing to [N, C] among {[np.asarray(o).shape for o in outputs]}")


def run_scored(model, feeds, batch=None, optimised=True):
    """The scored output over the set, [N, C] float32 as produced; whole or in batches."""
    sess = session(model, optimised)
    n = len(next(iter(feeds.values())))
    step = batch or n
    parts = []
    for lo in range(0, n, step):
        outs = sess.run(None, {k: v[lo:lo + step] for k, v in feeds.items()})
        a = outs[scored_index(outs)]
        parts.append(a.reshape(a.shape[0], -1))
    return np.concatenate(parts)


def scored_name(model_bytes, feeds):
    sess = session(model_bytes)
    outs = sess.run(None, {k: v[:2] for k, v in feeds.items()})
    return sess.get_outputs()[scored_index(outs)].name


class ExportCase(G.Case):
    """generate.Case with the scored output instead of the first one, and an
    optional wider gap per model (int8 outputs move in quantisation steps)."""

    def __init__(self, name, temperature=4.0, alpha=0.5):
        super().__init__(name, temperature, alpha)
        self.margin = {}     # stem -> minimum top-1 / k-th gap on top of MIN_GAP
        self.variants = {}   # stem -> list of functions feeds -> other engine runs that must agree

    def outputs(self, feeds):
        return {stem: run_scored(mb, feeds) for stem, (mb, _) in self.models.items()}

    def select(self, feeds, n):
        outs = self.outputs(feeds)
        count = len(next(iter(feeds.values())))
        bad = np.zeros(count, bool)
        for stem, out in outs.items():
            runs = [out] + [f(feeds) for f in self.variants.get(stem, [])]
            tops = []
            for o in runs:
                z = G.to_logits(o, G.auto_kind(o))
                k = min(5, z.shape[1])
                bad |= G.fragile(z, k)
                s = np.sort(z, axis=1)[:, ::-1]
                m = self.margin.get(stem, 0.0)
                bad |= s[:, 0] - s[:, 1] < m
                if z.shape[1] > k:
                    bad |= s[:, k - 1] - s[:, k] < m
                tops.append(G.argmax(z))
            for t in tops[1:]:
                bad |= t != tops[0]
        keep = np.flatnonzero(~bad)[:n]
        assert len(keep) == n, f"{self.name}: only {len(keep)} robust samples of {count}"
        return {k: v[keep] for k, v in feeds.items()}, int(bad[:keep[-1] + 1].sum())


def value_infos(values):
    """generate.value_infos, but an unnamed, unsized dim (skl2onnx's None) is None, not 0."""
    out = []
    for v in values:
        dims = []
        for d in v.type.tensor_type.shape.dim:
            if d.HasField("dim_param") and d.dim_param:
                dims.append(d.dim_param)
            elif d.HasField("dim_value"):
                dims.append(int(d.dim_value))
            else:
                dims.append(None)
        out.append({"name": v.name, "dtype": G.ONNX_TO_NAME[v.type.tensor_type.elem_type], "shape": dims})
    return out


def op_summary(model):
    """Op types per domain and the opset imports, for the README and the report."""
    ops = {}
    for node in model.graph.node:
        ops.setdefault(node.domain or "ai.onnx", set()).add(node.op_type)
    return {"opset_import": [[o.domain or "ai.onnx", int(o.version)] for o in model.opset_import],
            "ir_version": int(model.ir_version),
            "op_types": {d: sorted(v) for d, v in sorted(ops.items())}}


def finish(case, doc, extra_models=None, extra_outputs=None, extra=None):
    """Rewrite expected.json with the export fields added to models.<stem> and ort_outputs.<stem>."""
    folder = os.path.join(CASES, case.name)
    for stem, m in doc["models"].items():
        model = onnx.load(os.path.join(folder, m["file"]))
        m["inputs"] = value_infos(model.graph.input)
        m["outputs"] = value_infos(model.graph.output)
        m["producer_version"] = model.producer_version
        m.update(op_summary(model))
        m.update((extra_models or {}).get(stem, {}))
    for stem, o in doc["ort_outputs"].items():
        o.update((extra_outputs or {}).get(stem, {}))
    doc.update(extra or {})
    doc["sources"] = dict(G.SOURCES, **EXPORT_SOURCES)
    with open(os.path.join(folder, "expected.json"), "w") as f:
        json.dump(doc, f, indent=1, allow_nan=False)
        f.write("\n")
    return doc


# --------------------------------------------------------------------------
# torch: modules with weights from numpy, distillation, export

torch.set_num_threads(1)
torch.use_deterministic_algorithms(True)


class MLP(torch.nn.Module):
    """Linear + ReLU layers; optional input standardisation inside the graph."""

    def __init__(self, layers, mean=None, std=None):
        super().__init__()
        self.layers = torch.nn.ModuleList()
        for w, b in layers:   # w [in, out] as generate.he writes it
            lin = torch.nn.Linear(w.shape[0], w.shape[1])
            lin.weight.data = torch.from_numpy(np.ascontiguousarray(w.T))
            lin.bias.data = torch.from_numpy(np.asarray(b, np.float32).copy())
            self.layers.append(lin)
        self.standardise = mean is not None
        if self.standardise:
            self.register_buffer("mean", torch.from_numpy(mean.astype(np.float32)))
            self.register_buffer("std", torch.from_numpy(std.astype(np.float32)))

    def forward(self, x):
        if self.standardise:
            x = (x - self.mean) / self.std
        for i, lin in enumerate(self.layers):
            x = lin(x)
            if i < len(self.layers) - 1:
                x = torch.relu(x)
        return x


class CNN(torch.nn.Module):
    """Conv-ReLU-MaxPool-Conv-ReLU-mean-head; the head is a Linear (exported as
    Gemm) or a MatMul + Add (which quantize_dynamic turns into MatMulInteger)."""

    def __init__(self, rng, c1, c2, classes, matmul_head=False):
        super().__init__()
        self.conv1 = torch.nn.Conv2d(3, c1, 3, padding=1)
        self.conv2 = torch.nn.Conv2d(c1, c2, 3, padding=1)
        self.conv1.weight.data = torch.from_numpy((rng.standard_normal((c1, 3, 3, 3)) * math.sqrt(2 / 27)).astype(np.float32))
        self.conv1.bias.data = torch.from_numpy(G.small(rng, c1))
        self.conv2.weight.data = torch.from_numpy((rng.standard_normal((c2, c1, 3, 3)) * math.sqrt(2 / (9 * c1))).astype(np.float32))
        self.conv2.bias.data = torch.from_numpy(G.small(rng, c2) + np.float32(0.2))
        self.matmul_head = matmul_head
        if matmul_head:
            self.head_weight = torch.nn.Parameter(torch.from_numpy(G.he(rng, c2, classes)))
            self.head_bias = torch.nn.Parameter(torch.from_numpy(G.small(rng, classes)))
        else:
            self.head = torch.nn.Linear(c2, classes)
            self.head.weight.data = torch.from_numpy(np.ascontiguousarray(G.he(rng, c2, classes).T))
            self.head.bias.data = torch.from_numpy(G.small(rng, classes))

    def features(self, x):
        x = torch.max_pool2d(torch.relu(self.conv1(x)), 2)
        return torch.relu(self.conv2(x)).mean(dim=(2, 3))

    def forward(self, x):
        h = self.features(x)
        if self.matmul_head:
            return h @ self.head_weight + self.head_bias
        return self.head(h)

    def set_head(self, w, b):   # w [in, out]
        if self.matmul_head:
            self.head_weight.data = torch.from_numpy(np.ascontiguousarray(w))
            self.head_bias.data = torch.from_numpy(b.astype(np.float32))
        else:
            self.head.weight.data = torch.from_numpy(np.ascontiguousarray(w.T))
            self.head.bias.data = torch.from_numpy(b.astype(np.float32))


def forward(module, x):
    with torch.no_grad():
        return module(torch.from_numpy(x)).numpy()


def distill(student, x, zt, temperature, target, seed, steps=1000, lr=1e-2, batch=128):
    """Knowledge distillation on the teacher's logits: KL(softmax(zt/T) || softmax(zs/T)) * T^2
    (common practice), Adam, minibatches drawn with a seeded numpy generator; stops once the
    training agreement reaches `target`, so that students are good but not perfect."""
    rng = np.random.default_rng(seed)
    opt = torch.optim.Adam(student.parameters(), lr=lr)
    xt = torch.from_numpy(x)
    q = torch.softmax(torch.from_numpy(zt.astype(np.float32)) / temperature, dim=1)
    top = zt.argmax(1)
    student.train()
    for step in range(steps):
        if step % 100 == 0:
            agree = float(np.mean(forward(student, x[:1000]).argmax(1) == top[:1000]))
            if agree >= target:
                break
        idx = torch.from_numpy(rng.choice(len(x), size=batch, replace=False))
        logp = torch.log_softmax(student(xt[idx]) / temperature, dim=1)
        loss = torch.nn.functional.kl_div(logp, q[idx], reduction="batchmean") * temperature ** 2
        opt.zero_grad()
        loss.backward()
        opt.step()
    student.eval()
    return float(np.mean(forward(student, x).argmax(1) == top)), step


def train_classifier(module, x, y, seed, steps=600, lr=1e-2, batch=256):
    """Cross-entropy training on labels (the tabular teacher), Adam, seeded minibatches."""
    rng = np.random.default_rng(seed)
    opt = torch.optim.Adam(module.parameters(), lr=lr)
    xt, yt = torch.from_numpy(x), torch.from_numpy(y)
    module.train()
    for _ in range(steps):
        idx = torch.from_numpy(rng.choice(len(x), size=batch, replace=False))
        loss = torch.nn.functional.cross_entropy(module(xt[idx]), yt[idx])
        opt.zero_grad()
        loss.backward()
        opt.step()
    module.eval()


def torch_export(module, example, folder, file, input_name, external_data=True):
    """torch.onnx.export on its default path (dynamo=True; external_data=True is the default),
    a named symbolic batch dim; returns the path of the .onnx it wrote."""
    os.makedirs(folder, exist_ok=True)
    path = os.path.join(folder, file)
    kwargs = {} if external_data else {"external_data": False}
    quiet = io.StringIO()
    with contextlib.redirect_stdout(quiet), contextlib.redirect_stderr(quiet), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        torch.onnx.export(module, (torch.from_numpy(example),), path, input_names=[input_name],
                          output_names=["logits"], dynamic_shapes=({0: torch.export.Dim("batch")},), **kwargs)
    return path


def external_tensors(model):
    """(tensor name, {location, offset, length}) of every tensor stored outside the graph."""
    out = []
    tensors = list(model.graph.initializer)
    for node in model.graph.node:
        for a in node.attribute:
            if a.type == onnx.AttributeProto.TENSOR:
                tensors.append(a.t)
    for t in tensors:
        if t.data_location == TensorProto.EXTERNAL:
            out.append((t.name, {e.key: e.value for e in t.external_data}))
    return out


def external_bytes(model):
    total = 0
    for name, info in external_tensors(model):
        if "length" in info:
            total += int(info["length"])
        else:
            dtype = onnx.helper.tensor_dtype_to_np_dtype(next(t for t in model.graph.initializer if t.name == name).data_type)
            dims = next(t for t in model.graph.initializer if t.name == name).dims
            total += int(np.prod(dims, dtype=np.int64)) * np.dtype(dtype).itemsize
    return total


def self_contained(path):
    """onnx.load with its external data, serialised without: what onnx.save writes."""
    model = onnx.load(path, load_external_data=True)
    return model.SerializeToString()


def files_of(folder):
    out = []
    for name in sorted(os.listdir(folder)):
        with open(os.path.join(folder, name), "rb") as f:
            data = f.read()
        out.append({"name": name, "bytes": len(data), "sha256": hashlib.sha256(data).hexdigest()})
    return out


# --------------------------------------------------------------------------
# case torch_external: the dynamo exporter's folder, weights as external data

def case_torch_external(seed=41, n=200):
    name, in_dim, hidden, classes = "torch_external", 32, 64, 8
    rng = np.random.default_rng(seed)
    folder = os.path.join(CASES, name)
    os.makedirs(folder)
    t_layers = [(G.he(rng, in_dim, hidden), G.small(rng, hidden) + np.float32(2.0)),
                (G.he(rng, hidden, hidden), G.small(rng, hidden) + np.float32(1.0))]
    x_train = (np.round(rng.standard_normal((3000, in_dim)) * 16) / 16).astype(np.float32)
    body = MLP(t_layers + [(np.eye(hidden, dtype=np.float32), np.zeros(hidden, np.float32))])
    feats = np.maximum(forward(body, x_train), 0)
    t_layers.append(G.balanced_head(feats, G.he(rng, hidden, classes), G.small(rng, classes)))
    teacher = MLP(t_layers).eval()
    zt_train = forward(teacher, x_train)
    torch.manual_seed(seed)
    s_layers = [(G.he(rng, in_dim, 16), G.small(rng, 16) + np.float32(0.5)), (G.he(rng, 16, classes), G.small(rng, classes))]
    student = MLP(s_layers)
    agree, steps = distill(student, x_train, zt_train, 4.0, 0.86, seed)

    case = ExportCase(name)
    extra = {}
    for stem, module, layers in (("teacher", teacher, t_layers), ("student_small", student, s_layers)):
        export_dir = os.path.join(folder, stem)
        path = torch_export(module, x_train[:4], export_dir, f"{stem}.onnx", "features")
        written = onnx.load(path, load_external_data=False)
        ext = external_tensors(written)
        assert ext, f"{stem}: the exporter wrote no external data"
        assert all(info["location"] == f"{stem}.onnx.data" for _, info in ext)
        inline = self_contained(path)
        case.add(stem, inline, G.gemm_macs(layers), teacher=stem == "teacher")
        extra[stem] = {"export_dir": stem, "external_data": external_bytes(written),
                       "export_files": files_of(export_dir),
                       "external_tensors": [{"name": t, **{k: (int(v) if k in ("offset", "length") else v)
                                                           for k, v in info.items()}} for t, info in ext],
                       "inline_tensors": [t.name for t in written.graph.initializer
                                          if t.data_location != TensorProto.EXTERNAL]}
    x = (np.round(rng.standard_normal((n + 60, in_dim)) * 16) / 16).astype(np.float32)
    data, dropped = case.select({"features": x}, n)
    labels = G.make_labels(rng, run_scored(case.models["teacher"][0], data), classes)
    doc, outs, zs = case.write(data, labels)
    # onnxruntime reads the exporter's folder directly: the same outputs, bit for bit
    for stem in ("teacher", "student_small"):
        from_folder = run_scored(os.path.join(folder, stem, f"{stem}.onnx"), data)
        assert np.array_equal(from_folder, outs[stem]), stem
        extra[stem]["scored_output"] = scored_name(case.models[stem][0], data)
    doc = finish(case, doc, extra_models=extra, extra={
        "export": {"exporter": f"torch.onnx.export (dynamo=True, external_data=True: the defaults), torch {torch.__version__}, "
                               f"onnxscript {__import__('onnxscript').__version__}",
                   "ort_reads_export_dir": True,
                   "student_training": {"distillation_steps": steps, "train_agreement": agree}}})
    G.check_band(doc)
    return doc, dropped


# --------------------------------------------------------------------------
# case tabular_tree: a torch MLP teacher, scikit-learn students through skl2onnx

# A fictional fleet of conveyor drive motors, twelve sensor channels read once a
# minute, and the fault class a maintenance crew later wrote against the reading.
SENSORS = [  # name, nominal, spread, resolution
    ("winding_temp_c", 68.0, 4.0, 0.1), ("bearing_temp_c", 52.0, 3.0, 0.1), ("ambient_temp_c", 24.0, 4.0, 0.1),
    ("vibration_rms_mm_s", 2.2, 0.5, 0.01), ("vibration_peak_g", 0.9, 0.25, 0.01), ("current_a", 31.0, 2.0, 0.1),
    ("voltage_v", 400.0, 3.0, 0.5), ("speed_rpm", 1480.0, 6.0, 1.0), ("torque_nm", 190.0, 12.0, 0.5),
    ("oil_pressure_bar", 2.6, 0.2, 0.01), ("humidity_pct", 45.0, 8.0, 0.5), ("load_pct", 72.0, 9.0, 0.5),
]
FAULTS = ["healthy", "bearing wear", "misalignment", "winding overheat", "lubrication loss"]
# per fault, the sensor shifts at full severity, in units of the sensor's spread
FAULT_SHIFTS = {
    1: {"bearing_temp_c": 2.0, "vibration_rms_mm_s": 2.2, "vibration_peak_g": 2.5},
    2: {"vibration_rms_mm_s": 2.0, "vibration_peak_g": 1.0, "current_a": 1.2, "torque_nm": 1.0},
    3: {"winding_temp_c": 2.5, "current_a": 2.0, "voltage_v": -1.0},
    4: {"oil_pressure_bar": -2.5, "bearing_temp_c": 1.5, "speed_rpm": -1.0},
}


def motor_readings(rng, count):
    classes = rng.choice(len(FAULTS), size=count, p=[0.4, 0.15, 0.15, 0.15, 0.15])
    severity = rng.uniform(0.5, 1.6, size=count)
    cols = []
    for i, (sensor, nominal, spread, resolution) in enumerate(SENSORS):
        shift = np.array([FAULT_SHIFTS.get(int(c), {}).get(sensor, 0.0) for c in classes]) * severity
        v = nominal + spread * (rng.standard_normal(count) + shift)
        cols.append(np.round(v / resolution) * resolution)
    return np.stack(cols, axis=1).astype(np.float32), classes.astype(np.int64)


def skl_export(clf, features, name):
    """skl2onnx with the probabilities as a tensor (no ZipMap), the default target opset.
    `name` is the graph name: without it skl2onnx names the graph with a random uuid4,
    and the file changes on every run."""
    return convert_sklearn(clf, name=name, initial_types=[("features", FloatTensorType([None, features]))],
                           options={id(clf): {"zipmap": False}}).SerializeToString()


def case_tabular_tree(seed=42, n=300):
    name, features, classes = "tabular_tree", len(SENSORS), len(FAULTS)
    rng = np.random.default_rng(seed)
    x_train, y_train = motor_readings(rng, 4000)
    mean, std = x_train.mean(axis=0), x_train.std(axis=0)
    torch.manual_seed(seed)
    teacher = MLP([(G.he(rng, features, 32), G.small(rng, 32)), (G.he(rng, 32, 32), G.small(rng, 32)),
                   (G.he(rng, 32, classes), G.small(rng, classes))], mean=mean, std=std)
    train_classifier(teacher, x_train, y_train, seed)
    with tempfile.TemporaryDirectory() as tmp:
        path = torch_export(teacher, x_train[:4], tmp, "teacher.onnx", "features", external_data=False)
        assert os.listdir(tmp) == ["teacher.onnx"]
        with open(path, "rb") as f:
            teacher_bytes = f.read()
    # the students learn the teacher's decisions on a fresh draw of readings
    # (distillation into trees and a linear model on the teacher's labels, common practice)
    x_fit, _ = motor_readings(rng, 4000)
    y_fit = run_scored(teacher_bytes, {"features": x_fit}).argmax(1)
    forest = RandomForestClassifier(n_estimators=20, max_depth=8, random_state=seed).fit(x_fit, y_fit)
    boosted = GradientBoostingClassifier(n_estimators=8, max_depth=3, learning_rate=0.3, random_state=seed).fit(x_fit, y_fit)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")   # lbfgs on unscaled readings: see the README
        linear = LogisticRegression(max_iter=300, random_state=seed).fit(x_fit, y_fit)
    case = ExportCase(name)
    case.add("teacher", teacher_bytes, teacher=True)
    students = {"student_forest": forest, "student_boosted": boosted, "student_linear": linear}
    for stem, clf in students.items():
        case.add(stem, skl_export(clf, features, stem))
    x, y = motor_readings(rng, 3 * n)
    data, dropped = case.select({"features": x}, n)
    keep = np.array([np.flatnonzero((x == row).all(1))[0] for row in data["features"]])
    labels = y[keep]
    class_names = np.array(FAULTS)
    doc, outs, zs = case.write(data, labels, extra_arrays={"class_names": class_names})
    extra = {stem: {"scored_output": scored_name(mb, data)} for stem, (mb, _) in case.models.items()}
    extra["teacher"]["input_standardisation"] = "Sub, Div by the training readings' mean and std inside the graph"
    for stem, clf in students.items():
        extra[stem]["estimator"] = {"class": type(clf).__name__, "params": {
            k: v for k, v in sorted(clf.get_params().items()) if isinstance(v, (int, float, str, bool)) or v is None}}
        # the ml ops' attributes that an engine must support
        model = onnx.load_model_from_string(case.models[stem][0])
        extra[stem]["ml_attributes"] = {
            node.op_type: sorted(a.name for a in node.attribute) for node in model.graph.node if node.domain == "ai.onnx.ml"}
        for node in model.graph.node:
            for a in node.attribute:
                if a.name in ("post_transform", "norm", "multi_class"):
                    v = onnx.helper.get_attribute_value(a)
                    extra[stem].setdefault("ml_settings", {})[f"{node.op_type}.{a.name}"] = v.decode() if isinstance(v, bytes) else v
        assert [o["dtype"] for o in G.value_infos(model.graph.output)] == ["int64", "float32"]
        out = outs[stem]
        extra[stem]["zeros_in_output"] = int(np.sum(out == 0.0))
        extra[stem]["rows_with_tied_values"] = int(np.sum([len(np.unique(r)) < len(r) for r in out]))
        # the label output is the argmax of the probabilities (lowest index on ties)
        sess = session(case.models[stem][0])
        label, probs = sess.run(None, data)
        assert np.array_equal(label, G.argmax(G.to_logits(probs, "probabilities")))
    doc = finish(case, doc, extra_models=extra, extra={
        "scenario": "invented: conveyor drive motors, twelve sensor channels in physical units, five fault classes",
        "sensors": [{"name": s, "nominal": nom, "spread": sp, "resolution": res} for s, nom, sp, res in SENSORS],
        "export": {"teacher": f"torch.onnx.export (dynamo, external_data=False), torch {torch.__version__}",
                   "students": f"skl2onnx {skl2onnx.__version__} convert_sklearn(options={{id(clf): {{'zipmap': False}}}}), "
                               f"scikit-learn {sklearn.__version__}, initial type FloatTensorType([None, {features}])"}})
    G.check_band(doc)
    return doc, dropped


# --------------------------------------------------------------------------
# case int8: onnxruntime's quantisation tools

def images(rng, count):
    """Low-resolution random patterns, upsampled, plus pixel noise, in steps of 1/32 (as case_cnn)."""
    low = rng.standard_normal((count, 3, 4, 4))
    up = np.kron(low, np.ones((1, 1, 4, 4)))
    return (np.round((up + 0.3 * rng.standard_normal(up.shape)) * 32) / 32).astype(np.float32)


class Calibration(CalibrationDataReader):
    def __init__(self, batches):
        self.batches = iter(batches)

    def get_next(self):
        return next(self.batches, None)


def output_step(model_bytes):
    """y_scale of the DequantizeLinear that produces the scored output, or None."""
    model = onnx.load_model_from_string(model_bytes)
    inits = {t.name: onnx.numpy_helper.to_array(t) for t in model.graph.initializer}
    out = model.graph.output[0].name
    for node in model.graph.node:
        if out in node.output and node.op_type == "DequantizeLinear":
            return float(inits[node.input[1]])
    return None


def quant_details(model_bytes):
    model = onnx.load_model_from_string(model_bytes)
    inits = {t.name: t for t in model.graph.initializer}
    qdq = {"QuantizeLinear": 0, "DequantizeLinear": 0}
    per_axis, dtypes = [], set()
    for node in model.graph.node:
        if node.op_type in qdq:
            qdq[node.op_type] += 1
            scale = inits.get(node.input[1])
            if scale is not None and len(scale.dims) and scale.dims[0] > 1:
                per_axis.append({"node": node.name, "input": node.input[0], "channels": int(scale.dims[0]),
                                 "axis": next((int(a.i) for a in node.attribute if a.name == "axis"), 1)})
            if len(node.input) > 2 and node.input[2] in inits:
                dtypes.add(G.ONNX_TO_NAME.get(inits[node.input[2]].data_type, str(inits[node.input[2]].data_type)))
    int_inits = sorted({G.ONNX_TO_NAME.get(t.data_type, str(t.data_type)) for t in model.graph.initializer
                        if t.data_type in (TensorProto.INT8, TensorProto.UINT8, TensorProto.INT32)})
    return {"quantize_dequantize_nodes": qdq, "per_axis_scales": per_axis,
            "zero_point_dtypes": sorted(dtypes), "integer_initializer_dtypes": int_inits}


def case_int8(seed=43, n=200):
    name, classes = "int8", 8
    rng = np.random.default_rng(seed)
    folder = os.path.join(CASES, name)
    os.makedirs(folder)
    x_train = images(rng, 3000)
    teacher = CNN(rng, 8, 16, classes).eval()
    with torch.no_grad():
        feats = teacher.features(torch.from_numpy(x_train)).numpy()
    w, b = G.balanced_head(feats, np.ascontiguousarray(teacher.head.weight.data.numpy().T), teacher.head.bias.data.numpy())
    teacher.set_head(w, b)
    zt_train = forward(teacher, x_train)
    torch.manual_seed(seed)
    student = CNN(rng, 6, 8, classes)
    agree_s, steps_s = distill(student, x_train, zt_train, 2.0, 0.86, seed + 1)
    student_mm = CNN(rng, 6, 12, classes, matmul_head=True)
    agree_d, steps_d = distill(student_mm, x_train, zt_train, 2.0, 0.86, seed + 2)
    calibration = [{"image": images(np.random.default_rng(1000 + i), 16)} for i in range(16)]

    floats, quantised, settings = {}, {}, {}
    with tempfile.TemporaryDirectory() as tmp:
        for stem, module in (("teacher", teacher), ("student_qdq", student), ("student_dynamic", student_mm)):
            path = torch_export(module, x_train[:4], os.path.join(tmp, stem), "model.onnx", "image", external_data=False)
            with open(path, "rb") as f:
                floats[stem] = f.read()
        recipes = {
            "student_qdq": ("student_qdq", "static", dict(quant_format=QuantFormat.QDQ, activation_type=QuantType.QUInt8,
                                                          weight_type=QuantType.QInt8)),
            "student_qdq_channel": ("teacher", "static", dict(quant_format=QuantFormat.QDQ, activation_type=QuantType.QInt8,
                                                              weight_type=QuantType.QInt8, per_channel=True)),
            "student_dynamic": ("student_dynamic", "dynamic", dict(weight_type=QuantType.QInt8)),
        }
        logging.getLogger().setLevel(logging.ERROR)
        for stem, (source, kind, kwargs) in recipes.items():
            src = os.path.join(tmp, source, "model.onnx")
            dst = os.path.join(tmp, f"{stem}.int8.onnx")
            if kind == "static":
                quantize_static(src, dst, Calibration(calibration), **kwargs)
            else:
                quantize_dynamic(src, dst, **kwargs)
            with open(dst, "rb") as f:
                quantised[stem] = f.read()
            settings[stem] = {"function": f"onnxruntime.quantization.quantize_{kind}", "float_model": source,
                              **{k: (v.name if hasattr(v, "name") else v) for k, v in kwargs.items()}}
            if kind == "static":
                settings[stem]["calibration"] = "16 batches of 16 invented images (seeds 1000..1015), MinMax (the default)"

    case = ExportCase(name, temperature=2.0, alpha=0.5)
    case.add("teacher", floats["teacher"], teacher=True)
    steps = {}
    for stem, mb in quantised.items():
        case.add(stem, mb)
        step = output_step(mb)
        steps[stem] = step
        # one quantisation step on each of two logits may move a gap by two steps: keep three
        case.margin[stem] = 3 * step if step else 0.0
        case.variants[stem] = [lambda feeds, mb=mb: run_scored(mb, feeds, optimised=False)]
        if step is None:   # dynamic: the activations' scale is the batch's, so the batch matters
            case.variants[stem] += [lambda feeds, mb=mb, b=b: run_scored(mb, feeds, batch=b) for b in (1, 32)]
    x = images(rng, 6 * n)
    data, dropped = case.select({"image": x}, n)
    labels = G.make_labels(rng, run_scored(floats["teacher"], data), classes)
    doc, outs, zs = case.write(data, labels)
    for stem in ("student_qdq", "student_dynamic"):
        with open(os.path.join(folder, f"float_{stem}.onnx"), "wb") as f:
            f.write(floats[stem])
    extra_models = {stem: {"scored_output": scored_name(mb, data)} for stem, (mb, _) in case.models.items()}
    extra_outputs = {}
    for stem, mb in quantised.items():
        extra_models[stem]["quantization"] = dict(settings[stem], **quant_details(mb))
        out = outs[stem]
        unopt = run_scored(mb, data, optimised=False)
        e = {"output_step": steps[stem],
             "selection_margin": case.margin[stem] or G.MIN_GAP,
             "unoptimised_max_abs_diff": float(np.max(np.abs(unopt.astype(np.float64) - out))),
             "float_original_max_abs_diff": float(np.max(np.abs(
                 run_scored(floats[settings[stem]["float_model"]], data).astype(np.float64) - out)))}
        if steps[stem]:
            e["unoptimised_max_diff_in_steps"] = float(np.max(np.abs(unopt.astype(np.float64) - out)) / steps[stem])
            grid = out.astype(np.float64) / steps[stem]
            e["on_step_grid"] = bool(np.all(np.abs(grid - np.round(grid)) < 1e-3))
        else:
            e["batch_dependence"] = {str(b): float(np.max(np.abs(run_scored(mb, data, batch=b).astype(np.float64) - out)))
                                     for b in (1, 32)}
            for b in (1, 32):
                np.save(os.path.join(folder, "ort", f"{stem}_batch{b}.npy"), run_scored(mb, data, batch=b))
            e["batch_files"] = {str(b): f"ort/{stem}_batch{b}.npy" for b in (1, 32)}
        extra_outputs[stem] = e
    float_originals = {}
    for stem in quantised:
        source = settings[stem]["float_model"]
        file = "teacher.onnx" if source == "teacher" else f"float_{stem}.onnx"
        path = os.path.join(folder, file)
        m = onnx.load(path)
        with open(path, "rb") as f:
            digest = hashlib.sha256(f.read()).hexdigest()
        float_originals[stem] = {"file": file, "bytes": os.path.getsize(path), "sha256": digest,
                                 "inputs": value_infos(m.graph.input), "outputs": value_infos(m.graph.output),
                                 **op_summary(m)}
    doc = finish(case, doc, extra_models=extra_models, extra_outputs=extra_outputs, extra={
        "float_originals": float_originals,
        "export": {"float_models": f"torch.onnx.export (dynamo, external_data=False), torch {torch.__version__}",
                   "quantization": f"onnxruntime {ort.__version__} onnxruntime.quantization, no pre-processing",
                   "student_training": {"student_qdq": {"distillation_steps": steps_s, "train_agreement": agree_s},
                                        "student_dynamic": {"distillation_steps": steps_d, "train_agreement": agree_d}}}})
    G.check_band(doc, skip=("student_qdq_channel",))
    assert doc["students"]["student_qdq_channel"]["fidelity"]["agreement"] > 0.9
    return doc, dropped


# --------------------------------------------------------------------------
# bundles: zip files of the torch_external teacher's folder, good and hostile

def zip_bytes(entries, compression=zipfile.ZIP_DEFLATED):
    """entries: [(name, bytes)] or [(ZipInfo, bytes)]; fixed timestamps, so reruns are identical."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=compression) as z:
        for name, data in entries:
            if isinstance(name, zipfile.ZipInfo):
                info = name
            else:
                info = zipfile.ZipInfo(name, date_time=FIXED_TIME)
                info.external_attr = 0o100644 << 16   # a regular file, rw-r--r--, as zip tools on Unix write
                info.compress_type = compression
                info.create_system = 3             # made by Unix (zipfile's default is the host's)
            z.writestr(info, data)
    return buf.getvalue()


def edited(onnx_bytes, tensor, **fields):
    """The .onnx with one tensor's external_data entries changed (location, offset, length)."""
    model = onnx.load_model_from_string(onnx_bytes)
    t = next(t for t in model.graph.initializer if t.name == tensor)
    present = {e.key: e for e in t.external_data}
    for key, value in fields.items():
        if key in present:
            present[key].value = str(value)
        else:
            e = t.external_data.add()
            e.key, e.value = key, str(value)
    return model.SerializeToString()


def case_bundles(seed=44):
    folder = os.path.join(CASES, "bundles")
    os.makedirs(folder)
    src = os.path.join(CASES, "torch_external", "teacher")
    onnx_name, data_name = "teacher.onnx", "teacher.onnx.data"
    with open(os.path.join(src, onnx_name), "rb") as f:
        model_bytes = f.read()
    with open(os.path.join(src, data_name), "rb") as f:
        data_bytes = f.read()
    with open(os.path.join(CASES, "torch_external", "student_small", "student_small.onnx"), "rb") as f:
        student_onnx = f.read()
    with open(os.path.join(CASES, "torch_external", "student_small", "student_small.onnx.data"), "rb") as f:
        student_data = f.read()
    ext = external_tensors(onnx.load_model_from_string(model_bytes))
    first, first_info = ext[0]
    last, last_info = max(ext, key=lambda e: int(e[1]["offset"]) + int(e[1]["length"]))
    assert int(last_info["offset"]) + int(last_info["length"]) == len(data_bytes)   # the last tensor ends at EOF
    size = len(data_bytes)
    rng = np.random.default_rng(seed)

    # the same teacher weights exported again, under another file name
    with open(os.path.join(CASES, "torch_external", "expected.json")) as f:
        doc_t = json.load(f)
    with tempfile.TemporaryDirectory() as tmp:
        teacher = onnx.load(os.path.join(src, onnx_name))
        # rebuild the torch module from the exported weights and export it once more
        w = {t.name: onnx.numpy_helper.to_array(t) for t in teacher.graph.initializer}
        names = sorted({k.rsplit(".", 1)[0] for k in w})
        module = MLP([(np.ascontiguousarray(w[f"{p}.weight"].T), w[f"{p}.bias"]) for p in names]).eval()
        x = np.zeros((4, w[f"{names[0]}.weight"].shape[1]), np.float32)
        renamed = torch_export(module, x, os.path.join(tmp, "motor_classifier"), "classifier.onnx", "features")
        assert sorted(os.listdir(os.path.dirname(renamed))) == ["classifier.onnx", "classifier.onnx.data"]
        with open(renamed, "rb") as f:
            renamed_onnx = f.read()
        with open(renamed + ".data", "rb") as f:
            renamed_data = f.read()
        assert renamed_data == data_bytes and renamed_onnx != model_bytes
        # onnx's own inlining gives one model for both exports (evidence only: the service inlines itself)
        assert self_contained(renamed) == self_contained(os.path.join(src, onnx_name))
    assert doc_t["models"]["teacher"]["sha256"] == hashlib.sha256(self_contained(os.path.join(src, onnx_name))).hexdigest()

    def link(name, target):
        info = zipfile.ZipInfo(name, date_time=FIXED_TIME)
        info.external_attr = (0o120777 << 16)
        info.compress_type = zipfile.ZIP_STORED
        info.create_system = 3
        return info, target.encode()

    def raw_name(name):
        """A ZipInfo whose filename is written exactly as given (zipfile keeps '..' and a leading '/')."""
        info = zipfile.ZipInfo(name, date_time=FIXED_TIME)
        info.external_attr = 0o100644 << 16
        info.compress_type = zipfile.ZIP_DEFLATED
        info.create_system = 3
        return info

    def dos(name):
        """An entry as Windows' own zip tool writes it: made by MS-DOS, no Unix mode, the archive bit set."""
        info = zipfile.ZipInfo(name, date_time=FIXED_TIME)
        info.create_system = 0
        info.external_attr = 0x20
        info.compress_type = zipfile.ZIP_DEFLATED
        return info

    good = [(onnx_name, model_bytes), (data_name, data_bytes)]
    bundles = [
        ("good.zip", zip_bytes(good), 201, None, "the exporter's folder as written, deflated", "good.zip"),
        ("good_nested.zip", zip_bytes([(f"exported/{n}", b) for n, b in good]), 201, None,
         "the same files under a top folder 'exported/'; locations are relative to the .onnx", "good.zip"),
        ("good_stored.zip", zip_bytes(good, zipfile.ZIP_STORED), 201, None, "the same files, no compression", "good.zip"),
        ("good_windows.zip", zip_bytes([(dos(n), b) for n, b in good]), 201, None,
         "the same files with MS-DOS attributes (made by 0, external_attr 0x20, no Unix mode), as Windows writes them",
         "good.zip"),
        ("good_extra_file.zip", zip_bytes(good + [("NOTES.txt", b"exported for the motor line\n")]), 201, None,
         "the same files plus one that no tensor names: other files are never read", "good.zip"),
        ("good_renamed.zip", zip_bytes([("classifier.onnx", renamed_onnx), ("classifier.onnx.data", renamed_data)]), 201, None,
         "the same teacher weights exported again as classifier.onnx + classifier.onnx.data: other .onnx bytes, "
         "same inlined model", "good.zip"),
        ("two_onnx.zip", zip_bytes(good + [("student_small.onnx", student_onnx), ("student_small.onnx.data", student_data)]),
         422, None, "two .onnx files (the teacher and the student with their data)", None),
        ("no_onnx.zip", zip_bytes([(data_name, data_bytes)]), 422, None, "no .onnx file, only the data", None),
        ("dotdot.zip", zip_bytes([(onnx_name, edited(model_bytes, first, location=f"../{data_name}")), (data_name, data_bytes)]),
         422, first, f"location of '{first}' is '../{data_name}' (the file is also at the root: only the '..' is wrong)", None),
        ("absolute.zip", zip_bytes([(onnx_name, edited(model_bytes, first, location=f"/tmp/{data_name}")), (data_name, data_bytes)]),
         422, first, f"location of '{first}' is the absolute path '/tmp/{data_name}'", None),
        ("missing.zip", zip_bytes([(onnx_name, edited(model_bytes, first, location="weights.bin")), (data_name, data_bytes)]),
         422, first, f"location of '{first}' is 'weights.bin', which the bundle does not hold", None),
        ("offset_past_end.zip", zip_bytes([(onnx_name, edited(model_bytes, first, offset=size + 4096)), (data_name, data_bytes)]),
         422, first, f"offset of '{first}' is {size + 4096}, past the end of the {size}-byte data file", None),
        ("length_past_end.zip", zip_bytes([(onnx_name, edited(model_bytes, last, length=int(last_info['length']) + 4)),
                                           (data_name, data_bytes)]),
         422, last, f"length of '{last}' is 4 bytes more than it needs: offset + length is 4 past the end of the file", None),
        ("window_past_end.zip", zip_bytes([(onnx_name, edited(model_bytes, last, offset=int(last_info['offset']) + 4)),
                                           (data_name, data_bytes)]),
         422, last, f"offset of '{last}' moved 4 bytes on with its true length: its data runs 4 bytes past the end", None),
        ("length_short.zip", zip_bytes([(onnx_name, edited(model_bytes, first, length=int(first_info['length']) - 4)),
                                        (data_name, data_bytes)]),
         422, first, f"length of '{first}' is 4 bytes less than its shape and type need (inside the file)", None),
        ("symlink.zip", zip_bytes([(onnx_name, model_bytes), link(data_name, "/etc/hostname")]), 422, None,
         f"the entry '{data_name}' is a symbolic link (mode 0o120777) to /etc/hostname: never followed", None),
        ("entry_dotdot.zip", zip_bytes([(onnx_name, model_bytes), (raw_name(f"../{data_name}"), data_bytes)]), 422, None,
         f"the data file's entry is named '../{data_name}': an entry name holding '..' is refused", None),
        ("entry_absolute.zip", zip_bytes([(onnx_name, model_bytes), (data_name, data_bytes),
                                          (raw_name("/tmp/proctor-bundle-probe.txt"), b"never written\n")]), 422, None,
         "besides the good files, an entry named with the absolute path '/tmp/proctor-bundle-probe.txt'", None),
        ("not_a_zip.zip", rng.bytes(4096), 422, None, "4096 random bytes (numpy.random.default_rng(44).bytes)", None),
    ]
    listing = []
    for file, data, expect, tensor, why, same in bundles:
        with open(os.path.join(folder, file), "wb") as f:
            f.write(data)
        entry = {"file": file, "expect": expect, "tensor": tensor, "why": why, "bytes": len(data),
                 "sha256": hashlib.sha256(data).hexdigest()}
        if same:
            entry["same_model_as"] = same
            entry["external_data"] = doc_t["models"]["teacher"]["external_data"]
        listing.append(entry)
    # check the files say what they should
    for file, *_ in bundles:
        path = os.path.join(folder, file)
        if file == "not_a_zip.zip":
            assert not zipfile.is_zipfile(path)
            continue
        with zipfile.ZipFile(path) as z:
            names = z.namelist()
            infos = {i.filename: i for i in z.infolist()}
        if file == "entry_dotdot.zip":
            assert f"../{data_name}" in names
        if file == "entry_absolute.zip":
            assert "/tmp/proctor-bundle-probe.txt" in names
        if file == "symlink.zip":
            assert (infos[data_name].external_attr >> 16) & 0o170000 == 0o120000
        if file == "good_windows.zip":
            assert all(i.create_system == 0 and i.external_attr == 0x20 for i in infos.values())
    # the good bundles, unpacked, run in onnxruntime as the exporter's folder does
    with np.load(os.path.join(CASES, "torch_external", "data.npz")) as d:
        feeds = {"features": d["features"]}
    want = np.load(os.path.join(CASES, "torch_external", "ort", "teacher.npy"))
    for file, data, expect, *_ in bundles:
        if expect != 201:
            continue
        with tempfile.TemporaryDirectory() as tmp:
            with zipfile.ZipFile(io.BytesIO(data)) as z:
                z.extractall(tmp)
            found = [os.path.join(r, f) for r, _, fs in os.walk(tmp) for f in fs if f.endswith(".onnx")]
            assert len(found) == 1, file
            assert np.array_equal(run_scored(found[0], feeds), want), file
    doc = {
        "case": "bundles",
        "source": "cases/torch_external/teacher/ (torch.onnx.export, default dynamo path), zipped with Python's zipfile",
        "teacher_model": {"self_contained": "cases/torch_external/teacher.onnx",
                          "sha256_onnx_inline": doc_t["models"]["teacher"]["sha256"],
                          "external_tensors": [t for t, _ in ext], "data_file_bytes": size},
        "notes": "expect is the status on a service that does not hold the model yet; a file with same_model_as is "
                 "the same model as that file: uploaded after it, the service answers 200 with the same model id. "
                 "The service inlines the data itself, so its sha256 need not equal sha256_onnx_inline (onnx.save's).",
        "files": listing,
        "sources": {"expect": "openapi.yaml, POST /v1/models (zip bundles of a model and its external data)",
                    "bytes, sha256": "len, hashlib.sha256 of the file as written",
                    "same_model_as": "onnx.load with external data and SerializeToString give the same bytes for both "
                                     "exports (asserted by the generator)"},
    }
    with open(os.path.join(folder, "expected.json"), "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")
    return doc


# --------------------------------------------------------------------------

def main():
    start = time.time()
    os.makedirs(CASES, exist_ok=True)
    for name in EXPORT_CASES:
        path = os.path.join(CASES, name)
        if os.path.isdir(path):
            shutil.rmtree(path)
    summary = {}
    summary["torch_external"] = case_torch_external()
    summary["tabular_tree"] = case_tabular_tree()
    summary["int8"] = case_int8()
    bundles = case_bundles()
    print(f"torch {torch.__version__}, onnxscript {__import__('onnxscript').__version__}, scikit-learn {sklearn.__version__}, "
          f"skl2onnx {skl2onnx.__version__}, onnx {onnx.__version__}, onnxruntime {ort.__version__}, numpy {np.__version__}")
    for name, (d, dropped) in summary.items():
        ta = d["teacher_accuracy"]
        line = f"{name:15s} N={d['samples']:3d} C={d['classes']:3d} dropped={dropped:3d} teacher_top1={ta['top1']:.3f}"
        line += " " + " ".join(f"{s}:agree={v['fidelity']['agreement']:.3f}" for s, v in d["students"].items())
        print(line)
    print(f"bundles         {len(bundles['files'])} files")
    print(f"{time.time() - start:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
