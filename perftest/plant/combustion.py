"""The combustion side of a boiler as constraints of the plant model.

When ``[performance]`` names a flue-gas analysis (``flue_gas_o2`` or ``flue_gas_co2``)
the plant model gains the variables of the firing side and up to three rows that tie
them to the water/steam side:

* ``combustion:energy`` — the boiler energy balance written with the heat-loss method,

  .. math::
      \\dot m_f\\, k\\, H\\, \\eta_{HL}(O_2, CO, T_g, T_a, \\varphi) - \\dot Q_{abs}
      - \\dot Q_{useful} = 0,

  with :math:`\\eta_{HL} = 1 - \\sum L` the indirect efficiency of
  :func:`perftest.thermo.heat_loss.boiler_losses` (given fractional losses included),
  :math:`\\dot Q_{abs}` the losses stated in W, :math:`k` the kg of fuel per unit of
  the fuel flow tag (1 for a mass flow; the metered density for a volume flow) and
  :math:`\\dot Q_{useful}` the heat taken up by the water and steam (model variables
  or tags).  The input-output efficiency :math:`\\dot Q_{useful}/(\\dot m_f k H)` is
  then equal to the heat-loss efficiency at the reconciled values;
* ``combustion:air`` (with ``combustion_air_flow``) — the metered combustion air
  equals the air the flue-gas analysis implies,
  :math:`\\dot m_a - \\dot m_f k\\, A(O_2, \\ldots) = 0` with :math:`A` the dry air per
  kg of fuel (the tag is the dry-air flow: the metered flow less its water, as a DCS
  computes it from the air's humidity);
* ``combustion:co2`` (with both ``flue_gas_o2`` and ``flue_gas_co2``) — the two
  analysers agree: :math:`x_{CO_2} - x_{CO_2}(O_2, \\ldots) = 0`.

The fuel meter then takes part in two rows (energy and air) and the oxygen analyser
in all three, with different weights: a wrong fuel meter and a wrong O2 analyser
leave different residual patterns, which the measurement test tells apart.

The loss functions are smooth closed forms; their derivatives are taken by forward
differences (steps below), so the Jacobian entries carry a relative error of the
order of the step, far below the measurement uncertainties.

The heating value and the given losses are parameters of the rows, not measurements:
their uncertainty enters the results in :mod:`perftest.evaluation.boiler`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from functools import lru_cache

import numpy as np

from perftest.errors import PerftestError
from perftest.plant.spec import _read_source

__all__ = ["Combustion", "read_combustion", "humidity_ratio", "FLUE_KEYS", "PREFIX"]

#: Prefix of the firing-side model variables (``combustion.fuel_flow`` ...).
PREFIX = "combustion"

#: ``[performance]`` keys of the firing side.
FLUE_KEYS = (
    "flue_gas_o2",
    "flue_gas_co2",
    "flue_gas_oxygen_basis",
    "flue_gas_co",
    "flue_gas_temperature",
    "air_temperature",
    "air_relative_humidity",
    "combustion_air_flow",
    "radiation_loss",
    "other_losses",
)

#: Combustion reference temperature of heating values unless ``[fuel]`` names one
#: [K]: 15 degC, one of the combustion reference temperatures of ISO 6976 (from memory).
COMBUSTION_REFERENCE_T = 288.15


def combustion_reference_temperature(plant, fuel) -> float:
    """``[fuel] combustion_reference_temperature`` [K], or :data:`COMBUSTION_REFERENCE_T`."""
    if "combustion_reference_temperature" not in fuel:
        return COMBUSTION_REFERENCE_T
    return float(
        plant.read_quantity(
            fuel["combustion_reference_temperature"],
            "temperature",
            "fuel",
            "combustion_reference_temperature",
        )
    )


# key -> (model variable, glossary quantity)
_VARIABLES = {
    "flue_gas_o2": ("oxygen", "fraction"),
    "flue_gas_co2": ("carbon_dioxide", "fraction"),
    "flue_gas_co": ("carbon_monoxide", "fraction"),
    "flue_gas_temperature": ("flue_gas_temperature", "temperature"),
    "air_temperature": ("air_temperature", "temperature"),
    "air_relative_humidity": ("air_relative_humidity", "fraction"),
    "combustion_air_flow": ("air_flow", "mass_flow"),
}
# Forward-difference steps of the loss functions (absolute, SI): small against any
# instrument's uncertainty (0.1 % O2, 10 ppm CO, 1 K, 1 % RH) and large enough that
# the rounding error of a difference of two values near 1 stays below 1e-8 relative.
_STEP = {
    "oxygen": 1e-6,
    "carbon_dioxide": 1e-6,
    "carbon_monoxide": 1e-8,
    "flue_gas_temperature": 1e-3,
    "air_temperature": 1e-3,
    "air_relative_humidity": 1e-5,
}


@dataclass(frozen=True)
class Combustion:
    """The firing side of a boiler as the model sees it.

    Attributes
    ----------
    fuel : mapping
        ``[fuel] composition`` (gas mole fractions or an ultimate analysis).
    heating_value : float [J/kg]
        Of the fuel as fired, on ``basis``.
    basis : {"lhv", "hhv"}
    flow_factor : float [kg per unit of the fuel flow tag]
    flue_gas_basis : {"dry", "wet"}
    given : dict
        Fractional losses ``radiation``, ``other`` [-].
    absolute : dict
        Losses ``radiation``, ``other`` stated as heat flows [W].
    loss_u : dict
        Standard uncertainty of each given loss: ``<name>`` as a fraction of the heat
        input [-], ``<name>_watts`` [W] for a loss stated as a heat flow.
    pressure : float [Pa]
        Atmospheric pressure (air humidity and dew point).
    sources : dict
        Model variable (without prefix) -> Source.
    useful_heat : tuple of str
        Model variables summed as the heat taken up by water and steam.
    useful_refs : tuple of str
        The same as written in the plant file (tags or model variables).
    """

    fuel: Mapping
    heating_value: float
    basis: str
    flow_factor: float
    flue_gas_basis: str
    given: dict
    absolute: dict
    loss_u: dict
    pressure: float
    sources: dict
    useful_heat: tuple
    useful_refs: tuple = ()
    notes: tuple = field(default=())

    # ------------------------------------------------------------ physics
    def losses(self, z: Mapping):
        """:class:`~perftest.thermo.heat_loss.BoilerLosses` at the firing-side values ``z``."""
        from perftest.thermo.heat_loss import boiler_losses

        Ta = float(z["air_temperature"])
        rh = float(z.get("air_relative_humidity", 0.0))
        W = humidity_ratio(Ta, self.pressure, rh)
        analysis = (
            {"oxygen": float(z["oxygen"])}
            if "oxygen" in z
            else {"carbon_dioxide": float(z["carbon_dioxide"])}
        )
        return boiler_losses(
            self.fuel,
            heating_value=self.heating_value,
            heating_value_basis=self.basis,
            flue_gas_temperature=float(z["flue_gas_temperature"]),
            air_temperature=Ta,
            carbon_monoxide=float(z.get("carbon_monoxide", 0.0)),
            flue_gas_basis=self.flue_gas_basis,
            air_humidity_ratio=W,
            radiation_loss=self.given.get("radiation", 0.0),
            other_loss=self.given.get("other", 0.0),
            pressure=self.pressure,
            **analysis,
        )

    def _features(self, z: Mapping) -> np.ndarray:
        """(indirect efficiency, dry air per kg fuel, predicted CO2) at ``z``."""
        bl = self.losses(z)
        fg = bl.flue_gas
        co2 = (fg.dry if self.flue_gas_basis == "dry" else fg.wet)["CO2"]
        return np.array([bl.efficiency, fg.dry_air, co2])

    @property
    def inputs(self) -> tuple:
        """Firing-side variables the loss functions take (without prefix)."""
        names = [n for n in _STEP if n in self.sources]
        if "oxygen" in names and "carbon_dioxide" in names:
            names.remove("carbon_dioxide")  # excess air from O2; CO2 has its own row
        return tuple(names)

    def with_parameters(self, **changes) -> Combustion:
        """A copy with other parameters (``heating_value``, ``given``, ``absolute``)."""
        return replace(self, **changes)


# Anchor grid of the humidity ratio: CoolProp's real-moist-air value at the nearest
# (0.5 K, 5 %RH) node, carried to the point by the ideal-mixture ratio (see
# humidity_ratio).
_T_NODE, _RH_NODE = 0.5, 0.05


@lru_cache(maxsize=256)
def _anchor(T: float, p: float, rh: float) -> float:
    from perftest.thermo.combustion import air_humidity_ratio

    return float(air_humidity_ratio(T, p, rh))


def _ideal(T: float, p: float, rh: float) -> float:
    from perftest.thermo.if97 import if97_psat

    pw = rh * float(if97_psat(T))
    return pw / (p - pw)


def humidity_ratio(temperature: float, pressure: float, relative_humidity: float) -> float:
    """Humidity ratio of the combustion air [kg/kg], fast enough for every iterate.

    CoolProp's ``HAPropsSI`` (through
    :func:`perftest.thermo.combustion.air_humidity_ratio`) takes some 50 ms a call, too
    slow for the reconciliation's finite differences and a Monte Carlo.  It is
    evaluated at the nearest node of a grid (0.5 K, 5 %RH) and carried to the point by
    the ratio of the ideal-mixture values
    :math:`W \\propto \\varphi p_s(T) / (p - \\varphi p_s(T))` (IAPWS-IF97 saturation
    pressure); what the ratio leaves out (the enhancement factor's change over half a
    kelvin) is of order 1e-5 of W.
    """
    if not relative_humidity > 0.0:
        return 0.0
    T_a = round(temperature / _T_NODE) * _T_NODE
    rh_a = min(max(round(relative_humidity / _RH_NODE) * _RH_NODE, _RH_NODE), 1.0)
    return _anchor(T_a, pressure, rh_a) * (
        _ideal(temperature, pressure, relative_humidity) / _ideal(T_a, pressure, rh_a)
    )


# ------------------------------------------------------------ reading the plant file


def _fail(plant, message, *keys):
    return plant.error(message, *keys)


def _loss(plant, value, key):
    """A given loss: bare number = percent of the heat input; or { value, kind, unit,
    uncertainty }.  Returns (fraction, watts, u_fraction, u_watts)."""
    keys = ("performance", key)
    if isinstance(value, bool) or not isinstance(value, (int, float, Mapping)):
        raise _fail(
            plant,
            f"a loss is a number (percent of the heat input) or {{ value, kind, unit, "
            f"uncertainty }}. Got {value!r}.",
            *keys,
        )
    if not isinstance(value, Mapping):
        value = {"value": value}
    v = value.get("value")
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
        raise _fail(plant, f"the loss 'value' must be a number >= 0. Got {v!r}.", *keys)
    kind = value.get("kind", "absolute" if "unit" in value else "percent")
    u = value.get("uncertainty")
    if u is not None and (isinstance(u, bool) or not isinstance(u, (int, float)) or u < 0):
        raise _fail(
            plant,
            f"the loss 'uncertainty' (standard, same kind and unit as 'value') must be a "
            f"number >= 0. Got {u!r}.",
            *keys,
        )
    # Without a stated uncertainty a given loss is taken as known to half its size
    # (standard): a curve-read radiation loss is rarely better (common practice, no
    # source).
    u = 0.5 * v if u is None else float(u)
    if kind == "percent":
        return float(v) / 100.0, 0.0, u / 100.0, 0.0
    if kind != "absolute" or "unit" not in value:
        raise _fail(
            plant,
            'an absolute loss needs its unit, e.g. { value = 120, kind = "absolute", '
            'unit = "kW" }; a percentage is { value = 0.4, kind = "percent" }.',
            *keys,
        )
    w = float(plant.read_quantity({"value": v, "unit": value["unit"]}, "heat_flow", *keys))
    uw = float(plant.read_quantity({"value": u, "unit": value["unit"]}, "heat_flow", *keys))
    return 0.0, w, 0.0, uw


def _heating_value(plant, fuel: Mapping, basis: str, per: str):
    """Heating value per kg [J/kg] and kg per unit of the fuel flow tag."""
    comp = fuel.get("composition")
    gas = None
    if isinstance(comp, Mapping):
        from perftest.thermo.fuel import Gas
        from perftest.thermo.fuel_analysis import _ULTIMATE_KEYS

        if not all(str(k).strip().lower() in _ULTIMATE_KEYS for k in comp):
            try:
                gas = Gas(comp)
            except PerftestError as exc:
                raise _fail(plant, f"[fuel] composition: {exc}", "fuel", "composition") from None
    t_comb = combustion_reference_temperature(plant, fuel)
    factor = 1.0
    if per == "volume":
        if gas is None:
            raise _fail(
                plant,
                "the combustion constraint with a fuel volume_flow needs a gas composition "
                "(for the metered density); give composition or use mass_flow.",
                "fuel",
                "volume_flow",
            )
        rc = fuel.get("reference_conditions") or {}
        t_met, p_met = 288.15, 101325.0
        if "temperature" in rc:
            t_met = float(plant.read_quantity(rc["temperature"], "temperature", "fuel",
                                              "reference_conditions", "temperature"))  # fmt: skip
        if "pressure" in rc:
            p_met = float(plant.read_quantity(rc["pressure"], "pressure", "fuel",
                                              "reference_conditions", "pressure"))  # fmt: skip
        factor = float(gas.density(metering_temperature=t_met, metering_pressure=p_met))

    if basis in fuel and per == "mass":
        hv = float(plant.read_quantity(fuel[basis], "specific_energy", "fuel", basis,
                                       default_unit="MJ/kg"))  # fmt: skip
    elif gas is not None:
        getter = gas.inferior_calorific_value if basis == "lhv" else gas.superior_calorific_value
        hv = float(getter("mass", combustion_temperature=t_comb))
    else:
        raise _fail(
            plant,
            f"the combustion constraint needs the fuel's {basis} per kg: give "
            f"{basis} = {{ value, unit }} with mass_flow, or a gas composition.",
            "fuel",
        )
    return hv, factor


def _ref_slots(plant, refs, key, index: dict, tag_ids: list, new: dict) -> tuple:
    """Model variables of a useful-heat reference list; tags outside the model get a
    variable ``combustion.useful_heat_<i>`` of their own."""
    out = []
    for ref in [refs] if isinstance(refs, str) else list(refs):
        if ref in index:
            out.append(ref)
        elif ref in plant.tags or ref in plant.groups:
            name = f"{PREFIX}.useful_heat_{len(new)}"
            new[name] = (_read_source(plant, ref, "heat_flow", ("performance", key), tag_ids),
                         "heat_flow")  # fmt: skip
            out.append(name)
        else:
            raise _fail(
                plant,
                f"{ref!r} is neither a tag, a group nor a variable of the plant model "
                '(the heat taken up by water and steam, e.g. "boiler.heat").',
                "performance",
                key,
            )
    return tuple(out)


def read_combustion(plant, spec, index: dict, tag_ids: list):
    """The firing side of ``plant`` (None when ``[performance]`` has no flue-gas analysis).

    Parameters
    ----------
    plant : Plant
    spec : ModelSpec
    index : dict
        Model variables already defined (name -> slot).
    tag_ids : list
        Tags the model uses; tags of the firing side are appended.

    Returns
    -------
    tuple (Combustion, dict) or None
        The firing side and its new model variables (name -> (Source, quantity)).

    Raises
    ------
    PlantFileError
        A missing fuel, flow, temperature or heating value, or a bad loss entry.
    """
    table = plant.sections.get("performance")
    if not isinstance(table, Mapping) or not ("flue_gas_o2" in table or "flue_gas_co2" in table):
        return None
    if any(uid == PREFIX for uid in spec.units):
        raise _fail(
            plant,
            f"the unit id {PREFIX!r} is reserved for the firing side of a boiler with a "
            "flue-gas analysis; rename the unit.",
            "units",
            PREFIX,
        )
    kind = str(table.get("kind", "power"))
    basis = str(table.get("basis", "lhv")).lower()
    fuel = plant.sections.get("fuel")
    if not isinstance(fuel, Mapping) or "composition" not in fuel:
        raise _fail(
            plant,
            "a flue-gas analysis needs [fuel] composition (gas mole fractions, or mass "
            "fractions carbon, hydrogen, oxygen, nitrogen, sulfur, moisture, ash).",
            "performance",
            "flue_gas_o2" if "flue_gas_o2" in table else "flue_gas_co2",
        )
    for key in ("flue_gas_temperature", "air_temperature"):
        if key not in table:
            raise _fail(
                plant,
                f"a flue-gas analysis needs '{key}' (a tag or {{ value, unit }}): the "
                "losses run from the air temperature to the flue-gas temperature.",
                "performance",
            )
    if "mass_flow" in fuel:
        flow, per = fuel["mass_flow"], "mass"
    elif "volume_flow" in fuel:
        flow, per = fuel["volume_flow"], "volume"
    else:
        raise _fail(plant, "[fuel] needs 'mass_flow' (or 'volume_flow') = the fuel flow tag.",
                    "fuel")  # fmt: skip
    hv, factor = _heating_value(plant, fuel, basis, per)
    new: dict = {}
    quantity = "mass_flow" if per == "mass" else "volume_flow"
    new[f"{PREFIX}.fuel_flow"] = (
        _read_source(plant, flow, quantity, ("fuel", f"{per}_flow"), tag_ids),
        quantity,
    )
    sources = {"fuel_flow": new[f"{PREFIX}.fuel_flow"][0]}
    for key, (var, q) in _VARIABLES.items():
        if key in table:
            src = _read_source(plant, table[key], q, ("performance", key), tag_ids)
            sources[var] = src
            new[f"{PREFIX}.{var}"] = (src, q)
    notes = []
    if "air_relative_humidity" not in table:
        notes.append("No air_relative_humidity: the combustion air is taken as dry.")
    if kind == "boiler":
        if "useful_heat" not in table:
            raise _fail(plant, "kind = \"boiler\" needs 'useful_heat'.", "performance")
        useful = _ref_slots(plant, table["useful_heat"], "useful_heat", index, tag_ids, new)
    elif "cycle_heat" in table:
        useful = _ref_slots(plant, table["cycle_heat"], "cycle_heat", index, tag_ids, new)
    else:
        useful = tuple(f"{uid}.heat" for uid, u in spec.units.items() if u.type == "boiler")
        if not useful:
            raise _fail(
                plant,
                "a flue-gas analysis in a power or CHP plant needs the heat the boiler "
                "gives the water and steam: a boiler unit in the model or 'cycle_heat'.",
                "performance",
            )
    given, u_given, absolute = {}, {}, {}
    for key, name in (("radiation_loss", "radiation"), ("other_losses", "other")):
        f, w, uf, uw = _loss(plant, table[key], key) if key in table else (0.0,) * 4
        given[name], absolute[name], u_given[name], u_given[f"{name}_watts"] = f, w, uf, uw
    if kind == "boiler":
        refs = table["useful_heat"]
    else:
        refs = table.get("cycle_heat", list(useful))
    refs = (refs,) if isinstance(refs, str) else tuple(refs)
    comb = Combustion(
        fuel=dict(fuel["composition"]),
        heating_value=hv,
        basis=basis,
        flow_factor=factor,
        flue_gas_basis=str(table.get("flue_gas_oxygen_basis", "dry")),
        given=given,
        absolute=absolute,
        loss_u=u_given,
        pressure=float(plant.site.atmospheric_pressure or 101325.0),
        sources=sources,
        useful_heat=useful,
        useful_refs=refs,
        notes=tuple(notes),
    )
    return comb, new


# ------------------------------------------------------------ rows


def add_rows(comb: Combustion, builder) -> dict:
    """Append the combustion rows to a model builder; returns row name -> row index."""
    rows = {"energy": builder.row(f"{PREFIX}:energy", "combustion", PREFIX)}
    if "air_flow" in comb.sources:
        rows["air"] = builder.row(f"{PREFIX}:air", "combustion_air", PREFIX)
    if "oxygen" in comb.sources and "carbon_dioxide" in comb.sources:
        rows["co2"] = builder.row(f"{PREFIX}:co2", "analysis", PREFIX)
    return rows


def evaluate_rows(comb: Combustion, rows: dict, index: dict, v: np.ndarray, jac: bool):
    """Unscaled residuals of the combustion rows and their Jacobian entries.

    Returns
    -------
    res : dict row index -> residual [W, kg/s or mole fraction]
    entries : list of (row, slot, value)
    """
    slot = {n: index[f"{PREFIX}.{n}"] for n in comb.sources}
    z = {n: float(v[slot[n]]) for n in comb.inputs}
    if not all(math.isfinite(a) for a in z.values()):
        return {r: math.nan for r in rows.values()}, []
    f0 = comb._features(z)
    eta, air, co2 = f0
    kf = comb.flow_factor * float(v[slot["fuel_flow"]])
    H = comb.heating_value
    q_slots = [index[n] for n in comb.useful_heat]
    q = float(sum(v[s] for s in q_slots))
    res = {rows["energy"]: kf * H * eta - sum(comb.absolute.values()) - q}
    if "air" in rows:
        res[rows["air"]] = float(v[slot["air_flow"]]) - kf * air
    if "co2" in rows:
        res[rows["co2"]] = float(v[slot["carbon_dioxide"]]) - co2
    if not jac:
        return res, []
    ent = [(rows["energy"], slot["fuel_flow"], comb.flow_factor * H * eta)]
    ent += [(rows["energy"], s, -1.0) for s in q_slots]
    if "air" in rows:
        ent += [(rows["air"], slot["air_flow"], 1.0),
                (rows["air"], slot["fuel_flow"], -comb.flow_factor * air)]  # fmt: skip
    if "co2" in rows:
        ent.append((rows["co2"], slot["carbon_dioxide"], 1.0))
    for n in comb.inputs:
        h = _STEP[n]
        # step away from a bound: a zero CO or humidity stays non-negative
        zz = dict(z)
        zz[n] = z[n] + h
        d = (comb._features(zz) - f0) / h
        ent.append((rows["energy"], slot[n], kf * H * d[0]))
        if "air" in rows:
            ent.append((rows["air"], slot[n], -kf * d[1]))
        if "co2" in rows:
            ent.append((rows["co2"], slot[n], -d[2]))
    return res, ent


def guess(comb: Combustion, index: dict, v: np.ndarray) -> None:
    """Fill unknown firing-side values of ``v`` (in place) for a first iterate."""
    slot = {n: index[f"{PREFIX}.{n}"] for n in comb.sources}
    typical = {
        "oxygen": 0.03,
        "carbon_dioxide": 0.09,
        "carbon_monoxide": 0.0,
        "air_relative_humidity": 0.5,
        "flue_gas_temperature": 420.0,
        "air_temperature": 293.15,
    }
    for n, t in typical.items():
        if n in slot and not math.isfinite(v[slot[n]]):
            v[slot[n]] = t
    z = {n: float(v[slot[n]]) for n in comb.inputs}
    eta, air, co2 = comb._features(z)
    q = float(sum(v[index[n]] for n in comb.useful_heat))
    if not math.isfinite(v[slot["fuel_flow"]]) and math.isfinite(q):
        v[slot["fuel_flow"]] = (
            (q + sum(comb.absolute.values())) / (comb.heating_value * eta) / comb.flow_factor
        )
    if "air_flow" in slot and not math.isfinite(v[slot["air_flow"]]):
        v[slot["air_flow"]] = comb.flow_factor * v[slot["fuel_flow"]] * air
    if "carbon_dioxide" in slot and not math.isfinite(v[slot["carbon_dioxide"]]):
        v[slot["carbon_dioxide"]] = co2
