"""A researcher's Γ on a function with interchangeable rows, evaluated once per pair orbit.

When a callable ``Γ(x, y, **params)`` is invariant under permuting the rows (the same value for
``(σx, σy)`` as for ``(x, y)``, for every row permutation σ), it is fixed by one value per S_n-orbit
of pairs, and its bound ``‖Γ‖ / max_j ‖Γ∘Δ_j‖/c_j`` can be computed from the representative set of
:mod:`advbound.functions.rowbasis` without ever listing the inputs:

* each pair orbit is evaluated at one representative pair, in both orders (Γ is symmetrised:
  ``(Γ(x, z) + Γ(z, x)) / 2``; the report counts the orbits where the two differ);
* invariance is *checked* on random pairs (a random pair orbit and a random row permutation
  applied to both inputs) and a callable that fails is refused with the pair it failed on;
* ``‖Γ‖`` is bounded below by ``δᵀΓδ/δᵀδ`` for the invariant ``δ = √ρ`` that maximises it among
  invariant vectors with ``δ ≥ 0`` when Γ is non-negative (the Perron vector of the orbit-level
  matrix; with negative entries the absolute values of the top eigenvector, still a valid
  vector);
* each ``‖Γ∘Δ_(n,p)‖`` is the largest generalised eigenvalue of the blocks (the same numbers
  :func:`advbound.evidence.orbitcheck.orbit_lower_bound` computes for solved orbit certificates).

The result can be saved as an orbit certificate (without a dual) and re-checked by
``advbound verify``.  What this rests on is what a solved orbit certificate rests on
(docs/symmetry.md): float LAPACK on the blocks and the completeness of the representative set,
checked by the dimension count.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np

from advbound.evidence.gammainput import call_gamma, check_params
from advbound.evidence.orbitcheck import basis_checks, orbit_lower_bound
from advbound.evidence.orbitquotient import check_row_invariance

__all__ = ["OrbitGammaReport", "orbit_gamma", "INVARIANCE_SAMPLES"]

#: Random (pair orbit, row permutation) samples of the invariance check.
INVARIANCE_SAMPLES = 200


@dataclasses.dataclass(frozen=True, eq=False)
class OrbitGammaReport:
    """What an invariant Γ proves, computed by orbits.

    ``lower`` is ``gamma_lower / max_p (position_norms[p] / c_p)``; ``passed`` is False when a basis
    check failed (then ``lower`` is not a proved bound).  ``gamma`` (one value per pair orbit of
    ``basis``) and ``rho`` (one per content) are what a certificate stores.
    """

    lower: float
    gamma_lower: float
    position_norms: tuple
    binding: int
    inputs: int
    orbits: int
    pair_orbits: int
    calls: int
    invariance_samples: int
    asymmetric_orbits: int
    checks: tuple
    gamma: np.ndarray
    rho: np.ndarray
    seconds: dict

    @property
    def passed(self) -> bool:
        return all(ok for _, ok, _ in self.checks)


def _words(fam, key) -> tuple[str, str]:
    x = "".join(fam.letters[a] for a, _ in key)
    z = "".join(fam.letters[b] for _, b in key)
    return x, z


def _check_invariance(fam, func, kw, label, keys, samples, rng) -> int:
    """Row invariance of ``func`` on ``samples`` random pair orbits (see :func:`check_row_invariance`)."""
    if fam.n < 2 or not keys:
        return 0
    picked = []
    for _ in range(samples):
        key = keys[int(rng.integers(len(keys)))]
        cells = tuple((pair, 1) for pair in key)
        picked.append((cells, call_gamma(func, *_words(fam, key), kw, label)))
    return check_row_invariance(fam, func, kw, label, picked, rng)


def _test_vector(basis, gamma: np.ndarray) -> np.ndarray:
    """``ρ`` (one value per content, ``Σ m_r ρ_r = 1``) of the best non-negative invariant δ = √ρ."""
    m = basis.input_counts
    cx, cz = basis.end_contents()
    R = m.size
    S = np.zeros((R, R))
    vals = basis.pair_counts * gamma / np.sqrt(m[cx] * m[cz])
    np.add.at(S, (cx, cz), vals)
    S = S + S.T
    ev, vec = np.linalg.eigh(S)
    e = np.abs(vec[:, int(np.argmax(ev))])
    d = e / np.sqrt(m)
    rho = d * d
    total = float(m @ rho)
    return rho / total if total > 0 else np.full(R, 1.0 / m.sum())


def orbit_gamma(fam, func, params=None, *, basis=None, samples: int = INVARIANCE_SAMPLES, seed: int = 0,
                name: str | None = None) -> OrbitGammaReport:
    """Evaluate the invariant callable ``func(x, y, **params)`` on the row family ``fam`` by orbits.

    ``basis`` is ``row_basis(fam)`` when the caller has built it.  Raises
    :class:`~advbound.evidence.gammainput.GammaError` for a callable that fails, returns a
    non-number, or is not invariant under permuting rows on one of ``samples`` random checks.
    """
    from advbound.functions.rowbasis import row_basis

    label = name or getattr(func, "__qualname__", None) or repr(func)
    kw = check_params(func, params, name=name)
    t0 = time.perf_counter()
    if basis is None:
        basis = row_basis(fam)
    t1 = time.perf_counter()
    built = basis.build_time or (t1 - t0)
    keys = basis.pair_keys
    gamma = np.empty(len(keys))
    asym = 0
    for k, key in enumerate(keys):
        x, z = _words(fam, key)
        a, b = call_gamma(func, x, z, kw, label), call_gamma(func, z, x, kw, label)
        asym += a != b
        gamma[k] = (a + b) / 2.0
    checked = _check_invariance(fam, func, kw, label, keys, samples, np.random.default_rng(seed))
    t2 = time.perf_counter()
    rho = _test_vector(basis, gamma)
    red = orbit_lower_bound(basis, gamma, rho)
    t3 = time.perf_counter()
    norms = np.asarray(red["position_norms"]) / np.asarray(fam.costs)
    return OrbitGammaReport(lower=float(red["lower"]), gamma_lower=float(red["gamma_lower"]),
                            position_norms=tuple(red["position_norms"]), binding=int(np.argmax(norms)),
                            inputs=int(fam.size), orbits=len(fam.contents), pair_orbits=len(keys),
                            calls=2 * len(keys) + 2 * checked, invariance_samples=checked, asymmetric_orbits=int(asym),
                            checks=tuple(basis_checks(basis)), gamma=gamma, rho=rho,
                            seconds={"basis": built, "evaluate": t2 - t1, "norms": t3 - t2})
