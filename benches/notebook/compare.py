#!/usr/bin/env python3
"""Whole-evaluation wall time: Proctor against an onnxruntime notebook.

For each case (scenarios.py: a teacher and two students, with an evaluation
set) this script

1. times the Proctor path: a `proctor serve` on a fresh temporary data dir,
   from the first upload to the finished report (uploads, evaluation,
   polling every 50 ms, the report), and reads where the service's time went
   (the report's `timings`, and the rounds of GET /v1/evaluations/{id}/timings);
2. times the notebook path (notebook.py) in a fresh interpreter, once with
   onnxruntime on one thread and once with its default thread count, with the
   same batch size, temperature and latency settings;
3. measures the teacher's per-call time at batch 1 in onnxruntime on one
   thread (median over --calls calls after a warm-up), against Proctor's p50;
4. checks that the notebook's agreement and kl of every student equal
   Proctor's to --tolerance relative (and shows how far the other figures
   are apart);
5. prints a table, and with --json FILE writes every figure.

  python3 benches/notebook/compare.py --proctor target/release/proctor
  python3 benches/notebook/compare.py --proctor target/debug/proctor --cases mlp --quick

Needs numpy, scipy, statsmodels, onnx and onnxruntime. A benchmark: it
prints figures and asserts nothing about speed; it exits 1 when a figure
differs between the two paths.
"""
import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.request

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
import notebook  # noqa: E402  (its nearest-rank rule, to recompute p50 from the rounds)
import scenarios  # noqa: E402

NOTEBOOK = os.path.join(HERE, "notebook.py")
POLL_S = 0.05
TEMPERATURE, ALPHA, BATCH_SIZE = 4.0, 0.5, 32
# Figures compared with Proctor's report: these must match ...
REQUIRED = ("agreement", "kl")
# ... and these are shown beside them.
FIDELITY = ("agreement_ci", "topk_agreement", "kl_t1", "js", "soft_cross_entropy", "logit_mse")
ACCURACY = ("top1", "top1_ci", "topk", "ece", "nll", "kd_loss", "delta", "delta_ci", "retention",
            "mcnemar_p", "negative_flip_rate")
TEACHER_ACCURACY = ("top1", "top1_ci", "topk", "ece", "nll")


def log(msg):
    print(msg, file=sys.stderr, flush=True)


# --------------------------------------------------------------------------
# the Proctor path

class Service:
    """`proctor serve` on 127.0.0.1, a free port and a fresh data dir."""

    def __init__(self, binary, work):
        self.data = os.path.join(work, "data")
        self.out = os.path.join(work, "serve.out")
        self.err = os.path.join(work, "serve.err")
        with open(self.out, "w") as out, open(self.err, "w") as err:
            self.proc = subprocess.Popen(
                [binary, "serve", "--listen", "127.0.0.1:0", "--data-dir", self.data],
                stdout=out, stderr=err, stdin=subprocess.DEVNULL)
        self.base = None
        deadline = time.monotonic() + 120
        while self.base is None:
            if self.proc.poll() is not None or time.monotonic() > deadline:
                self.stop()
                raise SystemExit(f"proctor serve did not start; see {self.err}")
            with open(self.out) as f:
                for line in f:
                    if "listening on " in line:
                        self.base = line.split("listening on ", 1)[1].strip().rstrip("/")
            time.sleep(0.05)
        while True:
            try:
                if self.request("GET", "/readyz", raw=True)[0] == 200:
                    break
            except (OSError, urllib.error.URLError):
                pass
            if time.monotonic() > deadline:
                self.stop()
                raise SystemExit("proctor serve never became ready")
            time.sleep(0.05)

    def request(self, method, path, body=None, ctype=None, raw=False):
        req = urllib.request.Request(self.base + path, data=body, method=method)
        if ctype:
            req.add_header("content-type", ctype)
        try:
            with urllib.request.urlopen(req, timeout=3600) as r:
                data = r.read()
                return (r.status, data) if raw else json.loads(data)
        except urllib.error.HTTPError as e:
            if raw:
                return e.code, e.read()
            raise SystemExit(f"{method} {path}: {e.code} {e.read().decode(errors='replace')}")

    def stop(self):
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(20)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()


