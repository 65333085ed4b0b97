"""The representative set of a row family: the exact block diagonalisation of its S_{n−1}-invariant matrices.

For a :class:`~advbound.functions.rowfamily.RowFamily` of ``n`` interchangeable rows this module
builds, for every partition ``λ`` of ``n − 1``, the block rows ``(last letter, content, tableau)``,
the Gram matrix ``G_λ = [u_τᵀ u_σ]`` and the *couplings*: for each pair of block rows, the pair
orbits (and integer coefficients) that make up ``u_τᵀ W u_σ`` for an S_n-invariant ``W``.  The
construction, and why it is exact, is in :mod:`advbound.programs.rowsym`'s docstring and in
docs/symmetry.md.  Both the row-symmetric program (:mod:`advbound.programs.rowsym`) and the
checker of orbit certificates (:mod:`advbound.evidence.orbitcheck`) read their blocks from here;
neither a solver nor a |D|×|D| matrix is involved.
"""

from __future__ import annotations

import dataclasses
import logging
import time
from collections import Counter, defaultdict

import numpy as np

from advbound.errors import InvalidFunctionError
from advbound.functions.function import PartialFunction
from advbound.functions.rowfamily import RowFamily
from advbound.functions.tableaux import (Shape, column_antisymmetrise, multinomial, partitions, row_symmetrise,
                                         semistandard_tableaux, standard_tableaux_count)

__all__ = ["Block", "RowBasis", "row_basis", "check_dimensions", "expand_gamma", "pair_key", "BASIS_VERSION"]

#: The convention of the blocks (order of rows, unit-norm vectors).  A stored reduced dual refers to
#: the blocks of one convention; orbit certificates record it as ``metadata["basis"]``.
BASIS_VERSION = "representative-set/1 (unit-norm block rows)"

log = logging.getLogger("advbound")


@dataclasses.dataclass(frozen=True, eq=False)
class Block:
    """One isotypic block ``λ`` of the representative set.

    Attributes
    ----------
    shape : tuple of int
        The partition ``λ`` of ``n − 1``.
    rows : tuple
        ``(last letter, content index, word of the first n − 1 rows)`` per block row.
    gram : ndarray
        ``G_λ`` of the normalised vectors ``u_τ/‖u_τ‖`` (unit diagonal).
    couplings : dict
        ``(u, v)`` with ``u <= v`` → ``{pair orbit: coefficient}`` of ``u_τᵀ W u_σ``.
    """

    shape: tuple
    rows: tuple
    gram: np.ndarray
    couplings: dict


@dataclasses.dataclass(frozen=True, eq=False)
class RowBasis:
    """The blocks of a row family, with its pair orbits and orbit sizes.

    ``pair_keys[k]`` lists the letter pairs of pair orbit ``k`` (sorted; the first input of each pair
    has the smaller output label); ``pair_counts[k]`` is the number of ordered pairs ``(x, z)`` in it
    with ``x`` from the smaller label, ``input_counts[r]`` the number of inputs of content ``r``.
    """

    family: RowFamily
    blocks: tuple
    pair_keys: tuple
    pair_counts: np.ndarray
    input_counts: np.ndarray
    build_time: float = 0.0

    @property
    def n_weights(self) -> int:
        return len(self.pair_keys)

    def block_matrix(self, blk: Block, p: int, weights: np.ndarray) -> np.ndarray:
        """``B_{λ,p}``: the block of ``W∘Δ_(n,p)`` for the pair-orbit values ``weights``."""
        fam = self.family
        s = len(blk.rows)
        B = np.zeros((s, s))
        for (u, v), coefs in blk.couplings.items():
            if fam.differ(p, blk.rows[u][0], blk.rows[v][0]):
                val = sum(c * weights[k] for k, c in coefs.items())
                B[u, v] = B[v, u] = val
        return B

    def end_contents(self) -> tuple[np.ndarray, np.ndarray]:
        """Content index of the first and of the second input of every pair orbit."""
        index = {c: i for i, c in enumerate(self.family.contents)}
        cx = np.array([index[tuple(sorted(a for a, _ in k))] for k in self.pair_keys], dtype=np.int64)
        cz = np.array([index[tuple(sorted(b for _, b in k))] for k in self.pair_keys], dtype=np.int64)
        return cx, cz


def pair_key(x, z) -> tuple:
    """The S_n-orbit of the pair of words ``(x, z)``: the sorted multiset of their letter pairs.

    >>> pair_key((2, 0, 1), (3, 0, 0))
    ((0, 0), (1, 0), (2, 3))
    """
    return tuple(sorted(zip(x, z)))


def check_dimensions(basis) -> tuple[int, int]:
    """``(Σ_λ f^λ · block size, |D|)``: equal when the blocks cover the whole space."""
    total = sum(standard_tableaux_count(b.shape) * len(b.rows) for b in basis.blocks)
    return total, basis.family.size


