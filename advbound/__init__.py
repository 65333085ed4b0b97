"""advbound: adversary bounds (ADV±, ADV, cost-weighted) for small partial functions, verified.

The data flow is builder -> domain -> sdp -> verify -> study/store -> fit/report.

>>> import advbound as ab
>>> f = ab.position_search_composition("or", 3, None, 7)      # OR of 3 rows, k_1 + k_2 + k_3 = 7
>>> f.size, f.output_counts()
(120, {'0': 15, '1': 105})

Value types, builders and file readers are imported eagerly; the solvers and the study
pipeline (which import cvxpy, matplotlib or dask) are imported on first use, so
``import advbound`` stays fast.
"""

import importlib

__version__ = "0.1.0"

from .errors import (AdvboundError, AdvboundWarning, CertificateError, InvalidFunctionError,
                     InvalidInstanceError, SolverError)
from .function import Automorphism, PartialFunction
from .domain import Domain, domain
from .certificate import Certificate, load_certificate, save_certificate
from .result import SolveResult, SolverStats
from .timemodel import Budget, TimeModel
from .builders import (and_function, compose, dead_positions, exact_function, from_predicate,
                       majority_function, or_function, parity_function, position_search_composition,
                       position_search_row, threshold_function, time_profiles)
from .tablefile import parse_table, read_table, write_table
from .instance import build_instance, grid_points, load_function, load_instance

#: Public names imported on first use, with the module that defines them.
_LAZY = {
    "solve": "solve",
    "verify_certificate": "verify",
    "VerificationReport": "verify",
    "formulate": "sdp",
    "automorphism_group": "symmetry",
    "solve_symmetric": "symmetric",
    "solve_factored": "factored",
    "large_lower_bound": "largescale",
    "verify_rigorous": "rigorous",
    "evaluate_gamma": "usergamma",
    "export_latex": "export",
    "exact_success": "exact",
    "least_queries": "exact",
    "Store": "store",
    "load_study": "study",
    "run_study": "study",
    "compare_models": "fit",
    "fit_model": "fit",
    "write_report": "report",
    "formulation_size": "sizing",
}


def __getattr__(name):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'advbound' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


__all__ = sorted([
    "__version__", "AdvboundError", "AdvboundWarning", "CertificateError", "InvalidFunctionError",
    "InvalidInstanceError", "SolverError", "Automorphism", "PartialFunction", "Domain", "domain",
    "Certificate", "load_certificate", "save_certificate", "SolveResult", "SolverStats",
    "Budget", "TimeModel", "and_function", "compose", "dead_positions", "exact_function", "from_predicate",
    "majority_function", "or_function", "parity_function", "position_search_composition",
    "position_search_row", "threshold_function", "time_profiles", "parse_table", "read_table",
    "write_table", "build_instance", "grid_points", "load_function", "load_instance", *_LAZY,
])
