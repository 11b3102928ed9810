"""Argument checks and conversions shared by the entry points: every wrong type raises
TypeError, every wrong value ValueError, with the argument named, before the engine runs."""

import math
import numbers
import os

import numpy as np

FLOAT_DTYPES = (np.float16, np.float32, np.float64)


def nonneg_int(name, value):
    """`value` as a non-negative int (bools refused)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise TypeError(f"{name}: expected an integer, found {type(value).__name__}")
    value = int(value)
    if value < 0:
        raise ValueError(f"{name}: expected 0 or more, found {value}")
    return value


def real(name, value):
    """`value` as a float."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"{name}: expected a number, found {type(value).__name__}")
    return float(value)


def flag(name, value):
    if not isinstance(value, (bool, np.bool_)):
        raise TypeError(f"{name}: expected True or False, found {type(value).__name__}")
    return bool(value)


def text(name, value):
    if not isinstance(value, str):
        raise TypeError(f"{name}: expected a string, found {type(value).__name__}")
    return value


def strings(name, value):
    """A list of strings from None, one string, or an iterable of strings."""
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    try:
        items = list(value)
    except TypeError:
        raise TypeError(f"{name}: expected a string or a list of strings, found {type(value).__name__}") from None
    return [text(f"{name}[{i}]", v) for i, v in enumerate(items)]


def float_array(name, a):
    """`a` as a float16/32/64 numpy array in C or Fortran order, copied only when it is
    neither (a strided view) or not an array of floats yet (a list, say)."""
    if isinstance(a, np.ndarray):
        arr = a
    else:
        try:
            arr = np.asarray(a)
        except (ValueError, TypeError) as e:
            raise TypeError(f"{name}: expected a numpy array of floats, found {type(a).__name__} ({e})") from None
        if arr.dtype.kind in "iu":
            arr = arr.astype(np.float64)
    if arr.dtype.kind != "f" or arr.dtype.itemsize not in (2, 4, 8):
        what = {"i": "integers", "u": "integers", "b": "booleans", "c": "complex numbers",
                "O": "Python objects", "U": "strings", "S": "bytes"}.get(arr.dtype.kind, str(arr.dtype))
        raise TypeError(f"{name}: expected a float16, float32 or float64 array, found {arr.dtype} ({what})")
    if not (arr.flags.c_contiguous or arr.flags.f_contiguous):
        arr = np.ascontiguousarray(arr)
    return arr


def layer_arrays(X):
    """The activations: one (frames, dim) array, one (layers, frames, dim) array, or a list of
    (frames, dim) arrays (one per layer). Returns the arrays and the frame count."""
    if isinstance(X, (list, tuple)) and X and all(isinstance(x, np.ndarray) for x in X):
        arrays = [float_array(f"X[{i}]", x) for i, x in enumerate(X)]
        for i, a in enumerate(arrays):
            if a.ndim != 2:
                raise ValueError(f"X[{i}]: expected a 2-D (frames, dim) array per layer, found shape {a.shape}")
        n = arrays[0].shape[0]
        for i, a in enumerate(arrays):
            if a.shape[0] != n:
                raise ValueError(f"X[{i}]: expected {n} frames (as X[0]), found {a.shape[0]}")
        return arrays, n
    arr = float_array("X", X)
    if arr.ndim not in (2, 3):
        raise ValueError(f"X: expected a (frames, dim) or (layers, frames, dim) array, found shape {arr.shape}")
    if 0 in arr.shape:
        raise ValueError(f"X: expected at least one layer, frame and feature, found shape {arr.shape}")
    return [arr], arr.shape[-2]


def _label_value(v):
    if v is None:
        return None
    if isinstance(v, str):
        return v
    if isinstance(v, bytes):
        return v.decode("utf-8")
    if isinstance(v, (bool, np.bool_)):
        return str(bool(v))
    if isinstance(v, numbers.Integral):
        return str(int(v))
    if isinstance(v, numbers.Real):
        f = float(v)
        if math.isnan(f):
            return None
        return str(int(f)) if f.is_integer() else repr(f)
    raise TypeError(f"expected a string or a number, found {type(v).__name__}")


