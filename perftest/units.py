"""Unit strings as plant logs write them, and conversion to and from SI.

Everything inside perftest is SI (Pa absolute, K, kg/s, m3/s, W, J/kg, J/(kg K),
kg/m3, plain fractions, heat rate as J/J).  This module is the only place where
a logged unit such as ``"barg"``, ``"t/h"`` or ``"kJ/kWh"`` is turned into a
scale factor and an offset.

How a unit string is read
-------------------------
1. The text is normalised (case folded, white space removed, ``°`` -> ``deg``,
   ``³`` -> ``3``, ``/hr`` -> ``/h``, ``/sec`` -> ``/s``) and looked up in an alias
   table of the spellings that data loggers write (``"DEGC"``, ``"deg C"``,
   ``"T/H"``, ``"t/hr"``, ``"kg/sec"``, ``"MWe"``, ``"bar(a)"`` ...).
2. Pressures are read as a base unit plus a suffix: none, ``a``, ``(a)``, ``abs``
   (absolute), ``g``, ``(g)``, ``gauge`` (gauge: add the atmospheric pressure),
   ``vac``, ``(vac)`` (vacuum: atmospheric pressure minus the reading) or ``d``,
   ``(d)``, ``diff`` (differential: scale only).
3. Anything else goes to pint, case sensitive (``"hectopascal"``, ``"Btu/s"``),
   and its dimension decides the quantity.  When pint cannot read it either, a
   :class:`~perftest.errors.UnitError` says how to write it.

Decisions (documented so that users and reviewers can check them)
------------------------------------------------------------------
* A metric pressure unit without a suffix (``bar``, ``kPa``, ``MPa``, ``Pa``,
  ``mbar``) is **absolute**, as in SI practice.  Plain ``psi`` is refused: in
  plant logs it is used for gauge and absolute readings alike, so the user must
  write ``psia``, ``psig`` or ``psid``.  Plain ``inHg`` and ``mmHg`` are absolute
  (barometers, condenser back pressure); write ``inHg vac`` for a vacuum gauge.
* ``C`` and ``F`` alone mean degrees Celsius and Fahrenheit (coulomb and farad
  never appear in plant logs).
* ``kcal`` is the International Table kilocalorie (4.1868 kJ), the one used in
  steam tables and heat-rate practice; pint's bare ``kcal`` is thermochemical.
  Likewise ``Btu`` in the alias table is the International Table Btu
  (1055.05585262 J, so that 1 Btu/lb = 2.326 kJ/kg exactly); pint's bare
  ``Btu`` (reached only through the pint fallback) is 1055.056 J.
* Volume flows (``m3/h``, ``l/s``, ``Nm3/h`` ...) convert to m3/s, or to kg/s
  when a density [kg/m3] is given (or ``quantity="mass_flow"`` is asked for, in
  which case the density is required).  ``Nm3/h`` is treated as m3/h: the density
  given must then be the density at the same normal conditions.
* Volumetric heating values (``MJ/m3``, ``Btu/scf``) convert to J/kg and always
  need the density, because the glossary has no volumetric-energy quantity.
* Heat-rate units (``kJ/kWh``, ``Btu/kWh``, ``MJ/MWh``, ``kcal/kWh``) convert to
  the dimensionless J/J.
* ``to_si`` does not look at the values: NaN passes through, and a gauge reading
  that ends up at or below 0 Pa absolute is left for the caller to judge with
  :func:`check_absolute_pressure` or :func:`nonpositive_pressure` (the importer
  masks such samples per column and records why).
* ``rpm`` converts to rad/s (NIST SP 811, B.8).

Conversion is ``si = value * scale + offset`` (plus ``+/- atmospheric pressure``
for gauge and vacuum units, times the density for volume flows).  The factors
are computed once per unit string and cached, so converting millions of logged
values is one or two numpy passes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from perftest.errors import DataError, InputError, UnitError
from perftest.unit_names import ALIASES as _ALIASES  # the spellings plant logs write
from perftest.unit_names import DELTA as _D
from perftest.unit_names import PERCENT as _P
from perftest.unit_names import PRESSURE_BASES as _PRESSURE_BASES
from perftest.unit_names import PRESSURE_RE as _PRESSURE_RE
from perftest.unit_names import PRESSURE_SUFFIX as _PRESSURE_SUFFIX
from perftest.unit_names import VOLUME as _V
from perftest.unit_names import VOLUMETRIC_ENERGY as _VE
from perftest.unit_names import normalise as _normalise

__all__ = [
    "QUANTITIES",
    "UnitSpec",
    "parse_unit",
    "to_si",
    "from_si",
    "si_unit",
    "quantity_of",
    "compatible",
    "nonpositive_pressure",
    "check_absolute_pressure",
    "registry",
]

# Glossary quantity -> SI unit used inside perftest (docs/architecture.md).
_SI_UNITS: dict[str, str] = {
    "pressure": "Pa",
    "temperature": "K",
    "temperature_difference": "K",
    "mass_flow": "kg/s",
    "volume_flow": "m3/s",
    "power": "W",
    "heat_flow": "W",
    "specific_enthalpy": "J/kg",
    "specific_entropy": "J/(kg K)",
    "specific_exergy": "J/kg",
    "density": "kg/m3",
    "fraction": "1",
    "heat_rate": "J/J",
    "specific_energy": "J/kg",
    "energy": "J",
    "frequency": "Hz",
    "speed": "rad/s",
    "dimensionless": "1",
}

#: The canonical quantity names (glossary of docs/architecture.md).
QUANTITIES: tuple[str, ...] = tuple(_SI_UNITS)

# Quantities that share a dimension and may be converted into each other.
_FAMILY: dict[str, str] = {
    "pressure": "pressure",
    "temperature": "temperature",
    "temperature_difference": "temperature",
    "mass_flow": "mass_flow",
    "volume_flow": "volume_flow",
    "power": "power",
    "heat_flow": "power",
    "specific_enthalpy": "specific_energy",
    "specific_exergy": "specific_energy",
    "specific_energy": "specific_energy",
    "specific_entropy": "specific_entropy",
    "density": "density",
    "fraction": "dimensionless",
    "heat_rate": "dimensionless",
    "dimensionless": "dimensionless",
    "energy": "energy",
    "frequency": "frequency",
    "speed": "speed",
}

# pint expression of the SI unit of each family.
_FAMILY_SI_PINT: dict[str, str] = {
    "pressure": "Pa",
    "temperature": "K",
    "mass_flow": "kg/s",
    "volume_flow": "m**3/s",
    "power": "W",
    "specific_energy": "J/kg",
    "specific_entropy": "J/(kg*K)",
    "density": "kg/m**3",
    "dimensionless": "dimensionless",
    "energy": "J",
    "frequency": "Hz",
    "speed": "rad/s",
    # volumetric energy: only reached on the way to specific_energy
    "volumetric_energy": "J/m**3",
}

# Examples shown in error messages, per quantity.
_EXAMPLES: dict[str, str] = {
    "pressure": "'bar', 'barg', 'kPa', 'MPa', 'psia', 'psig', 'inHg', 'mbar'",
    "temperature": "'degC', 'degF', 'K'",
    "temperature_difference": "'K', 'delta_degC', 'delta_degF'",
    "mass_flow": "'kg/s', 't/h', 'kg/h', 'klb/h'",
    "volume_flow": "'m3/h', 'm3/s', 'l/s'",
    "power": "'kW', 'MW'",
    "heat_flow": "'kW', 'MW', 'MMBtu/h'",
    "specific_enthalpy": "'kJ/kg', 'Btu/lb'",
    "specific_exergy": "'kJ/kg'",
    "specific_energy": "'MJ/kg', 'kJ/kg', 'Btu/lb'",
    "specific_entropy": "'kJ/(kg K)'",
    "density": "'kg/m3'",
    "fraction": "'%', 'fraction'",
    "heat_rate": "'kJ/kWh', 'Btu/kWh'",
    "dimensionless": "'-', '%'",
    "energy": "'kWh', 'MWh', 'MJ'",
    "frequency": "'Hz'",
    "speed": "'rpm'",
}


@dataclass(frozen=True)
class UnitSpec:
    """A parsed unit: what it measures and how it converts to SI.

    Attributes
    ----------
    text : str
        The unit as written.
    quantity : str
        Glossary quantity the unit measures by default (``"pressure"``,
        ``"mass_flow"`` ...).  For a volume-flow unit this is ``"volume_flow"``
        and for a volumetric heating value ``"specific_energy"``.
    gauge : bool
        True for gauge and vacuum pressures: conversion needs the atmospheric
        pressure.
    needs_density : bool
        True for volume units that become mass based with a density
        (volume flow -> mass flow, MJ/m3 -> J/kg).
    is_percent : bool
        True when the unit is a percentage (scale 0.01).
    scale : float
        SI per unit (for vacuum units the sign is in ``gauge_sign``).
    offset : float
        SI offset added after scaling (temperatures only) [K].
    gauge_sign : int
        0 absolute, +1 gauge (``p = p_atm + x``), -1 vacuum (``p = p_atm - x``).
    density_exponent : int
        0, +1 (multiply by density: volume flow -> mass flow) or -1 (divide by
        density: volumetric -> specific energy).
    is_difference : bool
        True for a unit of a temperature difference (``delta_degC``); such a unit
        cannot describe an absolute temperature.
    """

    text: str
    quantity: str
    gauge: bool = False
    needs_density: bool = False
    is_percent: bool = False
    scale: float = 1.0
    offset: float = 0.0
    gauge_sign: int = 0
    density_exponent: int = 0
    is_difference: bool = False

    @property
    def si_unit(self) -> str:
        """SI unit the values convert to with no density given."""
        if self.density_exponent == -1:
            return "J/m3"
        return _SI_UNITS[self.quantity]


# ---------------------------------------------------------------------------
# pint registry, created on first use (building it costs about 0.4 s)


@lru_cache(maxsize=1)
def registry():
    """Return the module's single pint ``UnitRegistry`` (created on first call)."""
    import pint

    return pint.UnitRegistry()