def proctor_path(binary, files, warmup, iterations, work):
    """Times one evaluation from the first upload to the report."""
    svc = Service(binary, work)
    try:
        t0 = time.perf_counter()
        ids, uploads = {}, {}
        for name, path in files["models"]:
            t = time.perf_counter()
            with open(path, "rb") as f:
                ids[name] = svc.request("POST", f"/v1/models?name={name}", f.read(),
                                        "application/octet-stream")["id"]
            uploads[name] = time.perf_counter() - t
        t = time.perf_counter()
        with open(files["data"], "rb") as f:
            dataset = svc.request("POST", "/v1/datasets?name=eval", f.read(), "application/octet-stream")["id"]
        uploads["dataset"] = time.perf_counter() - t
        t_uploaded = time.perf_counter()
        names = [n for n, _ in files["models"]]
        body = {"project": "bench", "teacher": ids[names[0]], "students": [ids[n] for n in names[1:]],
                "dataset": dataset, "temperature": TEMPERATURE, "alpha": ALPHA, "batch_size": BATCH_SIZE,
                "latency": {"warmup": warmup, "iterations": iterations}, "tags": {"bench": "notebook"}}
        ev = svc.request("POST", "/v1/evaluations", json.dumps(body).encode(), "application/json")
        t_created = time.perf_counter()
        stages, last = [], None
        while ev["status"] in ("queued", "running"):
            stage = ev["progress"]["stage"]
            if stage != last:
                stages.append((stage, time.perf_counter() - t_created))
                last = stage
            time.sleep(POLL_S)
            ev = svc.request("GET", f"/v1/evaluations/{ev['id']}")
        if ev["status"] != "succeeded":
            raise SystemExit(f"evaluation {ev['status']}: {json.dumps(ev.get('error'))}")
        report = svc.request("GET", f"/v1/evaluations/{ev['id']}/report")
        wall = time.perf_counter() - t0
        rounds = svc.request("GET", f"/v1/evaluations/{ev['id']}/timings")
    finally:
        svc.stop()
    return {"wall_s": wall, "uploads_s": uploads, "upload_total_s": t_uploaded - t0,
            "create_s": t_created - t_uploaded, "stages_seen": stages,
            "ids": ids, "report": report, "rounds": rounds}


# --------------------------------------------------------------------------
# the notebook path

def notebook_path(files, threads, warmup, iterations, work):
    out = os.path.join(work, f"notebook-{threads}.json")
    cmd = [sys.executable, NOTEBOOK, "--teacher", files["models"][0][1]]
    for _, p in files["models"][1:]:
        cmd += ["--student", p]
    cmd += ["--data", files["data"], "--threads", str(threads), "--batch-size", str(BATCH_SIZE),
            "--temperature", str(TEMPERATURE), "--alpha", str(ALPHA),
            "--warmup", str(warmup), "--iterations", str(iterations), "--json", out]
    t = time.perf_counter()
    subprocess.run(cmd, check=True)
    wall = time.perf_counter() - t
    with open(out) as f:
        result = json.load(f)
    result["wall_s"] = wall
    return result


def per_call(model, data, calls, warmup, work):
    out = os.path.join(work, "per-call.json")
    subprocess.run([sys.executable, NOTEBOOK, "--per-call", model, "--data", data, "--calls", str(calls),
                    "--warmup", str(warmup), "--json", out], check=True)
    with open(out) as f:
        return json.load(f)


# --------------------------------------------------------------------------
# cross-check

