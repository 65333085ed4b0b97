"""Cutting-plane refinement of a point of the row-symmetric program (advbound.programs.rowsym_refine).

Reference values: ADV± of OR of 4 position-search rows, Σ k_i = 8, at most one row of value 1, is
3.310888 (the dense program; README's envelope table), and of 3 rows with Σ k_i = 7 it is 2.858167.
"""

import dataclasses

import numpy as np
import pytest

import advbound.programs.rowsym as rowsym
from advbound.evidence.orbitcheck import verify_orbit_certificate
from advbound.functions.builders import position_search_composition
from advbound.functions.rowfamily import position_search_family
from advbound.programs.rowsym_refine import refine_lower

OR4_T8 = 3.310888
OR3_T7 = 2.858167


@pytest.fixture(scope="module")
def or4():
    prog = rowsym.formulate_rows(position_search_family("or", 4, 8, 1))
    return prog, rowsym.solve_reduced(prog)


def _spoiled(pt, K, eps, seed=0):
    x = pt.x.copy()
    x[:K] *= 1.0 + eps * np.random.default_rng(seed).standard_normal(K)
    return x


def test_refinement_recovers_the_optimum_from_a_disturbed_point(or4):
    prog, pt = or4
    r = refine_lower(prog, _spoiled(pt, prog.n_weights, 1e-3), rounds=30)
    assert r.lower_before < OR4_T8 - 1e-3                  # the disturbed Γ proves less ...
    assert r.lower == pytest.approx(OR4_T8, abs=2e-5)      # ... the refined one the optimum again
    assert r.lower <= OR4_T8 + 1e-6 and r.rounds == 30 and r.cuts > 0


def test_refinement_never_reports_less_than_its_start(or4):
    prog, pt = or4
    r = refine_lower(prog, _spoiled(pt, prog.n_weights, 1e-2, seed=3), rounds=3, trust=1e-9)
    assert r.lower >= r.lower_before


def test_solve_rows_refines_a_poor_point_and_the_certificate_checks(monkeypatch):
    real = rowsym.solve_reduced

    def poor(prog, **kw):             # every attempt returns the optimum with its weights disturbed
        pt = real(prog, **kw)
        x = _spoiled(pt, prog.n_weights, 1e-2)
        return dataclasses.replace(pt, x=x, status="optimal_inaccurate", raw_status="AlmostSolved")

    monkeypatch.setattr(rowsym, "solve_reduced", poor)
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7))
    info = r.certificate.metadata["refined"]
    assert info["lower_before"] < OR3_T7 - 1e-3 and info["lower"] > info["lower_before"]
    assert r.lower == pytest.approx(info["lower"], rel=1e-9) and r.lower <= OR3_T7 + 1e-6
    assert verify_orbit_certificate(r.certificate).passed


def test_no_refinement_without_the_flag(monkeypatch):
    real = rowsym.solve_reduced

    def poor(prog, **kw):
        pt = real(prog, **kw)
        return dataclasses.replace(pt, x=_spoiled(pt, prog.n_weights, 1e-2), status="optimal_inaccurate")

    monkeypatch.setattr(rowsym, "solve_reduced", poor)
    r = rowsym.solve_rows(position_search_composition("or", 3, 5, 7), refine=False)
    assert "refined" not in r.certificate.metadata and r.lower < OR3_T7 - 1e-3
