"""The same-profile star for OR of position-search rows, with a free constant, to try with `advbound gamma --fit`.

The inputs of OR of n position-search rows under a time budget have a *profile* (the positions
k_1..k_n of the rows' non-star symbols) and a value per row.  Γ pairs an input of value 0 (every
row 0) with an input of value 1 that has exactly one row of value 1:

* weight 1 when the two inputs have the same profile (then they differ in that one row's
  symbol): for each profile this is the star adversary of OR_n, and alone it proves √n;
* weight ``cross`` when the profiles differ.

``cross = 0`` is the plain same-profile star.  A small positive ``cross`` does better, and
``--fit`` finds a good value; the saved value can be reused at another T:

    advbound gamma instances/or3_sum_T.toml --set T=6 --callable examples/gamma_star.py:gamma \\
        --param cross=0 --fit --save-params cross.json
    advbound gamma instances/or3_sum_T.toml --set T=8 --callable examples/gamma_star.py:gamma \\
        --params-file cross.json
"""


def profile(x: str) -> tuple:
    """The positions of the non-star symbols of ``x``."""
    return tuple(i for i, ch in enumerate(x) if ch != "*")


def gamma(x: str, y: str, cross: float = 0.0) -> float:
    """1 for a same-profile star pair, ``cross`` for a star pair across profiles, else 0."""
    if ("1" in x) == ("1" in y):          # equal OR values: Γ must vanish there
        return 0.0
    zero, one = (y, x) if "1" in x else (x, y)
    if one.count("1") != 1:               # more than one row of value 1: outside the star
        return 0.0
    return 1.0 if profile(zero) == profile(one) else cross
