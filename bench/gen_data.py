"""Benchmark data for bench/run: every data set from one fixed seed, with the sizes below.

Each data set lives in bench/data/<mode>/<name>/ with a manifest.json holding its parameters;
a data set whose manifest matches is reused, anything else is regenerated.

    python bench/gen_data.py [--quick] [name ...]      (names: see SIZES)
"""
import argparse
import json
import os
import shutil
import sys

import numpy as np

SEED = 20261201
HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "data")

# Sizes per data set: (full, quick). Documented in bench/README.md.
SIZES = {
    # npy read: one f32 layer of exactly 1 GiB (262 144 x 1 024 x 4 bytes) and the same shape
    # in f16 (512 MiB on disk, 1 GiB of f32 output).
    "read": ({"frames": 262_144, "dim": 1024}, {"frames": 32_768, "dim": 1024}),
    # inspect peak memory: 4 layers of 262 144 x 1 024 f32 = 4 GiB, as sparse files.
    "big": ({"frames": 262_144, "dim": 1024, "layers": 4}, {"frames": 262_144, "dim": 1024, "layers": 4}),
    # one probe fit: 40 overlapping Gaussian classes in 768 dims, held-out test set.
    "probe": (
        {"train": 50_000, "test": 10_000, "dim": 768, "classes": 40},
        {"train": 10_000, "test": 2_500, "dim": 768, "classes": 40},
    ),
    # t-SNE: a 50-dim mixture of 30 clusters of different sizes and spreads; iterations with
    # early exaggeration, then without (the map command's 250 + 500; fewer in quick mode).
    "tsne": (
        {"n": 10_000, "dim": 50, "clusters": 30, "early": 250, "iters": 500},
        {"n": 2_500, "dim": 50, "clusters": 30, "early": 100, "iters": 150},
    ),
    # CKA: a capture of 13 layers x 20 000 frames x 768 dims made by a random deep network.
    "cka": ({"frames": 20_000, "dim": 768, "layers": 13}, {"frames": 5_000, "dim": 768, "layers": 5}),
    # per-utterance read: 10 000 utterances of 20..80 frames (seeded), 128 dims f32, written
    # three ways: one file per layer, per-layer folders, per-utterance stacks of 2 layers.
    "utts": ({"utterances": 10_000, "dim": 128}, {"utterances": 2_000, "dim": 128}),
    # report on a full-size capture: 13 layers x 200 000 frames x 768 dims float16 (4.0 GB), 100
    # speakers, 40 phones, phone and speaker factors mixed through a random nonlinearity.
    "capture": (
        {"frames": 200_000, "dim": 768, "layers": 13, "speakers": 100, "phones": 40, "latent": 64, "noise": 2.0},
        {"frames": 20_000, "dim": 768, "layers": 13, "speakers": 20, "phones": 40, "latent": 64, "noise": 2.0},
    ),
}


def out_dir(name, quick):
    return os.path.join(DATA, "quick" if quick else "full", name)


def _fresh(name, quick):
    """Return (dir, params, up_to_date)."""
    params = dict(SIZES[name][1 if quick else 0], seed=SEED, version=1)
    d = out_dir(name, quick)
    man = os.path.join(d, "manifest.json")
    if os.path.exists(man):
        with open(man) as f:
            if json.load(f) == params:
                return d, params, True
    if os.path.exists(d):
        shutil.rmtree(d)
    os.makedirs(d)
    return d, params, False


def _done(d, params):
    with open(os.path.join(d, "manifest.json"), "w") as f:
        json.dump(params, f)


def _frames_tsv(path, n, utt_len=500, speakers=8, phones=40, seed=SEED):
    """frames.tsv: utterances of `utt_len` frames, speakers in turn, runs of random phones."""
    rng = np.random.default_rng(seed)
    utt = np.arange(n) // utt_len
    spk = utt % speakers
    # phone runs of 3..12 frames
    ph = np.empty(n, dtype=np.int64)
    i = 0
    while i < n:
        run = int(rng.integers(3, 13))
        ph[i : i + run] = rng.integers(0, phones)
        i += run
    with open(path, "w") as f:
        f.write("utterance\tspeaker\tphone\n")
        lines = [f"u{u:05d}\ts{s:02d}\tp{p:02d}\n" for u, s, p in zip(utt, spk, ph)]
        f.writelines(lines)


def make_read(quick):
    d, p, ok = _fresh("read", quick)
    if ok:
        return d
    n, dim = p["frames"], p["dim"]
    rng = np.random.default_rng(SEED)
    a = np.lib.format.open_memmap(os.path.join(d, "layer_00.npy"), "w+", np.float32, (n, dim))
    h = np.lib.format.open_memmap(os.path.join(d, "layer_01.npy"), "w+", np.float16, (n, dim))
    step = 16_384
    for lo in range(0, n, step):
        blk = rng.standard_normal((min(step, n - lo), dim), dtype=np.float32) * 2.0
        a[lo : lo + len(blk)] = blk
        h[lo : lo + len(blk)] = blk.astype(np.float16)
    a.flush()
    h.flush()
    del a, h
    _frames_tsv(os.path.join(d, "frames.tsv"), n)
    _done(d, p)
    return d


