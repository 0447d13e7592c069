"""Calorific values, density and compression factor of fuel gases from composition.

Method of ISO 6976:2016 (ideal-gas molar calorific values summed by mole fraction,
real-gas volumetric values through a compression factor from summation factors).

Component data live in :data:`COMPONENTS`, each value with its source written beside
it.  Values marked "from memory" were recalled from the standard rather than read
from it while this module was written; the tests check every one of them against an
independent source (CoolProp's reference equations of state and the IAPWS-95
formulation for water) to the precision noted there.

A measured heating value (from a calorimeter or a fuel certificate) needs no class:
it is a number in J/kg (or J/m3 at stated metering conditions) that the caller
passes on as it is.
"""

from __future__ import annotations

import difflib
import functools
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

from perftest.errors import InputError

__all__ = ["Component", "COMPONENTS", "Gas", "GasProperties", "vaporisation_enthalpy"]

#: Molar gas constant used by ISO 6976:2016 [J/(mol K)] (CODATA 2010; from memory).
R_ISO = 8.3144621
#: Reference pressure of combustion and metering [Pa].
P_REF = 101325.0
#: Molar mass of dry air, ISO 6976:2016 Table 1 (from memory) [kg/mol].
M_AIR = 28.96546e-3
#: Compression factor of dry air at 101.325 kPa, ISO 6976:2016 Table 2 footnote
#: (from memory), keyed by metering temperature in °C.
Z_AIR = {0.0: 0.999419, 15.0: 0.999595, 20.0: 0.999645}
#: Enthalpy of vaporisation of water (ideal gas -> liquid at 101.325 kPa) [J/mol],
#: ISO 6976:2016 Table 3 footnote (from memory), keyed by combustion temperature in °C.
L_WATER = {0.0: 45064.0, 15.0: 44433.0, 20.0: 44224.0, 25.0: 44016.0}

_T0 = 273.15


@dataclass(frozen=True)
class Component:
    """One gas component.

    Attributes
    ----------
    name : canonical name (``"methane"``, ``"carbon_dioxide"`` ...)
    formula : chemical formula
    molar_mass : [kg/mol]
    superior_25 : ideal-gas molar superior calorific value at 25 °C [J/mol]
    summation_factor : {0.0: s, 15.0: s, 20.0: s} by metering temperature [°C] [-]
    atoms : (C, H, O, N, S) atoms per molecule
    coolprop_name : the CoolProp fluid used for the temperature dependence
    source : where the numbers come from
    """

    name: str
    formula: str
    molar_mass: float
    superior_25: float
    summation_factor: Mapping[float, float]
    atoms: tuple
    coolprop_name: str
    source: str


_SRC = (
    "M: ISO 6976:2016 Table 1; Hs(25 °C): ISO 6976:2016 Table 3; s: ISO 6976:2016 "
    "Table 2 (all from memory)"
)


def _c(name, formula, M_g, hs25_kj, s0, s15, s20, atoms, cp_name, source=_SRC):
    return Component(
        name=name,
        formula=formula,
        molar_mass=M_g * 1e-3,
        superior_25=hs25_kj * 1e3,
        summation_factor={0.0: s0, 15.0: s15, 20.0: s20},
        atoms=atoms,
        coolprop_name=cp_name,
        source=source,
    )


