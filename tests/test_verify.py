"""Tests of advbound.evidence.verify against hand-made certificates whose bounds are derived in the docstrings."""

import math

import numpy as np
import pytest

from advbound.evidence.certificate import Certificate
from advbound.evidence.verify import extract_gamma, verify_certificate

from known_instances import boolean


def _or_cert(n, gamma=True, dual=True, **meta):
    """OR_n with the textbook Γ and dual witness.

    Γ[0^n, e_i] = 1 (and symmetric) has ||Γ|| = sqrt(n) and ||Γ∘Δ_j|| = 1, so the lower bound is sqrt(n).
    Dual: X_j = v_j v_jᵀ with v_j(0^n) = a, v_j(y) = 1/(a|y|) when y_j = 1, else 0, a² = n^{-1/2}:
    for y ≠ 0 the pair sum is sum_{j: y_j=1} a/(a|y|) = 1, the diagonal cost is n a² = sqrt(n) at 0^n and
    1/(a²|y|) <= sqrt(n) elsewhere, so t = sqrt(n) exactly.
    """
    f = boolean(n, any)
    idx = {x: i for i, x in enumerate(f.inputs)}
    size = f.size
    g = np.zeros((size, size))
    z = idx["0" * n]
    for i in range(n):
        e = idx["0" * i + "1" + "0" * (n - i - 1)]
        g[z, e] = g[e, z] = 1.0
    kw = {}
    if dual:
        a = n ** -0.25
        xp = np.zeros((n, size, size))
        for j in range(n):
            v = np.zeros(size)
            for x, k in idx.items():
                if x == "0" * n:
                    v[k] = a
                elif x[j] == "1":
                    v[k] = 1.0 / (a * x.count("1"))
            xp[j] = np.outer(v, v)
        kw = dict(dual_t=math.sqrt(n), dual_plus=xp)
    return Certificate(f.alphabet, f.inputs, f.outputs, np.asarray(f.costs), g if gamma else g * 0,
                       metadata=dict(bound="general", **meta), **kw)


class TestExtractGamma:
    """Tests for ``extract_gamma``."""

    def test_division(self):
        """Γ = W / (δδᵀ) with δ = sqrt(ρ): W = 0.25 off-diagonal, ρ = (1/4, 1/4) gives Γ = 1."""
        g = extract_gamma(np.array([[0, .25], [.25, 0]]), np.array([.25, .25]))
        assert g.tolist() == [[0.0, 1.0], [1.0, 0.0]]

    def test_outside_support(self):
        """Inputs with ρ = 0 (or solver noise below the threshold) get zero rows."""
        g = extract_gamma(np.array([[0, 1e-20], [1e-20, 0]]), np.array([1.0, 1e-30]))
        assert not g.any()