def _unknown(text: str, reason: str = "") -> UnitError:
    why = f" ({reason})" if reason else ""
    return UnitError(
        f"Unknown unit {text!r}{why}. Write it as e.g. 'bar', 'barg', 'kPa', 'psia', "
        "'degC', 'degF', 'K', 'delta_degC', 't/h', 'kg/s', 'm3/h', 'MW', 'kJ/kg', "
        "'kJ/kWh', '%' or any unit pint understands (case sensitive, e.g. 'hectopascal')."
    )


def _factor(expr: str, family: str) -> tuple[float, float]:
    """Scale and offset of a pint expression to the SI unit of ``family``."""
    ureg = registry()
    target = _FAMILY_SI_PINT[family]
    q = ureg.parse_expression(expr)
    if not hasattr(q, "units"):  # a bare number
        q = ureg.Quantity(float(q), "dimensionless")
    mag = float(q.magnitude)
    unit = q.units
    zero = ureg.Quantity(0.0, unit).to(target).magnitude
    if family == "temperature":
        # scale from a wide span: (f(1e6) - f(0)) / 1e6 keeps full precision, where
        # f(1) - f(0) would lose the last digits to the offset (degF: 5/9 - 1e-14)
        span = ureg.Quantity(mag * 1e6, unit).to(target).magnitude
        return float((span - zero) / 1e6), float(zero)
    return float(ureg.Quantity(mag, unit).to(target).magnitude), 0.0


