"""Reference side of the benchmark: numpy, scikit-learn and openTSNE doing the same jobs as
voxstrata on the same files. Each subcommand prints one JSON line. bench/bench.py runs this
with OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE removed from the environment, so OpenBLAS picks
its own kernel for the CPU; the kernel it used is reported (threadpoolctl).

    python bench/ref.py sgemm
    python bench/ref.py read CAPTURE OUR_SAMPLES_DIR EVERY
    python bench/ref.py probe DATA_DIR OUR_FIT_DIR alpha tol max_iter
    python bench/ref.py pca X.npy n_components seed
    python bench/ref.py tsne X.npy REF_EMBEDDING_OUT.npy perplexity n_iter exaggeration_iter seed
    python bench/ref.py trust X.npy MAP.npy ...
    python bench/ref.py cka CAPTURE_A CAPTURE_B
    python bench/ref.py pipeline CAPTURE LAYER_FILE TASK max_train max_test
"""
import glob
import json
import os
import sys
import time

import numpy as np
import threadpoolctl


def blas_info():
    info = [i for i in threadpoolctl.threadpool_info() if i.get("user_api") == "blas"]
    return [
        {k: i.get(k) for k in ("internal_api", "version", "architecture", "num_threads", "threading_layer")}
        for i in info
    ]


def emit(d):
    d["blas"] = blas_info()
    print(json.dumps(d))


def sgemm():
    """Best-of-5 f32 matrix multiply rate (3072^3), the machine's practical ceiling."""
    n = 3072
    rng = np.random.default_rng(0)
    a = rng.standard_normal((n, n), dtype=np.float32)
    b = rng.standard_normal((n, n), dtype=np.float32)
    a @ b
    best = np.inf
    for _ in range(5):
        t = time.perf_counter()
        a @ b
        best = min(best, time.perf_counter() - t)
    emit({"gflops": 2 * n**3 / best / 1e9, "seconds": best, "n": n})


def read(capture, samples, every, repeats=3):
    out = []
    for path in sorted(glob.glob(os.path.join(capture, "layer_*.npy"))):
        name = os.path.basename(path)[:-4]
        np.load(path)  # into the page cache
        best = np.inf
        for _ in range(repeats):
            t = time.perf_counter()
            a = np.load(path)
            if a.dtype != np.float32:
                a = a.astype(np.float32)
            best = min(best, time.perf_counter() - t)
        ours = os.path.join(samples, f"{name}_rows.npy")
        diff = None
        if os.path.exists(ours):
            s = np.load(ours)
            ref = a[::every]
            if ref.shape == s.shape:
                diff = float(np.max(np.abs(ref.astype(np.float64) - s.astype(np.float64))))
        out.append(
            {
                "layer": name,
                "dtype": str(np.load(path, mmap_mode="r").dtype),
                "shape": list(a.shape),
                "seconds": best,
                "out_gb_per_s": a.nbytes / best / 1e9,
                "max_abs_diff_vs_ours": diff,
            }
        )
        del a
    emit({"layers": out})


def _objective(X, y, coef, intercept, C):
    """Σ cross-entropy + ||W||²/(2C), in float64; coef is classes x features."""
    z = X.astype(np.float64) @ coef.T.astype(np.float64) + intercept.astype(np.float64)
    z -= z.max(axis=1, keepdims=True)
    lse = np.log(np.exp(z).sum(axis=1))
    ce = (lse - z[np.arange(len(y)), y]).sum()
    return float(ce + (coef.astype(np.float64) ** 2).sum() / (2 * C))


