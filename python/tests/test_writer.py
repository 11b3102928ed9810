"""CaptureWriter: the folders it writes, read back by `voxstrata inspect` and probed by
`voxstrata probe`, give the records of the same arrays probed in memory; bad input raises
ValueError/TypeError naming the utterance; an interrupted writer leaves no capture."""

import csv
import json
import os

import numpy as np
import pytest

import voxstrata
from conftest import read_json, run_cli

PHONES = ["a", "i", "u", "s"]


def utterances(seed=0, n_spk=6, per_spk=3, dims=(8, 12, 12)):
    """Synthetic utterances whose layers encode the phone (more with depth) and the speaker."""
    rng = np.random.default_rng(seed)
    means = [rng.normal(size=(len(PHONES), d)) for d in dims]
    spk_shift = [rng.normal(size=(n_spk, d)) for d in dims]
    out = []
    for s in range(n_spk):
        for u in range(per_spk):
            n = int(rng.integers(20, 40))
            ph = rng.integers(0, len(PHONES), size=n)
            layers = [(k + 1) * 0.5 * means[k][ph] + spk_shift[k][s] + rng.normal(size=(n, d))
                      for k, d in enumerate(dims)]
            out.append((f"s{s}_u{u}", f"s{s}", layers, [PHONES[p] for p in ph], "north" if s % 2 else "south"))
    return out


def write(path, layout, data, dtype="float32"):
    with voxstrata.CaptureWriter(path, hop_s=0.02, win_s=0.025, layout=layout, dtype=dtype,
                                 name="written", notes={"model": "synthetic"}) as w:
        for utt, spk, layers, phones, region in data:
            w.add(utt, spk, layers, phone=phones, region=region)


def in_memory(data, dtype):
    layers = [np.concatenate([d[2][k] for d in data]).astype(dtype) for k in range(len(data[0][2]))]
    utt = [d[0] for d in data for _ in d[3]]
    spk = [d[1] for d in data for _ in d[3]]
    phone = [p for d in data for p in d[3]]
    region = [d[4] for d in data for _ in d[3]]
    return layers, {"phone": phone, "region": region}, spk, utt


OPTS = {"bootstrap": 100, "seed": 1}


def test_files_layout_round_trip(tmp_path):
    data = utterances()
    cap = tmp_path / "cap"
    write(cap, "files", data)
    _, out, _ = run_cli("inspect", cap, "--json")
    info = json.loads(out)
    text = json.dumps(info)
    n = sum(len(d[3]) for d in data)
    assert str(n) in text and "written" in text and "region" in text
    run_cli("probe", cap, "--out", tmp_path / "p", "--quiet", "--task", "phone", "--task", "region",
            "--task", "speaker", "--bootstrap", OPTS["bootstrap"], "--seed", OPTS["seed"])
    want = read_json(tmp_path / "p" / "probe.json")["records"]
    layers, labels, spk, utt = in_memory(data, np.float32)
    got = voxstrata.probe(layers, labels, spk, utterances=utt, tasks=["phone", "region", "speaker"], **OPTS)
    assert got == want
    # The probe finds what the synthetic layers encode: phones, better with depth.
    phone = [r["accuracy"] for r in got if r["task"] == "phone"]
    assert phone[-1] > 0.8 and phone[-1] > phone[0]


@pytest.mark.parametrize("layout", ["stacks", "folders"])
def test_per_utterance_layouts(tmp_path, layout):
    data = utterances(dims=(12, 12))
    cap = tmp_path / "cap"
    write(cap, layout, data, dtype="float16")
    for utt, spk, layers, phones, region in data:
        if layout == "stacks":
            a = np.load(cap / "acts" / f"{utt}.npy")
            assert a.shape == (2, len(phones), 12) and a.dtype == np.float16
            np.testing.assert_array_equal(a[1], layers[1].astype(np.float16))
        else:
            for k in range(2):
                a = np.load(cap / f"layer_{k:02d}" / f"{utt}.npy")
                np.testing.assert_array_equal(a, layers[k].astype(np.float16))
    with open(cap / "utterances.tsv", newline="") as f:
        rows = list(csv.reader(f, delimiter="\t"))
    assert rows[0] == ["utterance", "speaker", "frames", "region"]
    assert rows[1:] == [[d[0], d[1], str(len(d[3])), d[4]] for d in data]
    with open(cap / "frames.tsv", newline="") as f:
        frames = list(csv.reader(f, delimiter="\t"))
    assert frames[0] == ["utterance", "speaker", "phone", "region"]
    assert [r[2] for r in frames[1:]] == [p for d in data for p in d[3]]


@pytest.mark.parametrize("layout", ["files", "stacks"])
def test_interrupted_writer_leaves_no_capture(tmp_path, layout):
    data = utterances(dims=(8, 8))
    cap = tmp_path / "cap"
    with pytest.raises(RuntimeError):
        with voxstrata.CaptureWriter(cap, hop_s=0.02, layout=layout) as w:
            for i, (utt, spk, layers, phones, region) in enumerate(data):
                if i == 3:
                    raise RuntimeError("model failed")
                w.add(utt, spk, layers, phone=phones)
    names = set(os.listdir(cap))
    assert not names & {"frames.tsv", "utterances.tsv", "capture.toml", "frames.tsv.part"}
    code, _, err = run_cli("inspect", cap, check=False)
    # Refused as bad input: no label table, or (files layout) layer files still claiming 0 frames.
    assert code == 2, err


def test_mismatches_raise_value_error_naming_the_utterance(tmp_path):
    rng = np.random.default_rng(0)
    w = voxstrata.CaptureWriter(tmp_path / "cap", hop_s=0.02, layout="stacks")
    w.add("u1", "s1", [rng.normal(size=(5, 4)), rng.normal(size=(5, 4))], phone=list("aaabb"))
    bad = [
        ({"layers": [rng.normal(size=(5, 4))], "phone": list("aaabb")}, ["'u2'", "2 layers", "found 1"]),
        ({"layers": [rng.normal(size=(5, 4)), rng.normal(size=(5, 3))], "phone": list("aaabb")}, ["'u2'", "dim 4", "found 3"]),
        ({"layers": [rng.normal(size=(5, 4)), rng.normal(size=(6, 4))], "phone": list("aaabb")}, ["'u2'", "5 frames", "found 6"]),
        ({"layers": [rng.normal(size=(5, 4))] * 2, "phone": list("aab")}, ["'u2'", "5 values", "found 3"]),
        ({"layers": [rng.normal(size=(5, 4))] * 2, "word": list("aaabb")}, ["'u2'", "['phone']", "['word']"]),
        ({"layers": np.zeros((2, 5)), "phone": list("aaabb")}, ["'u2'", "shape (2, 5)"]),
        ({"layers": [np.full((5, 4), 1e6)] * 2, "phone": list("aaabb")}, ["'u2'", "float16"]),
    ]
    for kw, words in bad:
        layers = kw.pop("layers")
        with pytest.raises(ValueError) as e:
            w.add("u2", "s1", layers, **kw)
        for word in words:
            assert word in str(e.value), (word, str(e.value))
    with pytest.raises(ValueError, match="'u1'.*added before"):
        w.add("u1", "s1", [rng.normal(size=(5, 4))] * 2, phone=list("aaabb"))
    with pytest.raises(TypeError):
        w.add("u3", "s1", [np.array([["x"]])] * 2, phone=["a"])
    w.close()
    assert (tmp_path / "cap" / "utterances.tsv").exists()
