"""Generate the Ostrenby chiller demo test run (invented site, invented numbers).

Ostrenby science park, chiller CH-2: a water-cooled R134a chiller with one
semi-hermetic screw compressor.  The script solves a consistent heat balance of
the refrigerant loop and both water circuits at three load points (CoolProp:
R134a by its Helmholtz equation of state, water by IAPWS-IF97), then writes what
the instruments would have logged during a part-load test:

* ``plant.toml``  the plant description (docs/plant-file.md),
* ``bms.csv``     the building-management export, one row a minute, with a units row,
* ``testlog.csv`` the portable test logger, one row every 10 s, with a units row,
* ``truth.json``  the true values every reading was generated from.

The test holds each load for an hour: 100 % from 08:30, 75 % from 10:00 and 50 %
from 11:30 (UTC), with half-hour changes of load in between.  Everything is
deterministic (one seeded numpy generator): running the script twice gives
byte-identical files::

    python sample_data/ostrenby/generate.py

The true state satisfies every balance of the plant file exactly:

* evaporator  m_chw (h_return - h_leaving) = m_r (h_suction - h_evaporator_in) = Q_evap
* compressor  P_el = m_r (h_discharge - h_suction) + Q_casing_loss
* condenser   m_r (h_discharge - h_liquid) = m_cw (h_cw_out - h_cw_in) = Q_cond
* valve       h_evaporator_in = h_liquid
* supply pipe h_supply = h_leaving (adiabatic, same pressure)

and the readings carry what real instruments carry: first-order autocorrelated
noise, a fixed systematic error of about 0.3 standard uncertainties, a slow linear
drift of at most about 0.2 standard uncertainties over the test, and a few bad
samples for the importer and the outlier screen.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
SEED = 20260709
START = pd.Timestamp("2026-07-09 08:00:00")
END = pd.Timestamp("2026-07-09 12:30:00")

# --------------------------------------------------------------------------- design
# Load points: (label, steady start, steady end, cooling [W], condenser-water inlet
# temperature [degC], compressor overall efficiency (refrigerant enthalpy rise over
# the isentropic one, motor losses included), evaporator approach [K], condenser
# approach [K]).  Lower load: colder tower water, smaller approaches.
POINTS = [
    ("100 %", "2026-07-09 08:30:00", "2026-07-09 09:30:00", 1100.0e3, 28.5, 0.72, 1.8, 1.6),
    ("75 %", "2026-07-09 10:00:00", "2026-07-09 11:00:00", 825.0e3, 27.0, 0.73, 1.4, 1.2),
    ("50 %", "2026-07-09 11:30:00", "2026-07-09 12:30:00", 550.0e3, 25.5, 0.68, 1.0, 0.9),
]
CHW_SUPPLY_T = 6.7  # degC, chilled water leaving, held by the chiller's controller
CHW_FLOW = 48.0  # kg/s, constant-flow primary pump
CW_FLOW = 58.0  # kg/s, condenser water
CHW_RETURN_P = 3.2e5  # Pa, chilled water entering the evaporator
CHW_LEAVING_P = 2.6e5  # Pa, evaporator outlet and supply header (same pressure)
CW_IN_P = 2.9e5
CW_OUT_P = 2.4e5
SUPERHEAT = 5.0  # K at the compressor suction
SUBCOOLING = 4.0  # K at the condenser outlet
DISCHARGE_DP = 15.0e3  # Pa, discharge above the condenser saturation pressure
LIQUID_DP = 5.0e3  # Pa, condenser outlet below the condenser saturation pressure
EVAP_IN_DP = 10.0e3  # Pa, evaporator inlet above the evaporator saturation pressure
SUCTION_DP = 10.0e3  # Pa, suction below the evaporator saturation pressure
CASING_LOSS = 4.0e3  # W, heat lost from the compressor casing (fixed in plant.toml)
AMBIENT_T = 31.0  # degC, outdoor air (dead state)
BAROMETER = 100_900.0  # Pa
#: density stated for the chilled-water magnetic flow meter (its reading is m3/h)
CHW_METER_DENSITY = 999.6  # kg/m3

# Correction of COP and capacity to the reference condenser-water inlet temperature
# (invented curves of the shape a screw chiller's usually have).
CW_REFERENCE_T = 29.5  # degC
CURVE_X = [20.0, 24.0, 27.0, 29.5, 32.0, 35.0]
COP_CURVE = [1.215, 1.122, 1.056, 1.0, 0.946, 0.884]
CAPACITY_CURVE = [1.042, 1.024, 1.011, 1.0, 0.989, 0.976]

_R134A = CP.AbstractState("HEOS", "R134a")
_WATER = CP.AbstractState("IF97", "Water")


def _st(state, inputs, a, b) -> dict:
    state.update(inputs, a, b)
    q = state.Q()
    return {
        "p": state.p(),
        "T": state.T(),
        "h": state.hmass(),
        "s": state.smass(),
        "x": q if 0.0 <= q <= 1.0 else None,
    }


def r_pT(p, T):
    return _st(_R134A, CP.PT_INPUTS, p, T)


def r_ph(p, h):
    return _st(_R134A, CP.HmassP_INPUTS, h, p)


def r_ps(p, s):
    return _st(_R134A, CP.PSmass_INPUTS, p, s)


def r_psat(T):
    _R134A.update(CP.QT_INPUTS, 0.0, T)
    return _R134A.p()


def r_tsat(p):
    _R134A.update(CP.PQ_INPUTS, p, 0.0)
    return _R134A.T()


def w_pT(p, T):
    return _st(_WATER, CP.PT_INPUTS, p, T)


def w_ph(p, h):
    """Water state from (p, h): CoolProp's IF97 backward temperature refined by Newton
    steps on h(p, T), so that h(p, T) equals ``h`` to rounding (the backward
    equations alone are off by up to about 0.01 K)."""
    T = _st(_WATER, CP.HmassP_INPUTS, h, p)["T"]
    for _ in range(8):
        _WATER.update(CP.PT_INPUTS, p, T)
        T -= (_WATER.hmass() - h) / _WATER.cpmass()
    return w_pT(p, T)


def solve_point(cooling, cw_in_c, eta, evap_approach, cond_approach) -> dict:
    """Heat balance of one load point (SI); every balance closes to rounding."""
    chw_leaving = w_pT(CHW_LEAVING_P, CHW_SUPPLY_T + 273.15)
    chw_supply = w_ph(CHW_LEAVING_P, chw_leaving["h"])
    chw_return = w_ph(CHW_RETURN_P, chw_leaving["h"] + cooling / CHW_FLOW)
    t_evap = chw_leaving["T"] - evap_approach
    p_evap = r_psat(t_evap)
    evap_in_p = p_evap + EVAP_IN_DP
    suction_p = p_evap - SUCTION_DP
    suction = r_pT(suction_p, r_tsat(suction_p) + SUPERHEAT)
    cw_in = w_pT(CW_IN_P, cw_in_c + 273.15)
    t_cw_out = cw_in["T"] + 5.0
    for _ in range(60):  # condensing temperature <-> condenser-water outlet, fixed point
        p_cond = r_psat(t_cw_out + cond_approach)
        discharge_p = p_cond + DISCHARGE_DP
        liquid_p = p_cond - LIQUID_DP
        liquid = r_pT(liquid_p, r_tsat(liquid_p) - SUBCOOLING)
        h2s = r_ps(discharge_p, suction["s"])["h"]
        discharge = r_ph(discharge_p, suction["h"] + (h2s - suction["h"]) / eta)
        m_r = cooling / (suction["h"] - liquid["h"])
        q_cond = m_r * (discharge["h"] - liquid["h"])
        cw_out = w_ph(CW_OUT_P, cw_in["h"] + q_cond / CW_FLOW)
        if abs(cw_out["T"] - t_cw_out) < 1e-10:
            break
        t_cw_out = cw_out["T"]
    evap_in = r_ph(evap_in_p, liquid["h"])
    power = m_r * (discharge["h"] - suction["h"]) + CASING_LOSS
    streams = {
        "chw_return": dict(chw_return, m=CHW_FLOW),
        "chw_leaving": dict(chw_leaving, m=CHW_FLOW),
        "chw_supply": dict(chw_supply, m=CHW_FLOW),
        "cw_in": dict(cw_in, m=CW_FLOW),
        "cw_out": dict(cw_out, m=CW_FLOW),
        "suction": dict(suction, m=m_r),
        "discharge": dict(discharge, m=m_r),
        "liquid": dict(liquid, m=m_r),
        "evaporator_in": dict(evap_in, m=m_r),
    }
    t0 = AMBIENT_T + 273.15
    t_cold = chw_supply["T"]
    t_hot = cw_out["T"]
    cop = cooling / power
    carnot_cop = t_cold / (t_hot - t_cold)
    f_cop = float(np.interp(cw_in_c, CURVE_X, COP_CURVE))
    f_cap = float(np.interp(cw_in_c, CURVE_X, CAPACITY_CURVE))
    results = {
        "cooling_capacity": cooling,
        "power_input": power,
        "cop": cop,
        "cold_temperature": t_cold,
        "hot_temperature": t_hot,
        "carnot_cop": carnot_cop,
        "second_law_efficiency": cop / carnot_cop,
        # exergy of the heat drawn at the cold temperature, Q (T0/T_cold - 1), over
        # the power input (the product of a chiller is the cold)
        "exergetic_efficiency": cooling * (t0 / t_cold - 1.0) / power,
        "heat_rejected": q_cond,
        "heat_balance_closure": (cooling + power - q_cond) / q_cond,
        "corrected_cop": cop / f_cop,
        "corrected_cooling_capacity": cooling / f_cap,
        "correction_factor_cop": f_cop,
        "correction_factor_cooling_capacity": f_cap,
    }
    units = {
        "evaporator.heat": cooling,
        "condenser.heat": q_cond,
        "compressor.power": power,
        "compressor.heat_loss": CASING_LOSS,
    }
    return {
        "streams": streams,
        "units": units,
        "results": results,
        "dead_state": {"temperature": t0, "pressure": BAROMETER},
        "refrigerant": {
            "evaporating_temperature": t_evap,
            "condensing_temperature": r_tsat(p_cond),
            "mass_flow": m_r,
        },
    }


# --------------------------------------------------------------------------- instruments
def _t(stream):
    return lambda b: b["streams"][stream]["T"] - 273.15


def _pg(stream):
    return lambda b: (b["streams"][stream]["p"] - BAROMETER) / 1e5


# tag -> (file, logged unit, reading from a balance, noise std [unit], noise time [s],
#         stated uncertainty (95 %), extra plant-file keys, description)
# fmt: off
INSTRUMENTS = {
    "TT-301": ("testlog", "degC", _t("chw_return"), 0.015, 60,
               {"value": 0.05, "kind": "absolute"}, {"shared_calibration": "chw-rtd-lot-2026-06"},
               "Chilled water entering the evaporator (test RTD)"),
    "TT-302A": ("bms", "degC", _t("chw_leaving"), 0.05, 90,
                {"value": 0.3, "kind": "absolute"}, {},
                "Chilled water leaving, evaporator nozzle (chiller's own sensor)"),
    "TT-302B": ("testlog", "degC", _t("chw_supply"), 0.015, 60,
                {"value": 0.05, "kind": "absolute"}, {"shared_calibration": "chw-rtd-lot-2026-06"},
                "Chilled water supply header (test RTD)"),
    "FT-301": ("bms", "m3/h", lambda b: b["streams"]["chw_return"]["m"] * 3600.0
               / CHW_METER_DENSITY, 0.6, 60,
               {"value": 1.0, "kind": "percent_of_reading"},
               {"quantity": "mass_flow", "density": {"value": CHW_METER_DENSITY,
                                                     "unit": "kg/m3"}},
               "Chilled water flow (magnetic meter in the return line)"),
    "TT-311": ("testlog", "degC", _t("cw_in"), 0.02, 120,
               {"value": 0.05, "kind": "absolute"}, {"shared_calibration": "cw-rtd-lot-2026-06"},
               "Condenser water entering (test RTD)"),
    "TT-312": ("testlog", "degC", _t("cw_out"), 0.02, 60,
               {"value": 0.05, "kind": "absolute"}, {"shared_calibration": "cw-rtd-lot-2026-06"},
               "Condenser water leaving (test RTD)"),
    "FT-311": ("testlog", "kg/s", lambda b: b["streams"]["cw_in"]["m"], 0.25, 60,
               {"value": 1.5, "kind": "percent_of_reading"}, {},
               "Condenser water flow (clamp-on ultrasonic test meter)"),
    "PT-321": ("bms", "barg", _pg("suction"), 0.006, 60,
               {"value": 0.25, "kind": "percent_of_span"}, {"span": [-1.0, 15.0]},
               "Compressor suction pressure"),
    "TT-321": ("bms", "degC", _t("suction"), 0.08, 90,
               {"value": 0.5, "kind": "absolute"}, {},
               "Compressor suction temperature"),
    "PT-322": ("bms", "barg", _pg("discharge"), 0.01, 60,
               {"value": 0.25, "kind": "percent_of_span"}, {"span": [-1.0, 15.0]},
               "Compressor discharge pressure"),
    "TT-322": ("bms", "degC", _t("discharge"), 0.15, 90,
               {"value": 0.8, "kind": "absolute"}, {},
               "Compressor discharge temperature"),
    "PT-323": ("bms", "barg", _pg("liquid"), 0.01, 60,
               {"value": 0.25, "kind": "percent_of_span"}, {"span": [-1.0, 15.0]},
               "Liquid line pressure at the condenser outlet"),
    "TT-323": ("bms", "degC", _t("liquid"), 0.08, 90,
               {"value": 0.5, "kind": "absolute"}, {},
               "Liquid line temperature at the condenser outlet"),
    "PT-324": ("bms", "barg", _pg("evaporator_in"), 0.006, 60,
               {"value": 0.25, "kind": "percent_of_span"}, {"span": [-1.0, 15.0]},
               "Evaporator inlet pressure (after the expansion valve)"),
    "JT-301A": ("bms", "kW", lambda b: b["results"]["power_input"] / 1e3, 0.6, 60,
                {"value": 2.0, "kind": "percent_of_reading"}, {},
                "Compressor motor input, chiller panel meter"),
    "JT-301B": ("testlog", "kW", lambda b: b["results"]["power_input"] / 1e3, 0.4, 30,
                {"value": 0.5, "kind": "percent_of_reading"}, {},
                "Compressor motor input, portable power analyser"),
    "TT-391": ("bms", "degC", lambda b: AMBIENT_T, 0.2, 900,
               {"value": 0.5, "kind": "absolute"},
               {"stability": {"value": 3.0, "kind": "absolute"}},
               "Outdoor air temperature"),
    "PT-390": ("bms", "hPa", lambda b: BAROMETER / 100.0, 0.1, 900,
               {"value": 1.0, "kind": "absolute"}, {}, "Barometric pressure"),
}
# fmt: on
_DECIMALS = {"degC": 3, "m3/h": 2, "kg/s": 3, "barg": 4, "kW": 2, "hPa": 1}
_INTERVAL = {"bms": 60.0, "testlog": 10.0}
SYSTEMATIC_SHARE = 0.3  # fixed error: this many stated standard uncertainties (random sign)
DRIFT_SHARE = 0.2  # linear drift over the whole test, in stated standard uncertainties

# Bad samples written into the files: (file, time, tag, what is written, why)
BAD_SAMPLES = [
    ("bms", "2026-07-09 08:47:00", "TT-322", "Bad", "BMS quality text"),
    ("bms", "2026-07-09 10:21:00", "FT-301", "", "empty cell (communication loss)"),
    ("testlog", "2026-07-09 09:05:20", "TT-312", "spike+2", "single-sample spike"),
    ("testlog", "2026-07-09 11:52:10", "JT-301B", "", "logger channel dropped one sample"),
]


def _u95(tag: str, value: float) -> float:
    spec = INSTRUMENTS[tag][5]
    if spec["kind"] == "absolute":
        return spec["value"]
    if spec["kind"] == "percent_of_reading":
        return spec["value"] / 100.0 * abs(value)
    lo, hi = INSTRUMENTS[tag][6]["span"]
    return spec["value"] / 100.0 * (hi - lo)


def _ar1(rng, n, dt, tau, sigma):
    phi = math.exp(-dt / tau)
    e = rng.normal(0.0, sigma * math.sqrt(1.0 - phi * phi), n)
    out = np.empty(n)
    out[0] = rng.normal(0.0, sigma)
    for i in range(1, n):
        out[i] = phi * out[i - 1] + e[i]
    return out


def true_profile(points: list[dict], t: pd.DatetimeIndex, reads) -> np.ndarray:
    """True reading over time: each load point's value during its hour, straight
    lines between the points, and a settling start (the chiller runs at about 90 %
    load at 08:00 and comes up to full load by 08:30)."""
    knots_t, knots_v = [], []
    first = reads(points[0]["balance"])
    knots_t.append(START)
    knots_v.append(first + 0.4 * (reads(points[1]["balance"]) - first))
    for p in points:
        v = reads(p["balance"])
        knots_t += [p["start"], p["end"]]
        knots_v += [v, v]
    x = np.array([(k - START).total_seconds() for k in knots_t])
    return np.interp((t - START).total_seconds().to_numpy(), x, np.array(knots_v))


def make_logs(points, rng):
    frames = {}
    errors = {}
    for where, dt in _INTERVAL.items():
        n = int((END - START).total_seconds() / dt)
        frames[where] = pd.DataFrame(index=START + pd.to_timedelta(np.arange(n) * dt, unit="s"))
    span_s = (END - START).total_seconds()
    lot_offsets: dict = {}
    for tag, (where, _unit, reads, sigma, tau, _u, _extra, _desc) in INSTRUMENTS.items():
        idx = frames[where].index
        dt = _INTERVAL[where]
        true = true_profile(points, idx, reads)
        u_std = _u95(tag, reads(points[0]["balance"])) / 1.96
        # Tags of one calibration lot share their fixed error, as plant.toml says.
        lot = INSTRUMENTS[tag][6].get("shared_calibration")
        if lot is None:
            share = SYSTEMATIC_SHARE * rng.standard_normal()
        else:
            if lot not in lot_offsets:
                lot_offsets[lot] = SYSTEMATIC_SHARE * rng.standard_normal()
            share = lot_offsets[lot]
        offset = share * u_std
        drift = DRIFT_SHARE * u_std * rng.standard_normal()  # over the whole test
        frac = (idx - START).total_seconds().to_numpy() / span_s - 0.5
        frames[where][tag] = true + offset + drift * frac + _ar1(rng, len(idx), dt, tau, sigma)
        errors[tag] = {"offset": offset, "drift_over_test": drift}
    return frames, errors


def write_logs(frames: dict, out: Path) -> list[dict]:
    planted = []
    text = {}
    for where, df in frames.items():
        t = pd.DataFrame(index=df.index)
        for tag in df.columns:
            d = _DECIMALS[INSTRUMENTS[tag][1]]
            t[tag] = [f"{v:.{d}f}" for v in df[tag].to_numpy()]
        text[where] = t
    for where, when, tag, what, why in BAD_SAMPLES:
        ts = pd.Timestamp(when)
        if what.startswith("spike"):
            d = _DECIMALS[INSTRUMENTS[tag][1]]
            what = f"{frames[where].loc[ts, tag] + float(what[5:]):.{d}f}"
        text[where].loc[ts, tag] = what
        planted.append(
            {"file": f"{where}.csv", "time": when, "tag": tag, "written": what, "reason": why}
        )
    for where, t in text.items():
        lines = ["Timestamp," + ",".join(t.columns)]
        lines.append("units," + ",".join(INSTRUMENTS[c][1] for c in t.columns))
        for ts, row in zip(t.index, t.itertuples(index=False), strict=True):
            lines.append(ts.strftime("%Y-%m-%d %H:%M:%S") + "," + ",".join(row))
        (out / f"{where}.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return planted


# --------------------------------------------------------------------------- plant file
def _toml(v) -> str:
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml(x)}" for k, x in v.items()) + " }"
    if isinstance(v, list):
        return "[" + ", ".join(_toml(x) for x in v) + "]"
    if isinstance(v, float):
        return repr(round(v, 6))
    return str(v)


def plant_toml(guarantees: dict, design: dict) -> str:
    out = [
        "# Ostrenby science park, chiller CH-2: plant description for perftest.",
        "# An invented plant with invented numbers (see README.md beside this file).",
        "# Written by generate.py; edit the generator, not this file.",
        "",
        "[site]",
        'name = "Ostrenby science park, chiller CH-2"',
        'timezone = "UTC"',
        'barometer_tag = "PT-390"',
        'dead_state_temperature_tag = "TT-391"',
        'dead_state_pressure_tag = "PT-390"',
        "",
    ]
    for tag, (where, unit, _r, _s, _tau, u, extra, desc) in INSTRUMENTS.items():
        out.append(f'[tags."{tag}"]')
        out.append(f"description = {_toml(desc)}")
        if "quantity" in extra:
            out.append(f"quantity = {_toml(extra['quantity'])}")
        out.append(f"unit = {_toml(unit)}")
        out.append(f"source = {_toml(where)}")
        out.append(f"uncertainty = {_toml(dict(u, level=0.95))}")
        for key in ("span", "density", "shared_calibration", "stability"):
            if key in extra:
                out.append(f"{key} = {_toml(extra[key])}")
        out.append("")
    curve = lambda ys: _toml({"x": CURVE_X, "y": ys, "x_unit": "degC"})  # noqa: E731
    out += f"""\
