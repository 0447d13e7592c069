"""Declared stream phases against the measured pressure and temperature.

A plant file declares each stream's phase (``liquid``, ``vapour``, ``gas``, ``wet``,
``supercritical``).  The model trusts the declaration: a ``wet`` stream gets the
state equation ``T = T_sat(p)``, a ``liquid`` or ``vapour`` stream ``h = h(p, T)`` on
its side of the saturation line.  A wrong declaration is therefore not a small error:
a superheated main steam declared ``wet`` turns its thermometer into a gross error of
hundreds of standard uncertainties, which elimination then drops, and every result
built on that temperature moves.  :func:`check_declared_phases` compares each stream
whose pressure and temperature are both known (measured or fixed) with the
saturation line before anything is reconciled, and refuses a declaration the
measurements contradict beyond their uncertainty.

The test statistic is the distance of the measured temperature from the saturation
temperature at the measured pressure, in units of its standard uncertainty

.. math::

    u_{\\Delta} = \\sqrt{u_T^2 + \\left(\\frac{dT_{sat}}{dp}\\,u_p\\right)^2},

with ``dT_sat/dp`` from a central difference on the saturation line (pressure and
temperature instruments independent).  A declaration fails when the measurements lie
more than :data:`PHASE_COVERAGE` (3) of those uncertainties on the wrong side (and at
least the property layer's saturation margin), so a stream measured close to
saturation, a saturated drain or a slightly subcooled condensate, still passes.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from perftest.errors import DeclaredPhaseError

__all__ = ["check_declared_phases", "PHASE_COVERAGE"]

#: How many combined standard uncertainties the measured state may lie on the wrong
#: side of the saturation line before its declared phase is refused.  Three keeps
#: the chance of refusing a correct declaration by chance below 0.2 % per stream
#: (normal errors), yet catches the declarations that matter (a wrong phase moves
#: the state by tens to hundreds of kelvin).  Common practice, no source.
PHASE_COVERAGE = 3.0

# Relative pressure step of the central difference for dT_sat/dp; the saturation
# line is smooth, so 1e-4 gives the slope to ~1e-8 relative, far below what the
# check needs (its threshold is a multiple of an uncertainty).
_DP_REL = 1e-4


def _c(T: float) -> str:
    return f"{T:.2f} K ({T - 273.15:.2f} °C)"


def _known(source, measured):
    """(value, u, label) of a stream variable, or None when it cannot be checked."""
    if source is None:
        return None
    if source.kind == "fixed" and source.value is not None:
        return float(source.value), 0.0, "fixed"
    if source.kind == "measured" and source.tag in measured:
        value, u = measured[source.tag]
        value, u = float(value), float(u)
        if math.isfinite(value) and math.isfinite(u):
            return value, u, f"tag '{source.tag}'"
    return None


def check_declared_phases(plant, spec, measured: Mapping) -> None:
    """Refuse declared phases that the measured pressure and temperature contradict.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
        The plant file (for the file name and line of each stream's ``phase``).
    spec : perftest.plant.spec.ModelSpec
        Its checked streams (``build_model(plant).spec``).
    measured : mapping of str to (float, float)
        Tag or group id -> (mean value [SI], standard uncertainty [SI]).  Tags it
        lacks, or holds as nan, are not checked.

    Raises
    ------
    DeclaredPhaseError
        A :class:`~perftest.errors.PlantFileError` and a
        :class:`~perftest.errors.PropertyRangeError`: a stream's measured state lies
        more than :data:`PHASE_COVERAGE` combined standard uncertainties on the wrong
        side of saturation for its declared phase: above the saturation temperature
        for ``liquid``, below it for ``vapour`` or ``gas``, off it either way for
        ``wet``; a ``wet`` stream above the critical pressure; a ``supercritical``
        stream below both the critical pressure and temperature.  The message names
        the stream, the declared phase, the measured p and T, the saturation
        temperature and the tags.

    Notes
    -----
    Streams whose fluid has no single saturation line (pseudo-pure air, ideal-gas
    mixtures) and ``liquid``/``vapour``/``gas`` streams at or above the critical
    pressure are not checked: there is no line to be on the wrong side of.
    """
    from perftest.plant.states import fluid as get_fluid
    from perftest.thermo.saturation import tsat_or_nan

    fix = (
        " Correct the stream's 'phase' in the plant file (liquid, vapour, wet, gas, "
        "supercritical) or check the pressure and temperature instruments."
    )

    def where(sid, st, p, u_p, p_src, T, u_T, T_src):
        return (
            f"Stream '{sid}' is declared {st.phase!r}, but its measured pressure "
            f"{p / 1e6:.6g} MPa ({p_src}, u = {u_p / 1e6:.3g} MPa) and temperature "
            f"{_c(T)} ({T_src}, u = {u_T:.3g} K)"
        )

    todo = []  # streams to compare with the saturation line, in file order
    for sid, st in spec.streams.items():
        if st.phase is None:
            continue
        pk = _known(st.sources.get("pressure"), measured)
        Tk = _known(st.sources.get("temperature"), measured)
        if pk is None or Tk is None:
            continue
        (p, u_p, p_src), (T, u_T, T_src) = pk, Tk
        if not (p > 0):
            continue
        try:
            f = get_fluid(st.fluid)
        except Exception:  # an unknown fluid is reported by the model, not here
            continue
        state = (sid, st, p, u_p, p_src, T, u_T, T_src)
        pc, Tc = float(f.p_critical), float(f.T_critical)
        if st.phase == "supercritical":
            if p + PHASE_COVERAGE * u_p < pc and T + PHASE_COVERAGE * u_T < Tc:
                raise _error(
                    plant,
                    f"{where(*state)} lie below both the critical pressure "
                    f"{pc / 1e6:.6g} MPa and the critical temperature {_c(Tc)}.{fix}",
                    sid,
                )
            continue
        if st.phase == "wet" and p - PHASE_COVERAGE * u_p >= pc:
            raise _error(
                plant,
                f"{where(*state)} lie above the critical pressure {pc / 1e6:.6g} MPa, where "
                f"no liquid-vapour mixture exists.{fix}",
                sid,
            )
        if st.phase in ("liquid", "vapour", "gas", "wet"):
            todo.append((f, state))
    # one saturation call per fluid: each pressure and its two neighbours
    tsat = {}
    for name in dict.fromkeys(f.name for f, _ in todo):
        items = [(k, f, st) for k, (f, st) in enumerate(todo) if f.name == name]
        p = np.array([st[2] for _, _, st in items])
        pp = np.concatenate([p, p * (1 - _DP_REL), p * (1 + _DP_REL)])
        ts = tsat_or_nan(items[0][1], pp).reshape(3, -1)
        for col, (k, _, _) in enumerate(items):
            tsat[k] = ts[:, col]
    for k, (f, state) in enumerate(todo):
        sid, st, p, u_p, _, T, u_T, _ = state
        ts = tsat[k]
        if not np.isfinite(ts[0]):
            continue  # no saturation line here (critical region, pseudo-pure fluid)
        dTdp = (ts[2] - ts[1]) / (2 * p * _DP_REL) if np.all(np.isfinite(ts)) else 0.0
        u = math.hypot(u_T, dTdp * u_p)
        limit = max(PHASE_COVERAGE * u, float(f.saturation_margin))
        dT = T - float(ts[0])
        if st.phase == "liquid":
            wrong, side = dT > limit, "above"
        elif st.phase in ("vapour", "gas"):
            wrong, side = dT < -limit, "below"
        else:  # wet
            wrong, side = abs(dT) > limit, "above" if dT > 0 else "below"
        if wrong:
            ratio = abs(dT) / u if u > 0 else math.inf
            raise _error(
                plant,
                f"{where(*state)} lie {abs(dT):.2f} K {side} the saturation temperature "
                f"{_c(float(ts[0]))} at that pressure, {ratio:.3g} times the combined "
                f"standard uncertainty {u:.3g} K (the limit is {PHASE_COVERAGE:g} times, at "
                f"least {f.saturation_margin:g} K).{fix}",
                sid,
            )


def _error(plant, message: str, sid: str) -> DeclaredPhaseError:
    """The error with the plant file's name, key and line (as ``plant.error`` gives)."""
    key = f"streams.{sid}.phase"
    error = getattr(plant, "error", None)
    if error is None:
        return DeclaredPhaseError(message, key=key)
    located = error(message, "streams", sid, "phase")
    return DeclaredPhaseError(
        str(located), file=located.file, line=located.line, key=located.key or key
    )
