"""Performance figures of thermal plants: first and second law.

One published relation per function; arguments are named physical quantities in
SI units (W, K, J/J).  Every function accepts floats, numpy arrays and pandas
Series (a Series in gives a Series out with the same index).  NaN passes through.

Heat rate is kept in J/J (heat in per electrical energy out) inside perftest;
:func:`to_kj_per_kwh` and :func:`to_btu_per_kwh` (and their inverses) convert for
display.  1 kWh = 3600 kJ; 1 Btu (International Table) = 1.055 055 852 62 kJ
exactly, by definition of the IT calorie (4.1868 J) [4]_.

References
----------
.. [1] A. Bejan, G. Tsatsaronis and M. Moran, *Thermal Design and Optimization*,
   Wiley, 1996. ISBN 978-0-471-58467-4.
.. [2] T. J. Kotas, *The Exergy Method of Thermal Plant Analysis*, Butterworths,
   1985. ISBN 978-0-408-01350-5.
.. [3] F. L. Curzon and B. Ahlborn, "Efficiency of a Carnot engine at maximum power
   output", American Journal of Physics 43(1), 22-24, 1975. DOI 10.1119/1.10023
.. [4] A. Thompson and B. N. Taylor, *Guide for the Use of the International System
   of Units (SI)*, NIST Special Publication 811, 2008, Appendix B.
   DOI 10.6028/NIST.SP.811e2008
.. [5] Y. A. Cengel and M. A. Boles, *Thermodynamics: An Engineering Approach*,
   McGraw-Hill (chapters on the second law and exergy).
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perftest.errors import InputError, PerftestWarning

__all__ = [
    "KJ_PER_KWH",
    "BTU_IT_IN_KJ",
    "first_law_efficiency",
    "heat_rate",
    "to_kj_per_kwh",
    "from_kj_per_kwh",
    "to_btu_per_kwh",
    "from_btu_per_kwh",
    "net_power",
    "carnot_efficiency",
    "curzon_ahlborn_efficiency",
    "second_law_efficiency",
    "carnot_cop_refrigeration",
    "carnot_cop_heat_pump",
    "cop_second_law_efficiency",
    "heat_exergy",
    "exergetic_efficiency",
    "exergy_destruction",
    "gouy_stodola_destruction",
    "gouy_stodola_closure",
    "ExergyClosure",
]

#: kJ in one kWh (exact).
KJ_PER_KWH = 3600.0
#: kJ in one International Table Btu (exact, NIST SP 811 Appendix B).
BTU_IT_IN_KJ = 1.05505585262


# --------------------------------------------------------------------------- checks


def _values(x, func: str, parameter: str) -> np.ndarray:
    """Numeric view of an argument for checking (NaN kept)."""
    if isinstance(x, pd.Series | pd.DataFrame):
        return x.to_numpy(dtype=float, na_value=np.nan)
    try:
        return np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise InputError(
            f"The '{parameter}' parameter of {func} must be numeric (float, array or Series). "
            f"Got {type(x).__name__}.",
            parameter=parameter,
        ) from None


def _first_bad(values: np.ndarray, bad: np.ndarray) -> float:
    return float(np.broadcast_to(values, bad.shape)[bad].ravel()[0])


def _any(mask) -> bool:
    """``np.any`` of a boolean array (or numpy bool) by its own method: cheaper."""
    return bool(mask.any())


# Scalars (0-d values) are checked with Python floats: the same verdicts (NaN
# passes every check, as in the array comparisons) at a fraction of the cost of
# numpy's reductions and error-state handling on one number.


def _check_positive(x, func: str, parameter: str, what: str = "positive") -> np.ndarray:
    v = _values(x, func, parameter)
    if v.ndim == 0:
        if float(v) <= 0:
            raise InputError(
                f"The '{parameter}' parameter of {func} must be {what}. Got {float(v):g}.",
                parameter=parameter,
            )
        return v
    with np.errstate(invalid="ignore"):
        bad = v <= 0
    if _any(bad):
        raise InputError(
            f"The '{parameter}' parameter of {func} must be {what}. Got {_first_bad(v, bad):g}.",
            parameter=parameter,
        )
    return v


def _check_non_negative(x, func: str, parameter: str) -> np.ndarray:
    v = _values(x, func, parameter)
    with np.errstate(invalid="ignore"):
        bad = v < 0
    if _any(bad):
        raise InputError(
            f"The '{parameter}' parameter of {func} must be non-negative. "
            f"Got {_first_bad(v, bad):g}.",
            parameter=parameter,
        )
    return v


def _check_below(low, high, func: str, low_name: str, high_name: str) -> None:
    lo = _check_positive(low, func, low_name, "a positive absolute temperature [K]")
    hi = _check_positive(high, func, high_name, "a positive absolute temperature [K]")
    if lo.ndim == 0 and hi.ndim == 0:
        if float(lo) >= float(hi):
            raise InputError(
                f"The '{low_name}' parameter of {func} must be below '{high_name}'. "
                f"Got {low_name} = {float(lo):g} K, {high_name} = {float(hi):g} K.",
                parameter=low_name,
            )
        return
    try:
        lo_b, hi_b = np.broadcast_arrays(lo, hi)
    except ValueError:
        raise InputError(
            f"The '{low_name}' and '{high_name}' parameters of {func} must have "
            f"broadcastable shapes. Got {lo.shape} and {hi.shape}.",
            parameter=low_name,
        ) from None
    with np.errstate(invalid="ignore"):
        bad = lo_b >= hi_b
    if _any(bad):
        i = np.flatnonzero(bad.ravel())[0]
        raise InputError(
            f"The '{low_name}' parameter of {func} must be below '{high_name}'. "
            f"Got {low_name} = {lo_b.ravel()[i]:g} K, {high_name} = {hi_b.ravel()[i]:g} K.",
            parameter=low_name,
        )


def _out(result):
    """Plain float for 0-d results; arrays and Series unchanged."""
    if isinstance(result, np.ndarray) and result.ndim == 0:
        return float(result)
    if isinstance(result, np.floating):
        return float(result)
    return result


# --------------------------------------------------------------------------- first law


def first_law_efficiency(power, heat_input):
    """First-law (thermal) efficiency: power out per heat in.

    Parameters
    ----------
    power : float, array or Series [W]
        Useful power output (gross or net, as the caller decides).
    heat_input : float, array or Series [W]
        Heat supplied (e.g. fuel flow times heating value); must be positive.

    Returns
    -------
    float, array or Series [-]
        :math:`\\eta_I`.

    Raises
    ------
    InputError
        If ``heat_input`` is not positive.

    Warns
    -----
    PerftestWarning
        If an efficiency is above 1 (impossible for a heat engine: check the inputs).

    Notes
    -----
    .. math:: \\eta_I = \\dot W / \\dot Q_{in}

    [1]_ Ch. 3.

    Examples
    --------
    >>> first_law_efficiency(400e6, 1000e6)
    0.4
    """
    _check_positive(heat_input, "first_law_efficiency", "heat_input")
    eta = power / heat_input
    if _any(_values(eta, "first_law_efficiency", "power") > 1.0):
        warnings.warn(
            "first_law_efficiency: an efficiency above 1 was computed; check that power and "
            "heat_input are in W and refer to the same system.",
            PerftestWarning,
            stacklevel=2,
        )
    return _out(eta)


def heat_rate(heat_input, power):
    """Heat rate: heat in per electrical energy out [J/J].

    Parameters
    ----------
    heat_input : float, array or Series [W]
        Heat supplied.
    power : float, array or Series [W]
        Electrical output; must be positive.

    Returns
    -------
    float, array or Series [J/J]
        :math:`HR = \\dot Q_{in}/\\dot W = 1/\\eta_I`.  Multiply by 3600 for kJ/kWh
        (:func:`to_kj_per_kwh`).

    Raises
    ------
    InputError
        If ``power`` is not positive.

    Notes
    -----
    .. math:: HR = \\dot Q_{in} / \\dot W

    A heat rate of 1 J/J (3600 kJ/kWh, 3412.14 Btu/kWh) is 100 % efficiency
    (common practice, no source).

    Examples
    --------
    >>> heat_rate(1000e6, 400e6)
    2.5
    >>> round(to_kj_per_kwh(heat_rate(1000e6, 400e6)), 6)
    9000.0
    """
    _check_positive(power, "heat_rate", "power")
    return _out(heat_input / power)


def to_kj_per_kwh(heat_rate):
    """Convert a heat rate from J/J to kJ/kWh (times 3600, exact).

    Parameters
    ----------
    heat_rate : float, array or Series [J/J]

    Returns
    -------
    float, array or Series [kJ/kWh]

    Notes
    -----
    .. math:: HR_{kJ/kWh} = 3600\\,HR_{J/J}

    Examples
    --------
    >>> to_kj_per_kwh(2.5)
    9000.0
    """
    return _out(heat_rate * KJ_PER_KWH)


def from_kj_per_kwh(heat_rate):
    """Convert a heat rate from kJ/kWh to J/J (divide by 3600, exact).

    Examples
    --------
    >>> from_kj_per_kwh(9000.0)
    2.5
    """
    return _out(heat_rate / KJ_PER_KWH)


def to_btu_per_kwh(heat_rate):
    """Convert a heat rate from J/J to Btu(IT)/kWh.

    Parameters
    ----------
    heat_rate : float, array or Series [J/J]

    Returns
    -------
    float, array or Series [Btu/kWh]

    Notes
    -----
    .. math:: HR_{Btu/kWh} = 3600\\,HR_{J/J} / 1.05505585262

    1 Btu_IT = 1.055 055 852 62 kJ exactly ([4]_ Appendix B).

    Examples
    --------
    >>> round(to_btu_per_kwh(1.0), 2)
    3412.14
    """
    return _out(heat_rate * (KJ_PER_KWH / BTU_IT_IN_KJ))


def from_btu_per_kwh(heat_rate):
    """Convert a heat rate from Btu(IT)/kWh to J/J.

    Examples
    --------
    >>> round(from_btu_per_kwh(3412.141633), 9)
    1.0
    """
    return _out(heat_rate * (BTU_IT_IN_KJ / KJ_PER_KWH))


def net_power(gross_power, auxiliary_power):
    """Net power: gross output less auxiliary consumption.

    Parameters
    ----------
    gross_power : float, array or Series [W]
    auxiliary_power : float, array or Series [W]
        Plant auxiliary consumption; must be non-negative.

    Returns
    -------
    float, array or Series [W]

    Raises
    ------
    InputError
        If ``auxiliary_power`` is negative.

    Notes
    -----
    .. math:: \\dot W_{net} = \\dot W_{gross} - \\dot W_{aux}

    Examples
    --------
    >>> net_power(410e6, 10e6)
    400000000.0
    """
    _check_non_negative(auxiliary_power, "net_power", "auxiliary_power")
    return _out(gross_power - auxiliary_power)


# --------------------------------------------------------------------------- Carnot bound


def carnot_efficiency(source_temperature, sink_temperature):
    """Carnot efficiency between a heat source and a heat sink.

    Parameters
    ----------
    source_temperature : float, array or Series [K]
        Absolute temperature of the heat source.
    sink_temperature : float, array or Series [K]
        Absolute temperature of the heat sink; must be below the source.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If a temperature is not positive or the sink is not below the source.

    Notes
    -----
    .. math:: \\eta_{Carnot} = 1 - T_{sink}/T_{source}

    The upper bound of the first-law efficiency of any heat engine working between
    the two reservoirs ([1]_ Ch. 2; [5]_ Ch. 6).

    Examples
    --------
    >>> carnot_efficiency(600.0, 300.0)
    0.5
    """
    _check_below(
        sink_temperature,
        source_temperature,
        "carnot_efficiency",
        "sink_temperature",
        "source_temperature",
    )
    return _out(1.0 - sink_temperature / source_temperature)


def curzon_ahlborn_efficiency(source_temperature, sink_temperature):
    """Efficiency at maximum power of an endoreversible engine (Curzon-Ahlborn).

    Parameters
    ----------
    source_temperature : float, array or Series [K]
    sink_temperature : float, array or Series [K]
        Must be below the source.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If a temperature is not positive or the sink is not below the source.

    Notes
    -----
    .. math:: \\eta_{CA} = 1 - \\sqrt{T_{sink}/T_{source}}

    [3]_ Eq. 22 (equation number from memory).  A more realistic benchmark than
    Carnot for plants that must deliver power at a finite rate.

    Examples
    --------
    >>> curzon_ahlborn_efficiency(400.0, 100.0)
    0.5
    """
    _check_below(
        sink_temperature,
        source_temperature,
        "curzon_ahlborn_efficiency",
        "sink_temperature",
        "source_temperature",
    )
    return _out(1.0 - np.sqrt(sink_temperature / source_temperature))


def second_law_efficiency(first_law_efficiency, carnot_efficiency):
    """Second-law efficiency of a heat engine: first-law efficiency over Carnot.

    Parameters
    ----------
    first_law_efficiency : float, array or Series [-]
    carnot_efficiency : float, array or Series [-]
        Must be positive.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If ``carnot_efficiency`` is not in (0, 1].

    Warns
    -----
    PerftestWarning
        If the result exceeds 1 (the engine would beat Carnot: check the temperatures).

    Notes
    -----
    .. math:: \\eta_{II} = \\eta_I / \\eta_{Carnot}

    [5]_ Ch. 8 (second-law efficiency of heat engines).

    Examples
    --------
    >>> round(second_law_efficiency(0.3, 0.5), 12)
    0.6
    """
    c = _check_positive(carnot_efficiency, "second_law_efficiency", "carnot_efficiency")
    if _any(c > 1.0):
        raise InputError(
            "The 'carnot_efficiency' parameter of second_law_efficiency must be at most 1. "
            f"Got {_first_bad(c, c > 1.0):g}.",
            parameter="carnot_efficiency",
        )
    eta = first_law_efficiency / carnot_efficiency
    if _any(_values(eta, "second_law_efficiency", "first_law_efficiency") > 1.0):
        warnings.warn(
            "second_law_efficiency: the first-law efficiency exceeds the Carnot efficiency; "
            "check the source and sink temperatures.",
            PerftestWarning,
            stacklevel=2,
        )
    return _out(eta)


def carnot_cop_refrigeration(cold_temperature, hot_temperature):
    """Carnot coefficient of performance of a refrigerator.

    Parameters
    ----------
    cold_temperature : float, array or Series [K]
        Temperature at which heat is taken in (refrigerated space).
    hot_temperature : float, array or Series [K]
        Temperature at which heat is rejected; must be above the cold one.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If a temperature is not positive or cold is not below hot.

    Notes
    -----
    .. math:: COP_{R,Carnot} = \\frac{T_c}{T_h - T_c}

    [5]_ Ch. 6.

    Examples
    --------
    >>> carnot_cop_refrigeration(250.0, 300.0)
    5.0
    """
    _check_below(
        cold_temperature,
        hot_temperature,
        "carnot_cop_refrigeration",
        "cold_temperature",
        "hot_temperature",
    )
    return _out(cold_temperature / (hot_temperature - cold_temperature))


def carnot_cop_heat_pump(cold_temperature, hot_temperature):
    """Carnot coefficient of performance of a heat pump.

    Parameters
    ----------
    cold_temperature : float, array or Series [K]
        Temperature at which heat is taken in.
    hot_temperature : float, array or Series [K]
        Temperature at which heat is delivered; must be above the cold one.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If a temperature is not positive or cold is not below hot.

    Notes
    -----
    .. math:: COP_{HP,Carnot} = \\frac{T_h}{T_h - T_c} = COP_{R,Carnot} + 1

    [5]_ Ch. 6.

    Examples
    --------
    >>> carnot_cop_heat_pump(250.0, 300.0)
    6.0
    """
    _check_below(
        cold_temperature,
        hot_temperature,
        "carnot_cop_heat_pump",
        "cold_temperature",
        "hot_temperature",
    )
    return _out(hot_temperature / (hot_temperature - cold_temperature))


def cop_second_law_efficiency(cop, carnot_cop):
    """Second-law efficiency of a refrigerator or heat pump: COP over Carnot COP.

    Parameters
    ----------
    cop : float, array or Series [-]
        Measured coefficient of performance.
    carnot_cop : float, array or Series [-]
        Carnot COP of the same duty (refrigeration or heat pump); must be positive.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If ``carnot_cop`` is not positive.

    Warns
    -----
    PerftestWarning
        If the result exceeds 1.

    Notes
    -----
    .. math:: \\eta_{II} = COP / COP_{Carnot}

    [5]_ Ch. 8.

    Examples
    --------
    >>> cop_second_law_efficiency(2.5, 5.0)
    0.5
    """
    _check_positive(carnot_cop, "cop_second_law_efficiency", "carnot_cop")
    eta = cop / carnot_cop
    if _any(_values(eta, "cop_second_law_efficiency", "cop") > 1.0):
        warnings.warn(
            "cop_second_law_efficiency: the COP exceeds the Carnot COP; check the "
            "temperatures and which duty (refrigeration or heat pump) the COP refers to.",
            PerftestWarning,
            stacklevel=2,
        )
    return _out(eta)


# --------------------------------------------------------------------------- exergy


def heat_exergy(heat, source_temperature, dead_state_temperature):
    """Exergy carried by a heat flow at a constant temperature.

    Parameters
    ----------
    heat : float, array or Series [W]
        Heat flow crossing the boundary at ``source_temperature``.
    source_temperature : float, array or Series [K]
        Absolute temperature at which the heat crosses the boundary.
    dead_state_temperature : float, array or Series [K]
        Environment (dead-state) temperature :math:`T_0`.

    Returns
    -------
    float, array or Series [W]
        Negative when :math:`T < T_0` and the heat is positive: heat drawn from a
        cold space carries exergy the other way.

    Raises
    ------
    InputError
        If a temperature is not positive.

    Notes
    -----
    .. math:: \\dot E_Q = \\dot Q\\,(1 - T_0/T)

    [1]_ Eq. 3.9 (equation number from memory); [2]_ Ch. 2.

    Examples
    --------
    >>> heat_exergy(100e3, 600.0, 300.0)
    50000.0
    """
    func = "heat_exergy"
    _check_positive(
        source_temperature, func, "source_temperature", "a positive absolute temperature [K]"
    )
    _check_positive(
        dead_state_temperature,
        func,
        "dead_state_temperature",
        "a positive absolute temperature [K]",
    )
    return _out(heat * (1.0 - dead_state_temperature / source_temperature))


def exergetic_efficiency(net_power, exergy_input):
    """Exergetic (rational) efficiency: product exergy over fuel exergy.

    Parameters
    ----------
    net_power : float, array or Series [W]
        Exergy of the product (for a power plant, the net power).
    exergy_input : float, array or Series [W]
        Exergy supplied (fuel exergy or heat exergy); must be positive.

    Returns
    -------
    float, array or Series [-]

    Raises
    ------
    InputError
        If ``exergy_input`` is not positive.

    Notes
    -----
    .. math:: \\varepsilon = \\dot W_{net} / \\dot E_{F}

    [1]_ Sect. 3.5; [2]_ Ch. 2.

    Examples
    --------
    >>> exergetic_efficiency(40.0, 100.0)
    0.4
    """
    _check_positive(exergy_input, "exergetic_efficiency", "exergy_input")
    return _out(net_power / exergy_input)


def exergy_destruction(
    exergy_in,
    exergy_out,
    work_out=0.0,
    heat_exergy_in=0.0,
    *,
    heat_exergy_out=0.0,
    work_in=0.0,
):
    """Exergy destroyed in a steady-flow unit, from its exergy balance.

    Parameters
    ----------
    exergy_in : float, array or Series [W]
        Total flow exergy of the streams entering (sum the streams first).
    exergy_out : float, array or Series [W]
        Total flow exergy of the streams leaving.
    work_out : float, array or Series [W], default 0
        Shaft or electrical power delivered by the unit.
    heat_exergy_in : float, array or Series [W], default 0
        Exergy of heat received (:func:`heat_exergy`).
    heat_exergy_out : float, array or Series [W], default 0
        Exergy of heat rejected, e.g. a heat loss to the surroundings at its
        boundary temperature (an exergy loss, not destroyed inside the unit).
    work_in : float, array or Series [W], default 0
        Power consumed (pumps, compressors).

    Returns
    -------
    float, array or Series [W]
        :math:`\\dot E_D`; a negative value signals inconsistent data.

    Notes
    -----
    Steady-state exergy balance of a control volume ([1]_ Eq. 3.13, number from
    memory; [2]_ Ch. 2):

    .. math::
        \\dot E_D = \\sum \\dot E_{in} + \\dot E_{Q,in} + \\dot W_{in}
                   - \\sum \\dot E_{out} - \\dot E_{Q,out} - \\dot W_{out}

    Examples
    --------
    >>> exergy_destruction(100.0, 30.0, work_out=60.0)
    10.0
    """
    return _out(exergy_in + heat_exergy_in + work_in - exergy_out - heat_exergy_out - work_out)


def gouy_stodola_destruction(entropy_generation, dead_state_temperature):
    """Exergy destroyed by irreversibility (Gouy-Stodola theorem).

    Parameters
    ----------
    entropy_generation : float, array or Series [W/K]
        Entropy generation rate :math:`\\dot S_{gen}`.
    dead_state_temperature : float, array or Series [K]
        Environment (dead-state) temperature :math:`T_0`.

    Returns
    -------
    float, array or Series [W]

    Raises
    ------
    InputError
        If ``dead_state_temperature`` is not positive.

    Warns
    -----
    PerftestWarning
        If an entropy generation is negative (impossible; usually measurement noise).

    Notes
    -----
    .. math:: \\dot E_D = T_0\\,\\dot S_{gen}

    [1]_ Sect. 3.2; [2]_ Ch. 1 (Gouy-Stodola relation).

    Examples
    --------
    >>> gouy_stodola_destruction(2.0, 300.0)
    600.0
    """
    func = "gouy_stodola_destruction"
    _check_positive(
        dead_state_temperature,
        func,
        "dead_state_temperature",
        "a positive absolute temperature [K]",
    )
    s = _values(entropy_generation, func, "entropy_generation")
    if np.any(s < 0):
        warnings.warn(
            "gouy_stodola_destruction: negative entropy generation; the second law forbids it, "
            "so the inputs (usually measurement noise) need a look.",
            PerftestWarning,
            stacklevel=2,
        )
    return _out(dead_state_temperature * entropy_generation)


@dataclass(frozen=True)
class ExergyClosure:
    """Result of :func:`gouy_stodola_closure`.

    Attributes
    ----------
    imbalance : float [W]
        :math:`(\\dot E_{in} - \\dot E_{out}) - (\\sum \\dot E_D + \\sum \\dot E_L)`.
    relative_imbalance : float [-]
        ``imbalance / exergy_in``.
    closed : bool
        ``abs(relative_imbalance) <= rtol``.
    total_destruction, total_losses : float [W]
    rtol : float
    """

    imbalance: float
    relative_imbalance: float
    closed: bool
    total_destruction: float
    total_losses: float
    rtol: float


def _total(x, func: str, parameter: str) -> float:
    if isinstance(x, Mapping):
        x = list(x.values())
    v = _values(x, func, parameter)
    return float(np.sum(v))


def gouy_stodola_closure(destructions, losses, exergy_in, exergy_out, rtol=1e-6):
    """Check that destructions and losses account for the exergy consumed.

    Parameters
    ----------
    destructions : float, sequence, mapping or Series [W]
        Exergy destroyed per unit (summed).
    losses : float, sequence, mapping or Series [W]
        Exergy lost to the surroundings (stack, condenser, heat losses; summed).
    exergy_in : float [W]
        Exergy supplied to the plant (fuel exergy); must be positive.
    exergy_out : float [W]
        Exergy of the products (net power, useful heat exergy).
    rtol : float, default 1e-6
        Tolerance on the imbalance relative to ``exergy_in``.

    Returns
    -------
    ExergyClosure

    Raises
    ------
    InputError
        If ``exergy_in`` is not positive or ``rtol`` is negative.

    Notes
    -----
    Plant exergy balance ([1]_ Sect. 3.5; [2]_ Ch. 2):

    .. math:: \\dot E_F = \\dot E_P + \\sum_k \\dot E_{D,k} + \\dot E_L

    Examples
    --------
    >>> c = gouy_stodola_closure([30.0, 20.0], [10.0], exergy_in=100.0, exergy_out=40.0)
    >>> c.imbalance, c.closed
    (0.0, True)
    """
    func = "gouy_stodola_closure"
    e_in = _total(exergy_in, func, "exergy_in")
    if not e_in > 0:
        raise InputError(
            f"The 'exergy_in' parameter of {func} must be positive. Got {e_in:g}.",
            parameter="exergy_in",
        )
    if not rtol >= 0:
        raise InputError(
            f"The 'rtol' parameter of {func} must be non-negative. Got {rtol!r}.",
            parameter="rtol",
        )
    e_out = _total(exergy_out, func, "exergy_out")
    d = _total(destructions, func, "destructions")
    loss = _total(losses, func, "losses")
    imbalance = (e_in - e_out) - (d + loss)
    rel = imbalance / e_in
    return ExergyClosure(
        imbalance=imbalance,
        relative_imbalance=rel,
        closed=bool(abs(rel) <= rtol),
        total_destruction=d,
        total_losses=loss,
        rtol=float(rtol),
    )