def rel(a, b):
    if a is None or b is None:
        return 0.0 if a is b else math.inf
    if isinstance(a, list):
        return max(rel(x, y) for x, y in zip(a, b))
    return abs(a - b) / max(abs(a), abs(b), 1e-300) if a != b else 0.0


def cross_check(case, nb, pr, tol):
    """Returns (rows, failures): rows are (who, figure, notebook, proctor, rel)."""
    rows, failures = [], []
    by_name = {c["model"]["name"]: c for c in pr["report"]["candidates"]}
    t_nb, t_pr = nb["report"]["teacher"], pr["report"]["teacher"]
    for f in TEACHER_ACCURACY:
        rows.append(("teacher", f, t_nb["accuracy"][f], t_pr["accuracy"][f]))
    for f in ("bytes", "parameters", "macs"):
        rows.append(("teacher", "size." + f, t_nb["size"][f], t_pr["size"][f]))
    for c in nb["report"]["candidates"]:
        name = c["model"].removesuffix(".onnx")
        p = by_name[name]
        for f in REQUIRED + FIDELITY:
            rows.append((name, f, c["fidelity"][f], p["fidelity"][f]))
        rows.append((name, "class_agreement", c["fidelity"]["class_agreement"], p["fidelity"]["class_agreement"]))
        rows.append((name, "disagreements", c["fidelity"]["disagreements"], p["fidelity"]["disagreements"]))
        rows.append((name, "rank", c["rank"], p["rank"]))
        for f in ACCURACY:
            rows.append((name, f, c["accuracy"][f], p["accuracy"][f]))
    out = []
    for who, f, a, b in rows:
        r = (0.0 if a == b else math.inf) if f in ("class_agreement", "disagreements", "rank") else rel(a, b)
        out.append((who, f, a, b, r))
        if r > tol and f in REQUIRED:
            failures.append(f"{case} {who} {f}: notebook {a!r} proctor {b!r} (rel {r:.3g})")
    return out, failures


# --------------------------------------------------------------------------