def make_big(quick):
    """Sparse 4 GiB capture: real .npy headers, data areas made by truncate (read as zeros)."""
    d, p, ok = _fresh("big", quick)
    if ok:
        return d
    n, dim = p["frames"], p["dim"]
    for layer in range(p["layers"]):
        path = os.path.join(d, f"layer_{layer:02d}.npy")
        with open(path, "wb") as f:
            np.lib.format.write_array_header_1_0(
                f, {"descr": "<f4", "fortran_order": False, "shape": (n, dim)}
            )
            hdr = f.tell()
        os.truncate(path, hdr + n * dim * 4)
    _frames_tsv(os.path.join(d, "frames.tsv"), n)
    _done(d, p)
    return d


def make_probe(quick):
    """40 Gaussian classes that overlap: class means in a 24-dim subspace, anisotropic noise
    with a power-law spectrum in a random rotation (as activations have), unequal class sizes
    (Zipf-like, as phones), and raw features with offsets and scales standardisation removes."""
    d, p, ok = _fresh("probe", quick)
    if ok:
        return d
    rng = np.random.default_rng(SEED + 1)
    n = p["train"] + p["test"]
    dim, k = p["dim"], p["classes"]
    freq = 1.0 / np.arange(1, k + 1) ** 0.8
    freq /= freq.sum()
    y = rng.choice(k, size=n, p=freq)
    sub = 24
    basis = np.linalg.qr(rng.standard_normal((dim, sub)))[0]  # dim x sub
    means = rng.standard_normal((k, sub)) @ basis.T * 0.4
    spec = (1.0 / np.arange(1, dim + 1) ** 0.7).astype(np.float64)
    spec *= dim / spec.sum()
    rot = np.linalg.qr(rng.standard_normal((dim, dim)))[0]
    mix = (np.sqrt(spec)[:, None] * rot).astype(np.float32)  # noise = e @ mix
    offs = rng.standard_normal(dim).astype(np.float32) * 3.0
    scale = np.exp(rng.standard_normal(dim) * 0.7).astype(np.float32)
    x = np.empty((n, dim), dtype=np.float32)
    step = 10_000
    for lo in range(0, n, step):
        hi = min(n, lo + step)
        e = rng.standard_normal((hi - lo, dim), dtype=np.float32)
        x[lo:hi] = ((e @ mix) + means[y[lo:hi]].astype(np.float32)) * scale + offs
    ntr = p["train"]
    np.save(os.path.join(d, "x_train.npy"), x[:ntr])
    np.save(os.path.join(d, "y_train.npy"), y[:ntr].astype(np.int64))
    np.save(os.path.join(d, "x_test.npy"), x[ntr:])
    np.save(os.path.join(d, "y_test.npy"), y[ntr:].astype(np.int64))
    _done(d, p)
    return d


def make_tsne(quick):
    """A mixture of clusters of different sizes and spreads in 50 dims (float32)."""
    d, p, ok = _fresh("tsne", quick)
    if ok:
        return d
    rng = np.random.default_rng(SEED + 2)
    n, dim, c = p["n"], p["dim"], p["clusters"]
    w = rng.dirichlet(np.full(c, 2.0))
    lab = rng.choice(c, size=n, p=w)
    centres = rng.standard_normal((c, dim)) * 4.0
    spread = rng.uniform(0.5, 2.0, size=c)
    x = centres[lab] + rng.standard_normal((n, dim)) * spread[lab, None]
    np.save(os.path.join(d, "x.npy"), x.astype(np.float32))
    np.save(os.path.join(d, "labels.npy"), lab.astype(np.int64))
    _done(d, p)
    return d


def make_cka(quick):
    """Two captures of the same frames, a/ and b/, each 13 layers x frames x 768 f32 with
    frames.tsv, from a random residual network; b's weights are a's plus noise that grows with
    depth (like a fine-tuned checkpoint), so neighbouring layers are similar, far ones are not,
    and the upper layers of a and b differ most."""
    d, p, ok = _fresh("cka", quick)
    if ok:
        return d
    rng = np.random.default_rng(SEED + 3)
    n, dim, L = p["frames"], p["dim"], p["layers"]
    x0 = rng.standard_normal((n, dim), dtype=np.float32)
    ws = [rng.standard_normal((dim, dim), dtype=np.float32) / np.sqrt(dim) for _ in range(L)]
    for cap, noise in (("a", 0.0), ("b", 1.0)):
        os.makedirs(os.path.join(d, cap))
        h = x0.copy()
        for layer in range(L):
            np.save(os.path.join(d, cap, f"layer_{layer:02d}.npy"), h)
            w = ws[layer]
            if noise:
                w = w + rng.standard_normal((dim, dim), dtype=np.float32) * (noise * layer / L / np.sqrt(dim))
            h = (h + np.tanh(h @ w) * 1.5).astype(np.float32)
            h /= h.std()
        _frames_tsv(os.path.join(d, cap, "frames.tsv"), n)
    _done(d, p)
    return d


