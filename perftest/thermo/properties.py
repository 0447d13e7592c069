"""Thermodynamic properties of water, steam, air, refrigerants and humid air.

Everything goes through CoolProp's low-level ``AbstractState``:

* ``"water"`` is IAPWS-IF97 (CoolProp's ``IF97`` backend), the formulation that
  acceptance-test codes for steam plant prescribe;
* ``"water:IAPWS95"`` is the scientific formulation IAPWS-95 (``HEOS`` backend);
* ``"air"`` is CoolProp's pseudo-pure air; any other CoolProp fluid (``"R134a"``,
  ``"nitrogen"``, ``"CO2"``, ``"ammonia"`` ...) is found by name or alias, ignoring case,
  spaces, hyphens and underscores;
* humid air goes through :func:`humid_air_state` (CoolProp's ``HAPropsSI``).

All inputs and outputs are SI: Pa (absolute), K, J/kg, J/(kg K), kg/m3.  Every
function takes floats, numpy arrays or pandas Series (a Series in gives a Series out
with the same index).  NaN inputs give NaN outputs, so gaps in a logged signal pass
through without an error.

States within ``saturation_margin`` (0.05 K by default) of the saturation line are
ambiguous when given by pressure and temperature: a measured 597.8 K at 12 MPa may be
compressed liquid or superheated steam.  Such states raise
:class:`~perftest.errors.PropertyRangeError` unless the caller declares the phase;
with a declared phase the state is computed on the declared side (see
:meth:`Fluid.state_pT`).

The work is split by concept; this module gathers the public names in one place:

* :mod:`~perftest.thermo.fluid`: :class:`Fluid` (a thin handle), :func:`get_fluid`,
  :func:`fluid_names`;
* :mod:`~perftest.thermo.single_phase`, :mod:`~perftest.thermo.inverse`,
  :mod:`~perftest.thermo.saturation`: (p, T), (p, h)/(p, s) and saturated/wet states;
* :mod:`~perftest.thermo.if97`: the IAPWS-IF97 saturation line of water;
* :mod:`~perftest.thermo.backend`, :mod:`~perftest.thermo.coolprop_core`: the raw
  CoolProp calls and the loading of CoolProp's compiled core;
* :mod:`~perftest.thermo.states`: :class:`State`;
* :mod:`~perftest.thermo.exergy`: :func:`specific_exergy`;
* :mod:`~perftest.thermo.humid_air`: :class:`HumidAir`, :func:`humid_air_state`;
* :mod:`~perftest.thermo.checks`: array plumbing, messages and range checks.
"""

from __future__ import annotations

from perftest.thermo.checks import PHASES
from perftest.thermo.coolprop_core import _coolprop, _ha_props_si
from perftest.thermo.exergy import specific_exergy
from perftest.thermo.fluid import Fluid, fluid_names, get_fluid
from perftest.thermo.humid_air import HumidAir, humid_air_state
from perftest.thermo.states import State

__all__ = [
    "Fluid",
    "State",
    "HumidAir",
    "get_fluid",
    "specific_exergy",
    "humid_air_state",
    "fluid_names",
    "PHASES",
    "_coolprop",
    "_ha_props_si",
]
