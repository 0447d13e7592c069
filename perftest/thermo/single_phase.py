"""Single-phase states from pressure and temperature, with the saturation rules.

A state given by (p, T) within ``saturation_margin`` of the saturation line is
ambiguous (compressed liquid or superheated vapour?): it raises unless the caller
declares the phase, and with a declared phase it is computed on that side (anchored
at the saturation temperature -/+ the margin and extrapolated along the isobar).
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PropertyRangeError
from perftest.thermo.backend import _FD_REL_STEP, out_keys, raw_pT, stencil
from perftest.thermo.checks import Args, check_phase, fmt_state, more, prefix, range_hint
from perftest.thermo.saturation import if97_screen, tsat_or_nan
from perftest.thermo.states import State


def pT(fluid, p, T, phase, keys, where):
    """Properties at (p, T) with the saturation-ambiguity rules applied.

    Returns a dict of flat arrays for `keys` (subset of h, s, cp, rho, dhdp).
    """
    if fluid.is_if97 and far_from_saturation(fluid, p, T, phase):
        res = if97_plain(fluid, p, T, keys)
        if res is not None:
            return res
    return pT_rules(fluid, p, T, phase, keys, where)


def far_from_saturation(fluid, p, T, phase) -> bool:
    """True when no (p, T) state of the call meets a saturation rule (IF97 water).

    True means: every p and T is positive and, for the declared `phase` (liquid,
    vapour, gas or None), every state lies on its side of the line and outside the
    margin, so :func:`pT_rules` would neither raise nor move a state to an anchor.
    False means "not sure": the caller then applies the rules in full.  The test
    brackets Tsat(p) between the saturation temperatures of the nearest grid
    pressures (:func:`~perftest.thermo.saturation.if97_screen`) instead of
    evaluating Eq. 31 at every state.
    """
    if phase == "supercritical":
        ok = ((p >= fluid.p_critical) | (T >= fluid.T_critical)) & (p > 0) & (T > 0)
        return np.count_nonzero(ok) == ok.size
    if phase is not None and phase not in ("liquid", "vapour", "gas"):
        return False  # "wet" or an unknown name: the rules raise
    _, grid, lo, hi = _screen_of(fluid)
    k = grid.searchsorted(p, "right")
    if phase == "liquid":
        ok = T < lo[k]
    elif phase is None:
        ok = (T < lo[k]) | (T > hi[k])
    else:
        ok = T > hi[k]
    ok &= T > 0
    return np.count_nonzero(ok) == ok.size  # (count_nonzero: cheaper than .all())


def _screen_of(fluid):
    """``(margin, grid, lo, hi)`` of :func:`if97_screen` for the fluid's margin (kept)."""
    margin = fluid.saturation_margin
    screen = fluid._screen
    if screen is None or screen[0] != margin:
        screen = fluid._screen = (margin, *if97_screen(margin))
    return screen


def far_from_saturation_sides(fluid, p, T, below, above) -> bool:
    """:func:`far_from_saturation` for states of several declared phases at once.

    `below` and `above` (bool arrays like `p`) say on which side of the saturation
    line each state may lie: both for an undeclared phase, `below` only for a
    liquid, `above` only for a vapour or gas.  The answer is True exactly when
    :func:`far_from_saturation` says True for every state with its own phase (the
    same elementwise test, gathered in one pass over the Tsat table).
    """
    _, grid, lo, hi = _screen_of(fluid)
    k = grid.searchsorted(p, "right")
    ok = ((T < lo[k]) & below) | ((T > hi[k]) & above)
    ok &= T > 0
    return np.count_nonzero(ok) == ok.size


