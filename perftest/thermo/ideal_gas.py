"""Ideal-gas heat capacity and enthalpy of the flue-gas species, and their molar masses.

The species of combustion air and flue gas (N2, O2, Ar, CO2, H2O, SO2, CO) behave as
ideal gases at the pressures and temperatures of a boiler's flue-gas path, so their
sensible heat is the integral of the ideal-gas isobaric heat capacity
:math:`c_p^\\circ(T)`.  The heat capacities are stored as polynomials (no equation of
state is evaluated at run time), which keeps every loss of the heat-loss method a
smooth, cheap function of the temperatures: the reconciliation linearises it.

Functions take floats or numpy arrays; temperatures in K, molar quantities per mol.
"""

from __future__ import annotations

import math

import numpy as np

from perftest.errors import InputError

__all__ = [
    "ATOMIC_MASSES",
    "MOLAR_MASSES",
    "CP0_FLUE_GAS",
    "CP0_FLUE_GAS_RANGE",
    "R_MOLAR",
    "ideal_gas_heat_capacity",
    "ideal_gas_enthalpy_change",
    "mixture_enthalpy_change",
]

#: Molar gas constant [J/(mol K)] (CODATA 2018, exact since the 2019 SI; from memory).
R_MOLAR = 8.314462618

#: Standard atomic weights [kg/mol] (IUPAC 2007 values, the ones behind the molar masses
#: of ISO 6976:2016 Table 1; from memory).  With them the molar masses of the fuel-gas
#: components in :data:`perftest.thermo.fuel.COMPONENTS` come out exactly (methane
#: 16.04246 g/mol, ethane 30.06904 g/mol, carbon monoxide 28.0101 g/mol ...).
ATOMIC_MASSES = {
    "C": 12.0107e-3,
    "H": 1.00794e-3,
    "O": 15.9994e-3,
    "N": 14.0067e-3,
    "S": 32.065e-3,
    "Ar": 39.948e-3,
}

_A = ATOMIC_MASSES
#: Molar masses of the flue-gas species [kg/mol], summed from :data:`ATOMIC_MASSES` so
#: that the mass balance fuel + air = flue gas + ash closes to round-off.
MOLAR_MASSES = {
    "CO2": _A["C"] + 2 * _A["O"],
    "CO": _A["C"] + _A["O"],
    "H2O": 2 * _A["H"] + _A["O"],
    "SO2": _A["S"] + 2 * _A["O"],
    "N2": 2 * _A["N"],
    "O2": 2 * _A["O"],
    "Ar": _A["Ar"],
}

#: Ideal-gas isobaric molar heat capacity as a polynomial in tau = T / 1000 K:
#: cp°(T) / R = a0 + a1 tau + ... + a6 tau^6, with R = :data:`R_MOLAR`.
#: Fitted once (least squares, 309 points, 230-1000 K) to the ideal-gas part of the
#: reference equations of state in CoolProp 8.0.0 (``AbstractState.cp0molar``; IAPWS-95
#: for water).  Largest deviation over the range: 1.1e-3 relative in cp° at the ends,
#: 0.6 J/mol in H°(T) - H°(298.15 K) (below 1.5e-4 of the enthalpy change above 350 K).
#: Argon's cp° is 5R/2 exactly.  tests/thermo/test_combustion.py recomputes the enthalpy
#: changes with CoolProp.
CP0_FLUE_GAS: dict[str, tuple[float, ...]] = {
    "N2": (
        3.286102749,
        2.809946727,
        -13.97571331,
        32.62725483,
        -36.27725924,
        19.70980559,
        -4.247166706,
    ),
    "O2": (
        3.760019431,
        -2.283935942,
        4.412712099,
        8.005239594,
        -25.03268888,
        21.90926522,
        -6.576618984,
    ),
    "CO2": (
        2.459504519,
        6.926103716,
        5.809974444,
        -34.04354715,
        51.35315145,
        -35.51037277,
        9.538470513,
    ),
    "H2O": (
        4.266677138,
        -2.489918209,
        6.938500156,
        -2.3877419,
        -7.352003309,
        9.245424186,
        -3.258294716,
    ),
    "Ar": (2.5, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0),
    "SO2": (
        4.106303079,
        -2.796081947,
        31.48516836,
        -63.96132572,
        61.55295777,
        -29.45298,
        5.618967885,
    ),
    "CO": (
        3.268660711,
        3.254894978,
        -17.45308482,
        44.15892252,
        -53.54374125,
        31.81253573,
        -7.508119246,
    ),
}
#: Temperature range of the cp° fits [K].
CP0_FLUE_GAS_RANGE = (230.0, 1000.0)


