"""The row-symmetric program's other solver paths, and how solve_rows combines its attempts.

Reference values: ADV± of OR of 3 position-search rows with k1 + k2 + k3 = 7 is 2.858167 (the dense
program, README's scaling table); the dense program of advbound.programs.solve is the outside check
for the other instances.
"""

import dataclasses

import numpy as np
import pytest

import advbound.programs.rowsym as rowsym
from advbound.evidence.orbitcert import load_orbit_certificate, save_orbit_certificate
from advbound.errors import InvalidFunctionError, SolverError
from advbound.evidence.orbitcheck import orbit_upper_bound, verify_orbit_certificate
from advbound.functions.builders import position_search_composition
from advbound.functions.rowfamily import position_search_family
from advbound.programs.minimax import solve_minimax_rows
from advbound.programs.solve import solve

OR3_T7 = 2.858167


@pytest.mark.parametrize("kw", [{"orbit_totals": True}, {"merge": "parent_child"}, {"reference": "disturbed"}])
def test_other_solver_paths_reach_the_dense_value(kw):
    f = position_search_composition("or", 3, None, 6)
    dense = solve(f, method="dense", solver="CLARABEL")
    prog = rowsym.formulate_rows(position_search_family("or", 3, 6, None))
    if kw.get("reference") == "disturbed":     # rescaled to a point off the optimum by up to 10x per density
        x = rowsym.solve_reduced(prog).x.copy()
        x[prog.n_weights:] *= 10.0 ** np.random.default_rng(2).uniform(-1, 1, x.size - prog.n_weights)
        kw = {"reference": x}
    pt = rowsym.solve_reduced(prog, **kw)
    value = 2.0 * prog.pair_counts @ pt.x[:prog.n_weights]
    assert value == pytest.approx(dense.lower, rel=1e-5)
    # the dual matrices (mapped back from a rescaled cone where there is one) bound the same optimum
    upper = orbit_upper_bound(prog.basis, "general", pt.duals)["upper"]
    assert dense.lower - 1e-6 <= upper <= dense.lower * (1 + 1e-5)


def test_a_poor_first_point_is_rescaled_and_nothing_more_is_tried(monkeypatch):
    def poor(pt):                    # a valid but poor Γ and duals far from optimal, "almost solved"
        x = pt.x.copy()
        x[:-1] *= 1.0 + 0.2 * np.random.default_rng(4).random(x.size - 1)
        duals = [Z + np.eye(len(Z)) for Z in pt.duals]
        return dataclasses.replace(pt, x=x, duals=duals, status="optimal_inaccurate", raw_status="AlmostSolved")

    calls = _scripted(monkeypatch, [poor, lambda pt: pt])
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    assert len(calls) == 2 and "reference" in calls[1]
    attempts = r.certificate.metadata["attempts"]
    assert [a["settings"] for a in attempts] == ["default", "rescaled_from=0"]
    assert attempts[0]["lower"] < OR3_T7 - 1e-3
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6) and r.upper == pytest.approx(OR3_T7, abs=2e-6)
    assert r.verification.passed


def test_without_any_point_the_positive_bound_gives_the_densities(monkeypatch):
    calls = _scripted(monkeypatch, [_failed, lambda pt: pt])
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    assert len(calls) == 2 and "reference" in calls[1]
    assert [a["settings"] for a in r.certificate.metadata["attempts"]] == ["default", "rescaled_from=positive bound"]
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6) and r.upper == pytest.approx(OR3_T7, abs=2e-6)


def test_the_guessed_densities_are_the_positive_certificates_test_vector():
    fam = position_search_family("or", 4, 8, 1)
    prog = rowsym.formulate_rows(fam)
    guess = rowsym.positive_densities(prog)
    positive = solve_minimax_rows(fam)
    assert np.all(guess[:prog.n_weights] == 0)
    assert np.allclose(guess[prog.n_weights:], positive.certificate.rho, rtol=1e-9, atol=0)


def test_rescaling_needs_a_point_with_densities():
    prog = rowsym.formulate_rows(position_search_family("or", 3, 5, None))
    with pytest.raises(SolverError, match="without positive densities"):
        rowsym.solve_reduced(prog, reference=np.zeros(prog.n_weights + len(prog.family.contents)))


def test_rescaling_is_a_congruence_by_the_reference_densities():
    prog = rowsym.formulate_rows(position_search_family("or", 3, 5, None))
    x = rowsym.solve_reduced(prog).x
    scale_x, cones = rowsym.rescaling(prog, x)
    K = prog.n_weights
    rho = x[K:]
    assert np.allclose(scale_x[K:], np.maximum(rho, rowsym.RESCALE_FLOOR * rho.max()))
    for (p, _side, bi), d in zip(prog.cone_keys(), cones):
        blk = prog.blocks[bi]
        G = prog.family.costs[p] * blk.gram * np.array([scale_x[K + row[1]] for row in blk.rows])[:, None]
        assert np.allclose(np.diag(d[:, None] * G * d[None, :]), 1.0)     # c_p·G(ρ̂) has unit diagonal


def _scripted(monkeypatch, edits):
    """Make solve_reduced's n-th call return the real point changed by ``edits[n]`` (the last one after)."""
    real = rowsym.solve_reduced
    calls = []

    def fake(prog, **kw):
        pt = real(prog, **kw)
        calls.append(kw)
        return edits[min(len(calls), len(edits)) - 1](pt)

    monkeypatch.setattr(rowsym, "solve_reduced", fake)
    return calls


