"""Data reconciliation engine: linear and nonlinear weighted least squares under
balance constraints, redundancy and observability, and gross-error tests.

Layer: depends on numpy, scipy and :mod:`perftest.errors` only.
"""

from perftest.balance.elimination import serial_elimination, serial_elimination_nonlinear
from perftest.balance.gross import (
    GlobalTest,
    MeasurementTest,
    NodalTest,
    global_test,
    measurement_test,
    nodal_test,
    sidak_critical_value,
    vdi2048_criterion,
)
from perftest.balance.linear import reconcile_linear, reconcile_linear_batch
from perftest.balance.nonlinear import reconcile_nonlinear
from perftest.balance.result import (
    BatchReconciliation,
    Elimination,
    EliminationStep,
    Reconciliation,
)

__all__ = [
    "BatchReconciliation",
    "Elimination",
    "EliminationStep",
    "GlobalTest",
    "MeasurementTest",
    "NodalTest",
    "Reconciliation",
    "global_test",
    "measurement_test",
    "nodal_test",
    "reconcile_linear",
    "reconcile_linear_batch",
    "reconcile_nonlinear",
    "serial_elimination",
    "serial_elimination_nonlinear",
    "sidak_critical_value",
    "vdi2048_criterion",
]