def if97_plain(fluid, p, T, keys):
    """IF97 values at (p, T) as they are, or None when any point fails.

    The values of :func:`~perftest.thermo.backend.raw_pT` for states that need no
    saturation rule, in at most two CoolProp calls: the outputs at (p, T), and h on
    both sides of the (dh/dp)_T stencil.  Any failed point (out of range, NaN,
    region 5) returns None and the caller takes the full path, which handles it.
    """
    want_dhdp = "dhdp" in keys
    base = [k for k in keys if k != "dhdp"]
    if want_dhdp and "h" not in base:
        base.append("h")
    n = p.size
    pair, evaluate = fluid._CP.PT_INPUTS, fluid._as.fast_evaluate
    out = np.empty((n, len(base)))
    status = np.empty(n, dtype=np.int32)
    evaluate(pair, p, T, out_keys(fluid, base), out, status)
    if np.count_nonzero(status):  # (cheaper than status.any())
        # before the stencil: a NaN or infinite p would make it warn here as well
        return None
    res = {k: out[:, i] for i, k in enumerate(base)}
    if want_dhdp:
        dhdp = _if97_dhdp(fluid, p, T)
        if dhdp is None:
            return None
        res["dhdp"] = dhdp
    return res


def _if97_dhdp(fluid, p, T):
    """(dh/dp)_T of IF97 water by the central difference, h on both sides in one
    CoolProp call; None when any point fails."""
    n = p.size
    dp = _FD_REL_STEP * p
    hpm = np.empty((2 * n, 1))
    status = np.empty(2 * n, dtype=np.int32)
    fluid._as.fast_evaluate(
        fluid._CP.PT_INPUTS, *stencil(p, dp, T), out_keys(fluid, ("h",)), hpm, status
    )
    if np.count_nonzero(status):
        return None
    return (hpm[:n, 0] - hpm[n:, 0]) / (2.0 * dp)


def if97_h_cp_dhdp(fluid, p, T):
    """``h, cp, (dh/dp)_T`` of :func:`if97_plain` for keys ``("h", "cp", "dhdp")``, or None.

    The same two CoolProp calls and the same arithmetic, without the handling of
    other keys (the plant model asks for these at every new point).
    """
    n = p.size
    pair, evaluate = fluid._CP.PT_INPUTS, fluid._as.fast_evaluate
    out = np.empty((n, 2))
    status = np.empty(n, dtype=np.int32)
    evaluate(pair, p, T, out_keys(fluid, ("h", "cp")), out, status)
    if np.count_nonzero(status):
        return None
    dhdp = _if97_dhdp(fluid, p, T)
    return None if dhdp is None else (out[:, 0], out[:, 1], dhdp)


def backend_h_cp_dhdp(fluid, p, T, below, above):
    """``h, cp, (dh/dp)_T`` of :func:`pT_rules` for a fluid other than IF97 water, or None.

    For states of several declared phases at once (`below`, `above` as in
    :func:`far_from_saturation_sides`).  The same CoolProp updates as
    :func:`pT_rules` (the saturation temperature of every state inside the
    saturation range, then the state) and the same outputs, without its checks,
    arrays and messages; None as soon as any state is not positive and finite,
    meets a saturation rule (inside the margin or on the wrong side) or fails,
    and then :func:`pT_rules` gives the values or the message.  CoolProp's
    Helmholtz-energy backend gives the same numbers whatever it evaluated before
    (checked in tests/thermo), so the states of several calls can go in one.
    """
    if not (np.count_nonzero((p > 0) & (T > 0) & (p < np.inf) & (T < np.inf)) == p.size):
        return None
    AS, CP = fluid._as, fluid._CP
    update = AS.update
    margin = fluid.saturation_margin
    pl, Tl = p.tolist(), T.tolist()
    sides = zip(below.tolist(), above.tolist(), strict=True)
    lo_p, hi_p = fluid.p_triple, fluid.p_critical
    try:
        if not fluid._pseudo_pure:
            # tsat_or_nan: Tsat where triple <= p < critical, no rule elsewhere
            pair, get_T = CP.PQ_INPUTS, AS.T
            for pi, Ti, (b, a) in zip(pl, Tl, sides, strict=True):
                if lo_p <= pi < hi_p:
                    update(pair, pi, 0.0)
                    d = Ti - get_T()
                    if not ((b and d < -margin) or (a and d > margin)):
                        return None
        pair, get_h, get_cp, deriv = CP.PT_INPUTS, AS.hmass, AS.cpmass, AS.first_partial_deriv
        iH, iP, iT = CP.iHmass, CP.iP, CP.iT
        n = len(pl)
        h, cp, dhdp = [0.0] * n, [0.0] * n, [0.0] * n
        for i in range(n):
            update(pair, pl[i], Tl[i])
            h[i], cp[i], dhdp[i] = get_h(), get_cp(), deriv(iH, iP, iT)
    except (ValueError, IndexError, RuntimeError):
        return None
    return np.array(h), np.array(cp), np.array(dhdp)


