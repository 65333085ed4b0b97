"""The row-symmetric program: ADV± of g∘(h, …, h) reduced by the row permutations S_n, never |D|×|D|.

A function whose inputs are ``n`` rows of ``L`` symbols, whose domain is closed under
permuting rows and whose output is unchanged by it (a symmetric outer ``g`` of identical
rows, restricted by a budget on the multiset of row times or by ``max_ones``) has an optimal
adversary matrix invariant under S_n.  This module solves the invariant program with one
variable per S_n-orbit of differing-output pairs and one density per input orbit, and with
every positive-semidefinite constraint block-diagonalised exactly by representation theory.

Words and contents
------------------
A row input is a *letter*; an input is a word ``w = (w_1, …, w_n)`` of letters.  Its S_n-orbit
is its *content* (multiset of letters) and the orbit of a pair ``(x, z)`` is the multiset of
letter pairs ``{(x_i, z_i)}``.  The objective ``Σ W[x, z]`` and ``Σ ρ_x = 1`` are linear in the
orbit variables.

Which constraints remain
------------------------
Position ``(r, p)`` (row ``r``, symbol ``p``) is moved to ``(n, p)`` by a row permutation, so
with an invariant solution only the ``L`` constraints of the last row remain, each invariant
under S_{n−1} (the permutations of the first ``n − 1`` rows).  Whether ``x`` and ``z`` differ at
``(n, p)`` depends only on their last letters ``a``, ``b``: ``Δ_(n,p)[x, z] = [a_p ≠ b_p]``.

Block diagonalisation (representative sets)
-------------------------------------------
Write ``x = (x', a)``.  The span of the words ``x'`` of one content ``c'`` is the permutation
module ``M^μ`` of S_{n−1} (``μ`` the letter multiplicities), which contains the irreducible
``S^λ`` with multiplicity the Kostka number ``K_{λμ}`` (Young's rule).  For every partition
``λ`` of ``n − 1`` and every semistandard tableau ``τ`` of shape ``λ`` and content ``c'`` let
``u_τ = b_λ a_λ w_τ``, with ``w_τ`` the word read off ``τ`` (box ``k`` in row-major order is
coordinate ``k``), ``a_λ`` the sum over the permutations inside rows of ``λ`` and ``b_λ`` the
signed sum inside columns.  ``u_τ`` is the image of one fixed polytabloid under the
semistandard homomorphism of ``τ``, so the ``u_τ`` (over all letters ``a``, contents ``c'`` and
tableaux ``τ``) are a representative set: for every S_{n−1}-invariant symmetric ``M``,
``M ⪰ 0`` iff every matrix ``B_λ = [u_τᵀ M u_σ]`` is positive semidefinite, and the
eigenvalues of ``M`` are the generalised eigenvalues of ``(B_λ, G_λ)`` with the Gram matrix
``G_λ = [u_τᵀ u_σ]`` ("Invariant semidefinite programs", 2012, arXiv:1007.2905, §2;
"Semidefinite bounds for nonbinary codes based on quadruples", 2017, arXiv:1602.02531,
§2–3, for representative sets of S_n on words).  Because ``a`` and ``b`` are self-adjoint,
``b² = |C_λ| b`` and ``M`` commutes with both,

    ``u_τᵀ M u_σ = |C_λ| · w_τᵀ M (a b a) w_σ``,

so each entry needs one sparse vector ``(a b a) w_σ`` and one row of ``M`` (looked up by pair
orbit), never a |D|×|D| matrix; the factor ``|C_λ| > 0`` is dropped.  The blocks of ``λ`` have
``Σ K_{λ, μ(c')}`` rows and ``Σ_λ f^λ · (block size) = |D|`` (``f^λ`` standard tableaux),
which :func:`check_dimensions` tests.

What is verified, and how
-------------------------
:func:`reduced_lower_bound` computes ``‖Γ‖ ≥ δᵀΓδ/δᵀδ`` with the invariant vector
``δ = √ρ`` (exact orbit sums) and ``‖Γ∘Δ_(n,p)‖`` as the largest generalised eigenvalue in
absolute value over the blocks (float LAPACK).  :func:`expand_gamma` writes the full Γ where
|D| allows, so :func:`advbound.evidence.verify.verify_certificate` re-checks the bound independently of
this module; :mod:`advbound.programs.solve` does that below ``DENSE_CHECK_LIMIT`` inputs.
"""

