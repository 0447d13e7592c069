"""Starting values of the unmeasured model variables.

The reconciliation iterates from the measured values and these guesses, so the
guesses only need to be valid states on the right side of saturation and of the
right size; the solver does the rest.  The order follows how the plant engineer
would fill in a heat balance by hand:

1. mass flows from the mass balances (least squares over the unknown flows, the
   minimum-norm split where the balances leave a choice);
2. pressures from streams joined through units without a large pressure change
   (splitters, mixers, exchangers, boilers, condensers), then temperatures from
   neighbours; a measured enthalpy gives the temperature;
3. each stream nudged to its declared phase (liquid below, vapour above the
   saturation temperature; wet streams on it);
4. enthalpies from the states (wet streams at quality 0.9 unless it is known);
5. powers, heats and losses, one unit at a time, from their energy equations.
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PerftestError
from perftest.plant import states as thermo

__all__ = ["initial_guess"]

# Margin [K] between a guessed temperature and saturation: wide enough that the
# property layer's saturation margin (0.05 K) never triggers on a guess.
_MARGIN = 5.0
# Quality of a wet stream whose enthalpy is unknown: typical of a condensing
# turbine exhaust (common practice, no source).
_WET_QUALITY = 0.9
_DEFAULT_T = 300.0  # K, a liquid or gas at room temperature
_DEFAULT_P = 101325.0  # Pa


def _sat_T(fluid: str, p: float) -> float | None:
    try:
        return float(thermo.fluid(fluid).saturation_T(p))
    except (PerftestError, ValueError):
        return None  # above the critical pressure, or a fluid without saturation data


def _sat_p(fluid: str, T: float) -> float | None:
    try:
        return float(thermo.fluid(fluid).saturation_p(T))
    except (PerftestError, ValueError):
        return None


def _by_fluid(spec, sids) -> dict:
    groups: dict = {}
    for sid in sids:
        groups.setdefault(spec.streams[sid].fluid, []).append(sid)
    return groups


def _sat_T_many(spec, sids, p) -> dict:
    """:func:`_sat_T` of each stream in ``sids`` at ``p[sid]``, one call per fluid.

    A call that fails (a stream above the critical pressure) is repeated stream by
    stream, so each stream gets what :func:`_sat_T` gives it alone.
    """
    out = {}
    for fl, members in _by_fluid(spec, sids).items():
        try:
            Ts = np.atleast_1d(
                np.asarray(thermo.fluid(fl).saturation_T(np.array([p[s] for s in members])))
            )
            out.update(zip(members, (float(t) for t in Ts), strict=True))
        except (PerftestError, ValueError):
            out.update((s, _sat_T(fl, p[s])) for s in members)
    return out


def _T_ph_many(spec, sids, p, h) -> dict:
    """Temperatures of single-phase streams from (p, h), one call per fluid; a stream
    whose state fails (the call is then repeated stream by stream) is left out."""
    out = {}
    for fl, members in _by_fluid(spec, sids).items():
        try:
            st = thermo.state_ph(fl, [p[s] for s in members], [h[s] for s in members], members)
            out.update(zip(members, (float(t) for t in st.T), strict=True))
        except PerftestError:
            for s in members:
                try:
                    out[s] = float(thermo.state_ph(fl, p[s], h[s], (s,)).T[0])
                except PerftestError:
                    pass
    return out


def _fill_from(values: dict, neighbours: dict) -> None:
    """Give unknown entries the mean of known neighbours, spreading outwards."""
    changed = True
    while changed:
        changed = False
        for sid, val in values.items():
            if val is not None:
                continue
            near = [values[n] for n in neighbours[sid] if values[n] is not None]
            if near:
                values[sid] = float(np.mean(near))
                changed = True


def initial_guess(model, x) -> np.ndarray:
    """Starting values of ``y`` for :class:`~perftest.model.PlantModel` ``model``.

    Parameters
    ----------
    model : PlantModel
    x : ndarray (n_x,)
        Measured tag values [SI].

    Returns
    -------
    ndarray (n_y,)
        Guesses [SI] in the order of ``model.unmeasured``.
    """
    v = model.slot_values(x, np.full(model.n_y, np.nan))
    idx = model.index
    spec = model.spec
    same_p, near = model._neighbours

    # 1. mass flows
    m_slots = np.array([idx[f"{s}.mass_flow"] for s in spec.streams])
    unknown = m_slots[np.isnan(v[m_slots])]
    if unknown.size:
        mass_rows = [i for i, r in enumerate(model.rows) if r.kind == "mass"]
        known_flows = np.abs(v[m_slots][~np.isnan(v[m_slots])])
        typical = float(np.median(known_flows)) if known_flows.size else 1.0
        if mass_rows:
            L = model._L[mass_rows].toarray()
            vk = np.nan_to_num(v.copy())
            vk[unknown] = 0.0
            rhs = -(L @ vk)
            sol = np.linalg.lstsq(L[:, unknown], rhs, rcond=None)[0]
            v[unknown] = sol
        bad = unknown[~(v[unknown] > 0.01 * typical)]
        v[bad] = typical

    # 2. pressures and temperatures
    def known(var):
        out = {}
        for sid in spec.streams:
            val = v[idx[f"{sid}.{var}"]]
            out[sid] = None if np.isnan(val) else float(val)
        return out

    p_given = known("pressure")
    T_given = known("temperature")
    h_given = known("enthalpy")
    p = dict(p_given)
    T = dict(T_given)
    for sid, st in spec.streams.items():
        if p[sid] is None and st.phase == "wet" and T[sid] is not None:
            p[sid] = _sat_p(st.fluid, T[sid])
    _fill_from(p, same_p)
    _fill_from(p, near)
    T.update(
        _T_ph_many(
            spec,
            [
                s
                for s in spec.streams
                if T[s] is None and h_given[s] is not None and p[s] is not None
            ],
            p,
            h_given,
        )
    )
    wet = [
        s
        for s, st in spec.streams.items()
        if T[s] is None and st.phase == "wet" and p[s] is not None
    ]
    T.update(_sat_T_many(spec, wet, p))
    _fill_from(T, near)
    for sid in spec.streams:
        if p[sid] is None:
            p[sid] = _DEFAULT_P
        if T[sid] is None:
            T[sid] = _DEFAULT_T

    # 3. phases: only guessed values move (each stream's saturation temperature at its
    #    pressure before any of them moved: a stream changes only its own p and T)
    phased = [s for s, st in spec.streams.items() if st.phase in ("liquid", "vapour", "wet")]
    sat = _sat_T_many(spec, phased, p)
    for sid in phased:
        st = spec.streams[sid]
        Ts = sat[sid]
        if Ts is None:
            continue
        if st.phase == "wet":
            if T_given[sid] is None:
                T[sid] = Ts
            elif p_given[sid] is None:
                p[sid] = _sat_p(st.fluid, T[sid]) or p[sid]
            continue
        wrong = T[sid] > Ts - _MARGIN if st.phase == "liquid" else T[sid] < Ts + _MARGIN
        if not wrong:
            continue
        if T_given[sid] is None:
            T[sid] = Ts - _MARGIN if st.phase == "liquid" else Ts + 4 * _MARGIN
        elif p_given[sid] is None:
            shift = _MARGIN if st.phase == "liquid" else -_MARGIN
            ps = _sat_p(st.fluid, T[sid] + shift)
            if ps is not None:
                p[sid] = ps * (1.5 if st.phase == "liquid" else 0.7)

    # 4. enthalpies: from the states, then carried across valves and splitters
    #    (h_out = h_in) to streams whose enthalpy the state does not fix
    for sid in spec.streams:
        v[idx[f"{sid}.pressure"]] = p[sid]
        v[idx[f"{sid}.temperature"]] = T[sid]
    h = dict(h_given)
    h.update(
        _h_batch(
            spec,
            [
                s
                for s, st in spec.streams.items()
                if h[s] is None and st.phase != "wet" and T_given[s] is not None
            ],
            p,
            T,
        )
    )
    same_h: dict = {s: set() for s in spec.streams}
    for row_index, row in enumerate(model.rows):
        if row.kind == "equal_h":
            a, b = (model.variables[c].rsplit(".", 1)[0] for c in _row_slots(model, row_index))
            same_h[a].add(b)
            same_h[b].add(a)
    _fill_from(h, same_h)
    # a carried enthalpy fixes the temperature of a single-phase stream
    carried = [
        s
        for s, st in spec.streams.items()
        if h[s] is not None and h_given[s] is None and T_given[s] is None and st.phase != "wet"
    ]
    fixed = _T_ph_many(spec, carried, p, h)
    for sid in carried:
        if sid in fixed:
            T[sid] = fixed[sid]
            v[idx[f"{sid}.temperature"]] = T[sid]
        else:
            h[sid] = None
    for sid, st in spec.streams.items():
        if h[sid] is None and st.phase == "wet":
            qi = idx.get(f"{sid}.quality")
            q = v[qi] if qi is not None and not np.isnan(v[qi]) else _WET_QUALITY
            h[sid] = float(thermo.h_px(st.fluid, [p[sid]], [q], (sid,))[0][0])
    h.update(_h_batch(spec, [s for s in spec.streams if h[s] is None], p, T))
    for sid in spec.streams:
        v[idx[f"{sid}.enthalpy"]] = h[sid]

    # 5. flows, powers and heats: with the enthalpies held, the mass and energy
    #    balances are linear in the unknown flows and unit variables, and with the
    #    flows held, linear in the unknown wet enthalpies; two rounds of each.
    unit_slots = [idx[f"{uid}.{var}"] for uid, unit in spec.units.items() for var in unit.variables]
    for s in unit_slots:
        if np.isnan(v[s]):
            v[s] = 0.0  # losses stay at zero; powers and heats are solved for below
    free_units = [
        s
        for s in unit_slots
        if model._slot_y[s] >= 0 and not model.variables[s].endswith(("heat_loss", ".losses"))
    ]
    free_m = [s for s in unknown.tolist()]
    free_h = [
        idx[f"{sid}.enthalpy"]
        for sid, st in spec.streams.items()
        if st.phase == "wet" and h_given[sid] is None and f"{sid}.quality" not in idx
    ]
    bounds = []
    for s in free_h:
        sid = model.variables[s].rsplit(".", 1)[0]
        # a wet stream stays wet: quality between 0.01 and 1
        bounds.append(
            thermo.h_px(spec.streams[sid].fluid, [p[sid]] * 2, [0.01, 1.0], (sid,) * 2)[0]
        )
    for _ in range(2):
        _linear_step(model, v, free_m + free_units, ("mass", "energy"), positive=free_m)
        if free_h:
            before = v[free_h].copy()
            _linear_step(model, v, free_h + free_units, ("energy", "equal_h"))
            for j, s in enumerate(free_h):
                lo, hi = bounds[j]
                v[s] = float(np.clip(v[s], lo, hi)) if np.isfinite(v[s]) else before[j]
    if getattr(model, "combustion", None) is not None:
        # 6. the firing side: unknown flows from the water side and the flue-gas analysis
        from perftest.plant.combustion import guess as firing_guess

        firing_guess(model.combustion, idx, v)
    return v[model._ys].copy() if model.n_y else np.zeros(0)


def _h_batch(spec, sids, p, T) -> dict:
    """Enthalpies h(p, T) of single-phase streams, one property call per fluid and phase."""
    groups: dict = {}
    for sid in sids:
        st = spec.streams[sid]
        groups.setdefault((st.fluid, st.phase), []).append(sid)
    out = {}
    for (fl, ph), members in groups.items():
        h = thermo.h_pT(fl, ph, [p[s] for s in members], [T[s] for s in members], members)[0]
        out.update(zip(members, (float(x) for x in np.atleast_1d(h)), strict=True))
    return out


def _row_slots(model, r):
    L = model._L
    return L.indices[L.indptr[r] : L.indptr[r + 1]]


def _linear_step(model, v, free, kinds, positive=()):
    """One Newton step on the rows of ``kinds`` in the ``free`` slots (exact if linear)."""
    if not free:
        return
    rows = [i for i, r in enumerate(model.rows) if r.kind in kinds]
    if not rows:
        return
    f, (er, ec, ea) = model._evaluate(v, jac=True)
    # the slot Jacobian dense (a plant has a few hundred slots), duplicates summed
    full = np.zeros((len(model.rows), len(model.variables)))
    np.add.at(full, (er, ec), ea / model._scale[er])
    J = full[np.ix_(rows, free)]
    keep = np.any(J != 0, axis=1)
    if not keep.any():
        return
    r = (f / model._scale)[rows]
    step = np.linalg.lstsq(J[keep], -r[keep], rcond=None)[0]
    new = v[free] + step
    # a flow must stay positive; where the step says otherwise keep the old guess
    pos = np.isin(free, positive)
    new = np.where(pos & ~(new > 0), v[free], new)
    v[free] = new
