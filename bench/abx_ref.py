"""Brute-force numpy reference of voxstrata's phone ABX (src/analysis/abx/), for timing
against `examples/bench_abx.rs` on the same subset of a capture.

Same definition as tests/reference/make_abx.py (items = label runs in an utterance, context
= neighbouring items, angular frame distance, DTW with ties diagonal > up > left and the
cost divided by the path cells, averages over triplets, contexts, speakers or speaker
pairs, label pairs), float64, every item (no per-cell sampling, so run the Rust side with
`--max-items 0`). Each needed distance is computed once (cached), DTW as Python loops over
a numpy cost matrix.

Usage: python bench/abx_ref.py CAPTURE [--speakers K]   (first K speakers, as bench_abx)
Prints one JSON line: seconds per layer, total, and the records.
"""
import glob
import itertools
import json
import os
import re
import sys
import time

import numpy as np


def read_capture(path, k):
    with open(os.path.join(path, "frames.tsv")) as f:
        header = f.readline().rstrip("\n").split("\t")
        rows = [line.rstrip("\n").split("\t") for line in f if line.strip()]
    ui, si, pi = header.index("utterance"), header.index("speaker"), header.index("phone")
    speakers = list(dict.fromkeys(r[si] for r in rows))[: k or None]
    keep = set(speakers)
    items, prev = [], None
    for f, r in enumerate(rows):
        u, s, p = r[ui], r[si], r[pi]
        if s not in keep or not p:
            prev = None
            continue
        if prev is not None and prev[0] == u and prev[1] == p:
            items[-1]["frames"].append(f)
        else:
            items.append({"utt": u, "spk": s, "label": p, "frames": [f]})
        prev = (u, p)
    by_utt = {}
    for it in items:
        by_utt.setdefault(it["utt"], []).append(it)
    for its in by_utt.values():
        for j, it in enumerate(its):
            it["ctx"] = (its[j - 1]["label"] if j > 0 else "#", its[j + 1]["label"] if j + 1 < len(its) else "#")
    layers = sorted(
        (int(re.search(r"(\d+)\.npy$", p).group(1)), p) for p in glob.glob(os.path.join(path, "layer_*.npy"))
    )
    return items, speakers, layers


def frame_costs(a, b):
    na, nb = np.linalg.norm(a, axis=1), np.linalg.norm(b, axis=1)
    cos = (a @ b.T) / np.outer(np.where(na > 0, na, 1), np.where(nb > 0, nb, 1))
    c = np.arccos(np.clip(cos, -1, 1)) / np.pi
    c[na == 0, :] = 0.5
    c[:, nb == 0] = 0.5
    return c


def dtw(c):
    m, k = c.shape
    d = np.empty((m, k))
    n = np.empty((m, k), dtype=int)
    for i in range(m):
        for j in range(k):
            if i == 0 and j == 0:
                d[i, j], n[i, j] = c[i, j], 1
                continue
            cand = []
            if i > 0 and j > 0:
                cand.append((d[i - 1, j - 1], n[i - 1, j - 1]))
            if i > 0:
                cand.append((d[i - 1, j], n[i - 1, j]))
            if j > 0:
                cand.append((d[i, j - 1], n[i, j - 1]))
            best = min(v for v, _ in cand)
            cells = next(l for v, l in cand if v == best)  # first: diagonal, up, left
            d[i, j], n[i, j] = c[i, j] + best, cells + 1
    return d[-1, -1] / n[-1, -1]


def abx(x, items, speakers, layer):
    cache = {}

    def d(p, q):
        key = (id(p), id(q))
        if key not in cache:
            cache[key] = dtw(frame_costs(x[p["frames"]], x[q["frames"]]))
        return cache[key]

    cells = {}
    for it in items:
        cells.setdefault((it["label"], it["ctx"], it["spk"]), []).append(it)
    labels = list(dict.fromkeys(it["label"] for it in items))
    contexts = sorted({it["ctx"] for it in items})
    out = []
    for cond in ["within", "across"]:
        pair_scores, n_trip = [], 0
        for a, b in itertools.permutations(labels, 2):
            spk_pairs = [(s, s) for s in speakers] if cond == "within" else list(itertools.permutations(speakers, 2))
            spk_scores = []
            for s, t in spk_pairs:
                ctx_scores = []
                for c in contexts:
                    A, B, X = cells.get((a, c, s), []), cells.get((b, c, s), []), cells.get((a, c, t), [])
                    tot = cnt = 0
                    for ia in A:
                        for ix in X:
                            if ix is ia:
                                continue
                            dax = d(ia, ix)
                            for ib in B:
                                dbx = d(ib, ix)
                                tot += 1.0 if dax < dbx else 0.5 if dax == dbx else 0.0
                                cnt += 1
                    if cnt:
                        ctx_scores.append(tot / cnt)
                        n_trip += cnt
                if ctx_scores:
                    spk_scores.append(np.mean(ctx_scores))
            if spk_scores:
                pair_scores.append(np.mean(spk_scores))
        if pair_scores:
            out.append({"layer": layer, "condition": cond, "error_rate": float(1 - np.mean(pair_scores)),
                        "n_pairs": len(pair_scores), "n_triplets": n_trip})
    return out, len(cache)


def main():
    args = sys.argv[1:]
    path = args[0]
    k = int(args[args.index("--speakers") + 1]) if "--speakers" in args else None
    items, speakers, layers = read_capture(path, k)
    per_layer, records, distances = [], [], 0
    t_all = time.perf_counter()
    for lid, p in layers:
        t = time.perf_counter()
        x = np.load(p, mmap_mode="r")
        rows = sorted({f for it in items for f in it["frames"]})
        full = np.zeros((x.shape[0], x.shape[1]))
        full[rows] = np.asarray(x[rows], dtype=np.float64)
        r, distances = abx(full, items, speakers, lid)
        records += r
        per_layer.append(time.perf_counter() - t)
    print(json.dumps({"capture": path, "speakers": k, "n_items": len(items), "distances_per_layer": distances,
                      "seconds_per_layer": per_layer, "seconds_total": time.perf_counter() - t_all,
                      "numpy": np.__version__, "records": records}))


if __name__ == "__main__":
    main()