def label_column(name, values, n):
    """A per-frame label column as strings (None: unlabelled): strings, numbers, None or NaN."""
    if isinstance(values, (str, bytes)) or not hasattr(values, "__len__"):
        raise TypeError(f"label '{name}': expected a sequence of {n} per-frame labels, found {type(values).__name__}")
    if isinstance(values, np.ndarray) and values.ndim != 1:
        raise ValueError(f"label '{name}': expected a 1-D sequence of {n} labels, found shape {values.shape}")
    if len(values) != n:
        raise ValueError(f"label '{name}': expected {n} values (one per frame), found {len(values)}")
    if isinstance(values, np.ndarray) and values.dtype.kind in "iuU":
        return values.astype(str).tolist()
    out = []
    for i, v in enumerate(values):
        try:
            out.append(_label_value(v))
        except TypeError as e:
            raise TypeError(f"label '{name}', frame {i}: {e}") from None
    return out


def label_columns(labels, n):
    """Label columns from a dict name -> per-frame values, or one sequence (named 'label')."""
    if isinstance(labels, dict):
        items = list(labels.items())
    else:
        items = [("label", labels)]
    out = []
    for name, values in items:
        text("label name", name)
        if name in ("utterance", "speaker"):
            raise ValueError(f"label '{name}': expected a label name other than utterance and speaker (give those as groups)")
        out.append((name, label_column(name, values, n)))
    return out


def group_columns(groups, utterances, n):
    """Speaker and utterance of every frame. Without utterances, each group is one utterance."""
    if groups is None:
        speaker = ["all"] * n
    else:
        speaker = label_column("groups", groups, n)
        for i, s in enumerate(speaker):
            if not s:
                raise ValueError(f"groups: expected a name for every frame, found none at frame {i}")
    if utterances is None:
        utterance = list(speaker)
    else:
        utterance = label_column("utterances", utterances, n)
        for i, u in enumerate(utterance):
            if not u:
                raise ValueError(f"utterances: expected a name for every frame, found none at frame {i}")
    return utterance, speaker


def layers_arg(layers):
    """The command line's --layers: a string like '0,4-8', or layer numbers."""
    if layers is None:
        return None
    if isinstance(layers, str):
        return layers
    if isinstance(layers, numbers.Integral):
        return str(nonneg_int("layers", layers))
    try:
        items = list(layers)
    except TypeError:
        raise TypeError(f"layers: expected a string like '0,4-8' or layer numbers, found {type(layers).__name__}") from None
    return ",".join(str(nonneg_int("layers", v)) for v in items)


def cleaning(drop_label, merge_labels, allow_nonfinite):
    """The label cleaning options: merge_labels is a two-column TSV file or a dict."""
    merge_file, merge_pairs = None, []
    if merge_labels is None:
        pass
    elif isinstance(merge_labels, dict):
        merge_pairs = [(text("merge_labels key", k), text("merge_labels value", v)) for k, v in merge_labels.items()]
    elif isinstance(merge_labels, (str, os.PathLike)):
        merge_file = os.fspath(merge_labels)
    else:
        raise TypeError(f"merge_labels: expected a file path or a dict, found {type(merge_labels).__name__}")
    return {
        "drop_label": strings("drop_label", drop_label),
        "merge_file": merge_file,
        "merge_pairs": merge_pairs,
        "allow_nonfinite": flag("allow_nonfinite", allow_nonfinite),
    }


def common(seed, threads, layers, quiet):
    return {
        "seed": nonneg_int("seed", seed),
        "threads": nonneg_int("threads", threads),
        "layers": layers_arg(layers),
        "quiet": flag("quiet", quiet),
    }