# The panel meter and the test power analyser read the same motor terminals.
[groups."JT-301"]
tags = ["JT-301A", "JT-301B"]
agreement = {{ value = 3.0, kind = "percent" }}

# ---- chilled-water circuit
[streams.chw_return]
fluid = "water"
phase = "liquid"
mass_flow = "FT-301"
pressure = {{ value = {CHW_RETURN_P / 1e5}, unit = "bar" }}
temperature = "TT-301"

[streams.chw_leaving]
fluid = "water"
phase = "liquid"
pressure = {{ value = {CHW_LEAVING_P / 1e5}, unit = "bar" }}
temperature = "TT-302A"

[streams.chw_supply]
fluid = "water"
phase = "liquid"
pressure = {{ value = {CHW_LEAVING_P / 1e5}, unit = "bar" }}
temperature = "TT-302B"

# ---- condenser-water circuit
[streams.cw_in]
fluid = "water"
phase = "liquid"
mass_flow = "FT-311"
pressure = {{ value = {CW_IN_P / 1e5}, unit = "bar" }}
temperature = "TT-311"

[streams.cw_out]
fluid = "water"
phase = "liquid"
pressure = {{ value = {CW_OUT_P / 1e5}, unit = "bar" }}
temperature = "TT-312"

# ---- refrigerant loop (R134a); its mass flow is not measured
[streams.suction]
fluid = "R134a"
phase = "vapour"
pressure = "PT-321"
temperature = "TT-321"