def _failed(pt):
    return dataclasses.replace(pt, x=np.full_like(pt.x, np.nan), status="solver_error", raw_status="NumericalError")


def test_a_failed_first_solve_is_retried(monkeypatch, tmp_path):
    calls = _scripted(monkeypatch, [_failed, lambda pt: pt])
    monkeypatch.setattr(rowsym, "positive_densities", lambda prog: None)
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    # no point to rescale to and no densities to guess from, so the first setting of RETRIES; its
    # point is tight, so nothing more
    assert len(calls) == 2 and "reference" not in calls[1]
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6) and r.upper == pytest.approx(OR3_T7, abs=2e-6)
    attempts = r.certificate.metadata["attempts"]
    assert [a["status"] for a in attempts][0] == "NumericalError" and "lower" not in attempts[0]
    path = tmp_path / "or3.npz"
    save_orbit_certificate(r.certificate, path)
    rep = verify_orbit_certificate(load_orbit_certificate(path))
    assert rep.passed and rep.lower == pytest.approx(r.lower, rel=1e-9)


def test_lower_and_upper_may_come_from_different_attempts(monkeypatch):
    rng = np.random.default_rng(1)

    def spoil_gamma(pt):             # a valid but poor Γ, good duals
        x = pt.x.copy()
        x[:-1] *= 1.0 + 0.2 * rng.random(x.size - 1)
        return dataclasses.replace(pt, x=x, status="optimal_inaccurate", raw_status="AlmostSolved")

    def spoil_duals(pt):             # a good Γ, duals far from optimal (still PSD, so still a bound)
        duals = [Z + np.eye(len(Z)) for Z in pt.duals]
        return dataclasses.replace(pt, duals=duals, status="optimal_inaccurate", raw_status="AlmostSolved")

    _scripted(monkeypatch, [spoil_gamma, spoil_duals, _failed])
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    lo = [a.get("lower") for a in r.certificate.metadata["attempts"]]
    up = [a.get("upper") for a in r.certificate.metadata["attempts"]]
    assert lo[0] < OR3_T7 - 1e-3 and up[1] > OR3_T7 + 1e-3       # each attempt alone is poor on one side
    assert r.verification.passed
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6) and r.upper == pytest.approx(OR3_T7, abs=2e-6)


def test_without_retry_a_failed_solve_is_reported(monkeypatch):
    calls = _scripted(monkeypatch, [_failed])
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7), retry=False)
    assert len(calls) == 1 and r.status == "failed" and r.lower is None
    assert "NumericalError" in r.message and "\n" not in r.message


def test_no_retry_when_the_first_point_is_already_tight(monkeypatch):
    def almost(pt):                  # the real point, labelled as CLARABEL's "almost solved"
        return dataclasses.replace(pt, status="optimal_inaccurate", raw_status="AlmostSolved")

    calls = _scripted(monkeypatch, [almost])
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    assert len(calls) == 1 and "attempts" not in r.certificate.metadata
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6) and r.upper == pytest.approx(OR3_T7, abs=2e-6)


def test_the_first_solve_may_be_rescaled_to_the_positive_densities(monkeypatch):
    calls = _scripted(monkeypatch, [lambda pt: pt])
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7), first=rowsym.GUESS)
    assert len(calls) == 1 and "reference" in calls[0]
    assert r.certificate.metadata["first"] == "rescaled_from=positive bound"
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6) and r.upper == pytest.approx(OR3_T7, abs=2e-6)
    with pytest.raises(InvalidFunctionError, match="first 'guess' is unknown"):
        rowsym.solve_rows(position_search_composition("or", 3, 5, 7), first="guess")


def test_the_first_solve_setting_passes_through_solve():
    # a study's `options = { first = "positive bound" }` reaches solve_rows through solve(f, **options)
    r = solve(position_search_composition("or", 3, 5, 7), first=rowsym.GUESS)
    assert r.method == "rows" and r.certificate.metadata["first"] == "rescaled_from=positive bound"
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6)


def test_large_programs_start_from_the_positive_densities(monkeypatch):
    # the size rule, seen on a small program by lowering the threshold
    calls = _scripted(monkeypatch, [lambda pt: pt])
    monkeypatch.setattr(rowsym, "GUESS_WEIGHTS", 0)
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    assert "reference" in calls[0] and r.certificate.metadata["first"] == "rescaled_from=positive bound"
    assert r.lower == pytest.approx(OR3_T7, abs=2e-6)
    monkeypatch.setattr(rowsym, "GUESS_WEIGHTS", 10 ** 9)
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    assert "reference" not in calls[1] and "first" not in r.certificate.metadata


def test_a_program_beyond_the_memory_available_is_refused_in_one_line(monkeypatch):
    import advbound.functions.sizing as sizing
    from advbound.functions.sizing import TooLargeError

    f = position_search_composition("or", 3, 5, 7)
    est = rowsym.rows_estimate(rowsym.formulate_rows(position_search_family("or", 3, 7, None)))
    assert 0 < est["memory_bytes"] < 2 ** 30 and est["seconds"] > 0       # 10 cones of 66 and 54 rows
    monkeypatch.setattr(sizing, "memory_budget", lambda: {"available": 2 ** 20, "total": 2 ** 30, "source": "test"})
    with pytest.raises(TooLargeError, match="row-symmetric program .* needs about") as err:
        solve(f)
    assert "\n" not in str(err.value)
    assert solve(f, allow_large=True).lower == pytest.approx(OR3_T7, abs=2e-6)       # only logged