from __future__ import annotations

import dataclasses
import itertools
import logging
import math
import time
from collections import Counter, defaultdict

import numpy as np
import scipy.sparse as sp

from advbound.errors import InvalidFunctionError, SolverError
from advbound.functions.function import PartialFunction

__all__ = ["RowFamily", "RowProgram", "family_of", "position_search_family", "formulate_rows",
           "solve_reduced", "reduced_lower_bound", "expand_gamma", "check_dimensions", "semistandard_tableaux",
           "partitions", "standard_tableaux_count", "DENSE_CHECK_LIMIT"]

log = logging.getLogger("advbound")

#: Largest |D| for which the reduced optimum is also expanded and checked on the full domain.
DENSE_CHECK_LIMIT = 3000


# ---------------------------------------------------------------------------------------------
# Partitions and tableaux
# ---------------------------------------------------------------------------------------------
def partitions(m: int, largest: int | None = None):
    """Partitions of ``m`` as non-increasing tuples, largest first.

    >>> list(partitions(4))
    [(4,), (3, 1), (2, 2), (2, 1, 1), (1, 1, 1, 1)]
    """
    largest = m if largest is None else largest
    if m == 0:
        yield ()
        return
    for k in range(min(m, largest), 0, -1):
        for rest in partitions(m - k, k):
            yield (k,) + rest


def standard_tableaux_count(shape) -> int:
    """``f^λ``, the dimension of the irreducible ``S^λ``, by the hook length formula.

    >>> standard_tableaux_count((2, 1)), standard_tableaux_count((3, 2))
    (2, 5)
    """
    conj = [sum(1 for r in shape if r > j) for j in range(shape[0])] if shape else []
    hooks = 1
    for i, r in enumerate(shape):
        for j in range(r):
            hooks *= (r - j - 1) + (conj[j] - i - 1) + 1
    return math.factorial(sum(shape)) // hooks


def _horizontal_strips(inner, size, outer):
    """Shapes ``ν`` with ``inner ⊆ ν ⊆ outer`` and ``ν/inner`` a horizontal strip of ``size`` boxes."""
    rows = len(outer)
    cur = list(inner) + [0] * (rows - len(inner))

    def rec(i, left, acc):
        if i == rows:
            if left == 0:
                yield tuple(acc)
            return
        hi = outer[i] if i == 0 else min(outer[i], cur[i - 1])
        for add in range(min(left, hi - cur[i]), -1, -1):
            yield from rec(i + 1, left - add, acc + [cur[i] + add])

    yield from rec(0, size, [])


def semistandard_tableaux(shape, content) -> list[tuple[tuple, ...]]:
    """Semistandard tableaux of ``shape`` with ``content = [(letter, count), …]`` in increasing letter order.

    Each tableau is a tuple of rows.  Their number is the Kostka number ``K_{shape, counts}``.

    >>> semistandard_tableaux((2, 1), [(0, 1), (1, 1), (2, 1)])
    [((0, 1), (2,)), ((0, 2), (1,))]
    """
    shape = tuple(shape)
    out = []

    def rec(i, cur, fill):
        if i == len(content):
            if tuple(x for x in cur if x) == shape:
                out.append(tuple(tuple(r) for r in fill))
            return
        letter, cnt = content[i]
        for nxt in _horizontal_strips(cur, cnt, shape):
            new = [list(r) for r in fill]
            for r, (lo, hi) in enumerate(zip(cur, nxt)):
                new[r].extend([letter] * (hi - lo))
            rec(i + 1, nxt, new)

    rec(0, (0,) * len(shape), [[] for _ in shape])
    return out


