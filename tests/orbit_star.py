"""The hand-made OR_3 star as orbit-certificate arrays, and the edit rule of forged files, shared by tests.

OR_3 as three rows of one bit, with the star Γ (value 1 between 000 and each input of one 1).
``ADV±(OR_3) = ADV(OR_3) = √3`` and the star reaches it ("Quantum lower bounds by quantum
arguments", 2000, arXiv:quant-ph/0002066); with the test vector ρ = 1/2 on 000 and 1/6 on each input
of one 1 (the star's top eigenvector, squared) the Rayleigh quotient is exactly √3:
``2·3·1·√(1/2·1/6) / (1/2 + 3/6) = √3``; each Γ∘Δ_j is one edge, norm 1.
"""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
RECHECK = ROOT / "tools" / "recheck_certificate.py"
FORMAT = "advbound-orbit-certificate/1"


def star_arrays(bound: str = "general", **changes) -> dict:
    """The OR_3 star as orbit-certificate arrays for ``bound``; a change of ``None`` removes the array."""
    a = {"format": np.array(FORMAT), "alphabet": np.array(["0", "1"]), "letters": np.array(["0", "1"]),
         "contents": np.array([[0, 0, 0], [0, 0, 1], [0, 1, 1], [1, 1, 1]], dtype=np.int64),
         "outputs": np.array(["0", "1", "1", "1"]), "costs": np.ones(1),
         "pair_keys": np.array([[[0, 0], [0, 0], [0, 1]]], dtype=np.int64), "gamma": np.ones(1),
         "rho": np.array([0.5, 1 / 6, 0.0, 0.0]), "metadata": np.array(json.dumps({"bound": bound}))}
    return apply_changes(a, changes)


def apply_changes(arrays: dict, changes: dict) -> dict:
    """``arrays`` with each change applied in place: a value replaces the array, ``None`` removes it."""
    for k, v in changes.items():
        if v is None:
            arrays.pop(k, None)
        else:
            arrays[k] = v
    return arrays


def write(path, arrays):
    np.savez(path, **arrays)
    return path


def recheck(path):
    """Run the standalone re-checker on ``path``."""
    return subprocess.run([sys.executable, str(RECHECK), str(path)], capture_output=True, text=True, timeout=300)
