"""Automorphism groups of partial functions, their orbits, and group averaging.

This module owns :func:`automorphism_group` (the symmetries of any partial
function, found with a coloured graph and nauty through ``pynauty``), the
:class:`Group` value that records a group's action on the canonical index
orders (positions, inputs, output labels), orbits of inputs, of pairs and of
positions, stabilisers, and the group averages used by
:mod:`advbound.programs.symmetric`.

A *symmetry* (see :class:`~advbound.functions.function.Automorphism`) is a permutation of
positions together with a relabelling of the symbols of each position that maps
the domain onto itself and preserves ``f`` up to a relabelling of the outputs.
Costs must be preserved too (positions of different cost are never swapped):
only then does the cost-weighted ADV± stay unchanged.

>>> from advbound.functions.function import PartialFunction
>>> f = PartialFunction.from_pairs("01", [(x, int("1" in x)) for x in ("000", "001", "010", "011",
...                                 "100", "101", "110", "111")])      # OR on 3 bits
>>> G = automorphism_group(f)
>>> G.order, position_orbits(G).tolist()
(6, [0, 0, 0])

The coloured graph
------------------
Vertices, with one colour class per line (classes never mix):

* one vertex ``p_j`` per position, coloured by the position's cost (one class per distinct cost);
* one *literal* vertex ``(j, σ)`` per position ``j`` and symbol ``σ`` occurring at ``j`` in the domain;
* one vertex ``v_x`` per input ``x``;
* one vertex ``o_ℓ`` per output label.

Edges: ``p_j — (j, σ)``; ``(j, σ) — v_x`` iff ``x_j = σ``; ``v_x — o_{f(x)}``.

Why this is exact.  A symmetry ``(π, τ, ψ)`` (positions, symbol relabellings,
outputs) maps ``p_j -> p_{π(j)}``, ``(j, σ) -> (π(j), τ_j(σ))``, ``v_x -> v_{g(x)}``,
``o_ℓ -> o_{ψ(ℓ)}`` and preserves colours and edges.  Conversely, let α be a
colour-preserving graph automorphism.  Each literal has exactly one position
neighbour, so α maps the literals of ``j`` onto the literals of ``π(j)`` where
``α(p_j) = p_{π(j)}``: this defines ``π`` (cost-preserving by the colouring) and
the relabelling ``τ_j`` on the symbols occurring at ``j`` (extended to the other
symbols in order; they never occur, so the extension acts trivially on ``D``).
Each input vertex is adjacent to exactly one literal per position, namely
``(j, x_j)``; so ``α(v_x)`` is adjacent to ``(π(j), τ_j(x_j))`` for all ``j``,
i.e. ``α(v_x) = v_y`` with ``y`` the image of ``x``.  Since α permutes the input
vertices, the symmetry maps ``D`` onto ``D``.  Each input is adjacent to exactly
one output vertex, so ``α(o_{f(x)}) = o_{f(y)}``: the outputs are relabelled by
a permutation ``ψ``.  Finally α is determined by its action on positions and
inputs (a literal is determined by its position and its set of inputs, an
output vertex by its set of inputs), so graph automorphisms and symmetries
correspond one to one and ``order`` is the number of symmetries acting on
positions and inputs.  Every generator is checked against the definition
before it is returned.
"""

from __future__ import annotations

import dataclasses
import logging
from typing import Sequence

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from advbound.functions.domain import domain as _domain, symbol_dtype
from advbound.errors import AdvboundError, InvalidFunctionError
from advbound.functions.function import Automorphism, PartialFunction

__all__ = [
    "Group",
    "GroupElement",
    "automorphism_group",
    "orbits_of_inputs",
    "orbits_of_pairs",
    "position_orbits",
    "stabilizer",
    "average_gamma",
    "average_weights",
    "element_from_automorphism",
]

log = logging.getLogger("advbound")


