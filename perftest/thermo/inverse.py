"""States from pressure and enthalpy or entropy: (p, h) and (p, s) inputs.

For ``"water"`` (IAPWS-IF97) CoolProp returns the temperature of the backward
equations, consistent with the forward equations to 25 mK; Newton steps on the
forward equation refine it so that h(p, T(p, h)) reproduces h to 1e-9 relative.
Other fluids use CoolProp's iterative HEOS solver as it is.

For IF97 water the Newton steps of all states of a call, liquid, vapour and
supercritical, go to CoolProp in one array call per step (it evaluates every point
on its own, so the numbers are those of one call per side), with the saturation
rules of :func:`~perftest.thermo.single_phase.pT_quiet` (anchor within the margin,
steps kept on their side of the line) applied per state.  When every state lies
well away from the line (a bracket of Tsat(p) on a grid decides, as for (p, T)
states), the steps skip Eq. 31 and the rules, which would change nothing there
(:func:`_solve_far`); otherwise, or when an iterate comes near the line, the call
takes the full rules from the start (:func:`_solve_near`).  Both give the same
floating-point numbers as one ``pT_quiet`` call per side and Newton step.
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PropertyRangeError
from perftest.thermo.backend import _FD_REL_STEP, fast, loop, out_keys, stencil
from perftest.thermo.checks import Args, fmt_state, more, prefix, range_hint
from perftest.thermo.if97 import P_CRITICAL, P_TRIPLE, if97_tsat
from perftest.thermo.saturation import (
    _SCREEN_POINTS,
    _SCREEN_SLACK,
    sat_side_values,
    tsat_or_nan,
)
from perftest.thermo.single_phase import pT_quiet
from perftest.thermo.states import State, make_state


def solve_T(fluid, p, target, key, where):
    """T, quality and side for (p, h) or (p, s) inputs (flat arrays).

    Returns ``T, x, two_phase, side`` with side +1 vapour/gas, -1 liquid, 0 above
    the critical pressure.
    """
    T, x, two, side, _ = _solve(fluid, p, target, key, where)
    return T, x, two, side


def _solve(fluid, p, target, key, where):
    """:func:`solve_T`, and for IF97 water what the state's values need.

    The fifth value is None for other fluids.  For IF97 water it is ``(single, ps,
    Ts, tqs, ss)``: the mask of the single-phase states, their pressures,
    temperatures, saturation temperatures as
    :func:`~perftest.thermo.saturation.tsat_or_nan` gives them (for the
    saturation rules of :func:`_quiet_T`; None when every state is far from
    saturation) and sides.
    """
    CP = fluid._CP
    n = p.size
    valid = (p == p) & (target == target)  # (not NaN; cheaper than ~np.isnan twice)
    if fluid.is_if97 and key == "h":
        res, ok = _evaluate(fluid, CP.HmassP_INPUTS, target, p, ("T", "x"))
        err = None
    else:
        pair = CP.HmassP_INPUTS if key == "h" else CP.PSmass_INPUTS
        if fluid.is_if97:
            res, ok, err = loop(fluid, pair, p, target, ["T", "x"])
        else:
            a, b = (target, p) if key == "h" else (p, target)
            res, ok, err = loop(fluid, pair, a, b, ["T", "x"])
    if ok is not None:
        failed = valid & ~ok
        if np.count_nonzero(failed):
            i = int(np.flatnonzero(failed)[0])
            state = fmt_state(p[i], h=target[i]) if key == "h" else fmt_state(p[i], s=target[i])
            detail = f" (CoolProp: {err})" if err else ""
            raise PropertyRangeError(
                f"{prefix(where)}{state} is outside the range of {fluid.formulation} for "
                f"{fluid.name}{range_hint(fluid)}.{detail}" + more(failed)
            )
    # a NaN input is a gap: its state is NaN, whatever the backend made of it
    T = np.where(valid, res["T"], np.nan)
    x = np.where(valid, res["x"], np.nan)
    below = p < fluid.p_critical
    two = (x >= 0) & (x <= 1) & below
    if not fluid.is_if97:
        tsat = tsat_or_nan(fluid, p)
        side = np.where(below, np.where(T < tsat, -1.0, 1.0), 0.0)
        side[two] = 0.0
        return T, np.where(two, x, np.nan), two, side, None
    # IF97: CoolProp's (p, h) and (p, s) use the backward equations alone, whose
    # temperature may be off by up to 25 mK (region 1) or 10 mK (region 2), IF97 Table
    # 3; Newton steps on the forward equation make h(p, T) reproduce the input exactly.
    single = valid & ~two
    all_single = np.count_nonzero(single) == n
    pi, ti, Ti = (p, target, T) if all_single else (p[single], target[single], T[single])
    side = np.zeros(n)
    if not pi.size:  # wet states and gaps only
        return T, np.where(two, x, np.nan), two, side, (single, pi, Ti, None, side[single])
    solved = _solve_far(fluid, pi, ti, Ti, key)
    if solved is not None:
        Ti, si = solved
        tqi = None
    else:
        Ti, si, tqi = _solve_near(fluid, p, target, T, key, below & single, single)
    if all_single:
        T, side = Ti, si
    else:
        T = T.copy()
        T[single] = Ti
        side[single] = si
    return T, np.where(two, x, np.nan), two, side, (single, pi, Ti, tqi, si)


# the bracket of _tsat_bracket, built on first use
_BRACKET = None


def _tsat_bracket():
    """Bounds of the IF97 saturation temperature around any pressure (cached).

    Returns ``q, lo, hi``: with ``k = q.searchsorted(p, "right")``, Tsat(p) of Eq.
    31 lies in ``[lo[k], hi[k]]`` for triple <= p < critical pressure; ``lo`` is
    -inf and ``hi`` +inf below the triple-point pressure (no bound), both NaN at
    and above the critical pressure.  Tsat rises with p, so between two grid
    pressures it lies between their saturation temperatures; the bounds widen that
    bracket by a slack that covers the round-off of Eq. 31 (~1e-13 K) a million
    times.  The grid of :func:`~perftest.thermo.saturation.if97_screen`.
    """
    global _BRACKET
    if _BRACKET is None:
        q = np.geomspace(P_TRIPLE, P_CRITICAL, _SCREEN_POINTS)
        q[0], q[-1] = P_TRIPLE, P_CRITICAL
        ts = if97_tsat(q)
        lo = np.concatenate(([-np.inf], ts[:-1] - _SCREEN_SLACK, [np.nan]))
        hi = np.concatenate(([np.inf], ts[1:] + _SCREEN_SLACK, [np.nan]))
        _BRACKET = q, lo, hi
    return _BRACKET


def _solve_far(fluid, p, target, T, key):
    """The Newton steps of :func:`_solve_near` for states far from saturation.

    `p`, `target`, `T` (the backward temperature) are the single-phase states.
    When every state below the critical pressure lies more than 0.1 K and the
    saturation margin from the bracket of its saturation temperature
    (:func:`_tsat_bracket`), and every Newton iterate stays beyond the margin,
    :func:`_solve_near` would find the same sides (T against Tsat, with no state
    close enough to ask the saturated values), evaluate every state where it is
    (no anchor) and leave every step as it is (its bounds Tsat -/+ 1e-6 K lie
    inside the margin): the same numbers without Eq. 31.  Returns ``T, side``, or
    None when a state or an iterate is not that far (the caller then takes
    :func:`_solve_near` from the start).
    """
    q, lo_t, hi_t = _tsat_bracket()
    k = q.searchsorted(p, "right")
    lo, hi = lo_t[k], hi_t[k]
    margin = fluid.saturation_margin
    d = max(0.1, margin)
    liq = T < lo - d
    vap = T > hi + d
    # above the critical pressure lo and hi are NaN: neither side, no saturation rule
    if np.count_nonzero(liq | vap | (p >= fluid.p_critical)) != p.size:
        return None
    side = np.where(liq, -1.0, np.where(vap, 1.0, 0.0))
    # iterates must stay below lo - margin (liquid) or above hi + margin (vapour)
    upper = np.where(liq, lo - margin, np.inf)
    lower = np.where(vap, hi + margin, -np.inf)
    CP = fluid._CP
    keys = (key, "cp")
    for _ in range(3):
        r, _ = _evaluate(fluid, CP.PT_INPUTS, p, T, keys)
        val, cp = r[key], r["cp"]
        slope = cp if key == "h" else cp / T
        step = (val - target) / slope
        Tn = T - step
        # (a NaN or infinite iterate fails this test as well)
        if np.count_nonzero((Tn < upper) & (Tn > lower)) != Tn.size:
            return None
        T = Tn
        if (np.abs(step) < 1e-9 * T).all():
            break
    return T, side


def _solve_near(fluid, p, target, T, key, sub, single):
    """Newton steps on the forward equation with the saturation rules, in full.

    `sub` marks the single-phase states below the critical pressure, `single` all
    single-phase states (flat masks over `p`).  Returns the refined temperatures,
    sides and saturation temperatures (those of
    :func:`~perftest.thermo.saturation.tsat_or_nan`) of the `single` states.
    """
    n = p.size
    side = np.zeros(n)
    tsat = np.full(n, np.nan)
    tsat[sub] = if97_tsat(p[sub])
    side[sub] = np.where(T[sub] < tsat[sub], -1.0, 1.0)
    # Near the line the backward T may sit on the wrong side: decide by the
    # saturated values there.
    close = sub & (np.abs(T - tsat) < 0.1)
    if np.count_nonzero(close):
        f, g = sat_side_values(fluid, p[close], key)
        tc = target[close]
        side[close] = np.where(tc <= f, -1.0, np.where(tc >= g, 1.0, side[close]))
    pi, ti, si, ts, Ti = p[single], target[single], side[single], tsat[single], T[single]
    # The saturation temperature of the (p, T) rules is that of tsat_or_nan, which
    # leaves it out below the triple-point pressure (Eq. 31 is elementwise: its
    # values are those of a call on any subset).  Single-phase states off the line
    # (p >= pc) have side 0 and NaN here, so pT_quiet's "no phase" needs no mask.
    tqi = np.where(pi >= fluid.p_triple, ts, np.nan)
    # pT_quiet's Newton steps on each state's side, the states of every side in one
    # call (fast_evaluate treats every point on its own).  The side bounds keep the
    # iterate on its side of the line (and never on it): ts -/+ 1e-6 K on the
    # liquid/vapour side, +/-inf (no bound) elsewhere, so that np.minimum and
    # np.maximum leave every other iterate as it is, NaN included.
    upper = np.where(si < 0, ts - 1e-6, np.inf)
    lower = np.where(si > 0, ts + 1e-6, -np.inf)
    CP = fluid._CP
    keys = (key, "cp")
    for _ in range(3):
        T_eval, near = _quiet_T(fluid, Ti, tqi, si)
        r, _ = _evaluate(fluid, CP.PT_INPUTS, pi, T_eval, keys)
        if near is not None:
            _extrapolate(r, key, near, Ti, T_eval)
        val, cp = r[key], r["cp"]
        slope = cp if key == "h" else cp / Ti
        step = (val - ti) / slope
        Tn = np.maximum(np.minimum(Ti - step, upper), lower)
        ok_step = np.isfinite(Tn)
        Ti = np.where(ok_step, Tn, Ti)
        if np.count_nonzero(ok_step) == ok_step.size:
            done = (np.abs(step) < 1e-9 * Ti).all()
        else:
            done = (np.abs(step[ok_step]) < 1e-9 * Ti[ok_step]).all()
        if done:
            break
    return Ti, si, tqi


def _evaluate(fluid, pair, a, b, keys):
    """``fast_evaluate`` of `keys`: a dict of columns and None when every point passed.

    When a point fails, the values and ok mask of
    :func:`~perftest.thermo.backend.fast` (which evaluates the call again with its
    retries; the rare path).
    """
    outs = out_keys(fluid, keys)
    out = np.empty((a.size, outs.size))
    status = np.empty(a.size, dtype=np.int32)
    fluid._as.fast_evaluate(pair, a, b, outs, out, status)
    if np.count_nonzero(status):
        return fast(fluid, pair, a, b, list(keys))
    return {k: out[:, i] for i, k in enumerate(keys)}, None


def _quiet_T(fluid, T, tsat, side):
    """Where :func:`~perftest.thermo.single_phase.pT_quiet` evaluates IF97 water.

    `tsat` as :func:`~perftest.thermo.saturation.tsat_or_nan` gives it (NaN above
    the critical pressure, where `side` is 0 and pT_quiet sets no anchor), `side`
    -1 (liquid) or +1 (vapour) below it.  Returns ``T_eval, near``: states within
    the saturation margin are evaluated at the anchor Tsat -/+ margin on their
    side; `near` marks them (None when there is none).
    """
    margin = fluid.saturation_margin
    near = np.abs(T - tsat) <= margin
    if not np.count_nonzero(near):
        return T, None
    T_eval = np.where(near, np.where(side < 0, tsat - margin, tsat + margin), T)
    return T_eval, near


def _extrapolate(res, key, near, T, T_eval):
    """pT_quiet's step along the isobar from the anchor to T, for `key` (h or s)."""
    Ta = T_eval[near]
    cpa = res["cp"][near]
    if key == "h":
        res["h"][near] += cpa * (T[near] - Ta)
    else:
        res["s"][near] += cpa * np.log(T[near] / Ta)