[streams.discharge]
fluid = "R134a"
phase = "vapour"
pressure = "PT-322"
temperature = "TT-322"

[streams.liquid]
fluid = "R134a"
phase = "liquid"
pressure = "PT-323"
temperature = "TT-323"

[streams.evaporator_in]
fluid = "R134a"
phase = "wet"
pressure = "PT-324"

# ---- units
[units.compressor]
type = "compressor"
inlets = ["suction"]
outlets = ["discharge"]
power = "JT-301"
# heat lost from the casing (estimated from the surface temperature and area)
heat_loss = {{ value = {CASING_LOSS / 1e3}, unit = "kW" }}

[units.condenser]
type = "heat_exchanger"
hot_inlet = "discharge"
hot_outlet = "liquid"
cold_inlet = "cw_in"
cold_outlet = "cw_out"

[units.expansion_valve]
type = "valve"
inlets = ["liquid"]
outlets = ["evaporator_in"]

[units.evaporator]
type = "heat_exchanger"
hot_inlet = "chw_return"
hot_outlet = "chw_leaving"
cold_inlet = "evaporator_in"
cold_outlet = "suction"

# the insulated pipe from the evaporator nozzle to the supply header
[units.supply_pipe]
type = "generic"
inlets = ["chw_leaving"]
outlets = ["chw_supply"]