# ---------------------------------------------------------------------------------------------
# Group elements as index permutations
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class GroupElement:
    """A symmetry as index permutations of the canonical orders.

    Attributes
    ----------
    positions : ndarray of int, shape (N,)
        Position ``j`` moves to ``positions[j]``.
    relabel : ndarray of int, shape (N, |alphabet|)
        ``relabel[j]`` permutes alphabet indices at (source) position ``j``.
    inputs : ndarray of int, shape (|D|,)
        Input ``i`` (canonical index) maps to input ``inputs[i]``.
    outputs : ndarray of int, shape (L,)
        Output label ``l`` (index into ``f.labels``) maps to ``outputs[l]``.
    """

    positions: np.ndarray
    relabel: np.ndarray
    inputs: np.ndarray
    outputs: np.ndarray

    def compose(self, other: "GroupElement") -> "GroupElement":
        """``self ∘ other`` (apply ``other`` first)."""
        return GroupElement(
            positions=self.positions[other.positions],
            relabel=np.take_along_axis(self.relabel[other.positions], other.relabel, axis=1),
            inputs=self.inputs[other.inputs],
            outputs=self.outputs[other.outputs],
        )

    def inverse(self) -> "GroupElement":
        """The inverse symmetry."""
        pos = np.argsort(self.positions)
        rel = np.empty_like(self.relabel)
        # the inverse sends position positions[j] back to j with the inverse relabelling of j
        inv_rel = np.argsort(self.relabel, axis=1)
        rel[self.positions] = inv_rel
        return GroupElement(pos, rel, np.argsort(self.inputs), np.argsort(self.outputs))

    def is_identity(self) -> bool:
        """True when the element fixes every position and every input."""
        return bool(np.array_equal(self.positions, np.arange(self.positions.size))
                    and np.array_equal(self.inputs, np.arange(self.inputs.size)))

    def key(self) -> bytes:
        """Hashable identity (the action on positions and inputs is faithful)."""
        return self.positions.astype(np.int64).tobytes() + b"|" + self.inputs.astype(np.int64).tobytes()

    def to_automorphism(self) -> Automorphism:
        """The :class:`~advbound.functions.function.Automorphism` with the same action."""
        n_sym = self.relabel.shape[1]
        ident_rel = bool((self.relabel == np.arange(n_sym)).all())
        ident_out = bool(np.array_equal(self.outputs, np.arange(self.outputs.size)))
        return Automorphism(
            positions=tuple(int(p) for p in self.positions),
            relabel=None if ident_rel else tuple(tuple(int(s) for s in r) for r in self.relabel),
            outputs=None if ident_out else tuple(int(o) for o in self.outputs),
        )


def _identity(n: int, n_sym: int, size: int, n_out: int) -> GroupElement:
    return GroupElement(np.arange(n), np.tile(np.arange(n_sym), (n, 1)), np.arange(size), np.arange(n_out))


def _row_codes(symbols: np.ndarray, dtype) -> np.ndarray:
    """One bytes key per row, used to look inputs up; ``dtype`` must hold every alphabet index
    (the domain's symbol dtype), so that no index wraps around."""
    return np.array([r.tobytes() for r in np.ascontiguousarray(symbols, dtype=dtype)], dtype=object)