def pT_rules(fluid, p, T, phase, keys, where):
    """:func:`pT` in full: every check, anchors within the margin, every message."""
    check_phase(phase, where)
    if phase == "wet":
        raise PropertyRangeError(
            f"{prefix(where)}a wet (two-phase) state is not fixed by pressure and "
            "temperature; give its enthalpy, entropy or quality (state_ph, state_ps, "
            "state_px)."
        )
    bad = (p <= 0) | (T <= 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise PropertyRangeError(
            f"{prefix(where)}{fmt_state(p[i], T[i])}: pressure and temperature must "
            "be positive and absolute (Pa, K)."
        )
    margin = fluid.saturation_margin
    tsat = tsat_or_nan(fluid, p)
    with np.errstate(invalid="ignore"):
        dT = T - tsat
        near = np.abs(dT) <= margin
    if phase is None and near.any():
        i = int(np.flatnonzero(near)[0])
        raise PropertyRangeError(
            f"{prefix(where)}{fmt_state(p[i], T[i])} is within {margin:g} K of "
            f"saturation ({tsat[i]:.2f} K); declare the stream's phase (liquid, vapour "
            "or wet) in the plant file." + more(near)
        )
    anchor = np.zeros(p.size, dtype=bool)
    T_eval = T
    if phase == "liquid":
        wrong = dT > margin
        if wrong.any():
            i = int(np.flatnonzero(wrong)[0])
            raise PropertyRangeError(
                f"{prefix(where)}{fmt_state(p[i], T[i])} is declared liquid but lies "
                f"{dT[i]:.2f} K above saturation ({tsat[i]:.2f} K); check the "
                "temperature and pressure readings or the declared phase." + more(wrong)
            )
        anchor = near
        T_eval = np.where(anchor, tsat - margin, T)
    elif phase in ("vapour", "gas"):
        wrong = dT < -margin
        if wrong.any():
            i = int(np.flatnonzero(wrong)[0])
            raise PropertyRangeError(
                f"{prefix(where)}{fmt_state(p[i], T[i])} is declared {phase} but lies "
                f"{-dT[i]:.2f} K below saturation ({tsat[i]:.2f} K); check the "
                "temperature and pressure readings or the declared phase." + more(wrong)
            )
        anchor = near
        T_eval = np.where(anchor, tsat + margin, T)
    elif phase == "supercritical":
        wrong = (p < fluid.p_critical) & (T < fluid.T_critical)
        if wrong.any():
            i = int(np.flatnonzero(wrong)[0])
            raise PropertyRangeError(
                f"{prefix(where)}{fmt_state(p[i], T[i])} is declared supercritical but "
                f"lies below both the critical pressure ({fluid.p_critical / 1e6:.6g} MPa) "
                f"and the critical temperature ({fluid.T_critical:.3f} K)." + more(wrong)
            )
    need = list(keys)
    if anchor.any() and "cp" not in need:
        need.append("cp")
    res, ok, err = raw_pT(fluid, p, T_eval, need)
    failed = ~ok & ~np.isnan(p) & ~np.isnan(T)
    if failed.any():
        i = int(np.flatnonzero(failed)[0])
        detail = f" (CoolProp: {err})" if err else ""
        raise PropertyRangeError(
            f"{prefix(where)}{fmt_state(p[i], T[i])} is outside the range of "
            f"{fluid.formulation} for {fluid.name}{range_hint(fluid)}.{detail}" + more(failed)
        )
    if anchor.any():
        # Declared side within the margin: evaluate at Tsat -/+ margin (safely on the
        # declared side) and extrapolate along the isobar to T with (dh/dT)_p = cp and
        # (ds/dT)_p = cp/T.  The neglected term, the integral of cp(t) - cp(Ta) over at
        # most the margin (0.05 K by default), grows towards the critical point: against
        # IF97 at T itself (CoolProp IF97::Water, vapour side, the worse one) about
        # 0.006 J/kg up to 0.1 MPa, 0.03 J/kg at 1 MPa, 0.5 J/kg at 12 MPa, 5 J/kg at
        # 18 MPa and 120 J/kg at 21 MPa; far below the uncertainty of an enthalpy taken
        # from a temperature this close to saturation (cp times the thermometer's u).
        # tests/thermo/test_properties.py checks the bound against the iapws package.
        # Density and the derivatives are held at the anchor value.
        Ta = T_eval[anchor]
        cpa = res["cp"][anchor]
        if "h" in res:
            res["h"][anchor] += cpa * (T[anchor] - Ta)
        if "s" in res:
            res["s"][anchor] += cpa * np.log(T[anchor] / Ta)
    return res


def pT_quiet(fluid, p, T, phase, keys):
    """(p, T) on a known side without the ambiguity error (used inside solvers)."""
    margin = fluid.saturation_margin
    tsat = tsat_or_nan(fluid, p)
    near = np.abs(T - tsat) <= margin
    T_eval = T
    if phase == "liquid":
        T_eval = np.where(near, tsat - margin, T)
    elif phase == "vapour":
        T_eval = np.where(near, tsat + margin, T)
    else:
        near = np.zeros(p.size, dtype=bool)
    need = list(dict.fromkeys([*keys, "cp"]))
    res, _, _ = raw_pT(fluid, p, T_eval, need)
    if near.any():
        Ta = T_eval[near]
        cpa = res["cp"][near]
        if "h" in res:
            res["h"][near] += cpa * (T[near] - Ta)
        if "s" in res:
            res["s"][near] += cpa * np.log(T[near] / Ta)
    return res


def state_pT(fluid, p, T, phase=None, *, where=None) -> State:
    """Work of :meth:`Fluid.state_pT <perftest.thermo.fluid.Fluid.state_pT>` for `fluid`."""
    args = Args("state_pT", p=p, T=T)
    pp, TT = args.flat
    r = pT(fluid, pp, TT, phase, ["h", "s", "cp", "rho", "dhdp"], where)
    nan = np.full(pp.size, np.nan)
    return State(
        p=args.out(pp),
        T=args.out(TT),
        h=args.out(r["h"]),
        s=args.out(r["s"]),
        cp=args.out(r["cp"]),
        rho=args.out(r["rho"]),
        x=args.out(nan),
        dh_dT_p=args.out(r["cp"]),
        dh_dp_T=args.out(r["dhdp"]),
    )


def h_pT(fluid, p, T, phase=None, *, where=None):
    """Work of :meth:`Fluid.h_pT <perftest.thermo.fluid.Fluid.h_pT>` for `fluid`."""
    args = Args("h_pT", p=p, T=T)
    pp, TT = args.flat
    r = pT(fluid, pp, TT, phase, ["h", "cp", "dhdp"], where)
    return args.out(r["h"]), args.out(r["cp"]), args.out(r["dhdp"])


def enthalpy_pT(fluid, p, T, phase=None, *, where=None):
    """Work of :meth:`Fluid.enthalpy_pT <perftest.thermo.fluid.Fluid.enthalpy_pT>` for `fluid`."""
    args = Args("enthalpy_pT", p=p, T=T)
    pp, TT = args.flat
    return args.out(pT(fluid, pp, TT, phase, ["h"], where)["h"])


def s_pT(fluid, p, T, phase=None, *, where=None):
    """Work of :meth:`Fluid.s_pT <perftest.thermo.fluid.Fluid.s_pT>` for `fluid`."""
    args = Args("s_pT", p=p, T=T)
    pp, TT = args.flat
    return args.out(pT(fluid, pp, TT, phase, ["s"], where)["s"])
