"""The numbers docs/studies.md quotes for the default study are what the shipped instance gives today."""

import re
from pathlib import Path

import pytest

from advbound.functions.instance import build_instance, load_instance
from advbound.programs.solve import solve

ROOT = Path(__file__).resolve().parents[1]


def _quoted(row_label: str) -> list[float]:
    text = (ROOT / "docs" / "studies.md").read_text()
    line = next(l for l in text.splitlines() if l.startswith(f"| {row_label} ("))
    return [float(v) for v in re.findall(r"\| ([0-9.]+)", line)]


@pytest.mark.parametrize("bound,label,rows,T", [("general", "ADV±, rows = 3", 3, 7),
                                                ("positive", "ADV, rows = 3", 3, 6),
                                                ("general", "ADV±, rows = 2", 2, 10)])
def test_default_study_table_matches_a_fresh_solve(bound, label, rows, T):
    """A point of the documented table, recomputed from instances/studies/default.toml (default method)."""
    spec = load_instance(ROOT / "instances" / "studies" / "default.toml")
    r = solve(build_instance(spec, {"rows": rows, "T": T}), bound=bound)
    assert r.success and r.method == ("minimax" if bound == "positive" else "rows"), r.message
    assert r.lower == pytest.approx(_quoted(label)[T - 4], abs=2e-6)
