"""advbound: adversary bounds (ADV±, ADV, cost-weighted) for small partial functions, verified.

The data flow is builder -> domain -> sdp -> verify -> study/store -> fit/report.
"""

__version__ = "0.1.0"

from .errors import (AdvboundError, AdvboundWarning, CertificateError, InvalidFunctionError,
                     InvalidInstanceError, SolverError)
from .function import Automorphism, PartialFunction
from .domain import Domain, domain
from .certificate import Certificate, load_certificate, save_certificate
from .result import SolveResult, SolverStats

__all__ = sorted([
    "__version__", "AdvboundError", "AdvboundWarning", "CertificateError", "InvalidFunctionError",
    "InvalidInstanceError", "SolverError", "Automorphism", "PartialFunction", "Domain", "domain",
    "Certificate", "load_certificate", "save_certificate", "SolveResult", "SolverStats",
])
