"""The "A tour" commands of README.md, run as written, in a temporary copy of the files they need.

The fenced ``bash`` block(s) of the section ``## A tour`` are read from README.md; each line is run
in a folder holding copies of ``instances/``, ``examples/`` and ``tools/`` (so nothing in the checkout
changes), in the order written, and must exit with 0:

* ``advbound ...`` lines go through :func:`advbound.cli.main` in this process;
* ``python ...`` lines run with this interpreter (the one of the venv the tour activates);
* ``source .venv/bin/activate`` is skipped: the tests already run inside that venv.

One line is not run as written: ``advbound study instances/studies/default.toml --jobs 2`` sweeps 28
points (about a minute on two cores).  It is run with ``--set T=4,5,6 --set rows=2 --quiet`` added
(6 of the 28 points), which still creates ``studies/default.sqlite`` so that the ``fit`` and
``report`` lines after it run exactly as written.  Any other ``study`` line gets the same treatment.
A line of another kind makes the test fail, so that a new kind of tour line is noticed.
"""

import os
import re
import shlex
import shutil
import subprocess
import sys

import pytest

from advbound.cli import main

ROOT = os.path.join(os.path.dirname(__file__), "..")
#: Added to a ``study`` line so that it runs 6 points instead of the whole default grid.
STUDY_SUBSET = ["--set", "T=4,5,6", "--set", "rows=2", "--quiet"]


def tour_lines() -> list[str]:
    """The command lines of the fenced shell blocks in the README section "## A tour"."""
    text = open(os.path.join(ROOT, "README.md"), encoding="utf-8").read()
    m = re.search(r"^## A tour\n(.*?)(?=^## |\Z)", text, re.S | re.M)
    assert m, "README.md has no '## A tour' section"
    blocks = re.findall(r"^```(?:bash|sh|shell|console)\n(.*?)^```", m.group(1), re.S | re.M)
    assert blocks, "the tour section has no fenced shell block"
    text = "\n".join(blocks).replace("\\\n", " ")       # a trailing backslash continues the command
    return [line.strip() for line in text.splitlines() if line.strip()]


@pytest.fixture
def tour_dir(tmp_path, monkeypatch):
    for d in ("instances", "examples", "tools"):
        shutil.copytree(os.path.join(ROOT, d), tmp_path / d)
    monkeypatch.chdir(tmp_path)
    return tmp_path


def test_every_tour_line_runs(tour_dir, capsys):
    """Every tour line exits with 0, in order, and leaves the files it names.

    The inspect line's domain size is C(6, 2) * 2^3 = 120 (the size formula of docs/instances.md:
    C(T-1, n-1) 2^n for OR of n position-search rows with sum k_i = T, common knowledge counting).
    """
    lines = tour_lines()
    ran = []
    for line in lines:
        argv = shlex.split(line, comments=True)
        if argv[:1] == ["source"]:
            continue
        if argv[0] in ("advbound", ".venv/bin/advbound"):
            args = argv[1:] + (STUDY_SUBSET if argv[1] == "study" else [])
            code = main(args)
            out = capsys.readouterr().out
        elif argv[0] in ("python", "python3", ".venv/bin/python"):
            proc = subprocess.run([sys.executable, *argv[1:]], capture_output=True, text=True, timeout=120)
            code, out = proc.returncode, proc.stdout
        else:
            pytest.fail(f"README tour line of an unknown kind: {line}")
        assert code == 0, f"README tour line exited with {code}: {line}\n{out}"
        ran.append((argv, out))
    commands = [a[1] if a[0].endswith("advbound") else a[0] for a, _ in ran]
    assert {"inspect", "solve", "verify", "study", "fit", "report"} <= set(commands)
    inspect_out = next(out for a, out in ran if a[1:2] == ["inspect"] and "T=7" in a)
    assert "domain: 120 inputs" in inspect_out
    verify_out = next(out for a, out in ran if a[1:2] == ["verify"])
    assert "VERIFIED" in verify_out
    for path in ("or3-T6.npz", "evidence.tex", "studies/default.sqlite", "reports/default/summary.md"):
        assert (tour_dir / path).exists(), f"the tour should have written {path}"
