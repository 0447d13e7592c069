"""The plant description: the plant file and the plant model built from it.

:mod:`~perftest.plant.file` reads the plant TOML and :mod:`~perftest.plant.loader`
checks it into a :class:`Plant` (:mod:`~perftest.plant.records`), against the sections
and keys of :mod:`~perftest.plant.schema`, with the line of each key found by
:mod:`~perftest.plant.scanner`;
:mod:`~perftest.plant.spec` reads the ``[streams]`` and ``[units]`` tables,
:mod:`~perftest.plant.equations` turns them into variables and balance equations
(:class:`PlantModel`: scaled residuals and a sparse analytic Jacobian),
:mod:`~perftest.plant.guess` finds starting values and :mod:`~perftest.plant.states`
makes the property calls with their derivatives.

May import: :mod:`perftest.errors`, :mod:`perftest.units`, :mod:`perftest.thermo`.
"""

from perftest.plant.equations import PlantModel, Row, build_model
from perftest.plant.file import GroupSpec, Plant, TagSpec, load_plant
from perftest.plant.spec import PHASES, UNIT_TYPES, ModelSpec, StreamSpec, UnitSpec

__all__ = [
    "GroupSpec",
    "ModelSpec",
    "PHASES",
    "Plant",
    "PlantModel",
    "Row",
    "StreamSpec",
    "TagSpec",
    "UNIT_TYPES",
    "UnitSpec",
    "build_model",
    "load_plant",
]