#: Component table.  Columns: name, formula, M [g/mol], Hs at 25 °C [kJ/mol],
#: summation factor at 0, 15, 20 °C, atoms (C, H, O, N, S), CoolProp fluid.
COMPONENTS: dict[str, Component] = {
    c.name: c
    for c in [
        _c(
            "methane",
            "CH4",
            16.04246,
            890.58,
            0.04886,
            0.04452,
            0.04317,
            (1, 4, 0, 0, 0),
            "Methane",
        ),
        _c("ethane", "C2H6", 30.06904, 1560.69, 0.0997, 0.0919, 0.0895, (2, 6, 0, 0, 0), "Ethane"),
        _c(
            "propane",
            "C3H8",
            44.09562,
            2219.17,
            0.1465,
            0.1344,
            0.1308,
            (3, 8, 0, 0, 0),
            "n-Propane",
        ),
        _c(
            "n_butane",
            "C4H10",
            58.1222,
            2877.40,
            0.2022,
            0.1840,
            0.1785,
            (4, 10, 0, 0, 0),
            "n-Butane",
        ),
        _c(
            "isobutane",
            "C4H10",
            58.1222,
            2868.20,
            0.1885,
            0.1722,
            0.1673,
            (4, 10, 0, 0, 0),
            "IsoButane",
        ),
        _c(
            "n_pentane",
            "C5H12",
            72.14878,
            3535.77,
            0.2586,
            0.2361,
            0.2291,
            (5, 12, 0, 0, 0),
            "n-Pentane",
        ),
        _c(
            "isopentane",
            "C5H12",
            72.14878,
            3528.83,
            0.2485,
            0.2270,
            0.2203,
            (5, 12, 0, 0, 0),
            "Isopentane",
        ),
        _c(
            "n_hexane",
            "C6H14",
            86.17536,
            4194.95,
            0.3256,
            0.2951,
            0.2860,
            (6, 14, 0, 0, 0),
            "n-Hexane",
        ),
        _c(
            "hydrogen",
            "H2",
            2.01588,
            285.83,
            -0.0048,
            -0.0048,
            -0.0048,
            (0, 2, 0, 0, 0),
            "Hydrogen",
        ),
        # CO summation factors: not recalled reliably from the ISO table; these are
        # s = sqrt(-B p0 / (R T)) from the second virial coefficient B of CoolProp's
        # reference equation of state, rounded to 4 decimals.
        _c(
            "carbon_monoxide",
            "CO",
            28.0101,
            282.98,
            0.0259,
            0.0217,
            0.0204,
            (1, 0, 1, 0, 0),
            "CarbonMonoxide",
            source="M, Hs(25 °C): ISO 6976:2016 Tables 1 and 3 (from memory); s: second "
            "virial coefficient from CoolProp (CarbonMonoxide)",
        ),
        _c("nitrogen", "N2", 28.0134, 0.0, 0.0214, 0.0170, 0.0156, (0, 0, 0, 2, 0), "Nitrogen"),
        _c(
            "carbon_dioxide",
            "CO2",
            44.0095,
            0.0,
            0.0821,
            0.0752,
            0.0730,
            (1, 0, 2, 0, 0),
            "CarbonDioxide",
        ),
        _c("oxygen", "O2", 31.9988, 0.0, 0.0311, 0.0276, 0.0265, (0, 0, 2, 0, 0), "Oxygen"),
        _c("argon", "Ar", 39.948, 0.0, 0.0307, 0.0273, 0.0262, (0, 0, 0, 0, 0), "Argon"),
    ]
}

_ALIASES = {
    "ch4": "methane",
    "c1": "methane",
    "c2h6": "ethane",
    "c2": "ethane",
    "c3h8": "propane",
    "c3": "propane",
    "nbutane": "n_butane",
    "butane": "n_butane",
    "nc4": "n_butane",
    "nc4h10": "n_butane",
    "ibutane": "isobutane",
    "ic4": "isobutane",
    "ic4h10": "isobutane",
    "npentane": "n_pentane",
    "pentane": "n_pentane",
    "nc5": "n_pentane",
    "nc5h12": "n_pentane",
    "ipentane": "isopentane",
    "ic5": "isopentane",
    "ic5h12": "isopentane",
    "nhexane": "n_hexane",
    "hexane": "n_hexane",
    "nc6": "n_hexane",
    "c6h14": "n_hexane",
    "h2": "hydrogen",
    "co": "carbon_monoxide",
    "carbonmonoxide": "carbon_monoxide",
    "n2": "nitrogen",
    "co2": "carbon_dioxide",
    "carbondioxide": "carbon_dioxide",
    "o2": "oxygen",
    "ar": "argon",
}


