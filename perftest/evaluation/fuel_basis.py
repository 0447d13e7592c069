"""The fuel side of the results: heating value and its basis, metering conditions, fuel exergy.

References
----------
.. [3] J. Szargut, D. R. Morris and F. R. Steward, *Exergy Analysis of Thermal,
   Chemical and Metallurgical Processes*, Hemisphere, 1988 (standard chemical
   exergies, Table I).
.. [4] T. J. Kotas, *The Exergy Method of Thermal Plant Analysis*, Butterworths,
   1985, Sect. 2.5 (ratio of chemical exergy to net calorific value of fuels).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from perftest.errors import PerftestError
from perftest.evaluation.plant_keys import _plant_error
from perftest.plant.combustion import combustion_reference_temperature

__all__ = ["fuel_exergy_ratio", "DEFAULT_FUEL_EXERGY_RATIO"]

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
            '[performance] heat_input = "fuel" (and kind = "boiler") needs a [fuel] table '
            "with mass_flow and either lhv/hhv or composition.",
            "performance",
            "heat_input" if "heat_input" in perf_table else "kind",
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
        t_comb = combustion_reference_temperature(plant, fuel)
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
