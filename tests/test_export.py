"""Tests of advbound.evidence.export and the ``advbound export`` command."""

import hashlib
import re
import shutil
import subprocess
from fractions import Fraction

import numpy as np
import pytest

from advbound.evidence.certificate import Certificate, save_certificate
from advbound.cli import main
from advbound.evidence.export import export_latex, latex_escape, macro_suffix


def _star(n, desc):
    """OR_n on weight <= 1 with the star Γ: ratio √n (common knowledge)."""
    inputs = tuple(sorted(["0" * n] + ["0" * i + "1" + "0" * (n - 1 - i) for i in range(n)]))
    outputs = tuple("0" if x == "0" * n else "1" for x in inputs)
    g = np.zeros((n + 1, n + 1))
    g[0, 1:] = g[1:, 0] = 1.0
    return Certificate(("0", "1"), inputs, outputs, np.ones(n), g,
                       metadata={"description": desc, "claimed_lower": float(np.sqrt(n))})


@pytest.fixture
def certs(tmp_path):
    """Two certificate files: OR_4 (bound 2) and OR_9 (bound 3)."""
    paths = []
    for n, desc in [(4, "OR_4 & friends"), (9, "OR_9")]:
        p = tmp_path / f"or{n}.npz"
        save_certificate(_star(n, desc), p)
        paths.append(p)
    return paths


def test_structure(certs):
    """Macros are letters-only, one table row per file, exact values in comments, hashes match the files."""
    tex = export_latex(certs)
    names = re.findall(r"\\newcommand\{\\(\w+)\}", tex)
    assert names and all(re.fullmatch(r"[A-Za-z]+", nm) for nm in names)
    assert {"advLowerA", "advLowerB", "advSizeA", "advUpperB"} <= set(names)
    assert tex.count("\\begin{tabular}") == tex.count("\\end{tabular}") == 1
    assert tex.count("\\toprule") == tex.count("\\bottomrule") == 1
    body = tex.split("\\midrule")[1].split("\\bottomrule")[0]
    assert body.count("\\\\") == 2 and "OR\\_4 \\& friends" in body
    for p in certs:
        assert hashlib.sha256(p.read_bytes()).hexdigest() in tex
    exact = [Fraction(m) for m in re.findall(r"% exact lower bound [AB]: (\d+/\d+)", tex)]
    assert len(exact) == 2 and exact[0] <= 2 and exact[1] <= 3 and 3 - exact[1] < 1e-5
    shown = re.findall(r"\\newcommand\{\\advLower[AB]\}\{([0-9.]+)\}", tex)
    assert shown == ["1.9999", "2.9999"]  # rounded DOWN to 4 decimals (the exact values are just below 2 and 3)
    assert "Rayleigh quotient" in tex and "10^{-6}" in tex


def test_braces_balanced(certs):
    """Every brace opened in the snippet is closed (ignoring escaped braces)."""
    tex = export_latex(certs).replace("\\{", "").replace("\\}", "")
    depth = 0
    for line in tex.splitlines():
        if line.startswith("%"):
            continue
        for ch in line:
            depth += {"{": 1, "}": -1}.get(ch, 0)
            assert depth >= 0
    assert depth == 0


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex not installed")
def test_pdflatex_compiles(certs, tmp_path):
    """The snippet compiles with pdflatex inside a minimal article using booktabs."""
    (tmp_path / "snip.tex").write_text(export_latex(certs))
    (tmp_path / "doc.tex").write_text("\\documentclass{article}\\usepackage{booktabs}\\begin{document}"
                                      "\\input{snip.tex} Bound: $\\advLowerA$.\\end{document}\n")
    res = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"], cwd=tmp_path,
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stdout[-2000:]
    assert (tmp_path / "doc.pdf").exists()


def test_no_check_says_so(certs, tmp_path, capsys):
    """--no-check writes the claimed values and says they were not re-checked."""
    out = tmp_path / "t.tex"
    assert main(["export", *map(str, certs), "--no-check", "--out", str(out)]) == 0
    tex = out.read_text()
    assert "NOT re-checked" in tex and "% exact lower bound" not in tex


def test_failed_certificate_exit_1(tmp_path, capsys):
    """A certificate that fails the rigorous check is marked failed and the command exits 1.

    (It used to fail through mass on an equal-output pair, which the acceptance rule now refuses
    outright with exit 2; here it fails by claiming 2 where its Γ proves √3.)
    """
    c = _star(3, "bad")
    from dataclasses import replace
    p = tmp_path / "bad.npz"
    save_certificate(replace(c, metadata=dict(c.metadata, claimed_lower=2.0)), p)
    assert main(["export", str(p)]) == 1
    assert "failed" in capsys.readouterr().out


def test_helpers():
    """Suffixes run A..Z, AA..; LaTeX specials are escaped."""
    assert [macro_suffix(i) for i in (0, 1, 25, 26, 701, 702)] == ["A", "B", "Z", "AA", "ZZ", "AAA"]
    assert latex_escape("a_b#c$") == "a\\_b\\#c\\$"


def test_out_path_checked_first(certs, tmp_path, capsys):
    """An --out that is a folder or lies in a missing folder is refused in one line (exit 2), nothing computed."""
    assert main(["export", *map(str, certs), "--out", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err
    assert main(["export", *map(str, certs), "--out", str(tmp_path / "no" / "t.tex")]) == 2
    err = capsys.readouterr().err
    assert "does not exist" in err and err.count("\n") == 1
