"""A hand-made adversary matrix for OR of position-search rows, to try with `advbound gamma`.

Γ[x, y] = 1 when x has value 0, y has value 1, and y is x with exactly one row's non-star symbol
flipped from 0 to 1 (same positions k_1..k_n).  For each profile this is the star adversary of
OR_n, so it proves a bound of about √n; an optimal Γ does much better by also pairing inputs
whose profiles differ.

    advbound gamma instances/or3_sum_T.toml --set T=6 --callable examples/same_profile_gamma.py:gamma
"""


def gamma(x: str, y: str) -> float:
    """1.0 when one input has no '1' and the other is it with one '0' turned into '1'; else 0.0."""
    if ("1" in x) == ("1" in y):          # equal OR values: Γ must vanish there
        return 0.0
    diff = [(a, b) for a, b in zip(x, y) if a != b]
    return 1.0 if len(diff) == 1 and set(diff[0]) == {"0", "1"} else 0.0