class _Shape:
    """Coordinates of the rows and columns of a Young diagram (boxes numbered row by row)."""

    def __init__(self, shape):
        self.shape = tuple(shape)
        self.rows, k = [], 0
        for r in shape:
            self.rows.append(list(range(k, k + r)))
            k += r
        self.cols = [[self.rows[i][j] for i in range(len(shape)) if shape[i] > j]
                     for j in range(shape[0] if shape else 0)]

    def word(self, tableau) -> tuple:
        w = [0] * sum(self.shape)
        for coords, letters in zip(self.rows, tableau):
            for c, letter in zip(coords, letters):
                w[c] = letter
        return tuple(w)


def _rearrange(vec: dict, blocks, choices) -> dict:
    """``Σ`` over independent rearrangements of the coordinate ``blocks`` of every word in ``vec``.

    ``choices(letters)`` lists ``(new letters, weight)`` for one block, or ``None`` when the whole
    term vanishes; the weights of the blocks multiply.
    """
    out = defaultdict(int)
    for w, c in vec.items():
        parts = []
        for coords in blocks:
            opts = choices([w[i] for i in coords])
            if opts is None:
                break
            parts.append(opts)
        else:
            for combo in itertools.product(*parts):
                nw, coef = list(w), c
                for coords, (p, weight) in zip(blocks, combo):
                    for i, letter in zip(coords, p):
                        nw[i] = letter
                    coef *= weight
                out[tuple(nw)] += coef
    return {k: v for k, v in out.items() if v}


def _row_choices(letters):
    """Distinct arrangements of one row, each standing for its stabiliser's many permutations."""
    stab = math.prod(math.factorial(v) for v in Counter(letters).values())
    return [(p, stab) for p in set(itertools.permutations(letters))]


_SIGNED: dict[int, list] = {}


def _column_choices(letters):
    """Signed permutations of one column; ``None`` (the term vanishes) on a repeated letter."""
    if len(set(letters)) < len(letters):
        return None
    h = len(letters)
    if h not in _SIGNED:
        _SIGNED[h] = [(p, _sign(p)) for p in itertools.permutations(range(h))]
    return [(tuple(letters[k] for k in p), s) for p, s in _SIGNED[h]]


def _row_symmetrise(vec: dict, sh: _Shape) -> dict:
    """``a_λ v``: the sum over all permutations inside the rows."""
    return _rearrange(vec, sh.rows, _row_choices)


def _column_antisymmetrise(vec: dict, sh: _Shape) -> dict:
    """``b_λ v``: the signed sum over permutations inside the columns (zero on a repeated letter)."""
    return _rearrange(vec, sh.cols, _column_choices)


def _sign(p) -> int:
    p, s = list(p), 1
    for i in range(len(p)):
        while p[i] != i:
            j = p[i]
            p[i], p[j] = p[j], p[i]
            s = -s
    return s


# ---------------------------------------------------------------------------------------------
# The family: letters, contents, outputs
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class RowFamily:
    """A row-permutation-invariant function given by its input orbits.

    Attributes
    ----------
    letters : tuple of str
        The row inputs that occur (each of length ``L``), in a fixed order; letters are their indices.
    contents : tuple of tuple of int
        The input orbits: sorted tuples of ``n`` letter indices.
    outputs : tuple of str
        The output label of each content.
    costs : tuple of float
        The query cost of each of the ``L`` positions of a row (the same in every row).
    description : str
    """

    letters: tuple[str, ...]
    contents: tuple[tuple[int, ...], ...]
    outputs: tuple[str, ...]
    costs: tuple[float, ...]
    description: str = ""

    @property
    def n(self) -> int:
        """Number of rows."""
        return len(self.contents[0])

    @property
    def row_length(self) -> int:
        return len(self.letters[0])

    @property
    def labels(self) -> tuple[str, ...]:
        return tuple(sorted(set(self.outputs)))

    def orbit_size(self, content) -> int:
        """Number of inputs with this content, ``n! / Π multiplicities!``."""
        return _multinomial(content)

    @property
    def size(self) -> int:
        """``|D|``."""
        return sum(_multinomial(c) for c in self.contents)

    def differ(self, p: int, a: int, b: int) -> bool:
        """Do letters ``a`` and ``b`` differ at position ``p`` of a row?"""
        return self.letters[a][p] != self.letters[b][p]

    def inputs(self):
        """Every input string with its output (for expansion and dense checks)."""
        for c, y in zip(self.contents, self.outputs):
            for w in sorted(set(itertools.permutations(c))):
                yield "".join(self.letters[a] for a in w), y


