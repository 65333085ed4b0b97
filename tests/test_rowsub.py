"""Sub-domains of a row family: a smaller program whose verified value is a lower bound on the whole family."""
import json
import os

import numpy as np
import pytest

from advbound.cli.main import main
from advbound.errors import InvalidFunctionError
from advbound.evidence.orbitcert import load_orbit_certificate, save_orbit_certificate
from advbound.functions.rowbasis import expand_gamma, row_basis
from advbound.functions.rowfamily import position_search_family
from advbound.programs.rowsub import densest_subfamily, pair_orbit_count, restriction_difference
from advbound.programs.rowsym import formulate_rows, solve_rows
from advbound.programs.solve import solve

ROOT = os.path.join(os.path.dirname(__file__), "..")
ENVELOPE = os.path.join(ROOT, "instances", "studies", "envelope.toml")


@pytest.fixture(scope="module")
def or4_t8():
    """OR of 4 position-search rows, Σk = 8, at most one row of value 1 (175 inputs, 3.31089 from the dense
    program: tests/test_rowsym.py::test_reference_values_at_T8)."""
    return position_search_family("or", 4, 8, max_ones=1)


@pytest.fixture(scope="module")
def solved_sub(or4_t8):
    return solve_rows(or4_t8, subdomain=150)


def test_pair_orbit_counts_add_up_to_the_program(or4_t8):
    """Σ over content pairs of the tables between them = the pair orbits the representative set finds."""
    fam = or4_t8
    total = sum(pair_orbit_count(fam, i, j) for i in range(len(fam.contents)) for j in range(i))
    assert total == formulate_rows(fam).n_weights


def test_densest_subfamily_keeps_the_budget_and_is_a_restriction(or4_t8):
    masses = np.linspace(1.0, 2.0, len(or4_t8.contents))
    sub, info = densest_subfamily(or4_t8, 150, masses)
    assert restriction_difference(sub, or4_t8) is None
    assert info["weights"] == formulate_rows(sub).n_weights <= 150
    assert info["contents"] == len(sub.contents) < len(or4_t8.contents) and info["inputs"] == sub.size
    assert set(sub.outputs) == {"0", "1"}
    heaviest = int(np.argmax(masses))
    assert or4_t8.contents[heaviest] in sub.contents     # taken first
    whole, info = densest_subfamily(or4_t8, 10 ** 6, masses)
    assert whole.contents == or4_t8.contents and info["mass"] == pytest.approx(masses.sum())


def test_sub_domain_bound_is_the_restricted_functions_dense_value(or4_t8, solved_sub):
    """The reported lower bound equals ADV± of the restricted function (dense program, computed here) and
    stays below the whole family's 3.31089 (restriction never raises the bound: common knowledge)."""
    r = solved_sub
    assert r.status == "inaccurate" and r.upper is None and r.domain_size == or4_t8.size
    kept = r.certificate.metadata["subdomain"]
    assert kept["weights"] <= 150 and kept["of_inputs"] == or4_t8.size and kept["inputs"] < or4_t8.size
    sub = r.certificate.family()
    assert restriction_difference(sub, or4_t8) is None
    f, _ = expand_gamma(row_basis(sub), np.zeros(kept["weights"]))
    dense = solve(f, method="dense", solver="CLARABEL")
    assert r.lower == pytest.approx(dense.lower, rel=1e-5)
    assert r.lower <= 3.31089 + 1e-5
    assert r.lower > 0.9 * 3.31089                           # the densest contents keep most of it


def test_restriction_difference_names_what_differs(or4_t8):
    other = position_search_family("or", 4, 8)                 # the full domain has more contents
    assert restriction_difference(or4_t8, other) is None
    assert "not in the family" in restriction_difference(other, or4_t8)
    flipped = or4_t8.__class__(or4_t8.letters, or4_t8.contents[:1], ("1",), or4_t8.costs)
    assert "has output '1'" in restriction_difference(flipped, or4_t8)


@pytest.mark.parametrize("budget,match", [(0, "at least 1"), (1, "one output only")])
def test_bad_budgets_are_refused(or4_t8, budget, match):
    with pytest.raises(InvalidFunctionError, match=match):
        densest_subfamily(or4_t8, budget, np.ones(len(or4_t8.contents)))


