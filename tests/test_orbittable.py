"""Γ by orbits (`advbound orbits`): the tables agree with the expanded matrix and with a hand-made star."""

import math

import numpy as np
import pytest

from advbound.cli import main
from advbound.evidence.orbitcert import OrbitCertificate, save_orbit_certificate
from advbound.evidence.orbitcheck import expanded_gamma
from advbound.evidence.orbittable import orbit_tables
from advbound.functions.rowfamily import position_search_family
from advbound.programs.rowsym import solve_rows


def _star():
    """OR_3 as three one-bit rows with the star Γ (value 1 between 000 and each input of one 1)."""
    return OrbitCertificate(alphabet=("0", "1"), letters=("0", "1"),
                            contents=np.array([[0, 0, 0], [0, 0, 1], [0, 1, 1], [1, 1, 1]]),
                            outputs=("0", "1", "1", "1"), costs=np.ones(1),
                            pair_keys=np.array([[[0, 0], [0, 0], [0, 1]]]), gamma=np.ones(1),
                            rho=np.array([0.5, 1 / 6, 0, 0]), metadata={"bound": "general"})


def test_star_tables():
    """The star: ‖Γ‖ = √3 on invariant vectors, weight 1/√2 on 000 and 1/√6 on each input of one 1
    (the star's top eigenvector, common knowledge); one pair orbit of 3 pairs seen by position (3, 1)."""
    t = orbit_tables(_star())
    assert t.norm_invariant == pytest.approx(math.sqrt(3))
    w = {r.profile: r.weight for r in t.inputs}
    assert abs(w["0 0 0"]) == pytest.approx(1 / math.sqrt(2)) and abs(w["0 0 1"]) == pytest.approx(1 / math.sqrt(6))
    assert w["0 1 1"] == pytest.approx(0, abs=1e-12)
    (row,) = t.pairs
    assert (row.x, row.z, row.multiplicity, row.rows_differ, row.delta_positions) == ("000", "001", 3, 1, "(3,1)")


def test_tables_reproduce_the_expanded_gamma():
    """Every listed pair orbit's value is Γ at its representative pair, and the orbits add up to all of Γ."""
    cert = solve_rows(position_search_family("or", 3, 6)).certificate
    t = orbit_tables(cert)
    f, G = expanded_gamma(cert)
    index = {x: i for i, x in enumerate(f.inputs)}
    for r in t.pairs:
        assert G[index[r.x], index[r.z]] == pytest.approx(r.gamma, abs=1e-12)
    labels = sorted(set(f.outputs))
    low = np.array([y == labels[0] for y in f.outputs])
    assert sum(r.multiplicity * abs(r.gamma) for r in t.pairs) == pytest.approx(np.abs(G[np.ix_(low, ~low)]).sum())
    assert t.norm_invariant == pytest.approx(np.max(np.abs(np.linalg.eigvalsh(G))), rel=1e-7)


def test_cli_writes_tables_and_figure(tmp_path, capsys):
    """`advbound orbits CERT --out DIR` writes both CSV tables, the JSON and the figure."""
    path = tmp_path / "star.npz"
    save_orbit_certificate(_star(), path)
    assert main(["orbits", str(path), "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out
    assert "1 pair orbits, 4 input orbits" in out
    for name in ("pair_orbits.csv", "input_orbits.csv", "orbits.json", "orbits.png"):
        assert (tmp_path / "o" / name).stat().st_size > 0


def test_cli_refuses_a_dense_certificate(tmp_path, capsys):
    """A dense certificate gets one line saying orbits are listed for orbit certificates (exit 2)."""
    from advbound.evidence.certificate import Certificate, save_certificate
    c = Certificate(("0", "1"), ("00", "01", "10", "11"), ("0", "1", "1", "1"), np.ones(2),
                    np.array([[0, 1, 1, 0], [1, 0, 0, 0], [1, 0, 0, 0], [0, 0, 0, 0]], dtype=float))
    save_certificate(c, tmp_path / "d.npz")
    assert main(["orbits", str(tmp_path / "d.npz")]) == 2
    assert "orbit certificates" in capsys.readouterr().err
