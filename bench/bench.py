"""Side-by-side benchmark of voxstrata against reference libraries (run by bench/run).

Every row runs voxstrata (release build) and the reference on the same files in the same
run, and records: reference time, our time, the ratio (reference time / our time, so > 1
means voxstrata is faster), a quality figure computed the same way for both, peak resident
memory of each process (GNU time's "Maximum resident set size"), and the target from the
issue with whether this run met it. Rows whose feature is not built on this branch say so.

    python bench/bench.py [--quick] [--only ROW ...]
"""
import argparse
import datetime
import json
import os
import platform
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import time

import gen_data

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
# cargo's output folder: CARGO_TARGET_DIR when set (bench/run builds there), else target/.
TARGET = os.environ.get("CARGO_TARGET_DIR") or os.path.join(ROOT, "target")
BIN = os.path.join(TARGET, "release", "voxstrata")
EXAMPLES = os.path.join(TARGET, "release", "examples")
PY = sys.executable
OUT = os.path.join(HERE, "out")
SEED = gen_data.SEED

# The reference side runs without these two (they may be set on this machine and force an
# older OpenBLAS kernel); the harness itself and voxstrata keep the environment as it is.
REF_ENV = {k: v for k, v in os.environ.items() if k not in ("OPENBLAS_CORETYPE", "OPENBLAS_L2_SIZE")}

MIB = 1024 * 1024
# Whole commands measured against a time target are stopped at STOP x the target, so one slow
# command cannot hold up the run; the row then says so.
STOP = 4


def log(msg):
    print(f"[bench {time.strftime('%H:%M:%S')}] {msg}", file=sys.stderr, flush=True)


class Run:
    """Outcome of one timed process."""

    def __init__(self, rc, wall, rss_kib, out, err):
        self.rc, self.wall, self.rss_kib, self.out, self.err = rc, wall, rss_kib, out, err

    @property
    def rss_mib(self):
        return None if self.rss_kib is None else self.rss_kib / 1024

    def json(self):
        for line in reversed(self.out.strip().splitlines()):
            line = line.strip()
            if line.startswith("{"):
                return json.loads(line)
        raise RuntimeError(f"no JSON in output:\n{self.out}\n{self.err[-2000:]}")

    def check(self, what):
        if self.rc != 0:
            raise RuntimeError(f"{what} failed with exit code {self.rc}:\n{self.err[-3000:]}")
        return self


class Stopped(Exception):
    """A command ran past its time limit and was stopped."""

    def __init__(self, what, limit):
        super().__init__(f"{what} stopped after {limit:.0f} s")
        self.limit = limit


def timed(cmd, env=None, timeout=1800):
    """Run cmd under /usr/bin/time -v; wall time, peak RSS, stdout, stderr. A command still
    running after `timeout` seconds is stopped (its whole process group) and raises Stopped."""
    with tempfile.NamedTemporaryFile("r", suffix=".time", delete=False) as tf:
        tpath = tf.name
    full = ["/usr/bin/time", "-v", "-o", tpath] + [str(c) for c in cmd]
    log("run: " + " ".join(str(c) for c in cmd))
    t = time.perf_counter()
    p = subprocess.Popen(full, cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                         text=True, start_new_session=True)
    try:
        out, err = p.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        os.killpg(p.pid, signal.SIGKILL)
        p.communicate()
        os.unlink(tpath)
        sub = next((str(c) for c in cmd[1:] if not str(c).startswith("-") and not str(c).isdigit()), "")
        raise Stopped(f"{os.path.basename(str(cmd[0]))} {sub}".strip(), timeout)
    wall = time.perf_counter() - t
    rss = None
    with open(tpath) as f:
        m = re.search(r"Maximum resident set size \(kbytes\): (\d+)", f.read())
        if m:
            rss = int(m.group(1))
    os.unlink(tpath)
    return Run(p.returncode, wall, rss, out, err)


def ref(*args, timeout=1800):
    return timed([PY, os.path.join(HERE, "ref.py")] + list(args), env=REF_ENV, timeout=timeout)


def example(name):
    return os.path.join(EXAMPLES, name)


def built(command):
    """A subcommand is built when the CLI no longer answers it with Error::NotYet."""
    with open(os.path.join(ROOT, "src", "cli.rs")) as f:
        return f'Error::NotYet("{command}")' not in f.read()


def fresh(path):
    shutil.rmtree(path, ignore_errors=True)
    os.makedirs(path)
    return path


def warm_cache(*paths):
    """Read files once so the timed reads come from the page cache."""
    for p in paths:
        with open(p, "rb") as f:
            while f.read(1 << 24):
                pass


def row(name, **kw):
    r = {
        "row": name,
        "reference": "",
        "ref_s": None,
        "ours_s": None,
        "quality": "",
        "ref_mem": None,
        "ours_mem": None,
        "target": "",
        "met": "",
        "notes": "",
    }
    r.update(kw)
    return r


def not_built(name, feature, target):
    return row(name, target=target, met="not measured", notes=f"not measured: {feature} not built")