def state_from(fluid, p, target, key, where):
    """T, quality and the flat property arrays for (p, h) or (p, s) inputs."""
    T, x, two, side, if97 = _solve(fluid, p, target, key, where)
    n = p.size
    names = ("h", "s", "cp", "rho", "dhdp")
    rows = np.full((len(names), n), np.nan)  # one block, a row per output
    rows[names.index(key)] = target
    out = dict(zip(names, rows, strict=True))
    other = "s" if key == "h" else "h"
    if if97 is not None:
        single, ps, Ts, tqs, ss = if97
        if ps.size:
            # the values of pT_quiet on each state's side, the states of every side
            # in one call (and h only where it is kept or differentiated); far from
            # saturation (tqs None) no state is near the line
            T_eval, near = (Ts, None) if tqs is None else _quiet_T(fluid, Ts, tqs, ss)
            CP = fluid._CP
            r, _ = _evaluate(fluid, CP.PT_INPUTS, ps, T_eval, (other, "cp", "rho"))
            # (dh/dp)_T as raw_pT makes it: central difference, both sides in one call
            m = ps.size
            dp = _FD_REL_STEP * ps
            with np.errstate(invalid="ignore"):
                hpm, _ = _evaluate(fluid, CP.PT_INPUTS, *stencil(ps, dp, T_eval), ("h",))
                r["dhdp"] = (hpm["h"][:m] - hpm["h"][m:]) / (2.0 * dp)
            if near is not None:
                _extrapolate(r, other, near, Ts, T_eval)
            # (a NaN temperature gives NaN values, as the states left out before)
            for k in (other, "cp", "rho", "dhdp"):
                out[k][single] = r[k]
    else:
        single = ~two & ~np.isnan(T)
        phase_of = {-1.0: "liquid", 1.0: "vapour", 0.0: None}
        for sv in (-1.0, 0.0, 1.0):
            m = single & (side == sv)
            if not m.any():
                continue
            r = pT_quiet(fluid, p[m], T[m], phase_of[sv], [other, "cp", "rho", "dhdp"])
            for k in (other, "cp", "rho", "dhdp"):
                out[k][m] = r[k]
    if np.count_nonzero(two):
        vo, vr = _wet(fluid, p[two], x[two], other)
        out[other][two] = vo
        out["rho"][two] = vr
    return T, x, out


