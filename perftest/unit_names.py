"""The spellings of units that plant logs write, for :mod:`perftest.units`.

An alias table (normalised text -> pint expression, quantity, flag) and the pressure
units read as a base plus a suffix (absolute, gauge, vacuum, differential).  Pure
data and the normalisation of a unit text; :mod:`perftest.units` reads them.

Layer: imports the standard library only.
"""

from __future__ import annotations

import re

__all__ = [
    "ALIASES",
    "DELTA",
    "PERCENT",
    "PRESSURE_BASES",
    "PRESSURE_RE",
    "PRESSURE_SUFFIX",
    "VOLUME",
    "VOLUMETRIC_ENERGY",
    "normalise",
]

# alias table: normalised text -> (pint expression, quantity, flags)

DELTA = "delta"  # flag: unit of a difference (temperature)
VOLUME = "density"  # flag: volume flow, multiply by density to get mass flow
VOLUMETRIC_ENERGY = "volumetric_energy"  # flag: divide by density to get J/kg
PERCENT = "percent"

ALIASES: dict[str, tuple[str, str, str | None]] = {}


def _alias(names: str, expr: str, quantity: str, flag: str | None = None) -> None:
    for name in names.split("|"):
        ALIASES[normalise(name)] = (expr, quantity, flag)


def normalise(text: str) -> str:
    """A unit text as the alias table keys it: case folded, white space removed,
    degree signs and superscripts spelled out, ``/hr`` and ``/sec`` shortened."""
    t = text.strip().lower()
    t = t.replace("℃", "degc").replace("℉", "degf")
    t = t.replace("°", "deg").replace("º", "deg").replace("˚", "deg")
    t = t.replace("³", "3").replace("²", "2").replace("^", "").replace("**", "")
    t = t.replace("·", "").replace("*", "")
    t = re.sub(r"\s+", "", t)
    t = re.sub(r"/hr\b|/hr$", "/h", t)
    t = re.sub(r"/sec\b|/sec$", "/s", t)
    return t


# temperature
_alias("degC|deg C|C|celsius|degree celsius|degrees celsius|degrees C|deg.C", "degC", "temperature")
_alias("degF|deg F|F|fahrenheit|degree fahrenheit|degrees F|deg.F", "degF", "temperature")
_alias("K|kelvin", "K", "temperature")
_alias("degR|deg R|R|rankine", "degR", "temperature")
_alias(
    "delta_degC|delta degC|degC diff|deg C diff|degC (diff)|ΔC|Δ°C|ΔdegC|dK|ΔK|K diff",
    "delta_degC",
    "temperature_difference",
    DELTA,
)
_alias("delta_degF|delta degF|degF diff|deg F diff|degF (diff)|ΔF|Δ°F|ΔdegF", "delta_degF",
       "temperature_difference", DELTA)  # fmt: skip
# mass flow
_alias("kg/s|kgps", "kg/s", "mass_flow")
_alias("kg/h|kgh|kg/hour", "kg/hour", "mass_flow")
_alias("kg/min", "kg/minute", "mass_flow")
_alias("t/h|tph|t/hour|tonne/h|tonnes/h|mt/h", "tonne/hour", "mass_flow")
_alias("t/s", "tonne/s", "mass_flow")
_alias("lb/h|lbs/h|pph|lbm/h", "lb/hour", "mass_flow")
_alias("lb/s|lbs/s|lbm/s", "lb/s", "mass_flow")
_alias("klb/h|klbs/h|kpph|klbm/h|kpph", "1000*lb/hour", "mass_flow")
_alias("Mlb/h|mlbs/h|mpph|Mlbm/h", "1e6*lb/hour", "mass_flow")
# volume flow
_alias("m3/s", "m**3/s", "volume_flow", VOLUME)
_alias("m3/h|nm3/h|sm3/h|m3/hour", "m**3/hour", "volume_flow", VOLUME)
_alias("nm3/s|sm3/s", "m**3/s", "volume_flow", VOLUME)
_alias("m3/min", "m**3/minute", "volume_flow", VOLUME)
_alias("l/s|L/s|lps", "liter/s", "volume_flow", VOLUME)
_alias("l/min|L/min|lpm", "liter/minute", "volume_flow", VOLUME)
_alias("l/h|L/h", "liter/hour", "volume_flow", VOLUME)
_alias("gpm|gal/min|usgpm", "gallon/minute", "volume_flow", VOLUME)
_alias("ft3/s|cfs", "ft**3/s", "volume_flow", VOLUME)
_alias("ft3/min|cfm|scfm", "ft**3/minute", "volume_flow", VOLUME)
# power and heat flow
_alias("W|We", "W", "power")
_alias("kW|kWe", "kW", "power")
_alias("MW|MWe", "MW", "power")
_alias("GW|GWe", "GW", "power")
_alias("hp", "hp", "power")
_alias("Wt|Wth", "W", "heat_flow")
_alias("kWt|kWth", "kW", "heat_flow")
_alias("MWt|MWth", "MW", "heat_flow")
_alias("GWt|GWth", "GW", "heat_flow")
_alias("Btu/h|btuh", "Btu_it/hour", "heat_flow")
_alias("kBtu/h", "1e3*Btu_it/hour", "heat_flow")
_alias("MMBtu/h|MBtu/h", "1e6*Btu_it/hour", "heat_flow")
_alias("kcal/h", "1e3*cal_it/hour", "heat_flow")
_alias("Gcal/h", "1e9*cal_it/hour", "heat_flow")
_alias("GJ/h", "GJ/hour", "heat_flow")
_alias("MJ/s", "MJ/s", "heat_flow")
# energy
_alias("J", "J", "energy")
_alias("kJ", "kJ", "energy")
_alias("MJ", "MJ", "energy")
_alias("GJ", "GJ", "energy")
_alias("Wh", "W*hour", "energy")
_alias("kWh", "kW*hour", "energy")
_alias("MWh", "MW*hour", "energy")
_alias("GWh", "GW*hour", "energy")
_alias("Btu", "Btu_it", "energy")
_alias("MMBtu", "1e6*Btu_it", "energy")
_alias("therm", "therm", "energy")
# specific enthalpy / energy
_alias("J/kg", "J/kg", "specific_enthalpy")
_alias("kJ/kg", "kJ/kg", "specific_enthalpy")
_alias("Btu/lb|Btu/lbm", "Btu_it/lb", "specific_enthalpy")
_alias("kcal/kg", "1e3*cal_it/kg", "specific_enthalpy")
_alias("MJ/kg", "MJ/kg", "specific_energy")
_alias("GJ/t", "GJ/tonne", "specific_energy")
# volumetric heating values (need density)
_alias("kJ/m3|kJ/Nm3|kJ/Sm3", "kJ/m**3", "specific_energy", VOLUMETRIC_ENERGY)
_alias("MJ/m3|MJ/Nm3|MJ/Sm3", "MJ/m**3", "specific_energy", VOLUMETRIC_ENERGY)
_alias("Btu/ft3|Btu/scf|Btu/cf", "Btu_it/ft**3", "specific_energy", VOLUMETRIC_ENERGY)
# specific entropy
for _e, _x in (("J", "J"), ("kJ", "kJ")):
    _alias(
        f"{_e}/(kg K)|{_e}/kgK|{_e}/kg/K|{_e}/kg.K|{_e}/kg-K|{_e}/(kg.K)|{_e}/(kg degC)|"
        f"{_e}/kg/degC",
        f"{_x}/(kg*K)",
        "specific_entropy",
    )