# ---------------------------------------------------------------------------------------
# Rows


def rows_read(quick):
    d = gen_data.ensure("read", quick)
    files = sorted(os.path.join(d, f) for f in os.listdir(d) if f.endswith(".npy"))
    warm_cache(*files)
    samples = fresh(os.path.join(OUT, "read"))
    ours = timed([example("bench_read"), d, samples, 3, 997]).check("bench_read")
    got = [json.loads(l) for l in ours.out.splitlines() if l.startswith("{")]
    r = ref("read", d, samples, 997).check("ref read")
    refs = r.json()["layers"]
    blas = r.json()["blas"]
    out = []
    for o, f in zip(got, refs):
        is16 = o["dtype"] == "float16"
        gb = o["frames"] * o["dim"] * 4 / 1e9
        name = f"npy read, {o['dtype']} layer {o['frames']} x {o['dim']} ({o['file_bytes'] / 2**30:.2f} GiB on disk) -> f32"
        need = 0.5 if is16 else 1.0
        out.append(
            row(
                name,
                reference="numpy np.load" + (" + astype(float32)" if is16 else ""),
                ref_s=f["seconds"],
                ours_s=o["seconds"],
                quality=f"max abs diff vs numpy {f['max_abs_diff_vs_ours']:.3g} (every 997th row); "
                f"f32 output {f['out_gb_per_s']:.2f} GB/s (ref) vs {o['out_gb_per_s']:.2f} GB/s (ours)",
                ref_mem=r.rss_mib,
                ours_mem=ours.rss_mib,
                target=f">= {need} GB/s of f32 output",
                met=yes(o["out_gb_per_s"] >= need, f"{o['out_gb_per_s']:.2f} GB/s"),
                notes=f"best of 3 from the page cache; {gb:.2f} GB of f32 output; peak memory is the "
                "whole process (both layers read in turn)",
            )
        )
    return out, blas


def row_utts(quick):
    """Reading one layer from 10 000 per-utterance files against the same rows in one file,
    both by `bench_read` in the same run (best of 3 from the page cache)."""
    d = gen_data.ensure("utts", quick)
    n_utt = gen_data.SIZES["utts"][1 if quick else 0]["utterances"]
    secs = {}
    for layout in ("one", "folders", "stacks"):
        cap = os.path.join(d, layout)
        for root, _, files in os.walk(cap):
            warm_cache(*(os.path.join(root, f) for f in files if f.endswith(".npy")))
        run = timed([example("bench_read"), cap, fresh(os.path.join(OUT, "utts", layout)), 3, 997])
        run.check(f"bench_read {layout}")
        secs[layout] = [json.loads(l)["seconds"] for l in run.out.splitlines() if l.startswith("{")]
    out = []
    for layout, what in (("folders", "layer_XX/<utt>.npy"), ("stacks", "acts/<utt>.npy, 2 layers each")):
        for layer, (ref_s, ours_s) in enumerate(zip(secs["one"], secs[layout])):
            r = ours_s / ref_s
            out.append(
                row(
                    f"read one layer from {n_utt} per-utterance files ({what}), layer {layer}",
                    reference="voxstrata, the same rows in one file",
                    ref_s=ref_s,
                    ours_s=ours_s,
                    target="<= 2x one file's time",
                    met=yes(r <= 2.0, f"{r:.2f}x"),
                    notes="Capture::read_layer (decode + finiteness check), best of 3 from the page "
                    "cache; the reference column is our own one-file read, measured in the same run",
                )
            )
    return out


def row_inspect(quick):
    d = gen_data.ensure("big", quick)
    size = sum(os.path.getsize(os.path.join(d, f)) for f in os.listdir(d) if f.endswith(".npy"))
    ours = timed([BIN, "inspect", d, "--json"]).check("inspect")
    mib = ours.rss_mib
    return row(
        f"`inspect` peak memory on a {size / 2**30:.1f} GiB capture (4 sparse f32 layers)",
        reference="(none)",
        ours_s=ours.wall,
        ref_mem=None,
        ours_mem=mib,
        quality="exit 0, JSON written",
        target="< 300 MiB peak",
        met=yes(mib < 300, f"{mib:.0f} MiB"),
        notes="layers made with truncate (read back as zeros); wall time includes the sampled NaN scan",
    )


def sgemm_rate():
    r = ref("sgemm").check("sgemm").json()
    return r


