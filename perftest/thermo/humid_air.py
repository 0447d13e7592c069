"""Humid air (moist air) through CoolProp's ``HAPropsSI``: :func:`humid_air_state`."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from perftest.errors import InputError, PropertyRangeError
from perftest.thermo.checks import Args, prefix
from perftest.thermo.coolprop_core import _ha_props_si

__all__ = ["HumidAir", "humid_air_state"]


@dataclass(frozen=True)
class HumidAir:
    """State of moist air (floats, ndarrays or Series).

    Attributes
    ----------
    T : dry-bulb temperature [K]
    p : total pressure [Pa]
    relative_humidity : [-] (0 to 1)
    humidity_ratio : mass of water vapour per mass of dry air [kg/kg]
    wet_bulb : thermodynamic wet-bulb temperature [K]
    dew_point : dew-point temperature [K]
    h : specific enthalpy per kg of dry air [J/kg]
    volume : specific volume per kg of dry air [m3/kg]
    """

    T: object
    p: object
    relative_humidity: object
    humidity_ratio: object
    wet_bulb: object
    dew_point: object
    h: object
    volume: object


_HA_INPUT = {
    "relative_humidity": "R",
    "humidity_ratio": "W",
    "wet_bulb": "B",
    "dew_point": "D",
}


def humid_air_state(
    T,
    p,
    *,
    relative_humidity=None,
    humidity_ratio=None,
    wet_bulb=None,
    dew_point=None,
    where=None,
) -> HumidAir:
    """Psychrometric state of moist air.

    Give the dry-bulb temperature, the total pressure and exactly one of the moisture
    inputs.

    Parameters
    ----------
    T : float, array or Series [K]
        Dry-bulb temperature.
    p : float, array or Series [Pa]
        Total (barometric) pressure.
    relative_humidity : float, array or Series [-], optional
        0 to 1 (not percent).
    humidity_ratio : float, array or Series [kg/kg], optional
        Mass of water vapour per mass of dry air.
    wet_bulb : float, array or Series [K], optional
        Thermodynamic wet-bulb temperature.
    dew_point : float, array or Series [K], optional
        Dew-point temperature.
    where : str, optional
        Names the measurement in error messages.

    Returns
    -------
    HumidAir

    Raises
    ------
    InputError
        Not exactly one moisture input, or relative humidity outside 0..1.
    PropertyRangeError
        A state CoolProp's humid-air model cannot evaluate (e.g. dew point above the
        dry bulb).

    Notes
    -----
    CoolProp's ``HAPropsSI`` implements the real-gas humid-air model of Herrmann,
    Kretzschmar and Gatley [1] (ASHRAE RP-1485), with enhancement factors and virial
    coefficients; it reduces to the ideal relations
    :math:`W = 0.621945\\, p_w / (p - p_w)` at low pressure.

    References
    ----------
    .. [1] S. Herrmann, H.-J. Kretzschmar, D. P. Gatley, Thermodynamic Properties of
       Real Moist Air, Dry Air, Steam, Water, and Ice, ASHRAE RP-1485, 2009.

    Examples
    --------
    >>> ha = humid_air_state(293.15, 101325.0, relative_humidity=1.0)
    >>> round(ha.humidity_ratio, 5)
    0.01476
    """
    given = {
        k: v
        for k, v in {
            "relative_humidity": relative_humidity,
            "humidity_ratio": humidity_ratio,
            "wet_bulb": wet_bulb,
            "dew_point": dew_point,
        }.items()
        if v is not None
    }
    if len(given) != 1:
        raise InputError(
            "humid_air_state needs exactly one of relative_humidity, humidity_ratio, "
            f"wet_bulb, dew_point. Got {sorted(given) or 'none'}."
        )
    ((kind, value),) = given.items()
    HAPropsSI = _ha_props_si()

    args = Args("humid_air_state", T=T, p=p, value=value)
    TT, pp, vv = args.flat
    if kind == "relative_humidity" and ((vv < 0) | (vv > 1)).any():
        bad = vv[(vv < 0) | (vv > 1)][0]
        raise InputError(
            f"{prefix(where)}relative_humidity must be a fraction between 0 and 1 (not "
            f"percent). Got {bad!r}.",
            parameter="relative_humidity",
        )
    key = _HA_INPUT[kind]
    outs = {
        "relative_humidity": "R",
        "humidity_ratio": "W",
        "wet_bulb": "B",
        "dew_point": "D",
        "h": "Hda",
        "volume": "Vda",
    }
    res = {k: np.full(TT.size, np.nan) for k in outs}
    for i in range(TT.size):
        if TT[i] != TT[i] or pp[i] != pp[i] or vv[i] != vv[i]:
            continue
        for k, code in outs.items():
            if k == kind:
                res[k][i] = vv[i]
                continue
            try:
                res[k][i] = HAPropsSI(code, "T", TT[i], "P", pp[i], key, vv[i])
            except (ValueError, IndexError, RuntimeError) as exc:
                raise PropertyRangeError(
                    f"{prefix(where)}humid air at T = {TT[i]:.2f} K, p = {pp[i]:.6g} Pa, "
                    f"{kind} = {vv[i]:.6g} cannot be evaluated: {exc}"
                ) from None
            if not math.isfinite(res[k][i]):
                raise PropertyRangeError(
                    f"{prefix(where)}humid air at T = {TT[i]:.2f} K, p = {pp[i]:.6g} Pa, "
                    f"{kind} = {vv[i]:.6g} is not a physical state (check that the dew "
                    "point and wet bulb do not exceed the dry bulb)."
                )
    return HumidAir(
        T=args.out(TT),
        p=args.out(pp),
        relative_humidity=args.out(res["relative_humidity"]),
        humidity_ratio=args.out(res["humidity_ratio"]),
        wet_bulb=args.out(res["wet_bulb"]),
        dew_point=args.out(res["dew_point"]),
        h=args.out(res["h"]),
        volume=args.out(res["volume"]),
    )