def _species(species, func):
    if species not in CP0_FLUE_GAS:
        raise InputError(
            f"The 'species' parameter of {func} must be one of {', '.join(CP0_FLUE_GAS)}. "
            f"Got {species!r}.",
            parameter="species",
        )
    return CP0_FLUE_GAS[species]


def check_temperature(value, name, func):
    """Return `value` as float or ndarray [K], refusing values outside the cp° fits."""
    arr = np.asarray(value, dtype=float)
    lo, hi = CP0_FLUE_GAS_RANGE
    bad = ~((arr >= lo) & (arr <= hi))
    if np.any(bad):
        got = arr[bad].flat[0] if arr.ndim else float(arr)
        raise InputError(
            f"The {name!r} parameter of {func} must be an absolute temperature between "
            f"{lo:g} K and {hi:g} K (the range of the flue-gas heat capacities). Got {got!r}.",
            parameter=name,
        )
    return float(arr) if arr.ndim == 0 else arr


def ideal_gas_heat_capacity(species, temperature):
    """Ideal-gas isobaric molar heat capacity of a flue-gas species.

    Parameters
    ----------
    species : {"N2", "O2", "Ar", "CO2", "H2O", "SO2", "CO"}
    temperature : float or ndarray [K]
        230 K to 1000 K.

    Returns
    -------
    cp0 : float or ndarray [J/(mol K)]

    Raises
    ------
    InputError
        Unknown species or a temperature outside the fitted range.

    Notes
    -----
    :math:`c_p^\\circ / R = \\sum_{k=0}^{6} a_k \\tau^k`, :math:`\\tau = T / 1000\\,K`,
    coefficients :data:`CP0_FLUE_GAS`.

    Examples
    --------
    >>> round(ideal_gas_heat_capacity("N2", 300.0), 2)
    29.13
    """
    a = _species(species, "ideal_gas_heat_capacity")
    T = check_temperature(temperature, "temperature", "ideal_gas_heat_capacity")
    tau = np.asarray(T) / 1000.0
    out = R_MOLAR * np.polynomial.polynomial.polyval(tau, a)
    return float(out) if np.ndim(out) == 0 else out


def _h(a, T):
    # integral of cp° from 0 in tau (the constant cancels in every difference) [J/mol]
    tau = T / 1000.0
    s = 0.0
    for k in range(len(a) - 1, -1, -1):
        s = s * tau + a[k] / (k + 1)
    return R_MOLAR * 1000.0 * s * tau


def ideal_gas_enthalpy_change(species, temperature_from, temperature_to):
    """Ideal-gas molar enthalpy change of a flue-gas species between two temperatures.

    Parameters
    ----------
    species : {"N2", "O2", "Ar", "CO2", "H2O", "SO2", "CO"}
    temperature_from, temperature_to : float or ndarray [K]
        230 K to 1000 K.

    Returns
    -------
    dh : float or ndarray [J/mol]
        :math:`H^\\circ(T_{to}) - H^\\circ(T_{from}) = \\int c_p^\\circ\\,dT`; negative when
        `temperature_to` is the lower.

    Examples
    --------
    >>> round(ideal_gas_enthalpy_change("CO2", 298.15, 473.15))   # J/mol
    7121
    """
    a = _species(species, "ideal_gas_enthalpy_change")
    T1 = check_temperature(temperature_from, "temperature_from", "ideal_gas_enthalpy_change")
    T2 = check_temperature(temperature_to, "temperature_to", "ideal_gas_enthalpy_change")
    out = _h(a, np.asarray(T2, dtype=float)) - _h(a, np.asarray(T1, dtype=float))
    return float(out) if np.ndim(out) == 0 else out


def mixture_enthalpy_change(moles, T1, T2):
    """Enthalpy change of a gas mixture [J].

    :math:`\\sum_i n_i [H^\\circ_i(T_2) - H^\\circ_i(T_1)]`.

    `moles` maps species to amounts [mol]; `T1`, `T2` [K] are not checked (callers check
    them with :func:`check_temperature`).
    """
    return math.fsum(
        n * (_h(CP0_FLUE_GAS[k], T2) - _h(CP0_FLUE_GAS[k], T1)) for k, n in moles.items()
    )
