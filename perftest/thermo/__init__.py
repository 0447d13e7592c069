"""Fluid and fuel properties: the thermodynamic library every later stage calls.

:mod:`~perftest.thermo.properties` gathers the fluid-property names: CoolProp (water and
steam by IAPWS-IF97 or IAPWS-95, gases, refrigerants, humid air) behind :func:`get_fluid`,
with the work split by concept (:mod:`~perftest.thermo.fluid`, ``single_phase``,
``inverse``, ``saturation``, ``if97``, ``backend``, ``exergy``, ``humid_air``);
:mod:`~perftest.thermo.fuel` holds ISO 6976 calorific values and densities of gas
mixtures (:class:`Gas`); :mod:`~perftest.thermo.fuel_analysis` describes a fuel (gas by
components or ultimate analysis), :mod:`~perftest.thermo.combustion` burns it
(stoichiometric and excess air, flue gas, dew points), :mod:`~perftest.thermo.ideal_gas`
holds the flue-gas heat capacities and :mod:`~perftest.thermo.heat_loss` the boiler
losses and efficiencies (heat-loss and input-output methods).

May import: :mod:`perftest.errors` and :mod:`perftest.units` only.
"""

from perftest.thermo.fuel import Gas
from perftest.thermo.properties import Fluid, HumidAir, State, get_fluid, specific_exergy

__all__ = ["Fluid", "Gas", "HumidAir", "State", "get_fluid", "specific_exergy"]
