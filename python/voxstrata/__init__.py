"""voxstrata from Python: the engine of the `voxstrata` command on arrays in memory.

- `probe(X, labels, groups, ...)`: linear probes per layer and task; the records of probe.json.
- `map(X, labels, groups, ...)`: 2-D maps per layer and the records of purity.json.
- `cka(X, Y)`: CKA between two representations of the same rows.
- `CaptureWriter`: write a capture folder from a loop over utterances.
- `report(captures, out)`: the whole HTML report, as `voxstrata report`.
- `python -m voxstrata ...` (or the `voxstrata` command this package installs): the command line.

Options keep the command line's names in snake case (`--max-train-frames` is
`max_train_frames`) and its defaults, so the same options give the same records.
"""

import json
import os
import warnings

import numpy as np

from . import _convert as _c
from . import _native
from ._native import InputError, InternalError
from ._writer import CaptureWriter

__all__ = ["probe", "map", "cka", "report", "CaptureWriter", "InputError", "InternalError", "Note", "main"]
__version__ = _native.engine_version()


class Note(UserWarning):
    """Something the analysis wants the user to know (the command line prints these as
    'voxstrata: note: ...')."""


def _notes(notes):
    for n in notes:
        warnings.warn(n, Note, stacklevel=3)


def _frames(X, labels, groups, utterances):
    arrays, n = _c.layer_arrays(X)
    utterance, speaker = _c.group_columns(groups, utterances, n)
    return arrays, {"utterance": utterance, "speaker": speaker, "labels": _c.label_columns(labels, n)}


def probe(X, labels, groups, *, utterances=None, tasks=None, pool="frame", context=0, split="auto",
          folds="auto", test_fraction=0.25, max_train_frames=20_000, max_test_frames=50_000,
          bootstrap=1000, no_control=False, control_by=None, mdl=False, strict=False,
          alphas=None, drop_label=None,
          merge_labels=None, allow_nonfinite=False, seed=0, threads=0, layers=None, quiet=True):
    """Linear probes of every layer of `X` for each label task: a list of dicts with exactly
    the fields of the records in probe.json.

    X: one (frames, dim) array (layer 0), one (layers, frames, dim) array, or a list of
    (frames, dim) arrays, float16/32/64 in any memory order (C- or Fortran-ordered arrays are
    read in place; other views are copied once).
    labels: dict of label name -> per-frame values (str or number; None, NaN or '' is
    unlabelled), or one sequence (the task 'label').
    groups: the speaker of each frame; held-out speakers never appear in training.
    utterances: the utterance of each frame (default: each speaker's frames are one
    utterance); utterance splits, context and segment pooling use it.
    tasks: the label tasks to probe (default: every label given; name 'speaker' to probe
    the groups). alphas: the penalty grid (α = 1/(C·n)), a library option the command line
    does not expose. Every other option is the command line's, in snake case.
    Notes are issued as `voxstrata.Note` warnings. The GIL is released while it runs.
    """
    arrays, frames = _frames(X, labels, groups, utterances)
    if tasks is None:
        tasks = [name for name, _ in frames["labels"]]
    if alphas is not None:
        alphas = [_c.real("alphas", a) for a in alphas]
    args = {
        "tasks": _c.strings("tasks", tasks),
        "pool": _c.text("pool", pool),
        "context": _c.nonneg_int("context", context),
        "split": _c.text("split", split),
        "folds": "auto" if folds == "auto" else str(_c.nonneg_int("folds", folds)),
        "test_fraction": _c.real("test_fraction", test_fraction),
        "max_train_frames": _c.nonneg_int("max_train_frames", max_train_frames),
        "max_test_frames": _c.nonneg_int("max_test_frames", max_test_frames),
        "bootstrap": _c.nonneg_int("bootstrap", bootstrap),
        "no_control": _c.flag("no_control", no_control),
        "control_by": None if control_by is None else _c.text("control_by", control_by),
        "mdl": _c.flag("mdl", mdl),
        "strict": _c.flag("strict", strict),
        "alphas": alphas,
    }
    records, notes = _native.probe(arrays, frames, args, _c.cleaning(drop_label, merge_labels, allow_nonfinite),
                                   _c.common(seed, threads, layers, quiet))
    _notes(notes)
    return json.loads(records)


def map(X, labels, groups=None, *, utterances=None, method="tsne", per_label=10, color_by=None,
        drop_label=None, merge_labels=None, allow_nonfinite=False, seed=0, threads=0, layers=None,
        quiet=True):
    """2-D maps (t-SNE or PCA) of each layer on one stratified sample of frames, and the
    cluster-purity records of purity.json. Returns a dict: 'records' (list of dicts),
    'frames' (the sampled frame indices), 'embeddings' (layer number -> (n, 2) float32 array,
    rows in the order of 'frames') and 'summary'. Arguments as for `probe`; without groups
    every frame has one speaker."""
    arrays, frames = _frames(X, labels, groups, utterances)
    records, sampled, maps, notes, summary = _native.map(
        arrays, frames, _c.text("method", method), _c.nonneg_int("per_label", per_label),
        _c.strings("color_by", color_by), _c.cleaning(drop_label, merge_labels, allow_nonfinite),
        _c.common(seed, threads, layers, quiet))
    _notes(notes)
    return {
        "records": json.loads(records),
        "frames": np.asarray(sampled, dtype=np.int64),
        "embeddings": {layer: emb for layer, emb in maps},
        "summary": json.loads(summary),
    }


def cka(X, Y, *, kernel="linear"):
    """CKA (Kornblith et al. 2019) between two representations of the same rows, (n, p) and
    (n, q) arrays: linear by default, or 'rbf' (bandwidth: the median distance)."""
    x = _c.float_array("X", X)
    y = _c.float_array("Y", Y)
    for name, a in (("X", x), ("Y", y)):
        if a.ndim != 2:
            raise ValueError(f"{name}: expected a 2-D (rows, features) array, found shape {a.shape}")
    return _native.cka(x, y, _c.text("kernel", kernel))


def report(captures, out, *, force=False, map_method="tsne", no_abx=False, drop_label=None,
           merge_labels=None, allow_nonfinite=False, seed=0, threads=0, layers=None, quiet=True):
    """Run every analysis on one or two capture folders (none: the shipped demo) and write
    the HTML report into `out`, as `voxstrata report`; returns the path of index.html."""
    if isinstance(captures, (str, os.PathLike)):
        captures = [captures]
    paths = []
    for i, c in enumerate(captures):
        if not isinstance(c, (str, os.PathLike)):
            raise TypeError(f"captures[{i}]: expected a folder path, found {type(c).__name__}")
        paths.append(os.fspath(c))
    if not isinstance(out, (str, os.PathLike)):
        raise TypeError(f"out: expected a folder path, found {type(out).__name__}")
    index = _native.report(paths, os.fspath(out), _c.flag("force", force), _c.text("map_method", map_method),
                           _c.flag("no_abx", no_abx), _c.cleaning(drop_label, merge_labels, allow_nonfinite),
                           _c.common(seed, threads, layers, quiet))
    return index


def main(argv=None):
    """The command line: `voxstrata <command> ...`; returns its exit code."""
    import sys

    args = sys.argv[1:] if argv is None else list(argv)
    return _native.cli([_c.text("argument", a) for a in args])
