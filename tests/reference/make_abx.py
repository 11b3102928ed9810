"""Reference values for the ABX analysis (src/analysis/abx/) and the within-phone variance
share (src/analysis/variance.rs).

The ABX task is that of Schatz et al. (2013); the details (items = label runs, contexts =
neighbouring items, angular frame distance, DTW tie order and path-length normalisation, the
order of the averages) follow voxstrata's definition, written out in src/analysis/abx/mod.rs.
This script computes it by brute force with numpy in float64: a straightforward DTW with a
back-trace, and every triplet enumerated from explicit loops over label pairs, speakers and
contexts, independent of voxstrata's pair caching.

Writes tests/reference/abx/: a small random capture (layer_0.npy, layer_1.npy, frames.tsv;
4 speakers, 4 phones, 6-d frames, 3 utterances each, with unlabelled gaps and zero frames)
and expected.json with the within- and across-speaker error rates, label-pair and triplet
counts of each layer (every item used: the per-cell sampling is voxstrata's own, so the
fixture keeps all items), and the within-phone speaker variance share. Run with the pinned
environment:

    tests/reference/.venv/bin/python tests/reference/make_abx.py
"""
import itertools
import json
import os

import numpy as np

OUT = os.path.join(os.path.dirname(__file__), "abx")
os.makedirs(OUT, exist_ok=True)
rng = np.random.default_rng(20130825)

SPEAKERS = ["s1", "s2", "s3", "s4"]
PHONES = ["a", "b", "c", "d"]
DIM = 6

# --- the capture ---------------------------------------------------------------------------
# Utterances: a carrier phone c between targets a, b, d (so targets share the context (c, c)),
# run lengths 1-4 frames, an occasional unlabelled gap (which ends a run without ending the
# item sequence), and a random tail.
rows = []  # (utterance, speaker, phone or "")
for s in SPEAKERS:
    for k in range(3):
        utt = f"{s}_{k}"
        seq = []
        for _ in range(int(rng.integers(4, 7))):
            seq.append("c")
            seq.append(str(rng.choice(["a", "b", "d"])))
        seq.append("c")
        seq += [str(p) for p in rng.choice(PHONES, size=2)]
        for p in seq:
            for _ in range(int(rng.integers(1, 5))):
                rows.append((utt, s, p))
            if rng.random() < 0.15:
                rows.append((utt, s, ""))
n = len(rows)
phone_mean = rng.normal(size=(len(PHONES), DIM))
speaker_mean = rng.normal(scale=0.7, size=(len(SPEAKERS), DIM))
pi = np.array([PHONES.index(p) if p else -1 for _, _, p in rows])
si = np.array([SPEAKERS.index(s) for _, s, _ in rows])
layers = []
for scale in [1.5, 0.6]:
    x = np.where(pi[:, None] >= 0, phone_mean[np.maximum(pi, 0)], 0.0)
    x = x + speaker_mean[si] + rng.normal(scale=scale, size=(n, DIM))
    layers.append(x.astype(np.float32))
# zero frames: two single-frame items of one cell of s2 get a zero vector (every distance to
# a zero item is 1/2, so they make exact ties), and one frame inside a longer item too
def items_of(rows):
    out, prev = [], None
    for f, (u, s, p) in enumerate(rows):
        if p and prev is not None and rows[prev][0] == u and rows[prev][2] == p and prev == f - 1:
            out[-1]["frames"].append(f)
        elif p:
            out.append({"utt": u, "spk": s, "label": p, "frames": [f]})
        prev = f
    for u in dict.fromkeys(r[0] for r in rows):
        its = [it for it in out if it["utt"] == u]
        for k, it in enumerate(its):
            it["ctx"] = (its[k - 1]["label"] if k > 0 else "#", its[k + 1]["label"] if k + 1 < len(its) else "#")
    return out

items = items_of(rows)
singles = {}
for it in items:
    if it["spk"] == "s2" and len(it["frames"]) == 1:
        singles.setdefault((it["label"], it["ctx"]), []).append(it)
zero_cell = next(v for v in singles.values() if len(v) >= 2)
zero_frames = [zero_cell[0]["frames"][0], zero_cell[1]["frames"][0]]
long_item = next(it for it in items if len(it["frames"]) >= 3)
zero_frames.append(long_item["frames"][1])
for x in layers:
    x[zero_frames] = 0.0

with open(os.path.join(OUT, "frames.tsv"), "w") as f:
    f.write("utterance\tspeaker\tphone\n")
    for u, s, p in rows:
        f.write(f"{u}\t{s}\t{p}\n")
for i, x in enumerate(layers):
    np.save(os.path.join(OUT, f"layer_{i}.npy"), x)


# --- the definition, by brute force --------------------------------------------------------
def frame_costs(a, b):
    """arccos(cosine) / pi; 1/2 wherever either frame is a zero vector."""
    na = np.linalg.norm(a, axis=1)
    nb = np.linalg.norm(b, axis=1)
    cos = (a @ b.T) / np.outer(np.where(na > 0, na, 1), np.where(nb > 0, nb, 1))
    c = np.arccos(np.clip(cos, -1, 1)) / np.pi
    c[na == 0, :] = 0.5
    c[:, nb == 0] = 0.5
    return c