def _family_of_dimensionality(q) -> str | None:
    ureg = registry()
    for family, target in _FAMILY_SI_PINT.items():
        if q.dimensionality == ureg.parse_expression(target).dimensionality:
            return family
    return None


_FAMILY_DEFAULT_QUANTITY = {
    "pressure": "pressure",
    "temperature": "temperature",
    "mass_flow": "mass_flow",
    "volume_flow": "volume_flow",
    "power": "power",
    "specific_energy": "specific_enthalpy",
    "specific_entropy": "specific_entropy",
    "density": "density",
    "dimensionless": "dimensionless",
    "energy": "energy",
    "frequency": "frequency",
    "speed": "speed",
}


def _via_pint(text: str) -> UnitSpec:
    ureg = registry()
    expr = text.strip().replace("³", "**3").replace("²", "**2").replace("°", "deg")
    try:
        q = ureg.parse_expression(expr)
    except Exception as exc:  # pint raises several unrelated exception types
        undefined = type(exc).__name__ == "UndefinedUnitError"
        raise _unknown(text, "not defined" if undefined else "cannot be read") from None
    if not hasattr(q, "units"):
        raise _unknown(text, "it is a number, not a unit")
    family = _family_of_dimensionality(q)
    if family is None:
        raise _unknown(text, f"pint reads it as {q.dimensionality}, which is no plant quantity")
    names = set(q.units._units)
    energy_dim = ureg.parse_expression("J").dimensionality
    has_energy = any(ureg.parse_expression(n).dimensionality == energy_dim for n in names)
    is_delta = any(n.startswith("delta_") for n in names)
    flag: str | None = None
    quantity = _FAMILY_DEFAULT_QUANTITY.get(family, family)
    if family == "pressure" and has_energy:
        family, quantity, flag = "volumetric_energy", "specific_energy", _VE
    elif family == "dimensionless" and has_energy:
        quantity = "heat_rate"
    elif family == "volume_flow":
        flag = _V
    elif family == "temperature" and is_delta:
        quantity, flag = "temperature_difference", _D
    try:
        scale, offset = _factor(expr, family)
    except Exception as exc:
        raise _unknown(text, f"pint cannot convert it: {exc}") from None
    return _spec(text, quantity, scale, offset, flag)