def probe(data, ours, alpha, tol, max_iter):
    from sklearn.linear_model import LogisticRegression
    from sklearn.preprocessing import StandardScaler

    X = np.load(os.path.join(data, "x_train.npy"))
    y = np.load(os.path.join(data, "y_train.npy"))
    Xt = np.load(os.path.join(data, "x_test.npy"))
    yt = np.load(os.path.join(data, "y_test.npy"))
    sc = StandardScaler().fit(X.astype(np.float64))
    X = sc.transform(X.astype(np.float64)).astype(np.float32)
    Xt = sc.transform(Xt.astype(np.float64)).astype(np.float32)
    n = len(y)
    C = 1.0 / (alpha * n)
    clf = LogisticRegression(C=C, solver="lbfgs", tol=tol, max_iter=max_iter)
    t = time.perf_counter()
    clf.fit(X, y)
    secs = time.perf_counter() - t
    acc = float((clf.predict(Xt) == yt).mean())
    res = {
        "seconds": secs,
        "iterations": int(np.max(clf.n_iter_)),
        "test_accuracy": acc,
        "dtype": str(clf.coef_.dtype),
        "objective": _objective(X, y, clf.coef_, clf.intercept_, C),
        "C": C,
    }
    w = os.path.join(ours, "coef.npy")
    if os.path.exists(w):
        coef = np.load(w).T  # ours is features x classes
        b = np.load(os.path.join(ours, "intercept.npy")).ravel()
        res["objective_ours"] = _objective(X, y, coef, b, C)
        res["test_accuracy_ours_recomputed"] = float(
            ((Xt.astype(np.float64) @ coef.T + b).argmax(axis=1) == yt).mean()
        )
    emit(res)


def pca(x_path, k, seed):
    from sklearn.decomposition import PCA

    X = np.load(x_path)
    t = time.perf_counter()
    p = PCA(n_components=k, svd_solver="randomized", random_state=seed).fit(X)
    secs = time.perf_counter() - t
    # Exact eigenvalues of the covariance (float64), the truth both sides are measured against.
    xc = X.astype(np.float64)
    xc -= xc.mean(axis=0)
    exact = np.linalg.eigvalsh(xc.T @ xc / (len(X) - 1))[::-1][:k]
    emit(
        {
            "seconds": secs,
            "explained_variance": p.explained_variance_.tolist(),
            "explained_variance_ratio": p.explained_variance_ratio_.tolist(),
            "exact_explained_variance": exact.tolist(),
            "dtype": str(X.dtype),
        }
    )


def tsne(x_path, ref_out, perplexity, n_iter, ex_iter, seed):
    from openTSNE import TSNE

    X = np.load(x_path)
    t = time.perf_counter()
    emb = TSNE(
        n_components=2,
        perplexity=perplexity,
        early_exaggeration_iter=ex_iter,
        n_iter=n_iter,
        n_jobs=2,
        random_state=seed,
        negative_gradient_method="fft",
        initialization="pca",
    ).fit(X)
    secs = time.perf_counter() - t
    np.save(ref_out, np.asarray(emb, dtype=np.float32))
    emit({"seconds": secs, "kl_divergence": float(emb.kl_divergence)})


def trust(x_path, *maps):
    """Trustworthiness (Venna & Kaski 2001, k=10) of each map, by scikit-learn."""
    from sklearn.manifold import trustworthiness

    X = np.load(x_path)
    emit({"trustworthiness": [float(trustworthiness(X, np.load(m), n_neighbors=10)) for m in maps]})


def _layers(capture):
    return sorted(glob.glob(os.path.join(capture, "layer_*.npy")))


