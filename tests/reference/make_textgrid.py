"""Write TextGrid fixtures with praatio (a general-purpose TextGrid library): the same grid in
the long and the short text format, in UTF-8, UTF-8 with a byte-order mark and UTF-16 with a
byte-order mark; and praatio's own read-back of every file, for tests/alignments.rs.

Run: /path/to/python tests/reference/make_textgrid.py   (praatio pinned in requirements.txt)
"""
import importlib.metadata
import json
import pathlib

from praatio import textgrid
from praatio.utilities.constants import Interval, Point

out = pathlib.Path(__file__).parent / "textgrid"
out.mkdir(exist_ok=True)

# A 1.2 s utterance: phones with a gap (praatio fills it with an empty interval), non-ASCII
# labels and a label holding a double quote; words; and a point tier (which voxstrata skips).
phones = textgrid.IntervalTier(
    "phones",
    [
        Interval(0.0, 0.15, "sil"),
        Interval(0.15, 0.31, "ʃ"),
        Interval(0.31, 0.52, "ə"),
        Interval(0.52, 0.6075, "t"),
        Interval(0.7, 0.93, 'say "a"'),
        Interval(0.93, 1.2, "sil"),
    ],
    0.0,
    1.2,
)
words = textgrid.IntervalTier(
    "words",
    [Interval(0.15, 0.6075, "shut"), Interval(0.7, 0.93, "a")],
    0.0,
    1.2,
)
events = textgrid.PointTier("events", [Point(0.5, "click"), Point(1.0, "")], 0.0, 1.2)

tg = textgrid.Textgrid()
for t in (phones, words, events):
    tg.addTier(t)

files = {}
for fmt in ("long", "short"):
    name = f"{fmt}.TextGrid"
    tg.save(str(out / name), format=f"{fmt}_textgrid", includeBlankSpaces=True)
    text = (out / name).read_text(encoding="utf-8")
    files[name] = fmt
    # The same text with a UTF-8 byte-order mark, and as UTF-16 (little-endian) with one.
    (out / f"{fmt}_bom.TextGrid").write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    files[f"{fmt}_bom.TextGrid"] = fmt
    (out / f"{fmt}_utf16.TextGrid").write_bytes(text.encode("utf-16"))
    files[f"{fmt}_utf16.TextGrid"] = fmt

expected = {}
for name in sorted(files):
    back = textgrid.openTextgrid(str(out / name), includeEmptyIntervals=True)
    tiers = []
    for tname in back.tierNames:
        tier = back.getTier(tname)
        kind = "interval" if isinstance(tier, textgrid.IntervalTier) else "point"
        tiers.append(
            {
                "name": tname,
                "kind": kind,
                "xmin": tier.minTimestamp,
                "xmax": tier.maxTimestamp,
                "entries": [list(e) for e in tier.entries],
            }
        )
    expected[name] = {"xmin": back.minTimestamp, "xmax": back.maxTimestamp, "tiers": tiers}

(out / "expected.json").write_text(
    json.dumps(
        {"praatio": importlib.metadata.version("praatio"), "files": expected},
        indent=1,
        ensure_ascii=False,
    )
)