def _spec(text: str, quantity: str, scale: float, offset: float, flag: str | None) -> UnitSpec:
    if flag == _D:
        offset = 0.0
    return UnitSpec(
        text=text,
        quantity=quantity,
        needs_density=flag in (_V, _VE),
        is_percent=flag == _P,
        scale=scale,
        offset=offset,
        density_exponent=1 if flag == _V else (-1 if flag == _VE else 0),
        is_difference=flag == _D,
    )


@lru_cache(maxsize=4096)
def _parse_cached(text: str) -> UnitSpec:
    key = _normalise(text)
    if not key:
        raise UnitError(
            "The unit text is empty. Write the unit of the column (e.g. 'bar', 'degC', "
            "'t/h'), or '-' for a dimensionless value."
        )
    m = _PRESSURE_RE.match(key)
    if m:
        base, suffix = m.group("base"), m.group("suffix") or ""
        sign = _PRESSURE_SUFFIX[suffix]
        if base in ("psi", "ksi") and suffix == "":
            raise UnitError(
                f"The unit {text!r} is ambiguous: plant logs use plain 'psi' for gauge and "
                "absolute readings alike. Write 'psia' (absolute), 'psig' (gauge) or "
                "'psid' (differential)."
            )
        scale, _ = _factor(_PRESSURE_BASES[base], "pressure")
        return UnitSpec(
            text=text,
            quantity="pressure",
            gauge=bool(sign),
            scale=scale,
            gauge_sign=sign or 0,
        )
    hit = _ALIASES.get(key)
    if hit is not None:
        expr, quantity, flag = hit
        family = _VE if flag == _VE else _FAMILY[quantity]
        scale, offset = _factor(expr, family)
        return _spec(text, quantity, scale, offset, flag)
    spec = _via_pint(text)
    if not (math.isfinite(spec.scale) and spec.scale != 0.0 and math.isfinite(spec.offset)):
        # pint reads "nan", "inf" or "0" as a bare number: converting with it would turn
        # every value into nan, inf or 0 without a word
        raise UnitError(
            f"The text {text!r} is not a unit: it reads as the number {spec.scale:g}. "
            "Write the unit of the column (e.g. 'bar', 'degC', 't/h'), or '-' for a "
            "dimensionless value."
        )
    return spec