def row_probe_fit(quick, gemm):
    d = gen_data.ensure("probe", quick)
    alpha, tol, max_iter = 1e-3, 1e-4, 1000
    fitdir = fresh(os.path.join(OUT, "probe_fit"))
    ours = timed([example("bench_probe_fit"), d, fitdir, alpha, tol, max_iter]).check("bench_probe_fit")
    o = ours.json()
    r = ref("probe", d, fitdir, alpha, tol, max_iter)
    r.check("ref probe")
    f = r.json()
    acc_diff = abs(o["test_accuracy"] - f["test_accuracy"]) * 100
    speed = f["seconds"] / o["seconds"]
    rel_obj = (f["objective_ours"] - f["objective"]) / abs(f["objective"])
    return row(
        f"one probe fit, {o['n']} x {o['d']} x {o['k']} classes, C = 1/(alpha n), alpha {alpha}, tol {tol}",
        reference=f"scikit-learn LogisticRegression(lbfgs), {f['dtype']} data",
        ref_s=f["seconds"],
        ours_s=o["seconds"],
        quality=f"held-out accuracy {f['test_accuracy']:.4f} (ref) vs {o['test_accuracy']:.4f} (ours), "
        f"diff {acc_diff:.2f} points; objective (float64, same formula) {f['objective']:.6g} vs "
        f"{f['objective_ours']:.6g} (ours {rel_obj:+.1e} relative); iterations {f['iterations']} vs {o['iterations']}",
        ref_mem=r.rss_mib,
        ours_mem=ours.rss_mib,
        target=">= 5x faster, accuracy within 0.5 points",
        met=yes(speed >= 5 and acc_diff <= 0.5, f"{speed:.1f}x, {acc_diff:.2f} points"),
        notes=f"ours {o['gflops']:.1f} GFLOP/s ({o['evaluations']} evaluations x 4 n d k flops) = "
        f"{100 * o['gflops'] / gemm['gflops']:.0f}% of numpy sgemm {gemm['gflops']:.0f} GFLOP/s measured in this run; "
        f"converged {o['converged']}; fit time only (standardisation and loading excluded on both sides)",
    )


def row_pca(quick):
    d = gen_data.ensure("probe", quick)
    x = os.path.join(d, "x_train.npy")
    k = 50
    ours = timed([example("bench_map"), "pca", x, k, SEED]).check("bench_map pca")
    o = ours.json()
    r = ref("pca", x, k, SEED).check("ref pca")
    f = r.json()
    import numpy as np

    ev_o, ev_r = np.array(o["explained_variance"]), np.array(f["explained_variance"])
    ex = np.array(f["exact_explained_variance"])
    rel = float(np.max(np.abs(ev_o - ev_r) / ev_r))
    err_o = float(np.max(np.abs(ev_o - ex) / ex))
    err_r = float(np.max(np.abs(ev_r - ex) / ex))
    speed = f["seconds"] / o["seconds"]
    n = gen_data.SIZES["probe"][1 if quick else 0]["train"]
    return row(
        f"PCA top-{k} of {n} x 768 (our auto solver: {o['solver']})",
        reference="scikit-learn PCA(svd_solver=randomized)",
        ref_s=f["seconds"],
        ours_s=o["seconds"],
        quality=f"explained variance: max relative difference ours vs ref {rel:.1e}; vs exact covariance "
        f"eigenvalues (float64) ref {err_r:.1e}, ours {err_o:.1e}; ratio sum {sum(f['explained_variance_ratio']):.4f} vs "
        f"{sum(o['explained_variance_ratio']):.4f}",
        ref_mem=r.rss_mib,
        ours_mem=ours.rss_mib,
        target="at least as fast, explained variance within 1e-3 relative (of the exact eigenvalues)",
        met=yes(speed >= 1.0 and err_o <= 1e-3, f"{speed:.2f}x, {err_o:.1e}"),
        notes="fit time only (loading excluded); data: the probe benchmark's raw training rows (power-law spectrum); "
        "ours picks the covariance solver for 50 of 768 dims (covariance from f32 products, subspace iteration to "
        "convergence), so its error is rounding; a randomized solver with k + 10 columns cannot reach 1e-3 on this "
        "slowly decaying spectrum (scikit-learn's error above)",
    )


def row_tsne(quick):
    d = gen_data.ensure("tsne", quick)
    x = os.path.join(d, "x.npy")
    size = gen_data.SIZES["tsne"][1 if quick else 0]
    early, iters = size["early"], size["iters"]
    outdir = fresh(os.path.join(OUT, "tsne"))
    emb, emb_ref = os.path.join(outdir, "ours.npy"), os.path.join(outdir, "ref.npy")
    ours = timed([example("bench_map"), "tsne", x, emb, early, iters, SEED]).check("bench_map tsne")
    o = ours.json()
    r = ref("tsne", x, emb_ref, 30, iters, early, SEED).check("ref tsne")
    f = r.json()
    tw_ref, tw_ours = ref("trust", x, emb_ref, emb).check("trustworthiness").json()["trustworthiness"]
    f["trustworthiness"], f["trustworthiness_ours"] = tw_ref, tw_ours
    speed = f["seconds"] / o["seconds"]
    gap = tw_ref - tw_ours
    n = size["n"]
    return row(
        f"t-SNE {n} x 50, perplexity 30, {early} + {iters} iterations",
        reference="openTSNE 1.0.4 (FFT gradient, PCA start, n_jobs=2)",
        ref_s=f["seconds"],
        ours_s=o["seconds"],
        quality=f"trustworthiness (k=10, scikit-learn) {f['trustworthiness']:.4f} (ref) vs "
        f"{f['trustworthiness_ours']:.4f} (ours); final KL {f['kl_divergence']:.3f} (ref) vs {o['kl_divergence']:.3f} (ours), our gradient {o['gradient']}",
        ref_mem=r.rss_mib,
        ours_mem=ours.rss_mib,
        target=">= 2x faster, trustworthiness no more than 0.01 below openTSNE's",
        met=yes(speed >= 2.0 and gap <= 0.01, f"{speed:.2f}x, {-gap:+.4f}"),
        notes="time covers the PCA start, affinities and optimisation on both sides (loading excluded); "
        "trustworthiness of both maps computed afterwards by one scikit-learn process",
    )


