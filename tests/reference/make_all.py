"""Regenerate every reference fixture: runs each tests/reference/make_<area>.py in turn
(alphabetical order) with this same Python, from the repository root, and stops at the first
failure. Use the pinned environment of tests/reference/requirements.txt:

    python3 -m venv tests/reference/.venv
    tests/reference/.venv/bin/pip install -r tests/reference/requirements.txt
    tests/reference/.venv/bin/python tests/reference/make_all.py

Afterwards `git status tests/reference` shows which committed fixtures changed (with the
pinned versions, none should).
"""
import glob
import os
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))


def main():
    scripts = sorted(
        p for p in glob.glob(os.path.join(HERE, "make_*.py")) if os.path.basename(p) != "make_all.py"
    )
    if not scripts:
        sys.exit("no make_*.py scripts found in " + HERE)
    for s in scripts:
        rel = os.path.relpath(s, ROOT)
        print(f"== {rel}", flush=True)
        r = subprocess.run([sys.executable, s], cwd=ROOT)
        if r.returncode != 0:
            sys.exit(f"{rel} failed with exit code {r.returncode}")
    print(f"== wrote the fixtures of {len(scripts)} scripts", flush=True)
    subprocess.run(["git", "status", "--short", "--", os.path.relpath(HERE, ROOT)], cwd=ROOT)


if __name__ == "__main__":
    main()
