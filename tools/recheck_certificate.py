#!/usr/bin/env python3
"""Standalone re-check of an advbound certificate's rigorous lower bound.

Needs only numpy and the Python standard library (``fractions``); it does not import
advbound.  It re-implements the recipe of docs/evidence.md ("The rigorous recipe"),
so it prints the same rational as ``advbound verify --rigorous``.

Usage::

    python tools/recheck_certificate.py CERT.npz [--denominator Q] [--safety S] [--method exact|cholesky]

Prints ``lower_exact p/q`` and ``verified true|false``; exit status 0 when verified, 1 when a
positive-definiteness proof failed, 2 on an unreadable file.

What it proves: with ``Γq = N/Q`` the rounded adversary matrix (symmetric, zero on pairs
with equal outputs), ``R = |vᵀNv| / (Q vᵀv) <= ||Γq||`` and ``||Γq∘Δ_j|| < m_j/(Q T)`` for every
position ``j`` (by proving ``m_j I ∓ N∘Δ_j`` positive definite), hence
``R / max_j (m_j/(Q T c_j))`` is a lower bound on the general adversary bound with costs c.
"""
import argparse
import json
import math
import sys
from fractions import Fraction

import numpy as np

BITS, VBITS, KBITS = 28, 26, 30          # denominator bits, eigenvector bits, bits of K
U = Fraction(1, 2**53)                    # unit roundoff of IEEE double


def load(path):
    """Return (inputs, outputs, costs, dense gamma, metadata) from the .npz archive."""
    z = np.load(path, allow_pickle=False)
    inputs = [str(s) for s in z["inputs"]]
    outputs = [str(s) for s in z["outputs"]]
    costs = [float(c) for c in z["costs"]]
    size = len(inputs)
    if "gamma" in z.files:
        g = np.array(z["gamma"], dtype=np.float64)
    else:                                 # COO triplets list every non-zero entry
        g = np.zeros((size, size))
        np.add.at(g, (z["gamma_row"], z["gamma_col"]), z["gamma_val"])
    return inputs, outputs, costs, g, json.loads(str(z["metadata"]))


def pd_exact(a):
    """Positive definite?  Fraction-free elimination: pivots are the leading principal minors."""
    a = [[int(x) for x in row] for row in a]
    prev = 1
    for k in range(len(a)):
        p = a[k][k]
        if p <= 0:
            return False
        for i in range(k + 1, len(a)):
            for j in range(k + 1, len(a)):
                a[i][j] = (p * a[i][j] - a[i][k] * a[k][j]) // prev     # exact (Sylvester's identity)
        prev = p
    return True


def pd_cholesky(a):
    """Positive definite?  Float Cholesky of A - alpha*I with a rigorous shift (docs/evidence.md)."""
    n, d = len(a), int(a[0][0])
    g = (n + 1) * U / (1 - (n + 1) * U)
    target = Fraction(d) - g / (1 - g) * n * d              # shift alpha > gamma/(1-gamma) * n * d
    dshift = float(target)
    if Fraction(dshift) >= target:                          # round the shifted diagonal down
        dshift = math.nextafter(dshift, -math.inf)
    b = np.array(a, dtype=np.float64)
    b[np.diag_indices(n)] = dshift
    for k in range(n):
        if not b[k, k] > 0:
            return False
        r = math.sqrt(b[k, k])
        row = b[k, k + 1:] / r
        nz = np.abs(row[row != 0])
        if not (2.0**-500 <= r <= 2.0**500) or (nz.size and (nz.min() < 2.0**-500 or nz.max() > 2.0**500)):
            return False                                  # outside the range where the bound is proved
        b[k + 1:, k + 1:] -= row[:, None] * row[None, :]
    return True


def max_abs_eig(m):
    w = np.linalg.eigvalsh(m)
    return float(max(abs(w[0]), abs(w[-1])))


def recheck(path, denominator=None, safety=1e-6, method="exact"):
    inputs, outputs, costs, g, meta = load(path)
    out = np.array([sorted(set(outputs)).index(y) for y in outputs])
    same = out[:, None] == out[None, :]
    # 1. symmetrise, zero equal-output pairs (and negative entries for a positive-bound certificate)
    g = (g + g.T) / 2.0
    g[same] = 0.0
    if meta.get("bound") == "positive":
        g[g < 0] = 0.0
    # 2. rational matrix N / Q
    top = float(np.max(np.abs(g)))
    q = int(denominator) if denominator else 2 ** max(0, BITS - math.frexp(top)[1])
    nm = np.rint(g * q).astype(np.int64)
    gq = nm / q
    # 3. rational vector and exact Rayleigh quotient
    w, vecs = np.linalg.eigh(gq)
    u = vecs[:, -1] if abs(w[-1]) >= abs(w[0]) else vecs[:, 0]
    v = [int(x) for x in np.rint(u * (2.0**VBITS / np.max(np.abs(u))))]
    nv = [sum(int(nm[i, k]) * v[k] for k in range(len(v)) if nm[i, k]) for i in range(len(v))]
    rq = Fraction(abs(sum(a * b for a, b in zip(v, nv))), q * sum(a * a for a in v))
    # 4. common scale K: (1 + s) max_j ||Γq∘Δ_j|| / c_j rounded up to KBITS significant bits
    masks = [np.array([[x[j] != y[j] for y in inputs] for x in inputs]) for j in range(len(costs))]
    y = (1.0 + safety) * max(max_abs_eig(np.where(mk, gq, 0.0)) / c for mk, c in zip(masks, costs))
    p = KBITS - math.frexp(y)[1]
    k = Fraction(math.ceil(math.ldexp(y, p))) / Fraction(2) ** p
    # 5. prove m_j I -/+ N∘Δ_j positive definite
    both_signs = len(set(outputs)) > 2   # two outputs: N∘Δ_j is bipartite, one sign suffices
    t = 2 ** max(0, KBITS - 2 - int(np.max(np.abs(nm))).bit_length())   # finer grid for the bounds
    ok, scales = True, []
    for mk, c in zip(masks, costs):
        m = math.ceil(q * t * k * Fraction(c))              # bound m / (q t) on ||Γq∘Δ_j||
        scales.append(Fraction(m, q * t) / Fraction(c))
        nj = np.where(mk, nm, 0) * t
        for sign in ((-1, 1) if both_signs else (-1,)):
            a = sign * nj
            a[np.diag_indices(len(a))] = m
            if m <= 0 or not (pd_exact(a) if method == "exact" else pd_cholesky(a)):
                ok = False
    # 6. the certified bound
    return ok, rq / max(scales)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("certificate")
    ap.add_argument("--denominator", type=int)
    ap.add_argument("--safety", type=float, default=1e-6)
    ap.add_argument("--method", choices=("exact", "cholesky"), default="exact")
    a = ap.parse_args(argv)
    try:
        ok, lower = recheck(a.certificate, a.denominator, a.safety, a.method)
    except (OSError, KeyError, ValueError) as err:
        print(f"recheck: cannot read {a.certificate}: {err}", file=sys.stderr)
        return 2
    print(f"lower_exact {lower.numerator}/{lower.denominator}")
    print(f"lower_float {float(lower):.12g}")
    print(f"verified {'true' if ok else 'false'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