def row_cka(quick):
    import numpy as np

    d = gen_data.ensure("cka", quick)
    a, b = os.path.join(d, "a"), os.path.join(d, "b")
    size = gen_data.SIZES["cka"][1 if quick else 0]
    warm_cache(*[os.path.join(c, f) for c in (a, b) for f in os.listdir(c) if f.endswith(".npy")])
    ours = timed([example("bench_cka"), a, b]).check("bench_cka")
    o = ours.json()
    r = ref("cka", a, b).check("ref cka")
    f = r.json()
    diff = float(np.max(np.abs(np.array(o["cka"]) - np.array(f["cka"]))))
    ratio_t = o["seconds"] / f["seconds"]
    L = size["layers"]
    return row(
        f"linear CKA matrix {L} x {L}, {size['frames']} frames x {size['dim']} dims per layer, two captures",
        reference="numpy (OpenBLAS) feature-space formula, float32 products",
        ref_s=f["seconds"],
        ours_s=o["seconds"],
        quality=f"max abs difference of the CKA matrices {diff:.1e}",
        ref_mem=r.rss_mib,
        ours_mem=ours.rss_mib,
        target="our time <= 1.5x numpy's",
        met=yes(ratio_t <= 1.5, f"{ratio_t:.2f}x numpy's time"),
        notes="both times include reading the layers from the page cache and centring; "
        "numpy holds all layers of both captures in memory, ours reads them in turn",
    )


def demo_root(quick=False):
    """The shipped demo (demo_activations/) when present, else the one row 7 generated (always
    that one, made small, in quick mode)."""
    cands = [os.path.join(OUT, "demo")] if quick else [os.path.join(ROOT, "demo_activations"), os.path.join(OUT, "demo")]
    for d in cands:
        if os.path.isdir(os.path.join(d, "final")):
            return d
    return None


def demo_frame_count(cap):
    with open(os.path.join(cap, "frames.tsv")) as f:
        return sum(1 for _ in f) - 1


def row_demo_demo(quick):
    out = os.path.join(OUT, "demo")
    shutil.rmtree(out, ignore_errors=True)
    ours = timed([BIN, "--quiet", "demo", "--out", out] + (["--size", "small"] if quick else []), timeout=STOP * 120).check("demo")
    acc = [l for l in ours.out.splitlines() if "accuracy" in l]
    return row(
        "`demo` generation (synthesis, features, model training, two captures)" + (", small size" if quick else ""),
        reference="(none)",
        ours_s=ours.wall,
        ours_mem=ours.rss_mib,
        quality=acc[0] if acc else "exit 0",
        target="< 2 min (default size)",
        met=yes(ours.wall < 120, f"{ours.wall:.0f} s") if not quick else "(quick: small size)",
        notes="wall time of the command",
    )


def layer_f32_mib(cap):
    import numpy as np

    files = sorted(f for f in os.listdir(cap) if f.startswith("layer_") and f.endswith(".npy"))
    a = np.load(os.path.join(cap, files[0]), mmap_mode="r")
    return a.shape[0] * a.shape[-1] * 4 / MIB, len(files), a.shape, str(a.dtype)


def row_probe_full(quick):
    root = demo_root(quick)
    if root is None:
        return row("full `probe` on the demo's final capture", met="not measured",
                   notes="not measured: no demo capture (demo_activations/ absent and the demo row did not run)")
    cap = os.path.join(root, "final")
    mib, nl, shape, dtype = layer_f32_mib(cap)
    out = os.path.join(OUT, "probe_demo")
    ours = timed([BIN, "--threads", "2", "--quiet", "probe", cap, "--out", out, "--force"], timeout=STOP * 30).check("probe")
    with open(os.path.join(out, "probe.json")) as f:
        recs = json.load(f)["records"]
    # Categorical tasks score accuracy, continuous ones (kind "continuous") R².
    best = {}
    for r in recs:
        t, key = r["task"], "r2" if r.get("kind") == "continuous" else "accuracy"
        if t not in best or r[key] > best[t][0][key]:
            best[t] = (r, key)
    q = "; ".join(f"best {t}: layer {r['layer']} {'R²' if k == 'r2' else 'accuracy'} {r[k]:.3f}"
                  for t, (r, k) in sorted(best.items()))
    limit = 2 * mib + 200
    return row(
        f"full `probe` on {os.path.relpath(cap, ROOT)} ({nl} layers, {shape[0]} frames x {shape[-1]} dims, {dtype})",
        reference="(none)",
        ours_s=ours.wall,
        ours_mem=ours.rss_mib,
        quality=q,
        target=f"< 30 s on 2 cores; peak < 2 x {mib:.0f} + 200 = {limit:.0f} MiB",
        met=demo_met(quick, ours.wall < 30 and ours.rss_mib < limit, f"{ours.wall:.1f} s, {ours.rss_mib:.0f} MiB"),
        notes="every task (phone, speaker and the continuous columns), all layers, penalty search, control task and bootstrap (the command's defaults), --threads 2",
    )