[performance]
kind = "refrigeration"
power_input = "JT-301"
cooling = "evaporator.heat"
heat_rejected = "condenser.heat"
cold_temperature = "chw_supply.temperature"
hot_temperature = "cw_out.temperature"

# ---- corrections to the reference condenser-water inlet temperature
[[corrections]]
result = "cop"
variable = "cw_in.temperature"
reference = {{ value = {CW_REFERENCE_T}, unit = "degC" }}
kind = "multiplicative"
curve = {curve(COP_CURVE)}

[[corrections]]
result = "cooling_capacity"
variable = "cw_in.temperature"
reference = {{ value = {CW_REFERENCE_T}, unit = "degC" }}
kind = "multiplicative"
curve = {curve(CAPACITY_CURVE)}

# ---- contract guarantees at full load and reference conditions
[[guarantees]]
quantity = "corrected_cooling_capacity"
value = {guarantees["corrected_cooling_capacity"]}
unit = "kW"
direction = "at_least"
description = "Full-load cooling capacity at 29.5 degC condenser water"

[[guarantees]]
quantity = "corrected_cop"
value = {guarantees["corrected_cop"]}
unit = "kW/kW"
direction = "at_least"
description = "Full-load COP at 29.5 degC condenser water"

[acceptance]
rule = "guarded"