def _multinomial(seq) -> int:
    return math.factorial(len(seq)) // math.prod(math.factorial(v) for v in Counter(seq).values())


def family_of(f: PartialFunction) -> RowFamily | None:
    """The row family of ``f`` when its rows (``f.groups``) are interchangeable, else ``None``.

    Interchangeable means: ``f.groups`` are ``n ≥ 2`` consecutive blocks of one length with equal
    costs, the domain is closed under permuting them (each content occurs in all of its
    ``n!/Π mult!`` arrangements), and the output depends only on the content.  All of this is
    checked on the inputs, not taken from the builder.
    """
    groups = f.groups
    if len(groups) < 2:
        return None
    L = len(groups[0])
    if any(tuple(g) != tuple(range(i * L, (i + 1) * L)) for i, g in enumerate(groups)) or len(groups) * L != f.n:
        return None
    costs = tuple(f.costs[:L])
    if any(tuple(f.costs[i * L:(i + 1) * L]) != costs for i in range(len(groups))):
        return None
    rows_of = [tuple(x[i * L:(i + 1) * L] for i in range(len(groups))) for x in f.inputs]
    letters = tuple(sorted({r for rows in rows_of for r in rows}))
    index = {s: i for i, s in enumerate(letters)}
    seen: dict[tuple, list] = {}
    for rows, y in zip(rows_of, f.outputs):
        c = tuple(sorted(index[r] for r in rows))
        seen.setdefault(c, []).append(y)
    for c, ys in seen.items():
        if len(ys) != _multinomial(c) or len(set(ys)) != 1:
            return None
    contents = tuple(sorted(seen))
    return RowFamily(letters, contents, tuple(seen[c][0] for c in contents), costs,
                     description=f.description)


def position_search_family(outer: str, n: int, T: int, max_ones: int | None = None) -> RowFamily:
    """OR, AND or a threshold of ``n`` position-search rows with times ``t = √k`` and ``Σ k_i = T``.

    Built from its contents directly (|D| is never enumerated), with rows of length ``T − n + 1``
    (the largest position a row can use).  ``outer`` is ``"or"``, ``"and"`` or ``"threshold:K"``.

    >>> fam = position_search_family("or", 3, 5)
    >>> fam.size, len(fam.contents)
    (48, 12)
    """
    if n < 2 or T < n:
        raise InvalidFunctionError(f"position_search_family: need 2 <= n <= T, got n = {n}, T = {T}")
    name = outer.lower()
    if name == "or":
        rule = lambda ones: ones >= 1  # noqa: E731
    elif name == "and":
        rule = lambda ones: ones == n  # noqa: E731
    elif name.startswith("threshold:"):
        k = int(name.split(":", 1)[1])
        rule = lambda ones: ones >= k  # noqa: E731
    else:
        raise InvalidFunctionError(f"position_search_family: outer {outer!r} is unknown; use or, and, threshold:K")
    L = T - n + 1
    letters = tuple("*" * (k - 1) + bit + "*" * (L - k) for k in range(1, L + 1) for bit in "01")
    contents, outputs = [], []
    for parts in _sums(n, T, T):
        for bits in itertools.product((0, 1), repeat=n):
            ones = sum(bits)
            if max_ones is not None and ones > max_ones:
                continue
            contents.append(tuple(sorted(2 * (k - 1) + b for k, b in zip(parts, bits))))
    contents = sorted(set(contents))
    outputs = [str(int(rule(sum(a % 2 for a in c)))) for c in contents]
    desc = f"{outer.upper()}_{n} of position-search rows, sum of k = {T}" + (
        f", at most {max_ones} row(s) of value 1" if max_ones is not None else "")
    return RowFamily(letters, tuple(contents), tuple(outputs), (1.0,) * L, description=desc)


