"""perftest: turn a logged thermal-plant test run into a defensible result.

The public names are imported lazily so that ``import perftest`` stays fast
and a command such as ``perftest --help`` does not load CoolProp or matplotlib.
"""

from __future__ import annotations

import importlib

from perftest.errors import (  # noqa: F401 - re-exported through __all__
    ConvergenceError,
    DataError,
    DataQualityWarning,
    DeclaredPhaseError,
    IndistinguishableWarning,
    InputError,
    PerftestDeprecationWarning,
    PerftestError,
    PerftestWarning,
    PlantFileError,
    PropertyRangeError,
    ReconciliationWarning,
    StabilityWarning,
    UnitError,
)

__version__ = "0.1.0.dev0"

# public name -> module that defines it
_LAZY = {
    "load_plant": "perftest.plant",
    "Plant": "perftest.plant",
    "read_run": "perftest.importers",
    "read_sql": "perftest.importers",
    "Run": "perftest.run",
    "Measurements": "perftest.run",
    "reconcile_linear": "perftest.balance",
    "reconcile_linear_batch": "perftest.balance",
    "reconcile_nonlinear": "perftest.balance",
    "Reconciliation": "perftest.balance",
    "serial_elimination": "perftest.balance",
    "reconcile": "perftest.balance.plant",
    # what reconcile() returns (perftest.Reconciliation is the balance engine's result)
    "PlantReconciliation": "perftest.balance.plant",
    "EliminatedTag": "perftest.balance.plant",
    "MeasurementRecord": "perftest.run.measurements",
    "Performance": "perftest.evaluation.results",
    "WindowTable": "perftest.display.views",
    "get_fluid": "perftest.thermo",
    "Gas": "perftest.thermo",
    "stoichiometric_air": "perftest.thermo.combustion",
    "evaluate": "perftest.evaluation",
    "evaluate_test": "perftest.evaluation.multirun",
    "Campaign": "perftest.evaluation.multirun",
    "reconcile_many": "perftest.scale",
    "plan": "perftest.planning",
    "UncertaintyPlan": "perftest.planning",
}

__all__ = sorted(
    [
        "__version__",
        "PerftestError",
        "InputError",
        "DataError",
        "PlantFileError",
        "UnitError",
        "PropertyRangeError",
        "DeclaredPhaseError",
        "ConvergenceError",
        "PerftestWarning",
        "DataQualityWarning",
        "StabilityWarning",
        "ReconciliationWarning",
        "IndistinguishableWarning",
        "PerftestDeprecationWarning",
        *_LAZY,
    ]
)


def __getattr__(name: str):
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'perftest' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return __all__
