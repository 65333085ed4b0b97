"""The Schur-test refit of Γ from the minimax weights (:mod:`advbound.programs.minimax_refit`).

Sources: the Collatz–Wielandt bound (``Aσ ≤ cσ`` with ``σ > 0`` and ``A ≥ 0`` gives ``‖A‖ ≤ c``) is
common knowledge; the values are compared with the dense positive program (an independent
formulation of ADV, "All quantum adversary methods are equivalent", 2006, arXiv:quant-ph/0409116)
and with the weights' own upper bound.
"""

import dataclasses

import numpy as np
import pytest

import advbound.programs.minimax_transport as mt
from advbound.evidence.orbitquotient import support_norms
from advbound.functions.rowbasis import expand_gamma, row_basis
from advbound.functions.rowfamily import position_search_family
from advbound.programs.minimax import gamma_from_multipliers, solve_minimax_rows
from advbound.programs.minimax_refit import refit_gamma
from advbound.programs.solve import solve


def _disturbed(fam, pt, spread=1.0):
    """The multipliers, each scaled by a random factor in ``[1, 1 + spread]`` (seeded), then rescaled
    so that every content pair keeps its total: the mass per input, and so δ, does not change."""
    rng = np.random.default_rng(0)
    index = {c: r for r, c in enumerate(fam.contents)}
    pair = np.array([index[tuple(sorted(a for a, _ in key))] * len(index) + index[tuple(sorted(b for _, b in key))]
                     for key in pt.keys.tolist()])
    mu = pt.multipliers * (1.0 + spread * rng.random(pt.multipliers.size))
    before, after = np.bincount(pair, pt.multipliers), np.bincount(pair, mu)
    return mu * (before[pair] / after[pair])


@pytest.mark.parametrize("n,T,max_ones", [(3, 6, None), (4, 6, 1)])
def test_refit_reaches_the_dense_value(n, T, max_ones):
    fam = position_search_family("or", n, T, max_ones)
    basis = row_basis(fam)
    f, _ = expand_gamma(basis, np.zeros(basis.n_weights))
    dense = solve(f, bound="positive", method="dense", solver="CLARABEL")
    pt = mt.solve_transport(fam)
    _, rho = gamma_from_multipliers(fam, pt.keys, pt.multipliers)
    g = refit_gamma(fam, pt.keys, pt.weights, rho)
    lower = support_norms(fam, pt.keys, g)["lower"]
    assert lower <= dense.upper * (1 + 1e-6)
    assert lower == pytest.approx(dense.lower, rel=1e-5)


def test_refit_recovers_what_disturbed_multipliers_lose():
    fam = position_search_family("or", 5, 10, max_ones=1)
    pt = mt.solve_transport(fam)
    mu = _disturbed(fam, pt)
    g, rho = gamma_from_multipliers(fam, pt.keys, mu)
    assert np.allclose(rho, gamma_from_multipliers(fam, pt.keys, pt.multipliers)[1])
    poor = support_norms(fam, pt.keys, g)["lower"]
    again = support_norms(fam, pt.keys, refit_gamma(fam, pt.keys, pt.weights, rho))["lower"]
    assert poor < (1 - 1e-3) / pt.phi                     # the disturbance costs the multipliers' Γ
    assert again == pytest.approx(1 / pt.phi, rel=2e-5)   # the weights and δ are enough
    assert again <= (1 + 1e-9) / pt.phi


def test_the_solve_falls_back_on_the_refit_when_the_multipliers_fall_short(monkeypatch):
    real = mt.solve_transport

    def disturbed(fam, tol=1e-6, verbose=False):
        pt = real(fam, tol)
        return dataclasses.replace(pt, multipliers=_disturbed(fam, pt))

    monkeypatch.setattr(mt, "solve_transport", disturbed)
    r = solve_minimax_rows(position_search_family("or", 5, 10, max_ones=1))
    assert r.status == "optimal", r.message
    assert r.certificate.metadata["minimax"]["gamma"] == "Schur-test refit"
    assert (r.upper - r.lower) / r.upper < 2e-5
    assert r.verification.dense_lower is not None           # 756 inputs: checked densely as well