def fmt_s(x):
    return f"{x:8.2f}"


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--proctor", required=True, help="the proctor binary (a release build for figures to quote)")
    ap.add_argument("--cases", default=",".join(scenarios.CASES), help="comma-separated: " + ",".join(scenarios.CASES))
    ap.add_argument("--quick", action="store_true",
                    help="small sets (cnn 128, encoder 64, mlp 1024 samples), 3 warm-up runs, "
                         "20 rounds, 50 per-call runs: for trying the script, not for figures")
    ap.add_argument("--warmup", type=int, help="warm-up runs of each model (default 10; quick 3)")
    ap.add_argument("--iterations", type=int, help="timed rounds (default 100; quick 20)")
    ap.add_argument("--calls", type=int, help="per-call runs in onnxruntime (default 200; quick 50)")
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--cache", default=os.path.join(os.path.expanduser("~"), ".cache", "proctor-bench-notebook"),
                    help="where generated models and sets are kept (default %(default)s)")
    ap.add_argument("--tolerance", type=float, default=1e-5, help="relative tolerance of the cross-check (kl from float32 logits of two engines differs by about 1e-6)")
    ap.add_argument("--json", metavar="FILE", help="write every figure here")
    ap.add_argument("--keep", action="store_true", help="keep the temporary data dirs and outputs")
    ap.add_argument("--show-figures", action="store_true", help="print every cross-checked figure")
    args = ap.parse_args()

    cases = [c.strip() for c in args.cases.split(",") if c.strip()]
    unknown = [c for c in cases if c not in scenarios.CASES]
    if unknown:
        ap.error(f"unknown case(s) {unknown}; choose from {list(scenarios.CASES)}")
    binary = os.path.abspath(args.proctor)
    if not os.access(binary, os.X_OK):
        ap.error(f"{binary} is not an executable")
    warmup = args.warmup if args.warmup is not None else (3 if args.quick else 10)
    iterations = args.iterations if args.iterations is not None else (20 if args.quick else 100)
    calls = args.calls if args.calls is not None else (50 if args.quick else 200)

    results, failures = {}, []
    work_root = tempfile.mkdtemp(prefix="proctor-bench-")
    try:
        for case in cases:
            d, students = scenarios.ensure_case(case, args.seed, args.cache, log)
            files = {"models": [("teacher", os.path.join(d, "teacher.onnx"))]
                     + [(s, os.path.join(d, s + ".onnx")) for s in students],
                     "data": os.path.join(d, "eval_quick.npz" if args.quick else "eval.npz")}
            work = os.path.join(work_root, case)
            os.makedirs(work)
            log(f"[{case}] Proctor path ...")
            pr = proctor_path(binary, files, warmup, iterations, work)
            log(f"[{case}] notebook path, 1 thread ...")
            nb1 = notebook_path(files, 1, warmup, iterations, work)
            log(f"[{case}] notebook path, default threads ...")
            nb0 = notebook_path(files, 0, warmup, iterations, work)
            log(f"[{case}] per-call latency of the teacher in onnxruntime ...")
            pc = per_call(files["models"][0][1], files["data"], calls, 20, work)
            rows, fails = cross_check(case, nb1, pr, args.tolerance)
            failures += fails
            results[case] = {"samples": pr["report"]["dataset"]["samples"], "proctor": pr,
                             "notebook_1_thread": nb1, "notebook_default_threads": nb0, "per_call": pc,
                             "cross_check": [{"model": w, "figure": f, "notebook": a, "proctor": b, "rel": r}
                                             for w, f, a, b, r in rows]}
            report_case(case, results[case], args)
    finally:
        if args.keep:
            log(f"kept {work_root}")
        else:
            shutil.rmtree(work_root, ignore_errors=True)

    summary(results, warmup, iterations, calls, binary)
    if args.json:
        with open(args.json, "w") as f:
            json.dump({"settings": {"warmup": warmup, "iterations": iterations, "calls": calls,
                                    "batch_size": BATCH_SIZE, "temperature": TEMPERATURE, "alpha": ALPHA,
                                    "quick": args.quick, "seed": args.seed, "proctor": binary,
                                    "tolerance": args.tolerance},
                       "cases": results}, f, indent=1)
        log(f"wrote {args.json}")
    if failures:
        print("\n" + "!" * 72)
        print(f"MISMATCH between the notebook and Proctor (tolerance {args.tolerance:g} relative):")
        for f in failures:
            print("  " + f)
        print("!" * 72)
        sys.exit(1)
    print(f"\ncross-check: agreement and kl of every student match Proctor's to {args.tolerance:g} relative")


