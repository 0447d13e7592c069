"""Results of each plant kind: power, CHP, refrigeration and heat pump.

:func:`gather` says which reconciled values a kind needs (the inputs of the
uncertainty propagation); :func:`outputs` computes every result of the kind from
those inputs.  Both work on arrays whose last axis is the Monte Carlo trial (or on
scalars), so one function serves the linear propagation and the Monte Carlo check.

Definitions (``[performance]`` keys in quotes; SI):

* power: :math:`P_n = P_g - P_a`, :math:`\\eta_I = P_n/\\dot Q_F`,
  :math:`\\eta_C = 1 - T_{sink}/T_{source}`, ``cycle_efficiency``
  :math:`\\eta_{cyc} = P_g/\\dot Q_{cyc}` (gross power over the heat absorbed by the
  working fluid) and :math:`\\eta_{II} = \\eta_{cyc}/\\eta_C`: the cycle compared with a
  reversible engine between the same source and sink ([1]_ Sect. 6-10 and 8-8).
  Thermodynamic mean temperatures of heat addition and rejection
  :math:`\\bar T = \\Delta H / \\Delta S` along the boilers and condensers ([2]_
  Sect. 9-5); :math:`\\eta_{C,m} = 1 - \\bar T_{out}/\\bar T_{in}` splits the gap to
  Carnot: :math:`\\eta_C - \\eta_{C,m}` is what the temperature spread of heat transfer
  costs, :math:`\\eta_{C,m} - \\eta_{cyc}` what the cycle's own irreversibilities cost.
* chp: exported heat :math:`\\dot Q_X = \\sum_{exp}\\dot m h - \\sum_{ret}\\dot m h -
  (\\sum_{exp}\\dot m - \\sum_{ret}\\dot m) h_{mk}`, fuel utilisation
  :math:`(P_n + \\dot Q_X)/\\dot Q_F`, power-to-heat ratio :math:`P_n/\\dot Q_X`,
  exergetic efficiency :math:`(P_n + \\dot E_X)/\\dot E_F` with :math:`\\dot E_X` the
  same sums over flow exergy.
* refrigeration: :math:`COP = \\dot Q_c/P`, :math:`COP_C = T_c/(T_h - T_c)`,
  :math:`\\eta_{II} = COP/COP_C`, exergy of the cooling
  :math:`\\dot Q_c (T_0/T_c - 1)` over the power input ([1]_ Sect. 6-7, 8-4).
* heat pump: :math:`COP = \\dot Q_h/P`, :math:`COP_C = T_h/(T_h - T_c)`,
  exergy of the heating :math:`\\dot Q_h (1 - T_0/T_h)` over the power input.

References
----------
.. [1] Y. A. Cengel and M. A. Boles, *Thermodynamics: An Engineering Approach*,
   McGraw-Hill (Carnot heat engine, refrigerator and heat pump; second-law
   efficiency; exergy of heat).
.. [2] A. Bejan, *Advanced Engineering Thermodynamics*, Wiley (thermodynamic mean
   temperature of heat addition; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from perftest.errors import PerftestError
from perftest.evaluation import performance as perf
from perftest.evaluation.plant_keys import STREAM_KEYS, _plant_error, refs_of

__all__ = [
    "RESULT_UNITS",
    "DESCRIPTIONS",
    "KIND_DESCRIPTIONS",
    "describe",
    "gather",
    "outputs",
    "Needs",
]

#: SI unit of every result name (summary.json "unit").
RESULT_UNITS = {
    "gross_power": "W",
    "auxiliary_power": "W",
    "net_power": "W",
    "heat_input": "W",
    "fuel_exergy": "W",
    "first_law_efficiency": "1",
    "gross_efficiency": "1",
    "heat_rate": "J/J",
    "gross_heat_rate": "J/J",
    "source_temperature": "K",
    "sink_temperature": "K",
    "carnot_efficiency": "1",
    "curzon_ahlborn_efficiency": "1",
    "cycle_heat": "W",
    "cycle_efficiency": "1",
    "second_law_efficiency": "1",
    "exergetic_efficiency": "1",
    "heat_addition_mean_temperature": "K",
    "heat_rejection_mean_temperature": "K",
    "mean_temperature_carnot_efficiency": "1",
    "carnot_gap_heat_transfer": "1",
    "carnot_gap_irreversibility": "1",
    "heat_export": "W",
    "heat_export_exergy": "W",
    "fuel_utilisation": "1",
    "power_to_heat_ratio": "1",
    "cooling_capacity": "W",
    "heating_capacity": "W",
    "power_input": "W",
    "heat_rejected": "W",
    "cop": "1",
    "carnot_cop": "1",
    "cold_temperature": "K",
    "hot_temperature": "K",
    "cooling_exergy": "W",
    "heating_exergy": "W",
    "heat_balance_closure": "1",
    "useful_heat": "W",
    "boiler_efficiency_direct": "1",
}

#: Short descriptions shown in reports.
DESCRIPTIONS = {
    "gross_power": "Generator output",
    "auxiliary_power": "Auxiliary power",
    "net_power": "Net power (gross - auxiliary)",
    "heat_input": "Fuel heat input",
    "fuel_exergy": "Fuel exergy input",
    "first_law_efficiency": "First-law efficiency (net)",
    "gross_efficiency": "First-law efficiency (gross)",
    "heat_rate": "Net heat rate",
    "gross_heat_rate": "Gross heat rate",
    "source_temperature": "Heat-source temperature",
    "sink_temperature": "Heat-sink temperature",
    "carnot_efficiency": "Carnot efficiency (bound)",
    "curzon_ahlborn_efficiency": "Curzon-Ahlborn efficiency",
    "cycle_heat": "Heat absorbed by the working fluid",
    "cycle_efficiency": "Cycle efficiency (gross power / heat absorbed)",
    "second_law_efficiency": "Second-law efficiency (cycle / Carnot)",
    "exergetic_efficiency": "Exergetic efficiency (net power / fuel exergy)",
    "heat_addition_mean_temperature": "Mean temperature of heat addition (dH/dS)",
    "heat_rejection_mean_temperature": "Mean temperature of heat rejection (dH/dS)",
    "mean_temperature_carnot_efficiency": "Carnot efficiency between the mean temperatures",
    "carnot_gap_heat_transfer": "Gap to Carnot from the heat-transfer temperature spread",
    "carnot_gap_irreversibility": "Gap to Carnot from the cycle's irreversibilities",
    "heat_export": "Exported heat (export - return - make-up)",
    "heat_export_exergy": "Exergy of the exported heat",
    "fuel_utilisation": "Fuel utilisation ((net power + heat export) / heat input)",
    "power_to_heat_ratio": "Power-to-heat ratio (net power / heat export)",
    "cooling_capacity": "Cooling capacity",
    "heating_capacity": "Heating capacity",
    "power_input": "Power input",
    "heat_rejected": "Heat rejected",
    "cop": "Coefficient of performance",
    "carnot_cop": "Carnot COP (bound)",
    "cold_temperature": "Cold-side temperature",
    "hot_temperature": "Hot-side temperature",
    "cooling_exergy": "Exergy of the cooling",
    "heating_exergy": "Exergy of the heating",
    "heat_balance_closure": "Heat-balance closure of the raw measurements",
    "useful_heat": "Heat taken up by water and steam",
    "boiler_efficiency_direct": "Boiler efficiency, input-output method",
}

#: Descriptions that differ by plant kind (the same name, another definition).
KIND_DESCRIPTIONS = {
    "chp": {
        "exergetic_efficiency": "Exergetic efficiency ((net power + exergy of the exported "
        "heat) / fuel exergy)",
    },
    "refrigeration": {
        "second_law_efficiency": "Second-law efficiency (COP / Carnot COP)",
        "exergetic_efficiency": "Exergetic efficiency (exergy of the cooling / power input)",
    },
    "heat_pump": {
        "second_law_efficiency": "Second-law efficiency (COP / Carnot COP)",
        "exergetic_efficiency": "Exergetic efficiency (exergy of the heating / power input)",
    },
}


def describe(name: str, kind: str = "power") -> str:
    """The report description of result ``name`` for a plant of ``kind``."""
    base = name.removeprefix("corrected_")
    text = KIND_DESCRIPTIONS.get(kind, {}).get(base) or DESCRIPTIONS.get(base, base)
    if name.startswith("corrected_"):
        return f"{text}, corrected to reference conditions"
    return text


# Results that use the fuel's heating value, and so state its basis.
HEATING_VALUE_RESULTS = (
    "heat_input",
    "fuel_exergy",
    "first_law_efficiency",
    "gross_efficiency",
    "heat_rate",
    "gross_heat_rate",
    "exergetic_efficiency",
    "fuel_utilisation",
    "boiler_efficiency_direct",
)


@dataclass
class Needs:
    """What a kind's results need from the reconciliation.

    ``refs`` maps a role to the variable names it sums; ``boilers`` and
    ``condensers`` are ``(inlets, outlets)`` stream lists of the working fluid for
    the mean temperatures; ``export`` the CHP streams.
    """

    kind: str
    refs: dict = field(default_factory=dict)
    boilers: list = field(default_factory=list)
    condensers: list = field(default_factory=list)
    export: dict = field(default_factory=dict)
    T0: float = math.nan
    notes: list = field(default_factory=list)
    fired: bool = False  # the model has a firing side (perftest.plant.combustion)

    def names(self) -> list[str]:
        """Every reconciled variable the results use, each once."""
        out: list[str] = []
        for ns in self.refs.values():
            out += ns
        for ins, outs in (*self.boilers, *self.condensers):
            for s in (*ins, *outs):
                out += [f"{s}.mass_flow", f"{s}.enthalpy", f"{s}.entropy"]
        for key in STREAM_KEYS:
            for s in self.export.get(key, ()):
                out += [f"{s}.mass_flow", f"{s}.enthalpy", f"{s}.exergy"]
        return list(dict.fromkeys(out))


def _spec(rec):
    return getattr(getattr(rec, "model", None), "spec", None)


def _observable(value, name: str) -> bool:
    try:
        return math.isfinite(value(name))
    except PerftestError:
        return False


def gather(plant, table: dict, rec, *, value=None) -> Needs:
    """The reconciled variables each result of the plant's kind needs.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
    table : dict
        The checked ``[performance]`` table.
    rec : perftest.balance.plant.PlantReconciliation
    value : callable, optional
        ``value(name)`` used instead of ``rec.value`` (a memo of its values).

    Returns
    -------
    Needs
    """
    value = rec.value if value is None else value
    kind = table.get("kind", "power")
    needs = Needs(kind=kind, T0=float(rec.dead_state[0]))
    needs.fired = getattr(getattr(rec, "model", None), "combustion", None) is not None
    spec = _spec(rec)
    if kind == "boiler":
        needs.refs["useful_heat"] = refs_of(table, "useful_heat")
        return needs
    t0_tag = getattr(getattr(plant, "site", None), "dead_state_temperature_tag", None)
    if kind in ("refrigeration", "heat_pump") and t0_tag and _observable(value, t0_tag):
        # The exergy of the cooling or heating depends on T0 as much as on the
        # load: a measured T0 enters the propagation like any other input.
        needs.refs["dead_state_temperature"] = [t0_tag]
    if kind in ("power", "chp"):
        needs.refs["gross_power"] = refs_of(table, "gross_power")
        if "auxiliary_power" in table:
            needs.refs["auxiliary_power"] = refs_of(table, "auxiliary_power")
        if table["heat_input"] != "fuel":
            needs.refs["heat_input"] = refs_of(table, "heat_input")
        needs.refs["source_temperature"] = refs_of(table, "source_temperature")
        needs.refs["sink_temperature"] = refs_of(table, "sink_temperature")
        boilers = [
            (uid, u)
            for uid, u in (spec.units.items() if spec is not None else ())
            if u.type == "boiler"
        ]
        if "cycle_heat" in table:
            needs.refs["cycle_heat"] = refs_of(table, "cycle_heat")
        elif boilers:
            needs.refs["cycle_heat"] = [f"{uid}.heat" for uid, _ in boilers]
        else:
            needs.notes.append(
                "No cycle_heat in [performance] and no boiler or heater unit in the model: "
                "cycle_efficiency and second_law_efficiency are not computed."
            )
        condensers = [
            u for u in (spec.units.values() if spec is not None else ()) if u.type == "condenser"
        ]
        if boilers and condensers:
            needs.boilers = [(u.ports["inlets"], u.ports["outlets"]) for _, u in boilers]
            needs.condensers = [(u.ports["inlets"], u.ports["outlets"]) for u in condensers]
            for ins, outs in (*needs.boilers, *needs.condensers):
                if not all(
                    _observable(value, f"{s}.{v}")
                    for s in (*ins, *outs)
                    for v in ("mass_flow", "enthalpy")
                ):
                    needs.notes.append(
                        "Mean temperatures of heat addition and rejection not computed: a "
                        "boiler or condenser stream is not observable."
                    )
                    needs.boilers, needs.condensers = [], []
                    break
        if kind == "chp":
            for key in STREAM_KEYS:
                ids = refs_of(table, key)
                for s in ids:
                    if spec is not None and s not in spec.streams:
                        raise _plant_error(
                            plant,
                            f"[performance] {key} = {s!r} is not a stream of the plant "
                            f"model ({', '.join(spec.streams)}).",
                            "performance",
                            key,
                        )
                needs.export[key] = ids
            if len(needs.export["makeup"]) != 1:
                raise _plant_error(
                    plant,
                    "[performance] makeup must name one stream (the water that replaces "
                    f"what is not returned). Got {table['makeup']!r}.",
                    "performance",
                    "makeup",
                )
    else:
        needs.refs["power_input"] = refs_of(table, "power_input")
        load = "cooling" if kind == "refrigeration" else "heating"
        needs.refs[load] = refs_of(table, load)
        needs.refs["cold_temperature"] = refs_of(table, "cold_temperature")
        needs.refs["hot_temperature"] = refs_of(table, "hot_temperature")
        if "heat_rejected" in table:
            needs.refs["heat_rejected"] = refs_of(table, "heat_rejected")
    return needs


def output_names(needs: Needs, has_fuel: bool) -> list[str]:
    """Result names of a kind, in report order."""
    kind = needs.kind
    if kind == "boiler":
        # with a flue-gas analysis the three efficiencies come from
        # perftest.evaluation.boiler; without, the input-output one from the balances
        return ["useful_heat", "heat_input"] + ([] if needs.fired else ["boiler_efficiency_direct"])
    if kind in ("power", "chp"):
        out = ["gross_power", "auxiliary_power", "net_power", "heat_input"]
        if has_fuel:
            out.append("fuel_exergy")
        out += [
            "first_law_efficiency",
            "gross_efficiency",
            "heat_rate",
            "gross_heat_rate",
            "source_temperature",
            "sink_temperature",
            "carnot_efficiency",
            "curzon_ahlborn_efficiency",
        ]
        if "cycle_heat" in needs.refs:
            out += ["cycle_heat", "cycle_efficiency", "second_law_efficiency"]
            if needs.boilers:
                out += [
                    "heat_addition_mean_temperature",
                    "heat_rejection_mean_temperature",
                    "mean_temperature_carnot_efficiency",
                    "carnot_gap_heat_transfer",
                    "carnot_gap_irreversibility",
                ]
        if kind == "chp":
            out += ["heat_export", "heat_export_exergy", "fuel_utilisation", "power_to_heat_ratio"]
        if has_fuel:
            out.append("exergetic_efficiency")
        return out
    load = "cooling" if kind == "refrigeration" else "heating"
    out = [
        f"{load}_capacity",
        "power_input",
        "cop",
        "cold_temperature",
        "hot_temperature",
        "carnot_cop",
        "second_law_efficiency",
        f"{load}_exergy",
        "exergetic_efficiency",
    ]
    if "heat_rejected" in needs.refs:
        out.append("heat_rejected")
    return out


def _flows(val, streams, var: str):
    """Sum of mass_flow * var, and of mass_flow, over streams."""
    total = 0.0
    mass = 0.0
    for s in streams:
        m = val(f"{s}.mass_flow")
        total = total + m * val(f"{s}.{var}")
        mass = mass + m
    return total, mass


def _enthalpy_entropy_flows(val, streams):
    """Sums of mass_flow * enthalpy and of mass_flow * entropy over streams (the
    sums of :func:`_flows`, term by term in the same order)."""
    h_total = 0.0
    s_total = 0.0
    for s in streams:
        m = val(f"{s}.mass_flow")
        h_total = h_total + m * val(f"{s}.enthalpy")
        s_total = s_total + m * val(f"{s}.entropy")
    return h_total, s_total


def outputs(needs: Needs, val, fuel: dict | None) -> dict:
    """Every result of the kind from the inputs.

    Parameters
    ----------
    needs : Needs
    val : callable
        ``val(name)`` gives the value (scalar or array) of a reconciled variable or of
        ``"fuel.lhv"``/``"fuel.hhv"`` and ``"fuel_flow"`` refs.
    fuel : dict or None
        The fuel basis (``ratio``: fuel exergy per unit of the stated heating value).

    Returns
    -------
    dict
        Result name -> value [SI].
    """

    def S(role):
        names = needs.refs[role]
        total = val(names[0])
        for n in names[1:]:
            total = total + val(n)
        return total

    kind = needs.kind
    out: dict = {}
    if kind == "boiler":
        q_u = S("useful_heat")
        q_f = val(fuel["flow_name"]) * val(fuel["hv_name"])
        out.update(useful_heat=q_u, heat_input=q_f)
        if not needs.fired:
            out["boiler_efficiency_direct"] = q_u / q_f
        return out
    if kind in ("power", "chp"):
        g = S("gross_power")
        a = S("auxiliary_power") if "auxiliary_power" in needs.refs else 0.0 * g
        net = g - a
        if fuel is not None:
            q = val(fuel["flow_name"]) * val(fuel["hv_name"])
            ex = q * fuel["ratio"]
        else:
            q = S("heat_input")
        ts = S("source_temperature")
        tk = S("sink_temperature")
        carnot = 1.0 - tk / ts
        out.update(
            gross_power=g,
            auxiliary_power=a,
            net_power=net,
            heat_input=q,
            first_law_efficiency=net / q,
            gross_efficiency=g / q,
            heat_rate=q / net,
            gross_heat_rate=q / g,
            source_temperature=ts,
            sink_temperature=tk,
            carnot_efficiency=carnot,
            curzon_ahlborn_efficiency=1.0 - np.sqrt(tk / ts),
        )
        if fuel is not None:
            out["fuel_exergy"] = ex
        if "cycle_heat" in needs.refs:
            qc = S("cycle_heat")
            eta_c = g / qc
            out.update(cycle_heat=qc, cycle_efficiency=eta_c, second_law_efficiency=eta_c / carnot)
            if needs.boilers:
                dh_in = ds_in = dh_out = ds_out = 0.0
                for ins, outs in needs.boilers:
                    h_o, s_o = _enthalpy_entropy_flows(val, outs)
                    h_i, s_i = _enthalpy_entropy_flows(val, ins)
                    dh_in, ds_in = dh_in + h_o - h_i, ds_in + s_o - s_i
                for ins, outs in needs.condensers:
                    h_o, s_o = _enthalpy_entropy_flows(val, outs)
                    h_i, s_i = _enthalpy_entropy_flows(val, ins)
                    dh_out, ds_out = dh_out + h_i - h_o, ds_out + s_i - s_o
                tm_in = dh_in / ds_in
                tm_out = dh_out / ds_out
                eta_m = 1.0 - tm_out / tm_in
                out.update(
                    heat_addition_mean_temperature=tm_in,
                    heat_rejection_mean_temperature=tm_out,
                    mean_temperature_carnot_efficiency=eta_m,
                    carnot_gap_heat_transfer=carnot - eta_m,
                    carnot_gap_irreversibility=eta_m - eta_c,
                )
        if kind == "chp":
            exp, ret, mk = (needs.export.get(k, []) for k in STREAM_KEYS)
            h_x, m_x = _flows(val, exp, "enthalpy")
            h_r, m_r = _flows(val, ret, "enthalpy")
            e_x, _ = _flows(val, exp, "exergy")
            e_r, _ = _flows(val, ret, "exergy")
            m_mk = m_x - m_r
            qx = h_x - h_r - m_mk * val(f"{mk[0]}.enthalpy")
            ex_x = e_x - e_r - m_mk * val(f"{mk[0]}.exergy")
            out.update(
                heat_export=qx,
                heat_export_exergy=ex_x,
                fuel_utilisation=(net + qx) / q,
                power_to_heat_ratio=net / qx,
            )
            if fuel is not None:
                out["exergetic_efficiency"] = (net + ex_x) / ex
        elif fuel is not None:
            out["exergetic_efficiency"] = net / ex
        return out
    p = S("power_input")
    tc = S("cold_temperature")
    th = S("hot_temperature")
    # the dead state as measured, with its uncertainty, where a tag gives it
    T0 = S("dead_state_temperature") if "dead_state_temperature" in needs.refs else needs.T0
    if kind == "refrigeration":
        qload = S("cooling")
        carnot_cop = tc / (th - tc)
        ex_load = qload * (T0 / tc - 1.0)
        load = "cooling"
    else:
        qload = S("heating")
        carnot_cop = th / (th - tc)
        ex_load = qload * (1.0 - T0 / th)
        load = "heating"
    cop = qload / p
    out.update(
        {
            f"{load}_capacity": qload,
            "power_input": p,
            "cop": cop,
            "cold_temperature": tc,
            "hot_temperature": th,
            "carnot_cop": carnot_cop,
            "second_law_efficiency": cop / carnot_cop,
            f"{load}_exergy": ex_load,
            "exergetic_efficiency": ex_load / p,
        }
    )
    if "heat_rejected" in needs.refs:
        out["heat_rejected"] = S("heat_rejected")
    return out


def cross_check(kind: str, v: dict, T0: float) -> None:
    """The closed-form arithmetic of :func:`outputs` must match
    :mod:`perftest.evaluation.performance` (one function per published relation)."""
    pairs = []
    if kind == "boiler":
        return  # ratios of two sums; checked against a hand calculation in the tests
    if kind in ("power", "chp"):
        pairs += [
            (v["first_law_efficiency"], perf.first_law_efficiency(v["net_power"], v["heat_input"])),
            (v["heat_rate"], perf.heat_rate(v["heat_input"], v["net_power"])),
            (
                v["carnot_efficiency"],
                perf.carnot_efficiency(v["source_temperature"], v["sink_temperature"]),
            ),
            (
                v["curzon_ahlborn_efficiency"],
                perf.curzon_ahlborn_efficiency(v["source_temperature"], v["sink_temperature"]),
            ),
        ]
        if "cycle_efficiency" in v:
            pairs.append(
                (
                    v["second_law_efficiency"],
                    perf.second_law_efficiency(v["cycle_efficiency"], v["carnot_efficiency"]),
                )
            )
    else:
        tc, th = v["cold_temperature"], v["hot_temperature"]
        if kind == "refrigeration":
            pairs += [
                (v["carnot_cop"], perf.carnot_cop_refrigeration(tc, th)),
                (v["cooling_exergy"], -perf.heat_exergy(v["cooling_capacity"], tc, T0)),
            ]
        else:
            pairs += [
                (v["carnot_cop"], perf.carnot_cop_heat_pump(tc, th)),
                (v["heating_exergy"], perf.heat_exergy(v["heating_capacity"], th, T0)),
            ]
        pairs.append(
            (v["second_law_efficiency"], perf.cop_second_law_efficiency(v["cop"], v["carnot_cop"]))
        )
    for a, b in pairs:
        if not math.isclose(float(a), float(b), rel_tol=1e-12, abs_tol=1e-9):
            raise PerftestError(  # pragma: no cover - an internal inconsistency
                f"Internal check failed: {float(a)!r} != {float(b)!r}."
            )
