"""Generate the Wrenhollow CHP demo test run (invented site, invented numbers).

Wrenhollow paper mill, CHP unit: a gas-fired boiler and an extraction-condensing
steam turbine.  Process steam is exported from the controlled extraction to the
mill; part of its condensate comes back, the rest is replaced by demineralised
make-up water in the feedwater tank, which is heated by steam taken from the
process-steam header through a pressure-reducing valve.  The script solves a
consistent heat balance (IAPWS-IF97 through CoolProp; fuel calorific value by the
ISO 6976 method from the gas composition) and writes what the instruments would
have logged during a three-hour acceptance test:

* ``plant.toml``  the plant description (docs/plant-file.md),
* ``dcs.csv``     the control-system export, one row a minute, with a units row,
* ``testlog.csv`` the portable test logger, one row every 10 s, with a units row,
* ``truth.json``  the true values every reading was generated from.

Deterministic (one seeded numpy generator)::

    python sample_data/wrenhollow/generate.py

The true state satisfies every balance of the plant file exactly: boiler, turbine
and generator, condenser and its cooling water, the header splitter and the
reducing valve, the feedwater tank (a mixer) and the feed pump.  The readings
carry first-order autocorrelated noise, fixed systematic errors of about 0.3
stated standard uncertainties, a slow drift, a settling first half hour and a few
bad samples.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
SEED = 20260922
START = pd.Timestamp("2026-09-22 06:30:00")
STEADY = pd.Timestamp("2026-09-22 07:00:00")  # settled from here
END = pd.Timestamp("2026-09-22 10:00:00")

# --------------------------------------------------------------------------- design
MAIN_STEAM_P = 62.0e5  # Pa at the turbine stop valve
MAIN_STEAM_T = 485.0 + 273.15
MAIN_STEAM_FLOW = 26.0  # kg/s
EXTRACTION_P = 11.0e5  # controlled extraction = process-steam header
EXPORT_FLOW = 15.0  # kg/s of process steam to the mill
RETURN_FRACTION = 0.62  # of the exported mass that comes back as condensate
RETURN_T = 88.0 + 273.15
RETURN_P = 3.0e5
MAKEUP_T = 14.0 + 273.15
MAKEUP_P = 4.0e5
EXHAUST_P = 8.0e3
HOTWELL_P = 12.0e3  # condensate at the hotwell outlet (static head above the exhaust)
CONDENSATE_SUBCOOLING = 1.0
TANK_P = 1.8e5  # feedwater tank (deaerating) and the reducing-valve outlet
TANK_OUTLET_P = 2.6e5  # pump suction, static head below the tank
TANK_SUBCOOLING = 0.5  # K, tank outlet below saturation at the tank pressure
FEEDWATER_P = 72.0e5
ETA_HP = 0.80  # isentropic efficiency, inlet to extraction
ETA_LP = 0.80  # extraction to exhaust (wet)
ETA_PUMP = 0.75
GENERATOR_LOSS = 0.018
BOILER_EFFICIENCY = 0.915  # heat absorbed by the water / fuel heat input (LHV)
AUXILIARY_POWER = 0.95e6
CW_IN_T = 16.0 + 273.15
CW_RISE = 8.0
CW_IN_P = 2.5e5
CW_OUT_P = 1.9e5
AMBIENT_T = 12.0 + 273.15
BAROMETER = 100_600.0

FUEL_COMPOSITION = {
    "methane": 0.9120,
    "ethane": 0.0480,
    "propane": 0.0110,
    "n-butane": 0.0030,
    "nitrogen": 0.0160,
    "carbon_dioxide": 0.0100,
}
# Net (inferior) molar calorific value [kJ/mol] at 15 degC and molar mass [g/mol],
# ISO 6976:2016 Table 3 (values from memory); standard chemical exergy [kJ/mol]
# at 298.15 K, Szargut, Morris and Steward (1988), Table I (Model II, from memory).
_COMPONENTS = {
    "methane": (802.69, 16.04246, 831.65),
    "ethane": (1428.84, 30.06904, 1495.84),
    "propane": (2043.37, 44.09562, 2154.0),
    "n-butane": (2657.60, 58.12220, 2805.8),
    "nitrogen": (0.0, 28.01340, 0.72),
    "carbon_dioxide": (0.0, 44.00950, 19.87),
}
_R = 8.314462618  # J/(mol K)


def fuel_properties() -> dict:
    """LHV [J/kg] and chemical exergy [J/kg] of ``FUEL_COMPOSITION`` (ideal mixture)."""
    x = FUEL_COMPOSITION
    hn = sum(v * _COMPONENTS[c][0] for c, v in x.items()) * 1e3  # J/mol
    mm = sum(v * _COMPONENTS[c][1] for c, v in x.items()) * 1e-3  # kg/mol
    ex = sum(v * _COMPONENTS[c][2] for c, v in x.items()) * 1e3
    ex += _R * 298.15 * sum(v * math.log(v) for v in x.values() if v > 0)
    return {"lhv": hn / mm, "exergy": ex / mm, "molar_mass": mm}


_WATER = CP.AbstractState("IF97", "Water")


def _st(inputs, a, b) -> dict:
    _WATER.update(inputs, a, b)
    q = _WATER.Q()
    return {
        "p": _WATER.p(),
        "T": _WATER.T(),
        "h": _WATER.hmass(),
        "s": _WATER.smass(),
        "x": q if 0.0 <= q <= 1.0 else None,
    }


def pT(p, T):
    return _st(CP.PT_INPUTS, p, T)


def ph(p, h):
    """State from (p, h); single-phase temperatures refined by Newton steps on
    h(p, T) (CoolProp's IF97 backward equations alone are off by up to ~0.01 K)."""
    s = _st(CP.HmassP_INPUTS, h, p)
    if s["x"] is not None:
        return s
    T = s["T"]
    for _ in range(8):
        _WATER.update(CP.PT_INPUTS, p, T)
        T -= (_WATER.hmass() - h) / _WATER.cpmass()
    return pT(p, T)


def ps(p, s):
    return _st(CP.PSmass_INPUTS, p, s)


def tsat(p):
    return _st(CP.PQ_INPUTS, p, 0.0)["T"]


def solve_heat_balance() -> dict:
    ms = pT(MAIN_STEAM_P, MAIN_STEAM_T)
    ext = ph(EXTRACTION_P, ms["h"] - ETA_HP * (ms["h"] - ps(EXTRACTION_P, ms["s"])["h"]))
    exh = ph(EXHAUST_P, ext["h"] - ETA_LP * (ext["h"] - ps(EXHAUST_P, ext["s"])["h"]))
    da = ph(TANK_P, ext["h"])  # after the reducing valve (isenthalpic)
    cond = pT(HOTWELL_P, tsat(EXHAUST_P) - CONDENSATE_SUBCOOLING)
    ret = pT(RETURN_P, RETURN_T)
    mu = pT(MAKEUP_P, MAKEUP_T)
    tank = pT(TANK_OUTLET_P, tsat(TANK_P) - TANK_SUBCOOLING)
    fw_s = ps(FEEDWATER_P, tank["s"])
    fw = ph(FEEDWATER_P, tank["h"] + (fw_s["h"] - tank["h"]) / ETA_PUMP)

    m = MAIN_STEAM_FLOW
    m_ret = RETURN_FRACTION * EXPORT_FLOW
    m_mu = EXPORT_FLOW - m_ret
    # Tank energy balance: m h_tank = (m - m_exp - m_da) h_cond + m_ret h_ret
    #                                  + m_mu h_mu + m_da h_da
    m_da = (m * tank["h"] - (m - EXPORT_FLOW) * cond["h"] - m_ret * ret["h"] - m_mu * mu["h"]) / (
        da["h"] - cond["h"]
    )
    m_ext = EXPORT_FLOW + m_da
    m_exh = m - m_ext
    shaft = m * ms["h"] - m_ext * ext["h"] - m_exh * exh["h"]
    gross = shaft / (1.0 + GENERATOR_LOSS)
    q_boiler = m * (ms["h"] - fw["h"])
    q_cond = m_exh * (exh["h"] - cond["h"])
    cw_in = pT(CW_IN_P, CW_IN_T)
    cw_out = pT(CW_OUT_P, CW_IN_T + CW_RISE)
    m_cw = q_cond / (cw_out["h"] - cw_in["h"])
    pump = m * (fw["h"] - tank["h"])

    fuel = fuel_properties()
    heat_input = q_boiler / BOILER_EFFICIENCY
    m_fuel = heat_input / fuel["lhv"]
    streams = {
        "main_steam": dict(ms, m=m),
        "extraction": dict(ext, m=m_ext),
        "process_steam": dict(ext, m=EXPORT_FLOW),
        "tank_steam_supply": dict(ext, m=m_da),
        "tank_steam": dict(da, m=m_da),
        "exhaust": dict(exh, m=m_exh),
        "condensate": dict(cond, m=m_exh),
        "process_return": dict(ret, m=m_ret),
        "makeup": dict(mu, m=m_mu),
        "tank_outlet": dict(tank, m=m),
        "feedwater": dict(fw, m=m),
        "cw_in": dict(cw_in, m=m_cw),
        "cw_out": dict(cw_out, m=m_cw),
    }

    # ---- results after the contract's definitions
    t0, p0 = AMBIENT_T, BAROMETER
    dead = pT(p0, t0)  # water as liquid at the dead state

    def ex(st):  # specific flow exergy [J/kg]
        return (st["h"] - dead["h"]) - t0 * (st["s"] - dead["s"])

    net = gross - AUXILIARY_POWER
    heat_export = EXPORT_FLOW * ext["h"] - m_ret * ret["h"] - (EXPORT_FLOW - m_ret) * mu["h"]
    exergy_export = EXPORT_FLOW * ex(ext) - m_ret * ex(ret) - (EXPORT_FLOW - m_ret) * ex(mu)
    fuel_exergy = m_fuel * fuel["exergy"]
    carnot = 1.0 - CW_IN_T / MAIN_STEAM_T
    cycle = gross / q_boiler
    results = {
        "gross_power": gross,
        "auxiliary_power": AUXILIARY_POWER,
        "net_power": net,
        "heat_input": heat_input,
        "first_law_efficiency": net / heat_input,
        "heat_rate": heat_input / net,
        "source_temperature": MAIN_STEAM_T,
        "sink_temperature": CW_IN_T,
        "carnot_efficiency": carnot,
        "cycle_heat": q_boiler,
        "cycle_efficiency": cycle,
        "second_law_efficiency": cycle / carnot,
        "fuel_exergy": fuel_exergy,
        "heat_export": heat_export,
        "heat_export_exergy": exergy_export,
        "exergetic_efficiency": (net + exergy_export) / fuel_exergy,
        "fuel_utilisation": (net + heat_export) / heat_input,
        "power_to_heat_ratio": net / heat_export,
    }
    return {
        "streams": streams,
        "units": {
            "boiler.heat": q_boiler,
            "turbine.power": shaft,
            "generator.losses": shaft - gross,
            "condenser.heat": q_cond,
            "feed_pump.power": pump,
        },
        "fuel": {
            "mass_flow": m_fuel,
            "lhv": fuel["lhv"],
            "chemical_exergy": fuel["exergy"],
            "exergy_ratio": fuel["exergy"] / fuel["lhv"],
            "molar_mass": fuel["molar_mass"],
            "composition": FUEL_COMPOSITION,
        },
        "results": results,
        "dead_state": {"temperature": t0, "pressure": p0},
    }


# --------------------------------------------------------------------------- instruments
def _t(s):
    return lambda b: b["streams"][s]["T"] - 273.15


def _pg(s):
    return lambda b: (b["streams"][s]["p"] - BAROMETER) / 1e5


def _th(s):
    return lambda b: b["streams"][s]["m"] * 3.6


def _abs(v):
    return {"value": v, "kind": "absolute"}


def _rdg(v):
    return {"value": v, "kind": "percent_of_reading"}


def _spn(v):
    return {"value": v, "kind": "percent_of_span"}


# tag -> (file, unit, reading, noise std [unit], noise time [s], stated U95, extra, text)
# fmt: off
INSTRUMENTS = {
    "PT-401": ("dcs", "barg", _pg("main_steam"), 0.06, 120, _spn(0.25), {"span": [0.0, 100.0]},
               "Main steam pressure at the turbine stop valve"),
    "TT-401": ("dcs", "degC", _t("main_steam"), 0.4, 180, _abs(1.5),
               {"stability": {"value": 2.0, "kind": "absolute"}}, "Main steam temperature"),
    "FT-401": ("dcs", "t/h", _th("main_steam"), 0.35, 90, _rdg(1.5), {},
               "Main steam flow (venturi)"),
    "PT-411": ("dcs", "barg", _pg("extraction"), 0.02, 120, _spn(0.25), {"span": [0.0, 25.0]},
               "Extraction (process-steam header) pressure at the turbine"),
    "TT-411": ("dcs", "degC", _t("extraction"), 0.3, 180, _abs(1.5),
               {"stability": {"value": 2.0, "kind": "absolute"}},
               "Extraction steam temperature at the turbine"),
    "FT-421": ("dcs", "t/h", _th("process_steam"), 0.12, 90, _rdg(1.0), {},
               "Process steam export to the mill (custody-transfer vortex meter)"),
    "PT-421": ("dcs", "barg", _pg("process_steam"), 0.02, 120, _spn(0.25),
               {"span": [0.0, 25.0]}, "Process steam pressure at the export meter"),
    "TT-421": ("dcs", "degC", _t("process_steam"), 0.3, 180, _abs(1.0),
               {"stability": {"value": 2.0, "kind": "absolute"}},
               "Process steam temperature at the export meter"),
    "TT-431": ("dcs", "degC", _t("tank_steam"), 0.3, 180, _abs(1.5),
               {"stability": {"value": 2.0, "kind": "absolute"}},
               "Feedwater-tank heating steam after the reducing valve"),
    "PT-431": ("dcs", "barg", _pg("tank_steam"), 0.005, 120, _spn(0.5), {"span": [0.0, 4.0]},
               "Feedwater tank pressure"),
    "PT-441": ("dcs", "kPa(a)", lambda b: b["streams"]["exhaust"]["p"] / 1e3, 0.012, 300,
               _abs(0.1), {}, "Turbine exhaust (condenser) pressure"),
    "TT-451": ("dcs", "degC", _t("condensate"), 0.1, 240, _abs(0.3), {},
               "Condensate temperature at the hotwell outlet"),
    "FT-451": ("dcs", "t/h", _th("condensate"), 0.25, 90, _rdg(1.5), {},
               "Condensate flow (orifice)"),
    "FT-461": ("dcs", "t/h", _th("process_return"), 0.08, 90, _rdg(1.5), {},
               "Condensate returned from the mill"),
    "TT-461": ("dcs", "degC", _t("process_return"), 0.15, 240, _abs(0.5), {},
               "Returned condensate temperature"),
    "FT-471": ("dcs", "t/h", _th("makeup"), 0.06, 90, _rdg(1.5), {},
               "Demineralised make-up water flow"),
    "TT-471": ("dcs", "degC", _t("makeup"), 0.1, 600, _abs(0.5), {},
               "Make-up water temperature"),
    "PT-481": ("dcs", "barg", _pg("tank_outlet"), 0.005, 120, _spn(0.5), {"span": [0.0, 4.0]},
               "Feed pump suction pressure"),
    "TT-481": ("dcs", "degC", _t("tank_outlet"), 0.1, 240, _abs(0.5), {},
               "Feed pump suction temperature"),
    "PT-491": ("dcs", "barg", _pg("feedwater"), 0.08, 60, _spn(0.25), {"span": [0.0, 100.0]},
               "Feedwater pressure at the boiler inlet"),
    "TT-491": ("dcs", "degC", _t("feedwater"), 0.1, 240, _abs(0.5), {},
               "Feedwater temperature at the boiler inlet"),
    "FT-491": ("dcs", "t/h", _th("feedwater"), 0.3, 90, _rdg(1.0), {},
               "Feedwater flow (flow nozzle)"),
    "FT-501": ("dcs", "t/h", _th("cw_in"), 18.0, 120, _rdg(2.0), {},
               "Cooling water flow (clamp-on ultrasonic)"),
    "TT-501": ("testlog", "degC", _t("cw_in"), 0.02, 60, _abs(0.1),
               {"shared_calibration": "cw-rtd-lot-2026-08"}, "Cooling water inlet (test RTD)"),
    "TT-502": ("testlog", "degC", _t("cw_out"), 0.03, 60, _abs(0.1),
               {"shared_calibration": "cw-rtd-lot-2026-08"}, "Cooling water outlet (test RTD)"),
    "JT-401A": ("dcs", "MW", lambda b: b["results"]["gross_power"] / 1e6, 0.015, 60, _rdg(0.3),
                {}, "Generator output, station wattmeter"),
    "JT-401B": ("testlog", "kW", lambda b: b["results"]["gross_power"] / 1e3, 12.0, 30,
                _rdg(0.2), {}, "Generator output, portable test wattmeter"),
    "JT-402": ("dcs", "MW", lambda b: b["results"]["auxiliary_power"] / 1e6, 0.003, 300,
               _rdg(1.0), {}, "Auxiliary power (unit transformer and drives)"),
    "FT-601": ("dcs", "kg/h", lambda b: b["fuel"]["mass_flow"] * 3600.0, 6.0, 60, _rdg(0.5),
               {}, "Fuel gas mass flow (Coriolis)"),
    "TT-691": ("dcs", "degC", lambda b: b["dead_state"]["temperature"] - 273.15, 0.15, 900,
               _abs(0.5), {"stability": {"value": 3.0, "kind": "absolute"}},
               "Ambient air temperature"),
    "PT-690": ("dcs", "hPa", lambda b: b["dead_state"]["pressure"] / 100.0, 0.1, 900, _abs(1.0),
               {}, "Barometric pressure"),
}
# fmt: on
_DECIMALS = {"barg": 3, "degC": 2, "t/h": 3, "kPa(a)": 3, "MW": 4, "kW": 1, "kg/h": 1, "hPa": 1}
_INTERVAL = {"dcs": 60.0, "testlog": 10.0}
SYSTEMATIC_SHARE = 0.3
DRIFT_SHARE = 0.2
# tags whose reading follows the load during the settling half hour
_LOAD_TAGS = {"FT-401", "FT-451", "FT-491", "FT-501", "JT-401A", "JT-401B", "FT-601"}

BAD_SAMPLES = [
    ("dcs", "2026-09-22 07:41:00", "FT-461", "Bad", "control-system quality text"),
    ("dcs", "2026-09-22 08:12:00", "TT-481", "", "empty cell (communication loss)"),
    ("testlog", "2026-09-22 08:55:30", "TT-502", "spike+2.5", "single-sample spike"),
]


def _u95(tag, value):
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


def make_logs(balance, rng):
    frames, errors = {}, {}
    for where, dt in _INTERVAL.items():
        n = int((END - START).total_seconds() / dt)
        frames[where] = pd.DataFrame(index=START + pd.to_timedelta(np.arange(n) * dt, unit="s"))
    span_s = (END - START).total_seconds()
    lot_offsets: dict = {}
    settle_s = (STEADY - START).total_seconds()
    for tag, (where, _unit, reads, sigma, tau, *_rest) in INSTRUMENTS.items():
        idx = frames[where].index
        secs = (idx - START).total_seconds().to_numpy()
        true = np.full(len(idx), reads(balance))
        if tag in _LOAD_TAGS:  # 2 % below the test load at the start, settled by 07:00
            true = true * (1.0 - 0.02 * np.clip(1.0 - secs / settle_s, 0.0, None))
        u_std = _u95(tag, reads(balance)) / 1.96
        # Tags of one calibration lot share their fixed error, as plant.toml says.
        lot = INSTRUMENTS[tag][6].get("shared_calibration")
        if lot is None:
            share = SYSTEMATIC_SHARE * rng.standard_normal()
        else:
            if lot not in lot_offsets:
                lot_offsets[lot] = SYSTEMATIC_SHARE * rng.standard_normal()
            share = lot_offsets[lot]
        offset = share * u_std
        drift = DRIFT_SHARE * u_std * rng.standard_normal()
        noise = _ar1(rng, len(idx), _INTERVAL[where], tau, sigma)
        frames[where][tag] = true + offset + drift * (secs / span_s - 0.5) + noise
        errors[tag] = {"offset": offset, "drift_over_test": drift}
    return frames, errors


def write_logs(frames, out):
    planted, text = [], {}
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
CW_REFERENCE_T = 15.0  # degC
CURVE_X = [5.0, 10.0, 15.0, 20.0, 25.0, 30.0]
NET_POWER_CURVE = [1.010, 1.006, 1.0, 0.992, 0.982, 0.970]


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


def _water(sid, **keys) -> list[str]:
    out = [f"[streams.{sid}]", 'fluid = "water"']
    for k, v in keys.items():
        out.append(f"{k} = {_toml(v)}")
    return [*out, ""]


def _bar(p):
    return {"value": round(p / 1e5, 6), "unit": "bar"}


def plant_toml(guarantees: dict, balance: dict) -> str:
    out = [
        "# Wrenhollow paper mill, CHP unit: plant description for perftest.",
        "# An invented plant with invented numbers (see README.md beside this file).",
        "# Written by generate.py; edit the generator, not this file.",
        "",
        "[site]",
        'name = "Wrenhollow paper mill, CHP unit"',
        'timezone = "UTC"',
        'barometer_tag = "PT-690"',
        'dead_state_temperature_tag = "TT-691"',
        'dead_state_pressure_tag = "PT-690"',
        "",
    ]
    for tag, (where, unit, _r, _s, _tau, u, extra, desc) in INSTRUMENTS.items():
        out += [
            f'[tags."{tag}"]',
            f"description = {_toml(desc)}",
            f"unit = {_toml(unit)}",
            f"source = {_toml(where)}",
            f"uncertainty = {_toml(dict(u, level=0.95))}",
        ]
        for key in ("span", "shared_calibration", "stability"):
            if key in extra:
                out.append(f"{key} = {_toml(extra[key])}")
        out.append("")
    out += [
        "# The two wattmeters on the generator terminals are averaged into one value.",
        '[groups."JT-401"]',
        'tags = ["JT-401A", "JT-401B"]',
        'agreement = { value = 0.5, kind = "percent" }',
        "",
        "# ---- water/steam cycle",
    ]
    out += _water(
        "main_steam", phase="vapour", mass_flow="FT-401", pressure="PT-401", temperature="TT-401"
    )
    out += _water(
        "extraction",
        phase="vapour",
        pressure="PT-411",
        temperature="TT-411",
        description="controlled extraction into the process-steam header",
    )
    out += _water(
        "process_steam",
        phase="vapour",
        mass_flow="FT-421",
        pressure="PT-421",
        temperature="TT-421",
        description="exported to the mill",
    )
    out += _water(
        "tank_steam_supply",
        phase="vapour",
        description="header steam to the reducing valve of the feedwater tank",
    )
    out += _water("tank_steam", phase="vapour", pressure="PT-431", temperature="TT-431")
    out += _water("exhaust", phase="wet", pressure="PT-441")
    out += _water(
        "condensate",
        phase="liquid",
        mass_flow="FT-451",
        pressure=_bar(HOTWELL_P),
        temperature="TT-451",
    )
    out += _water(
        "process_return",
        phase="liquid",
        mass_flow="FT-461",
        pressure=_bar(RETURN_P),
        temperature="TT-461",
        description="condensate returned from the mill",
    )
    out += _water(
        "makeup",
        phase="liquid",
        mass_flow="FT-471",
        pressure=_bar(MAKEUP_P),
        temperature="TT-471",
        description="demineralised make-up water",
    )
    out += _water("tank_outlet", phase="liquid", pressure="PT-481", temperature="TT-481")
    out += _water(
        "feedwater", phase="liquid", mass_flow="FT-491", pressure="PT-491", temperature="TT-491"
    )
    out += ["# ---- condenser cooling water"]
    out += _water(
        "cw_in", phase="liquid", mass_flow="FT-501", pressure=_bar(CW_IN_P), temperature="TT-501"
    )
    out += _water("cw_out", phase="liquid", pressure=_bar(CW_OUT_P), temperature="TT-502")
    curve = _toml({"x": CURVE_X, "y": NET_POWER_CURVE, "x_unit": "degC"})
    out += f"""\
# ---- units
[units.boiler]
type = "boiler"
inlets = ["feedwater"]
outlets = ["main_steam"]

[units.turbine]
type = "turbine"
inlets = ["main_steam"]
outlets = ["extraction", "exhaust"]

[units.generator]
type = "generator"
shaft = "turbine"
power = "JT-401"
losses = {{ value = {GENERATOR_LOSS * 100:.1f}, kind = "percent" }}

[units.header]
type = "splitter"
inlets = ["extraction"]
outlets = ["process_steam", "tank_steam_supply"]

[units.reducing_valve]
type = "valve"
inlets = ["tank_steam_supply"]
outlets = ["tank_steam"]

[units.condenser]
type = "condenser"
inlets = ["exhaust"]
outlets = ["condensate"]
coolant_inlet = "cw_in"
coolant_outlet = "cw_out"

[units.feedwater_tank]
type = "mixer"
inlets = ["condensate", "process_return", "makeup", "tank_steam"]
outlets = ["tank_outlet"]

[units.feed_pump]
type = "pump"
inlets = ["tank_outlet"]
outlets = ["feedwater"]

# ---- fuel: natural gas, calorific value by the ISO 6976 method
[fuel]
mass_flow = "FT-601"
composition = {_toml(FUEL_COMPOSITION)}
combustion_reference_temperature = {{ value = 15.0, unit = "degC" }}
uncertainty = {{ value = 0.3, kind = "percent", level = 0.95 }}

[performance]
kind = "chp"
gross_power = "JT-401"
auxiliary_power = "JT-402"
heat_input = "fuel"
source_temperature = "main_steam.temperature"
sink_temperature = "cw_in.temperature"
heat_export = "process_steam"
heat_return = "process_return"
makeup = "makeup"

# ---- correction to the reference cooling-water inlet temperature
[[corrections]]
result = "net_power"
variable = "cw_in.temperature"
reference = {{ value = {CW_REFERENCE_T}, unit = "degC" }}
kind = "multiplicative"
curve = {curve}

# ---- contract guarantees
[[guarantees]]
quantity = "corrected_net_power"
value = {guarantees["corrected_net_power"]}
unit = "MW"
direction = "at_least"

[[guarantees]]
quantity = "fuel_utilisation"
value = {guarantees["fuel_utilisation"]}
unit = "%"
direction = "at_least"
description = "Fuel utilisation (LHV) at the contract export of 54 t/h"

[acceptance]
rule = "guarded"

# ---- design point and planned logging, for perftest plan
[design]
duration = "2h"
interval = "1min"

[design.tags]
""".splitlines()
    for tag, (where, unit, reads, sigma, tau, *_rest) in INSTRUMENTS.items():
        d = _DECIMALS[unit]
        entry = f"value = {float(round(reads(balance), d))!r}, scatter = {float(sigma)!r}"
        if where != "dcs":
            entry += f', interval = "{int(_INTERVAL[where])}s"'
        entry += f', correlation_time = "{int(tau)}s"'
        out.append(f'"{tag}" = {{ {entry} }}')
    out += [
        "",
        "[design.allowed]",
        'corrected_net_power = { value = 1.0, kind = "percent" }',
        'fuel_utilisation = { value = 2.0, kind = "percent" }',
        "",
    ]
    return "\n".join(out)


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
    frames, errors = make_logs(balance, rng)
    planted = write_logs(frames, out)
    r = balance["results"]
    f_p = float(np.interp(CW_IN_T - 273.15, CURVE_X, NET_POWER_CURVE))
    r["corrected_net_power"] = r["net_power"] / f_p
    r["correction_factor_net_power"] = f_p
    # Invented guarantees: net power comfortably met; fuel utilisation within the
    # test uncertainty of the true value (the verdict needs the uncertainty).
    guarantees = {
        "corrected_net_power": float(round(r["corrected_net_power"] * 0.975 / 1e6, 1)),
        "fuel_utilisation": float(round(r["fuel_utilisation"] * 100.0 - 0.5, 1)),
    }
    (out / "plant.toml").write_text(plant_toml(guarantees, balance), encoding="utf-8")
    truth = {
        "description": "True values of the invented Wrenhollow CHP test (SI units).",
        "seed": SEED,
        "steady_from": str(STEADY),
        "steady_to": str(END),
        "definitions": {
            "net_power": "gross_power - auxiliary_power",
            "first_law_efficiency": "net_power / heat_input (LHV)",
            "heat_rate": "heat_input / net_power",
            "carnot_efficiency": "1 - T_sink / T_source",
            "cycle_efficiency": "gross_power / boiler.heat (heat absorbed by the water)",
            "second_law_efficiency": "cycle_efficiency / carnot_efficiency",
            "heat_export": "m_export h_export - m_return h_return - (m_export - m_return) h_makeup",
            "heat_export_exergy": "the same with specific flow exergies "
            "(h - h0) - T0 (s - s0), dead state liquid water at T0, p0",
            "exergetic_efficiency": "(net_power + heat_export_exergy) / fuel_exergy",
            "fuel_exergy": "fuel mass flow x chemical exergy (Szargut 1988 values, "
            "ideal mixing at 298.15 K)",
            "fuel_utilisation": "(net_power + heat_export) / heat_input",
            "power_to_heat_ratio": "net_power / heat_export",
        },
        "results": r,
        "streams": balance["streams"],
        "units": balance["units"],
        "fuel": balance["fuel"],
        "dead_state": balance["dead_state"],
        "design": {
            "boiler_efficiency": BOILER_EFFICIENCY,
            "eta_hp": ETA_HP,
            "eta_lp": ETA_LP,
            "eta_pump": ETA_PUMP,
            "generator_loss_fraction": GENERATOR_LOSS,
            "return_fraction": RETURN_FRACTION,
        },
        "readings": {tag: INSTRUMENTS[tag][2](balance) for tag in INSTRUMENTS},
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