def row_probe_stats(quick):
    """The demo probe with folds (auto), the type-level control and the MDL online code,
    against the same command with one split and no control, and with folds and control but
    no MDL, all in this run: what folds and MDL add."""
    root = demo_root(quick)
    cap = os.path.join(root, "final")
    walls = {}
    for key, extra in [("one split", ["--folds", "1", "--no-control"]),
                       ("folds + control", []),
                       ("folds + control + mdl", ["--mdl"])]:
        out = os.path.join(OUT, "probe_stats_" + key.replace(" ", "").replace("+", "_"))
        walls[key] = timed([BIN, "--threads", "2", "--quiet", "probe", cap, "--out", out, "--force"] + extra,
                           timeout=STOP * 60).check("probe")
    full = walls["folds + control + mdl"]
    with open(os.path.join(out, "probe.json")) as f:
        recs = json.load(f)["records"]
    folds = sorted({r["folds"] for r in recs})
    comp = {}
    for r in recs:
        if r.get("kind") == "continuous":
            continue  # the MDL code is for the classifier's tasks only
        comp[r["task"]] = max(comp.get(r["task"], 0.0), r.get("mdl_compression") or 0.0)
    base, mid = walls["one split"].wall, walls["folds + control"].wall
    return row(
        f"`probe --mdl` on {os.path.relpath(cap, ROOT)} (folds auto, control, MDL online code)",
        reference="same command, --folds 1 --no-control",
        ref_s=base,
        ours_s=full.wall,
        ours_mem=full.rss_mib,
        quality="folds per task " + "/".join(map(str, folds)) + "; best MDL compression "
        + ", ".join(f"{t} {c:.1f}" for t, c in sorted(comp.items())),
        target="< 60 s on 2 cores",
        met=demo_met(quick, full.wall < 60, f"{full.wall:.1f} s"),
        notes=(f"one split without control {base:.1f} s; folds + control {mid:.1f} s "
               f"(+{mid - base:.1f} s, {mid / base:.2f}x); + MDL {full.wall:.1f} s (+{full.wall - mid:.1f} s, "
               f"{full.wall / mid:.2f}x); --threads 2; ratio column = one-split time / this time"),
    )


def row_map_demo(quick):
    root = demo_root(quick)
    cap = os.path.join(root, "final")
    out = os.path.join(OUT, "map_demo")
    ours = timed([BIN, "--threads", "2", "--quiet", "map", cap, "--out", out, "--force"], timeout=STOP * 60).check("map")
    return row(
        f"`map` on {os.path.relpath(cap, ROOT)} (t-SNE, all layers, both colourings)",
        reference="(none)",
        ours_s=ours.wall,
        ours_mem=ours.rss_mib,
        quality="exit 0",
        target="< 60 s",
        met=demo_met(quick, ours.wall < 60, f"{ours.wall:.1f} s"),
        notes="wall time of the command, --threads 2",
    )


def row_report_demo(quick):
    root = demo_root(quick)
    out = os.path.join(OUT, "report_demo")
    shutil.rmtree(out, ignore_errors=True)
    shipped = root == os.path.join(ROOT, "demo_activations")
    caps = [] if shipped else [os.path.join(root, "early"), os.path.join(root, "final")]
    ours = timed([BIN, "--threads", "2", "--quiet", "report"] + caps + ["--out", out], timeout=STOP * 90).check("report")
    size_b = os.path.getsize(os.path.join(out, "index.html"))
    size = size_b / MIB
    ok = ours.wall < 90 and ours.rss_mib < 1024 and size_b < 15e6
    return row(
        "`report` on the " + ("shipped demo (no capture argument)" if shipped else "generated demo (early, final)"),
        reference="(none)",
        ours_s=ours.wall,
        ours_mem=ours.rss_mib,
        quality=f"index.html {size:.1f} MiB",
        target="< 90 s, peak < 1 GiB, page < 15 MB",
        met=demo_met(quick, ok, f"{ours.wall:.1f} s, {ours.rss_mib:.0f} MiB, {size_b / 1e6:.1f} MB"),
        notes="wall time of the command, --threads 2",
    )


def python_package():
    """Whether the voxstrata Python package is installed in the bench environment."""
    return subprocess.run([PY, "-c", "import voxstrata"], capture_output=True).returncode == 0


