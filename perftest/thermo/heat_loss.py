"""Boiler efficiency by the heat-loss (indirect) and the input-output (direct) methods.

Each loss is a fraction of the fuel heat input, :math:`m_f H`, with :math:`H` the
heating value on the basis the caller states (``heating_value_basis="lhv"`` or
``"hhv"``, per kg of fuel as fired).  The indirect efficiency is one minus their sum;
the direct efficiency is useful heat over fuel heat input.  The two share only the
fuel analysis and heating value, which makes their reconciliation a strong check.

Boundary and reference
----------------------
Losses are referred to the **combustion-air temperature** :math:`T_a`: air and fuel
enter at :math:`T_a`, so no heat credits arise, and the flue gas leaves at
:math:`T_g` (measured at the boiler outlet, after the last heat recovery counted as
useful).  Sensible heats use ideal-gas enthalpies of the flue-gas species
(:mod:`perftest.thermo.ideal_gas`), so each loss is a smooth function of every input
(no tables, no branches), which the reconciliation linearises by finite or analytic
derivatives.  Valid for 230 K <= T <= 1000 K and a flue gas above its water dew point
(no condensation: a condensing boiler recovers part of the latent heat, which this
method would count as lost; :func:`boiler_losses` warns).

The losses [J per kg fuel, divided by :math:`H`]:

* dry flue gas: :math:`\\sum_{i \\ne H_2O} n_i [H_i^\\circ(T_g) - H_i^\\circ(T_a)]`
  over CO2, CO, SO2, N2, O2, Ar;
* moisture from the fuel's hydrogen, :math:`m_{w,H} (\\Delta h_w + \\ell\\, r)`, and from
  the fuel's free water, :math:`m_{w,f} (\\Delta h_w + \\ell\\, r)`, with
  :math:`\\Delta h_w` the vapour's sensible heat from :math:`T_a` to :math:`T_g`,
  :math:`\\ell` the latent heat of water at 25 °C and :math:`r = 1` on the HHV
  basis, 0 on the LHV basis (the LHV already leaves the water as vapour);
* moisture in the combustion air, :math:`m_{w,a} \\Delta h_w` (enters as vapour);
* unburned CO, :math:`n_{CO} H_{CO}`, with :math:`H_{CO}` = 282.98 kJ/mol (ISO 6976
  Table 3, :data:`perftest.thermo.fuel.COMPONENTS`);
* radiation and convection from the casing, blowdown and other losses: given
  fractions (from the test code's curve or a separate estimate).  "Other" is where
  losses this module does not compute go: unburned carbon in the ash and the ash's
  sensible heat (solid fuels), NOx formation, atomising steam.

All functions take and return floats (one operating point); the reconciliation
evaluates them point by point.

With a constant :math:`\\ell` the two bases are consistent exactly:
:math:`(1 - \\eta_{HHV}) H_{HHV} = (1 - \\eta_{LHV}) H_{LHV} + \\ell (m_{w,H} + m_{w,f})`
when :math:`H_{HHV} - H_{LHV} = \\ell (m_{w,H} + m_{w,f})`, which is how the LHV is
defined from the HHV.

References
----------
.. [1] The structure (losses by origin, referred to the entering-air temperature) is
   the common practice of boiler test codes, e.g. EN 12952-15:2003, Water-tube boilers
   and auxiliary installations, Part 15: Acceptance tests, and ASME PTC 4, Fired
   Steam Generators (from memory); this module is a simplified form of it, not either
   code's procedure.
.. [2] ISO 6976:2016, Table 3 (CO calorific value) and Table 3 footnote (enthalpy of
   vaporisation of water at 25 °C, 44.016 kJ/mol; from memory).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import pandas as pd

from perftest.errors import InputError, PerftestWarning
from perftest.thermo.checks import check_fraction, check_number
from perftest.thermo.combustion import (
    FlueGas,
    excess_air_from_co2,
    excess_air_from_o2,
    flue_gas,
    water_dew_point,
)
from perftest.thermo.fuel import COMPONENTS, L_WATER
from perftest.thermo.ideal_gas import MOLAR_MASSES, check_temperature, mixture_enthalpy_change
from perftest.thermo.if97 import P_TRIPLE

__all__ = [
    "BoilerLosses",
    "WATER_LATENT_HEAT",
    "dry_flue_gas_loss",
    "hydrogen_moisture_loss",
    "fuel_moisture_loss",
    "air_moisture_loss",
    "unburned_co_loss",
    "boiler_losses",
    "heat_loss_efficiency",
    "input_output_efficiency",
]

_M_W = MOLAR_MASSES["H2O"]
#: Latent heat of water at 25 °C [J/kg]: ISO 6976:2016's 44.016 kJ/mol (from memory)
#: over the molar mass of water; the difference between HHV and LHV per kg of water.
WATER_LATENT_HEAT = L_WATER[25.0] / _M_W
#: Calorific value of carbon monoxide at 25 °C [J/mol] (superior = inferior).
_CO_HEAT = COMPONENTS["carbon_monoxide"].superior_25
_BASES = ("lhv", "hhv")


def _basis(value, func):
    if value not in _BASES:
        raise InputError(
            f"The 'heating_value_basis' parameter of {func} must be 'lhv' or 'hhv' (the "
            f"basis of 'heating_value'). Got {value!r}.",
            parameter="heating_value_basis",
        )
    return value


def _hv(value, func):
    return check_number(
        value, "heating_value", func, 1e5, 2e8, "a heating value in J/kg (1e5 to 2e8)"
    )


def _temps(flue_gas_temperature, air_temperature, func):
    Tg = check_temperature(_float_or(flue_gas_temperature), "flue_gas_temperature", func)
    Ta = check_temperature(_float_or(air_temperature), "air_temperature", func)
    return Tg, Ta


def _float_or(value):
    """`value` as float when it is a number (else as given, for the checks to refuse)."""
    try:
        return float(value)
    except (TypeError, ValueError):
        return value


def _check_flue_gas(value, func):
    if not isinstance(value, FlueGas):
        raise InputError(
            f"The 'flue_gas' parameter of {func} must be a FlueGas (from "
            f"perftest.thermo.combustion.flue_gas). Got {type(value).__name__}.",
            parameter="flue_gas",
        )
    return value


def _water_dh(Tg, Ta):
    """Sensible heat of water vapour from Ta to Tg [J/kg]."""
    return mixture_enthalpy_change({"H2O": 1.0}, Ta, Tg) / _M_W


# --------------------------------------------------------------------------------------
# the losses one by one
# --------------------------------------------------------------------------------------
def dry_flue_gas_loss(flue_gas, flue_gas_temperature, air_temperature, heating_value):
    """Sensible heat of the dry flue gas, as a fraction of the fuel heat input [-].

    Parameters
    ----------
    flue_gas : FlueGas
        Flue gas per kg of fuel (:func:`perftest.thermo.combustion.flue_gas`).
    flue_gas_temperature : float [K]
        Flue-gas temperature at the boiler outlet.
    air_temperature : float [K]
        Combustion-air temperature (the reference).
    heating_value : float [J/kg]
        Of the fuel as fired, on the basis of the efficiency (LHV or HHV).

    Returns
    -------
    float [-]

    Notes
    -----
    :math:`L = \\sum_{i \\ne H_2O} n_i [H_i^\\circ(T_g) - H_i^\\circ(T_a)] / H`.

    Examples
    --------
    >>> from perftest.thermo.combustion import flue_gas
    >>> fg = flue_gas({"methane": 1.0}, 0.15)
    >>> round(dry_flue_gas_loss(fg, 433.15, 293.15, 50.0e6), 4)
    0.0526
    """
    func = "dry_flue_gas_loss"
    fg = _check_flue_gas(flue_gas, func)
    Tg, Ta = _temps(flue_gas_temperature, air_temperature, func)
    H = _hv(heating_value, func)
    dry = {k: n for k, n in fg.moles.items() if k != "H2O"}
    return mixture_enthalpy_change(dry, Ta, Tg) / H


def _moisture(mass, Tg, Ta, H, basis):
    latent = WATER_LATENT_HEAT if basis == "hhv" else 0.0
    return mass * (_water_dh(Tg, Ta) + latent) / H


def hydrogen_moisture_loss(
    flue_gas, flue_gas_temperature, air_temperature, heating_value, heating_value_basis
):
    """Loss by the water formed from the fuel's hydrogen, fraction of heat input [-].

    Parameters
    ----------
    flue_gas : FlueGas
    flue_gas_temperature, air_temperature : float [K]
    heating_value : float [J/kg]
    heating_value_basis : {"lhv", "hhv"}
        On the HHV basis the loss includes the latent heat of the water
        (:data:`WATER_LATENT_HEAT`); on the LHV basis only its sensible heat.

    Returns
    -------
    float [-]

    Examples
    --------
    >>> from perftest.thermo.combustion import flue_gas
    >>> fg = flue_gas({"methane": 1.0}, 0.15)
    >>> round(hydrogen_moisture_loss(fg, 433.15, 293.15, 55.5e6, "hhv"), 4)
    0.1096
    """
    func = "hydrogen_moisture_loss"
    fg = _check_flue_gas(flue_gas, func)
    Tg, Ta = _temps(flue_gas_temperature, air_temperature, func)
    return _moisture(
        fg.water_from_hydrogen, Tg, Ta, _hv(heating_value, func), _basis(heating_value_basis, func)
    )


def fuel_moisture_loss(
    flue_gas, flue_gas_temperature, air_temperature, heating_value, heating_value_basis
):
    """Loss by the fuel's free water (moisture), fraction of heat input [-].

    Same parameters and basis rule as :func:`hydrogen_moisture_loss`; zero for a gas.
    """
    func = "fuel_moisture_loss"
    fg = _check_flue_gas(flue_gas, func)
    Tg, Ta = _temps(flue_gas_temperature, air_temperature, func)
    return _moisture(
        fg.water_from_fuel_moisture,
        Tg,
        Ta,
        _hv(heating_value, func),
        _basis(heating_value_basis, func),
    )


def air_moisture_loss(flue_gas, flue_gas_temperature, air_temperature, heating_value):
    """Loss by the water vapour of the combustion air, fraction of heat input [-].

    The vapour enters and leaves as vapour: its sensible heat only, on either basis.
    Parameters as :func:`dry_flue_gas_loss`.
    """
    func = "air_moisture_loss"
    fg = _check_flue_gas(flue_gas, func)
    Tg, Ta = _temps(flue_gas_temperature, air_temperature, func)
    return fg.water_from_air * _water_dh(Tg, Ta) / _hv(heating_value, func)


def unburned_co_loss(flue_gas, heating_value):
    """Loss by carbon monoxide left unburned, fraction of heat input [-].

    :math:`L = n_{CO} H_{CO} / H` with :math:`H_{CO}` = 282.98 kJ/mol; the sensible
    heat of the CO is part of :func:`dry_flue_gas_loss`.

    Examples
    --------
    >>> from perftest.thermo.combustion import flue_gas
    >>> fg = flue_gas({"methane": 1.0}, 0.15, carbon_monoxide=100e-6)
    >>> round(unburned_co_loss(fg, 50.0e6), 6)
    0.000352
    """
    func = "unburned_co_loss"
    fg = _check_flue_gas(flue_gas, func)
    return fg.moles["CO"] * _CO_HEAT / _hv(heating_value, func)


# --------------------------------------------------------------------------------------
# all together
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class BoilerLosses:
    """The losses of the heat-loss method, each a fraction of the fuel heat input.

    Attributes
    ----------
    dry_flue_gas, hydrogen_moisture, fuel_moisture, air_moisture, unburned_co : [-]
        Computed losses.
    radiation, blowdown, other : [-]
        Given losses.
    heating_value_basis : {"lhv", "hhv"}
    excess_air : [-]
    flue_gas : FlueGas
        Per kg of fuel.
    water_dew_point : [K]
        Of the flue gas at the given pressure; NaN when the water partial pressure is
        below the triple point (no dew above 0 °C).
    """

    dry_flue_gas: float
    hydrogen_moisture: float
    fuel_moisture: float
    air_moisture: float
    unburned_co: float
    radiation: float
    blowdown: float
    other: float
    heating_value_basis: str
    excess_air: float
    flue_gas: FlueGas
    water_dew_point: float

    LOSSES = (
        "dry_flue_gas",
        "hydrogen_moisture",
        "fuel_moisture",
        "air_moisture",
        "unburned_co",
        "radiation",
        "blowdown",
        "other",
    )

    @property
    def total(self) -> float:
        """Sum of all losses [-]."""
        return math.fsum(getattr(self, k) for k in self.LOSSES)

    @property
    def efficiency(self) -> float:
        """Heat-loss (indirect) efficiency, 1 - total, on :attr:`heating_value_basis` [-]."""
        return 1.0 - self.total

    def to_series(self) -> pd.Series:
        """The losses, their total and the efficiency as a Series (fractions)."""
        data = {k: getattr(self, k) for k in self.LOSSES}
        data["total"] = self.total
        data["efficiency"] = self.efficiency
        return pd.Series(data, name=f"boiler losses ({self.heating_value_basis.upper()} basis)")

    def __repr__(self) -> str:
        inner = ", ".join(f"{k} {100 * getattr(self, k):.3g} %" for k in self.LOSSES)
        return (
            f"BoilerLosses({inner}; efficiency {100 * self.efficiency:.4g} % "
            f"{self.heating_value_basis.upper()})"
        )


def boiler_losses(
    composition,
    *,
    heating_value,
    heating_value_basis,
    flue_gas_temperature,
    air_temperature,
    oxygen=None,
    carbon_dioxide=None,
    carbon_monoxide=0.0,
    flue_gas_basis="dry",
    air_humidity_ratio=0.0,
    radiation_loss=0.0,
    blowdown_loss=0.0,
    other_loss=0.0,
    pressure=101325.0,
) -> BoilerLosses:
    """All losses of the heat-loss method from the fuel and the flue-gas measurements.

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas
        The fuel (see :mod:`perftest.thermo.fuel_analysis`).
    heating_value : float [J/kg]
        Of the fuel as fired.
    heating_value_basis : {"lhv", "hhv"}
        Basis of `heating_value`, and so of every loss and of the efficiency.
    flue_gas_temperature : float [K]
        At the boiler outlet.
    air_temperature : float [K]
        Combustion air entering (the reference temperature of the losses).
    oxygen : float [-], optional
        O2 mole fraction of the flue gas (0.03 for 3 %).  Give this or
        `carbon_dioxide`.
    carbon_dioxide : float [-], optional
        CO2 mole fraction of the flue gas, used when `oxygen` is not given.
    carbon_monoxide : float [-]
        CO mole fraction of the flue gas (50e-6 for 50 ppm).
    flue_gas_basis : {"dry", "wet"}
        Basis of the three gas fractions.
    air_humidity_ratio : float [kg/kg]
        Water per kg of dry combustion air (:func:`~perftest.thermo.combustion.air_humidity_ratio`).
    radiation_loss, blowdown_loss, other_loss : float [-]
        Given losses, fractions of the heat input.
    pressure : float [Pa]
        Flue-gas pressure for the dew point.

    Returns
    -------
    BoilerLosses
        ``.efficiency`` is the indirect efficiency on `heating_value_basis`.

    Raises
    ------
    InputError
        Neither or both of `oxygen` and `carbon_dioxide`; any input out of range (the
        parameter is named).

    Warns
    -----
    PerftestWarning
        The flue-gas temperature is below the water dew point (condensing operation,
        outside the method).

    Examples
    --------
    >>> losses = boiler_losses({"methane": 1.0}, heating_value=50.0e6,
    ...     heating_value_basis="lhv", flue_gas_temperature=433.15,
    ...     air_temperature=293.15, oxygen=0.03)
    >>> round(losses.efficiency, 4)
    0.9355
    """
    func = "boiler_losses"
    if (oxygen is None) == (carbon_dioxide is None):
        raise InputError(
            f"{func} needs exactly one of 'oxygen' and 'carbon_dioxide' (the flue-gas "
            f"analysis). Got oxygen={oxygen!r}, carbon_dioxide={carbon_dioxide!r}.",
            parameter="oxygen",
        )
    basis = _basis(heating_value_basis, func)
    H = _hv(heating_value, func)
    Tg, Ta = _temps(flue_gas_temperature, air_temperature, func)
    p = check_number(
        pressure, "pressure", func, 1e3, 1e7, "an absolute pressure in Pa (1 kPa-10 MPa)"
    )
    given = {
        "radiation_loss": check_fraction(radiation_loss, "radiation_loss", func, hi=0.5),
        "blowdown_loss": check_fraction(blowdown_loss, "blowdown_loss", func, hi=0.5),
        "other_loss": check_fraction(other_loss, "other_loss", func, hi=0.5),
    }
    kw = {
        "basis": flue_gas_basis,
        "carbon_monoxide": carbon_monoxide,
        "air_humidity_ratio": air_humidity_ratio,
    }
    if oxygen is not None:
        e = excess_air_from_o2(composition, oxygen, **kw)
    else:
        e = excess_air_from_co2(composition, carbon_dioxide, **kw)
    fg = flue_gas(
        composition,
        e,
        air_humidity_ratio=air_humidity_ratio,
        carbon_monoxide=carbon_monoxide,
        basis=flue_gas_basis,
    )
    pw = fg.wet["H2O"] * p
    dew = water_dew_point(fg.wet["H2O"], p) if pw >= P_TRIPLE else math.nan
    if Tg < dew:
        warnings.warn(
            f"The flue-gas temperature {Tg:.2f} K is below the water dew point "
            f"{dew:.2f} K: part of the vapour condenses, which the heat-loss method "
            "counts as lost. The indirect efficiency is too low for condensing operation.",
            PerftestWarning,
            stacklevel=2,
        )
    dry = {k: n for k, n in fg.moles.items() if k != "H2O"}
    return BoilerLosses(
        dry_flue_gas=mixture_enthalpy_change(dry, Ta, Tg) / H,
        hydrogen_moisture=_moisture(fg.water_from_hydrogen, Tg, Ta, H, basis),
        fuel_moisture=_moisture(fg.water_from_fuel_moisture, Tg, Ta, H, basis),
        air_moisture=fg.water_from_air * _water_dh(Tg, Ta) / H,
        unburned_co=fg.moles["CO"] * _CO_HEAT / H,
        radiation=given["radiation_loss"],
        blowdown=given["blowdown_loss"],
        other=given["other_loss"],
        heating_value_basis=basis,
        excess_air=e,
        flue_gas=fg,
        water_dew_point=dew,
    )


def heat_loss_efficiency(composition, **kwargs) -> float:
    """Indirect (heat-loss) boiler efficiency, :math:`1 - \\sum L` [-].

    Takes the arguments of :func:`boiler_losses` and returns its ``.efficiency``, on
    the stated `heating_value_basis`.
    """
    return boiler_losses(composition, **kwargs).efficiency


def input_output_efficiency(useful_heat, fuel_mass_flow, heating_value) -> float:
    """Direct (input-output) boiler efficiency [-].

    Parameters
    ----------
    useful_heat : float [W]
        Heat absorbed by water and steam (feedwater to steam outlets, plus reheat).
    fuel_mass_flow : float [kg/s]
    heating_value : float [J/kg]
        Of the fuel as fired.  The efficiency is on the same basis: an LHV gives the
        LHV efficiency, an HHV the HHV efficiency.

    Returns
    -------
    float [-]
        :math:`\\eta = Q / (m_f H)`.

    Examples
    --------
    >>> input_output_efficiency(45.0e6, 1.0, 50.0e6)
    0.9
    """
    func = "input_output_efficiency"
    Q = check_number(useful_heat, "useful_heat", func, 0.0, math.inf, "a heat flow in W >= 0")
    m = check_number(
        fuel_mass_flow, "fuel_mass_flow", func, 1e-300, math.inf, "a mass flow in kg/s above 0"
    )
    return Q / (m * _hv(heating_value, func))