def cka(cap_a, cap_b):
    """Linear CKA (Kornblith et al. 2019) in feature space on centred data:
    CKA(X, Y) = ||YᵀX||²_F / (||XᵀX||_F ||YᵀY||_F), every layer of A against every layer of B.
    Times reading the layers (from the page cache) and the products, as the command does."""
    t = time.perf_counter()
    fa, fb = _layers(cap_a), _layers(cap_b)
    A = []
    for p in fa:
        x = np.load(p).astype(np.float32)
        x -= x.mean(axis=0, dtype=np.float64).astype(np.float32)
        A.append(x)
    same = os.path.realpath(cap_a) == os.path.realpath(cap_b)
    B = A if same else []
    if not same:
        for p in fb:
            x = np.load(p).astype(np.float32)
            x -= x.mean(axis=0, dtype=np.float64).astype(np.float32)
            B.append(x)
    na = [np.linalg.norm(x.T @ x) for x in A]
    nb = na if same else [np.linalg.norm(x.T @ x) for x in B]
    m = np.zeros((len(A), len(B)))
    for i, x in enumerate(A):
        for j, z in enumerate(B):
            if same and j < i:
                m[i, j] = m[j, i]
                continue
            m[i, j] = np.linalg.norm(z.T @ x) ** 2 / (na[i] * nb[j])
    secs = time.perf_counter() - t
    emit({"seconds": secs, "cka": m.tolist(), "symmetric_shortcut": same})


def _stratified(idx, y, cap, rng):
    """At most `cap` of the indices `idx`, every class keeping its share (at least one)."""
    if cap <= 0 or len(idx) <= cap:
        return np.sort(idx)
    share = cap / len(idx)
    out = []
    for c in np.unique(y[idx]):
        m = idx[y[idx] == c]
        k = max(1, int(round(share * len(m))))
        out.append(rng.permutation(m)[:k])
    return np.sort(np.concatenate(out))