def parse_unit(text) -> UnitSpec:
    """Read a unit string as plant logs write it.

    Parameters
    ----------
    text : str or UnitSpec
        Unit as logged, e.g. ``"barg"``, ``"deg C"``, ``"T/H"``, ``"kJ/kWh"``.
        A :class:`UnitSpec` is returned unchanged.

    Returns
    -------
    UnitSpec
        Quantity, flags and the factors to SI.  Results are cached per string.

    Raises
    ------
    UnitError
        Unknown or ambiguous unit (plain ``"psi"``), or empty text.

    Examples
    --------
    >>> parse_unit("barg").gauge
    True
    >>> parse_unit("T/H").quantity
    'mass_flow'
    """
    if isinstance(text, UnitSpec):
        return text
    if not isinstance(text, str):
        raise UnitError(f"A unit must be a text such as 'bar' or 'degC'. Got {text!r}.")
    return _parse_cached(text)


def compatible(unit_quantity: str, quantity: str) -> bool:
    """True when a unit measuring ``unit_quantity`` may describe ``quantity``.

    Same dimension is required; a temperature-difference unit cannot describe an
    absolute temperature.  A volume-flow unit may describe a mass flow (with a
    density).
    """
    if unit_quantity == "temperature_difference" and quantity == "temperature":
        return False
    if unit_quantity == "volume_flow" and quantity == "mass_flow":
        return True
    return _FAMILY.get(unit_quantity) == _FAMILY.get(quantity)


def _check_quantity_name(quantity: str | None, function: str) -> None:
    if quantity is not None and quantity not in _SI_UNITS:
        raise InputError(
            f"The 'quantity' parameter of {function} must be one of {', '.join(QUANTITIES)}. "
            f"Got {quantity!r}.",
            parameter="quantity",
        )


def _resolve(spec: UnitSpec, quantity, density, function: str) -> int:
    """Check quantity/unit agreement and return the density exponent to apply."""
    _check_quantity_name(quantity, function)
    if quantity is not None and not compatible(spec.quantity, quantity):
        if spec.is_difference and quantity == "temperature":
            what = "is a temperature difference and cannot describe an absolute temperature"
        else:
            what = f"measures {spec.quantity}"
        raise UnitError(
            f"The unit {spec.text!r} {what}, not {quantity}. "
            f"Write a {quantity} unit such as {_EXAMPLES[quantity]}.",
            parameter="unit",
        )
    if spec.density_exponent == 0:
        if density is not None:
            raise InputError(
                f"The 'density' parameter of {function} is only used for volume units "
                f"(m3/h, MJ/m3 ...); the unit {spec.text!r} measures {spec.quantity}. "
                "Drop the density.",
                parameter="density",
            )
        return 0
    if spec.density_exponent == 1:
        if quantity == "volume_flow":
            if density is not None:
                raise InputError(
                    f"The 'density' parameter of {function} converts volume flow to mass flow, "
                    "but quantity='volume_flow' was asked for. Drop the density or ask for "
                    "quantity='mass_flow'.",
                    parameter="density",
                )
            return 0
        if density is None:
            if quantity == "mass_flow":
                raise UnitError(
                    f"The unit {spec.text!r} is a volume flow; a mass flow needs the density "
                    "of the fluid [kg/m3]. Give 'density' (plant file: the tag's "
                    "density = { value, unit }).",
                    parameter="density",
                )
            return 0
        return 1
    if density is None:
        raise UnitError(
            f"The unit {spec.text!r} is a heating value per volume; perftest works per mass "
            "(J/kg) and needs the gas density at the same reference conditions [kg/m3]. "
            "Give 'density' (plant file: density = { value, unit }).",
            parameter="density",
        )
    return -1


def _as_array(values, name: str, function: str):
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise InputError(
            f"The {name!r} parameter of {function} must be numeric (float, array or Series). "
            f"Got {type(values).__name__}.",
            parameter=name,
        ) from None
    return arr


def _aux(value, values, name: str, function: str):
    """Atmospheric pressure or density: scalar, array, or Series aligned to values."""
    if hasattr(value, "reindex") and hasattr(values, "index"):
        value = value.reindex(values.index)
    arr = _as_array(value, name, function)
    if arr.ndim == 1 and np.ndim(values) == 2:
        arr = arr[:, None]  # one reference per row (time) of a 2-D block
    if arr.ndim == 0:
        if not np.isfinite(arr) or arr <= 0:
            raise InputError(
                f"The {name!r} parameter of {function} must be a positive SI value. Got {value!r}.",
                parameter=name,
            )
    return arr