def _norm(name: str) -> str:
    return re.sub(r"[\s_\-]", "", str(name)).lower()


def _lookup(name: str) -> str:
    key = _norm(name)
    for canon in COMPONENTS:
        if _norm(canon) == key:
            return canon
    if key in _ALIASES:
        return _ALIASES[key]
    choices = list(COMPONENTS) + sorted(_ALIASES)
    close = difflib.get_close_matches(key, choices, n=4, cutoff=0.5)
    hint = f" Close matches: {', '.join(close)}." if close else ""
    raise InputError(
        f"Unknown gas component {name!r}.{hint} Known components: {', '.join(COMPONENTS)}.",
        parameter="composition",
    )


# --------------------------------------------------------------------------------------
# temperature dependence of the calorific value (Kirchhoff's law)
# --------------------------------------------------------------------------------------
def _check_celsius(t, what, lo, hi):
    t = float(t)
    if not (lo - 1e-9 <= t <= hi + 1e-9):
        raise InputError(
            f"The {what!r} must lie between {lo:g} °C and {hi:g} °C "
            f"({lo + _T0:.2f} K and {hi + _T0:.2f} K). Got {t + _T0:.2f} K.",
            parameter=what,
        )
    return t


#: Ideal-gas isobaric molar heat capacity of each fluid [J/(mol K)] as a cubic in
#: tau = T / 298.15 K - 1:  cp°(T) = a0 + a1 tau + a2 tau^2 + a3 tau^3.
#: Fitted once (least squares, 141 points) over 250-320 K to the ideal-gas part of
#: CoolProp 8.0.0's reference equations of state (HEOS backend, zero-density limit;
#: IAPWS-95 for water), keyed by CoolProp fluid name.  Worst fit residual over 250-320 K:
#: 1.7e-5 relative in cp° (n-pentane), 0.011 J/mol in H°(T) - H°(298.15 K) (n-pentane;
#: below 0.005 J/mol for every other fluid).  Argon's cp° is 5R/2 exactly.
#: tests/test_fuel.py recomputes the enthalpy differences with CoolProp.
CP0_COEFFICIENTS: dict[str, tuple[float, float, float, float]] = {
    "Methane": (35.7084324, 11.0441306, 12.3346377, -5.07936368),
    "Ethane": (52.4741526, 35.9447721, 10.7645441, -15.4526138),
    "n-Propane": (73.3361896, 58.2530889, 10.3017885, -22.8064224),
    "n-Butane": (98.4798327, 75.4453013, 15.1919259, -36.3660048),
    "IsoButane": (96.6385554, 80.9629692, 10.4391064, -25.7392815),
    "n-Pentane": (120.126874, 92.7834623, 16.8793169, -51.8555719),
    "Isopentane": (118.889175, 102.136705, -4.25417786, -6.97454643),
    "n-Hexane": (142.755256, 115.965859, 28.8748809, -90.2869197),
    "Hydrogen": (28.8341092, 2.15176045, -5.06488502, 7.50673222),
    "CarbonMonoxide": (29.1388194, 0.253542829, 0.734995625, 0.837032939),
    "Nitrogen": (29.1252691, 0.139707183, 0.445287335, 0.616466302),
    "CarbonDioxide": (37.1408284, 13.6832833, -4.02878925, -2.83069816),
    "Oxygen": (29.3759239, 1.4474402, 2.28421575, 0.190261124),
    "Argon": (20.786275, 0.0, 0.0, 0.0),
    "Water": (33.5873192, 1.32267469, 2.06282579, 0.392261941),
}
#: Temperature range of the cp° fit [K].
CP0_RANGE = (250.0, 320.0)
_T25 = 298.15
#: Enthalpy of vaporisation of water at 298.15 K and 101.325 kPa [J/mol]: ideal-gas
#: enthalpy from IAPWS-95 minus liquid enthalpy from IAPWS-IF97, both computed once with
#: CoolProp 8.0.0 (same enthalpy datum).  The base of :func:`vaporisation_enthalpy`
#: between the ISO 6976 tabulated temperatures.
_L_WATER_25_EOS = 44012.2409