def _wet(fluid, p, x, other):
    """`other` (h or s) and rho of wet states at (p, x) (flat arrays).

    The ``PQ_INPUTS`` updates of :func:`~perftest.thermo.backend.loop` in the same
    order, with its NaN for a point that fails.
    """
    AS, pair = fluid._as, fluid._CP.PQ_INPUTS
    get_o, get_rho = fluid._getters[other], fluid._getters["rho"]
    vo = np.full(p.size, np.nan)
    vr = np.full(p.size, np.nan)
    for i, (pi, xi) in enumerate(zip(p.tolist(), x.tolist(), strict=True)):
        try:
            AS.update(pair, pi, xi)
            vo[i] = get_o()
            vr[i] = get_rho()
        except (ValueError, IndexError, RuntimeError):
            pass  # NaN values, as loop() leaves them
    return vo, vr


def state_ph(fluid, p, h, *, where=None) -> State:
    """Work of :meth:`Fluid.state_ph <perftest.thermo.fluid.Fluid.state_ph>` for `fluid`."""
    args = Args("state_ph", p=p, h=h)
    pp, hh = args.flat
    T, x, out = state_from(fluid, pp, hh, "h", where)
    return make_state(args, pp, T, out, x)


def state_ps(fluid, p, s, *, where=None) -> State:
    """Work of :meth:`Fluid.state_ps <perftest.thermo.fluid.Fluid.state_ps>` for `fluid`."""
    args = Args("state_ps", p=p, s=s)
    pp, ss = args.flat
    T, x, out = state_from(fluid, pp, ss, "s", where)
    return make_state(args, pp, T, out, x)


def T_ph(fluid, p, h, *, where=None):
    """Work of :meth:`Fluid.T_ph <perftest.thermo.fluid.Fluid.T_ph>` for `fluid`."""
    args = Args("T_ph", p=p, h=h)
    pp, hh = args.flat
    T, _, _, _ = solve_T(fluid, pp, hh, "h", where)
    return args.out(T)


def s_ph(fluid, p, h, *, where=None):
    """Work of :meth:`Fluid.s_ph <perftest.thermo.fluid.Fluid.s_ph>` for `fluid`."""
    return state_ph(fluid, p, h, where=where).s
