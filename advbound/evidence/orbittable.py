"""The structure of an invariant adversary matrix, orbit by orbit: what a theorist reads to guess a closed form.

From an orbit certificate (:mod:`advbound.evidence.orbitcert`) this module lists

* every **pair orbit**: a representative pair ``(x, z)``, its multiplicity (ordered pairs with ``x``
  from the smaller output label), Γ's value, the two inputs' time profiles (the position of the
  non-star symbol in each row, for position-search rows; the row itself otherwise), their outputs,
  how many rows differ and the positions ``(row, position)`` where they differ, i.e. the Δ_j that
  see the pair;
* every **input orbit**: its profile, output, size and the adversary's weight on it: the principal
  eigenvector of Γ restricted to row-permutation-invariant vectors, through the quotient matrix
  ``Q[r, s] = Σ_{x∈r, z∈s} Γ[x, z] / √(m_r m_s)`` (``m_r`` the orbit sizes).  The optimal Γ attains
  its norm on an invariant vector, so for a solved certificate this is the adversary's weighting.

Everything is computed from the orbits; no |D|×|D| matrix is formed.
"""

from __future__ import annotations

import dataclasses

import numpy as np

__all__ = ["PairOrbitRow", "InputOrbitRow", "OrbitTables", "orbit_tables", "row_profile"]


def row_profile(letter: str) -> str:
    """How a row reads in a profile: ``k`` (and its value) for a position-search row, the row otherwise.

    >>> row_profile("**1*"), row_profile("0*"), row_profile("01")
    ('3:1', '1:0', '01')
    """
    marks = [i for i, c in enumerate(letter) if c != "*"]
    if len(marks) == 1 and "*" in letter:
        return f"{marks[0] + 1}:{letter[marks[0]]}"
    return letter


@dataclasses.dataclass(frozen=True)
class PairOrbitRow:
    """One pair orbit of Γ (see the module docstring)."""

    index: int
    x: str
    z: str
    multiplicity: int
    gamma: float
    profile_x: str
    profile_z: str
    output_x: str
    output_z: str
    rows_differ: int
    delta_positions: str


@dataclasses.dataclass(frozen=True)
class InputOrbitRow:
    """One input orbit: its profile, output, size and the adversary's weight on each of its inputs."""

    index: int
    profile: str
    output: str
    size: int
    weight: float


@dataclasses.dataclass(frozen=True)
class OrbitTables:
    """Both tables and the quotient matrix ``Q`` (input orbits in ``inputs`` order)."""

    pairs: tuple
    inputs: tuple
    quotient: np.ndarray
    norm_invariant: float

    def to_dict(self) -> dict:
        return {"pair_orbits": [dataclasses.asdict(r) for r in self.pairs],
                "input_orbits": [dataclasses.asdict(r) for r in self.inputs],
                "norm_on_invariant_vectors": self.norm_invariant}


def orbit_tables(cert) -> OrbitTables:
    """The pair-orbit and input-orbit tables of an accepted orbit certificate."""
    from advbound.evidence.orbitcert import check_orbit_acceptance
    from advbound.functions.tableaux import multinomial

    check_orbit_acceptance(cert)
    letters = cert.letters
    contents = [tuple(int(a) for a in c) for c in np.asarray(cert.contents)]
    index = {c: i for i, c in enumerate(contents)}
    sizes = np.array([multinomial(c) for c in contents], dtype=float)
    L = len(cert.costs)
    R = len(contents)
    Q = np.zeros((R, R))
    pairs = []
    for k, key in enumerate(np.asarray(cert.pair_keys).tolist()):
        a = [int(p[0]) for p in key]
        b = [int(p[1]) for p in key]
        cx, cz = index[tuple(sorted(a))], index[tuple(sorted(b))]
        mult = multinomial(tuple(map(tuple, key)))
        g = float(cert.gamma[k])
        Q[cx, cz] += mult * g
        Q[cz, cx] += mult * g
        diff = [(i, p) for i in range(len(a)) if a[i] != b[i]
                for p in range(L) if letters[a[i]][p] != letters[b[i]][p]]
        pairs.append(PairOrbitRow(
            index=k + 1, x="".join(letters[v] for v in a), z="".join(letters[v] for v in b), multiplicity=mult,
            gamma=g, profile_x=" ".join(row_profile(letters[v]) for v in a),
            profile_z=" ".join(row_profile(letters[v]) for v in b), output_x=cert.outputs[cx],
            output_z=cert.outputs[cz], rows_differ=sum(1 for i in range(len(a)) if a[i] != b[i]),
            delta_positions=" ".join(f"({i + 1},{p + 1})" for i, p in diff)))
    Q = Q / np.sqrt(np.outer(sizes, sizes))
    ev, V = np.linalg.eigh(Q)
    top = int(np.argmax(np.abs(ev)))
    v = V[:, top] * np.sign(V[:, top].sum() or 1.0)
    per_input = v / np.sqrt(sizes)                      # the weight of each single input of the orbit
    inputs = tuple(InputOrbitRow(index=r + 1, profile=" ".join(row_profile(letters[a]) for a in c),
                                 output=cert.outputs[r], size=int(sizes[r]), weight=float(per_input[r]))
                   for r, c in enumerate(contents))
    return OrbitTables(tuple(pairs), inputs, Q, float(abs(ev[top])))