class TestVerify:
    """Tests for ``verify_certificate``."""

    @pytest.mark.parametrize("n", [2, 3, 4])
    def test_exact_or_certificate(self, n):
        """The textbook OR_n certificate (derived in ``_or_cert``) verifies with lower = upper = sqrt(n)."""
        rep = verify_certificate(_or_cert(n))
        assert rep.passed, rep.message
        assert rep.lower == pytest.approx(math.sqrt(n), rel=1e-12)
        assert rep.upper == pytest.approx(math.sqrt(n), rel=1e-12)
        assert rep.binding == tuple(range(n))
        assert rep.repair_cost == pytest.approx(0.0, abs=1e-12)

    def test_no_dual(self):
        """Without a witness only the lower bound is reported and the report still passes."""
        rep = verify_certificate(_or_cert(3, dual=False))
        assert rep.passed and rep.upper is None and rep.lower == pytest.approx(math.sqrt(3))

    def test_small_residual_repaired_stays_an_upper_bound(self):
        """A witness perturbed by 1e-7 is repaired; the result is still >= ADV±(OR_3) = sqrt(3) (weak duality)."""
        c = _or_cert(3)
        rng = np.random.default_rng(0)
        noise = rng.normal(scale=1e-7, size=c.dual_plus.shape)
        bad = Certificate(c.alphabet, c.inputs, c.outputs, c.costs, c.gamma, c.dual_t, c.dual_plus + noise,
                          metadata=c.metadata)
        rep = verify_certificate(bad)
        assert rep.passed, rep.message
        assert rep.dual_equality_residual > 1e-8 and rep.dual_residual_after < 1e-12
        assert math.sqrt(3) - 1e-12 <= rep.upper <= math.sqrt(3) + 1e-5

    def test_negative_eigenvalue_shifted(self):
        """Subtracting 1e-6·I from every X_j is repaired by a shift; the upper bound stays >= sqrt(3)."""
        c = _or_cert(3)
        xp = c.dual_plus - 1e-6 * np.eye(c.dual_plus.shape[1])
        rep = verify_certificate(Certificate(c.alphabet, c.inputs, c.outputs, c.costs, c.gamma, c.dual_t, xp,
                                             metadata=c.metadata))
        assert rep.passed
        assert min(rep.dual_min_eigenvalues) < -5e-7
        assert math.sqrt(3) - 1e-12 <= rep.upper <= math.sqrt(3) + 1e-4

    def test_corrupted_dual_rejected(self):
        """Halving the witness breaks the pair constraints badly: no upper bound, check dual_repair fails."""
        c = _or_cert(3)
        rep = verify_certificate(Certificate(c.alphabet, c.inputs, c.outputs, c.costs, c.gamma, c.dual_t,
                                             c.dual_plus * 0.5, metadata=c.metadata))
        assert not rep.passed and rep.upper is None
        assert "dual_repair" in rep.failed_checks()

    def test_equal_output_entries_flagged(self):
        """Γ that is non-zero on an equal-output pair fails ``equal_outputs`` but is zeroed for the ratio."""
        c = _or_cert(2, dual=False)
        g = c.gamma.copy()
        g[1, 2] = g[2, 1] = 5.0       # inputs 01 and 10 both have output 1
        rep = verify_certificate(Certificate(c.alphabet, c.inputs, c.outputs, c.costs, g, metadata=c.metadata))
        assert "equal_outputs" in rep.failed_checks()
        assert rep.zeroed_entries == 2 and rep.equal_output_mass == 5.0
        assert rep.lower == pytest.approx(math.sqrt(2))

    def test_claimed_lower_mismatch(self):
        """A certificate claiming more than its Γ gives (2 instead of sqrt(2)) fails ``claimed_lower``."""
        rep = verify_certificate(_or_cert(2, claimed_lower=2.0))
        assert rep.failed_checks() == ["claimed_lower"]

    def test_heavy_repair_is_still_an_upper_bound(self):
        """A witness scaled by 0.7 (pair sums 0.7) repaired with a loose limit still gives t >= sqrt(2)."""
        c = _or_cert(2)
        rep = verify_certificate(Certificate(c.alphabet, c.inputs, c.outputs, c.costs, c.gamma, 1.0,
                                             c.dual_plus * 0.7, metadata=c.metadata), repair_tol=10.0)
        assert rep.passed and rep.repair_cost > 0.01
        assert rep.upper >= math.sqrt(2) - 1e-12

    def test_positive_clips_negative_entries(self):
        """For the positive bound a clearly negative Γ entry fails ``nonnegative`` and is clipped."""
        c = _or_cert(2, dual=False)
        g = c.gamma.copy()
        g[0, 3] = g[3, 0] = -1.0
        rep = verify_certificate(Certificate(c.alphabet, c.inputs, c.outputs, c.costs, g, metadata=c.metadata),
                                 bound="positive")
        assert "nonnegative" in rep.failed_checks() and rep.negative_mass == 1.0
        assert rep.lower == pytest.approx(math.sqrt(2))

    def test_weighted_lower(self):
        """Costs divide the constraint norms: OR_2 textbook Γ with costs (1, 2) gives ||Γ||/max(1/1, 1/2) = sqrt(2)."""
        c = _or_cert(2, dual=False)
        rep = verify_certificate(Certificate(c.alphabet, c.inputs, c.outputs, np.array([1.0, 2.0]), c.gamma))
        assert rep.lower == pytest.approx(math.sqrt(2)) and rep.binding == (0,)