_alias("Btu/(lb R)|Btu/lbR|Btu/lb/R|Btu/(lb F)|Btu/lbF|Btu/lb/F|Btu/(lb degF)|Btu/lb/degF|"
       "Btu/lb.R|Btu/lb.F", "Btu_it/(lb*delta_degF)", "specific_entropy")  # fmt: skip
# heat rate (dimensionless J/J)
_alias("kJ/kWh|kJ/kW.h|kJ/kW h", "kJ/(kW*hour)", "heat_rate")
_alias("Btu/kWh|Btu/kW.h", "Btu_it/(kW*hour)", "heat_rate")
_alias("MJ/MWh", "MJ/(MW*hour)", "heat_rate")
_alias("GJ/MWh", "GJ/(MW*hour)", "heat_rate")
_alias("kcal/kWh", "1e3*cal_it/(kW*hour)", "heat_rate")
_alias("J/J|kJ/kJ|W/W|kW/kW|MW/MW", "dimensionless", "heat_rate")
# fractions
_alias("%|percent|pct|%RH|% RH|%rh|%wt|%vol|%mol", "0.01*dimensionless", "fraction", PERCENT)
_alias("fraction|frac|fr", "dimensionless", "fraction")
_alias("-|1|none|dimensionless|unitless|ratio", "dimensionless", "dimensionless")
_alias("ppm", "1e-6*dimensionless", "fraction")
# density
_alias("kg/m3", "kg/m**3", "density")
_alias("g/cm3|g/cc|kg/l|kg/L|t/m3", "g/cm**3", "density")
_alias("g/l|g/L", "g/liter", "density")
_alias("lb/ft3|lbm/ft3|lb/cuft", "lb/ft**3", "density")
# frequency, speed
_alias("Hz|hertz|cps", "Hz", "frequency")
_alias("kHz", "kHz", "frequency")
_alias("rpm|r/min|rev/min|1/min|min-1|U/min", "revolution/minute", "speed")
_alias("rad/s", "rad/s", "speed")
_alias("rps|r/s|rev/s", "revolution/s", "speed")

# pressure base units (normalised) -> pint expression; suffixes handled by regex
PRESSURE_BASES: dict[str, str] = {
    "pa": "Pa",
    "hpa": "hPa",
    "kpa": "kPa",
    "mpa": "MPa",
    "bar": "bar",
    "mbar": "mbar",
    "psi": "psi",
    "ksi": "1000*psi",
    "inhg": "inHg",
    "inh2o": "inH2O",
    "inwc": "inH2O",
    "mmhg": "mmHg",
    "mmh2o": "mmH2O",
    "mmwc": "mmH2O",
    "mh2o": "m_H2O",
    "mwc": "m_H2O",
    "torr": "torr",
    "atm": "atm",
    "kgf/cm2": "kgf/cm**2",
    "kg/cm2": "kgf/cm**2",
    "ata": "kgf/cm**2",
}
PRESSURE_SUFFIX: dict[str, int | None] = {
    "": 0,
    "a": 0,
    "(a)": 0,
    "abs": 0,
    "(abs)": 0,
    "absolute": 0,
    "g": 1,
    "(g)": 1,
    "gauge": 1,
    "(gauge)": 1,
    "gage": 1,
    "vac": -1,
    "(vac)": -1,
    "vacuum": -1,
    "v": -1,
    "d": None,
    "(d)": None,
    "diff": None,
    "(diff)": None,
}
PRESSURE_RE = re.compile(
    r"^(?P<base>"
    + "|".join(sorted((re.escape(b) for b in PRESSURE_BASES), key=len, reverse=True))
    + r")(?P<suffix>"
    + "|".join(sorted((re.escape(s) for s in PRESSURE_SUFFIX if s), key=len, reverse=True))
    + r")?$"
)