def element_from_automorphism(f: PartialFunction, a: Automorphism, dom=None) -> GroupElement:
    """Index-permutation form of ``a``; raises :class:`InvalidFunctionError` if ``a`` is no symmetry of ``f``.

    The check is the definition: ``a`` maps every input into the domain, bijectively, keeps the
    costs, and ``f(a(x)) = outputs[f(x)]``.
    """
    dom = _domain(f) if dom is None else dom
    n, n_sym, size = f.n, len(f.alphabet), f.size
    labels = f.labels
    pos = np.asarray(a.positions, dtype=np.int64)
    if pos.shape != (n,) or sorted(pos.tolist()) != list(range(n)):
        raise InvalidFunctionError(f"automorphism positions {a.positions} are not a permutation of {n} positions")
    if a.relabel is None:
        rel = np.tile(np.arange(n_sym), (n, 1))
    else:
        rel = np.asarray(a.relabel, dtype=np.int64)
        if rel.shape != (n, n_sym) or any(sorted(r) != list(range(n_sym)) for r in rel.tolist()):
            raise InvalidFunctionError(f"automorphism relabel must give a permutation of {n_sym} symbols "
                                       f"for each of {n} positions")
    out = np.arange(len(labels)) if a.outputs is None else np.asarray(a.outputs, dtype=np.int64)
    if out.shape != (len(labels),) or sorted(out.tolist()) != list(range(len(labels))):
        raise InvalidFunctionError(f"automorphism outputs {a.outputs} are not a permutation of "
                                   f"{len(labels)} output labels")
    costs = np.asarray(f.costs)
    if not np.array_equal(costs[pos], costs):
        raise InvalidFunctionError(f"automorphism {a.positions} moves a position to one of different cost")
    sym = np.asarray(dom.symbols, dtype=np.int64)
    img = np.empty_like(sym)
    img[:, pos] = np.take_along_axis(rel.T, sym, axis=0) if n else sym
    code_dtype = symbol_dtype(n_sym)
    lookup = {k: i for i, k in enumerate(_row_codes(sym, code_dtype))}
    idx = np.array([lookup.get(k, -1) for k in _row_codes(img, code_dtype)], dtype=np.int64)
    if (idx < 0).any():
        bad = f.inputs[int(np.flatnonzero(idx < 0)[0])]
        raise InvalidFunctionError(f"automorphism {a.positions} maps input {bad!r} outside the domain")
    if np.unique(idx).size != size:
        raise InvalidFunctionError(f"automorphism {a.positions} is not injective on the domain")
    o = np.asarray(dom.output_index)
    if not np.array_equal(out[o], o[idx]):
        bad = f.inputs[int(np.flatnonzero(out[o] != o[idx])[0])]
        raise InvalidFunctionError(f"automorphism {a.positions} does not preserve f at input {bad!r}")
    return GroupElement(pos, rel, idx, out)


# ---------------------------------------------------------------------------------------------
# The group value
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class Group:
    """A group of symmetries of a partial function, given by generators.

    Attributes
    ----------
    function : PartialFunction
    elements : tuple of GroupElement
        The generators as index permutations (see :class:`GroupElement`).
    order : int
        Number of group elements (acting on positions and inputs).
    source : str
        ``"nauty"`` (the full automorphism group), ``"known"`` (generated by ``f.symmetries`` only),
        or ``"stabilizer"``.
    """

    function: PartialFunction
    elements: tuple
    order: int
    source: str = "nauty"

    @property
    def generators(self) -> tuple[Automorphism, ...]:
        """The generators as :class:`~advbound.functions.function.Automorphism` values."""
        return tuple(e.to_automorphism() for e in self.elements)

    @property
    def input_permutations(self) -> np.ndarray:
        """int array ``(g, |D|)``: row ``k`` maps canonical input ``i`` to ``row[i]`` under generator ``k``."""
        if not self.elements:
            return np.zeros((0, self.function.size), dtype=np.int64)
        return np.stack([e.inputs for e in self.elements])

    @property
    def position_permutations(self) -> np.ndarray:
        """int array ``(g, N)``: the generators' action on positions."""
        if not self.elements:
            return np.zeros((0, self.function.n), dtype=np.int64)
        return np.stack([e.positions for e in self.elements])

    def identity(self) -> GroupElement:
        """The identity element."""
        f = self.function
        return _identity(f.n, len(f.alphabet), f.size, len(f.labels))

    def random_element(self, rng: np.random.Generator, length: int = 12) -> GroupElement:
        """A product of ``length`` random generators (and inverses); the identity for a trivial group."""
        g = self.identity()
        if not self.elements:
            return g
        for _ in range(length):
            e = self.elements[int(rng.integers(len(self.elements)))]
            g = e.compose(g) if rng.random() < 0.5 else e.inverse().compose(g)
        return g

    def __repr__(self) -> str:
        return f"Group(order={self.order}, generators={len(self.elements)}, source={self.source!r})"


