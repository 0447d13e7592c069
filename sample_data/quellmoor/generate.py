"""Generate the invented Quellmoor creamery steam-boiler test (plant.toml, dcs.csv, truth.json).

A gas-fired steam boiler B-1 of about 8.5 MW: feedwater in, superheated steam out,
flue gas analysed for O2, CO2 and CO after the economiser, combustion air metered at
the forced-draught fan.  Everything here is invented.  Deterministic: the same seed
gives the same files.

Run ``python generate.py`` in this folder.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from perftest.thermo.combustion import air_humidity_ratio, flue_gas
from perftest.thermo.fuel import Gas
from perftest.thermo.heat_loss import boiler_losses
from perftest.thermo.properties import get_fluid

SEED = 20261124
HERE = Path(__file__).resolve().parent
START = np.datetime64("2026-11-24T09:00:00")
STEP_S = 10
HOURS = 3.0

COMPOSITION = {
    "methane": 0.915,
    "ethane": 0.045,
    "propane": 0.01,
    "n-butane": 0.003,
    "nitrogen": 0.017,
    "carbon_dioxide": 0.01,
}
P_ATM = 101325.0
# true operating point (SI)
T_FW, P_FW = 378.15, 14.0e5  # feedwater 105 degC, 14 bar(a)
T_ST, P_ST = 493.15, 12.0e5  # steam 220 degC, 12 bar(a)
M_STEAM = 3.5  # kg/s (12.6 t/h)
O2_DRY = 0.031
CO_DRY = 40e-6
T_FLUE = 448.15  # 175 degC after the economiser
T_AIR = 291.15  # 18 degC at the fan inlet
RH_AIR = 0.62
RADIATION = 0.5  # percent of the heat input (the boiler maker's curve at this load)

# The flue-gas temperature swings with the burner's modulation by more than the
# 0.5 K a steam temperature is held to: 3 K is permitted over the window.
STABILITY = {"TT-301": 'stability = { value = 3.0, kind = "absolute", unit = "K" }'}

# tag -> (description, unit, uncertainty (value, kind), noise standard deviation in the
# tag's unit, true value in the tag's unit); filled in truth()
TAGS = {}


def truth() -> dict:
    gas = Gas(COMPOSITION)
    lhv = float(gas.inferior_calorific_value("mass", combustion_temperature=288.15))
    water = get_fluid("water")
    h_fw = float(water.h_pT(P_FW, T_FW)[0])
    h_st = float(water.h_pT(P_ST, T_ST)[0])
    q = M_STEAM * (h_st - h_fw)
    W = float(air_humidity_ratio(T_AIR, P_ATM, RH_AIR))
    bl = boiler_losses(
        COMPOSITION,
        heating_value=lhv,
        heating_value_basis="lhv",
        flue_gas_temperature=T_FLUE,
        air_temperature=T_AIR,
        oxygen=O2_DRY,
        carbon_monoxide=CO_DRY,
        air_humidity_ratio=W,
        radiation_loss=RADIATION / 100.0,
        pressure=P_ATM,
    )
    m_fuel = q / (lhv * bl.efficiency)
    fg = flue_gas(COMPOSITION, bl.excess_air, air_humidity_ratio=W, carbon_monoxide=CO_DRY)
    m_air = m_fuel * fg.dry_air
    return dict(
        lhv=lhv,
        h_fw=h_fw,
        h_st=h_st,
        useful_heat=q,
        fuel_flow=m_fuel,
        air_flow=m_air,
        co2_dry=fg.dry["CO2"],
        humidity_ratio=W,
        losses=bl,
    )


def main(out: Path = HERE) -> None:
    """Write the scenario files into ``out`` (default: this folder)."""
    out = Path(out)
    t = truth()
    rng = np.random.default_rng(SEED)
    n = int(HOURS * 3600 / STEP_S) + 1
    times = START + np.arange(n) * np.timedelta64(STEP_S, "s")
    tags = {
        # id: description, unit, uncertainty (95 %), noise sd, true value in unit
        "FT-101": (
            "Feedwater flow (orifice, DP transmitter)",
            "t/h",
            (1.0, "percent_of_reading"),
            0.03,
            M_FW_T := M_STEAM * 3.6,
        ),
        "PT-101": (
            "Feedwater pressure at the economiser inlet",
            "bar",
            (0.1, "absolute"),
            0.02,
            P_FW / 1e5,
        ),
        "TT-101": (
            "Feedwater temperature at the economiser inlet",
            "degC",
            (0.3, "absolute"),
            0.05,
            T_FW - 273.15,
        ),
        "FT-102": (
            "Steam flow (vortex meter)",
            "t/h",
            (1.5, "percent_of_reading"),
            0.04,
            M_STEAM * 3.6,
        ),
        "PT-102": (
            "Steam pressure at the boiler outlet",
            "bar",
            (0.1, "absolute"),
            0.02,
            P_ST / 1e5,
        ),
        "TT-102": (
            "Steam temperature at the boiler outlet",
            "degC",
            (0.5, "absolute"),
            0.15,
            T_ST - 273.15,
        ),
        "FT-201": (
            "Fuel gas mass flow (Coriolis meter)",
            "kg/h",
            (1.0, "percent_of_reading"),
            1.2,
            t["fuel_flow"] * 3600.0,
        ),
        "AT-301": (
            "Flue-gas O2, dry (zirconia analyser after the economiser)",
            "%",
            (0.15, "absolute"),
            0.05,
            O2_DRY * 100.0,
        ),
        "AT-302": (
            "Flue-gas CO2, dry (infrared analyser, same sample line)",
            "%",
            (0.2, "absolute"),
            0.04,
            t["co2_dry"] * 100.0,
        ),
        "AT-303": ("Flue-gas CO, dry", "ppm", (10.0, "absolute"), 4.0, CO_DRY * 1e6),
        "TT-301": (
            "Flue-gas temperature after the economiser (grid average)",
            "degC",
            (2.0, "absolute"),
            0.6,
            T_FLUE - 273.15,
        ),
        "TT-401": (
            "Combustion-air temperature at the fan inlet",
            "degC",
            (0.5, "absolute"),
            0.1,
            T_AIR - 273.15,
        ),
        "MT-401": (
            "Combustion-air relative humidity at the fan inlet",
            "%",
            (3.0, "absolute"),
            0.5,
            RH_AIR * 100.0,
        ),
        "FT-401": (
            "Combustion-air flow, dry air (fan inlet airfoil, humidity-corrected in the DCS)",
            "kg/s",
            (3.0, "percent_of_reading"),
            0.008,
            t["air_flow"],
        ),
    }
    del M_FW_T
    tags_design = dict(tags)  # true readings, before the instruments' offsets
    cols = {}
    for tag, (_, _, (u95, kind), sd, true) in tags.items():
        # each instrument reads off by a fixed error of about half its stated
        # standard uncertainty (drawn once: the systematic part of a real test)
        u_sys = (u95 / 100.0 * true if kind == "percent_of_reading" else u95) / 1.96
        true = true + rng.normal(0.0, 0.5 * u_sys)
        # white noise plus a slow first-order wander of a sixth of its size
        e = rng.normal(0.0, sd, n)
        w = np.zeros(n)
        a = math.exp(-STEP_S / 120.0)
        kick = rng.normal(0.0, sd / 6.0 * math.sqrt(1 - a * a), n)
        for i in range(1, n):
            w[i] = a * w[i - 1] + kick[i]
        cols[tag] = true + e + w
    lines = ["Timestamp," + ",".join(tags), "units," + ",".join(v[1] for v in tags.values())]
    for i in range(n):
        stamp = str(times[i]).replace("T", " ")
        lines.append(stamp + "," + ",".join(f"{cols[tag][i]:.5g}" for tag in tags))
    (out / "dcs.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (out / "plant.toml").write_text(plant_toml(tags_design), encoding="utf-8")
    bl = t["losses"]
    results = {
        "useful_heat": t["useful_heat"],
        "heat_input": t["fuel_flow"] * t["lhv"],
        "boiler_efficiency_direct": bl.efficiency,
        "boiler_efficiency_indirect": bl.efficiency,
        "boiler_efficiency": bl.efficiency,
        "excess_air": bl.excess_air,
        "dry_flue_gas_loss": bl.dry_flue_gas,
        "hydrogen_moisture_loss": bl.hydrogen_moisture,
        "fuel_moisture_loss": bl.fuel_moisture,
        "air_moisture_loss": bl.air_moisture,
        "unburned_co_loss": bl.unburned_co,
        "radiation_loss": bl.radiation,
        "other_losses": bl.other,
    }
    doc = {
        "description": "True values of the invented Quellmoor boiler B-1 test (SI units).",
        "seed": SEED,
        "basis": "lhv",
        "definitions": {
            "boiler_efficiency_direct": "useful_heat / (fuel flow x LHV)",
            "boiler_efficiency_indirect": "1 - sum of the losses (heat-loss method)",
            "useful_heat": "steam flow x (h_steam - h_feedwater)",
        },
        "inputs": {
            "lhv": t["lhv"],
            "fuel_flow": t["fuel_flow"],
            "steam_flow": M_STEAM,
            "air_flow": t["air_flow"],
            "oxygen_dry": O2_DRY,
            "carbon_dioxide_dry": t["co2_dry"],
            "carbon_monoxide_dry": CO_DRY,
            "flue_gas_temperature": T_FLUE,
            "air_temperature": T_AIR,
            "air_relative_humidity": RH_AIR,
            "air_humidity_ratio": t["humidity_ratio"],
        },
        "results": results,
    }
    (out / "truth.json").write_text(json.dumps(doc, indent=2) + "\n", encoding="utf-8")


def _key(name: str) -> str:
    """A TOML key: bare when it can be, else quoted (``"n-butane"``)."""
    return name if name.isidentifier() else f'"{name}"'


def plant_toml(tags: dict) -> str:
    parts = [
        "# Quellmoor creamery, steam boiler B-1: plant description for perftest.",
        "# An invented plant with invented numbers (see README.md beside this file).",
        "# Written by generate.py; edit the generator, not this file.",
        "",
        "[site]",
        'name = "Quellmoor creamery, steam boiler B-1"',
        'timezone = "UTC"',
        "",
    ]
    for tag, (desc, unit, (u, kind), _, _) in tags.items():
        parts += [
            f'[tags."{tag}"]',
            f'description = "{desc}"',
            f'unit = "{unit}"',
            f'uncertainty = {{ value = {u}, kind = "{kind}", level = 0.95 }}',
        ]
        if tag in STABILITY:
            parts.append(STABILITY[tag])
        parts.append("")
    parts += [
        "[fuel]",
        'mass_flow = "FT-201"',
        "# laboratory analysis of a spot sample taken during the test (mole fractions)",
        "composition = { " + ", ".join(f"{_key(k)} = {v}" for k, v in COMPOSITION.items()) + " }",
        'uncertainty = { value = 0.3, kind = "percent", level = 0.95 }',
        "",
        "# ---- water/steam side",
        "[streams.feedwater]",
        'fluid = "water"',
        'phase = "liquid"',
        'mass_flow = "FT-101"',
        'pressure = "PT-101"',
        'temperature = "TT-101"',
        "",
        "[streams.steam]",
        'fluid = "water"',
        'phase = "vapour"',
        'mass_flow = "FT-102"',
        'pressure = "PT-102"',
        'temperature = "TT-102"',
        "",
        "[units.boiler]",
        'type = "boiler"',
        'inlets = ["feedwater"]',
        'outlets = ["steam"]',
        "",
        "# ---- what the test states, and the firing side",
        "[performance]",
        'kind = "boiler"',
        'basis = "lhv"',
        'useful_heat = "boiler.heat"',
        'flue_gas_o2 = "AT-301"',
        'flue_gas_co2 = "AT-302"',
        'flue_gas_oxygen_basis = "dry"',
        'flue_gas_co = "AT-303"',
        'flue_gas_temperature = "TT-301"',
        'air_temperature = "TT-401"',
        'air_relative_humidity = "MT-401"',
        'combustion_air_flow = "FT-401"',
        "# the boiler maker's surface-loss curve at 12.6 t/h",
        f'radiation_loss = {{ value = {RADIATION}, kind = "percent", uncertainty = 0.15 }}',
        "",
        "# ---- pre-test plan: expected readings and their scatter (perftest plan)",
        "[design]",
        'duration = "2h"',
        'interval = "10s"',
        "",
        "[design.tags]",
    ]
    for tag, (_, _, _, sd, true) in tags.items():
        parts.append(
            f'"{tag}" = {{ value = {true:.6g}, scatter = {sd:.3g}, correlation_time = "20s" }}'
        )
    parts += [
        "",
        "[design.allowed]",
        'boiler_efficiency = { value = 1.0, kind = "percent" }',
        "",
    ]
    return "\n".join(parts)


if __name__ == "__main__":
    main()
