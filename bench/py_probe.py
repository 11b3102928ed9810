"""Bench row 8's Python side: load a capture with numpy (layers memory-mapped, frame table
with csv), call voxstrata.probe with the command's defaults, and print one JSON line with the
seconds spent in the import, the load and the call, and the records."""

import csv
import json
import os
import sys
import time

t0 = time.perf_counter()
import numpy as np  # noqa: E402

import voxstrata  # noqa: E402

t_import = time.perf_counter() - t0


def main():
    cap, threads = sys.argv[1], int(sys.argv[2])
    t = time.perf_counter()
    names = sorted(n for n in os.listdir(cap) if n.startswith("layer_") and n.endswith(".npy"))
    layers = [np.load(os.path.join(cap, n), mmap_mode="r") for n in names]
    with open(os.path.join(cap, "frames.tsv"), encoding="utf-8", newline="") as f:
        rows = list(csv.reader(f, delimiter="\t"))
    head, rows = rows[0], rows[1:]
    cols = {h: [r[i] for r in rows] for i, h in enumerate(head)}
    labels = {k: v for k, v in cols.items() if k not in ("utterance", "speaker")}
    t_load = time.perf_counter() - t
    t = time.perf_counter()
    # The command's default tasks for a capture with a phone column: phone, then speaker.
    records = voxstrata.probe(layers, labels, cols["speaker"], utterances=cols["utterance"],
                              tasks=["phone", "speaker"], threads=threads)
    t_call = time.perf_counter() - t
    print(json.dumps({"import_s": t_import, "load_s": t_load, "call_s": t_call, "records": records}))


if __name__ == "__main__":
    main()
