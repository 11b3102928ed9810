"""Save a voxstrata capture one utterance at a time, as a loop over a data set does.

Each utterance's hidden states are saved as they come (no concatenation, nothing held for
the whole data set): with --layout stacks one file acts/<utterance>.npy of shape
(layers, frames, dim); with --layout folders one file layer_XX/<utterance>.npy of shape
(frames, dim) per layer. utterances.tsv lists the utterances (the order of their frames),
their speakers and any per-utterance label; alignments.ctm holds time-aligned phone labels.

Here a toy two-layer network over random "features" stands in for a real model: replace
`run_model` by your model with a forward hook that returns every layer's output for one
utterance, and `utterances` by your data set. Needs numpy only.

    python3 examples/save_capture.py --out my_capture [--layout folders]
    voxstrata inspect my_capture
"""
import argparse
import pathlib

import numpy as np

HOP_S = 0.02  # frame shift of the model's output frames, in seconds


def utterances(rng):
    """Stand-in data set: (name, speaker, dialect, features, phone runs) per utterance."""
    for k in range(12):
        frames = int(rng.integers(40, 90))
        feats = rng.standard_normal((frames, 20)).astype(np.float32)
        # phone runs of 3..8 frames, as an aligner would give them
        runs, t = [], 0
        while t < frames:
            n = min(int(rng.integers(3, 9)), frames - t)
            runs.append((t, n, f"p{int(rng.integers(0, 6))}"))
            t += n
        yield f"utt{k:03d}", f"spk{k % 4}", ["north", "south"][k % 2], feats, runs


def run_model(weights, feats):
    """Stand-in model: the output of every layer for one utterance, each (frames, dim)."""
    outs, h = [], feats
    for w in weights:
        h = np.maximum(h @ w, 0.0)
        outs.append(h)
    return outs


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", required=True, help="capture folder to write")
    ap.add_argument("--layout", choices=["stacks", "folders"], default="stacks")
    a = ap.parse_args()
    out = pathlib.Path(a.out)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(0)
    weights = [rng.standard_normal((20, 32)) * 0.3, rng.standard_normal((32, 32)) * 0.3]

    rows, ctm = ["utterance\tspeaker\tdialect"], [";; utterance channel start duration phone"]
    for name, speaker, dialect, feats, runs in utterances(rng):
        layers = run_model(weights, feats)
        if a.layout == "stacks":
            (out / "acts").mkdir(exist_ok=True)
            np.save(out / "acts" / f"{name}.npy", np.stack(layers).astype(np.float16))
        else:
            for l, h in enumerate(layers):
                (out / f"layer_{l:02d}").mkdir(exist_ok=True)
                np.save(out / f"layer_{l:02d}" / f"{name}.npy", h.astype(np.float16))
        rows.append(f"{name}\t{speaker}\t{dialect}")
        for start, n, phone in runs:
            ctm.append(f"{name} 1 {start * HOP_S:.3f} {n * HOP_S:.3f} {phone}")

    (out / "utterances.tsv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (out / "alignments.ctm").write_text("\n".join(ctm) + "\n", encoding="utf-8")
    (out / "capture.toml").write_text(
        f'name = "toy model"\nhop_s = {HOP_S}\n\n[notes]\nmodel = "2-layer ReLU toy"\n',
        encoding="utf-8",
    )
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
