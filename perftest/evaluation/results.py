"""Performance results of a reconciled plant, with propagated uncertainty.

:func:`evaluate` takes a plant and its :class:`~perftest.model.PlantReconciliation`
and computes every result of the summary: gross and net power, heat input,
first-law efficiency, heat rate, the Carnot and Curzon-Ahlborn bounds between the
heat source and sink, second-law and exergetic efficiency, exergy destruction per
unit (checked against the Gouy-Stodola relation), results corrected to reference
conditions and the guarantee verdicts.

Uncertainty
-----------
All results are functions of a handful of inputs: the reconciled values named in
``[performance]`` and ``[[corrections]]`` (their joint covariance comes from the
reconciliation, so correlations created by the balances are kept) and the fuel's
heating value (independent of the measurements).  The results' covariance is
propagated linearly (:func:`perftest.evaluation.uncertainty.propagate`, GUM clause 5.2) with
an uncertainty budget per result; a Monte Carlo propagation (GUM Supplement 1,
:func:`perftest.evaluation.uncertainty.monte_carlo`) of the same function is kept as a check
of the linearisation.

References
----------
.. [1] JCGM 100:2008, *Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement* (GUM), clauses 5.1-5.2.
.. [2] JCGM 101:2008, *Propagation of distributions using a Monte Carlo method*
   (GUM Supplement 1).
.. [3] J. Szargut, D. R. Morris and F. R. Steward, *Exergy Analysis of Thermal,
   Chemical and Metallurgical Processes*, Hemisphere, 1988 (standard chemical
   exergies, Table I).
.. [4] T. J. Kotas, *The Exergy Method of Thermal Plant Analysis*, Butterworths,
   1985, Sect. 2.5 (ratio of chemical exergy to net calorific value of fuels).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.evaluation import performance as perf
from perftest.errors import InputError, PerftestError, PlantFileError

__all__ = ["Performance", "evaluate", "RESULT_UNITS", "fuel_exergy_ratio"]

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
    "second_law_efficiency": "1",
    "exergetic_efficiency": "1",
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
    "second_law_efficiency": "Second-law efficiency (first-law / Carnot)",
    "exergetic_efficiency": "Exergetic efficiency (net power / fuel exergy)",
}

# Standard chemical exergy [kJ/mol] of fuel-gas components in the reference
# environment of [3] (Table I; values from memory).  Used for the fuel exergy when
# the plant file gives a composition.
_CHEMICAL_EXERGY = {
    "methane": 831.65,
    "ethane": 1495.84,
    "propane": 2154.0,
    "n-butane": 2805.8,
    "isobutane": 2801.8,
    "n-pentane": 3463.3,
    "isopentane": 3461.3,
    "n-hexane": 4118.5,
    "hydrogen": 236.09,
    "carbon_monoxide": 275.10,
    "hydrogen_sulfide": 812.0,
    "nitrogen": 0.72,
    "oxygen": 3.97,
    "carbon_dioxide": 19.87,
    "water": 9.5,
    "argon": 11.69,
    "helium": 30.37,
}
#: Ratio of chemical exergy to net calorific value for natural gas when the
#: composition is not known ([4] Sect. 2.5 gives about 1.04 for gaseous
#: hydrocarbon fuels; from memory).
DEFAULT_FUEL_EXERGY_RATIO = 1.04
_R = 8.314462618  # J/(mol K), CODATA 2018
_T0_CHEMICAL = 298.15  # K, reference temperature of the chemical exergy table

# Stated heating-value uncertainty when the plant file gives none: 0.3 % at 95 %,
# the usual size for a calorific value computed from a laboratory gas analysis
# (common practice, no source).  The report names the assumption.
_DEFAULT_HV_U95 = 0.003

# Number of Monte Carlo trials of the check: 20 000 trials resolve a standard
# uncertainty to about 0.5 % (relative standard error 1/sqrt(2M)), plenty for a
# check of the linear propagation, and take well under a second.
_MC_TRIALS = 20_000


# --------------------------------------------------------------------------- result


@dataclass(frozen=True, eq=False)
class Performance:
    """Outcome of :func:`evaluate`.

    Attributes
    ----------
    results : pandas.DataFrame
        Index: result name.  Columns ``value, u, U95, unit, k, dof, description``
        [SI]; ``U95`` is the expanded uncertainty at ``level``.
    budgets : dict[str, pandas.DataFrame]
        Per result: uncertainty budget indexed by input, columns ``estimate, u,
        sensitivity, u_contribution, share`` (shares sum to one).
    guarantees : pandas.DataFrame
        Columns ``quantity, corrected_value, U95, guaranteed, direction, verdict,
        unit, margin, rule, rule_statement`` [SI; ``unit`` is the display unit of the
        plant file; ``rule`` the verdict rule and ``rule_statement`` its sentence].
    corrections : pandas.DataFrame
        One row per correction curve: ``result, variable, condition, reference,
        kind, factor, change, relative_change`` (factor of a multiplicative curve,
        offset of an additive one; ``change`` is what this correction alone changes
        the result by [SI], ``relative_change`` that change over the result).
    exergy : pandas.DataFrame
        One row per unit: ``unit, type, exergy_in, exergy_out, work_in, work_out,
        destroyed, u_destroyed, gouy_stodola, heat, share`` [W; share of the fuel
        exergy; ``heat`` is the heat absorbed by a boiler or rejected by a condenser].
    exergy_closure : perftest.evaluation.performance.ExergyClosure or None
        Plant exergy balance: fuel exergy = net power + destroyed + lost.
    exergy_losses : dict[str, float]
        Exergy lost across the plant boundary [W] (cooling water, auxiliaries
        outside the model).
    inputs : pandas.DataFrame
        Index: input name.  Columns ``value, u, role`` [SI].
    monte_carlo : pandas.DataFrame or None
        Monte Carlo check per result: ``value, u, low, high, u_linear, ratio``.
    cov : pandas.DataFrame
        Covariance of the results [SI squared].
    level : float
        Coverage probability of ``U95``.
    dead_state : tuple of float
        ``(T0 [K], p0 [Pa])`` of the exergy values.
    notes : tuple of str
        Assumptions and warnings for the report.
    """

    results: pd.DataFrame
    budgets: dict
    guarantees: pd.DataFrame
    corrections: pd.DataFrame
    exergy: pd.DataFrame
    exergy_closure: object
    exergy_losses: dict
    inputs: pd.DataFrame
    monte_carlo: pd.DataFrame | None
    cov: pd.DataFrame
    level: float
    dead_state: tuple
    notes: tuple = field(default=())

    def value(self, name: str) -> float:
        """Value of one result [SI]."""
        return float(self._row(name)["value"])

    def uncertainty(self, name: str) -> float:
        """Standard uncertainty of one result [SI]."""
        return float(self._row(name)["u"])

    def _row(self, name: str):
        if name not in self.results.index:
            raise InputError(
                f"The 'name' parameter must be a result of this evaluation "
                f"({', '.join(self.results.index)}). Got {name!r}.",
                parameter="name",
            )
        return self.results.loc[name]

    def ufloats(self) -> dict:
        """Results as correlated ``uncertainties`` numbers, keyed by name.

        Correlations between results (net power and heat rate share inputs) are
        kept, so arithmetic on the returned numbers propagates correctly.
        """
        from uncertainties import correlated_values

        names = list(self.results.index)
        cov = self.cov.loc[names, names].to_numpy()
        nums = correlated_values(self.results["value"].to_numpy(float), cov, tags=names)
        return dict(zip(names, nums, strict=True))

    def to_frame(self, units="engineering") -> pd.DataFrame:
        """The results in engineering units (MW, %, kJ/kWh, °C), or as stored (``"si"``).

        Columns ``value, u, U95, unit, description``, indexed by result name.
        """
        from perftest.display.views import performance_frame

        return performance_frame(self, units)

    def __repr__(self) -> str:
        from perftest.display.views import performance_text

        return performance_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import performance_html

        return performance_html(self)


# --------------------------------------------------------------------------- helpers


def _performance_table(plant) -> dict:
    table = plant.sections.get("performance")
    if not isinstance(table, Mapping) or not table:
        raise PlantFileError(
            f"{plant.path}: the plant file has no [performance] table; evaluate needs at "
            "least gross_power, heat_input, source_temperature and sink_temperature.",
            file=plant.path,
            key="performance",
        )
    kind = table.get("kind", "power")
    if kind != "power":
        raise _plant_error(
            plant,
            f"[performance] kind = {kind!r} is not evaluated by this version of perftest "
            '(only "power"); compute COP results with perftest.evaluation.performance.',
            "performance",
            "kind",
        )
    for key in ("gross_power", "heat_input", "source_temperature", "sink_temperature"):
        if not isinstance(table.get(key), str):
            raise _plant_error(
                plant,
                f"[performance] needs '{key}' = a tag, group or model variable "
                f'(e.g. "main_steam.temperature").',
                "performance",
                key,
            )
    return dict(table)


def _plant_error(plant, message: str, *keys) -> PerftestError:
    err = getattr(plant, "error", None)
    if callable(err):
        return err(message, *keys)
    return PlantFileError(message, key=".".join(keys))


def _metering_conditions(plant, fuel: Mapping) -> tuple[float, float]:
    """Metering temperature [K] and pressure [Pa] of a fuel ``volume_flow`` tag.

    ``[fuel] reference_conditions = { temperature = {value, unit}, pressure = {value,
    unit} }``; default 15 degC and 101.325 kPa (the ISO 13443 standard reference
    conditions, from memory).
    """
    ref = fuel.get("reference_conditions", {})
    if not isinstance(ref, Mapping):
        raise _plant_error(
            plant,
            "[fuel] reference_conditions must be a table "
            "{ temperature = { value, unit }, pressure = { value, unit } }.",
            "fuel",
            "reference_conditions",
        )
    unknown = sorted(set(ref) - {"temperature", "pressure"})
    if unknown:
        raise _plant_error(
            plant,
            f"[fuel] reference_conditions: unknown key(s) {unknown}; "
            "use 'temperature' and 'pressure'.",
            "fuel",
            "reference_conditions",
        )
    t = 288.15
    p = 101325.0
    if "temperature" in ref:
        t = float(
            plant.read_quantity(
                ref["temperature"], "temperature", "fuel", "reference_conditions", "temperature"
            )
        )
    if "pressure" in ref:
        p = float(
            plant.read_quantity(
                ref["pressure"], "pressure", "fuel", "reference_conditions", "pressure"
            )
        )
    return t, p


def _fuel_basis(plant, perf_table: dict) -> dict:
    """Heating value [J/kg or J/m3], its standard uncertainty, the flow reference and
    the fuel-exergy ratio."""
    fuel = plant.sections.get("fuel")
    if not isinstance(fuel, Mapping):
        raise _plant_error(
            plant,
            '[performance] heat_input = "fuel" needs a [fuel] table with mass_flow and '
            "either lhv/hhv or composition.",
            "performance",
            "heat_input",
        )
    basis = str(perf_table.get("basis", "lhv")).lower()
    if basis not in ("lhv", "hhv"):
        raise _plant_error(
            plant,
            f'[performance] basis must be "lhv" or "hhv". Got {basis!r}.',
            "performance",
            "basis",
        )
    if "mass_flow" in fuel:
        flow, per = fuel["mass_flow"], "mass"
    elif "volume_flow" in fuel:
        flow, per = fuel["volume_flow"], "volume"
    else:
        raise _plant_error(
            plant, "[fuel] needs 'mass_flow' (or 'volume_flow') = the fuel flow tag.", "fuel"
        )
    notes = []
    ratio = None
    if basis in fuel:
        unit = "MJ/kg" if per == "mass" else "MJ/m3"
        q = "specific_energy"
        raw = fuel[basis]
        if per == "volume" and isinstance(raw, Mapping):
            raise _plant_error(
                plant,
                "[fuel] a stated heating value with volume_flow must be in J/m3; "
                "write a bare number [J/m3] or use mass_flow.",
                "fuel",
                basis,
            )
        hv = float(plant.read_quantity(raw, q, "fuel", basis, default_unit=unit))
    elif "composition" in fuel:
        try:
            from perftest.thermo.fuel import Gas
        except ImportError:  # pragma: no cover - perftest.thermo.fuel ships with perftest
            raise PerftestError(
                "A heating value from [fuel] composition needs perftest.thermo.fuel, which is "
                "not available in this installation; state lhv = { value, unit } instead."
            ) from None
        comp = fuel["composition"]
        try:
            gas = Gas(comp)
        except PerftestError as exc:  # name the plant file key, not only the component
            raise _plant_error(plant, f"[fuel] composition: {exc}", "fuel", "composition") from None
        t_comb = 288.15
        if "combustion_reference_temperature" in fuel:
            t_comb = float(
                plant.read_quantity(
                    fuel["combustion_reference_temperature"],
                    "temperature",
                    "fuel",
                    "combustion_reference_temperature",
                )
            )
        kw = {"combustion_temperature": t_comb}
        getter = gas.inferior_calorific_value if basis == "lhv" else gas.superior_calorific_value
        if per == "mass":
            hv = float(getter("mass", **kw))
        else:
            t_met, p_met = _metering_conditions(plant, fuel)
            hv = float(
                getter("volumetric", metering_temperature=t_met, metering_pressure=p_met, **kw)
            )
        lhv_mass = float(gas.inferior_calorific_value("mass", **kw))
        ratio = fuel_exergy_ratio(comp, lhv_mass, gas.molar_mass)
        if basis == "hhv":
            # exergy per unit of the stated (superior) heating value
            ratio *= lhv_mass / float(gas.superior_calorific_value("mass", **kw))
    else:
        raise _plant_error(
            plant, f"[fuel] needs '{basis}' = {{ value, unit }} or 'composition'.", "fuel"
        )
    u_spec = fuel.get("uncertainty")
    if u_spec is None:
        u_rel = _DEFAULT_HV_U95 / 1.96
        notes.append(
            f"Fuel {basis.upper()}: no uncertainty stated in [fuel]; "
            f"{_DEFAULT_HV_U95 * 100:.1f} % at 95 % assumed (common practice for a "
            "laboratory gas analysis)."
        )
    else:
        if not isinstance(u_spec, Mapping) or "value" not in u_spec:
            raise _plant_error(
                plant,
                '[fuel] uncertainty must be { value = 0.3, kind = "percent", level = 0.95 }.',
                "fuel",
                "uncertainty",
            )
        level = u_spec.get("level", 0.95)
        from perftest.run.stats import coverage_factor

        k = 1.0 if level == "standard" else float(coverage_factor(math.inf, float(level)))
        if u_spec.get("kind", "percent") == "percent":
            u_rel = float(u_spec["value"]) / 100.0 / k
        else:
            u_rel = (
                float(
                    plant.read_quantity(
                        {"value": u_spec["value"], "unit": u_spec.get("unit", "MJ/kg")},
                        "specific_energy",
                        "fuel",
                        "uncertainty",
                    )
                )
                / k
                / hv
            )
    if "exergy_ratio" in fuel:
        ratio = float(fuel["exergy_ratio"])
    if ratio is None:
        ratio = DEFAULT_FUEL_EXERGY_RATIO
        notes.append(f"Fuel exergy taken as {ratio} x LHV (gaseous hydrocarbon fuel, Kotas 1985).")
        if basis == "hhv":
            # LHV/HHV of about 0.90 for natural gas (common practice, no source)
            ratio *= 0.90
            notes.append("Fuel exergy from the HHV assumes LHV/HHV = 0.90 (natural gas).")
    return dict(flow=flow, per=per, hv=hv, u_hv=u_rel * hv, basis=basis, ratio=ratio, notes=notes)


def fuel_exergy_ratio(composition: Mapping, lhv_mass: float, molar_mass: float) -> float:
    """Ratio of a gas's chemical exergy to its net calorific value.

    Parameters
    ----------
    composition : mapping of str to float
        Mole fractions (component names as in :mod:`perftest.thermo.fuel`).
    lhv_mass : float [J/kg]
        Net calorific value on a mass basis.
    molar_mass : float [kg/mol]

    Returns
    -------
    float [-]
        :data:`DEFAULT_FUEL_EXERGY_RATIO` when a component is not in the table.

    Notes
    -----
    Chemical exergy of an ideal-gas mixture ([3] Sect. 2):

    .. math:: e^{ch} = \\sum_i x_i e^{ch}_i + R T_0 \\sum_i x_i \\ln x_i

    Examples
    --------
    >>> round(fuel_exergy_ratio({"methane": 1.0}, 50.03e6, 16.04246e-3), 3)
    1.036
    """
    total = 0.0
    mixing = 0.0
    for name, x in composition.items():
        key = str(name).strip().lower().replace(" ", "_")
        key = {"co2": "carbon_dioxide", "n2": "nitrogen", "ch4": "methane"}.get(key, key)
        if key not in _CHEMICAL_EXERGY:
            return DEFAULT_FUEL_EXERGY_RATIO
        total += float(x) * _CHEMICAL_EXERGY[key] * 1e3
        if x > 0:
            mixing += float(x) * math.log(float(x))
    e_molar = total + _R * _T0_CHEMICAL * mixing
    return e_molar / molar_mass / lhv_mass


def _check_name(rec, name: str, key: str, plant) -> None:
    try:
        v = rec.value(name)
    except PerftestError:
        raise _plant_error(
            plant,
            f"[{key.split('.')[0]}] '{key.split('.', 1)[-1]}' = {name!r} is neither a tag, "
            "a group nor a variable of the plant model.",
            *key.split("."),
        ) from None
    if not math.isfinite(v):
        raise PerftestError(
            f"'{name}' (plant file key {key}) is not determined by the measurements and "
            "balances (not observable); measure it or fix its value.",
            key=key,
        )


# --------------------------------------------------------------------------- evaluate


def evaluate(
    plant,
    reconciliation,
    *,
    level: float = 0.95,
    monte_carlo: bool = True,
    seed: int = 20_260_514,
    detail: bool = True,
) -> Performance:
    """Compute the performance results of a reconciled plant with uncertainty.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
        Its ``[performance]``, ``[fuel]``, ``[[corrections]]`` and ``[[guarantees]]``
        tables say what to compute.
    reconciliation : perftest.model.PlantReconciliation
        Provides ``value(name)``, ``covariance(names)``, ``streams``, ``model`` and
        ``dead_state``.
    level : float, default 0.95
        Coverage probability of the expanded uncertainties.
    monte_carlo : bool, default True
        Also propagate by Monte Carlo as a check of the linear propagation.
    seed : int
        Seed of the Monte Carlo check (deterministic by default).
    detail : bool, default True
        Also tabulate the uncertainty budget of every result and the exergy
        analysis per unit.  False leaves ``Performance.budgets``, ``exergy`` and
        ``exergy_losses`` empty and ``exergy_closure`` None, and saves time where
        only values and uncertainties are needed (a trend of many windows); the
        results are the same.

    Returns
    -------
    Performance

    Raises
    ------
    PlantFileError
        If ``[performance]`` or ``[fuel]`` is missing or names unknown variables.
    PerftestError
        If a needed variable is not observable.

    Notes
    -----
    With gross power :math:`P_g`, auxiliary power :math:`P_a`, fuel flow
    :math:`\\dot m_f` and heating value :math:`H`:

    .. math::
        P_n = P_g - P_a,\\quad \\dot Q_F = \\dot m_f H,\\quad
        \\eta_I = P_n/\\dot Q_F,\\quad HR = \\dot Q_F/P_n,\\quad
        \\eta_C = 1 - T_{sink}/T_{source},\\quad \\eta_{II} = \\eta_I/\\eta_C

    Examples
    --------
    >>> perf = evaluate(plant, rec)                        # doctest: +SKIP
    >>> perf.results.loc["first_law_efficiency", ["value", "U95"]]  # doctest: +SKIP
    """
    from perftest.evaluation import uncertainty as unc
    from perftest.evaluation.corrections import (
        apply_corrections,
        curves_from_plant,
        guarantees_from_plant,
    )

    if not 0.0 < level < 1.0:
        raise InputError(
            f"The 'level' parameter of evaluate must lie between 0 and 1. Got {level!r}.",
            parameter="level",
        )
    rec = reconciliation
    table = _performance_table(plant)
    notes: list[str] = []

    # ---- inputs taken from the reconciliation (joint covariance)
    refs = {
        "gross_power": table["gross_power"],
        "source_temperature": table["source_temperature"],
        "sink_temperature": table["sink_temperature"],
    }
    if isinstance(table.get("auxiliary_power"), str):
        refs["auxiliary_power"] = table["auxiliary_power"]
    fuel = None
    if table["heat_input"] == "fuel":
        fuel = _fuel_basis(plant, table)
        notes += fuel.pop("notes")
        refs["fuel_flow"] = fuel["flow"]
    else:
        refs["heat_input"] = table["heat_input"]
    curves = curves_from_plant(plant)
    for c in curves:
        for var in c.variables:
            refs.setdefault(f"condition:{var}", var)
    for role, name in refs.items():
        _check_name(rec, name, f"performance.{role}" if ":" not in role else "corrections", plant)

    rec_names = list(dict.fromkeys(refs.values()))
    x_rec = np.array([rec.value(n) for n in rec_names], dtype=float)
    cov_rec = np.asarray(rec.covariance(rec_names), dtype=float)
    names = list(rec_names)
    x = list(x_rec)
    blocks = [cov_rec]
    roles = {n: [r for r, v in refs.items() if v == n][0] for n in rec_names}
    if fuel is not None:
        hv_name = f"fuel.{fuel['basis']}"
        names.append(hv_name)
        x.append(fuel["hv"])
        blocks.append(np.array([[fuel["u_hv"] ** 2]]))
        roles[hv_name] = "heating_value"
    x = np.asarray(x, dtype=float)
    n_in = len(names)
    cov = np.zeros((n_in, n_in))
    i0 = 0
    for b in blocks:
        cov[i0 : i0 + b.shape[0], i0 : i0 + b.shape[0]] = b
        i0 += b.shape[0]
    cov = 0.5 * (cov + cov.T)
    pos = {n: i for i, n in enumerate(names)}

    # ---- which results are corrected, and by which curves
    corrected_of: dict = {}
    for c in curves:
        corrected_of.setdefault(c.result, []).append(c)
    base_outputs = [
        "gross_power",
        "auxiliary_power",
        "net_power",
        "heat_input",
        "fuel_exergy",
        "first_law_efficiency",
        "gross_efficiency",
        "heat_rate",
        "gross_heat_rate",
        "source_temperature",
        "sink_temperature",
        "carnot_efficiency",
        "curzon_ahlborn_efficiency",
        "second_law_efficiency",
        "exergetic_efficiency",
    ]
    if fuel is None:
        base_outputs.remove("fuel_exergy")
        base_outputs.remove("exergetic_efficiency")
    for result in corrected_of:
        if result not in base_outputs:
            raise _plant_error(
                plant,
                f"[[corrections]] result = {result!r} is not a result perftest computes "
                f"({', '.join(base_outputs)}).",
                "corrections",
            )
    outputs = base_outputs + [f"corrected_{r}" for r in corrected_of]

    def model(v):
        """Results from inputs; ``v`` is (n_in,) or (n_in, N) (rows = inputs)."""
        g = v[pos[refs["gross_power"]]]
        a = v[pos[refs["auxiliary_power"]]] if "auxiliary_power" in refs else 0.0 * g
        net = g - a
        if fuel is not None:
            q = v[pos[refs["fuel_flow"]]] * v[pos[hv_name]]
            # fuel["ratio"] is the fuel exergy per unit of the stated heating value
            ex = q * fuel["ratio"]
        else:
            q = v[pos[refs["heat_input"]]]
        ts = v[pos[refs["source_temperature"]]]
        tk = v[pos[refs["sink_temperature"]]]
        eta = net / q
        carnot = 1.0 - tk / ts
        out = {
            "gross_power": g,
            "auxiliary_power": a,
            "net_power": net,
            "heat_input": q,
            "first_law_efficiency": eta,
            "gross_efficiency": g / q,
            "heat_rate": q / net,
            "gross_heat_rate": q / g,
            "source_temperature": ts,
            "sink_temperature": tk,
            "carnot_efficiency": carnot,
            "curzon_ahlborn_efficiency": 1.0 - np.sqrt(tk / ts),
            "second_law_efficiency": eta / carnot,
        }
        if fuel is not None:
            out["fuel_exergy"] = ex
            out["exergetic_efficiency"] = net / ex
        conditions = {var: v[pos[var]] for c in curves for var in c.variables}
        for result, cs in corrected_of.items():
            out[f"corrected_{result}"] = apply_corrections(out[result], cs, conditions)
        return np.array([np.asarray(out[k], dtype=float) for k in outputs])

    # Check the arithmetic against the one-function-per-relation module: the values
    # must agree with perftest.evaluation.performance at the estimate.
    y0 = model(x)
    _cross_check(dict(zip(outputs, y0, strict=True)))

    prop = unc.propagate(
        model, x, cov, names=names, output_names=outputs, level=level, vectorized=True
    )
    results = pd.DataFrame(
        {
            "value": prop.value,
            "u": prop.u,
            "U95": prop.U,
            "unit": [_unit_of(o) for o in outputs],
            "k": prop.k,
            "dof": prop.dof,
            "description": [_describe(o) for o in outputs],
        },
        index=pd.Index(outputs, name="name"),
    )
    budget_tables = {}
    for o in outputs if detail else ():
        b = prop.budget_for(o)[["estimate", "u", "sensitivity", "u_contribution", "share"]]
        budget_tables[o] = b.copy()
    cov_out = pd.DataFrame(prop.cov, index=outputs, columns=outputs)

    # ---- Monte Carlo check of the linearisation
    mc_frame = None
    if monte_carlo:
        try:
            mc = unc.monte_carlo(
                model, x, cov, n=_MC_TRIALS, seed=seed, level=level, output_names=outputs
            )
            mc_frame = pd.DataFrame(
                {
                    "value": mc.value,
                    "u": mc.u,
                    "low": mc.low,
                    "high": mc.high,
                    "u_linear": prop.u,
                },
                index=pd.Index(outputs, name="name"),
            )
            with np.errstate(divide="ignore", invalid="ignore"):
                mc_frame["ratio"] = mc_frame["u"] / mc_frame["u_linear"]
        except PerftestError as exc:
            notes.append(f"Monte Carlo check skipped: {exc}")

    # ---- corrections table
    corr_rows = []
    for c in curves:
        xc = [float(x[pos[var]]) for var in c.variables]
        refs_c = getattr(c, "references", (c.reference,))
        f = float(c(*xc))
        measured = float(y0[outputs.index(c.result)])
        # size of this correction alone: change of the result it makes [SI] and relative
        change = measured / f - measured if c.kind == "multiplicative" else -f
        corr_rows.append(
            dict(
                result=c.result,
                variable=" & ".join(c.variables),
                condition=xc[0] if len(xc) == 1 else tuple(xc),
                reference=refs_c[0] if len(refs_c) == 1 else tuple(refs_c),
                kind=c.kind,
                factor=f,
                change=change,
                relative_change=change / measured if measured else math.nan,
            )
        )
    corrections = pd.DataFrame(
        corr_rows,
        columns=[
            "result",
            "variable",
            "condition",
            "reference",
            "kind",
            "factor",
            "change",
            "relative_change",
        ],
    )

    # ---- guarantees
    g_rows = []
    for g in guarantees_from_plant(plant):
        if g.quantity not in results.index:
            raise _plant_error(
                plant,
                f"[[guarantees]] quantity = {g.quantity!r} is not a result of this plant "
                f"({', '.join(results.index)}).",
                "guarantees",
            )
        val = float(results.loc[g.quantity, "value"])
        U = float(results.loc[g.quantity, "U95"])
        g_rows.append(
            dict(
                quantity=g.quantity,
                corrected_value=val,
                U95=U,
                guaranteed=g.guaranteed,
                direction=g.direction,
                verdict=g.verdict(val, U),
                unit=g.unit,
                margin=g.margin(val),
                rule=g.rule,
                rule_statement=g.statement(),
            )
        )
    guarantees = pd.DataFrame(
        g_rows,
        columns=[
            "quantity",
            "corrected_value",
            "U95",
            "guaranteed",
            "direction",
            "verdict",
            "unit",
            "margin",
            "rule",
            "rule_statement",
        ],
    )

    # ---- exergy per unit
    fuel_ex = float(results.loc["fuel_exergy", "value"]) if fuel is not None else math.nan
    if detail:
        exergy, losses, closure, ex_notes = _exergy_analysis(
            rec,
            fuel_ex,
            float(results.loc["net_power", "value"]),
            float(results.loc["auxiliary_power", "value"]),
        )
        notes += ex_notes
    else:
        exergy, losses, closure = pd.DataFrame(), {}, None

    inputs = pd.DataFrame(
        {"value": x, "u": np.sqrt(np.diag(cov)), "role": [roles[n] for n in names]},
        index=pd.Index(names, name="input"),
    )
    return Performance(
        results=results,
        budgets=budget_tables,
        guarantees=guarantees,
        corrections=corrections,
        exergy=exergy,
        exergy_closure=closure,
        exergy_losses=losses,
        inputs=inputs,
        monte_carlo=mc_frame,
        cov=cov_out,
        level=float(level),
        dead_state=tuple(float(v) for v in rec.dead_state),
        notes=tuple(notes),
    )


def _unit_of(name: str) -> str:
    return RESULT_UNITS.get(name.removeprefix("corrected_"), "")


def _describe(name: str) -> str:
    if name.startswith("corrected_"):
        base = name.removeprefix("corrected_")
        return f"{DESCRIPTIONS.get(base, base)}, corrected to reference conditions"
    return DESCRIPTIONS.get(name, name)


def _cross_check(v: dict) -> None:
    """The closed-form arithmetic above must match perftest.evaluation.performance exactly."""
    pairs = [
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
        (
            v["second_law_efficiency"],
            perf.second_law_efficiency(v["first_law_efficiency"], v["carnot_efficiency"]),
        ),
    ]
    for a, b in pairs:
        if not math.isclose(float(a), float(b), rel_tol=1e-12):
            raise PerftestError(  # pragma: no cover - an internal inconsistency
                f"Internal check failed: {float(a)!r} != {float(b)!r}."
            )


def _exergy_analysis(rec, fuel_exergy: float, net_power: float, aux_power: float):
    """Exergy balance of every unit, Gouy-Stodola check and plant closure."""
    notes: list[str] = []
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
        return pd.DataFrame(columns=cols), {}, None, notes
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
    frame["share"] = frame["destroyed"] / fuel_exergy if math.isfinite(fuel_exergy) else np.nan
    frame = frame[[*cols, "heat"]]

    losses = {}
    if coolant_loss:
        losses["cooling water"] = coolant_loss
        # The condenser's destroyed column counts the coolant's exergy gain as an
        # output; it leaves the plant, so it is a loss of the plant.
    other_aux = aux_power - work_in_model
    if math.isfinite(other_aux):
        losses["auxiliaries outside the model"] = other_aux
    closure = None
    if math.isfinite(fuel_exergy) and fuel_exergy > 0:
        closure = perf.gouy_stodola_closure(
            frame["destroyed"].to_numpy(float),
            list(losses.values()),
            exergy_in=fuel_exergy,
            exergy_out=net_power,
            rtol=1e-3,  # reconciled balances close to the solver tolerance (~1e-6)
        )
        if not closure.closed:
            notes.append(
                f"Plant exergy balance does not close: imbalance "
                f"{closure.relative_imbalance * 100:.2f} % of the fuel exergy."
            )
    return frame, losses, closure, notes