def _h_ideal(coolprop_name: str, T: float) -> float:
    """Ideal-gas molar enthalpy relative to 298.15 K, H°(T) - H°(298.15 K) [J/mol].

    The integral of the cp° cubic in :data:`CP0_COEFFICIENTS`; no equation of state is
    evaluated at run time.
    """
    a = CP0_COEFFICIENTS[coolprop_name]
    tau = T / _T25 - 1.0
    return _T25 * tau * (a[0] + tau * (a[1] / 2.0 + tau * (a[2] / 3.0 + tau * a[3] / 4.0)))


@functools.lru_cache(maxsize=64)
def _h_liquid_water(T: float) -> float:
    # IAPWS-IF97 region 1 through CoolProp's compiled core alone (perftest.thermo.coolprop_core
    # loads it without the package start-up, which would load every HEOS fluid).
    # IF97 rather than IAPWS-95: CoolProp's HEOS water refuses 0 °C at 1 atm (below its
    # melting line by 3 mK); for liquid enthalpy differences between 0 and 25 °C the two
    # formulations agree to far better than 0.1 J/mol.
    from perftest.thermo.coolprop_core import _coolprop

    CP = _coolprop()
    st = CP.AbstractState("IF97", "Water")
    st.update(CP.PT_INPUTS, P_REF, T)
    return st.hmass() * 18.015268e-3


@functools.lru_cache(maxsize=64)
def vaporisation_enthalpy(combustion_temperature: float = 288.15) -> float:
    """Enthalpy of vaporisation of water, ideal gas minus liquid at 101.325 kPa [J/mol].

    Parameters
    ----------
    combustion_temperature : float [K]

    Returns
    -------
    L : float [J/mol]

    Notes
    -----
    The ISO 6976:2016 value is used at 0, 15, 20 and 25 °C; at other temperatures
    :math:`L = h^{ig}_{w}(T) - h^{l}_{w}(T, p_0)` with the ideal-gas vapour from the
    stored cp° fit to IAPWS-95 (:data:`CP0_COEFFICIENTS`) and the liquid from IAPWS-IF97
    (CoolProp), which reproduces the tabulated values to 0.004 kJ/mol.

    Examples
    --------
    >>> vaporisation_enthalpy(298.15)
    44016.0
    """
    t = _check_celsius(combustion_temperature - _T0, "combustion_temperature", 0.0, 25.0)
    for key, value in L_WATER.items():
        if abs(t - key) < 1e-6:
            return value
    T = t + _T0
    # L(T) = L(25 °C) + [H°w(T) - H°w(25 °C)] - [h_l(T) - h_l(25 °C)]
    return _L_WATER_25_EOS + _h_ideal("Water", T) - (_h_liquid_water(T) - _h_liquid_water(_T25))


@functools.lru_cache(maxsize=256)
def _superior_molar(name: str, T: float) -> float:
    """Ideal-gas molar superior calorific value of one component at T [J/mol].

    Kirchhoff's law from the 25 °C value: the reaction
    CcHhOoNn + (c + h/4 - o/2) O2 -> c CO2 + h/2 H2O(l) + n/2 N2 is taken from T to
    25 °C with reactants and products heated or cooled at 101.325 kPa (ideal-gas
    enthalpies, liquid water from IAPWS-IF97).
    """
    comp = COMPONENTS[name]
    if comp.superior_25 == 0.0:
        return 0.0
    T25 = _T25
    if abs(T - T25) < 1e-9:
        return comp.superior_25
    c, h, o, n, _ = comp.atoms
    o2 = c + h / 4.0 - o / 2.0

    def dh(cp_name):
        return _h_ideal(cp_name, T25) - _h_ideal(cp_name, T)

    # Hs = -dH_reaction, and dH_reaction(T) = dH_reaction(25) - [H_prod(25) - H_prod(T)]
    #                                      + [H_react(25) - H_react(T)]
    reactants = dh(comp.coolprop_name) + o2 * dh("Oxygen")
    products = (
        c * dh("CarbonDioxide")
        + (h / 2.0) * (_h_liquid_water(T25) - _h_liquid_water(T))
        + (n / 2.0) * dh("Nitrogen")
    )
    return comp.superior_25 + products - reactants