def test_verify_against_accepts_the_restriction_only_as_such(solved_sub, tmp_path, capsys):
    """``verify --against``: a sub-domain certificate matches its instance as a restriction (lower bound
    only); the same file without the sub-domain claim is refused (not the same function); one whose
    restricted function is not part of the instance's is refused too."""
    path = tmp_path / "sub.npz"
    save_orbit_certificate(solved_sub.certificate, path)
    args = ["verify", str(path), "--against", ENVELOPE, "--set", "T=8", "--set", "rows=4"]
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "a restriction of the function" in out and "upper bound only for the restriction" in out
    assert main(args + ["--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["against"]["restriction"] is True and d["verified"] is True
    cert = load_orbit_certificate(path)
    meta = {k: v for k, v in cert.metadata.items() if k != "subdomain"}
    plain = tmp_path / "plain.npz"
    save_orbit_certificate(cert.__class__(**{**cert.__dict__, "metadata": meta}), plain)
    assert main(["verify", str(plain), "--against", ENVELOPE, "--set", "T=8", "--set", "rows=4"]) == 1
    assert "missing from the certificate" in capsys.readouterr().out
    assert main(["verify", str(path), "--against", ENVELOPE, "--set", "T=8", "--set", "rows=3"]) == 1
    assert "not this instance's function" in capsys.readouterr().out


def test_a_budget_holding_everything_solves_the_whole_family(or4_t8):
    """No restriction is made when every content fits: the exact result, 3.31089, with its upper bound."""
    r = solve_rows(or4_t8, subdomain=10 ** 6)
    assert r.status == "optimal" and "subdomain" not in r.certificate.metadata
    assert r.lower == pytest.approx(3.31089, abs=2e-5) and r.upper == pytest.approx(3.31089, abs=2e-5)


def test_subdomain_passes_through_solve():
    """``solve(f, subdomain=K)`` on the built function (method auto picks the row program)."""
    from advbound.functions.builders import position_search_composition

    r = solve(position_search_composition("or", 4, 5, 8, max_ones=1), subdomain=150)
    assert r.status == "inaccurate" and r.upper is None and r.certificate.metadata["subdomain"]["weights"] <= 150


def test_a_study_with_a_sub_domain_stores_a_lower_bound_only(tmp_path, monkeypatch, capsys):
    """``options = { subdomain = K }`` end to end: the stored row has the lower bound, no upper bound, the
    whole function's |D|, and a certificate that ``verify --against`` the study accepts as a restriction."""
    from advbound.studies.store import Store

    text = open(ENVELOPE).read()
    head = text[:text.index("[grid]")]
    study = tmp_path / "sub.toml"
    study.write_text(head + '[grid]\nT = [8]\nrows = [4]\n\n[study]\nname = "sub"\nbounds = ["general"]\n'
                     'options = { subdomain = 150 }\n')
    monkeypatch.chdir(tmp_path)
    store = tmp_path / "sub.sqlite"
    assert main(["study", str(study), "--store", str(store), "--certificates", str(tmp_path / "certs"),
                 "--quiet", "--no-report"]) == 0
    with Store(str(store), readonly=True) as st:
        (row,) = st.rows()
        cert = st.certificate_path(row)
    assert row.status == "inaccurate" and row.upper is None and row.domain_size == 175
    assert 0.9 * 3.31089 < row.lower <= 3.31089 + 1e-5
    capsys.readouterr()
    assert main(["verify", cert, "--against", str(study), "--set", "T=8", "--set", "rows=4"]) == 0
    assert "a restriction of the function" in capsys.readouterr().out


def test_cli_solve_subdomain(capsys):
    args = ["solve", ENVELOPE, "--set", "T=8", "--set", "rows=4"]
    assert main(args + ["--subdomain", "150", "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["status"] == "inaccurate" and d["upper"] is None and d["method"] == "rows"
    assert 0.9 * 3.31089 < d["lower"] <= 3.31089 + 1e-5 and "sub-domain of" in d["message"]
    for extra, match in ((["--subdomain", "0"], "positive number of pair orbits"),
                         (["--subdomain", "150", "--method", "dense"], "row-symmetric program")):
        assert main(args + extra) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and match in err[0]