def report_case(case, r, args):
    pr, nb1, nb0 = r["proctor"], r["notebook_1_thread"], r["notebook_default_threads"]
    rep = pr["report"]
    tm = rep["timings"]
    stage_sum = sum(tm[k] for k in ("queued_s", "loading_s", "bulk_s", "timing_s", "scoring_s"))
    other = pr["wall_s"] - pr["upload_total_s"] - pr["create_s"] - stage_sum
    print(f"\n== {case}: {r['samples']} samples; engine {rep['environment']['engine']['name']} "
          f"{rep['environment']['engine']['version']}, threads {rep['environment']['threads']}")
    print(f"Proctor {pr['wall_s']:.2f} s: uploads {pr['upload_total_s']:.2f} ("
          + ", ".join(f"{k} {v:.2f}" for k, v in pr["uploads_s"].items())
          + f"), create {pr['create_s']:.2f}, queued {tm['queued_s']:.2f}, loading {tm['loading_s']:.2f}, "
          f"bulk {tm['bulk_s']:.2f}, timing {tm['timing_s']:.2f}, scoring {tm['scoring_s']:.2f}, "
          f"rest (process start, polling, report) {other:.2f}")
    for label, nb in (("notebook 1 thread", nb1), ("notebook default threads", nb0)):
        st = nb["stages_s"]
        print(f"{label} {nb['wall_s']:.2f} s: interpreter + imports {nb['wall_s'] - st['in_process'] + st['imports']:.2f} "
              f"(imports {st['imports']:.2f}: " + ", ".join(f"{k} {v:.2f}" for k, v in nb["imports_s"].items())
              + f"), loading {st['loading']:.2f}, bulk {st['bulk']:.2f}, "
              f"timing {st['timing']:.2f}, scoring {st['scoring']:.2f}")
    # Per-model latency: Proctor's report, its rounds recomputed, the notebook's rounds.
    names = {v: k for k, v in pr["ids"].items()}
    cols = [names[m] for m in pr["rounds"]["models"]]
    pr_lat = {"teacher": rep["teacher"]["latency"]} | {c["model"]["name"]: c["latency"] for c in rep["candidates"]}
    nb_lat = {"teacher": nb1["report"]["teacher"]["latency"]} | {
        c["model"].removesuffix(".onnx"): c["latency"] for c in nb1["report"]["candidates"]}
    print(f"{'model':18} {'MACs':>9} {'Proctor p50':>12} {'from rounds':>12} {'ORT p50':>9} {'Proctor sps':>12} {'ORT sps':>9}")
    for j, name in enumerate(cols):
        col = [row[j] for row in pr["rounds"]["rounds"]]
        again = notebook.nearest_rank(col, notebook.Fraction(1, 2))
        size = rep["teacher"]["size"] if name == "teacher" else next(
            c["size"] for c in rep["candidates"] if c["model"]["name"] == name)
        macs = f"{size['macs'] / 1e6:.1f}M" if size["macs"] is not None else "-"
        print(f"{name:18} {macs:>9} {pr_lat[name]['p50_ms']:10.3f}ms {again:10.3f}ms {nb_lat[name]['p50_ms']:7.3f}ms "
              f"{pr_lat[name]['throughput_sps']:12.0f} {nb_lat[name]['throughput_sps']:9.0f}")
    worst = {}
    for row in r["cross_check"]:
        worst[row["figure"]] = max(worst.get(row["figure"], 0.0), row["rel"])
        if args.show_figures:
            print(f"  {row['model']:16} {row['figure']:20} notebook {row['notebook']!s:>24} "
                  f"proctor {row['proctor']!s:>24} rel {row['rel']:.2e}")
    items = [f"{k}{'*' if k in REQUIRED else ''} {v:.1e}" for k, v in worst.items()]
    print("largest relative difference, notebook vs Proctor (* must be within --tolerance):")
    for i in range(0, len(items), 7):
        print("  " + ", ".join(items[i:i + 7]))


def summary(results, warmup, iterations, calls, binary):
    print(f"\n{'=' * 100}\nProctor ({binary}) against the notebook; warm-up {warmup}, rounds {iterations}, "
          f"batch {BATCH_SIZE}, per-call median of {calls}")
    print(f"{'case':8} {'N':>5} | {'Proctor s':>9} {'nb 1t s':>8} {'nb def s':>8} {'P/1t':>6} {'P/def':>6} | "
          f"{'teacher p50 Proctor':>19} {'ORT 1t':>8} {'ratio':>6}")
    for case, r in results.items():
        pw = r["proctor"]["wall_s"]
        n1, n0 = r["notebook_1_thread"]["wall_s"], r["notebook_default_threads"]["wall_s"]
        p50 = r["proctor"]["report"]["teacher"]["latency"]["p50_ms"]
        ort_ms = r["per_call"]["median_ms"]
        print(f"{case:8} {r['samples']:5} | {pw:9.2f} {n1:8.2f} {n0:8.2f} {pw / n1:6.2f} {pw / n0:6.2f} | "
              f"{p50:16.3f} ms {ort_ms:5.3f} ms {p50 / ort_ms:6.2f}")


if __name__ == "__main__":
    main()
