"""Heat-balance closure of the raw measurements of a chiller or heat pump.

Chiller and heat-pump tests report how well the measured heat flows close before
any adjustment: cooling capacity plus power input minus heat rejected, as a share
of the heat rejected (common practice of chiller test codes, no source).  A large
closure error says an instrument is off before the reconciliation hides it.

Each heat flow named in ``[performance]`` is recomputed from the measured means
(not the reconciled values): a tag is taken as measured; a unit's heat
(``"<unit>.heat"``) from the water side that has a measured flow, each stream's
enthalpy from its measured pressure and temperature (a fixed value where the plant
file fixes one; the reconciled value where the variable is not measured, which the
notes say).
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PerftestError

__all__ = ["raw_heat_balance"]


def _side(unit):
    """(inlets, outlets, sign) of the side whose heat the unit's ``heat`` names."""
    p = unit.ports
    if unit.type == "heat_exchanger":
        return [p["hot_inlet"], p["hot_outlet"], p["cold_inlet"], p["cold_outlet"]]
    if unit.type == "condenser" and p.get("coolant_inlet"):
        return [None, None, p["coolant_inlet"], p["coolant_outlet"]]
    return [p.get("inlets", ()), p.get("outlets", ()), None, None]


class _Raw:
    """Raw (measured) values of model variables, as functions of the tag vector."""

    def __init__(self, rec):
        self.rec = rec
        self.model = rec.model
        self.meas = rec.measurements
        self.tags: list[str] = []
        self.notes: list[str] = []

    def source(self, name):
        return self.model.sources.get(name)

    def measured(self, name) -> bool:
        src = self.source(name)
        return src is not None and src.kind == "measured" and src.tag in tuple(self.meas.tags)

    def var(self, name):
        """Closure giving the raw value of ``name`` from a {tag: value} mapping."""
        src = self.source(name)
        if self.measured(name):
            if src.tag not in self.tags:
                self.tags.append(src.tag)
            return lambda t, tag=src.tag: t[tag]
        if src is not None and src.kind == "fixed":
            return lambda t, v=float(src.value): v
        v = float(self.rec.value(name))
        self.notes.append(name)
        return lambda t: v

    def enthalpy(self, stream: str):
        if self.measured(f"{stream}.enthalpy"):
            return self.var(f"{stream}.enthalpy")
        from perftest.thermo import get_fluid

        fluid = get_fluid(self.model.spec.streams[stream].fluid)
        phase = self.model.spec.streams[stream].phase
        p = self.var(f"{stream}.pressure")
        T = self.var(f"{stream}.temperature")
        return lambda t: float(fluid.enthalpy_pT(p(t), T(t), phase, where=stream))

    def mass_flow(self, streams):
        for s in streams:
            if self.measured(f"{s}.mass_flow"):
                return self.var(f"{s}.mass_flow")
        return None

    def heat(self, ref: str):
        """Raw value of a heat reference (a tag or ``"<unit>.heat"``)."""
        if ref in tuple(self.meas.tags):
            if ref not in self.tags:
                self.tags.append(ref)
            return lambda t: t[ref]
        unit_id, _, var = ref.rpartition(".")
        spec = self.model.spec
        if var != "heat" or unit_id not in spec.units:
            return self.var(ref)
        unit = spec.units[unit_id]
        hot_in, hot_out, cold_in, cold_out = _side(unit)
        for ins, outs, sign in ((cold_in, cold_out, 1.0), (hot_in, hot_out, -1.0)):
            if not ins:
                continue
            ins, outs = list(ins), list(outs)
            m = self.mass_flow(ins + outs)
            if m is None or len(ins) != 1 or len(outs) != 1:
                continue
            h_in, h_out = self.enthalpy(ins[0]), self.enthalpy(outs[0])
            return lambda t, m=m, a=h_in, b=h_out, sg=sign: sg * m(t) * (b(t) - a(t))
        if unit.type == "boiler" and hot_in:
            ins, outs = list(hot_in), list(hot_out)
            m = self.mass_flow(ins + outs)
            if m is not None and len(ins) == 1 and len(outs) == 1:
                h_in, h_out = self.enthalpy(ins[0]), self.enthalpy(outs[0])
                return lambda t, m=m, a=h_in, b=h_out: m(t) * (b(t) - a(t))
        raise PerftestError(
            f"The heat of unit '{unit_id}' cannot be computed from measurements: no side "
            "of it has a measured mass flow."
        )


def raw_heat_balance(rec, refs: dict, level: float = 0.95):
    """Closure of capacity + power - heat rejected on the raw measurements.

    Parameters
    ----------
    rec : perftest.balance.plant.PlantReconciliation
    refs : dict
        ``{"cooling": [...], "power_input": [...], "heat_rejected": [...]}``: the
        ``[performance]`` references (tags or model variables; a list is a sum).
    level : float

    Returns
    -------
    dict
        ``value`` (fraction of the heat rejected), ``u``, ``U95``, ``dof``,
        ``terms`` [W] and ``notes``; None when the reconciliation has no measurements or model.
    """
    from perftest.evaluation.propagation import propagate

    if getattr(rec, "model", None) is None or getattr(rec, "measurements", None) is None:
        return None
    raw = _Raw(rec)
    load = [raw.heat(r) for r in refs["cooling"]]
    power = [raw.heat(r) for r in refs["power_input"]]
    rej = [raw.heat(r) for r in refs["heat_rejected"]]
    tags = list(raw.tags)
    meas = rec.measurements
    idx = [tuple(meas.tags).index(t) for t in tags]
    x = np.asarray(meas.value, dtype=float)[idx]
    cov = np.asarray(meas.cov, dtype=float)[np.ix_(idx, idx)]

    def terms(v):
        t = dict(zip(tags, v, strict=True))
        q = sum(f(t) for f in load)
        p = sum(f(t) for f in power)
        r = sum(f(t) for f in rej)
        return q, p, r

    def closure(v):
        q, p, r = terms(v)
        return np.array([(q + p - r) / r])

    dof = np.asarray(meas.dof, dtype=float)[idx]
    prop = propagate(closure, x, cov, names=tags, output_names=["closure"], level=level, dof=dof)
    q, p, r = terms(x)
    notes = []
    if raw.notes:
        notes.append(
            "Heat-balance closure: not measured, taken at their reconciled values: "
            + ", ".join(dict.fromkeys(raw.notes))
            + "."
        )
    value = float(prop.value[0])
    return dict(
        value=value,
        u=float(prop.u[0]),
        U95=float(prop.U[0]),
        dof=float(prop.dof[0]),
        terms={"cooling": q, "power_input": p, "heat_rejected": r},
        notes=notes,
    )
