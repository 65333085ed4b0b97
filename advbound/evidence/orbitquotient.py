"""The bound of a row-invariant Γ from quotient matrices: no inputs listed, no representative set.

For a function of ``n`` interchangeable rows (:class:`~advbound.functions.rowfamily.RowFamily`) and
a Γ that is invariant under permuting rows, this module computes a certified lower bound
``‖Γ‖ / max_p ‖Γ∘Δ_(n,p)‖ / c_p`` on ADV± from one value of Γ per pair orbit:

* **Pair orbits** are listed content pair by content pair: for contents ``c_x`` and ``c_z`` (with
  different outputs) the orbits of pairs are the tables with row sums the letter multiplicities of
  ``c_x`` and column sums those of ``c_z``.  Orbit ``k`` holds ``N_k = n! / Π_cells t!`` pairs; the
  check ``pair_count`` compares ``Σ_k N_k`` with ``Σ |c_x|·|c_z|`` (every pair is counted once).
* **‖Γ‖ from below**: any vector gives ``|δᵀΓδ| / δᵀδ ≤ ‖Γ‖``.  For δ constant on contents this is
  the Rayleigh quotient of an ``R × R`` matrix (R contents); δ is its top eigenvector, or its
  absolute values, whichever gives more (for Γ ≥ 0 that is the Perron vector and the bound is
  ``‖Γ‖`` itself; with negative entries the top eigenvector of Γ need not be row-invariant, so the
  bound can be below ``‖Γ‖``).
* **‖Γ∘Δ_(n,p)‖ from above**: ``‖M‖ ≤ ‖|M|‖`` for any matrix, and for the non-negative matrix
  ``|Γ|∘Δ_(n,p)``, which is invariant under the permutations of the first ``n − 1`` rows, the
  largest eigenvalue is that of its quotient over the orbits ``(last letter, content)``: the
  partition into those orbits is equitable and the Perron vector is constant on them
  (Perron–Frobenius; common knowledge).  So the upper bound is exact for Γ ≥ 0 and holds for any Γ.

Work is linear in the number of pair orbits (2.6 million for OR of 12 rows at T = 24 with at most
one row of value 1, whose 17.6 million inputs are never listed); the matrices have as many rows as
there are contents (348 there) or ``(letter, content)`` orbits.  All arithmetic is float64; the
largest eigenvalues come from LAPACK on matrices of a few thousand rows.  What this does *not*
give: an exact norm of Γ∘Δ for a Γ with negative entries (use the representative set of
:mod:`advbound.evidence.orbitgamma` for that), or rational certainty.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections import Counter

import numpy as np

from advbound.evidence.gammainput import GammaError, call_gamma, check_params

__all__ = ["QuotientReport", "quotient_gamma", "support_norms", "pair_tables", "check_row_invariance",
           "last_letter_orbits"]


@dataclasses.dataclass(frozen=True, eq=False)
class QuotientReport:
    """What an invariant Γ proves, from quotient matrices.

    ``lower = gamma_lower / max_p (position_upper[p] / c_p)``.  ``exact_norms`` is True when Γ had
    no negative value (then ``position_upper`` are the norms themselves).  ``passed`` is False when
    the pair count disagreed (then ``lower`` is not a proved bound).
    """

    lower: float
    gamma_lower: float
    position_upper: tuple
    binding: int
    exact_norms: bool
    inputs: int
    orbits: int
    pair_orbits: int
    calls: int
    invariance_samples: int
    asymmetric_orbits: int
    checks: tuple
    seconds: dict

    @property
    def passed(self) -> bool:
        return all(ok for _, ok, _ in self.checks)


def pair_tables(xm: list, zm: list):
    """Every table with row sums ``xm`` and column sums ``zm`` (lists of ``(letter, multiplicity)``),
    as tuples of ``((a, b), count)`` cells with ``count > 0``, in a fixed order.

    >>> len(list(pair_tables([(0, 2), (1, 1)], [(2, 1), (3, 2)])))
    2
    """
    zl = [b for b, _ in zm]

    def rows(i, cap, acc):
        if i == len(xm):
            yield tuple(acc)
            return
        a, m = xm[i]
        for split in _splits(m, cap):
            cells = [((a, zl[t]), d) for t, d in enumerate(split) if d]
            yield from rows(i + 1, [c - d for c, d in zip(cap, split)], acc + cells)

    yield from rows(0, [m for _, m in zm], [])


def _splits(m: int, cap: list):
    """Ways to write ``m`` as a sum of ``len(cap)`` parts with part ``j`` at most ``cap[j]``."""
    if not cap:
        if m == 0:
            yield ()
        return
    rest = sum(cap[1:])
    for d in range(max(0, m - rest), min(cap[0], m) + 1):
        for tail in _splits(m - d, cap[1:]):
            yield (d,) + tail


def _words(fam, cells) -> tuple[str, str]:
    x = "".join(fam.letters[a] for (a, _), t in cells for _ in range(t))
    z = "".join(fam.letters[b] for (_, b), t in cells for _ in range(t))
    return x, z


class _Reservoir:
    """A uniform random sample of ``size`` items from a stream (for the invariance check)."""

    def __init__(self, size: int, rng):
        self.size, self.rng, self.items, self.seen = size, rng, [], 0

    def offer(self, item) -> None:
        self.seen += 1
        if len(self.items) < self.size:
            self.items.append(item)
        else:
            j = int(self.rng.integers(self.seen))
            if j < self.size:
                self.items[j] = item


def check_row_invariance(fam, func, kw, label, sample, rng) -> int:
    """Compare Γ at a random row permutation of each sampled pair with its value there; return the count.

    ``sample`` holds ``(cells, value)``: a pair orbit as table cells ``((a, b), count)`` and
    ``func`` at its representative pair.  Raises a one-line GammaError at the first difference.
    """
    n = fam.n
    for cells, v0 in sample:
        key = [pair for pair, t in cells for _ in range(t)]
        perm = rng.permutation(n)
        moved = [key[i] for i in perm]
        x = "".join(fam.letters[a] for a, _ in moved)
        z = "".join(fam.letters[b] for _, b in moved)
        v = call_gamma(func, x, z, kw, label)
        if not math.isclose(v, v0, rel_tol=1e-9, abs_tol=1e-12 * max(1.0, abs(v0))):
            x0, z0 = _words(fam, cells)
            raise GammaError(f"gamma callable {label} is not invariant under permuting rows: "
                             f"gamma({x0!r}, {z0!r}) = {v0!r} but gamma({x!r}, {z!r}) = {v!r} (the same rows in "
                             f"the order {tuple(int(i) + 1 for i in perm)}); evaluate it on the full domain "
                             f"instead (without --orbits)")
    return len(sample)


def _top(W: np.ndarray, sizes: np.ndarray) -> tuple[float, np.ndarray]:
    """Largest eigenvalue and its eigenvector of ``W / √(sizes sizesᵀ)`` (symmetric)."""
    s = np.sqrt(sizes)
    S = W / s[:, None] / s[None, :]
    ev, vec = np.linalg.eigh((S + S.T) / 2.0)
    i = int(np.argmax(ev))
    return float(ev[i]), vec[:, i]


def last_letter_orbits(fam) -> tuple[np.ndarray, dict, np.ndarray]:
    """The orbits of the stabiliser of the last row: ``(sizes, index, osizes)``.

    ``sizes[r]`` the inputs of content ``r``; ``index[(a, r)]`` the number of the orbit of inputs of
    content ``r`` whose last row holds letter ``a``, and ``osizes`` its size ``sizes[r]·m_r(a)/n``.
    """
    n = fam.n
    mult = [Counter(c) for c in fam.contents]
    sizes = np.array([fam.orbit_size(c) for c in fam.contents], dtype=float)
    index: dict = {}
    for r, m in enumerate(mult):
        for a in sorted(m):
            index[(a, r)] = len(index)
    osizes = np.empty(len(index))
    for (a, r), u in index.items():
        osizes[u] = sizes[r] * mult[r][a] / n
    return sizes, index, osizes


class _QuotientSums:
    """The quotient matrices of an invariant Γ, summed pair orbit by pair orbit.

    ``A[i, j]`` is the sum of Γ over the pairs of contents ``i`` and ``j``; ``W[p]`` the sum of
    ``|Γ|∘Δ_(n,p)`` over the ``(last letter, content)`` orbits.  :meth:`norms` turns them into the
    bound described in the module docstring.
    """

    def __init__(self, fam):
        self.fam = fam
        self.sizes, self.orbit_index, self.osizes = last_letter_orbits(fam)
        R, O = len(fam.contents), len(self.orbit_index)
        self.A = np.zeros((R, R))
        self.W = np.zeros((fam.row_length, O, O))
        self.differ: dict = {}
        self.negative = False

    def add(self, i: int, j: int, cells, g: float, N: float) -> None:
        """Add pair orbit ``cells`` (``((a, b), count)``) of contents ``i``, ``j``, with ``N`` pairs and value ``g``."""
        fam, n = self.fam, self.fam.n
        self.negative |= g < 0
        self.A[i, j] += N * g
        for (a, b), t in cells:
            ps = self.differ.get((a, b))
            if ps is None:
                ps = self.differ[(a, b)] = [p for p in range(fam.row_length) if fam.differ(p, a, b)]
            if ps:
                self.W[ps, self.orbit_index[(a, i)], self.orbit_index[(b, j)]] += abs(g) * N * t / n

    def norms(self) -> dict:
        """``lower``, ``gamma_lower``, ``position_upper``, ``binding`` and ``exact_norms``."""
        S, sizes = self.A + self.A.T, self.sizes
        _, vec = _top(S, sizes)
        gamma_lower = 0.0
        for d in (vec / np.sqrt(sizes), np.abs(vec) / np.sqrt(sizes)):   # any vector gives a lower bound
            den = float(sizes @ (d * d))
            if den > 0:
                gamma_lower = max(gamma_lower, abs(float(d @ S @ d)) / den)
        upper = [(_top(Wp + Wp.T, self.osizes)[0] if Wp.any() else 0.0) for Wp in self.W]
        scaled = np.asarray(upper) / np.asarray(self.fam.costs, dtype=float)
        worst = float(scaled.max())
        return {"lower": gamma_lower / worst if worst > 0 else 0.0, "gamma_lower": gamma_lower,
                "position_upper": [float(u) for u in upper], "binding": int(np.argmax(scaled)),
                "exact_norms": not self.negative}


def quotient_gamma(fam, func, params=None, *, samples: int = 200, seed: int = 0,
                   name: str | None = None) -> QuotientReport:
    """Evaluate the row-invariant callable ``func(x, y, **params)`` on ``fam`` (see the module docstring).

    Raises :class:`~advbound.evidence.gammainput.GammaError` for a callable that fails, returns a
    non-number, or changes value under a row permutation on one of ``samples`` random checks.
    """
    label = name or getattr(func, "__qualname__", None) or repr(func)
    kw = check_params(func, params, name=name)
    n, R = fam.n, len(fam.contents)
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    mult = [sorted(Counter(c).items()) for c in fam.contents]
    sums = _QuotientSums(fam)
    sizes = sums.sizes
    res = _Reservoir(samples, rng)
    K = asym = 0
    total = expected = 0.0
    fact = [math.factorial(i) for i in range(n + 1)]
    rank = {y: i for i, y in enumerate(fam.labels)}
    for i in range(R):
        for j in range(R):
            if rank[fam.outputs[i]] >= rank[fam.outputs[j]]:
                continue
            expected += sizes[i] * sizes[j]
            for cells in pair_tables(mult[i], mult[j]):
                x, z = _words(fam, cells)
                v1, v2 = call_gamma(func, x, z, kw, label), call_gamma(func, z, x, kw, label)
                asym += v1 != v2
                g = (v1 + v2) / 2.0
                K += 1
                N = fact[n] / math.prod(fact[t] for _, t in cells)
                total += N
                res.offer((cells, v1))
                if g != 0.0:
                    sums.add(i, j, cells, g, N)
    checked = check_row_invariance(fam, func, kw, label, res.items, rng)
    t1 = time.perf_counter()
    ok = math.isclose(total, expected, rel_tol=1e-12)
    checks = (("pair_count", ok, f"the pair orbits hold {total:.17g} pairs; the contents give {expected:.17g}"),)
    q = sums.norms()
    t2 = time.perf_counter()
    return QuotientReport(lower=q["lower"], gamma_lower=q["gamma_lower"],
                          position_upper=tuple(q["position_upper"]), binding=q["binding"], exact_norms=q["exact_norms"],
                          inputs=int(fam.size), orbits=R, pair_orbits=K, calls=2 * K + checked,
                          invariance_samples=checked, asymmetric_orbits=int(asym), checks=checks,
                          seconds={"evaluate": t1 - t0, "norms": t2 - t1})


def support_norms(fam, pair_keys, gamma) -> dict:
    """The quotient bound of the invariant Γ that is ``gamma[k]`` on pair orbit ``pair_keys[k]`` and 0 elsewhere.

    ``pair_keys`` is ``(K, n, 2)`` letter pairs (the orbit-certificate layout; each key sorted, its first
    letters a content with a smaller output than its second).  Only the listed orbits are visited, so
    the work is linear in ``K``.  Returns ``lower``, ``gamma_lower`` (from the best content-constant
    test vector: ``‖Γ‖`` itself when Γ ≥ 0), ``position_upper`` (``‖|Γ|∘Δ_(n,p)‖``, exact for Γ ≥ 0),
    ``binding`` and ``exact_norms``.
    """
    n = fam.n
    index = {c: r for r, c in enumerate(fam.contents)}
    fact = [math.factorial(i) for i in range(n + 1)]
    sums = _QuotientSums(fam)
    for key, g in zip(np.asarray(pair_keys, dtype=np.int64).tolist(), np.asarray(gamma, dtype=float).tolist()):
        if g == 0.0:
            continue
        i, j = index[tuple(sorted(a for a, _ in key))], index[tuple(sorted(b for _, b in key))]
        cells = Counter(tuple(p) for p in key)
        sums.add(i, j, list(cells.items()), g, fact[n] / math.prod(fact[t] for t in cells.values()))
    return sums.norms()