def _sums(n, T, largest):
    """Multisets of ``n`` positive integers summing to ``T`` (non-increasing tuples)."""
    if n == 0:
        if T == 0:
            yield ()
        return
    for k in range(min(largest, T - n + 1), 0, -1):
        for rest in _sums(n - 1, T - k, k):
            yield (k,) + rest


# ---------------------------------------------------------------------------------------------
# The reduced program
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class _Block:
    shape: tuple
    rows: tuple            # (last letter, content index, word of the first n-1 rows) per block row
    gram: np.ndarray       # G_λ (without the factor |C_λ|)
    couplings: dict        # (u, v) with u <= v -> {pair variable: coefficient} of u_τᵀ W u_σ


@dataclasses.dataclass(frozen=True, eq=False)
class RowProgram:
    """The S_n-reduced program of a :class:`RowFamily`.

    Variables ``(w_0 … w_{K−1}, ρ_0 … ρ_{R−1})``: one weight per orbit of differing-output pairs
    (``pair_keys[k]`` lists its letter pairs, first entry from the smaller output label), one density
    per content.  Maximise ``Σ_k 2·pair_counts[k]·w_k`` subject to ``Σ_r input_counts[r]·ρ_r = 1``,
    ``ρ ≥ 0`` (and ``w ≥ 0`` for the positive bound) and, for every row position ``p``, every block
    ``λ`` and side ``s`` (only ``+1`` for two outputs): ``c_p·G_λ(ρ) − s·B_{λ,p}(w) ⪰ 0``.
    """

    family: RowFamily
    bound: str
    blocks: tuple
    pair_keys: tuple
    pair_counts: np.ndarray
    input_counts: np.ndarray
    build_time: float = 0.0

    @property
    def n_weights(self) -> int:
        return len(self.pair_keys)

    @property
    def sides(self) -> tuple[int, ...]:
        return (1,) if len(self.family.labels) == 2 else (1, -1)

    def sizes(self) -> dict:
        """Sizes of the reduced program (Python ints)."""
        return {"inputs": int(self.family.size), "orbits": len(self.family.contents),
                "weights": self.n_weights, "block_sizes": [len(b.rows) for b in self.blocks],
                "shapes": [list(b.shape) for b in self.blocks], "positions": self.family.row_length,
                "cones": len(self.blocks) * self.family.row_length * len(self.sides)}

    def block_matrix(self, blk: _Block, p: int, weights: np.ndarray) -> np.ndarray:
        """``B_{λ,p}``: the block of ``W∘Δ_(n,p)`` for the pair-orbit values ``weights``."""
        fam = self.family
        s = len(blk.rows)
        B = np.zeros((s, s))
        for (u, v), coefs in blk.couplings.items():
            if fam.differ(p, blk.rows[u][0], blk.rows[v][0]):
                val = sum(c * weights[k] for k, c in coefs.items())
                B[u, v] = B[v, u] = val
        return B


def check_dimensions(prog: RowProgram) -> tuple[int, int]:
    """``(Σ_λ f^λ · block size, |D|)``: equal when the blocks cover the whole space."""
    total = sum(standard_tableaux_count(b.shape) * len(b.rows) for b in prog.blocks)
    return total, prog.family.size