def _components(n_points: int, perms: np.ndarray) -> np.ndarray:
    """Orbit label (0, 1, ... in order of first appearance) of each point under the permutations."""
    if perms.shape[0] == 0 or n_points == 0:
        return np.arange(n_points)
    src = np.tile(np.arange(n_points), perms.shape[0])
    dst = perms.reshape(-1)
    g = sp.coo_matrix((np.ones(src.size, dtype=np.int32), (src, dst)), shape=(n_points, n_points))
    _, lab = connected_components(g, directed=True, connection="weak")
    return _relabel_first_seen(lab)


def _relabel_first_seen(lab: np.ndarray) -> np.ndarray:
    _, first, inv = np.unique(lab, return_index=True, return_inverse=True)
    rank = np.empty(first.size, dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    return rank[inv.reshape(-1)]


def orbits_of_inputs(group: Group) -> np.ndarray:
    """Orbit index of every input (canonical order); orbits numbered by their first input.

    >>> from advbound.functions.function import PartialFunction
    >>> f = PartialFunction.from_pairs("01", [("00", 0), ("01", 1), ("10", 1), ("11", 1)])
    >>> orbits_of_inputs(automorphism_group(f)).tolist()
    [0, 1, 1, 2]
    """
    return _components(group.function.size, group.input_permutations)


def position_orbits(group: Group) -> np.ndarray:
    """Orbit index of every position; orbits numbered by their first position."""
    return _components(group.function.n, group.position_permutations)


def orbits_of_pairs(group: Group, symmetric: bool = False, mask: np.ndarray | None = None) -> np.ndarray:
    """Orbit index of every ordered pair ``(x, y)``, as a ``(|D|, |D|)`` int array.

    Parameters
    ----------
    group : Group
    symmetric : bool
        Also identify ``(x, y)`` with ``(y, x)`` (the orbits of a symmetric matrix variable).
    mask : ndarray of bool, optional
        Only number the pairs where ``mask`` is True (it must be invariant); the others get ``-1``.

    Returns
    -------
    ndarray of int64, shape (|D|, |D|)
        Orbits numbered ``0, 1, ...`` in row-major order of their first pair.
    """
    n = group.function.size
    perms = group.input_permutations
    if mask is None:
        sel = np.arange(n * n)
    else:
        mask = np.asarray(mask, dtype=bool)
        sel = np.flatnonzero(mask.reshape(-1))
    pos = -np.ones(n * n, dtype=np.int64)
    pos[sel] = np.arange(sel.size)
    xs, ys = np.divmod(sel, n)
    maps = [p[xs] * n + p[ys] for p in perms]
    if symmetric:
        maps.append(ys * n + xs)
    if maps:
        tgt = np.stack([pos[m] for m in maps])
        if (tgt < 0).any():
            raise AdvboundError("orbits_of_pairs: the pair mask is not invariant under the group")
        lab = _components(sel.size, tgt)
    else:
        lab = np.arange(sel.size)
    out = -np.ones(n * n, dtype=np.int64)
    out[sel] = lab
    return out.reshape(n, n)


def average_gamma(group: Group, gamma: np.ndarray) -> np.ndarray:
    """The group average ``(1/|G|) Σ_g P_g Γ P_gᵀ`` of a ``|D| x |D|`` matrix.

    The average over the group equals the mean of ``Γ`` over each orbit of ordered pairs (every
    pair of an orbit is hit equally often), which is how it is computed.  It never increases a
    constraint norm ``max_j ||Γ∘Δ_j||/c_j`` (conjugation permutes the ``Δ_j`` among positions of
    equal cost, and the norm is convex); for an optimal ``(W, ρ)`` use :func:`average_weights`,
    which keeps optimality.
    """
    g = np.asarray(gamma, dtype=float)
    lab = orbits_of_pairs(group).reshape(-1)
    sums = np.bincount(lab, weights=g.reshape(-1))
    counts = np.bincount(lab)
    return (sums / counts)[lab].reshape(g.shape)


def average_weights(group: Group, weights: np.ndarray, rho: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Group averages of a primal point ``(W, ρ)``; the average of an optimal point is optimal (convexity)."""
    r = np.asarray(rho, dtype=float)
    lab = orbits_of_inputs(group)
    r_avg = (np.bincount(lab, weights=r) / np.bincount(lab))[lab]
    return average_gamma(group, weights), r_avg


# ---------------------------------------------------------------------------------------------
# Finding the group
# ---------------------------------------------------------------------------------------------
def _graph(f: PartialFunction, dom, individualise: Sequence[int] = ()):
    """The coloured graph of the module docstring: (n_vertices, adjacency, colouring, literal table)."""
    n, size = f.n, f.size
    labels = f.labels
    sym = np.asarray(dom.symbols, dtype=np.int64)
    lit_id = {}
    lit_list = []
    base = n
    for j in range(n):
        for s in np.unique(sym[:, j]).tolist():
            lit_id[(j, s)] = base + len(lit_list)
            lit_list.append((j, s))
    v0 = base + len(lit_list)
    o0 = v0 + size
    nv = o0 + len(labels)
    adj: dict[int, list[int]] = {v: [] for v in range(nv)}
    for (j, s), v in lit_id.items():
        adj[j].append(v)
    for i in range(size):
        row = sym[i]
        vi = v0 + i
        for j in range(n):
            adj[lit_id[(j, int(row[j]))]].append(vi)
        adj[vi].append(o0 + int(dom.output_index[i]))
    colouring = []
    special = set(int(j) for j in individualise)
    for j in individualise:
        colouring.append({int(j)})
    by_cost: dict[float, set] = {}
    for j, c in enumerate(f.costs):
        if j not in special:
            by_cost.setdefault(float(c), set()).add(j)
    colouring += [by_cost[c] for c in sorted(by_cost)]
    colouring += [set(range(base, v0)), set(range(v0, o0)), set(range(o0, nv))]
    colouring = [c for c in colouring if c]
    adj = {v: nb for v, nb in adj.items() if nb}
    return nv, adj, colouring, lit_list, v0, o0


def _element_from_vertex_perm(f, dom, perm, lit_list, v0, o0) -> GroupElement:
    n, n_sym = f.n, len(f.alphabet)
    perm = np.asarray(perm, dtype=np.int64)
    pos = perm[:n]
    rel = np.full((n, n_sym), -1, dtype=np.int64)
    for k, (j, s) in enumerate(lit_list):
        j2, s2 = lit_list[perm[n + k] - n]
        rel[j, s] = s2
    for j in range(n):  # extend to symbols not occurring at j (they act trivially on D)
        used = set(rel[j][rel[j] >= 0].tolist())
        free = [s for s in range(n_sym) if s not in used]
        missing = np.flatnonzero(rel[j] < 0)
        rel[j, missing] = free[:missing.size]
    inputs = perm[v0:o0] - v0
    outputs = perm[o0:] - o0
    return GroupElement(pos, rel, inputs, outputs)


def _check_element(f, dom, e: GroupElement) -> GroupElement:
    """Re-derive the input action from positions and relabelling and compare (the definition)."""
    a = e.to_automorphism()
    e2 = element_from_automorphism(f, a, dom)
    if not (np.array_equal(e2.inputs, e.inputs) and np.array_equal(e2.outputs, e.outputs)):
        raise AdvboundError("internal error: a graph automorphism does not act on the domain as computed")
    return e2


def _nauty_elements(f, dom, individualise: Sequence[int] = ()):
    try:
        import pynauty
    except ImportError as err:  # pragma: no cover - pynauty is a dependency
        raise AdvboundError(f"pynauty is needed to compute automorphism groups ({err})") from None
    nv, adj, colouring, lit_list, v0, o0 = _graph(f, dom, individualise)
    g = pynauty.Graph(nv, directed=False, adjacency_dict=adj, vertex_coloring=colouring)
    gens, size1, size2, _, _ = pynauty.autgrp(g)
    elements = [_check_element(f, dom, _element_from_vertex_perm(f, dom, p, lit_list, v0, o0)) for p in gens]
    order = int(round(size1 * 10 ** size2)) if size2 == 0 else None
    return elements, order


def _schreier_sims_order(f: PartialFunction, elements: Sequence[GroupElement]) -> int:
    """Exact group order from the action on positions ⊔ inputs (faithful), by Schreier–Sims."""
    if not elements:
        return 1
    from sympy.combinatorics import Permutation, PermutationGroup
    n = f.n
    perms = [Permutation(np.concatenate([e.positions, e.inputs + n]).tolist()) for e in elements]
    return int(PermutationGroup(perms).order())


def _dedupe(elements):
    seen, out = set(), []
    for e in elements:
        if e.is_identity():
            continue
        k = e.key()
        if k not in seen:
            seen.add(k)
            out.append(e)
    return out


def automorphism_group(f: PartialFunction, use_known: bool = True, nauty: bool = True) -> Group:
    """The group of symmetries of ``f`` (cost-preserving; symbol and output relabelling allowed).

    Parameters
    ----------
    f : PartialFunction
    use_known : bool
        Include the generators handed over in ``f.symmetries`` (each is checked against the
        definition; one that fails raises :class:`InvalidFunctionError`).
    nauty : bool
        Compute the full group with nauty (see the module docstring).  With ``nauty=False`` the
        group is the one generated by ``f.symmetries`` (a subgroup, possibly trivial).

    Returns
    -------
    Group

    Examples
    --------
    Permutations of positions together with flipping an even number of bits preserve PARITY;
    flipping one bit swaps the outputs, also a symmetry: ``3! · 2^3 = 48`` in all on 3 bits.

    >>> from advbound.functions.function import PartialFunction
    >>> f = PartialFunction.from_pairs("01", [(format(i, "03b"), bin(i).count("1") % 2) for i in range(8)])
    >>> automorphism_group(f).order
    48
    """
    if not isinstance(f, PartialFunction):
        raise InvalidFunctionError(f"automorphism_group needs a PartialFunction, got {type(f).__name__}")
    dom = _domain(f)
    elements: list[GroupElement] = []
    if use_known:
        for k, a in enumerate(f.symmetries):
            try:
                elements.append(element_from_automorphism(f, a, dom))
            except InvalidFunctionError as err:
                raise InvalidFunctionError(f"f.symmetries[{k}]: {err}") from None
    order = None
    source = "known"
    if nauty:
        found, order = _nauty_elements(f, dom)
        elements = found + elements  # the full group; known ones are redundant but harmless
        source = "nauty"
    elements = _dedupe(elements)
    if order is None or source != "nauty":
        order = _schreier_sims_order(f, elements)
    log.debug("automorphism group of %r: order %d, %d generators (%s)", f, order, len(elements), source)
    return Group(f, tuple(elements), int(order), source)


def stabilizer(group: Group, position: int) -> Group:
    """The subgroup fixing ``position`` (its symbols may still be relabelled).

    Generators come from Schreier's lemma (``t_{s(k)}^{-1} s t_k`` for a transversal ``t`` of the
    position's orbit and each generator ``s``); the order is ``|G| / |orbit|``.
    """
    f = group.function
    if not 0 <= position < f.n:
        raise InvalidFunctionError(f"position {position} out of range 0..{f.n - 1}")
    ident = group.identity()
    trans = {position: ident}
    frontier = [position]
    while frontier:
        nxt = []
        for k in frontier:
            for s in group.elements:
                k2 = int(s.positions[k])
                if k2 not in trans:
                    trans[k2] = s.compose(trans[k])
                    nxt.append(k2)
        frontier = nxt
    sch = []
    for k, t in trans.items():
        for s in group.elements:
            k2 = int(s.positions[k])
            sch.append(trans[k2].inverse().compose(s.compose(t)))
    sch = _dedupe(sch)
    order = group.order // len(trans)
    return Group(f, tuple(sch), int(order), "stabilizer")
