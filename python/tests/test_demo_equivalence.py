"""The demo capture's arrays loaded with numpy and given to voxstrata.probe / voxstrata.map
in memory give the very records `voxstrata probe` / `voxstrata map` write for the capture
folder with the same options (the command run as `python -m voxstrata`)."""

import os

import numpy as np

import voxstrata
from conftest import load_capture, read_json, run_cli

# Options that keep the run short; both sides get the same ones.
PROBE = {"layers": "0,3,5", "max_train_frames": 3000, "bootstrap": 200, "seed": 7}


def test_probe_in_memory_equals_cli(demo_early, tmp_path):
    out = tmp_path / "probe"
    run_cli("probe", demo_early, "--out", out, "--quiet", "--layers", PROBE["layers"],
            "--max-train-frames", PROBE["max_train_frames"], "--bootstrap", PROBE["bootstrap"],
            "--seed", PROBE["seed"], "--task", "phone", "--task", "speaker")
    want = read_json(out / "probe.json")["records"]
    layers, cols = load_capture(demo_early)
    assert layers[0].dtype == np.float16  # read in place, as stored
    labels = {k: v for k, v in cols.items() if k not in ("utterance", "speaker")}
    got = voxstrata.probe(layers, labels, cols["speaker"], utterances=cols["utterance"],
                          tasks=["phone", "speaker"], **PROBE)
    assert len(got) == 6
    assert got == want


def test_probe_takes_a_stack_and_fortran_order(demo_early):
    layers, cols = load_capture(demo_early)
    hidden = layers[1:]  # the hidden layers share one width, so they stack
    opts = dict(tasks=["phone"], layers="2", max_train_frames=1500, bootstrap=50, no_control=True)
    labels = {"phone": cols["phone"]}
    base = voxstrata.probe(hidden, labels, cols["speaker"], utterances=cols["utterance"], **opts)
    stack = np.stack([np.asarray(a, dtype=np.float32) for a in hidden])
    fortran = [np.asfortranarray(np.asarray(a, dtype=np.float64)) for a in hidden]
    big = [np.asarray(a).astype(">f2") for a in hidden]
    for X in (stack, fortran, big):
        assert voxstrata.probe(X, labels, cols["speaker"], utterances=cols["utterance"], **opts) == base


def test_map_in_memory_equals_cli(demo_early, tmp_path):
    out = tmp_path / "map"
    run_cli("map", demo_early, "--out", out, "--quiet", "--method", "pca", "--per-label", "3", "--seed", "3")
    want = read_json(out / "purity.json")["records"]
    layers, cols = load_capture(demo_early)
    labels = {k: v for k, v in cols.items() if k not in ("utterance", "speaker")}
    got = voxstrata.map(layers, labels, cols["speaker"], utterances=cols["utterance"], method="pca",
                        per_label=3, seed=3)
    assert got["records"] == want
    n = len(got["frames"])
    assert sorted(got["embeddings"]) == list(range(6))
    assert all(e.shape == (n, 2) for e in got["embeddings"].values())