def formulate_rows(fam: RowFamily, bound: str = "general") -> RowProgram:
    """Build the reduced program of ``fam`` (see the module docstring)."""
    if bound not in ("general", "positive"):
        raise InvalidFunctionError(f"bound {bound!r} is unknown; use 'general' or 'positive'")
    if len(fam.labels) < 2:
        raise InvalidFunctionError("function is constant on its domain: its adversary bound is 0")
    t0 = time.perf_counter()
    n = fam.n
    label_rank = {y: i for i, y in enumerate(fam.labels)}
    sub = defaultdict(list)             # last letter -> [(content of the first n-1 rows, content index)]
    for ci, c in enumerate(fam.contents):
        for a in sorted(set(c)):
            rest = list(c)
            rest.remove(a)
            sub[a].append((tuple(rest), ci))
    var_of: dict[tuple, int] = {}
    keys: list[tuple] = []

    def variable(x, z, cx, cz):
        if label_rank[fam.outputs[cx]] > label_rank[fam.outputs[cz]]:
            x, z = z, x
        key = tuple(sorted(zip(x, z)))
        k = var_of.get(key)
        if k is None:
            k = var_of[key] = len(keys)
            keys.append(key)
        return k

    blocks = []
    for lam in partitions(n - 1):
        sh = _Shape(lam)
        rows = []
        for a in sorted(sub):
            for rest, ci in sub[a]:
                cnt = sorted(Counter(rest).items())
                if len(cnt) < len(lam):
                    continue
                rows.extend((a, ci, sh.word(t)) for t in semistandard_tableaux(lam, cnt))
        if not rows:
            continue
        images = [_row_symmetrise(_column_antisymmetrise(_row_symmetrise({w: 1}, sh), sh), sh)
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
        blocks.append(_Block(lam, tuple(rows), gram, couplings))
    pair_counts = np.array([_multinomial(k) for k in keys], dtype=float)
    input_counts = np.array([_multinomial(c) for c in fam.contents], dtype=float)
    prog = RowProgram(fam, bound, tuple(blocks), tuple(keys), pair_counts, input_counts,
                      build_time=time.perf_counter() - t0)
    log.info("row-symmetric program: %s", prog.sizes())
    return prog


def _lmi_rows(prog: RowProgram, blk: _Block, p: int, side: int, nv: int) -> sp.csr_matrix:
    """Sparse ``(s², nv)`` coefficients of ``c_p·G(ρ) − side·B_p(w)``, entry ``(u, v)`` at row ``u·s + v``."""
    fam, K = prog.family, prog.n_weights
    s = len(blk.rows)
    r, c, v = [], [], []
    us, vs = np.nonzero(blk.gram)
    for u, w in zip(us, vs):
        r.append(u * s + w)
        c.append(K + blk.rows[u][1])
        v.append(fam.costs[p] * blk.gram[u, w])
    for (u, w), coefs in blk.couplings.items():
        if not fam.differ(p, blk.rows[u][0], blk.rows[w][0]):
            continue
        for k, coef in coefs.items():
            r += [u * s + w, w * s + u]
            c += [k, k]
            v += [-side * coef, -side * coef]
    return sp.csr_matrix((v, (r, c)), shape=(s * s, nv))


def solve_reduced(prog: RowProgram, tol: float = 1e-8, max_iters: int | None = None, verbose: bool = False):
    """Solve the reduced program with CLARABEL; return ``(x, status word, raw status, iterations, seconds, version)``."""
    try:
        import clarabel
    except ImportError:
        raise SolverError("solver CLARABEL is not installed; pip install clarabel") from None
    from advbound.status import CLARABEL_STATUS_MAP

    fam, K, R = prog.family, prog.n_weights, len(prog.family.contents)
    nv = K + R
    c = np.zeros(nv)
    c[:K] = -2.0 * prog.pair_counts
    rows = [sp.csr_matrix((prog.input_counts, (np.zeros(R, int), K + np.arange(R))), shape=(1, nv))]
    nonneg = np.arange(K, nv) if prog.bound == "general" else np.arange(nv)
    rows.append(sp.csr_matrix((-np.ones(nonneg.size), (np.arange(nonneg.size), nonneg)), shape=(nonneg.size, nv)))
    sizes = []
    for p in range(fam.row_length):
        for side in prog.sides:
            for blk in prog.blocks:
                s = len(blk.rows)
                lo_r, lo_c = np.tril_indices(s)            # Clarabel packs the upper triangle by columns
                idx = lo_c * s + lo_r
                scale = np.where(lo_r == lo_c, 1.0, np.sqrt(2.0))
                rows.append(-sp.diags(scale) @ _lmi_rows(prog, blk, p, side, nv)[idx])
                sizes.append(s)
    A = sp.vstack(rows, format="csc")
    b = np.zeros(A.shape[0])
    b[0] = 1.0
    st = clarabel.DefaultSettings()
    st.verbose = bool(verbose)
    st.tol_gap_abs = st.tol_gap_rel = st.tol_feas = float(tol)
    if max_iters is not None:
        st.max_iter = int(max_iters)
    cones = [clarabel.ZeroConeT(1), clarabel.NonnegativeConeT(nonneg.size)]
    cones += [clarabel.PSDTriangleConeT(s) for s in sizes]
    t0 = time.perf_counter()
    try:
        sol = clarabel.DefaultSolver(sp.csc_matrix((nv, nv)), c, A, b, cones, st).solve()
    except Exception as err:
        raise SolverError(f"CLARABEL failed on the row-symmetric program: {err}") from None
    raw = str(sol.status)
    return (np.asarray(sol.x), CLARABEL_STATUS_MAP.get(raw, "solver_error"), raw, int(sol.iterations),
            time.perf_counter() - t0, str(clarabel.__version__))


def _end_contents(prog: RowProgram) -> tuple[np.ndarray, np.ndarray]:
    index = {c: i for i, c in enumerate(prog.family.contents)}
    cx = np.array([index[tuple(sorted(a for a, _ in k))] for k in prog.pair_keys], dtype=np.int64)
    cz = np.array([index[tuple(sorted(b for _, b in k))] for k in prog.pair_keys], dtype=np.int64)
    return cx, cz


def gamma_on_orbits(prog: RowProgram, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(Γ per pair orbit, ρ per content)`` from a solver point: ``Γ = w / √(ρ_x ρ_z)`` (0 where ρ = 0)."""
    K = prog.n_weights
    w = np.asarray(x[:K], dtype=float)
    rho = np.maximum(np.asarray(x[K:], dtype=float), 0.0)
    cx, cz = _end_contents(prog)
    d = np.sqrt(rho[cx] * rho[cz])
    g = np.divide(w, d, out=np.zeros(K), where=d > 0)
    if prog.bound == "positive":
        g = np.maximum(g, 0.0)
    return g, rho


def reduced_lower_bound(prog: RowProgram, gamma: np.ndarray, rho: np.ndarray) -> dict:
    """The adversary ratio of the invariant Γ, with norms from the reduced blocks.

    ``gamma_lower = δᵀΓδ / δᵀδ`` with ``δ = √ρ`` (``≤ ‖Γ‖``); ``position_norms[p] = ‖Γ∘Δ_(n,p)‖``
    from the generalised eigenvalues of ``(B_{λ,p}, G_λ)``; ``lower = gamma_lower / max_p norms/c_p``.
    """
    import scipy.linalg as sla

    fam = prog.family
    cx, cz = _end_contents(prog)
    num = float(np.sum(2.0 * prog.pair_counts * gamma * np.sqrt(rho[cx] * rho[cz])))
    den = float(prog.input_counts @ rho)
    gl = num / den if den > 0 else 0.0
    norms = np.zeros(fam.row_length)
    for p in range(fam.row_length):
        for blk in prog.blocks:
            B = prog.block_matrix(blk, p, gamma)
            if not B.any():
                continue
            ev = sla.eigh(B, blk.gram, eigvals_only=True)
            norms[p] = max(norms[p], float(np.max(np.abs(ev))))
    worst = float(np.max(norms / np.asarray(fam.costs)))
    return {"gamma_lower": gl, "position_norms": norms.tolist(), "lower": gl / worst if worst > 0 else 0.0}


def expand_gamma(prog: RowProgram, gamma: np.ndarray) -> tuple[PartialFunction, np.ndarray]:
    """The full function and the dense Γ of an invariant orbit Γ (for |D| small enough to hold |D|²)."""
    fam = prog.family
    pairs = list(fam.inputs())
    alphabet = "".join(sorted(set("".join(fam.letters))))
    f = PartialFunction.from_pairs(alphabet, pairs, description=fam.description)
    index = {x: i for i, x in enumerate(f.inputs)}
    L = fam.row_length
    letter = {s: i for i, s in enumerate(fam.letters)}
    words = [tuple(letter[x[i * L:(i + 1) * L]] for i in range(fam.n)) for x in f.inputs]
    var_of = {k: i for i, k in enumerate(prog.pair_keys)}
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


def solve_rows(f, bound: str = "general", tol: float = 1e-8, max_iters: int | None = None,
               verbose: bool = False, dense_check_limit: int = DENSE_CHECK_LIMIT, **options):
    """Solve ADV± (or ADV) of ``f`` on the row-symmetric program; return a :class:`~advbound.result.SolveResult`.

    ``f`` is a :class:`PartialFunction` with interchangeable rows (see :func:`family_of`) or a
    :class:`RowFamily`.  Up to ``dense_check_limit`` inputs the orbit Γ is expanded and the reported
    ``lower`` comes from :func:`advbound.evidence.verify.verify_certificate` on the full domain, independent
    of this module; beyond it, ``lower`` is the reduced-basis ratio of :func:`reduced_lower_bound`
    (float eigenvalues of the blocks) and the message says so.  No upper bound is reported yet
    (the reduced dual witness is not checked), so a successful solve has status ``unverified``
    with the verified lower bound in ``lower`` and the solver's claim in ``objective``.
    """
    from advbound import status as _status
    from advbound.evidence.certificate import Certificate
    from advbound.result import SolveResult, SolverStats
    from advbound.evidence.verify import verify_certificate

    if options:
        raise InvalidFunctionError(f"method 'rows' takes no solver options; got {', '.join(sorted(options))}")
    fam = f if isinstance(f, RowFamily) else family_of(f)
    if fam is None:
        raise InvalidFunctionError("method 'rows' needs interchangeable rows: f.groups must be equal blocks "
                                   "with equal costs, the domain closed under permuting them and the output "
                                   "unchanged by it")
    prog = formulate_rows(fam, bound)
    x, word, raw, iters, secs, version = solve_reduced(prog, tol=tol, max_iters=max_iters, verbose=verbose)
    st = _status.from_cvxpy(word)
    stats = SolverStats(name="CLARABEL", version=version, time=secs, iterations=iters,
                        tolerances={"tol": float(tol)}, options={"program": "rows"})
    K = prog.n_weights
    objective = float(2.0 * prog.pair_counts @ x[:K]) if x.size else None
    base = dict(bound=bound, domain_size=fam.size, solver_stats=stats, objective=objective)
    if st not in _status.SUCCESS:
        return SolveResult(message=f"CLARABEL returned {raw!r} on the row-symmetric program", status=st, **base)
    gamma, rho = gamma_on_orbits(prog, x)
    red = reduced_lower_bound(prog, gamma, rho)
    meta = {"description": fam.description, "bound": bound, "method": "rows",
            "solver": {"name": "CLARABEL", "version": version, "tol": float(tol), "status": raw,
                       "iterations": iters, "time": float(secs)},
            "reduced": dict(prog.sizes(), lower=red["lower"], build_time=prog.build_time)}
    if fam.size <= dense_check_limit:
        full, G = expand_gamma(prog, gamma)
        cert = Certificate(alphabet=full.alphabet, inputs=full.inputs, outputs=full.outputs,
                           costs=np.asarray(full.costs), gamma=G, metadata=meta)
        rep = verify_certificate(cert, bound=bound)
        cert = dataclasses.replace(cert, metadata=dict(meta, claimed_lower=rep.lower))
        if not rep.passed:
            return SolveResult(message=f"check(s) {', '.join(rep.failed_checks())} failed on the expanded Γ",
                               status=_status.UNVERIFIED, certificate=cert, verification=rep, **base)
        msg = ("lower bound verified on the expanded Γ (full domain); no upper bound: the row-symmetric "
               "dual witness is not checked yet")
        return SolveResult(message=msg, status=_status.UNVERIFIED, lower=rep.lower, certificate=cert,
                           verification=rep, **base)
    msg = (f"lower bound from the reduced blocks (|D| = {fam.size} > {dense_check_limit}, not expanded); "
           f"no upper bound: the row-symmetric dual witness is not checked yet")
    return SolveResult(message=msg, status=_status.UNVERIFIED, lower=red["lower"], **base)
