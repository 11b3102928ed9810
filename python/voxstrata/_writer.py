"""`CaptureWriter`: write a capture folder from a loop over utterances, as arrays arrive.

Layouts (see the README's capture format):
- "stacks": `acts/<utterance>.npy`, one (layers, frames, dim) array per utterance;
- "folders": `layer_XX/<utterance>.npy`, one (frames, dim) array per layer and utterance;
- "files": `layer_XX.npy`, one (frames, dim) array per layer for the whole capture.

Labels go to `frames.tsv` (utterance, speaker and every label, one row per frame) and, for
the per-utterance layouts, `utterances.tsv` (utterance, speaker, frames and the
per-utterance labels). The tables and `capture.toml` are written only by a clean `close()`
(each to a temporary name, then renamed), so a loop that fails half way leaves a folder that
the tool refuses to read as a capture.
"""

import math
import numbers
import os
import re

import numpy as np

LAYOUTS = ("stacks", "folders", "files")
DTYPES = {"float16": np.float16, "float32": np.float32, "float64": np.float64}
RESERVED = ("utterance", "speaker", "frames")
# Space kept for the header of a growing layer_XX.npy file: the shape is filled in on close.
HEADER_BYTES = 128


def _npy_header(dtype, shape):
    """A version 1.0 .npy header of exactly HEADER_BYTES bytes."""
    descr = np.lib.format.dtype_to_descr(np.dtype(dtype))
    text = "{'descr': %r, 'fortran_order': False, 'shape': (%d, %d), }" % (descr, shape[0], shape[1])
    room = HEADER_BYTES - 10 - 1
    if len(text) > room:
        raise ValueError(f"shape {shape}: too large for the header")
    text = text.ljust(room) + "\n"
    return b"\x93NUMPY\x01\x00" + len(text).to_bytes(2, "little") + text.encode("latin-1")


def _replace(path, data):
    tmp = path + ".part"
    with open(tmp, "w", encoding="utf-8", newline="\n") as f:
        f.write(data)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)


def _toml_string(s):
    return '"' + s.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, numbers.Integral):
        return str(int(v))
    if isinstance(v, numbers.Real):
        return repr(float(v))
    return _toml_string(str(v))


def _field(what, v):
    """A table field: no tabs or line breaks."""
    if re.search(r"[\t\r\n]", v):
        raise ValueError(f"{what}: expected text without tabs or line breaks, found {v!r}")
    return v