def pipeline(capture, layer_file, task, max_train, max_test):
    """The work `voxstrata probe --task TASK` does for one layer, with scikit-learn: a
    speaker-disjoint split (a quarter of the speakers tested), class-stratified caps on both
    sides, standardisation on the training side, the penalty chosen from alpha = 1e-1..1e-4
    (C = 1/(alpha n)) on an inner split holding out a fifth of the training speakers (strongest
    first, each fit warm-started from the previous one), a refit on the whole training side
    warm-started from the chosen fit, a control task (each phone in context, i.e. the phone of
    the frame's run with the phones of the runs before and after it, gets one label drawn from
    the class frequencies) fitted at the chosen penalty, test predictions of both, and a
    1 000-resample bootstrap of accuracy over test speakers. tol 1e-4, max_iter 100 as ours.
    Timed from reading the layer file to the interval."""
    import csv

    from sklearn.linear_model import LogisticRegression
    from sklearn.preprocessing import StandardScaler

    t0 = time.perf_counter()
    with open(os.path.join(capture, "frames.tsv"), encoding="utf-8", newline="") as f:
        rows = list(csv.reader(f, delimiter="\t"))
    head, rows = rows[0], rows[1:]
    col = {h: i for i, h in enumerate(head)}
    utt = np.array([r[col["utterance"]] for r in rows])
    spk_names, spk = np.unique([r[col["speaker"]] for r in rows], return_inverse=True)
    classes, y = np.unique([r[col[task]] for r in rows], return_inverse=True)
    ph = y if task == "phone" else np.unique([r[col["phone"]] for r in rows], return_inverse=True)[1]
    # control types: phone of the run with the runs before and after it, within the utterance
    start = np.r_[True, (ph[1:] != ph[:-1]) | (utt[1:] != utt[:-1])]
    run_id = np.cumsum(start) - 1
    run_ph = ph[start]
    run_utt = utt[start]
    prev = np.r_[-1, run_ph[:-1]]
    prev[np.r_[True, run_utt[1:] != run_utt[:-1]]] = -1
    nxt = np.r_[run_ph[1:], -1]
    nxt[np.r_[run_utt[1:] != run_utt[:-1], True]] = -1
    _, type_of_run = np.unique(np.stack([prev, run_ph, nxt], axis=1), axis=0, return_inverse=True)
    types = type_of_run.ravel()[run_id]
    rng = np.random.default_rng(0)
    test_spk = rng.permutation(len(spk_names))[: max(1, len(spk_names) // 4)]
    is_test = np.isin(spk, test_spk)
    tr = _stratified(np.flatnonzero(~is_test), y, max_train, rng)
    te = _stratified(np.flatnonzero(is_test), y, max_test, rng)
    layer = np.load(os.path.join(capture, layer_file), mmap_mode="r")
    X = np.asarray(layer[tr], dtype=np.float32)
    Xt = np.asarray(layer[te], dtype=np.float32)
    sc = StandardScaler().fit(X)
    X = sc.transform(X).astype(np.float32)
    Xt = sc.transform(Xt).astype(np.float32)
    ytr, yte = y[tr], y[te]
    # inner split: a fifth of the training speakers hold out for validation
    tr_spk = np.unique(spk[tr])
    val_spk = rng.permutation(tr_spk)[: max(1, len(tr_spk) // 5)]
    iv = np.isin(spk[tr], val_spk)
    alphas = [1e-1, 1e-2, 1e-3, 1e-4]
    clf = LogisticRegression(solver="lbfgs", tol=1e-4, max_iter=100, warm_start=True)
    best = (-1.0, None, None)
    for a in alphas:
        clf.set_params(C=1.0 / (a * int((~iv).sum())))
        clf.fit(X[~iv], ytr[~iv])
        acc = float((clf.predict(X[iv]) == ytr[iv]).mean())
        if acc > best[0]:
            best = (acc, a, (clf.coef_.copy(), clf.intercept_.copy()))
    C = 1.0 / (best[1] * len(tr))
    final = LogisticRegression(C=C, solver="lbfgs", tol=1e-4, max_iter=100, warm_start=True)
    final.coef_, final.intercept_ = best[2]
    final.fit(X, ytr)
    pred = final.predict(Xt)
    # control task at the chosen penalty
    freq = np.bincount(ytr, minlength=len(classes)) / len(ytr)
    ctl_label = rng.choice(len(classes), size=types.max() + 1, p=freq)
    ctl = LogisticRegression(C=C, solver="lbfgs", tol=1e-4, max_iter=100)
    ctl.fit(X, ctl_label[types[tr]])
    ctl_acc = float((ctl.predict(Xt) == ctl_label[types[te]]).mean())
    # cluster bootstrap over test speakers
    ok = (pred == yte).astype(np.float64)
    ts = spk[te]
    ids = np.unique(ts)
    pos = np.searchsorted(ids, ts)
    sums = np.bincount(pos, weights=ok, minlength=len(ids))
    cnts = np.bincount(pos, minlength=len(ids)).astype(np.float64)
    draws = rng.integers(0, len(ids), size=(1000, len(ids)))
    boot = sums[draws].sum(axis=1) / cnts[draws].sum(axis=1)
    lo, hi = np.percentile(boot, [2.5, 97.5])
    secs = time.perf_counter() - t0
    emit({
        "seconds": secs,
        "accuracy": float(ok.mean()),
        "ci": [float(lo), float(hi)],
        "control_accuracy": ctl_acc,
        "alpha": best[1],
        "n_train": int(len(tr)),
        "n_test": int(len(te)),
    })


if __name__ == "__main__":
    cmd, args = sys.argv[1], sys.argv[2:]
    if cmd == "sgemm":
        sgemm()
    elif cmd == "read":
        read(args[0], args[1], int(args[2]))
    elif cmd == "probe":
        probe(args[0], args[1], float(args[2]), float(args[3]), int(args[4]))
    elif cmd == "pca":
        pca(args[0], int(args[1]), int(args[2]))
    elif cmd == "tsne":
        tsne(args[0], args[1], float(args[2]), int(args[3]), int(args[4]), int(args[5]))
    elif cmd == "trust":
        trust(args[0], *args[1:])
    elif cmd == "cka":
        cka(args[0], args[1])
    elif cmd == "pipeline":
        pipeline(args[0], args[1], args[2], int(args[3]), int(args[4]))
    else:
        sys.exit(f"unknown command {cmd}")
