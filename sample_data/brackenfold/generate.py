"""Generate the Brackenfold unit 1 demo test run (invented plant, invented numbers).

The script solves a consistent heat balance of a small gas-fired condensing steam
unit with one closed feedwater heater (IAPWS-IF97 through CoolProp), then writes
what the plant's instruments would have logged during a four-hour acceptance test:

* ``plant.toml``   the plant description (docs/plant-file.md),
* ``historian.csv`` a plant-historian export, one row a minute, with a units row,
* ``logger.csv``    a portable test logger, one row every 5 s, semicolons and
  decimal commas,
* ``truth.json``    the true values the instruments were generated from.

Everything is deterministic (one seeded numpy generator): running the script twice
gives byte-identical files.  Run it from anywhere::

    python sample_data/brackenfold/generate.py

What is put into the logs on purpose (so that every stage of perftest has work):

* the unit is still settling during the first hour (load and steam temperature
  creep up), so the steadiest window is not at the start of the run;
* autocorrelated instrument noise and a small common load wander;
* small systematic instrument errors well inside the stated uncertainties, and one
  faulty instrument: the feedwater flow FT-171 reads 3 % high;
* bad samples: the text "Bad", empty cells, the -9999 sentinel of the historian, a
  spike on a cooling-water temperature for the outlier screen.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
SEED = 20260514
START = pd.Timestamp("2026-05-14 08:00:00")
DURATION_H = 4.0

# --------------------------------------------------------------------------- design point
# Invented design of the unit at the test load.  Pressures absolute [Pa],
# temperatures [K].
MAIN_STEAM_P = 90.0e5
MAIN_STEAM_T = 510.0 + 273.15
EXTRACTION_P = 8.0e5
HEATER_SHELL_P = 7.6e5  # 5 % line loss from the extraction branch to the heater shell
EXHAUST_P = 7.0e3
CONDENSATE_P = 10.0e3  # hotwell pressure plus static head at the pump suction
CONDENSATE_SUBCOOLING = 1.0  # K below saturation at the exhaust pressure
PUMP_DISCHARGE_P = 100.0e5
FEEDWATER_P = 98.0e5
HEATER_TTD = 3.0  # K, feedwater outlet below the shell saturation temperature
HEATER_DCA = 8.0  # K, drain outlet above the feedwater inlet temperature
ETA_HP = 0.84  # isentropic efficiency, inlet to extraction
ETA_LP = 0.82  # isentropic efficiency, extraction to exhaust (wet expansion)
ETA_PUMP = 0.78
GENERATOR_LOSS = 0.016  # generator losses as a fraction of the electrical output
BOILER_EFFICIENCY = 0.905  # heat absorbed by the water / fuel heat input (LHV)
GROSS_POWER = 36.0e6  # W, the load the unit is held at during the test
AUXILIARY_POWER = 2.15e6  # W
CW_IN_T = 18.0 + 273.15
CW_RISE = 9.0  # K
CW_IN_P = 2.5e5
CW_OUT_P = 1.8e5
AMBIENT_T = 14.0 + 273.15
BAROMETER = 100_800.0  # Pa

# Fuel gas (mole fractions) and its calorific value by the ISO 6976 method at
# 15 degC combustion reference.  Net (inferior) molar calorific values [kJ/mol]
# and molar masses [g/mol] after ISO 6976:2016, Table 3 (values from memory).
FUEL_COMPOSITION = {
    "methane": 0.9250,
    "ethane": 0.0350,
    "propane": 0.0080,
    "n-butane": 0.0020,
    "nitrogen": 0.0200,
    "carbon_dioxide": 0.0100,
}
_ISO6976_NET = {
    "methane": (802.69, 16.04246),
    "ethane": (1428.84, 30.06904),
    "propane": (2043.37, 44.09562),
    "n-butane": (2657.60, 58.12220),
    "nitrogen": (0.0, 28.01340),
    "carbon_dioxide": (0.0, 44.00950),
}


def fuel_lhv() -> float:
    """Net calorific value on a mass basis [J/kg] of ``FUEL_COMPOSITION``."""
    hn = sum(x * _ISO6976_NET[c][0] for c, x in FUEL_COMPOSITION.items())  # kJ/mol
    molar_mass = sum(x * _ISO6976_NET[c][1] for c, x in FUEL_COMPOSITION.items())  # g/mol
    return hn / molar_mass * 1e6


# --------------------------------------------------------------------------- properties
_WATER = CP.AbstractState("IF97", "Water")


def _state(inputs, a: float, b: float) -> dict:
    _WATER.update(inputs, a, b)
    out = {"p": _WATER.p(), "T": _WATER.T(), "h": _WATER.hmass(), "s": _WATER.smass()}
    q = _WATER.Q()
    out["x"] = q if 0.0 <= q <= 1.0 else None
    return out


def state_pT(p: float, T: float) -> dict:
    return _state(CP.PT_INPUTS, p, T)


def state_ph(p: float, h: float) -> dict:
    return _state(CP.HmassP_INPUTS, h, p)


def state_ps(p: float, s: float) -> dict:
    return _state(CP.PSmass_INPUTS, p, s)


def t_sat(p: float) -> float:
    return _state(CP.PQ_INPUTS, p, 0.0)["T"]


# --------------------------------------------------------------------------- heat balance


def solve_heat_balance() -> dict:
    """Solve the design heat balance; returns streams, unit duties and results (SI)."""
    ms = state_pT(MAIN_STEAM_P, MAIN_STEAM_T)
    ext_s = state_ps(EXTRACTION_P, ms["s"])
    ext = state_ph(EXTRACTION_P, ms["h"] - ETA_HP * (ms["h"] - ext_s["h"]))
    exh_s = state_ps(EXHAUST_P, ext["s"])
    exh = state_ph(EXHAUST_P, ext["h"] - ETA_LP * (ext["h"] - exh_s["h"]))
    cond = state_pT(CONDENSATE_P, t_sat(EXHAUST_P) - CONDENSATE_SUBCOOLING)
    pump_s = state_ps(PUMP_DISCHARGE_P, cond["s"])
    pd_ = state_ph(PUMP_DISCHARGE_P, cond["h"] + (pump_s["h"] - cond["h"]) / ETA_PUMP)
    fw = state_pT(FEEDWATER_P, t_sat(HEATER_SHELL_P) - HEATER_TTD)
    drain = state_pT(HEATER_SHELL_P, pd_["T"] + HEATER_DCA)

    # Per kg of main steam: extraction fraction from the heater energy balance.
    y = (fw["h"] - pd_["h"]) / (ext["h"] - drain["h"])
    shaft_per_kg = (ms["h"] - ext["h"]) + (1.0 - y) * (ext["h"] - exh["h"])
    shaft = GROSS_POWER * (1.0 + GENERATOR_LOSS)
    m = shaft / shaft_per_kg
    m_ext = y * m
    m_exh = m - m_ext

    q_boiler = m * (ms["h"] - fw["h"])
    q_condenser = m_exh * exh["h"] + m_ext * drain["h"] - m * cond["h"]
    cw_in = state_pT(CW_IN_P, CW_IN_T)
    cw_out = state_pT(CW_OUT_P, CW_IN_T + CW_RISE)
    m_cw = q_condenser / (cw_out["h"] - cw_in["h"])
    pump_power = m * (pd_["h"] - cond["h"])

    lhv = fuel_lhv()
    heat_input = q_boiler / BOILER_EFFICIENCY
    m_fuel = heat_input / lhv

    streams = {
        "main_steam": dict(ms, m=m),
        "extraction": dict(ext, m=m_ext),
        "exhaust": dict(exh, m=m_exh),
        "heater_drain": dict(drain, m=m_ext),
        "condensate": dict(cond, m=m),
        "pump_discharge": dict(pd_, m=m),
        "feedwater": dict(fw, m=m),
        "cw_in": dict(cw_in, m=m_cw),
        "cw_out": dict(cw_out, m=m_cw),
    }
    net = GROSS_POWER - AUXILIARY_POWER
    carnot = 1.0 - CW_IN_T / MAIN_STEAM_T
    eta_net = net / heat_input
    return {
        "streams": streams,
        "units": {
            "turbine.power": shaft,
            "generator.losses": shaft - GROSS_POWER,
            "boiler.heat": q_boiler,
            "condenser.heat": q_condenser,
            "pump.power": pump_power,
            "heater.heat": m * (fw["h"] - pd_["h"]),
        },
        "fuel": {"mass_flow": m_fuel, "lhv": lhv, "composition": FUEL_COMPOSITION},
        "results": {
            "gross_power": GROSS_POWER,
            "auxiliary_power": AUXILIARY_POWER,
            "net_power": net,
            "heat_input": heat_input,
            "first_law_efficiency": eta_net,
            "gross_efficiency": GROSS_POWER / heat_input,
            "heat_rate": heat_input / net,
            "source_temperature": MAIN_STEAM_T,
            "sink_temperature": CW_IN_T,
            "carnot_efficiency": carnot,
            "curzon_ahlborn_efficiency": 1.0 - math.sqrt(CW_IN_T / MAIN_STEAM_T),
            "cycle_heat": q_boiler,
            "cycle_efficiency": GROSS_POWER / q_boiler,
            # the cycle against a reversible engine between the same source and sink
            "second_law_efficiency": GROSS_POWER / q_boiler / carnot,
        },
        "dead_state": {"temperature": AMBIENT_T, "pressure": BAROMETER},
    }


# --------------------------------------------------------------------------- instruments
# id -> (where logged, unit as logged, true value in that unit as a function of the
#        balance, noise standard deviation [logged unit], noise correlation time [s])


def _t(stream):
    return lambda b: b["streams"][stream]["T"] - 273.15  # degC


def _p_g(stream):
    return lambda b: (b["streams"][stream]["p"] - BAROMETER) / 1e5  # barg


def _p_kpa(stream):
    return lambda b: b["streams"][stream]["p"] / 1e3  # kPa(a)


def _m_th(stream):
    return lambda b: b["streams"][stream]["m"] * 3.6  # t/h


INSTRUMENTS = {
    # historian, 1 min
    "PT-101": ("historian", "barg", _p_g("main_steam"), 0.08, 120),
    "TT-101": ("historian", "degC", _t("main_steam"), 0.4, 180),
    "FT-101": ("historian", "t/h", _m_th("main_steam"), 0.5, 90),
    "PT-121": ("historian", "barg", _p_g("extraction"), 0.01, 120),
    "TT-121": ("historian", "degC", _t("extraction"), 0.3, 180),
    "PT-131": ("historian", "kPa(a)", _p_kpa("exhaust"), 0.012, 300),
    "PT-141": ("historian", "barg", _p_g("heater_drain"), 0.01, 120),
    "TT-141": ("historian", "degC", _t("heater_drain"), 0.1, 180),
    "PT-151": ("historian", "kPa(a)", _p_kpa("condensate"), 0.02, 300),
    "TT-151": ("historian", "degC", _t("condensate"), 0.1, 240),
    "PT-161": ("historian", "barg", _p_g("pump_discharge"), 0.1, 60),
    "TT-161": ("historian", "degC", _t("pump_discharge"), 0.1, 240),
    "FT-161": ("historian", "t/h", _m_th("pump_discharge"), 0.45, 90),
    "PT-171": ("historian", "barg", _p_g("feedwater"), 0.1, 60),
    "TT-171": ("historian", "degC", _t("feedwater"), 0.15, 240),
    "FT-171": ("historian", "t/h", _m_th("feedwater"), 0.35, 90),
    "FT-181": ("historian", "t/h", _m_th("cw_in"), 25.0, 120),
    "JT-101A": ("historian", "MW", lambda b: b["results"]["gross_power"] / 1e6, 0.03, 60),
    "JT-102": ("historian", "MW", lambda b: b["results"]["auxiliary_power"] / 1e6, 0.005, 300),
    "FT-201": ("historian", "kg/h", lambda b: b["fuel"]["mass_flow"] * 3600.0, 12.0, 60),
    "TT-191": ("historian", "degC", lambda b: b["dead_state"]["temperature"] - 273.15, 0.15, 900),
    "PT-190": ("historian", "hPa", lambda b: b["dead_state"]["pressure"] / 100.0, 0.1, 900),
    # portable logger, 5 s
    "TT-181": ("logger", "degC", _t("cw_in"), 0.02, 60),
    "TT-182": ("logger", "degC", _t("cw_out"), 0.03, 60),
    "JT-101B": ("logger", "kW", lambda b: b["results"]["gross_power"] / 1e3, 25.0, 30),
}

# Fraction of each instrument's stated standard uncertainty used as its (fixed,
# unknown to perftest) systematic error.  Small on purpose: the demo must show a
# healthy instrument set with exactly one faulty instrument.
SYSTEMATIC_SHARE = 0.3
FAULTY_TAG = "FT-171"
FAULTY_FACTOR = 1.03  # reads 3 % high

# Which logged quantities follow the common load wander and the settling ramp.
_LOAD_TAGS = {"FT-101", "FT-161", "FT-171", "FT-181", "JT-101A", "JT-101B", "FT-201"}
_STEAM_T_TAGS = {"TT-101", "TT-121"}


def _ar1(rng, n: int, dt: float, tau: float, sigma: float) -> np.ndarray:
    """Stationary AR(1) noise with standard deviation ``sigma`` and time constant ``tau``."""
    phi = math.exp(-dt / tau)
    e = rng.normal(0.0, sigma * math.sqrt(1.0 - phi * phi), n)
    out = np.empty(n)
    out[0] = rng.normal(0.0, sigma)
    for i in range(1, n):
        out[i] = phi * out[i - 1] + e[i]
    return out


def _settling(t_s: np.ndarray, depth: float, duration_s: float = 3600.0) -> np.ndarray:
    """Deficit that shrinks linearly from ``depth`` at the start to exactly 0 after an
    hour: the unit is still coming up to the test load and steam temperature."""
    return -depth * np.clip(1.0 - t_s / duration_s, 0.0, None)


def _stated_standard_u(tag: str, value: float) -> float:
    """Standard uncertainty of a tag in its logged unit (mirrors plant.toml)."""
    spec = TAG_SPECS[tag]["uncertainty"]
    if spec["kind"] == "absolute":
        u95 = spec["value"]
    elif spec["kind"] == "percent_of_reading":
        u95 = spec["value"] / 100.0 * abs(value)
    else:
        lo, hi = TAG_SPECS[tag]["span"]
        u95 = spec["value"] / 100.0 * (hi - lo)
    return u95 / 1.96


def make_logs(balance: dict, rng: np.random.Generator):
    """Build the two raw logs (DataFrames of numbers in the logged units)."""
    n_hist = int(DURATION_H * 60)
    n_log = int(DURATION_H * 3600 / 5)
    t_hist = np.arange(n_hist) * 60.0
    t_log = np.arange(n_log) * 5.0
    # Common load wander on a 5 s base (sampled by both logs), 0.15 % std, 10 min.
    wander = _ar1(rng, n_log, 5.0, 600.0, 0.0015)
    load = 1.0 + wander + _settling(t_log, 0.03)
    steam_dt = _settling(t_log, 5.0)  # K, steam temperatures creep up by 5 K
    cw_drift = _settling(t_log, 0.2)  # K, cooling water settles as well

    frames = {"historian": {}, "logger": {}}
    offsets = {}
    for tag, (where, _unit, reads, sigma, tau) in INSTRUMENTS.items():
        t = t_hist if where == "historian" else t_log
        idx = (t / 5.0).astype(int)
        true = reads(balance)
        offset = SYSTEMATIC_SHARE * _stated_standard_u(tag, true) * rng.standard_normal()
        offsets[tag] = offset
        value = np.full(t.shape, true, dtype=float)
        if tag in _LOAD_TAGS:
            value = value * load[idx]
        if tag in _STEAM_T_TAGS:
            value = value + steam_dt[idx]
        if tag in ("TT-181", "TT-182"):
            value = value + cw_drift[idx]
        value = value + offset + _ar1(rng, t.size, t[1] - t[0], tau, sigma)
        if tag == FAULTY_TAG:
            value = value * FAULTY_FACTOR
        frames[where][tag] = value
    hist = pd.DataFrame(frames["historian"], index=START + pd.to_timedelta(t_hist, unit="s"))
    log = pd.DataFrame(frames["logger"], index=START + pd.to_timedelta(t_log, unit="s"))
    return hist, log, offsets


# Bad samples written into the files: (file, timestamp, tag, what is written, why)
BAD_SAMPLES = [
    ("historian", "2026-05-14 10:17:00", "PT-101", "Bad", "historian quality text"),
    ("historian", "2026-05-14 10:42:00", "TT-171", "", "empty cell (communication loss)"),
    ("historian", "2026-05-14 10:43:00", "TT-171", "", "empty cell (communication loss)"),
    ("historian", "2026-05-14 11:05:00", "FT-161", "-9999", "historian no-data sentinel"),
    ("logger", "2026-05-14 10:36:05", "TT-182", "spike+3", "single-sample spike"),
    ("logger", "2026-05-14 10:30:00", "TT-182", "", "logger channel dropped one sample"),
]


def _fmt(values: np.ndarray, decimals: int) -> list[str]:
    return [f"{v:.{decimals}f}" for v in values]


_DECIMALS = {"barg": 3, "degC": 2, "t/h": 2, "kPa(a)": 3, "MW": 4, "kg/h": 1, "hPa": 1, "kW": 1}


def write_logs(hist: pd.DataFrame, log: pd.DataFrame, out: Path) -> list[dict]:
    """Write historian.csv and logger.csv; returns the list of planted bad samples."""
    htxt = pd.DataFrame(index=hist.index)
    for tag in hist.columns:
        unit = INSTRUMENTS[tag][1]
        htxt[tag] = _fmt(hist[tag].to_numpy(), _DECIMALS[unit])
    ltxt = pd.DataFrame(index=log.index)
    for tag in log.columns:
        unit = INSTRUMENTS[tag][1]
        ltxt[tag] = [s.replace(".", ",") for s in _fmt(log[tag].to_numpy(), _DECIMALS[unit])]

    planted = []
    for where, when, tag, what, why in BAD_SAMPLES:
        frame = htxt if where == "historian" else ltxt
        ts = pd.Timestamp(when)
        if what.startswith("spike"):
            source = hist if where == "historian" else log
            value = source.loc[ts, tag] + float(what[len("spike") :])
            text = f"{value:.2f}" if where == "historian" else f"{value:.2f}".replace(".", ",")
        else:
            text = what
        frame.loc[ts, tag] = text
        planted.append(
            {"file": f"{where}.csv", "time": when, "tag": tag, "written": text, "reason": why}
        )

    # Historian: header row of tag names, then a units row, then data.
    lines = ["Timestamp," + ",".join(htxt.columns)]
    lines.append("units," + ",".join(INSTRUMENTS[t][1] for t in htxt.columns))
    for ts, row in zip(htxt.index, htxt.itertuples(index=False), strict=True):
        lines.append(ts.strftime("%Y-%m-%d %H:%M:%S") + "," + ",".join(row))
    (out / "historian.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")

    # Logger: semicolons, decimal commas, no units row (units are in plant.toml).
    lines = ["Time;" + ";".join(ltxt.columns)]
    for ts, row in zip(ltxt.index, ltxt.itertuples(index=False), strict=True):
        lines.append(ts.strftime("%Y-%m-%d %H:%M:%S") + ";" + ";".join(row))
    (out / "logger.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return planted


# --------------------------------------------------------------------------- plant file
# Stated instrument uncertainties (95 % coverage) and spans; written into plant.toml.
TAG_SPECS = {
    "PT-101": dict(
        desc="Main steam pressure at the turbine stop valve",
        uncertainty={"value": 0.25, "kind": "percent_of_span"},
        span=[0, 160],
    ),
    "TT-101": dict(
        desc="Main steam temperature",
        uncertainty={"value": 1.5, "kind": "absolute"},
        stability={"value": 2.0, "kind": "absolute"},
    ),
    "FT-101": dict(
        desc="Main steam flow (venturi)",
        uncertainty={"value": 1.5, "kind": "percent_of_reading"},
    ),
    "PT-121": dict(
        desc="Extraction steam pressure",
        uncertainty={"value": 0.5, "kind": "percent_of_span"},
        span=[0, 16],
    ),
    "TT-121": dict(
        desc="Extraction steam temperature",
        uncertainty={"value": 1.5, "kind": "absolute"},
        stability={"value": 2.0, "kind": "absolute"},
    ),
    "PT-131": dict(
        desc="Turbine exhaust (condenser) pressure",
        uncertainty={"value": 0.1, "kind": "absolute"},
    ),
    "PT-141": dict(
        desc="Feedwater heater shell pressure",
        uncertainty={"value": 0.5, "kind": "percent_of_span"},
        span=[0, 16],
    ),
    "TT-141": dict(desc="Heater drain temperature", uncertainty={"value": 0.5, "kind": "absolute"}),
    "PT-151": dict(
        desc="Condensate pressure at the pump suction",
        uncertainty={"value": 0.5, "kind": "absolute"},
    ),
    "TT-151": dict(desc="Condensate temperature", uncertainty={"value": 0.3, "kind": "absolute"}),
    "PT-161": dict(
        desc="Feed pump discharge pressure",
        uncertainty={"value": 0.25, "kind": "percent_of_span"},
        span=[0, 160],
    ),
    "TT-161": dict(
        desc="Feed pump discharge temperature", uncertainty={"value": 0.3, "kind": "absolute"}
    ),
    "FT-161": dict(
        desc="Condensate flow at the pump discharge (flow nozzle)",
        uncertainty={"value": 1.2, "kind": "percent_of_reading"},
        sentinels=[-9999],
    ),
    "PT-171": dict(
        desc="Feedwater pressure at the boiler inlet",
        uncertainty={"value": 0.25, "kind": "percent_of_span"},
        span=[0, 160],
    ),
    "TT-171": dict(
        desc="Feedwater temperature at the boiler inlet",
        uncertainty={"value": 0.3, "kind": "absolute"},
    ),
    "FT-171": dict(
        desc="Feedwater flow at the boiler inlet (orifice)",
        uncertainty={"value": 1.0, "kind": "percent_of_reading"},
    ),
    "FT-181": dict(
        desc="Cooling water flow (clamp-on ultrasonic)",
        uncertainty={"value": 2.0, "kind": "percent_of_reading"},
    ),
    "TT-181": dict(
        desc="Cooling water inlet temperature (test RTD)",
        uncertainty={"value": 0.1, "kind": "absolute"},
        shared_calibration="cw-rtd-lot-2026",
    ),
    "TT-182": dict(
        desc="Cooling water outlet temperature (test RTD)",
        uncertainty={"value": 0.1, "kind": "absolute"},
        shared_calibration="cw-rtd-lot-2026",
    ),
    "JT-101A": dict(
        desc="Generator output, station wattmeter",
        uncertainty={"value": 0.3, "kind": "percent_of_reading"},
    ),
    "JT-101B": dict(
        desc="Generator output, portable test wattmeter",
        uncertainty={"value": 0.2, "kind": "percent_of_reading"},
    ),
    "JT-102": dict(
        desc="Unit auxiliary power", uncertainty={"value": 1.0, "kind": "percent_of_reading"}
    ),
    "FT-201": dict(
        desc="Fuel gas mass flow (Coriolis)",
        uncertainty={"value": 0.5, "kind": "percent_of_reading"},
    ),
    # Ambient conditions are not held during a test; a wide permissible variation
    # keeps the ambient thermometer from deciding the steady window (common
    # practice, no source).  Steam temperatures of a small drum boiler wander by a
    # degree or two, hence 2 K for TT-101 and TT-121 above.
    "TT-191": dict(
        desc="Ambient air temperature",
        uncertainty={"value": 0.5, "kind": "absolute"},
        stability={"value": 3.0, "kind": "absolute"},
    ),
    "PT-190": dict(desc="Barometric pressure", uncertainty={"value": 1.0, "kind": "absolute"}),
}

# Correction curves to the reference cooling-water inlet temperature (invented,
# the shape a condensing unit's curves usually have: output falls and heat rate
# rises as the cooling water warms).
CW_REFERENCE_T = 15.0  # degC
CURVE_X = [5.0, 10.0, 15.0, 20.0, 25.0, 30.0]
NET_POWER_CURVE = [1.012, 1.007, 1.000, 0.991, 0.980, 0.966]
HEAT_RATE_CURVE = [0.990, 0.994, 1.000, 1.008, 1.018, 1.031]


def _interp(x: float, ys: list[float]) -> float:
    return float(np.interp(x, CURVE_X, ys))


def _toml_value(v) -> str:
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, float):
        return repr(round(v, 6))
    return str(v)


def plant_toml(guarantees: dict, balance: dict) -> str:
    """Text of plant.toml."""
    out = [
        "# Brackenfold power station, unit 1: plant description for perftest.",
        "# An invented plant with invented numbers (see README.md beside this file).",
        "# Written by generate.py; edit the generator, not this file.",
        "",
        "[site]",
        'name = "Brackenfold power station, unit 1"',
        'timezone = "UTC"',
        'barometer_tag = "PT-190"',
        'dead_state_temperature_tag = "TT-191"',
        'dead_state_pressure_tag = "PT-190"',
        "",
    ]
    for tag, spec in TAG_SPECS.items():
        where, unit = INSTRUMENTS[tag][0], INSTRUMENTS[tag][1]
        out.append(f'[tags."{tag}"]')
        out.append(f"description = {_toml_value(spec['desc'])}")
        out.append(f"unit = {_toml_value(unit)}")
        out.append(f"source = {_toml_value(where)}")
        out.append(f"uncertainty = {_toml_value(dict(spec['uncertainty'], level=0.95))}")
        if "span" in spec:
            out.append(f"span = {_toml_value([float(v) for v in spec['span']])}")
        if "shared_calibration" in spec:
            out.append(f"shared_calibration = {_toml_value(spec['shared_calibration'])}")
        if "stability" in spec:
            out.append(f"stability = {_toml_value(spec['stability'])}")
        if "sentinels" in spec:
            out.append(f"sentinels = {_toml_value(spec['sentinels'])}")
        out.append("")
    out += [
        "# The two wattmeters on the generator terminals are averaged into one value.",
        '[groups."JT-101"]',
        'tags = ["JT-101A", "JT-101B"]',
        'agreement = { value = 0.5, kind = "percent" }',
        "",
        "# ---- streams: water/steam cycle and the condenser cooling water",
        "[streams.main_steam]",
        'fluid = "water"',
        'phase = "vapour"',
        'mass_flow = "FT-101"',
        'pressure = "PT-101"',
        'temperature = "TT-101"',
        "",
        "[streams.extraction]",
        'fluid = "water"',
        'phase = "vapour"',
        'pressure = "PT-121"',
        'temperature = "TT-121"',
        "",
        "[streams.exhaust]",
        'fluid = "water"',
        'phase = "wet"',
        'pressure = "PT-131"',
        "",
        "[streams.heater_drain]",
        'fluid = "water"',
        'phase = "liquid"',
        'pressure = "PT-141"',
        'temperature = "TT-141"',
        "",
        "[streams.condensate]",
        'fluid = "water"',
        'phase = "liquid"',
        'pressure = "PT-151"',
        'temperature = "TT-151"',
        "",
        "[streams.pump_discharge]",
        'fluid = "water"',
        'phase = "liquid"',
        'mass_flow = "FT-161"',
        'pressure = "PT-161"',
        'temperature = "TT-161"',
        "",
        "[streams.feedwater]",
        'fluid = "water"',
        'phase = "liquid"',
        'mass_flow = "FT-171"',
        'pressure = "PT-171"',
        'temperature = "TT-171"',
        "",
        "[streams.cw_in]",
        'fluid = "water"',
        'phase = "liquid"',
        'mass_flow = "FT-181"',
        f'pressure = {{ value = {CW_IN_P / 1e5}, unit = "bar" }}',
        'temperature = "TT-181"',
        "",
        "[streams.cw_out]",
        'fluid = "water"',
        'phase = "liquid"',
        f'pressure = {{ value = {CW_OUT_P / 1e5}, unit = "bar" }}',
        'temperature = "TT-182"',
        "",
        "# ---- units",
        "[units.boiler]",
        'type = "boiler"',
        'inlets = ["feedwater"]',
        'outlets = ["main_steam"]',
        "",
        "[units.turbine]",
        'type = "turbine"',
        'inlets = ["main_steam"]',
        'outlets = ["extraction", "exhaust"]',
        "",
        "[units.generator]",
        'type = "generator"',
        'shaft = "turbine"',
        'power = "JT-101"',
        f'losses = {{ value = {GENERATOR_LOSS * 100:.1f}, kind = "percent" }}',
        "",
        "[units.heater]",
        'type = "heat_exchanger"',
        'hot_inlet = "extraction"',
        'hot_outlet = "heater_drain"',
        'cold_inlet = "pump_discharge"',
        'cold_outlet = "feedwater"',
        "",
        "[units.condenser]",
        'type = "condenser"',
        'inlets = ["exhaust", "heater_drain"]',
        'outlets = ["condensate"]',
        'coolant_inlet = "cw_in"',
        'coolant_outlet = "cw_out"',
        "",
        "[units.pump]",
        'type = "pump"',
        'inlets = ["condensate"]',
        'outlets = ["pump_discharge"]',
        "",
        "# ---- fuel: natural gas, calorific value by the ISO 6976 method",
        "[fuel]",
        'mass_flow = "FT-201"',
        "composition = " + _toml_value(FUEL_COMPOSITION),
        'combustion_reference_temperature = { value = 15.0, unit = "degC" }',
        "# calorific value from the laboratory gas analysis: 0.3 % at 95 % coverage",
        'uncertainty = { value = 0.3, kind = "percent", level = 0.95 }',
        "",
        "[performance]",
        'gross_power = "JT-101"',
        'auxiliary_power = "JT-102"',
        'heat_input = "fuel"',
        'source_temperature = "main_steam.temperature"',
        'sink_temperature = "cw_in.temperature"',
        "",
        "# ---- corrections to the reference cooling-water inlet temperature",
        "[[corrections]]",
        'result = "net_power"',
        'variable = "cw_in.temperature"',
        f'reference = {{ value = {CW_REFERENCE_T}, unit = "degC" }}',
        'kind = "multiplicative"',
        f'curve = {{ x = {CURVE_X}, y = {NET_POWER_CURVE}, x_unit = "degC" }}',
        "",
        "[[corrections]]",
        'result = "heat_rate"',
        'variable = "cw_in.temperature"',
        f'reference = {{ value = {CW_REFERENCE_T}, unit = "degC" }}',
        'kind = "multiplicative"',
        f'curve = {{ x = {CURVE_X}, y = {HEAT_RATE_CURVE}, x_unit = "degC" }}',
        "",
        "# ---- contract guarantees at reference conditions",
        "[[guarantees]]",
        'quantity = "corrected_net_power"',
        f"value = {guarantees['corrected_net_power']}",
        'unit = "MW"',
        'direction = "at_least"',
        "",
        "[[guarantees]]",
        'quantity = "corrected_heat_rate"',
        f"value = {guarantees['corrected_heat_rate']}",
        'unit = "kJ/kWh"',
        'direction = "at_most"',
        "",
        "# The verdict rule of the contract: guard bands of U95 on both sides.",
        "[acceptance]",
        'rule = "guarded"',
        "",
    ]
    out += design_toml(balance)
    return "\n".join(out)


# Planned test for the pre-test uncertainty analysis (perftest plan): the steady
# window is two hours long; the historian logs once a minute, the logger every 5 s.
PLANNED_DURATION = "2h"
_INTERVALS = {"historian": "1min", "logger": "5s"}


def design_toml(balance: dict) -> list[str]:
    """The [design] table: design value, expected sample scatter and noise
    correlation time of every tag, from the design heat balance and the noise the
    logs are generated with."""
    out = [
        "# ---- design point and planned logging, for the pre-test uncertainty analysis",
        "# value and scatter (standard deviation of single samples) in the tag's unit",
        "[design]",
        f"duration = {_toml_value(PLANNED_DURATION)}",
        f"interval = {_toml_value(_INTERVALS['historian'])}",
        "",
        "[design.tags]",
    ]
    for tag in TAG_SPECS:
        where, unit, reads, sigma, tau = INSTRUMENTS[tag]
        d = _DECIMALS[unit]
        entry = f"value = {float(round(reads(balance), d))!r}, scatter = {float(sigma)!r}"
        if where != "historian":
            entry += f", interval = {_toml_value(_INTERVALS[where])}"
        entry += f', correlation_time = "{int(tau)}s"'
        out.append(f'"{tag}" = {{ {entry} }}')
    out += [
        "",
        "# Expanded test uncertainty the contract allows (invented figures).",
        "[design.allowed]",
        'corrected_net_power = { value = 0.5, kind = "percent" }',
        'corrected_heat_rate = { value = 1.0, kind = "percent" }',
        "",
    ]
    return out


# --------------------------------------------------------------------------- main


def _json_safe(obj):
    if isinstance(obj, dict):
        return {k: _json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_json_safe(v) for v in obj]
    if isinstance(obj, float | np.floating):
        return float(obj)
    return obj


def main(out: Path = HERE) -> dict:
    """Write every file of the scenario into ``out``; returns the truth record."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    balance = solve_heat_balance()
    rng = np.random.default_rng(SEED)
    hist, log, offsets = make_logs(balance, rng)
    planted = write_logs(hist, log, out)

    r = balance["results"]
    f_p = _interp(CW_IN_T - 273.15, NET_POWER_CURVE)
    f_hr = _interp(CW_IN_T - 273.15, HEAT_RATE_CURVE)
    corrected_net = r["net_power"] / f_p
    corrected_hr = r["heat_rate"] / f_hr
    # Guarantees (invented): output comfortably met, heat rate within the test
    # uncertainty of the guarantee so that the verdict needs the uncertainty.
    guarantees = {
        "corrected_net_power": round(corrected_net * 0.97 / 1e6, 1),  # MW
        "corrected_heat_rate": round(corrected_hr * 3600.0 * 1.004, 0),  # kJ/kWh
    }
    (out / "plant.toml").write_text(plant_toml(guarantees, balance), encoding="utf-8")

    truth = {
        "description": "True values of the invented Brackenfold unit 1 test (SI units).",
        "seed": SEED,
        "steady_from": str(START + pd.Timedelta(hours=1)),
        "results": dict(
            r,
            corrected_net_power=corrected_net,
            corrected_heat_rate=corrected_hr,
            correction_factor_net_power=f_p,
            correction_factor_heat_rate=f_hr,
        ),
        "streams": balance["streams"],
        "units": balance["units"],
        "fuel": balance["fuel"],
        "dead_state": balance["dead_state"],
        "design": {
            "boiler_efficiency": BOILER_EFFICIENCY,
            "generator_loss_fraction": GENERATOR_LOSS,
            "eta_hp": ETA_HP,
            "eta_lp": ETA_LP,
            "eta_pump": ETA_PUMP,
        },
        "instruments": {
            tag: {
                "file": f"{INSTRUMENTS[tag][0]}.csv",
                "unit": INSTRUMENTS[tag][1],
                "true_value": INSTRUMENTS[tag][2](balance),
                "systematic_error": offsets[tag],
            }
            for tag in INSTRUMENTS
        },
        "faulty_instrument": {"tag": FAULTY_TAG, "factor": FAULTY_FACTOR},
        "bad_samples": planted,
        "guarantees": guarantees,
    }
    (out / "truth.json").write_text(
        json.dumps(_json_safe(truth), indent=2, sort_keys=False) + "\n", encoding="utf-8"
    )
    return truth


if __name__ == "__main__":
    main()
