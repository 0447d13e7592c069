"""The saturation line and the wet (two-phase) states of a pure fluid.

For ``"water"`` the saturation line is the IAPWS-IF97 region-4 pair of equations
(:mod:`perftest.thermo.if97`); other fluids use CoolProp's ``PQ``/``QT`` updates.
Wet states are the saturated values weighted by the vapour quality.
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PropertyRangeError
from perftest.thermo.backend import fast, loop
from perftest.thermo.checks import Args, check_quality, fmt_state, more, prefix
from perftest.thermo.if97 import P_CRITICAL, P_TRIPLE, if97_psat, if97_tsat
from perftest.thermo.states import State


def tsat_or_nan(fluid, p):
    """Saturation temperature where triple <= p < critical, NaN elsewhere."""
    p = np.asarray(p, dtype=float)
    inside = (p >= fluid.p_triple) & (p < fluid.p_critical)
    out = np.full(p.shape, np.nan)
    if fluid._pseudo_pure or not inside.any():
        # pseudo-pure air has dew and bubble lines, not one saturation line; it is
        # used far above them in plant work, so no ambiguity check is made.
        return out
    if fluid.is_if97:
        with np.errstate(invalid="ignore"):
            out[inside] = if97_tsat(p[inside])
    else:
        res, ok, _ = loop(fluid, fluid._CP.PQ_INPUTS, p[inside], np.zeros(inside.sum()), ["T"])
        out[inside] = res["T"]
    return out


# Grid of the quick saturation test (see if97_screen): 16384 pressures evenly spaced in
# log p between the triple and the critical point bracket Tsat to 0.06 K or better;
# the slack of 1e-6 K covers the round-off of Eq. 31 (~1e-13 K) a million times.
_SCREEN_POINTS = 16384
_SCREEN_SLACK = 1e-6


def if97_screen(margin):
    """Bounds of the saturation temperature of water around any pressure, for a cheap test.

    Returns ``grid, lo, hi``: with ``k = grid.searchsorted(p, "right")``, a state
    with ``T < lo[k]`` lies more than `margin` below the saturation temperature at
    `p` (or `p` is off the saturation line: below the triple or at or above the
    critical pressure, or NaN), and one with ``T > hi[k]`` more than `margin` above
    it (or off the line).  ``lo`` and ``hi`` are NaN for ``p <= 0``, so such states
    pass neither test.  Tsat from Eq. 31 rises with p, so between two grid
    pressures it lies between their saturation temperatures; the bounds widen that
    bracket by `margin` and a slack.
    """
    q = np.geomspace(P_TRIPLE, P_CRITICAL, _SCREEN_POINTS)
    q[0], q[-1] = P_TRIPLE, P_CRITICAL
    ts = if97_tsat(q)
    grid = np.concatenate(([np.nextafter(0.0, 1.0)], q))
    d = margin + _SCREEN_SLACK
    lo = np.concatenate(([np.nan, np.inf], ts[:-1] - d, [np.inf]))
    hi = np.concatenate(([np.nan, -np.inf], ts[1:] + d, [-np.inf]))
    return grid, lo, hi


def saturated_arrays(fluid, p):
    """Saturated liquid and vapour at flat pressures `p`, or None if any point fails.

    Returns ``T, h_f, rho_f, h_g, rho_g`` (NaN where `p` is NaN): the values of
    :func:`state_px` at x = 0 and x = 1, from the same CoolProp updates in the same
    order, without building the two :class:`State` records.  Callers redo the call
    through :func:`state_px` to raise its error when this returns None.

    :func:`state_px` also reads p and s.  For IF97 water h, rho and s after a
    saturation update are the region 1 (x = 0) or region 2 (x = 1) equation at
    (Tsat(p), p), under one range check, so s cannot fail where h did not; it is
    skipped there (it costs as much as h).  Other backends read all five, as
    :func:`state_px` does.
    """
    pl = p.tolist()
    n = len(pl)
    if fluid.is_if97 and n > 1:
        # Streams tied to one pressure (drains flashing to the condenser) share their
        # saturated values: one update per distinct pressure.  IF97's saturation line
        # is a function of p alone, so the numbers are those of an update per stream.
        first: dict = {}
        where = [first.setdefault(x, len(first)) for x in pl]  # (NaNs stay apart)
        if len(first) < n:
            out = saturated_arrays(fluid, np.array(list(first)))
            return None if out is None else tuple(np.array(out)[:, where])
    AS, pair = fluid._as, fluid._CP.PQ_INPUTS
    # the getters of Fluid._getters for T, p, h, s and rho
    get_T, get_p, get_h, get_s, get_rho = AS.T, AS.p, AS.hmass, AS.smass, AS.rhomass
    full = not fluid.is_if97
    nan = np.nan
    T, hf, rf, hg, rg = [nan] * n, [nan] * n, [nan] * n, [nan] * n, [nan] * n
    try:
        for i, pi in enumerate(pl):
            if pi == pi:
                AS.update(pair, pi, 0.0)
                T[i] = get_T()
                if full:
                    get_p()
                hf[i] = get_h()
                if full:
                    get_s()
                rf[i] = get_rho()
        for i, pi in enumerate(pl):
            if pi == pi:
                AS.update(pair, pi, 1.0)
                if full:
                    get_T(), get_p()
                hg[i] = get_h()
                if full:
                    get_s()
                rg[i] = get_rho()
    except (ValueError, IndexError, RuntimeError):
        return None
    return tuple(np.array([T, hf, rf, hg, rg]))  # five rows of one array


def sat_side_values(fluid, p, key):
    """Saturated-liquid and -vapour values of h or s at p (flat arrays, p < pc)."""
    CP = fluid._CP
    if fluid.is_if97:
        # Evaluate just inside each side and step to Tsat along the isobar (the
        # IF97 fast path rejects states exactly on the line); the 1 mK step leaves
        # an error below cp * 1e-3 K * 1e-3 relative, i.e. far below 1e-3 J/kg.
        ts = if97_tsat(p)
        d = 1e-3
        lo, _ = fast(fluid, CP.PT_INPUTS, p, ts - d, [key, "cp"])
        hi, _ = fast(fluid, CP.PT_INPUTS, p, ts + d, [key, "cp"])
        if key == "h":
            return lo["h"] + lo["cp"] * d, hi["h"] - hi["cp"] * d
        return lo["s"] + lo["cp"] * np.log(ts / (ts - d)), hi["s"] - hi["cp"] * np.log(
            (ts + d) / ts
        )
    f, _, _ = loop(fluid, CP.PQ_INPUTS, p, np.zeros(p.size), [key])
    g, _, _ = loop(fluid, CP.PQ_INPUTS, p, np.ones(p.size), [key])
    return f[key], g[key]


def saturation_T(fluid, p, *, where=None):
    """Work of :meth:`Fluid.saturation_T <perftest.thermo.fluid.Fluid.saturation_T>` for `fluid`."""
    args = Args("saturation_T", p=p)
    (pp,) = args.flat
    T = tsat_or_nan(fluid, pp)
    bad = np.isnan(T) & ~np.isnan(pp)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise PropertyRangeError(
            f"{prefix(where)}p = {pp[i] / 1e6:.6g} MPa has no saturation temperature "
            f"for {fluid.name}: the saturation line runs from {fluid.p_triple:.6g} Pa to "
            f"the critical pressure {fluid.p_critical / 1e6:.6g} MPa."
        )
    return args.out(T)


def saturation_p(fluid, T, *, where=None):
    """Work of :meth:`Fluid.saturation_p <perftest.thermo.fluid.Fluid.saturation_p>` for `fluid`."""
    args = Args("saturation_p", T=T)
    (TT,) = args.flat
    inside = (TT >= fluid.T_min) & (TT <= fluid.T_critical)
    out = np.full(TT.shape, np.nan)
    if fluid.is_if97:
        out[inside] = if97_psat(TT[inside])
    elif inside.any() and not fluid._pseudo_pure:
        res, ok, _ = loop(fluid, fluid._CP.QT_INPUTS, np.zeros(inside.sum()), TT[inside], ["p"])
        out[inside] = res["p"]
    bad = np.isnan(out) & ~np.isnan(TT)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise PropertyRangeError(
            f"{prefix(where)}T = {TT[i]:.2f} K has no saturation pressure for "
            f"{fluid.name}: the saturation line runs from {fluid.T_min:.2f} K to the "
            f"critical temperature {fluid.T_critical:.3f} K."
        )
    return args.out(out)


def wet_state(fluid, pair, a, b, xx, given, args, where, label) -> State:
    """Saturated or wet :class:`State`; a state off the saturation line raises.

    `pair` is CoolProp's input pair for the flat inputs `a`, `b`; `xx` the qualities;
    `given` the input pressure or temperature (``{"p": ...}`` or ``{"T": ...}``),
    returned as given; `label(i)` names the i-th input in messages.  ``cp`` and the
    derivatives are NaN.
    """
    res, ok, err = loop(fluid, pair, a, b, ["T", "p", "h", "s", "rho"])
    valid = ~np.isnan(a) & ~np.isnan(b)
    failed = valid & ~ok
    if failed.any():
        i = int(np.flatnonzero(failed)[0])
        detail = f" (CoolProp: {err})" if err else ""
        raise PropertyRangeError(
            f"{prefix(where)}{label(i)} is not a saturated or wet state of {fluid.name}; "
            f"the saturation line ends at the critical point "
            f"({fluid.p_critical / 1e6:.6g} MPa, {fluid.T_critical:.3f} K).{detail}" + more(failed)
        )
    res.update(given)
    nan = np.full(xx.size, np.nan)
    return State(
        p=args.out(res["p"]),
        T=args.out(res["T"]),
        h=args.out(res["h"]),
        s=args.out(res["s"]),
        cp=args.out(nan),
        rho=args.out(res["rho"]),
        x=args.out(xx),
        dh_dT_p=args.out(nan),
        dh_dp_T=args.out(nan),
    )


def state_px(fluid, p, x, *, where=None) -> State:
    """Work of :meth:`Fluid.state_px <perftest.thermo.fluid.Fluid.state_px>` for `fluid`."""
    args = Args("state_px", p=p, x=x)
    pp, xx = args.flat
    check_quality(xx, "state_px", where)
    return wet_state(
        fluid,
        fluid._CP.PQ_INPUTS,
        pp,
        xx,
        xx,
        {"p": pp},
        args,
        where,
        lambda i: fmt_state(pp[i], x=xx[i]),
    )


def state_Tx(fluid, T, x, *, where=None) -> State:
    """Work of :meth:`Fluid.state_Tx <perftest.thermo.fluid.Fluid.state_Tx>` for `fluid`."""
    args = Args("state_Tx", T=T, x=x)
    TT, xx = args.flat
    check_quality(xx, "state_Tx", where)
    return wet_state(
        fluid,
        fluid._CP.QT_INPUTS,
        xx,
        TT,
        xx,
        {"T": TT},
        args,
        where,
        lambda i: f"T = {TT[i]:.2f} K, x = {xx[i]:.4g}",
    )
