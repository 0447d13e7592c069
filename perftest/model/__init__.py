"""The plant model: streams, units and their balances, and reconciling a plant.

``build_model(plant)`` turns the ``[streams]`` and ``[units]`` tables of a plant
file into variables and balance equations (:class:`PlantModel`: scaled residuals
and a sparse analytic Jacobian); ``reconcile(plant, measurements)`` adjusts the
measurements by weighted least squares until the balances close and returns a
:class:`PlantReconciliation` with per-tag, per-stream and per-unit tables and the
joint covariance of any set of reconciled quantities.

Modules: ``spec`` (reading and checking the tables), ``equations`` (variables,
residuals, Jacobian), ``guess`` (starting values), ``thermo`` (property calls with
derivatives), ``reconciliation`` (``reconcile`` and its result).
"""

from perftest.model.equations import PlantModel, Row, build_model
from perftest.model.reconciliation import (
    DEFAULT_DEAD_STATE,
    EliminatedTag,
    PlantReconciliation,
    reconcile,
)
from perftest.model.spec import PHASES, UNIT_TYPES, ModelSpec, StreamSpec, UnitSpec

__all__ = [
    "DEFAULT_DEAD_STATE",
    "EliminatedTag",
    "ModelSpec",
    "PHASES",
    "PlantModel",
    "PlantReconciliation",
    "Row",
    "StreamSpec",
    "UNIT_TYPES",
    "UnitSpec",
    "build_model",
    "reconcile",
]
