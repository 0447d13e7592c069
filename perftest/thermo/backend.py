"""Raw CoolProp evaluation of a :class:`~perftest.thermo.fluid.Fluid`.

Two paths: CoolProp's array path ``fast_evaluate`` (IF97 water) and a point-by-point
loop through ``AbstractState.update`` (every backend).  Failed points come back as NaN
with an ok mask; the callers decide what a failure means.  No phase rules here: those
live in :mod:`perftest.thermo.single_phase`.
"""

from __future__ import annotations

import numpy as np

# Relative pressure step of the central difference that gives (dh/dp)_T where CoolProp
# offers no analytic derivative (IF97 backend).  At 1e-5 the step moves the saturation
# temperature by at most ~2e-4 K (dTsat/dp * p is below ~20 K for water at any pressure),
# far inside the 0.05 K margin, so the stencil never crosses the saturation line; the
# truncation error (~1e-10 relative) and the round-off (~1e-10 J/kg / 1e-5 p) are both
# negligible against the uncertainty of any plant measurement.
_FD_REL_STEP = 1e-5


def out_keys(fluid, keys):
    """CoolProp output codes of `keys` as the int32 array fast_evaluate takes (cached)."""
    key = tuple(keys)
    outs = fluid._out_codes.get(key)
    if outs is None:
        outs = np.array([int(fluid._keys[k]) for k in key], dtype=np.int32)
        fluid._out_codes[key] = outs
    return outs


def fast(fluid, pair, a, b, keys):
    """IF97 array path: CoolProp's ``fast_evaluate``; failed points are NaN."""
    outs = out_keys(fluid, keys)
    out = np.empty((a.size, outs.size))
    status = np.empty(a.size, dtype=np.int32)
    fluid._as.fast_evaluate(pair, a, b, outs, out, status)
    res = {k: out[:, i] for i, k in enumerate(keys)}
    if not np.count_nonzero(status):  # the usual case: every point evaluated
        return res, np.ones(a.size, dtype=bool)
    ok = status == 0
    # The array path of CoolProp 8 rejects IF97 region 5 (T > 1073.15 K) as out of
    # range although the point update supports it: retry such points one by one.
    retry = (status == int(fluid._CP.fast_evaluate_out_of_range)) & (a == a) & (b == b)
    if retry.any():
        idx = np.flatnonzero(retry)
        r2, ok2, _ = loop(fluid, pair, a[idx], b[idx], keys)
        for k in keys:
            res[k][idx] = r2[k]
        ok[idx] = ok2
    for k in keys:
        res[k][~ok] = np.nan
    return res, ok


def loop(fluid, pair, a, b, keys):
    """Point-by-point path through ``AbstractState.update``; failures are NaN.

    Returns the outputs, an ok mask and the first CoolProp error message.
    """
    out = {k: np.full(a.size, np.nan) for k in keys}
    ok = np.zeros(a.size, dtype=bool)
    first_error = None
    AS, CP = fluid._as, fluid._CP
    getters = fluid._getters
    for i in range(a.size):
        ai, bi = a[i], b[i]
        if ai != ai or bi != bi:
            continue
        try:
            AS.update(pair, ai, bi)
            for k in keys:
                if k == "dhdp":
                    out[k][i] = AS.first_partial_deriv(CP.iHmass, CP.iP, CP.iT)
                elif k == "dhdT":
                    out[k][i] = AS.first_partial_deriv(CP.iHmass, CP.iT, CP.iP)
                else:
                    out[k][i] = getters[k]()
            ok[i] = True
        except (ValueError, IndexError, RuntimeError) as exc:
            # CoolProp signals range problems as ValueError or IndexError
            if first_error is None:
                first_error = str(exc)
    return out, ok, first_error


def raw_pT(fluid, p, T, keys):
    """Single-phase properties at (p, T) as the backend gives them."""
    CP = fluid._CP
    want_dhdp = "dhdp" in keys
    base = [k for k in keys if k != "dhdp"]
    if fluid.is_if97:
        if want_dhdp and "h" not in base:
            base.append("h")
        res, ok = fast(fluid, CP.PT_INPUTS, p, T, base) if base else ({}, np.ones(p.size, bool))
        err = None
        if want_dhdp:
            # The IF97 backend has no first_partial_deriv; central difference in p,
            # both sides of the stencil in one call (every point is evaluated on its
            # own, so the values are those of two separate calls).
            n = p.size
            dp = _FD_REL_STEP * p
            # a non-finite p gives nan steps, which fast() marks not ok
            with np.errstate(invalid="ignore"):
                hpm, okpm = fast(fluid, CP.PT_INPUTS, *stencil(p, dp, T), ["h"])
                res["dhdp"] = (hpm["h"][:n] - hpm["h"][n:]) / (2.0 * dp)
            ok = ok & okpm[:n] & okpm[n:]
    else:
        res, ok, err = loop(fluid, CP.PT_INPUTS, p, T, keys)
    return res, ok, err


def stencil(p, dp, T):
    """Inputs of the central difference: ``(p + dp, p - dp)`` stacked, `T` twice."""
    n = p.size
    pp = np.empty(2 * n)
    np.add(p, dp, out=pp[:n])
    np.subtract(p, dp, out=pp[n:])
    return pp, np.concatenate((T, T))