class CaptureWriter:
    """Write a capture folder from Python: `with CaptureWriter(path, hop_s=0.02) as w:
    w.add("utt1", "spk1", layers, phone=per_frame_phones, dialect="north")`.

    path: a new or empty folder. hop_s: frame shift in seconds; win_s: analysis window
    (default hop_s). layout: "stacks", "folders" or "files". dtype: the stored element type
    ("float16", "float32" or "float64"). name and notes (a dict) go to capture.toml.
    """

    def __init__(self, path, *, hop_s, win_s=None, layout="stacks", dtype="float16", name=None, notes=None):
        if not isinstance(path, (str, os.PathLike)):
            raise TypeError(f"path: expected a folder path, found {type(path).__name__}")
        self.path = os.fspath(path)
        if isinstance(hop_s, bool) or not isinstance(hop_s, numbers.Real):
            raise TypeError(f"hop_s: expected a number of seconds, found {type(hop_s).__name__}")
        if not (math.isfinite(hop_s) and hop_s > 0):
            raise ValueError(f"hop_s: expected a frame shift > 0 seconds, found {hop_s}")
        if win_s is not None and (isinstance(win_s, bool) or not isinstance(win_s, numbers.Real)):
            raise TypeError(f"win_s: expected a number of seconds, found {type(win_s).__name__}")
        if win_s is not None and not (math.isfinite(win_s) and win_s > 0):
            raise ValueError(f"win_s: expected a window > 0 seconds, found {win_s}")
        if layout not in LAYOUTS:
            raise ValueError(f"layout: expected one of {', '.join(LAYOUTS)}, found {layout!r}")
        if dtype not in DTYPES:
            raise ValueError(f"dtype: expected one of {', '.join(DTYPES)}, found {dtype!r}")
        if notes is not None and not isinstance(notes, dict):
            raise TypeError(f"notes: expected a dict, found {type(notes).__name__}")
        if os.path.exists(self.path) and (not os.path.isdir(self.path) or os.listdir(self.path)):
            raise ValueError(f"{self.path}: expected a new or empty folder, found one that holds files")
        os.makedirs(self.path, exist_ok=True)
        self.hop_s, self.win_s, self.layout = float(hop_s), win_s, layout
        self.dtype = np.dtype(DTYPES[dtype])
        self.name, self.notes = name, dict(notes or {})
        self._utts = []  # (utterance, speaker, frames, per-utterance values)
        self._seen = set()
        self._dims = None  # dim of each layer, fixed by the first utterance
        self._frame_labels = None  # names of the per-frame labels, fixed by the first utterance
        self._utt_labels = None  # names of the per-utterance labels
        self._frames_tsv = None
        self._layer_files = []  # open layer_XX.npy files ("files" layout)
        self._n_frames = 0
        self._closed = False

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.close()
        else:
            self.abort()
        return False

    # --- checks -------------------------------------------------------------------------

    def _layers(self, utterance, layers):
        """The utterance's layers as a list of 2-D arrays of the stored dtype."""
        if isinstance(layers, np.ndarray) or not isinstance(layers, (list, tuple)):
            arr = np.asarray(layers)
            if arr.ndim != 3:
                raise ValueError(f"utterance '{utterance}': layers: expected a list of (frames, dim) arrays or one (layers, frames, dim) array, found shape {arr.shape}")
            items = list(arr)
        else:
            items = [np.asarray(a) for a in layers]
        if not items:
            raise ValueError(f"utterance '{utterance}': layers: expected at least one layer, found none")
        out = []
        for i, a in enumerate(items):
            if a.dtype.kind not in "fiu":
                raise TypeError(f"utterance '{utterance}', layer {i}: expected numbers, found dtype {a.dtype}")
            if a.ndim != 2:
                raise ValueError(f"utterance '{utterance}', layer {i}: expected a (frames, dim) array, found shape {a.shape}")
            out.append(a)
        frames = out[0].shape[0]
        if frames == 0:
            raise ValueError(f"utterance '{utterance}': expected at least one frame, found 0")
        for i, a in enumerate(out):
            if a.shape[0] != frames:
                raise ValueError(f"utterance '{utterance}', layer {i}: expected {frames} frames (as layer 0), found {a.shape[0]}")
        dims = [a.shape[1] for a in out]
        if self._dims is None:
            if 0 in dims:
                raise ValueError(f"utterance '{utterance}': expected at least one feature per layer, found dims {dims}")
            if self.layout == "stacks" and len(set(dims)) > 1:
                raise ValueError(f"utterance '{utterance}': layout 'stacks' expected the same dim in every layer, found dims {dims}")
        else:
            if len(dims) != len(self._dims):
                raise ValueError(f"utterance '{utterance}': expected {len(self._dims)} layers (as the first utterance), found {len(dims)}")
            for i, (d, want) in enumerate(zip(dims, self._dims)):
                if d != want:
                    raise ValueError(f"utterance '{utterance}', layer {i}: expected dim {want} (as the first utterance), found {d}")
        stored = []
        for i, a in enumerate(out):
            with np.errstate(over="ignore"):
                s = np.ascontiguousarray(a, dtype=self.dtype)
            if a.dtype.kind == "f" and not np.array_equal(np.isfinite(s), np.isfinite(a)):
                raise ValueError(f"utterance '{utterance}', layer {i}: expected values that fit {self.dtype.name}, found values that overflow it")
            stored.append(s)
        return stored, frames, dims

    def _labels(self, utterance, frames, labels):
        """Per-frame columns (lists of strings) and per-utterance values of the utterance."""
        per_frame, per_utt = {}, {}
        for name, v in labels.items():
            if name in RESERVED:
                raise ValueError(f"utterance '{utterance}': label '{name}': expected a name other than {', '.join(RESERVED)}")
            if isinstance(v, (str, bytes, numbers.Number)) or v is None:
                per_utt[name] = "" if v is None else _field(f"utterance '{utterance}', label '{name}'", _text(v))
            else:
                try:
                    n = len(v)
                except TypeError:
                    raise TypeError(f"utterance '{utterance}', label '{name}': expected a per-frame sequence or one value, found {type(v).__name__}") from None
                if n != frames:
                    raise ValueError(f"utterance '{utterance}', label '{name}': expected {frames} values (one per frame), found {n}")
                per_frame[name] = [_field(f"utterance '{utterance}', label '{name}'", _text(x)) for x in v]
        if self._frame_labels is None:
            self._frame_labels, self._utt_labels = sorted(per_frame), sorted(per_utt)
        elif sorted(per_frame) != self._frame_labels or sorted(per_utt) != self._utt_labels:
            raise ValueError(
                f"utterance '{utterance}': expected per-frame labels {self._frame_labels} and per-utterance labels "
                f"{self._utt_labels} (as the first utterance), found {sorted(per_frame)} and {sorted(per_utt)}")
        return per_frame, per_utt

    # --- writing ------------------------------------------------------------------------

    def add(self, utterance, speaker, layers, **labels):
        """Add one utterance: its speaker, its layers (a list of (frames, dim) arrays or one
        (layers, frames, dim) array) and its labels (per-frame sequences, or one value for
        the whole utterance). Raises ValueError naming the utterance, what was expected and
        what was found when it does not fit the utterances before it."""
        if self._closed:
            raise ValueError(f"{self.path}: the writer is closed")
        for what, v in (("utterance", utterance), ("speaker", speaker)):
            if not isinstance(v, str):
                raise TypeError(f"{what}: expected a string, found {type(v).__name__}")
            if not v or v.strip() != v or re.search(r"[\t\r\n/\\]", v) or v in (".", ".."):
                raise ValueError(f"{what}: expected a name without tabs, slashes or surrounding spaces, found {v!r}")
        if utterance in self._seen:
            raise ValueError(f"utterance '{utterance}': expected a new utterance, found one added before")
        stored, frames, dims = self._layers(utterance, layers)
        per_frame, per_utt = self._labels(utterance, frames, labels)
        if self._dims is None:
            self._start(dims)
        self._write_arrays(utterance, stored)
        self._write_rows(utterance, speaker, frames, per_frame, per_utt)
        self._seen.add(utterance)
        self._utts.append((utterance, speaker, frames, [per_utt[k] for k in self._utt_labels]))
        self._n_frames += frames

    def _layer_name(self, i):
        return "layer_%0*d" % (max(2, len(str(len(self._dims) - 1))), i)

    def _start(self, dims):
        self._dims = dims
        if self.layout == "stacks":
            os.makedirs(os.path.join(self.path, "acts"), exist_ok=True)
        elif self.layout == "folders":
            for i in range(len(dims)):
                os.makedirs(os.path.join(self.path, self._layer_name(i)), exist_ok=True)
        else:
            for i, d in enumerate(dims):
                f = open(os.path.join(self.path, self._layer_name(i) + ".npy"), "wb")
                f.write(_npy_header(self.dtype, (0, d)))
                self._layer_files.append(f)
        self._frames_tsv = open(os.path.join(self.path, "frames.tsv.part"), "w", encoding="utf-8", newline="\n")
        head = ["utterance", "speaker"] + self._frame_labels + self._utt_labels
        self._frames_tsv.write("\t".join(head) + "\n")

    def _write_arrays(self, utterance, stored):
        if self.layout == "files":
            for f, a in zip(self._layer_files, stored):
                f.write(a.tobytes())
            return
        if self.layout == "stacks":
            targets = [(os.path.join(self.path, "acts", utterance + ".npy"), np.stack(stored))]
        else:
            targets = [(os.path.join(self.path, self._layer_name(i), utterance + ".npy"), a) for i, a in enumerate(stored)]
        for path, a in targets:
            tmp = path + ".part"
            with open(tmp, "wb") as f:
                np.lib.format.write_array(f, a, allow_pickle=False)
            os.replace(tmp, path)

    def _write_rows(self, utterance, speaker, frames, per_frame, per_utt):
        utt_values = [per_utt[k] for k in self._utt_labels]
        cols = [per_frame[k] for k in self._frame_labels]
        lines = []
        for i in range(frames):
            lines.append("\t".join([utterance, speaker] + [c[i] for c in cols] + utt_values))
        self._frames_tsv.write("\n".join(lines) + "\n")

    def close(self):
        """Finish the capture: fill in the layer files' shapes, then write frames.tsv,
        utterances.tsv and capture.toml (each atomically)."""
        if self._closed:
            return
        if not self._utts:
            self.abort()
            raise ValueError(f"{self.path}: expected at least one utterance, found none")
        for f, d in zip(self._layer_files, self._dims):
            f.seek(0)
            f.write(_npy_header(self.dtype, (self._n_frames, d)))
            f.close()
        self._layer_files = []
        self._frames_tsv.flush()
        os.fsync(self._frames_tsv.fileno())
        self._frames_tsv.close()
        self._write_toml()
        os.replace(os.path.join(self.path, "frames.tsv.part"), os.path.join(self.path, "frames.tsv"))
        if self.layout != "files":
            head = ["utterance", "speaker", "frames"] + self._utt_labels
            rows = ["\t".join([u, s, str(n)] + vals) for u, s, n, vals in self._utts]
            _replace(os.path.join(self.path, "utterances.tsv"), "\n".join(["\t".join(head)] + rows) + "\n")
        self._closed = True

    def _write_toml(self):
        lines = []
        if self.name is not None:
            lines.append(f"name = {_toml_string(str(self.name))}")
        lines.append(f"hop_s = {self.hop_s!r}")
        if self.win_s is not None:
            lines.append(f"win_s = {float(self.win_s)!r}")
        if self.notes:
            lines.append("")
            lines.append("[notes]")
            for k, v in self.notes.items():
                lines.append(f"{_toml_string(str(k))} = {_toml_value(v)}")
        _replace(os.path.join(self.path, "capture.toml"), "\n".join(lines) + "\n")

    def abort(self):
        """Stop without finishing: the arrays written so far stay, but no label table or
        capture.toml is written, so the folder is not a capture."""
        for f in self._layer_files:
            f.close()
        self._layer_files = []
        if self._frames_tsv is not None:
            self._frames_tsv.close()
            part = os.path.join(self.path, "frames.tsv.part")
            if os.path.exists(part):
                os.remove(part)
        self._closed = True


def _text(v):
    if v is None:
        return ""
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
            return ""
        return str(int(f)) if f.is_integer() else repr(f)
    raise TypeError(f"expected a string or a number, found {type(v).__name__}")
