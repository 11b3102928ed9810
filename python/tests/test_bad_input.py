"""Wrong Python objects raise TypeError or ValueError naming the argument; errors found by
the engine raise voxstrata.InputError (a ValueError) with the message the command line
prints for the same problem."""

import numpy as np
import pytest

import voxstrata
from conftest import run_cli

RNG = np.random.default_rng(0)
X = RNG.normal(size=(40, 3)).astype(np.float32)
LABELS = {"phone": ["a", "b"] * 20}
GROUPS = [f"s{i % 4}" for i in range(40)]


@pytest.mark.parametrize("kwargs, exc, words", [
    ({"X": "not an array"}, TypeError, ["X", "float"]),
    ({"X": np.zeros((40, 3), dtype=np.int64).astype(object)}, TypeError, ["X", "object"]),
    ({"X": np.zeros((40, 3), dtype=np.complex64)}, TypeError, ["X", "complex"]),
    ({"X": np.zeros(40, dtype=np.float32)}, ValueError, ["X", "shape (40,)"]),
    ({"X": np.zeros((40, 0), dtype=np.float32)}, ValueError, ["X", "(40, 0)"]),
    ({"X": [X, X[:30]]}, ValueError, ["X[1]", "40 frames", "30"]),
    ({"labels": {"phone": ["a"] * 39}}, ValueError, ["phone", "40", "39"]),
    ({"labels": {"phone": [object()] * 40}}, TypeError, ["phone", "frame 0"]),
    ({"labels": 5}, TypeError, ["label"]),
    ({"groups": ["s"] * 41}, ValueError, ["groups", "40", "41"]),
    ({"seed": -1}, ValueError, ["seed"]),
    ({"seed": 1.5}, TypeError, ["seed"]),
    ({"bootstrap": "many"}, TypeError, ["bootstrap"]),
    ({"split": "diagonal"}, ValueError, ["split", "diagonal"]),
    ({"layers": "x"}, ValueError, ["layers"]),
])
def test_bad_python_objects(kwargs, exc, words):
    args = {"X": X, "labels": LABELS, "groups": GROUPS}
    args.update(kwargs)
    with pytest.raises(exc) as e:
        voxstrata.probe(args.pop("X"), args.pop("labels"), args.pop("groups"), **args)
    for w in words:
        assert w in str(e.value), (w, str(e.value))


def test_strided_views_are_read(demo_early=None):
    # A view with a step is neither C nor Fortran ordered: copied once, same records.
    big = np.repeat(X, 2, axis=1)
    a = voxstrata.probe(X, LABELS, GROUPS, bootstrap=20)
    b = voxstrata.probe(big[:, ::2], LABELS, GROUPS, bootstrap=20)
    assert a == b


@pytest.mark.parametrize("cli_args, py_kwargs", [
    (["--folds", "0"], {"folds": 0}),
    (["--task", "tone"], {"tasks": ["tone"]}),
    (["--test-fraction", "1.5"], {"test_fraction": 1.5}),
])
def test_engine_errors_carry_the_cli_message(demo_early, cli_args, py_kwargs):
    from conftest import load_capture
    code, _, err = run_cli("probe", demo_early, "--quiet", "--layers", "0", *cli_args, check=False)
    assert code == 2
    layers, cols = load_capture(demo_early)
    labels = {k: v for k, v in cols.items() if k not in ("utterance", "speaker")}
    with pytest.raises(voxstrata.InputError) as e:
        voxstrata.probe(layers, labels, cols["speaker"], utterances=cols["utterance"], layers="0", **py_kwargs)
    assert isinstance(e.value, ValueError)
    message = str(e.value)
    # The command line prints 'voxstrata: <message>'; the capture is named by its folder
    # there and 'in-memory' here, so compare what follows the name.
    cli_message = err.strip().splitlines()[-1].removeprefix("voxstrata: ")
    assert message.split(": ", 1)[-1] == cli_message.split(": ", 1)[-1] or message == cli_message, (message, cli_message)


def test_cka_and_map_refuse_bad_input():
    with pytest.raises(ValueError, match="same number of rows"):
        voxstrata.cka(X, X[:10])
    with pytest.raises(ValueError, match="kernel"):
        voxstrata.cka(X, X, kernel="cubic")
    with pytest.raises(TypeError):
        voxstrata.cka(X, None)
    with pytest.raises(ValueError, match="method"):
        voxstrata.map(X, LABELS, GROUPS, method="umap")


def test_report_refuses_a_missing_capture(tmp_path):
    with pytest.raises(voxstrata.InputError):
        voxstrata.report([tmp_path / "nothing"], tmp_path / "out")
    with pytest.raises(TypeError):
        voxstrata.report([3], tmp_path / "out")