def make_utts(quick):
    """The same two layers as one file each (one/), as layer_XX/<utt>.npy (folders/) and as
    acts/<utt>.npy stacks (stacks/), all listed by utterances.tsv in one order."""
    d, p, ok = _fresh("utts", quick)
    if ok:
        return d
    rng = np.random.default_rng(SEED)
    n_utt, dim = p["utterances"], p["dim"]
    lens = rng.integers(20, 81, n_utt)
    names = [f"u{u:05d}" for u in range(n_utt)]
    layers = [rng.standard_normal((int(lens.sum()), dim), dtype=np.float32) for _ in range(2)]
    one, folders, stacks = (os.path.join(d, x) for x in ("one", "folders", "stacks"))
    for x in (one, folders, stacks):
        os.makedirs(x)
    with open(os.path.join(one, "frames.tsv"), "w") as f:
        f.write("utterance\tspeaker\n")
        for name, n in zip(names, lens):
            f.writelines([f"{name}\ts{int(name[1:]) % 8}\n"] * int(n))
    for x in (folders, stacks):
        with open(os.path.join(x, "utterances.tsv"), "w") as f:
            f.write("utterance\tspeaker\n")
            f.writelines(f"{name}\ts{int(name[1:]) % 8}\n" for name in names)
    os.makedirs(os.path.join(stacks, "acts"))
    for layer, a in enumerate(layers):
        np.save(os.path.join(one, f"layer_{layer:02d}.npy"), a)
        os.makedirs(os.path.join(folders, f"layer_{layer:02d}"))
    starts = np.concatenate([[0], np.cumsum(lens)])
    for u, name in enumerate(names):
        lo, hi = starts[u], starts[u + 1]
        for layer, a in enumerate(layers):
            np.save(os.path.join(folders, f"layer_{layer:02d}", f"{name}.npy"), a[lo:hi])
        np.save(os.path.join(stacks, "acts", f"{name}.npy"), np.stack([a[lo:hi] for a in layers]))
def make_capture(quick):
    """One capture structured like a speech model's activations: frames.tsv with utterances of
    200 frames (each from one of `speakers` talkers, drawn at random) and runs of 3..12 frames of
    one of `phones` phones; layer l is tanh(z_l A_l + b_l) in float16, where
    z_l = w_p(l) P[phone] + w_s(l) S[speaker] + U[utterance] + noise (latent dims), with the phone
    weight rising and the speaker weight falling with depth, and A_l drifting from layer to layer
    (neighbouring layers alike). Written block by block, so memory stays near one block."""
    d, p, ok = _fresh("capture", quick)
    if ok:
        return d
    rng = np.random.default_rng(SEED + 5)
    n, dim, L, k = p["frames"], p["dim"], p["layers"], p["latent"]
    utt_len = 200
    n_utt = (n + utt_len - 1) // utt_len
    utt = np.arange(n) // utt_len
    utt_spk = rng.integers(0, p["speakers"], n_utt)
    spk = utt_spk[utt]
    ph = np.empty(n, dtype=np.int64)
    i = 0
    while i < n:
        run = int(rng.integers(3, 13))
        ph[i : i + run] = rng.integers(0, p["phones"])
        i += run
    with open(os.path.join(d, "frames.tsv"), "w") as f:
        f.write("utterance\tspeaker\tphone\n")
        f.writelines(f"u{u:05d}\ts{s:03d}\tp{q:02d}\n" for u, s, q in zip(utt, spk, ph))
    P = rng.standard_normal((p["phones"], k)).astype(np.float32)
    S = rng.standard_normal((p["speakers"], k)).astype(np.float32)
    U = rng.standard_normal((n_utt, k)).astype(np.float32) * 0.3
    A = rng.standard_normal((k, dim)).astype(np.float32) / np.sqrt(k)
    block = 20_000
    for layer in range(L):
        t = layer / max(L - 1, 1)
        wp, ws = 0.2 + 0.8 * t, 1.0 - 0.8 * t
        A = (A + rng.standard_normal((k, dim)).astype(np.float32) * (0.35 / np.sqrt(k))) / np.sqrt(1 + 0.35**2)
        b = rng.standard_normal(dim).astype(np.float32) * 0.3
        out = np.lib.format.open_memmap(os.path.join(d, f"layer_{layer:02d}.npy"), "w+", np.float16, (n, dim))
        for lo in range(0, n, block):
            hi = min(lo + block, n)
            z = wp * P[ph[lo:hi]] + ws * S[spk[lo:hi]] + U[utt[lo:hi]]
            z += rng.standard_normal((hi - lo, k)).astype(np.float32) * p["noise"]
            out[lo:hi] = np.tanh(z @ A + b).astype(np.float16)
        out.flush()
        del out
    _done(d, p)
    return d


MAKERS = {"capture": make_capture, "read": make_read, "big": make_big, "probe": make_probe, "tsne": make_tsne, "cka": make_cka, "utts": make_utts}


def ensure(name, quick):
    return MAKERS[name](quick)


if __name__ == "__main__":
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("names", nargs="*")
    a = ap.parse_args()
    for name in a.names or list(MAKERS):
        print(ensure(name, a.quick), file=sys.stderr)
