"""Exergy of a stream: the dead state and the specific flow exergy."""

from __future__ import annotations

import numpy as np

from perftest.errors import InputError
from perftest.thermo.checks import Args
from perftest.thermo.single_phase import pT

__all__ = ["specific_exergy"]


def specific_exergy(h, s, h0, s0, T0):
    """Specific flow exergy (physical part) of a stream.

    Parameters
    ----------
    h : float, array or Series [J/kg]
        Specific enthalpy of the stream.
    s : float, array or Series [J/(kg K)]
        Specific entropy of the stream.
    h0, s0 : float, array or Series [J/kg], [J/(kg K)]
        Enthalpy and entropy of the same fluid at the dead state
        (:meth:`Fluid.dead_state`).
    T0 : float, array or Series [K]
        Dead-state temperature.

    Returns
    -------
    e : same kind as `h` [J/kg]

    Notes
    -----
    .. math:: e = (h - h_0) - T_0 (s - s_0)

    kinetic, potential and chemical parts left out [1].  Zero at the dead state and
    positive at every other state of a simple compressible substance.

    References
    ----------
    .. [1] A. Bejan, G. Tsatsaronis, M. Moran, Thermal Design and Optimization,
       Wiley, 1996, Eq. 3.13.

    Examples
    --------
    >>> specific_exergy(3.0e6, 7000.0, 1.0e5, 350.0, 300.0)
    905000.0
    """
    args = Args("specific_exergy", h=h, s=s, h0=h0, s0=s0, T0=T0)
    hh, ss, h0_, s0_, t0 = args.flat
    bad = t0 <= 0
    if bad.any():
        raise InputError(
            "The 'T0' parameter of specific_exergy must be an absolute temperature [K] "
            f"above zero. Got {t0[np.flatnonzero(bad)[0]]!r}.",
            parameter="T0",
        )
    return args.out((hh - h0_) - t0 * (ss - s0_))


def dead_state(fluid, T0, p0, *, where="dead state"):
    """Work of :meth:`Fluid.dead_state <perftest.thermo.fluid.Fluid.dead_state>` for `fluid`."""
    phase = "liquid" if fluid.coolprop_name == "Water" else None
    args = Args("dead_state", T0=T0, p0=p0)
    TT, pp = args.flat
    r = pT(fluid, pp, TT, phase, ["h", "s"], where)
    return args.out(r["h"]), args.out(r["s"])
