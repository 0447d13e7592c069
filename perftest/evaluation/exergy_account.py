"""Exergy account of a reconciled plant: every unit's exergy balance, the Gouy-Stodola
check and the plant closure."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from perftest.errors import PerftestError
from perftest.evaluation import performance as perf


def _exergy_analysis(
    rec,
    fuel_exergy: float,
    net_power: float,
    aux_power: float,
    *,
    supplied: float | None = None,
    products: tuple = (),
    product_label: str = "heat export",
    coolant_is_product: str = "",
):
    """Exergy balance of every unit, Gouy-Stodola check and plant closure.

    Every stream that crosses the plant boundary (one that no unit feeds or no unit
    takes) is counted: condenser coolant as a loss ("cooling water"), the streams
    named in ``products`` (CHP export, return and make-up; a chiller's chilled
    water) as the product ``product_label``, any other as a loss ("other streams crossing the
    boundary", signed).  ``supplied`` is the exergy supplied [W] (default the fuel
    exergy; the power input of a chiller or heat pump, with ``net_power`` 0 and
    ``aux_power`` the power input).  ``coolant_is_product`` names the product that
    the condenser coolant carries (a heat pump's heating water).

    Returns
    -------
    frame, losses, closure, notes, products
        ``products`` maps a product name to its exergy [W] besides the net power.
    """
    notes: list[str] = []
    supplied = fuel_exergy if supplied is None else supplied
    model = getattr(rec, "model", None)
    spec = getattr(model, "spec", None)
    cols = [
        "unit",
        "type",
        "exergy_in",
        "exergy_out",
        "work_in",
        "work_out",
        "destroyed",
        "u_destroyed",
        "gouy_stodola",
        "share",
    ]
    if spec is None:
        return pd.DataFrame(columns=cols), {}, None, notes, {}
    T0 = float(rec.dead_state[0])

    def var(name: str) -> float:
        try:
            v = rec.value(name)
        except PerftestError:
            return 0.0
        return float(v) if math.isfinite(v) else math.nan

    def has(name: str) -> bool:
        try:
            rec.value(name)
            return True
        except PerftestError:
            return False

    rows = []
    coolant_loss = 0.0
    work_in_model = 0.0
    for uid, unit in spec.units.items():
        ins, outs = list(unit.inlets), list(unit.outlets)
        terms: dict = {}
        for s in ins:
            terms[f"{s}.exergy_flow"] = terms.get(f"{s}.exergy_flow", 0.0) + 1.0
        for s in outs:
            terms[f"{s}.exergy_flow"] = terms.get(f"{s}.exergy_flow", 0.0) - 1.0
        e_in = sum(var(f"{s}.exergy_flow") for s in ins)
        e_out = sum(var(f"{s}.exergy_flow") for s in outs)
        w_in = w_out = 0.0
        gs = math.nan
        t = unit.type
        if t in ("turbine",):
            w_out = var(f"{uid}.power")
            terms[f"{uid}.power"] = -1.0
        elif t in ("pump",):
            w_in = var(f"{uid}.power")
            terms[f"{uid}.power"] = 1.0
            work_in_model += w_in
        elif t == "generator":
            w_in = sum(var(f"{tid}.power") for tid in unit.shaft)
            w_out = var(f"{uid}.power")
            for tid in unit.shaft:
                terms[f"{tid}.power"] = 1.0
            terms[f"{uid}.power"] = -1.0
            # Losses leave as heat at about ambient temperature: all destroyed.
            gs = w_in - w_out
        elif t == "boiler":
            # Fuel exergy in; what is not absorbed by the water is destroyed in
            # combustion and heat transfer or lost with the flue gas.
            w_in = fuel_exergy
        if t == "condenser" and unit.ports.get("coolant_outlet"):
            ci, co = unit.ports["coolant_inlet"][0], unit.ports["coolant_outlet"][0]
            coolant_loss += var(f"{co}.exergy_flow") - var(f"{ci}.exergy_flow")
        destroyed = e_in + w_in - e_out - w_out
        if t not in ("boiler", "generator"):
            # Gouy-Stodola: T0 * entropy generation of the adiabatic unit.
            s_gen = sum(var(f"{s}.mass_flow") * var(f"{s}.entropy") for s in outs) - sum(
                var(f"{s}.mass_flow") * var(f"{s}.entropy") for s in ins
            )
            q_loss = var(f"{uid}.heat_loss") if has(f"{uid}.heat_loss") else 0.0
            gs = T0 * s_gen + (q_loss if math.isfinite(q_loss) else 0.0)
        heat = math.nan
        if t == "condenser" and unit.ports.get("coolant_outlet"):
            heat = var(f"{co}.mass_flow") * (var(f"{co}.enthalpy") - var(f"{ci}.enthalpy"))
        elif t in ("condenser", "boiler") and has(f"{uid}.heat"):
            heat = var(f"{uid}.heat")
        u_d = math.nan
        if t != "boiler":
            try:
                names = list(terms)
                a = np.array([terms[n] for n in names])
                c = np.asarray(rec.covariance(names), dtype=float)
                u_d = float(np.sqrt(max(a @ c @ a, 0.0)))
            except PerftestError:
                pass
        rows.append(
            dict(
                unit=uid,
                type=unit.declared_type,
                exergy_in=e_in,
                exergy_out=e_out,
                work_in=w_in,
                work_out=w_out,
                destroyed=destroyed,
                u_destroyed=u_d,
                gouy_stodola=gs,
                heat=heat,
            )
        )
    frame = pd.DataFrame(rows, columns=[*cols[:-1], "heat"])
    frame["share"] = frame["destroyed"] / supplied if math.isfinite(supplied) else np.nan
    frame = frame[[*cols, "heat"]]

    # Streams crossing the boundary besides the condenser coolant.
    fed = {s for u in spec.units.values() for s in u.outlets}
    taken = {s for u in spec.units.values() for s in u.inlets}
    coolant = {
        s
        for u in spec.units.values()
        if u.type == "condenser"
        for key in ("coolant_inlet", "coolant_outlet")
        for s in u.ports.get(key, ())
    }
    product_streams = set(products)
    product = other = 0.0
    for sid in spec.streams:
        if sid in coolant or (sid in fed and sid in taken):
            continue
        e = var(f"{sid}.exergy_flow")
        sign = 1.0 if sid in fed else -1.0  # leaves the plant (+) or enters it (-)
        if sid in product_streams:
            product += sign * e
        else:
            other += sign * e

    losses = {}
    out_products = {}
    if products:
        out_products[product_label] = product
    if coolant_loss:
        if coolant_is_product:
            out_products[coolant_is_product] = coolant_loss
        else:
            losses["cooling water"] = coolant_loss
        # The condenser's destroyed column counts the coolant's exergy gain as an
        # output; it leaves the plant, so it is a loss (or a heat pump's product).
    if other:
        losses["other streams crossing the boundary"] = other
    other_aux = aux_power - work_in_model
    if math.isfinite(other_aux):
        losses["auxiliaries outside the model"] = other_aux
    closure = None
    if math.isfinite(supplied) and supplied > 0:
        closure = perf.gouy_stodola_closure(
            frame["destroyed"].to_numpy(float),
            list(losses.values()),
            exergy_in=supplied,
            exergy_out=net_power + sum(out_products.values()),
            rtol=1e-3,  # reconciled balances close to the solver tolerance (~1e-6)
        )
        unknown = [str(u) for u, d in zip(frame["unit"], frame["destroyed"], strict=True)
                   if not math.isfinite(d)]  # fmt: skip
        if unknown:
            notes.append(
                "Plant exergy balance not checked: the exergy destroyed in "
                f"{', '.join(unknown)} is unknown (their streams are not observable: no "
                "measurement fixes them). Add a measurement on that loop to close it."
            )
        elif not closure.closed:
            notes.append(
                f"Plant exergy balance does not close: imbalance "
                f"{closure.relative_imbalance * 100:.2f} % of the exergy supplied."
            )
    return frame, losses, closure, notes, out_products
