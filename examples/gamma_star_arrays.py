"""The same-profile star of examples/gamma_star.py in vectorised form, for `advbound gamma --vectorised`.

With --vectorised the callable is called once per input x, with two (|D|, N) arrays of symbols: every
row of X is x, and Y lists all inputs.  It returns the |D| values Γ(x, y).  Here the rows' positions
and values come from `position_profiles`, and the whole comparison is numpy:

    advbound gamma instances/or3_sum_T.toml --set T=7 --callable examples/gamma_star_arrays.py:gamma \\
        --vectorised --param cross=0.05
"""

import numpy as np

from advbound.evidence.gammainput import position_profiles

ROWS = 3


def gamma(X, Y, cross=0.0):
    """1 for a same-profile star pair, ``cross`` for a star pair across profiles, else 0 (per row of Y)."""
    px, vx = position_profiles(X, ROWS)
    py, vy = position_profiles(Y, ROWS)
    ones_x, ones_y = vx.sum(axis=1), vy.sum(axis=1)
    star = ((ones_x == 0) & (ones_y == 1)) | ((ones_x == 1) & (ones_y == 0))
    same = (px == py).all(axis=1)
    return np.where(star, np.where(same, 1.0, cross), 0.0)