# ---- design point (full load) and planned logging, for perftest plan
[design]
duration = "1h"
interval = "1min"

[design.tags]
""".splitlines()
    for tag, (where, unit, reads, sigma, tau, *_rest) in INSTRUMENTS.items():
        d = _DECIMALS[unit]
        entry = f"value = {float(round(reads(design), d))!r}, scatter = {float(sigma)!r}"
        if where != "bms":
            entry += f', interval = "{int(_INTERVAL[where])}s"'
        entry += f', correlation_time = "{int(tau)}s"'
        out.append(f'"{tag}" = {{ {entry} }}')
    out += [
        "",
        "[design.allowed]",
        'corrected_cop = { value = 3.0, kind = "percent" }',
        'corrected_cooling_capacity = { value = 3.0, kind = "percent" }',
        "",
    ]
    return "\n".join(out)


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
    points = []
    for label, start, end, cooling, cw_in, eta, ea, ca in POINTS:
        points.append(
            {
                "label": label,
                "start": pd.Timestamp(start),
                "end": pd.Timestamp(end),
                "balance": solve_point(cooling, cw_in, eta, ea, ca),
                "design": {
                    "cw_in_temperature_degC": cw_in,
                    "compressor_efficiency": eta,
                    "evaporator_approach_K": ea,
                    "condenser_approach_K": ca,
                },
            }
        )
    rng = np.random.default_rng(SEED)
    frames, errors = make_logs(points, rng)
    planted = write_logs(frames, out)

    full = points[0]["balance"]["results"]
    # Invented guarantees: capacity comfortably met; COP within the test uncertainty
    # of the true value, so that its verdict depends on the uncertainty.
    guarantees = {
        "corrected_cooling_capacity": float(round(full["corrected_cooling_capacity"] * 0.97 / 1e3)),
        "corrected_cop": float(round(full["corrected_cop"] * 0.99, 2)),
    }
    (out / "plant.toml").write_text(plant_toml(guarantees, points[0]["balance"]), encoding="utf-8")
    truth = {
        "description": "True values of the invented Ostrenby chiller CH-2 test (SI units).",
        "seed": SEED,
        "definitions": {
            "cold_temperature": "chilled water supply (chw_supply.temperature)",
            "hot_temperature": "condenser water leaving (cw_out.temperature)",
            "carnot_cop": "T_cold / (T_hot - T_cold)",
            "second_law_efficiency": "cop / carnot_cop",
            "exergetic_efficiency": "cooling (T0/T_cold - 1) / power_input, T0 dead state",
            "heat_balance_closure": "(cooling + power_input - heat_rejected) / heat_rejected",
            "corrected_*": "value / curve factor at the condenser-water inlet temperature",
        },
        "results": full,
        "points": [
            {
                "label": p["label"],
                "start": str(p["start"]),
                "end": str(p["end"]),
                "results": p["balance"]["results"],
                "streams": p["balance"]["streams"],
                "units": p["balance"]["units"],
                "refrigerant": p["balance"]["refrigerant"],
                "dead_state": p["balance"]["dead_state"],
                "design": p["design"],
                "readings": {tag: INSTRUMENTS[tag][2](p["balance"]) for tag in INSTRUMENTS},
            }
            for p in points
        ],
        "instruments": {
            tag: {
                "file": f"{INSTRUMENTS[tag][0]}.csv",
                "unit": INSTRUMENTS[tag][1],
                "systematic_error": errors[tag]["offset"],
                "drift_over_test": errors[tag]["drift_over_test"],
            }
            for tag in INSTRUMENTS
        },
        "bad_samples": planted,
        "guarantees": guarantees,
    }
    (out / "truth.json").write_text(
        json.dumps(_json_safe(truth), indent=2) + "\n", encoding="utf-8"
    )
    return truth


if __name__ == "__main__":
    main()
