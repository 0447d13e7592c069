"""The few property calls the balance model needs, with their derivatives.

Everything goes through the property layer, :mod:`perftest.thermo`; this module only
shapes the calls for the model (arrays in, arrays out, derivatives for the Jacobian)
and makes a property-range failure name the stream it happened in.

A model calls these functions at every new point, with flat float arrays of a few
to a few dozen streams, so they take the short way in: the (p, T) rules of
:func:`perftest.thermo.single_phase.pT` directly (no argument shaping) and the
saturated values of :func:`perftest.thermo.saturation.saturated_arrays` (no State
records).  Other inputs (scalars, 2-D arrays) go through the public :class:`Fluid`
methods; the numbers and the messages are the same either way.  :func:`h_pT_sides`
takes the states of every group of one fluid in one call where no saturation rule
applies to any of them, and declines (None) otherwise, leaving the values and the
messages to :func:`h_pT` per group.
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PerftestError, PropertyRangeError
from perftest.thermo.properties import get_fluid
from perftest.thermo.saturation import saturated_arrays
from perftest.thermo.single_phase import (
    backend_h_cp_dhdp,
    far_from_saturation_sides,
    if97_h_cp_dhdp,
    pT,
)

__all__ = ["h_pT", "h_pT_sides", "SIDES", "saturation", "h_px", "state_ph", "dead_state", "fluid"]

# Relative pressure step of the one-sided difference used for dh/dp at fixed
# quality (the only derivative the property layer does not give).  1e-6 keeps the
# truncation error ~1e-6 relative and stays far above the ~1e-12 round-off of
# the saturation functions.
_DP_REL = 1e-6

# outputs of a (p, T) state row
_H_KEYS = ("h", "cp", "dhdp")


#: declared phases whose (p, T) states :func:`h_pT_sides` takes: phase -> (may lie
#: below the saturation line, may lie above it)
SIDES = {None: (True, True), "liquid": (True, False), "vapour": (False, True), "gas": (False, True)}

# Fluid objects by the name the plant file gives (get_fluid caches them too; this
# skips its argument checks on every property call of a model).
_FLUIDS: dict = {}


def fluid(name: str):
    """The cached property object of a fluid name."""
    f = _FLUIDS.get(name) if isinstance(name, str) else None
    if f is None:
        f = get_fluid(name)
        _FLUIDS[name] = f
    return f


def _flat(a):
    """`a` as a flat float array if it is one already (or a copy of one), else None."""
    a = np.asarray(a, dtype=float)
    return np.ascontiguousarray(a) if a.ndim == 1 else None


def _per_stream(call, streams, *arrays):
    """Run ``call`` on all streams at once; on failure, again one by one to name it.

    ``call(*arrays, where=...)`` must accept a ``where`` text for its messages.  The
    vectorised call is the fast path; the loop only runs to build the message.
    """
    try:
        return call(*arrays, where=None)
    except PerftestError as exc:
        for i, sid in enumerate(streams):
            try:
                call(*(np.asarray(a)[i : i + 1] for a in arrays), where=f"stream '{sid}'")
            except PerftestError as inner:
                raise PropertyRangeError(
                    f"{inner} Check the stream's measured values and its 'phase' and "
                    "'fluid' in the plant file.",
                    key=f"streams.{sid}",
                ) from None
        raise PropertyRangeError(f"streams {', '.join(streams)}: {exc}") from None


def _saturated(f, p, where):
    """Saturated-liquid and saturated-vapour states of fluid `f` at pressures `p`."""
    return f.state_px(p, np.zeros_like(p), where=where), f.state_px(p, np.ones_like(p), where=where)


def _sat_values(f, p, where):
    """``T, h_f, rho_f, h_g, rho_g`` on the saturation line at flat pressures `p`.

    The values of :func:`_saturated` without its two State records; when a point
    fails, :func:`_saturated` runs to raise the property layer's message.
    """
    out = saturated_arrays(f, p)
    if out is None:
        liq, vap = _saturated(f, p, where)
        out = liq.T, liq.h, liq.rho, vap.h, vap.rho  # reached only if it did not raise
    return out


def h_pT(name: str, phase, p, T, streams=()):
    """Enthalpy and its partial derivatives from pressure and temperature.

    Parameters
    ----------
    name : str
        Fluid name.
    phase : str or None
        Declared phase (checked by the property layer).
    p : ndarray [Pa]
    T : ndarray [K]
    streams : sequence of str
        Stream ids, for messages.

    Returns
    -------
    h : ndarray [J/kg]
    dh_dT : ndarray [J/(kg K)]
        At constant pressure (= cp).
    dh_dp : ndarray [J/(kg Pa)]
        At constant temperature.
    """
    f = fluid(name)
    pf, Tf = _flat(p), _flat(T)
    if pf is not None and Tf is not None and pf.shape == Tf.shape:
        # flat arrays (the model's case): straight to the (p, T) rules of the
        # property layer, which Fluid.h_pT reaches after shaping its arguments
        def call(pp, TT, where):
            r = pT(f, pp, TT, phase, _H_KEYS, where)
            return r["h"], r["cp"], r["dhdp"]

        return _per_stream(call, streams, pf, Tf)
    p = np.asarray(p, dtype=float)
    T = np.asarray(T, dtype=float)
    h, dhdT, dhdp = _per_stream(
        lambda pp, TT, where: f.h_pT(pp, TT, phase, where=where), streams, p, T
    )
    return np.asarray(h, dtype=float), np.asarray(dhdT, dtype=float), np.asarray(dhdp, float)


def h_pT_sides(name: str, p, T, below, above):
    """:func:`h_pT` of the states of several streams of one fluid in one go, or None.

    Parameters
    ----------
    name : str
        Fluid name.
    p, T : ndarray [Pa, K]
        Flat arrays, the states of several :func:`h_pT` calls end to end.
    below, above : ndarray of bool
        Per state, the sides of the saturation line its declared phase allows
        (:data:`SIDES`).

    Returns
    -------
    (h, dh_dT, dh_dp) or None
        The values :func:`h_pT` gives for each state with its own phase, when
        every state is far from saturation and inside the fluid's range: for IF97
        water the lean path of the property layer, two CoolProp calls for all
        states (CoolProp evaluates each point on its own); for other fluids the
        updates of the full rules without their checks
        (:func:`~perftest.thermo.single_phase.backend_h_cp_dhdp`).  None
        otherwise, with nothing raised or warned: the caller then makes the
        :func:`h_pT` calls, which give the values and the messages.
    """
    f = fluid(name)
    if not f.is_if97:
        return backend_h_cp_dhdp(f, p, T, below, above)
    if not far_from_saturation_sides(f, p, T, below, above):
        return None
    return if97_h_cp_dhdp(f, p, T)


def saturation(name: str, p, streams=()):
    """Saturation temperature and its slope along the saturation line.

    Returns
    -------
    T_sat : ndarray [K]
    dT_dp : ndarray [K/Pa]

    Notes
    -----
    The slope is the Clausius-Clapeyron equation, exact along the saturation line of
    a pure fluid:

    .. math:: \\frac{dT_{sat}}{dp} = \\frac{T_{sat} (v_g - v_f)}{h_g - h_f}
    """
    f = fluid(name)
    pf = _flat(p)
    if pf is not None:
        # saturated_arrays is the first step of _sat_values; where it fails, the
        # whole of _sat_values runs stream by stream to raise the message
        out = saturated_arrays(f, pf)
        if out is None:
            out = _per_stream(lambda pp, where: _sat_values(f, pp, where), streams, pf)
        T, hf, rf, hg, rg = out
        return T, T * (1.0 / rg - 1.0 / rf) / (hg - hf)
    p = np.asarray(p, dtype=float)
    liq, vap = _per_stream(lambda pp, where: _saturated(f, pp, where), streams, p)
    T = np.asarray(liq.T, dtype=float)
    dv = 1.0 / np.asarray(vap.rho, dtype=float) - 1.0 / np.asarray(liq.rho, dtype=float)
    dh = np.asarray(vap.h, dtype=float) - np.asarray(liq.h, dtype=float)
    return T, T * dv / dh


def h_px(name: str, p, x, streams=()):
    """Enthalpy of a wet mixture and its derivatives.

    Returns
    -------
    h : ndarray [J/kg]
        :math:`h_f + x (h_g - h_f)`.
    dh_dp : ndarray [J/(kg Pa)]
        At constant quality (one-sided difference, relative step ``_DP_REL``).
    dh_dx : ndarray [J/kg]
        The latent heat :math:`h_g - h_f`.
    """
    f = fluid(name)
    pf, xf = _flat(p), _flat(x)
    if pf is not None and xf is not None and pf.shape == xf.shape:
        p, x = pf, xf

        def sat_h(pp, where):
            _, hf, _, hg, _ = _sat_values(f, pp, where)
            return hf, hg

    else:
        p = np.asarray(p, dtype=float)
        x = np.asarray(x, dtype=float)

        def sat_h(pp, where):
            liq, vap = _saturated(f, pp, where)
            return np.asarray(liq.h, dtype=float), np.asarray(vap.h, dtype=float)

    hf, hg = _per_stream(sat_h, streams, p)
    dp = p * _DP_REL
    hf2, hg2 = _per_stream(sat_h, streams, p + dp)
    h = hf + x * (hg - hf)
    dh_dp = ((hf2 - hf) + x * ((hg2 - hf2) - (hg - hf))) / dp
    return h, dh_dp, hg - hf


def state_ph(name: str, p, h, streams=()):
    """Full state from pressure and enthalpy (tables, exergy, starting values).

    Returns
    -------
    State
        The property layer's record (``T, s, rho, x`` ... as arrays).
    """
    f = fluid(name)
    return _per_stream(
        lambda pp, hh, where: f.state_ph(pp, hh, where=where),
        streams,
        np.atleast_1d(np.asarray(p, dtype=float)),
        np.atleast_1d(np.asarray(h, dtype=float)),
    )


def dead_state(name: str, T0: float, p0: float):
    """Enthalpy and entropy of a fluid at the dead state ``(T0, p0)`` [J/kg, J/(kg K)]."""
    h0, s0 = fluid(name).dead_state(T0, p0)
    return float(h0), float(s0)