def _sub_contents(fam: RowFamily) -> dict:
    """last letter -> [(content of the first n − 1 rows, content index)]."""
    sub = defaultdict(list)
    for ci, c in enumerate(fam.contents):
        for a in sorted(set(c)):
            rest = list(c)
            rest.remove(a)
            sub[a].append((tuple(rest), ci))
    return sub


def _block_rows(lam, sh, sub) -> list:
    rows = []
    for a in sorted(sub):
        for rest, ci in sub[a]:
            cnt = sorted(Counter(rest).items())
            if len(cnt) < len(lam):
                continue
            rows.extend((a, ci, sh.word(t)) for t in semistandard_tableaux(lam, cnt))
    return rows


def _normalised(blk: Block) -> Block:
    """The block of the rescaled vectors ``u_τ / ‖u_τ‖``: unit Gram diagonal, the same PSD cone.

    The symmetrisers multiply a word by stabiliser sizes (up to ``(n − 1)!``), so raw entries span
    many orders of magnitude; the congruence by ``D = diag(G)^(-1/2)`` keeps every block statement
    (``B ⪰ 0``, the generalised eigenvalues of ``(B, G)``) and leaves the solver a well-scaled problem.
    """
    d = 1.0 / np.sqrt(np.diag(blk.gram))
    gram = blk.gram * d[:, None] * d[None, :]
    couplings = {(u, v): {k: c * d[u] * d[v] for k, c in coefs.items()} for (u, v), coefs in blk.couplings.items()}
    return Block(blk.shape, blk.rows, gram, couplings)


def row_basis(fam: RowFamily) -> RowBasis:
    """Build the representative set of ``fam``: every block, its Gram matrix and its couplings."""
    if len(fam.labels) < 2:
        raise InvalidFunctionError("function is constant on its domain: its adversary bound is 0")
    t0 = time.perf_counter()
    label_rank = {y: i for i, y in enumerate(fam.labels)}
    sub = _sub_contents(fam)
    var_of: dict[tuple, int] = {}
    keys: list[tuple] = []

    def variable(x, z, cx, cz):
        if label_rank[fam.outputs[cx]] > label_rank[fam.outputs[cz]]:
            x, z = z, x
        key = pair_key(x, z)
        k = var_of.get(key)
        if k is None:
            k = var_of[key] = len(keys)
            keys.append(key)
        return k

    blocks = []
    for lam in partitions(fam.n - 1):
        sh = Shape(lam)
        rows = _block_rows(lam, sh, sub)
        if not rows:
            continue
        images = [row_symmetrise(column_antisymmetrise(row_symmetrise({w: 1}, sh), sh), sh)
                  for _, _, w in rows]
        s = len(rows)
        gram = np.zeros((s, s))
        couplings = {}
        for u, (a, ci, w) in enumerate(rows):
            for v in range(u, s):
                b, cj, _ = rows[v]
                if a == b and ci == cj:
                    gram[u, v] = gram[v, u] = images[v].get(w, 0)
                if a != b and fam.outputs[ci] != fam.outputs[cj]:
                    x = w + (a,)
                    acc = defaultdict(float)
                    for zw, coef in images[v].items():
                        acc[variable(x, zw + (b,), ci, cj)] += coef
                    couplings[(u, v)] = dict(acc)
        blocks.append(_normalised(Block(lam, tuple(rows), gram, couplings)))
    pair_counts = np.array([multinomial(k) for k in keys], dtype=float)
    input_counts = np.array([multinomial(c) for c in fam.contents], dtype=float)
    return RowBasis(fam, tuple(blocks), tuple(keys), pair_counts, input_counts, time.perf_counter() - t0)


def expand_gamma(basis, gamma: np.ndarray) -> tuple[PartialFunction, np.ndarray]:
    """The full function and the dense Γ of an invariant orbit Γ (for |D| small enough to hold |D|²).

    The inputs are the rows side by side, so the query costs are the family's per-position costs
    repeated for each row.
    """
    fam = basis.family
    pairs = list(fam.inputs())
    alphabet = "".join(sorted(set("".join(fam.letters))))
    f = PartialFunction.from_pairs(alphabet, pairs, costs=tuple(fam.costs) * fam.n, description=fam.description)
    index = {x: i for i, x in enumerate(f.inputs)}
    L = fam.row_length
    letter = {s: i for i, s in enumerate(fam.letters)}
    words = [tuple(letter[x[i * L:(i + 1) * L]] for i in range(fam.n)) for x in f.inputs]
    var_of = {k: i for i, k in enumerate(basis.pair_keys)}
    rank = {y: i for i, y in enumerate(fam.labels)}
    G = np.zeros((f.size, f.size))
    for i, (wx, yx) in enumerate(zip(words, f.outputs)):
        for j in range(i + 1, f.size):
            if f.outputs[j] == yx:
                continue
            a, b = (wx, words[j]) if rank[yx] < rank[f.outputs[j]] else (words[j], wx)
            k = var_of.get(tuple(sorted(zip(a, b))))
            if k is not None:
                G[i, j] = G[j, i] = gamma[k]
    assert index  # the order of f.inputs is the canonical one used by G
    return f, G


