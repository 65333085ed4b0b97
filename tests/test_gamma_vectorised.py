"""The vectorised form of a user's Γ (``gamma(X, Y, **params)`` on arrays of inputs, ``--vectorised``).

Outside check: the per-pair form of the same matrix (examples/gamma_star.py, called once per pair)
builds the dense Γ by an independent code path; the vectorised one must give the same matrix, and
the same-profile star at cross = 0 gives √n (derived in tests/test_gamma_params.py).
"""

import math
import os
import re
import sys

import numpy as np
import pytest

from advbound.cli import main
from advbound.evidence.gammainput import GammaError, gamma_from_callable, load_callable, position_profiles
from advbound.functions.instance import load_function

ROOT = os.path.join(os.path.dirname(__file__), "..")
INSTANCE = os.path.join(ROOT, "instances", "or3_sum_T.toml")
PAIRS = os.path.join(ROOT, "examples", "gamma_star.py") + ":gamma"
ARRAYS = os.path.join(ROOT, "examples", "gamma_star_arrays.py") + ":gamma"


@pytest.mark.parametrize("T,cross", [(5, 0.0), (7, 0.05), (9, 0.2)])
def test_vectorised_matrix_equals_the_per_pair_matrix(T, cross):
    f = load_function(INSTANCE, params={"T": T})
    a = gamma_from_callable(f, load_callable(PAIRS), params={"cross": cross})
    b = gamma_from_callable(f, load_callable(ARRAYS), params={"cross": cross}, vectorised=True)
    assert np.array_equal(a, b)


def test_position_profiles_reads_positions_and_values():
    X = np.array([list("0**" + "*1*" + "**0"), list("*0*" + "1**" + "**1")])
    pos, val = position_profiles(X, 3)
    assert pos.tolist() == [[1, 2, 3], [2, 1, 3]] and val.tolist() == [[0, 1, 0], [0, 1, 1]]


@pytest.mark.parametrize("body,match", [
    ("return np.zeros(3)", "returned shape (3,), expected"),
    ("return np.full(len(Y), np.nan)", "not a finite number"),
    ("raise KeyError('k')", "raised KeyError"),
])
def test_bad_vectorised_callables_get_one_line(tmp_path, body, match):
    mod = tmp_path / "bad.py"
    mod.write_text(f"import numpy as np\ndef gamma(X, Y):\n    {body}\n")
    f = load_function(INSTANCE, params={"T": 5})
    with pytest.raises(GammaError, match=re.escape(match)) as err:
        gamma_from_callable(f, load_callable(f"{mod}:gamma"), vectorised=True)
    assert "\n" not in str(err.value)


def test_cli_vectorised(capsys):
    code = main(["gamma", INSTANCE, "--set", "T=7", "--callable", ARRAYS, "--vectorised", "--param", "cross=0"])
    out = capsys.readouterr().out
    assert code == 0
    assert float(re.search(r"ratio = ([0-9.]+)", out).group(1)) == pytest.approx(math.sqrt(3), rel=1e-10)
    code = main(["gamma", INSTANCE, "--set", "T=7", "--orbits", "--callable", ARRAYS, "--vectorised"])
    assert code == 2 and "--vectorised does not combine with --orbits" in capsys.readouterr().err