def row_python_probe(quick):
    """The Python package's probe on the demo's final capture, loaded with numpy, against the
    command on the same folder: best of 3 wall times of each whole process, run alternately."""
    root = demo_root(quick)
    cap = os.path.join(root, "final")
    out = os.path.join(OUT, "probe_python")
    cli, py = [], []
    for _ in range(3):
        cli.append(timed([BIN, "--threads", "2", "--quiet", "probe", cap, "--out", out, "--force"],
                         timeout=STOP * 30).check("probe"))
        py.append(timed([PY, os.path.join(HERE, "py_probe.py"), cap, "2"], timeout=STOP * 30).check("python probe"))
    best_cli = min(cli, key=lambda r: r.wall)
    best_py = min(py, key=lambda r: r.wall)
    got = best_py.json()
    with open(os.path.join(out, "probe.json")) as f:
        same = json.load(f)["records"] == got["records"]
    added = best_py.wall / best_cli.wall - 1
    return row(
        f"Python `voxstrata.probe` on {os.path.relpath(cap, ROOT)} loaded with numpy, vs `voxstrata probe`",
        reference="the command on the same folder",
        ref_s=best_cli.wall,
        ours_s=best_py.wall,
        ref_mem=best_cli.rss_mib,
        ours_mem=best_py.rss_mib,
        quality=("records identical" if same else "records DIFFER")
        + f"; Python side: import {got['import_s']:.2f} s, numpy load {got['load_s']:.2f} s, call {got['call_s']:.2f} s",
        target="adds < 5% to the command's time, same records",
        met=demo_met(quick, same and added < 0.05, f"{100 * added:+.1f}%"),
        notes="whole processes, best of 3 each, run alternately, --threads 2 / threads=2; the command also draws "
        "and writes its figures and files, the Python call returns records only",
    )


def row_report_capture(quick):
    """`report` on the full-size generated capture: wall time, peak memory (the binary's own
    VmHWM with VOXSTRATA_REPORT_PEAK_RSS=1) and the time of each step from run.json."""
    cap = gen_data.ensure("capture", quick)
    out = os.path.join(OUT, "report_capture")
    shutil.rmtree(out, ignore_errors=True)
    env = dict(os.environ, VOXSTRATA_REPORT_PEAK_RSS="1")
    ours = timed([BIN, "--threads", "2", "--quiet", "report", cap, "--out", out], env=env,
                 timeout=STOP * 120).check("report")
    m = re.search(r"peak RSS (\d+) kB", ours.err)
    peak = int(m.group(1)) / 1024 if m else ours.rss_mib
    with open(os.path.join(out, "run.json")) as f:
        run = json.load(f)
    steps = run["timings"]
    stages = ", ".join(f"{s['step']} {s['seconds']:.1f} s" for s in steps)
    smp = run["options"].get("sample") or {}
    if smp:
        stages += (f"; the report's sample (layers {smp['width']} wide): {smp['probe_frames']} "
                   f"training frames per probe fit (probe's default {smp['probe_default']}), "
                   f"{smp['map_points']} map points (map's default {smp['map_default']})")
    with open(os.path.join(cap, "manifest.json")) as f:
        p = json.load(f)
    shape = f"{p['layers']} x {p['frames']} x {p['dim']} float16"
    ok = ours.wall < 120 and peak < 1024
    return row(
        f"`report` on a generated capture, {shape}",
        reference="(none)",
        ours_s=ours.wall,
        ours_mem=peak,
        quality=f"time per step (run.json): {stages}",
        target="< 120 s, peak < 1 GiB on 2 cores",
        met=(f"(quick: {shape})" if quick else yes(ok, f"{ours.wall:.0f} s, {peak:.0f} MiB")),
        notes="wall time of the command, --threads 2; peak = VmHWM the binary reports",
    )


def row_probe_pipeline(quick):
    """The whole probe of one task on one layer of the full-size capture (penalty search,
    refit, control, test predictions, bootstrap) against scikit-learn doing the same steps."""
    cap = gen_data.ensure("capture", quick)
    layer = 6 if not quick else 0
    out = fresh(os.path.join(OUT, "probe_pipeline"))
    warm_cache(os.path.join(cap, f"layer_{layer:02d}.npy"))
    ours = timed([BIN, "--threads", "2", "--quiet", "--layers", layer, "probe", cap, "--task",
                  "phone", "--out", out, "--force"]).check("probe pipeline")
    with open(os.path.join(out, "probe.json")) as f:
        rec = json.load(f)["records"][0]
    r = ref("pipeline", cap, f"layer_{layer:02d}.npy", "phone", 20000, 50000)
    r.check("ref pipeline")
    f = r.json()
    speed = r.wall / ours.wall
    acc_diff = abs(rec["accuracy"] - f["accuracy"]) * 100
    return row(
        f"probe pipeline, phone on layer {layer} of the full-size capture ({rec['n_train']} training "
        f"x 768 dims x 40 classes, {rec['n_test']} test): penalty search, refit, control, bootstrap",
        reference="scikit-learn LogisticRegression(lbfgs, warm_start), the same steps (bench/ref.py pipeline)",
        ref_s=r.wall,
        ours_s=ours.wall,
        quality=f"held-out accuracy {f['accuracy']:.4f} (ref) vs {rec['accuracy']:.4f} (ours), diff "
        f"{acc_diff:.2f} points (different random split and caps of the same sizes); control "
        f"{f['control_accuracy']:.4f} vs {rec['control_accuracy']:.4f}; chosen alpha {f['alpha']} vs "
        f"C {rec['c']:.3g} (= alpha {1 / (rec['c'] * rec['n_train']):.3g})",
        ref_mem=r.rss_mib,
        ours_mem=ours.rss_mib,
        target=">= 5x faster (issue 17), accuracy within 1 point",
        met=yes(speed >= 5 and acc_diff <= 1.0, f"{speed:.1f}x, {acc_diff:.2f} points"),
        notes="wall time of each whole process, reading the layer included; --threads 2 and "
        "OpenBLAS's 2 threads",
    )


