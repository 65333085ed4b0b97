"""Automorphisms of a function acting on the index sets of the exact t-query program.

This module owns the symmetry side of :mod:`advbound.programs.exact_program`: how an
automorphism (a position permutation with per-position symbol relabellings, and an
output relabelling) permutes the inputs, the query branches ``(j, b)`` and the
outputs of the program, which relabellings the phase oracle over ``Z_q`` allows
(the affine ones), where the generators come from, and the orbit transversals and
labels used to share one variable per orbit.
"""

from __future__ import annotations

import dataclasses
import logging
import math
from typing import Sequence

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from advbound.functions.function import Automorphism, PartialFunction

log = logging.getLogger("advbound")


# ---------------------------------------------------------------------------------------------
# Symmetry: generators acting on inputs, branches and outputs
# ---------------------------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class _Action:
    inputs: np.ndarray    # perm of range(d)
    branches: np.ndarray  # perm of range(L)
    outputs: np.ndarray   # perm of range(m)


def _affine(perm: Sequence[int], q: int, symbols: Sequence[int] | None = None) -> tuple[int, int] | None:
    """``(a, c)``, ``a`` a unit mod ``q``, with ``perm[s] = a*s + c mod q`` for every ``s`` in ``symbols``.

    ``symbols`` (default all) are the symbols that occur; the others never enter a phase.

    >>> _affine((2, 0, 1), 3), _affine((1, 0, 2, 3), 4), _affine((1, 0, 2, 3), 4, symbols=(0, 1))
    ((1, 2), None, (3, 1))
    """
    symbols = tuple(range(q)) if symbols is None else tuple(int(s) for s in symbols)
    s0 = symbols[0]
    for a in range(1, max(q, 2)):
        if math.gcd(a, q) != 1:
            continue
        c = (int(perm[s0]) - a * s0) % q
        if all((a * s + c) % q == int(perm[s]) % q for s in symbols):
            return a, c
    return None


def _action_of(f: PartialFunction, a: Automorphism, branches: list[tuple[int, int]], q: int) -> _Action | None:
    """The action of ``a`` on the program's index sets, or ``None`` (logged) when it cannot be used."""
    index = f._index()
    try:
        perm = np.array([index[a.apply(x, f.alphabet)] for x in f.inputs], dtype=np.int64)
    except (KeyError, IndexError, ValueError):
        log.warning("exact: an automorphism does not map the domain onto itself; ignored")
        return None
    if len(set(perm.tolist())) != f.size:
        log.warning("exact: an automorphism is not injective on the domain; ignored")
        return None
    labels = f.labels
    m = len(labels)
    outs = np.arange(m) if a.outputs is None else np.array(a.outputs, dtype=np.int64)
    li = {lab: i for i, lab in enumerate(labels)}
    for i, x in enumerate(f.inputs):
        if outs[li[f.outputs[i]]] != li[f.outputs[perm[i]]]:
            log.warning("exact: an automorphism does not respect the outputs; ignored")
            return None
    bindex = {br: k for k, br in enumerate(branches)}
    order = {ch: i for i, ch in enumerate(f.alphabet)}
    occurring = [sorted({order[x[j]] for x in f.inputs}) for j in range(f.n)]
    bperm = np.zeros(len(branches), dtype=np.int64)
    for k, (j, b) in enumerate(branches):
        if j < 0:
            bperm[k] = 0
            continue
        tau = tuple(range(q)) if a.relabel is None else a.relabel[j]
        aff = _affine(tau, q, occurring[j])
        if aff is None:
            log.info("exact: an automorphism relabels position %d non-affinely over Z_%d; not used", j + 1, q)
            return None
        ainv = pow(aff[0], -1, q)
        target = (int(a.positions[j]), (ainv * b) % q)
        if target not in bindex:
            return None
        bperm[k] = bindex[target]
    return _Action(perm, bperm, outs)


def _generators(f: PartialFunction, use_symmetry: bool, group=None) -> tuple[list[Automorphism], str]:
    """Automorphism generators to use and a word saying where they came from."""
    if not use_symmetry:
        return [], "off"
    if group is None:
        from advbound.functions import symmetry as _sym

        try:
            group = _sym.automorphism_group(f)
        except Exception as err:  # a failure there must not stop the exact program
            log.warning("exact: automorphism search failed (%s); using the builder's symmetries", err)
            group = None
    if group is not None:
        for attr in ("generators", "elements", "automorphisms"):
            gens = getattr(group, attr, None)
            if gens is not None:
                gens = [g for g in gens if isinstance(g, Automorphism)]
                if gens:
                    return gens, "automorphism_group"
        if isinstance(group, (list, tuple)) and all(isinstance(g, Automorphism) for g in group):
            return list(group), "given"
    return list(f.symmetries), "builder"


def _usable_actions(fn: PartialFunction, gens: list[Automorphism], branches: list[tuple[int, int]], q: int,
                    bases: list[np.ndarray]) -> list[_Action]:
    """The actions of ``gens`` that can be used: defined on the program and preserving every query space."""
    actions = [a for a in (_action_of(fn, g, branches, q) for g in gens) if a is not None]
    usable = []
    for a in actions:  # every face must be invariant (it is for a true automorphism; check anyway)
        inv = np.argsort(a.inputs)
        if all(np.abs(V[inv] - V @ (V.T @ V[inv])).max() < 1e-8 for V in bases):
            usable.append(a)
        else:
            log.warning("exact: an automorphism does not preserve the query spaces; not used")
    return usable


# ---------------------------------------------------------------------------------------------
# Orbits and transversals
# ---------------------------------------------------------------------------------------------
def _transversal(n: int, gens: list[tuple[np.ndarray, np.ndarray, int]], d: int):
    """Orbit representatives of ``0..n-1`` and, per point, a group element carrying its representative to it.

    ``gens`` holds ``(point_perm, input_perm, conj)``; an element is ``(input_perm, conj)``.
    """
    rep = np.full(n, -1, dtype=np.int64)
    elem: list = [None] * n
    ident = np.arange(d)
    for p in range(n):
        if rep[p] >= 0:
            continue
        rep[p] = p
        elem[p] = (ident, 0)
        queue = [p]
        while queue:
            u = queue.pop()
            for pp, ip, c in gens:
                v = int(pp[u])
                if rep[v] < 0:
                    rep[v] = p
                    elem[v] = (ip[elem[u][0]], elem[u][1] ^ c)
                    queue.append(v)
    return rep, elem


def _orbit_labels(n: int, perms: list[np.ndarray]) -> np.ndarray:
    """Orbit label of each of ``0..n-1`` under the group generated by ``perms``."""
    g = sp.coo_matrix((np.ones(n * len(perms)), (np.tile(np.arange(n), len(perms)), np.concatenate(perms))),
                      shape=(n, n))
    return connected_components(g, directed=True, connection="weak")[1]
