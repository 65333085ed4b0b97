"""advbound: adversary bounds (ADV±, ADV, cost-weighted) for small partial functions, verified.

The package is laid out by stage, in the order data flows:

- :mod:`advbound.functions`: partial functions, domains, builders, time models, files;
- :mod:`advbound.evidence`: certificates and their independent checking;
- :mod:`advbound.programs`: the semidefinite programs that produce certificates;
- :mod:`advbound.studies`: sweeps, the result store, fits and reports;
- :mod:`advbound.cli`: the ``advbound`` command, one module per subcommand.

A stage imports only earlier stages and the vocabulary modules at the top
(:mod:`~advbound.errors`, :mod:`~advbound.status`, :mod:`~advbound.quantities`,
:mod:`~advbound.result`).  Evidence comes before the programs on purpose: a
program hands its output to the checker, and the checker never depends on a solver.

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

from advbound.errors import (AdvboundError, AdvboundWarning, CertificateError, InvalidFunctionError,
                             InvalidInstanceError, SolverError)
from advbound.functions.function import Automorphism, PartialFunction
from advbound.functions.domain import Domain, domain
from advbound.evidence.certificate import Certificate, load_certificate, save_certificate
from advbound.result import SolveResult, SolverStats
from advbound.functions.timemodel import Budget, TimeModel
from advbound.functions.builders import (and_function, compose, dead_positions, exact_function, from_predicate,
                                         majority_function, or_function, parity_function, position_search_composition,
                                         position_search_row, threshold_function, time_profiles)
from advbound.functions.tablefile import parse_table, read_table, write_table
from advbound.functions.instance import build_instance, grid_points, load_function, load_instance

#: Public names imported on first use, with the module that defines them.
_LAZY = {
    "solve": "programs.solve",
    "verify_certificate": "evidence.verify",
    "VerificationReport": "evidence.verify",
    "formulate": "programs.sdp",
    "automorphism_group": "functions.symmetry",
    "solve_symmetric": "programs.symmetric",
    "solve_factored": "programs.factored",
    "large_lower_bound": "programs.largescale",
    "verify_rigorous": "evidence.rigorous",
    "evaluate_gamma": "evidence.usergamma",
    "export_latex": "evidence.export",
    "exact_success": "programs.exact",
    "least_queries": "programs.exact",
    "Store": "studies.store",
    "load_study": "studies.study",
    "run_study": "studies.study",
    "compare_models": "studies.fit",
    "fit_model": "studies.fit",
    "write_report": "studies.report",
    "formulation_size": "functions.sizing",
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
