"""voxstrata.report writes the same report as `voxstrata report` on a small demo scenario,
and `python -m voxstrata` is the command line (help, version, exit codes)."""

import os

import voxstrata
from conftest import read_json, run_cli


def test_report_from_python_matches_the_command(tmp_path):
    demo = tmp_path / "demo"
    run_cli("demo", "--size", "small", "--out", demo, "--quiet")
    caps = sorted(str(demo / n) for n in os.listdir(demo) if (demo / n).is_dir())
    assert len(caps) == 2
    index = voxstrata.report(caps, tmp_path / "py", map_method="pca", no_abx=True)
    assert os.path.basename(index) == "index.html" and os.path.getsize(index) > 1000
    run_cli("report", *caps, "--out", tmp_path / "cli", "--map-method", "pca", "--no-abx", "--quiet")
    py_files = sorted(os.listdir(tmp_path / "py"))
    assert py_files == sorted(os.listdir(tmp_path / "cli"))
    # Same records from both (paths aside): every records file of the run.
    compared = 0
    for name in ("probe.json", "purity.json", "compare.json"):
        for sub in ("", *[d for d in py_files if (tmp_path / "py" / d).is_dir()]):
            p = tmp_path / "py" / sub / name
            if p.exists():
                assert read_json(p)["records"] == read_json(tmp_path / "cli" / sub / name)["records"]
                compared += 1
    assert compared >= 3


def test_python_m_runs_the_command_line():
    code, out, _ = run_cli("--version")
    assert code == 0 and voxstrata.__version__ in out
    code, out, _ = run_cli("probe", "--help")
    assert code == 0 and "--max-train-frames" in out
    code, _, err = run_cli("probe", "/nonexistent/capture", check=False)
    assert code == 2 and err.startswith("voxstrata: ")
    code, _, err = run_cli("no-such-command", check=False)
    assert code == 2