# --------------------------------------------------------------------------------------
# the gas
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class GasProperties:
    """Calorific values and density of a gas at stated reference conditions.

    Attributes
    ----------
    combustion_temperature, metering_temperature : [K]
    metering_pressure : [Pa]
    molar_mass : [kg/mol]
    compression_factor : [-] at metering conditions
    superior_molar, inferior_molar : [J/mol]
    superior_mass, inferior_mass : [J/kg]
    superior_volumetric, inferior_volumetric : [J/m3] real gas at metering conditions
    density : [kg/m3] real gas at metering conditions
    relative_density : [-] real gas, against dry air at the same conditions
    superior_wobbe_index : [J/m3]
    """

    combustion_temperature: float
    metering_temperature: float
    metering_pressure: float
    molar_mass: float
    compression_factor: float
    superior_molar: float
    inferior_molar: float
    superior_mass: float
    inferior_mass: float
    superior_volumetric: float
    inferior_volumetric: float
    density: float
    relative_density: float
    superior_wobbe_index: float


class Gas:
    """A fuel gas of known composition (ISO 6976:2016 method).

    Parameters
    ----------
    composition : mapping of str to float
        Mole fractions [-] by component name or formula (``"methane"``, ``"CH4"``,
        ``"CO2"``, ``"n-butane"`` ...).  They must lie in [0, 1] and sum to 1 within
        1e-4.
    normalise : bool
        Divide by the sum instead of requiring it to be 1 (e.g. for a chromatograph
        analysis that sums to 99.7 %).  Values must still be fractions, not percent.

    Raises
    ------
    InputError
        Unknown component, fraction outside [0, 1], sum not 1 (without `normalise`).

    Notes
    -----
    Ideal-gas molar superior calorific value (ISO 6976:2016 Eq. 1, from memory)

    .. math:: H_s^\\circ = \\sum_j x_j H_{s,j}^\\circ(t_1)

    inferior value :math:`H_i^\\circ = H_s^\\circ - \\tfrac12 \\sum_j x_j b_j L^\\circ(t_1)`
    with :math:`b_j` hydrogen atoms per molecule and :math:`L^\\circ` the enthalpy of
    vaporisation of water; compression factor at metering conditions

    .. math:: Z = 1 - \\Big(\\sum_j x_j s_j(t_2)\\Big)^2

    volumetric values :math:`\\tilde H = H^\\circ p_2 / (Z R T_2)`, density
    :math:`\\rho = M p_2 / (Z R T_2)`, relative density
    :math:`d = (M / M_{air}) (Z_{air} / Z)`.

    Component values at 25 °C come from the ISO tables; values at other combustion
    temperatures are carried there by Kirchhoff's law with ideal-gas enthalpies (cp°
    fits to CoolProp's reference equations, :data:`CP0_COEFFICIENTS`) and IAPWS-IF97
    liquid water, the route by which the standard's own
    columns for other temperatures are related to its 25 °C column.  Summation factors
    are tabulated at 0, 15 and 20 °C; the volumetric basis is restricted to Z > 0.9.

    References
    ----------
    .. [1] ISO 6976:2016, Natural gas -- Calculation of calorific values, density,
       relative density and Wobbe indices from composition.

    Examples
    --------
    >>> gas = Gas({"methane": 1.0})
    >>> round(gas.superior_calorific_value("molar") / 1e3, 2)   # kJ/mol at 15 °C
    891.51
    >>> round(gas.compression_factor(), 5)
    0.99802
    """

    def __init__(self, composition: Mapping[str, float], *, normalise: bool = False):
        if not isinstance(composition, Mapping) or not composition:
            raise InputError(
                "The 'composition' parameter of Gas must be a non-empty mapping of "
                f"component name to mole fraction. Got {composition!r}.",
                parameter="composition",
            )
        fractions: dict[str, float] = {}
        for name, value in composition.items():
            canon = _lookup(name)
            try:
                x = float(value)
            except (TypeError, ValueError):
                raise InputError(
                    f"The mole fraction of {name!r} must be a number. Got {value!r}.",
                    parameter="composition",
                ) from None
            if not (0.0 <= x <= 1.0):
                raise InputError(
                    f"The mole fraction of {name!r} must lie between 0 and 1 (a fraction, "
                    f"not percent). Got {x!r}.",
                    parameter="composition",
                )
            if canon in fractions:
                raise InputError(
                    f"Component {canon!r} appears twice in the composition (as {name!r}).",
                    parameter="composition",
                )
            fractions[canon] = x
        total = math.fsum(fractions.values())
        if normalise:
            if total <= 0:
                raise InputError(
                    "The mole fractions of the composition sum to zero; nothing to normalise.",
                    parameter="composition",
                )
            fractions = {k: v / total for k, v in fractions.items()}
        elif abs(total - 1.0) > 1e-4:
            raise InputError(
                f"The mole fractions of the composition must sum to 1 within 1e-4. Got "
                f"{total:.6f}. Fix the analysis or pass normalise=True.",
                parameter="composition",
            )
        self.composition: dict[str, float] = fractions

    def __repr__(self) -> str:
        inner = ", ".join(f"{k}: {v:.6g}" for k, v in self.composition.items())
        return f"Gas({{{inner}}})"

    @property
    def molar_mass(self) -> float:
        """Molar mass of the mixture [kg/mol], :math:`M = \\sum_j x_j M_j`."""
        return math.fsum(x * COMPONENTS[k].molar_mass for k, x in self.composition.items())

    def compression_factor(self, metering_temperature: float = 288.15) -> float:
        """Compression factor Z at 101.325 kPa and the metering temperature [-].

        Parameters
        ----------
        metering_temperature : float [K]
            273.15, 288.15 or 293.15 K (the tabulated summation factors).
        """
        t2 = self._metering_key(metering_temperature)
        ssum = math.fsum(
            x * COMPONENTS[k].summation_factor[t2] for k, x in self.composition.items()
        )
        return 1.0 - ssum * ssum

    def _metering_key(self, T):
        t = float(T) - _T0
        for key in (0.0, 15.0, 20.0):
            if abs(t - key) < 1e-6:
                return key
        raise InputError(
            "The 'metering_temperature' must be 273.15 K, 288.15 K or 293.15 K (0, 15 or "
            f"20 °C, where ISO 6976 tabulates summation factors). Got {float(T):.2f} K.",
            parameter="metering_temperature",
        )

    def _molar(self, which, combustion_temperature):
        t1 = _check_celsius(combustion_temperature - _T0, "combustion_temperature", 0.0, 25.0)
        T1 = t1 + _T0
        hs = math.fsum(x * _superior_molar(k, T1) for k, x in self.composition.items())
        if which == "superior":
            return hs
        n_h = math.fsum(x * COMPONENTS[k].atoms[1] for k, x in self.composition.items())
        return hs - 0.5 * n_h * vaporisation_enthalpy(T1)

    def _value(self, which, basis, combustion_temperature, metering_temperature, metering_pressure):
        molar = self._molar(which, combustion_temperature)
        if basis == "molar":
            return molar
        if basis == "mass":
            return molar / self.molar_mass
        if basis == "volumetric":
            return molar * self._molar_density(metering_temperature, metering_pressure)
        raise InputError(
            f"The 'basis' must be 'molar', 'mass' or 'volumetric'. Got {basis!r}.",
            parameter="basis",
        )

    def _molar_density(self, metering_temperature, metering_pressure):
        Z = self.compression_factor(metering_temperature)
        if Z <= 0.9:
            raise InputError(
                f"The compression factor of this gas at metering conditions is {Z:.4f}; "
                "ISO 6976 restricts volumetric properties to Z > 0.9.",
                parameter="composition",
            )
        p = float(metering_pressure)
        if not p > 0:
            raise InputError(
                f"The 'metering_pressure' must be a positive absolute pressure [Pa]. Got {p!r}.",
                parameter="metering_pressure",
            )
        return p / (Z * R_ISO * float(metering_temperature))

    def superior_calorific_value(
        self,
        basis="mass",
        *,
        combustion_temperature=288.15,
        metering_temperature=288.15,
        metering_pressure=P_REF,
    ):
        """Superior (gross) calorific value.

        Parameters
        ----------
        basis : {"molar", "mass", "volumetric"}
            Result in J/mol, J/kg or J/m3 (real gas at metering conditions).
        combustion_temperature : float [K]
            Between 273.15 and 298.15 K.
        metering_temperature : float [K]
            273.15, 288.15 or 293.15 K; volumetric basis only.
        metering_pressure : float [Pa]
            Volumetric basis only.

        Returns
        -------
        float [J/mol], [J/kg] or [J/m3]
        """
        return self._value(
            "superior", basis, combustion_temperature, metering_temperature, metering_pressure
        )

    def inferior_calorific_value(
        self,
        basis="mass",
        *,
        combustion_temperature=288.15,
        metering_temperature=288.15,
        metering_pressure=P_REF,
    ):
        """Inferior (net) calorific value; arguments as :meth:`superior_calorific_value`.

        Examples
        --------
        >>> round(Gas({"CH4": 1}).inferior_calorific_value("mass") / 1e6, 2)  # MJ/kg
        50.03
        """
        return self._value(
            "inferior", basis, combustion_temperature, metering_temperature, metering_pressure
        )

    def density(self, metering_temperature=288.15, metering_pressure=P_REF) -> float:
        """Real-gas density at metering conditions [kg/m3]."""
        return self.molar_mass * self._molar_density(metering_temperature, metering_pressure)

    def relative_density(self, metering_temperature=288.15) -> float:
        """Real-gas relative density against dry air at the same conditions [-]."""
        t2 = self._metering_key(metering_temperature)
        Z = self.compression_factor(metering_temperature)
        return (self.molar_mass / M_AIR) * (Z_AIR[t2] / Z)

    def properties(
        self, *, combustion_temperature=288.15, metering_temperature=288.15, metering_pressure=P_REF
    ) -> GasProperties:
        """All properties at one set of reference conditions.

        Examples
        --------
        >>> props = Gas({"methane": 0.9, "ethane": 0.06, "nitrogen": 0.04}).properties()
        >>> round(props.superior_volumetric / 1e6, 1)   # MJ/m3 at 15 °C/15 °C
        38.0
        """
        kw = dict(
            combustion_temperature=combustion_temperature,
            metering_temperature=metering_temperature,
            metering_pressure=metering_pressure,
        )
        hs_vol = self.superior_calorific_value("volumetric", **kw)
        d = self.relative_density(metering_temperature)
        return GasProperties(
            combustion_temperature=float(combustion_temperature),
            metering_temperature=float(metering_temperature),
            metering_pressure=float(metering_pressure),
            molar_mass=self.molar_mass,
            compression_factor=self.compression_factor(metering_temperature),
            superior_molar=self.superior_calorific_value("molar", **kw),
            inferior_molar=self.inferior_calorific_value("molar", **kw),
            superior_mass=self.superior_calorific_value("mass", **kw),
            inferior_mass=self.inferior_calorific_value("mass", **kw),
            superior_volumetric=hs_vol,
            inferior_volumetric=self.inferior_calorific_value("volumetric", **kw),
            density=self.density(metering_temperature, metering_pressure),
            relative_density=d,
            superior_wobbe_index=hs_vol / math.sqrt(d),
        )
