"""Exceptions and warnings raised by advbound.

Misuse (a malformed function, a bad file, a bad option) raises an exception;
a solver that does not converge or a certificate that fails a check comes back
as a *status* on the result object instead (see :mod:`advbound.status`).

Typical use::

    try:
        f = read_table("f.tbl")
    except InvalidFunctionError as err:
        print(err)          # one line naming the file, line and problem
"""

__all__ = [
    "AdvboundError",
    "InvalidFunctionError",
    "InvalidInstanceError",
    "SolverError",
    "CertificateError",
    "AdvboundWarning",
]


class AdvboundError(Exception):
    """Base class of every error advbound raises on purpose."""


class InvalidFunctionError(AdvboundError, ValueError):
    """A partial function, table file or builder argument is malformed."""


class InvalidInstanceError(AdvboundError, ValueError):
    """An instance or study file (TOML) is malformed or names unknown things."""


class SolverError(AdvboundError, RuntimeError):
    """A solver crashed or is not installed (as opposed to returning a poor answer)."""


class CertificateError(AdvboundError, ValueError):
    """A certificate file is unreadable, incomplete or inconsistent."""


class AdvboundWarning(UserWarning):
    """Something doubtful that does not stop the computation (duplicate lines, inaccurate solves)."""
