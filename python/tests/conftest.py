"""Shared paths and helpers for the Python package's tests."""

import csv
import json
import os
import subprocess
import sys

import numpy as np
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
DEMO = os.path.join(ROOT, "demo_activations")
REFERENCE = os.path.join(ROOT, "tests", "reference")


def run_cli(*args, check=True):
    """`python -m voxstrata ARGS` in a child process: (exit code, stdout, stderr)."""
    p = subprocess.run([sys.executable, "-m", "voxstrata", *map(str, args)], capture_output=True, text=True)
    if check and p.returncode != 0:
        raise AssertionError(f"voxstrata {' '.join(map(str, args))}: exit {p.returncode}\n{p.stderr}")
    return p.returncode, p.stdout, p.stderr


def read_json(path):
    with open(path, encoding="utf-8") as f:
        return json.load(f)


def load_capture(path):
    """A capture in today's file layout (layer_XX.npy + frames.tsv) loaded with numpy and csv:
    the layers (memory-mapped, as stored) and the frame table's columns."""
    names = sorted(n for n in os.listdir(path) if n.startswith("layer_") and n.endswith(".npy"))
    layers = [np.load(os.path.join(path, n), mmap_mode="r") for n in names]
    with open(os.path.join(path, "frames.tsv"), encoding="utf-8", newline="") as f:
        rows = list(csv.reader(f, delimiter="\t"))
    head, rows = rows[0], rows[1:]
    cols = {h: [r[i] for r in rows] for i, h in enumerate(head)}
    return layers, cols


@pytest.fixture(scope="session")
def demo_early():
    return os.path.join(DEMO, "early")