def _wrap(result: np.ndarray, values):
    if hasattr(values, "index") and hasattr(values, "to_numpy") and getattr(values, "ndim", 1) == 1:
        import pandas as pd

        return pd.Series(result, index=values.index, name=values.name)
    if hasattr(values, "columns"):
        import pandas as pd

        return pd.DataFrame(result, index=values.index, columns=values.columns)
    if np.ndim(result) == 0:
        return float(result)
    return result


def _gauge_missing(spec: UnitSpec, function: str) -> UnitError:
    return UnitError(
        f"The unit {spec.text!r} is a gauge/vacuum pressure; {function} needs the atmospheric "
        "pressure [Pa] to make it absolute. Set site.atmospheric_pressure or "
        "site.barometer_tag in the plant file (or pass atmospheric_pressure=).",
        parameter="atmospheric_pressure",
    )


def to_si(
    values,
    unit,
    *,
    quantity: str | None = None,
    atmospheric_pressure=None,
    density=None,
    difference: bool = False,
):
    """Convert values written in ``unit`` to SI.

    Parameters
    ----------
    values : float, array_like or pandas.Series/DataFrame
        Values in ``unit``.
    unit : str or UnitSpec
        Unit as logged (see :func:`parse_unit`).
    quantity : str, optional
        Glossary quantity the values stand for.  Checked against the unit;
        ``"temperature_difference"`` converts without offset, ``"mass_flow"``
        with a volume unit needs ``density``.
    atmospheric_pressure : float, array_like or Series, optional
        Absolute atmospheric pressure [Pa] for gauge and vacuum units: a fixed
        value or a logged barometer, sample by sample (a Series is aligned on
        the index of ``values``).
    density : float, array_like or Series, optional
        Fluid density [kg/m3] for volume units: volume flow -> mass flow,
        MJ/m3 -> J/kg.
    difference : bool
        True when the values are intervals (an uncertainty, a span width, a
        difference between two readings): scale only, no temperature offset and
        no atmospheric pressure.

    Returns
    -------
    float, ndarray, Series or DataFrame
        Values in SI (Pa absolute, K, kg/s, m3/s, W, J/kg, ...), same shape;
        a Series keeps its index and name.

    Raises
    ------
    UnitError
        Unknown unit, unit not matching ``quantity``, gauge unit without an
        atmospheric pressure, volume unit without the density it needs.
    InputError
        Non-numeric values or a non-positive scalar reference.

    Notes
    -----
    .. math:: x_{SI} = s\\,x + o \\quad (+\\,p_{atm}\\ \\text{gauge},\\
              p_{atm} - s\\,x\\ \\text{vacuum}) \\quad (\\times\\,\\rho\\ \\text{volume flow})

    Factors come from pint's definitions; those used in tests are checked
    against NIST SP 811 (2008), Appendix B.8/B.9.  The values are not checked:
    see :func:`check_absolute_pressure`.

    References
    ----------
    A. Thompson and B. N. Taylor, "Guide for the Use of the International System
    of Units (SI)", NIST Special Publication 811, 2008. DOI 10.6028/NIST.SP.811e2008

    Examples
    --------
    >>> to_si(1.0, "barg", atmospheric_pressure=101325.0)
    201325.0
    >>> round(to_si(25.0, "degC"), 2)
    298.15
    """
    spec = parse_unit(unit)
    dens_exp = _resolve(spec, quantity, density, "to_si")
    is_diff = difference or spec.is_difference or quantity == "temperature_difference"
    arr = _as_array(values, "values", "to_si")
    if spec.gauge and not is_diff:
        if atmospheric_pressure is None:
            raise _gauge_missing(spec, "to_si")
        atm = _aux(atmospheric_pressure, values, "atmospheric_pressure", "to_si")
        out = arr * (spec.scale * spec.gauge_sign)
        out += atm
    else:
        out = arr * spec.scale if spec.scale != 1.0 else arr.copy()
        if spec.offset and not is_diff:
            out += spec.offset
    if dens_exp:
        rho = _aux(density, values, "density", "to_si")
        out = out * rho if dens_exp == 1 else out / rho
    return _wrap(out, values)