near_ties = 0


def dtw(c):
    """Full cumulative table, predecessor by the tie order diagonal, up (i-1, j), left
    (i, j-1); the chosen path is traced back from the last cell and its cells counted."""
    global near_ties
    m, k = c.shape
    d = np.full((m, k), np.inf)
    step = np.zeros((m, k), dtype=int)  # 0 diagonal, 1 up, 2 left
    for i in range(m):
        for j in range(k):
            if i == 0 and j == 0:
                d[i, j] = c[i, j]
                continue
            cand = [
                d[i - 1, j - 1] if i > 0 and j > 0 else np.inf,
                d[i - 1, j] if i > 0 else np.inf,
                d[i, j - 1] if j > 0 else np.inf,
            ]
            best = min(cand)
            choice = cand.index(best)  # first minimum: diagonal, then up, then left
            finite = sorted(v for v in cand if np.isfinite(v))
            if len(finite) > 1 and finite[0] != finite[1] and finite[1] - finite[0] < 1e-6:
                near_ties += 1
            step[i, j] = choice
            d[i, j] = c[i, j] + best
    i, j, cells = m - 1, k - 1, 1
    while (i, j) != (0, 0):
        s = step[i, j]
        i, j = (i - 1, j - 1) if s == 0 else (i - 1, j) if s == 1 else (i, j - 1)
        cells += 1
    return d[m - 1, k - 1] / cells


def abx(x, items):
    global near_ties
    dist = {}

    def d(p, q):  # p's frames are the rows
        key = (id(p), id(q))
        if key not in dist:
            dist[key] = dtw(frame_costs(x[p["frames"]].astype(np.float64), x[q["frames"]].astype(np.float64)))
        return dist[key]

    cells = {}
    for it in items:
        cells.setdefault((it["label"], it["ctx"], it["spk"]), []).append(it)
    contexts = sorted({it["ctx"] for it in items})
    gaps = []

    def score(A, B, X, same):
        tot, cnt = 0.0, 0
        for a in A:
            for xx in X:
                if same and xx is a:
                    continue
                for b in B:
                    dax, dbx = d(a, xx), d(b, xx)
                    if dax != dbx:
                        gaps.append(abs(dax - dbx))
                    tot += 1.0 if dax < dbx else 0.5 if dax == dbx else 0.0
                    cnt += 1
        return tot, cnt

    out = {}
    for cond in ["within", "across"]:
        pair_scores, n_trip = [], 0
        for a, b in itertools.permutations(PHONES, 2):
            spk_scores = []
            spk_pairs = [(s, s) for s in SPEAKERS] if cond == "within" else list(itertools.permutations(SPEAKERS, 2))
            for s, t in spk_pairs:
                ctx_scores = []
                for c in contexts:
                    A = cells.get((a, c, s), [])
                    B = cells.get((b, c, s), [])
                    X = cells.get((a, c, t), [])
                    tot, cnt = score(A, B, X, cond == "within")
                    if cnt:
                        ctx_scores.append(tot / cnt)
                        n_trip += cnt
                if ctx_scores:
                    spk_scores.append(np.mean(ctx_scores))
            if spk_scores:
                pair_scores.append(np.mean(spk_scores))
        out[cond] = {
            "error_rate": float(1 - np.mean(pair_scores)),
            "n_pairs": len(pair_scores),
            "n_triplets": n_trip,
        }
    out["smallest_score_gap"] = float(min(gaps))
    return out


def within_phone_share(x, phone, other):
    keep = (phone >= 0) & (other >= 0)
    x, phone, other = x[keep].astype(np.float64), phone[keep], other[keep]
    total = float(((x - x.mean(0)) ** 2).sum())
    between = 0.0
    for p in np.unique(phone):
        xp = x[phone == p]
        for v in np.unique(other[phone == p]):
            xv = xp[other[phone == p] == v]
            between += len(xv) * float(((xv.mean(0) - xp.mean(0)) ** 2).sum())
    return between / total


expected = {
    "numpy": np.__version__,
    "n_frames": n,
    "n_items": len(items),
    "zero_frames": sorted(int(f) for f in zero_frames),
    "layers": [],
}
for i, x in enumerate(layers):
    r = abx(x, items)
    r["layer"] = i
    r["within_phone_share"] = within_phone_share(x, pi, si)
    expected["layers"].append(r)
expected["dtw_near_ties"] = near_ties
assert near_ties == 0, "a DTW step choice within 1e-6 of a tie: float32 could choose differently"
for r in expected["layers"]:
    # comparisons must not flip between float64 here and float32 frames in voxstrata
    assert r["smallest_score_gap"] > 1e-5, r
with open(os.path.join(OUT, "expected.json"), "w") as f:
    json.dump(expected, f, indent=1)
    f.write("\n")
print(json.dumps(expected, indent=1))