STOPPED_NAMES = {
    "row_report_capture": ("`report` on a generated full-size capture", "< 120 s, peak < 1 GiB on 2 cores"),
    "row_demo_demo": ("`demo` generation", "< 2 min"),
    "row_probe_full": ("full `probe` on the demo's final capture", "< 30 s on 2 cores"),
    "row_probe_stats": ("`probe --mdl` on the demo's final capture", "< 60 s on 2 cores"),
    "row_map_demo": ("`map` on the demo's final capture", "< 60 s"),
    "row_report_demo": ("`report` on the demo", "< 90 s, peak < 1 GiB, page < 15 MB"),
    "row_python_probe": ("Python `voxstrata.probe` vs `voxstrata probe`", "adds < 5%"),
}


def demo_met(quick, ok, figure):
    return f"(quick: small demo, {figure})" if quick else yes(ok, figure)


def yes(ok, figure):
    return ("yes" if ok else "NO") + f" ({figure})"


# ---------------------------------------------------------------------------------------
# Report


def fmt_s(v):
    return "—" if v is None else (f"{v:.3f}" if v < 10 else f"{v:.1f}")


def fmt_mem(v):
    return "—" if v is None else f"{v:.0f}"


def ratio(r):
    if r["ref_s"] is None or r["ours_s"] is None or r["ours_s"] <= 0:
        return "—"
    return f"{r['ref_s'] / r['ours_s']:.2f}x"


def machine():
    model = "unknown"
    try:
        for line in subprocess.run(["lscpu"], capture_output=True, text=True).stdout.splitlines():
            if line.startswith("Model name:"):
                model = line.split(":", 1)[1].strip()
    except OSError:
        pass
    rustc = subprocess.run(["rustc", "--version"], capture_output=True, text=True).stdout.strip()
    git = subprocess.run(["git", "log", "-1", "--format=%h %s"], cwd=ROOT, capture_output=True, text=True).stdout.strip()
    return {
        "nproc": os.cpu_count(),
        "cpu": model,
        "date": datetime.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z"),
        "python": platform.python_version(),
        "rustc": rustc,
        "commit": git,
    }


def uptime():
    return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()


