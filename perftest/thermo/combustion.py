"""Combustion of a fuel with air: stoichiometry, excess air, flue gas, dew points.

Pure numeric functions with named physical arguments, SI inside (fractions, K, Pa,
kg/kg, mol/kg), floats in and out (one operating point).  Every result is per kg of
fuel *as fired*.

Fuels
-----
Every function takes the fuel as its first argument, `composition`: a gas by
components (mole fractions by component name, exactly as ``[fuel] composition`` in
the plant file), or a liquid or solid fuel by ultimate analysis (mass fractions C, H,
O, N, S, moisture, ash, as an :class:`~perftest.thermo.fuel_analysis.UltimateAnalysis`
or a mapping with those keys).  See :mod:`perftest.thermo.fuel_analysis` for the
forms and their checks (mole fractions sum to 1 within 1e-4, mass fractions within
1e-3).

Model
-----
Complete combustion: C -> CO2 (except the measured CO), H -> H2O, S -> SO2, fuel N ->
N2; fuel O takes the place of air oxygen; moisture leaves as vapour; ash stays
behind.  Dry air is :data:`DRY_AIR` (mole fractions); its molar mass 28.9654 g/mol
agrees with ISO 6976:2016's 28.96546 g/mol.  Air moisture is given as humidity ratio
(kg water per kg dry air, :func:`air_humidity_ratio`).

With :math:`n_C, n_H, n_O, n_N, n_S` the atoms and :math:`n_W` the moisture (mol per
kg fuel), the stoichiometric oxygen is

.. math:: n_{O_2,st} = n_C + n_H / 4 + n_S - n_O / 2

and the stoichiometric dry air :math:`A_{st} = n_{O_2,st} / x_{O_2,air}` [mol/kg].
For dry air :math:`A = (1 + e) A_{st}` (excess air :math:`e`) and CO
:math:`n_{CO}` the flue gas holds
:math:`CO_2 = n_C - n_{CO} + x_{CO_2,air} A`, :math:`H_2O = n_H/2 + n_W + \\omega A`,
:math:`SO_2 = n_S`, :math:`N_2 = n_N/2 + x_{N_2,air} A`,
:math:`Ar = n_{Ar} + x_{Ar,air} A`,
:math:`O_2 = x_{O_2,air} A - n_{O_2,st} + n_{CO}/2`, with :math:`\\omega = W M_{air}/M_{H_2O}`
the molar humidity ratio.  The dry total is :math:`D = A + D_0 + n_{CO}/2`,
:math:`D_0 = n_C + n_S + n_N/2 + n_{Ar} - n_{O_2,st}`, and the wet total adds
:math:`H_0 + \\omega A`, :math:`H_0 = n_H/2 + n_W`.  Measured fractions :math:`y` on the
dry (:math:`\\omega_b = 0, H_b = 0`) or wet (:math:`\\omega_b = \\omega, H_b = H_0`)
basis give the air in closed form (below), so every result is a smooth (rational)
function of the measurements, ready to be linearised:

.. math::

    k = \\frac{y_{O_2} - y_{CO}/2}{1 - y_{CO}/2}, \\quad
    A = \\frac{n_{O_2,st} + k (D_0 + H_b)}{x_{O_2,air} - k (1 + \\omega_b)}

from oxygen, and from carbon dioxide

.. math::

    q = \\frac{y_{CO_2} + y_{CO}}{1 - y_{CO}/2}, \\quad
    A = \\frac{n_C - q (D_0 + H_b)}{q (1 + \\omega_b) - x_{CO_2,air}}.

These are the element balances of any combustion text, e.g. [1] Ch. 2 and [2] Ch. 15,
written for a general fuel; the closed forms are derived here.

References
----------
.. [1] S. R. Turns, An Introduction to Combustion, 2nd ed., McGraw-Hill, 2000.
.. [2] Y. A. Çengel, M. A. Boles, Thermodynamics: An Engineering Approach, McGraw-Hill.
.. [3] F. H. Verhoff, J. T. Banchero, Predicting dew points of flue gases, Chemical
   Engineering Progress 70 (8), 1974, 71-72.
.. [4] IAPWS R7-97(2012), IAPWS-IF97, Eq. 31 (saturation temperature).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

from perftest.errors import InputError, PropertyRangeError
from perftest.thermo.checks import check_fraction, check_number
from perftest.thermo.fuel_analysis import UltimateAnalysis, fuel_atoms, ultimate_analysis
from perftest.thermo.humid_air import humid_air_state
from perftest.thermo.ideal_gas import MOLAR_MASSES
from perftest.thermo.if97 import P_TRIPLE, if97_tsat

__all__ = [
    "DRY_AIR",
    "AIR_MOLAR_MASS",
    "UltimateAnalysis",
    "FlueGas",
    "ultimate_analysis",
    "stoichiometric_air",
    "maximum_co2",
    "excess_air_from_o2",
    "excess_air_from_co2",
    "flue_gas",
    "air_humidity_ratio",
    "water_dew_point",
    "acid_dew_point",
]

#: Composition of dry air, mole fractions (N2 78.084 %, O2 20.946 %, Ar 0.934 % as in
#: the standard atmosphere tables; CO2 0.036 % so that the sum is 1; from memory).
DRY_AIR = MappingProxyType({"N2": 0.78084, "O2": 0.20946, "Ar": 0.00934, "CO2": 0.00036})
#: Molar mass of dry air [kg/mol] from :data:`DRY_AIR` (28.9654 g/mol).
AIR_MOLAR_MASS = math.fsum(x * MOLAR_MASSES[k] for k, x in DRY_AIR.items())
_M_W = MOLAR_MASSES["H2O"]


def _basis(basis, func):
    if basis not in ("dry", "wet"):
        raise InputError(
            f"The 'basis' parameter of {func} must be 'dry' or 'wet'. Got {basis!r}.",
            parameter="basis",
        )
    return basis


def _humidity(value, func):
    return check_number(
        value,
        "air_humidity_ratio",
        func,
        0.0,
        0.5,
        "a humidity ratio in kg water per kg dry air between 0 and 0.5",
    )


# --------------------------------------------------------------------------------------
# stoichiometry
# --------------------------------------------------------------------------------------
def stoichiometric_air(composition) -> float:
    """Dry air for complete combustion with no excess [kg dry air / kg fuel].

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas
        Gas mole fractions by component name (as ``[fuel] composition``), or an
        ultimate analysis (mass fractions); see the module docstring.

    Returns
    -------
    float [kg/kg]

    Raises
    ------
    InputError
        Unknown component, fractions out of range or not summing to 1, a fuel that
        needs no oxygen; the message names the 'composition' parameter.

    Notes
    -----
    :math:`m_{air,st} = M_{air} (n_C + n_H/4 + n_S - n_O/2) / x_{O_2,air}` per kg fuel.

    Examples
    --------
    >>> round(stoichiometric_air({"methane": 1.0}), 3)
    17.24
    """
    f = fuel_atoms(composition, "stoichiometric_air")
    return f.o2_stoich / DRY_AIR["O2"] * AIR_MOLAR_MASS


def maximum_co2(composition) -> float:
    """Largest CO2 content of the dry flue gas: stoichiometric, complete combustion [-].

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas

    Returns
    -------
    float
        Mole fraction of CO2 in the dry flue gas (0.1174 = 11.74 %), counting the CO2 of
        the air.

    Examples
    --------
    >>> round(maximum_co2({"methane": 1.0}), 4)
    0.1174
    """
    f = fuel_atoms(composition, "maximum_co2")
    A = f.o2_stoich / DRY_AIR["O2"]
    return (f.C + DRY_AIR["CO2"] * A) / (A + f.d0)


def _molar_humidity(W):
    return W * AIR_MOLAR_MASS / _M_W


def _check_air(f, A, co_moles, func, culprit):
    """Refuse an air quantity that gives negative products (culprit names the input)."""
    o2 = DRY_AIR["O2"] * A - f.o2_stoich + co_moles / 2.0
    if not (A > 0.0 and math.isfinite(A)) or o2 < -1e-12 * f.o2_stoich:
        raise InputError(
            f"The {culprit[0]!r} parameter of {func} is not possible for this fuel: "
            f"{culprit[1]}. Got {culprit[2]!r}.",
            parameter=culprit[0],
        )
    if f.C - co_moles < -1e-12 * max(f.C, 1e-300):
        raise InputError(
            f"The 'carbon_monoxide' parameter of {func} asks for more CO than the fuel has "
            f"carbon. Got {culprit[3]!r}.",
            parameter="carbon_monoxide",
        )


def excess_air_from_o2(
    composition, oxygen, *, basis="dry", carbon_monoxide=0.0, air_humidity_ratio=0.0
) -> float:
    """Excess air from the oxygen measured in the flue gas.

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas
    oxygen : float [-]
        Mole (volume) fraction of O2 in the flue gas, e.g. 0.03 for 3 %.
    basis : {"dry", "wet"}
        Whether `oxygen` and `carbon_monoxide` are fractions of the dry gas (extractive
        analyser with a sample cooler) or of the wet gas (in-situ probe).
    carbon_monoxide : float [-]
        Mole fraction of CO on the same basis (e.g. 50e-6 for 50 ppm).
    air_humidity_ratio : float [kg/kg]
        Water per kg of dry combustion air; used on the wet basis only.

    Returns
    -------
    float [-]
        Excess air :math:`e = A / A_{st} - 1` (0.15 = 15 %).

    Raises
    ------
    InputError
        A fraction out of range (the parameter is named), or an oxygen content that
        this fuel cannot produce.

    Notes
    -----
    Closed form from the oxygen and dry (or wet) total balances, see the module
    docstring.  Unlike the rule of thumb :math:`e \\approx y_{O_2}/(0.2095 - y_{O_2})`
    it accounts for the contraction of the gas (H2O leaving the dry sample) and for
    the fuel's own inerts.

    Examples
    --------
    >>> round(excess_air_from_o2({"methane": 1.0}, 0.03), 4)
    0.1497
    """
    func = "excess_air_from_o2"
    f = fuel_atoms(composition, func)
    basis = _basis(basis, func)
    y = check_fraction(oxygen, "oxygen", func, hi=DRY_AIR["O2"])
    co = check_fraction(carbon_monoxide, "carbon_monoxide", func, hi=0.1)
    w = _molar_humidity(_humidity(air_humidity_ratio, func)) if basis == "wet" else 0.0
    hb = f.h0 if basis == "wet" else 0.0
    k = (y - co / 2.0) / (1.0 - co / 2.0)
    den = DRY_AIR["O2"] - k * (1.0 + w)
    A = (f.o2_stoich + k * (f.d0 + hb)) / den if den > 0 else math.nan
    n_co = co * (A * (1.0 + w) + f.d0 + hb) / (1.0 - co / 2.0) if den > 0 else 0.0
    _check_air(
        f,
        A,
        n_co,
        func,
        ("oxygen", "no excess air gives that much oxygen", oxygen, carbon_monoxide),
    )
    return A / (f.o2_stoich / DRY_AIR["O2"]) - 1.0


def excess_air_from_co2(
    composition, carbon_dioxide, *, basis="dry", carbon_monoxide=0.0, air_humidity_ratio=0.0
) -> float:
    """Excess air from the carbon dioxide measured in the flue gas.

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas
        Must contain carbon.
    carbon_dioxide : float [-]
        Mole fraction of CO2 in the flue gas (0.10 for 10 %), at most
        :func:`maximum_co2` on the dry basis.
    basis : {"dry", "wet"}
    carbon_monoxide : float [-]
        Mole fraction of CO on the same basis.
    air_humidity_ratio : float [kg/kg]
        Used on the wet basis only.

    Returns
    -------
    float [-]
        Excess air (0.15 = 15 %).

    Raises
    ------
    InputError
        A fuel without carbon, a fraction out of range, or more CO2 than the fuel can
        produce.

    Notes
    -----
    The CO2 reading is less sensitive to excess air than the O2 reading at low excess
    air and depends on the fuel's carbon-to-hydrogen ratio; prefer oxygen where both
    are logged, and use the two together as a check (they agree on a consistent gas).

    Examples
    --------
    >>> round(excess_air_from_co2({"methane": 1.0}, 0.10), 4)
    0.1562
    """
    func = "excess_air_from_co2"
    f = fuel_atoms(composition, func)
    if f.C <= 0.0:
        raise InputError(
            f"The 'composition' parameter of {func} has no carbon, so CO2 says nothing about the "
            f"excess air; use excess_air_from_o2. Got {composition!r}.",
            parameter="composition",
        )
    basis = _basis(basis, func)
    y = check_fraction(carbon_dioxide, "carbon_dioxide", func)
    co = check_fraction(carbon_monoxide, "carbon_monoxide", func, hi=0.1)
    w = _molar_humidity(_humidity(air_humidity_ratio, func)) if basis == "wet" else 0.0
    hb = f.h0 if basis == "wet" else 0.0
    q = (y + co) / (1.0 - co / 2.0)
    den = q * (1.0 + w) - DRY_AIR["CO2"]
    A = (f.C - q * (f.d0 + hb)) / den if den > 0 else math.nan
    n_co = co * (A * (1.0 + w) + f.d0 + hb) / (1.0 - co / 2.0) if den > 0 else 0.0
    _check_air(
        f,
        A,
        n_co,
        func,
        (
            "carbon_dioxide",
            f"the fuel gives at most {maximum_co2(composition):.4f} CO2 in the dry gas",
            carbon_dioxide,
            carbon_monoxide,
        ),
    )
    return A / (f.o2_stoich / DRY_AIR["O2"]) - 1.0


# --------------------------------------------------------------------------------------
# flue gas
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FlueGas:
    """Flue gas of 1 kg of fuel (complete combustion apart from the given CO).

    Attributes
    ----------
    excess_air : [-]
        :math:`A / A_{st} - 1`.
    dry_air : [kg/kg fuel]
        Dry combustion air.
    air_moisture : [kg/kg fuel]
        Water brought in by the air.
    mass : [kg/kg fuel]
        Wet flue gas; equals 1 - ash + dry_air + air_moisture (mass balance).
    dry_mass : [kg/kg fuel]
        Flue gas without its water vapour.
    moles : mapping species -> [mol/kg fuel]
        CO2, CO, H2O, SO2, N2, O2, Ar.
    wet, dry : mapping species -> [-]
        Mole fractions in the wet gas, and in the dry gas (no H2O key).
    molar_mass : [kg/mol]
        Of the wet gas.
    water_from_hydrogen, water_from_fuel_moisture, water_from_air : [kg/kg fuel]
        The water vapour by origin (the three moisture losses of the heat-loss method).
    ash : [kg/kg fuel]
        Ash left behind (not part of the gas).
    """

    excess_air: float
    dry_air: float
    air_moisture: float
    mass: float
    dry_mass: float
    moles: Mapping[str, float]
    wet: Mapping[str, float]
    dry: Mapping[str, float]
    molar_mass: float
    water_from_hydrogen: float
    water_from_fuel_moisture: float
    water_from_air: float
    ash: float

    def __repr__(self) -> str:
        parts = ", ".join(f"{k} {100 * v:.3g} %" for k, v in self.dry.items() if v > 0)
        return (
            f"FlueGas(excess_air={self.excess_air:.4g}, mass={self.mass:.5g} kg/kg fuel, "
            f"dry: {parts})"
        )

    def water_dew_point(self, pressure: float = 101325.0) -> float:
        """Water dew point of this gas at `pressure` [Pa] [K] (:func:`water_dew_point`)."""
        return water_dew_point(self.wet["H2O"], pressure)

    def acid_dew_point(self, pressure: float = 101325.0, *, so3_conversion: float = 0.02):
        """Sulfuric-acid dew point [K], or None for a gas without SO2 (:func:`acid_dew_point`).

        `so3_conversion` is the fraction of SO2 oxidised to SO3 [-] (common practice,
        no source: 1 to 5 % in oil- and coal-fired boilers; 2 % by default).
        """
        so2 = self.wet["SO2"]
        if so2 <= 0.0:
            return None
        conv = check_number(
            so3_conversion, "so3_conversion", "FlueGas.acid_dew_point", 0.0, 1.0, "between 0 and 1"
        )
        if conv == 0.0:
            return None
        return acid_dew_point(self.wet["H2O"], conv * so2, pressure)


def flue_gas(
    composition, excess_air, *, air_humidity_ratio=0.0, carbon_monoxide=0.0, basis="dry"
) -> FlueGas:
    """Composition and amount of the flue gas of 1 kg of fuel.

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas
    excess_air : float [-]
        :math:`A / A_{st} - 1` (0.15 for 15 %), from :func:`excess_air_from_o2` or
        :func:`excess_air_from_co2`.
    air_humidity_ratio : float [kg/kg]
        Water per kg of dry air (:func:`air_humidity_ratio`).
    carbon_monoxide : float [-]
        Mole fraction of CO in the flue gas on `basis`.
    basis : {"dry", "wet"}
        Basis of `carbon_monoxide`.

    Returns
    -------
    FlueGas

    Raises
    ------
    InputError
        Excess air below -1, fractions out of range, or a CO content the fuel's carbon
        or the air's oxygen cannot supply.

    Examples
    --------
    >>> fg = flue_gas({"methane": 1.0}, 0.15)
    >>> round(fg.dry["O2"], 4), round(fg.mass, 3)
    (0.0301, 20.826)
    """
    func = "flue_gas"
    f = fuel_atoms(composition, func)
    e = check_number(excess_air, "excess_air", func, -1.0 + 1e-12, math.inf, "a number above -1")
    W = _humidity(air_humidity_ratio, func)
    basis = _basis(basis, func)
    co = check_fraction(carbon_monoxide, "carbon_monoxide", func, hi=0.1)
    w = _molar_humidity(W)
    A = (1.0 + e) * f.o2_stoich / DRY_AIR["O2"]
    wb, hb = (w, f.h0) if basis == "wet" else (0.0, 0.0)
    n_co = co * (A * (1.0 + wb) + f.d0 + hb) / (1.0 - co / 2.0)
    _check_air(
        f, A, n_co, func, ("excess_air", "the air is too little to burn the fuel", excess_air, co)
    )
    moles = {
        "CO2": f.C - n_co + DRY_AIR["CO2"] * A,
        "CO": n_co,
        "H2O": f.h0 + w * A,
        "SO2": f.S,
        "N2": f.N / 2.0 + DRY_AIR["N2"] * A,
        "O2": DRY_AIR["O2"] * A - f.o2_stoich + n_co / 2.0,
        "Ar": f.Ar + DRY_AIR["Ar"] * A,
    }
    total = math.fsum(moles.values())
    dry_total = total - moles["H2O"]
    mass = math.fsum(n * MOLAR_MASSES[k] for k, n in moles.items())
    return FlueGas(
        excess_air=e,
        dry_air=A * AIR_MOLAR_MASS,
        air_moisture=W * A * AIR_MOLAR_MASS,
        mass=mass,
        dry_mass=mass - moles["H2O"] * _M_W,
        moles=MappingProxyType(moles),
        wet=MappingProxyType({k: n / total for k, n in moles.items()}),
        dry=MappingProxyType({k: n / dry_total for k, n in moles.items() if k != "H2O"}),
        molar_mass=mass / total,
        water_from_hydrogen=f.H / 2.0 * _M_W,
        water_from_fuel_moisture=f.W * _M_W,
        water_from_air=w * A * _M_W,
        ash=f.ash,
    )


# --------------------------------------------------------------------------------------
# combustion air and dew points
# --------------------------------------------------------------------------------------
def air_humidity_ratio(temperature, pressure, relative_humidity):
    """Humidity ratio of the combustion air [kg water / kg dry air].

    Parameters
    ----------
    temperature : float, array or Series [K]
        Dry-bulb temperature of the air.
    pressure : float, array or Series [Pa]
        Barometric (absolute) pressure.
    relative_humidity : float, array or Series [-]
        0 to 1 (not percent).

    Returns
    -------
    same kind as the inputs [kg/kg]

    Notes
    -----
    CoolProp's ``HAPropsSI`` (real moist air, ASHRAE RP-1485) through
    :func:`perftest.thermo.humid_air.humid_air_state`.

    Examples
    --------
    >>> round(air_humidity_ratio(298.15, 101325.0, 0.6), 5)
    0.01195
    """
    return humid_air_state(
        temperature, pressure, relative_humidity=relative_humidity, where="combustion air"
    ).humidity_ratio


def water_dew_point(water_mole_fraction, pressure=101325.0) -> float:
    """Water dew point of a flue gas [K].

    Parameters
    ----------
    water_mole_fraction : float [-]
        Mole fraction of H2O in the wet gas (``FlueGas.wet["H2O"]``).
    pressure : float [Pa]
        Absolute pressure of the gas.

    Returns
    -------
    float [K]
        Saturation temperature of water at the partial pressure
        :math:`p_w = y_{H_2O}\\, p` (IAPWS-IF97 Eq. 31 [4]).

    Raises
    ------
    PropertyRangeError
        A partial pressure below the triple point (dew point below 0 °C: frost).

    Examples
    --------
    >>> round(water_dew_point(0.18, 101325.0) - 273.15, 1)   # °C
    58.1
    """
    func = "water_dew_point"
    y = check_fraction(water_mole_fraction, "water_mole_fraction", func)
    p = check_number(
        pressure, "pressure", func, 1e3, 1e7, "an absolute pressure in Pa (1 kPa-10 MPa)"
    )
    pw = y * p
    if pw < P_TRIPLE:
        raise PropertyRangeError(
            f"The water partial pressure {pw:.4g} Pa of {func} is below the triple point "
            f"({P_TRIPLE:.6g} Pa): the gas would deposit frost, not dew."
        )
    return float(if97_tsat(pw))


def acid_dew_point(water_mole_fraction, so3_mole_fraction, pressure=101325.0) -> float:
    """Sulfuric-acid dew point of a flue gas [K].

    Parameters
    ----------
    water_mole_fraction : float [-]
        Mole fraction of H2O in the wet gas.
    so3_mole_fraction : float [-]
        Mole fraction of SO3 (H2SO4 vapour) in the wet gas, above 0.  Typically 1 to 5 %
        of the SO2 (``FlueGas.acid_dew_point`` takes that fraction).
    pressure : float [Pa]

    Returns
    -------
    float [K]

    Notes
    -----
    Verhoff and Banchero [3] (from memory), partial pressures in mmHg:

    .. math::

        \\frac{1000}{T_{dp}} = 2.276 - 0.0294 \\ln p_{H_2O} - 0.0858 \\ln p_{SO_3}
        + 0.0062 \\ln p_{H_2O} \\ln p_{SO_3}

    fitted to sulfuric-acid vapour-liquid equilibrium data; about +/- 6 K.  Valid for
    the usual flue-gas range (a few ppm to a few hundred ppm SO3, 2 to 20 % H2O).

    Examples
    --------
    >>> round(acid_dew_point(0.10, 10e-6) - 273.15)   # °C
    137
    """
    func = "acid_dew_point"
    yw = check_fraction(water_mole_fraction, "water_mole_fraction", func)
    ys = check_fraction(so3_mole_fraction, "so3_mole_fraction", func, hi=0.01)
    p = check_number(
        pressure, "pressure", func, 1e3, 1e7, "an absolute pressure in Pa (1 kPa-10 MPa)"
    )
    if yw <= 0.0 or ys <= 0.0:
        name = "water_mole_fraction" if yw <= 0.0 else "so3_mole_fraction"
        raise InputError(
            f"The {name!r} parameter of {func} must be above 0 (the correlation takes its "
            f"logarithm). Got {water_mole_fraction if yw <= 0 else so3_mole_fraction!r}.",
            parameter=name,
        )
    mmhg = p / 133.322387415
    lw, ls = math.log(yw * mmhg), math.log(ys * mmhg)
    return 1000.0 / (2.276 - 0.0294 * lw - 0.0858 * ls + 0.0062 * lw * ls)