def from_si(
    values,
    unit,
    *,
    atmospheric_pressure=None,
    density=None,
    difference: bool = False,
    quantity: str | None = None,
):
    """Convert SI values to ``unit`` (the inverse of :func:`to_si`).

    Parameters
    ----------
    values : float, array_like or pandas.Series/DataFrame
        Values in SI.
    unit : str or UnitSpec
        Target unit.
    atmospheric_pressure : float, array_like or Series, optional
        [Pa], needed for gauge and vacuum units (not for ``difference=True``).
    density : float, array_like or Series, optional
        [kg/m3]: with a volume-flow unit the SI values are mass flows [kg/s];
        with a volumetric heating value they are J/kg.
    difference : bool
        True for intervals (uncertainties): scale only.
    quantity : str, optional
        Glossary quantity of ``values``; checked against the unit.

    Returns
    -------
    float, ndarray, Series or DataFrame
        Values in ``unit``, same shape.

    Raises
    ------
    UnitError, InputError
        As :func:`to_si`.

    Examples
    --------
    >>> from_si(2.5, "kJ/kWh")
    9000.0
    """
    spec = parse_unit(unit)
    dens_exp = _resolve(spec, quantity, density, "from_si")
    is_diff = difference or spec.is_difference or quantity == "temperature_difference"
    arr = _as_array(values, "values", "from_si")
    if dens_exp:
        rho = _aux(density, values, "density", "from_si")
        arr = arr / rho if dens_exp == 1 else arr * rho
    if spec.gauge and not is_diff:
        if atmospheric_pressure is None:
            raise _gauge_missing(spec, "from_si")
        atm = _aux(atmospheric_pressure, values, "atmospheric_pressure", "from_si")
        out = (arr - atm) / (spec.scale * spec.gauge_sign)
    else:
        out = arr - spec.offset if (spec.offset and not is_diff) else arr.copy()
        if spec.scale != 1.0:
            out /= spec.scale
    return _wrap(out, values)


def si_unit(quantity: str) -> str:
    """SI unit perftest uses inside for a glossary quantity.

    >>> si_unit("mass_flow")
    'kg/s'
    """
    _check_quantity_name(quantity, "si_unit")
    return _SI_UNITS[quantity]


def quantity_of(unit) -> str:
    """Glossary quantity a unit measures by default (``"t/h"`` -> ``"mass_flow"``).

    >>> quantity_of("kJ/kWh")
    'heat_rate'
    """
    return parse_unit(unit).quantity


def nonpositive_pressure(values) -> np.ndarray:
    """Boolean mask of absolute pressures [Pa] at or below zero (NaN is False)."""
    arr = _as_array(values, "values", "nonpositive_pressure")
    with np.errstate(invalid="ignore"):
        return arr <= 0.0


def check_absolute_pressure(values, *, where: str) -> None:
    """Raise :class:`DataError` when an absolute pressure [Pa] is at or below zero.

    Parameters
    ----------
    values : float, array_like or Series
        Absolute pressures after conversion [Pa].  NaN is ignored.
    where : str
        Place named in the message, e.g. ``"run.csv, column 'PT-101'"``.

    Raises
    ------
    DataError
        Naming the first offending value and what to check (gauge vs absolute unit,
        atmospheric reference).
    """
    bad = nonpositive_pressure(values)
    if bad.any():
        flat = np.ravel(bad)
        first = int(np.argmax(flat))
        arr = np.ravel(np.asarray(values, dtype=float))
        raise DataError(
            f"{where}: {int(flat.sum())} value(s) give an absolute pressure at or below 0 Pa "
            f"(first at position {first}: {arr[first]:.6g} Pa). Check whether the unit should "
            "be gauge or absolute, and the atmospheric reference; or mark those samples bad."
        )