def render(rows, info, quick, load_before, load_after, blas, elapsed, versions):
    lines = []
    lines.append(f"# Benchmark results{' (quick sizes)' if quick else ''}\n")
    lines.append(
        f"Machine: {info['nproc']} cores (`nproc`), CPU {info['cpu']}; {info['date']}; "
        f"{info['rustc']}; Python {info['python']}; commit `{info['commit']}`.\n"
    )
    lines.append(f"Load before: `{load_before}`  \nLoad after: `{load_after}`\n")
    lines.append(
        "Reference BLAS (threadpoolctl, reference side run with OPENBLAS_CORETYPE and "
        f"OPENBLAS_L2_SIZE unset): {json.dumps(blas)}\n"
    )
    lines.append(f"Reference packages: {versions}\n")
    lines.append(
        f"Command: `bench/run{' --quick' if quick else ''}` ({elapsed / 60:.1f} min). Ratio = "
        "reference time / our time (above 1: voxstrata faster). Memory = peak resident set "
        "of the process in MiB (GNU time -v).\n"
    )
    lines.append("| # | Row | Reference | Ref s | Ours s | Ratio | Quality (same measure both sides) | Ref MiB | Ours MiB | Target | Met |")
    lines.append("|---|-----|-----------|------:|-------:|------:|-----------------------------------|--------:|---------:|--------|-----|")
    for i, r in enumerate(rows, 1):
        q = r["quality"] or r["notes"]
        lines.append(
            f"| {r['id']} | {r['row']} | {r['reference'] or '—'} | {fmt_s(r['ref_s'])} | {fmt_s(r['ours_s'])} | "
            f"{ratio(r)} | {q} | {fmt_mem(r['ref_mem'])} | {fmt_mem(r['ours_mem'])} | {r['target']} | {r['met']} |"
        )
    lines.append("\n## Notes per row\n")
    for r in rows:
        if r["notes"]:
            lines.append(f"- {r['id']} {r['row']}: {r['notes']}")
    return "\n".join(lines) + "\n"


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--only", nargs="*", help="row numbers to run (1..11)")
    a = ap.parse_args()
    only = set(a.only or [])
    want = lambda n: not only or str(n) in only  # noqa: E731
    os.makedirs(OUT, exist_ok=True)
    t0 = time.perf_counter()
    load_before = uptime()
    info = machine()
    versions = subprocess.run(
        [PY, "-c", "import numpy, scipy, sklearn, openTSNE, threadpoolctl; print(f'numpy {numpy.__version__}, scipy {scipy.__version__}, scikit-learn {sklearn.__version__}, openTSNE {openTSNE.__version__}, threadpoolctl {threadpoolctl.__version__}')"],
        capture_output=True, text=True, env=REF_ENV,
    ).stdout.strip()
    rows = []
    blas = None

    def add(num, items):
        for r in items if isinstance(items, list) else [items]:
            r["id"] = num
            rows.append(r)

    def attempt(num, fn, *args):
        try:
            return fn(*args)
        except Stopped as e:
            log(f"row {num}: {e}")
            name, target = STOPPED_NAMES.get(fn.__name__, (fn.__name__, ""))
            return row(name, target=target, met=f"NO (stopped after {e.limit:.0f} s)",
                       notes=f"{e}: the command was still running at {STOP}x its time target and was stopped")
        except Exception as e:  # a failed row is reported, never silently dropped
            log(f"row {num} failed: {e}")
            return row(f"row {num}", met="FAILED", notes=f"failed: {str(e).strip().splitlines()[0][:300]}")

    # The demo is generated first (row 7) so rows 4 and 7 can use it when none is shipped.
    if want(7) or want(4):
        if built("demo"):
            add(7, attempt(7, row_demo_demo, a.quick))
        elif want(7):
            add(7, not_built("`demo` generation", "demo", "< 2 min"))
    gemm = None
    if want(3):
        gemm = sgemm_rate()
        blas = gemm["blas"]
    if want(1):
        res = attempt(1, rows_read, a.quick)
        if isinstance(res, tuple):
            items, blas = res
            add(1, items)
        else:
            add(1, res)
        add(1, attempt(1, row_inspect, a.quick))
    if want(2):
        add(2, not_built("PCA top-50 of 50 000 x 768", "map (PCA)", ">= scikit-learn randomized PCA speed, explained variance within 1e-3 relative")
            if not built("map") else attempt(2, row_pca, a.quick))
    if want(3):
        add(3, attempt(3, row_probe_fit, a.quick, gemm))
    if want(4):
        add(4, not_built("full `probe` on the demo's final capture", "demo", "< 30 s on 2 cores, peak < 2x one layer f32 + 200 MiB")
            if demo_root(a.quick) is None else attempt(4, row_probe_full, a.quick))
    if want(4) and demo_root(a.quick) is not None:
        add(4, attempt(4, row_probe_stats, a.quick))
    if want(5):
        add(5, not_built("t-SNE 10 000 x 50", "map (t-SNE)", ">= 2x faster than openTSNE, trustworthiness >= openTSNE's - 0.01")
            if not built("map") else attempt(5, row_tsne, a.quick))
    if want(6):
        add(6, not_built("CKA matrix 13 x 13 on 20 000 x 768", "compare", "<= 1.5x numpy's time")
            if not built("compare") else attempt(6, row_cka, a.quick))
    if want(7):
        for feat, name, target in [
            ("map", "`map` on the demo", "< 60 s"),
            ("report", "`report` on the shipped demo", "< 90 s, peak < 1 GiB, page < 15 MB"),
        ]:
            if built(feat) and demo_root(a.quick) is not None:
                add(7, attempt(7, globals()[f"row_{feat}_demo"], a.quick))
            else:
                add(7, not_built(name, feat if not built(feat) else "demo", target))
    if want(8):
        name, target = "Python `voxstrata.probe` vs `voxstrata probe` on the demo", "adds < 5% to the command's time"
        if demo_root(a.quick) is None:
            add(8, not_built(name, "demo", target))
        elif not python_package():
            add(8, row(name, target=target, met="not measured",
                       notes="not measured: the Python package is not installed in bench/.venv"))
        else:
            add(8, attempt(8, row_python_probe, a.quick))
    if want(9):
        add(9, attempt(9, row_utts, a.quick))
    if want(10):
        add(10, attempt(10, row_report_capture, a.quick))
    if want(11):
        add(11, attempt(11, row_probe_pipeline, a.quick))
    rows.sort(key=lambda r: r["id"])
    load_after = uptime()
    elapsed = time.perf_counter() - t0
    text = render(rows, info, a.quick, load_before, load_after, blas, elapsed, versions)
    print(text)
    dest = os.path.join(OUT, "results-quick.md") if a.quick else os.path.join(HERE, "results.md")
    if only and not a.quick:
        dest = os.path.join(OUT, "results-partial.md")
    with open(dest, "w") as f:
        f.write(text)
    log(f"wrote {os.path.relpath(dest, ROOT)} in {elapsed:.0f} s")


if __name__ == "__main__":
    main()
