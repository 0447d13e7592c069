"""Balance equations of a plant as scaled residuals with a sparse analytic Jacobian.

Variables
---------
Every stream carries four *model variables* (``<stream>.mass_flow``,
``.pressure``, ``.temperature``, ``.enthalpy``), a wet stream with a measured or
fixed quality also ``.quality``; units carry ``<unit>.power``, ``.heat``,
``.heat_loss`` and (generators) ``.losses`` where their type uses them.  Each model
variable is either

* **measured**: it equals the value of a tag or group in ``x`` (one tag may
  measure several model variables, e.g. one pressure transmitter for the
  outlets of a splitter: they are then equal by assumption);
* **fixed**: a constant from the plant file;
* **unmeasured**: an entry of ``y`` (named like the model variable).

Enthalpy is a variable of its own, tied to the state by a *state equation*
(``h - h(p, T) = 0`` for single-phase streams, ``T - T_sat(p) = 0`` for wet
streams, plus ``h - h(p, x) = 0`` when the quality is known).  This keeps the
energy balances bilinear in (m, h), lets an enthalpy be measured like any other
variable, and leaves a wet turbine exhaust with measured pressure and an
unmeasured enthalpy that the turbine energy balance determines.

Scaling
-------
Each residual is divided by a fixed engineering unit so that an imbalance of the
size of a good instrument's uncertainty is O(0.1-1): mass balances in kg/s,
energy balances and the generator equation in MW, state and enthalpy equalities in
kJ/kg, pressure equalities in bar, saturation equations in K.  Scaling a row does
not change the solution of the weighted least-squares problem (the linearised
constraint set is the same), only what the solver sees; :meth:`PlantModel.imbalance`
gives the unscaled residuals, which the balances satisfy in absolute terms.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from perftest.errors import InputError
from perftest.plant import combustion as firing
from perftest.plant import jacobian as assemble
from perftest.plant import states as thermo
from perftest.plant.spec import STREAM_VARIABLES, ModelSpec, Source, read_model_spec

# Property sets kept by a model (see PlantModel._properties): the accepted point and
# a trial or two around it.
_PROPERTY_CACHE = 4

# Values below this size [SI] cannot overflow a product of two of them or a sum of a
# few thousand such products (1e300 * 1e3 is far below the largest double, 1.8e308).
_TAME = 1e150

__all__ = ["PlantModel", "Row", "build_model"]


# Divisors of the residual rows (see module docstring).
_SCALE = {
    "mass": 1.0,  # kg/s
    "energy": 1.0e6,  # W -> MW
    "state": 1.0e3,  # J/kg -> kJ/kg
    "saturation": 1.0,  # K
    "quality": 1.0e3,  # J/kg -> kJ/kg
    "equal_h": 1.0e3,  # J/kg -> kJ/kg
    "equal_p": 1.0e5,  # Pa -> bar
    "combustion": 1.0e6,  # W -> MW (boiler energy balance by the heat-loss method)
    "combustion_air": 1.0,  # kg/s
    "analysis": 1.0e-3,  # mole fraction -> 0.1 %-point (two flue-gas analysers)
}

#: SI unit of the unscaled residual of a row, by its kind (the keys of _SCALE).
ROW_UNITS = {
    "mass": "kg/s",
    "energy": "W",
    "state": "J/kg",
    "saturation": "K",
    "quality": "J/kg",
    "equal_h": "J/kg",
    "equal_p": "Pa",
    "combustion": "W",
    "combustion_air": "kg/s",
    "analysis": "1",
}

_UNIT_QUANTITY = {
    "power": "power",
    "heat": "heat_flow",
    "heat_loss": "heat_flow",
    "losses": "power",
}
_STREAM_QUANTITY = dict(STREAM_VARIABLES, quality="fraction")


@dataclass(frozen=True)
class Row:
    """One balance equation.

    Attributes
    ----------
    name : str
        ``"<unit>:mass"``, ``"<unit>:energy"``, ``"<stream>:state"`` ...
    kind : str
        Key of the scaling table (``mass``, ``energy``, ``state`` ...).
    owner : str
        Unit or stream id the equation belongs to.
    scale : float
        Divisor of the residual [SI unit of the row].
    """

    name: str
    kind: str
    owner: str
    scale: float


class _Builder:
    """Collects variables and equation terms while walking the plant."""

    def __init__(self):
        self.names: list[str] = []
        self.sources: list[Source] = []
        self.quantities: list[str] = []
        self.index: dict[str, int] = {}
        self.rows: list[Row] = []
        self.linear: list[tuple[int, int, float]] = []  # (row, slot, coef)
        self.bilinear: list[tuple[int, int, int, float]] = []  # (row, m, h, coef)
        self.state: list[tuple[int, str]] = []  # (row, stream) h - h(p, T)
        self.saturation: list[tuple[int, str]] = []  # (row, stream) T - Tsat(p)
        self.quality: list[tuple[int, str]] = []  # (row, stream) h - h(p, x)
        self.combustion = None  # (Combustion, {row name: row index}) of a fired boiler

    def slot(self, name: str, source: Source, quantity: str) -> int:
        self.index[name] = len(self.names)
        self.names.append(name)
        self.sources.append(source)
        self.quantities.append(quantity)
        return self.index[name]

    def row(self, name: str, kind: str, owner: str) -> int:
        self.rows.append(Row(name, kind, owner, _SCALE[kind]))
        return len(self.rows) - 1


def _flow_terms(b: _Builder, r: int, streams, sign: float) -> None:
    for sid in streams:
        b.bilinear.append((r, b.index[f"{sid}.mass_flow"], b.index[f"{sid}.enthalpy"], sign))


def _mass_rows(spec: ModelSpec, b: _Builder) -> None:
    """Mass balances; one row of each closed loop is dropped (it is the sum of the others)."""
    nodes = []  # (row name, owner, inlets, outlets)
    for uid, unit in spec.units.items():
        if "mass" not in unit.balances:
            continue
        p = unit.ports
        if unit.type == "heat_exchanger":
            nodes.append((f"{uid}:mass:hot", uid, p["hot_inlet"], p["hot_outlet"]))
            nodes.append((f"{uid}:mass:cold", uid, p["cold_inlet"], p["cold_outlet"]))
        elif unit.paths:
            for a, c in unit.paths:
                nodes.append((f"{uid}:mass:{a}", uid, (a,), (c,)))
        else:
            nodes.append((f"{uid}:mass", uid, p["inlets"], p["outlets"]))
            if p.get("coolant_inlet"):
                nodes.append((f"{uid}:mass:coolant", uid, p["coolant_inlet"], p["coolant_outlet"]))
    # Union-find over nodes joined by streams.  A group of nodes in which every
    # stream has both ends has mass balances that sum to zero identically: the
    # constraint matrix would be rank deficient, so the last one is left out.
    parent = list(range(len(nodes)))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    ends: dict[str, list[int]] = {}
    for i, (_, _, ins, outs) in enumerate(nodes):
        for sid in (*ins, *outs):
            ends.setdefault(sid, []).append(i)
    for touching in ends.values():
        for j in touching[1:]:
            parent[find(j)] = find(touching[0])
    open_root = {find(touching[0]) for touching in ends.values() if len(touching) < 2}
    last_of: dict[int, int] = {}
    for i in range(len(nodes)):
        last_of[find(i)] = i
    drop = {i for root, i in last_of.items() if root not in open_root}
    for i, (name, owner, ins, outs) in enumerate(nodes):
        if i in drop:
            continue
        r = b.row(name, "mass", owner)
        b.linear.extend((r, b.index[f"{s}.mass_flow"], 1.0) for s in ins)
        b.linear.extend((r, b.index[f"{s}.mass_flow"], -1.0) for s in outs)


def _unit_rows(spec: ModelSpec, b: _Builder) -> None:
    for uid, unit in spec.units.items():
        v = {name: b.index[f"{uid}.{name}"] for name in unit.variables}
        p = unit.ports
        t = unit.type
        if t in ("splitter", "valve"):
            (inlet,) = p["inlets"]
            for sid in p["outlets"]:
                r = b.row(f"{uid}:enthalpy:{sid}", "equal_h", uid)
                b.linear += [(r, b.index[f"{sid}.enthalpy"], 1.0)]
                b.linear += [(r, b.index[f"{inlet}.enthalpy"], -1.0)]
                if t == "splitter":
                    r = b.row(f"{uid}:pressure:{sid}", "equal_p", uid)
                    b.linear += [(r, b.index[f"{sid}.pressure"], 1.0)]
                    b.linear += [(r, b.index[f"{inlet}.pressure"], -1.0)]
            continue
        if t == "generator":
            r = b.row(f"{uid}:energy", "energy", uid)
            for tid in unit.shaft:
                b.linear.append((r, b.index[f"{tid}.power"], 1.0))
            factor = 1.0 + (unit.loss_fraction or 0.0)
            b.linear.append((r, v["power"], -factor))
            if "losses" in v:
                b.linear.append((r, v["losses"], -1.0))
            continue
        if "energy" not in unit.balances:
            continue
        r = b.row(f"{uid}:energy", "energy", uid)
        if t == "heat_exchanger":
            _flow_terms(b, r, p["hot_inlet"], 1.0)
            _flow_terms(b, r, p["hot_outlet"], -1.0)
            b.linear.append((r, v["heat"], -1.0))
            rc = b.row(f"{uid}:heat", "energy", uid)
            _flow_terms(b, rc, p["cold_outlet"], 1.0)
            _flow_terms(b, rc, p["cold_inlet"], -1.0)
            b.linear.append((rc, v["heat"], -1.0))
        else:
            _flow_terms(b, r, p["inlets"], 1.0)
            _flow_terms(b, r, p["outlets"], -1.0)
            sign = {
                ("turbine", "power"): -1.0,
                ("pump", "power"): 1.0,
                ("boiler", "heat"): 1.0,
                ("condenser", "heat"): -1.0,
                ("generic", "heat"): 1.0,
                ("generic", "power"): -1.0,
            }
            for name in ("power", "heat"):
                if name in v:
                    b.linear.append((r, v[name], sign[(t, name)]))
            if t == "condenser" and p.get("coolant_inlet"):
                rc = b.row(f"{uid}:coolant", "energy", uid)
                _flow_terms(b, rc, p["coolant_outlet"], 1.0)
                _flow_terms(b, rc, p["coolant_inlet"], -1.0)
                b.linear.append((rc, v["heat"], -1.0))
        if "heat_loss" in v:
            b.linear.append((r, v["heat_loss"], -1.0))


def _state_rows(spec: ModelSpec, b: _Builder) -> None:
    for sid, stream in spec.streams.items():
        h = b.index[f"{sid}.enthalpy"]
        if stream.phase == "wet":
            r = b.row(f"{sid}:saturation", "saturation", sid)
            b.linear.append((r, b.index[f"{sid}.temperature"], 1.0))
            b.saturation.append((r, sid))
            if "quality" in stream.sources:
                r = b.row(f"{sid}:quality", "quality", sid)
                b.linear.append((r, h, 1.0))
                b.quality.append((r, sid))
        else:
            r = b.row(f"{sid}:state", "state", sid)
            b.linear.append((r, h, 1.0))
            b.state.append((r, sid))


def _end_to_end(parts: list, k: int) -> tuple:
    """The ``k`` output arrays of several group calls, each joined end to end."""
    if len(parts) == 1:
        return tuple(parts[0])
    if not parts:
        return tuple(np.zeros(0) for _ in range(k))
    return tuple(np.concatenate(z) for z in zip(*parts, strict=True))


class PlantModel:
    """Variables and balance equations of a plant, bound to a set of measured tags.

    Build it with :func:`build_model`.  ``x`` holds the values of the measured
    tags (in the order of :attr:`measured`), ``y`` the unmeasured model variables
    (in the order of :attr:`unmeasured`).

    Attributes
    ----------
    plant : Plant
    spec : ModelSpec
        The checked streams and units.
    variables : tuple of str
        Every model variable, ``"<stream>.<var>"`` / ``"<unit>.<var>"``.
    rows : tuple of Row
        The equations, in residual order.
    measured : tuple of str
        Tag/group ids in ``x``.
    unmeasured : tuple of str
        Model variables in ``y``.
    """

    def __init__(self, plant, spec: ModelSpec, builder: _Builder, measured=None):
        self.plant = plant
        self.spec = spec
        self._b = builder
        self.variables = tuple(builder.names)
        self.rows = tuple(builder.rows)
        self.index = dict(builder.index)
        self.quantities = dict(zip(builder.names, builder.quantities, strict=True))
        self.sources = dict(zip(builder.names, builder.sources, strict=True))
        available = spec.tag_ids if measured is None else tuple(measured)
        unknown = [t for t in available if t not in spec.tag_ids]
        if unknown:
            raise InputError(
                "The 'measured' parameter of PlantModel.bind must list tags the model uses. "
                f"Got {', '.join(unknown)}.",
                parameter="measured",
            )
        self.measured = tuple(t for t in spec.tag_ids if t in set(available))
        x_pos = {t: i for i, t in enumerate(self.measured)}
        n_slots = len(self.variables)
        self._const = np.zeros(n_slots)
        self._slot_x = np.full(n_slots, -1)
        self._slot_y = np.full(n_slots, -1)
        unmeasured = []
        for i, src in enumerate(builder.sources):
            if src.kind == "fixed":
                self._const[i] = src.value
            elif src.kind == "measured" and src.tag in x_pos:
                self._slot_x[i] = x_pos[src.tag]
            else:
                self._slot_y[i] = len(unmeasured)
                unmeasured.append(self.variables[i])
        self.unmeasured = tuple(unmeasured)
        self._xs = np.flatnonzero(self._slot_x >= 0)
        self._ys = np.flatnonzero(self._slot_y >= 0)
        self._scale = np.array([r.scale for r in self.rows])
        self.combustion = builder.combustion[0] if builder.combustion else None
        self._prepare_terms()

    # ------------------------------------------------------------ structure
    def _prepare_terms(self) -> None:
        b = self._b
        m = len(self.rows)
        n = len(self.variables)
        if b.linear:
            r, c, a = (np.array(z) for z in zip(*b.linear, strict=True))
        else:
            r, c, a = np.zeros(0, int), np.zeros(0, int), np.zeros(0)
        self._L = sp.csr_matrix((a, (r, c)), shape=(m, n))
        self._lin = (r.astype(int), c.astype(int), a.astype(float))
        if b.bilinear:
            br, bm, bh, bc = (np.array(z) for z in zip(*b.bilinear, strict=True))
        else:
            br = bm = bh = np.zeros(0, int)
            bc = np.zeros(0)
        self._bil = (br.astype(int), bm.astype(int), bh.astype(int), bc.astype(float))
        idx = self.index

        def groups(items, need_phase=True):
            out: dict = {}
            for row, sid in items:
                st = self.spec.streams[sid]
                key = (st.fluid, st.phase if need_phase else None)
                out.setdefault(key, []).append((row, sid))
            res = []
            for (fl, ph), lst in out.items():
                rows = np.array([r for r, _ in lst])
                sids = tuple(s for _, s in lst)
                p = np.array([idx[f"{s}.pressure"] for s in sids])
                T = np.array([idx[f"{s}.temperature"] for s in sids])
                q = np.array([idx.get(f"{s}.quality", -1) for s in sids])
                res.append((fl, ph, rows, sids, p, T, q))
            return res

        self._state_groups = groups(b.state)
        self._sat_groups = groups(b.saturation, need_phase=False)
        self._quality_groups = groups(b.quality, need_phase=False)
        used = [np.zeros(0, int)]
        for _, _, _, _, p, T, q in self._state_groups + self._sat_groups + self._quality_groups:
            used += [p, T[T >= 0], q[q >= 0]]
        self._prop_idx = np.unique(np.concatenate(used))
        self._prop_cache = ()
        self._plan = None
        self._fixed_plan = None
        self._prepare_evaluation()

    def _prepare_evaluation(self) -> None:
        """Index arrays of one evaluation, laid out once (see :meth:`_evaluate`).

        The property values of every group are kept end to end in the order of the
        groups (``_st_rows``, ``_sat_rows``, ``_q_rows``; ``_st_at``: where each state
        group starts); (p, T) states of one fluid whose declared phase has a side of
        the saturation line are asked for in one call (``_st_batches``).  The
        Jacobian's entries without the firing side have a fixed pattern
        (:func:`perftest.plant.jacobian.pattern`).
        """
        cat = assemble.cat

        def offsets(groups):
            return np.cumsum([0, *(g[2].size for g in groups)])

        st, sat, qual = self._state_groups, self._sat_groups, self._quality_groups
        self._st_rows, self._st_at = cat(g[2] for g in st), offsets(st)
        self._sat_rows, self._q_rows = cat(g[2] for g in sat), cat(g[2] for g in qual)
        batches: dict = {}
        for i, g in enumerate(st):
            if g[1] in thermo.SIDES:
                batches.setdefault(g[0], []).append(i)
        self._st_batches = []
        for fl, members in batches.items():
            pos = cat(np.arange(self._st_at[i], self._st_at[i + 1]) for i in members)
            below, above = (
                cat((np.full(st[i][2].size, thermo.SIDES[st[i][1]][k]) for i in members), bool)
                for k in (0, 1)
            )
            p = cat(st[i][4] for i in members)
            T = cat(st[i][5] for i in members)
            self._st_batches.append((fl, tuple(members), pos, p, T, below, above))
        batched = {i for b in self._st_batches for i in b[1]}
        self._st_singles = tuple(i for i in range(len(st)) if i not in batched)
        # one batch of every group: its values are already in the order of the groups
        self._st_whole = len(self._st_batches) == 1 and not self._st_singles
        self._pattern = assemble.pattern(self._lin, self._bil, st, sat, qual, self._scale)

    def bind(self, measured) -> PlantModel:
        """The same model with only ``measured`` tags in ``x``; the rest become unmeasured.

        Parameters
        ----------
        measured : iterable of str
            Tag/group ids available (a subset of ``spec.tag_ids``).
        """
        out = PlantModel(self.plant, self.spec, self._b, measured=tuple(measured))
        out.combustion = self.combustion
        return out

    def with_combustion(self, combustion) -> PlantModel:
        """The same model and binding with other firing-side parameters (a
        :class:`~perftest.plant.combustion.Combustion`, e.g. another heating value)."""
        out = self.bind(self.measured)
        out.combustion = combustion
        return out

    @property
    def n_x(self) -> int:
        return len(self.measured)

    @property
    def n_y(self) -> int:
        return len(self.unmeasured)

    def slot_values(self, x, y) -> np.ndarray:
        """Values of every model variable (order of :attr:`variables`) from ``x`` and ``y``."""
        v = self._const.copy()
        v[self._xs] = np.asarray(x, dtype=float)[self._slot_x[self._xs]]
        v[self._ys] = np.asarray(y, dtype=float)[self._slot_y[self._ys]]
        return v

    def variable_table(self):
        """One row per model variable: name, quantity, source, tag, fixed value, position.

        Returns
        -------
        pandas.DataFrame
            Columns ``name, quantity, source, tag, fixed_value, x_index, y_index``
            (``source`` is ``measured``, ``fixed`` or ``unmeasured`` in this binding).
        """
        import pandas as pd

        src = []
        for i, name in enumerate(self.variables):
            s = self.sources[name]
            kind = (
                "fixed"
                if s.kind == "fixed"
                else ("measured" if self._slot_x[i] >= 0 else "unmeasured")
            )
            src.append(
                (
                    name,
                    self.quantities[name],
                    kind,
                    s.tag,
                    s.value,
                    int(self._slot_x[i]),
                    int(self._slot_y[i]),
                )
            )
        cols = ["name", "quantity", "source", "tag", "fixed_value", "x_index", "y_index"]
        return pd.DataFrame(src, columns=cols)

    # ------------------------------------------------------------ equations
    def _properties(self, v: np.ndarray):
        """Property values and derivatives of every state, saturation and quality row.

        Returns ``((h, dh_dT, dh_dp), (T_sat, dT_dp), (h, dh_dp, dh_dx))``, each array
        holding the rows of its groups end to end (see :meth:`_prepare_evaluation`).

        The residual and the Jacobian at one point need the same property calls: the
        engines evaluate the residual at a trial point and, once it is accepted, the
        Jacobian there (and scipy's optimisers call both at each iterate).  The last
        few sets are kept, keyed by the exact bytes of the property inputs
        (pressures, temperatures, qualities), so the second call repeats no property
        call and returns the very same numbers.  The entries are never modified.
        """
        key = v[self._prop_idx].tobytes()
        cache = self._prop_cache
        for k, out in cache:
            if k == key:
                return out
        state = self._state_values(v)
        sat = _end_to_end(
            [thermo.saturation(fl, v[p], sids) for fl, _, _, sids, p, _, _ in self._sat_groups], 2
        )
        qual = _end_to_end(
            [thermo.h_px(fl, v[p], v[q], sids) for fl, _, _, sids, p, _, q in self._quality_groups],
            3,
        )
        out = (state, sat, qual)
        # a new tuple, assigned at once: threads sharing the model see either list
        self._prop_cache = ((key, out), *cache[: _PROPERTY_CACHE - 1])
        return out

    def _state_values(self, v: np.ndarray):
        """``h, dh_dT, dh_dp`` of every state row, the groups end to end.

        The states of one fluid go to the property layer in one call
        (:func:`~perftest.plant.states.h_pT_sides`); when it declines (a state near
        saturation, on the wrong side of it, or out of range), its groups are asked
        one by one, as are groups of other phases, in the order of the groups, so that
        the first failing group raises its own message.  Either way each state gets
        the value :func:`~perftest.plant.states.h_pT` gives it in its own group.
        """
        groups, at = self._state_groups, self._st_at
        got, pending = [], list(self._st_singles)
        for fl, members, pos, p, T, below, above in self._st_batches:
            res = thermo.h_pT_sides(fl, v[p], v[T], below, above)
            if res is None:
                pending += members
            else:
                got.append((pos, res))
        if self._st_whole and got:
            return got[0][1]  # one call for every group, in their order: end to end
        out = tuple(np.empty(at[-1]) for _ in range(3))
        for pos, res in got:
            for dest, val in zip(out, res, strict=True):
                dest[pos] = val
        for i in sorted(pending):
            fl, ph, _, sids, p, T, _ = groups[i]
            part = thermo.h_pT(fl, ph, v[p], v[T], sids)
            for dest, val in zip(out, part, strict=True):
                dest[at[i] : at[i + 1]] = val
        return out

    def _linear_part(self, v: np.ndarray) -> np.ndarray:
        """Unscaled residuals of the linear and bilinear (m h) terms."""
        br, bm, bh, bc = self._bil
        r = self._L @ v
        r += np.bincount(br, bc * v[bm] * v[bh], minlength=len(self.rows))
        return r

    def _evaluate(self, v: np.ndarray, jac: bool):
        """Unscaled residuals and (optionally) COO Jacobian entries over model variables."""
        r = self._linear_part(v)
        props = self._properties(v)
        (h, _, _), (Ts, _), (hq, _, _) = props
        r[self._st_rows] -= h
        r[self._sat_rows] -= Ts
        r[self._q_rows] -= hq
        ent = None
        if self._b.combustion is not None:
            comb, crows = self._b.combustion
            comb = self.combustion  # the bound parameters (see with_combustion)
            res, ent = firing.evaluate_rows(comb, crows, self.index, v, jac)
            for i, val in res.items():
                r[i] += val
        if not jac:
            return r, None
        return r, assemble.entries(self._pattern, self._bil, v, props, ent)

    def _entries(self, v: np.ndarray):
        """COO Jacobian entries ``(rows, cols, values)`` over model variables (unscaled).

        The entries of :meth:`_evaluate` without its residuals.  Where a value is
        not finite or above ``_TAME`` in size, the residuals' arithmetic (m h
        products and their sums) could overflow or meet inf - inf and warn; there
        the whole of :meth:`_evaluate` runs, as it always did for a Jacobian, so
        that the same warnings appear.  (``abs`` and ``max`` never warn.)
        """
        if not np.abs(v).max() < _TAME:
            return self._evaluate(v, jac=True)[1]
        props = self._properties(v)
        ent = None
        if self._b.combustion is not None:
            _, crows = self._b.combustion
            ent = firing.evaluate_rows(self.combustion, crows, self.index, v, True)[1]
        return assemble.entries(self._pattern, self._bil, v, props, ent)

    def imbalance(self, x, y) -> np.ndarray:
        """Unscaled residual of every row [kg/s, W, J/kg, Pa or K, see :attr:`rows`]."""
        return self._evaluate(self.slot_values(x, y), jac=False)[0]

    def residual(self, x, y) -> np.ndarray:
        """Scaled residuals (see the module docstring), shape ``(len(rows),)``.

        Parameters
        ----------
        x : ndarray (n_x,)
            Measured tag values [SI].
        y : ndarray (n_y,)
            Unmeasured model variables [SI].
        """
        return self.imbalance(x, y) / self._scale

    def jacobian(self, x, y):
        """Sparse Jacobians of :meth:`residual`.

        Returns
        -------
        Jx : scipy.sparse.csr_matrix (m, n_x)
        Jy : scipy.sparse.csr_matrix (m, n_y)
            Derivatives of the scaled residuals.  Property derivatives come from the
            property layer (``dh/dT`` at constant p, ``dh/dp`` at constant T, the
            Clausius-Clapeyron slope of the saturation line).
        """
        r, c, a = self._scaled_entries(self.slot_values(x, y))
        return assemble.to_csr(self._assembly(r, c), a, len(self.rows))

    def dense_jacobian(self, x, y):
        """:meth:`jacobian` as dense arrays ``(Jx, Jy)`` (the same numbers).

        For the small systems of a plant the balance engine works on dense arrays;
        assembling them directly skips the sparse format.
        """
        r, c, a = self._scaled_entries(self.slot_values(x, y))
        return assemble.to_dense(self._assembly(r, c), a, len(self.rows))

    def _scaled_entries(self, v):
        r, c, a = self._entries(v)
        pat = self._pattern
        return r, c, a / (pat.scale if r is pat.rows else self._scale[r])

    def _assembly(self, r, c):
        """How the COO entries ``(r, c)`` of :meth:`_entries` become ``Jx`` and ``Jy``.

        The pattern is the same at every point (the firing side may add entries), so
        the plan is kept and reused while the pattern is unchanged: per block the
        selected entries, where each lands among the block's sorted unique
        positions (duplicates are summed), the CSR indices and pointers, and the
        flat positions in a dense array.  The fixed pattern of
        :meth:`_prepare_evaluation` has a plan of its own, found without a
        comparison.
        """
        fixed = r is self._pattern.rows and c is self._pattern.cols
        plan = self._fixed_plan if fixed else self._plan
        if plan is not None and (
            fixed or (np.array_equal(plan.r, r) and np.array_equal(plan.c, c))
        ):
            return plan
        blocks = ((self._slot_x, self.n_x), (self._slot_y, self.n_y))
        plan = assemble.assembly(r, c, blocks, len(self.rows))
        if fixed:
            self._fixed_plan = plan
        else:
            self._plan = plan
        return plan

    def slot_jacobian(self, v: np.ndarray) -> sp.csr_matrix:
        """Jacobian of the scaled residuals with respect to every model variable."""
        r, c, a = self._entries(v)
        return sp.csr_matrix(
            (a / self._scale[r], (r, c)), shape=(len(self.rows), len(self.variables))
        )

    @cached_property
    def _neighbours(self):
        """Stream -> streams joined to it through a unit, split by what they share."""
        same_p: dict = {s: set() for s in self.spec.streams}
        near: dict = {s: set() for s in self.spec.streams}
        for unit in self.spec.units.values():
            p = unit.ports
            if unit.type == "heat_exchanger":
                sides = [p["hot_inlet"] + p["hot_outlet"], p["cold_inlet"] + p["cold_outlet"]]
            elif unit.type == "condenser":
                sides = [p["inlets"] + p["outlets"], p["coolant_inlet"] + p["coolant_outlet"]]
            else:
                sides = [unit.inlets + unit.outlets]
            # Pressure changes little across splitters, mixers, exchangers, boilers
            # and condensers; across turbines, pumps and valves it does not.
            shares_p = unit.type not in ("turbine", "pump", "valve")
            for side in sides:
                for a in side:
                    for c in side:
                        if a != c:
                            near[a].add(c)
                            if shares_p:
                                same_p[a].add(c)
        return same_p, near


def build_model(plant) -> PlantModel:
    """Variables and balance equations of a plant.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
        A loaded plant file with ``[streams.*]`` and ``[units.*]`` tables.

    Returns
    -------
    PlantModel
        Bound to every tag the model refers to (use :meth:`PlantModel.bind` for a
        subset).  Cached per plant instance.

    Raises
    ------
    PlantFileError
        Naming the key and line of a stream or unit that cannot be used.

    Notes
    -----
    Equations (SI; scaled as in the module docstring):

    * mass, per unit (per side of a heat exchanger, per path of a boiler):
      :math:`\\sum_{in} \\dot m - \\sum_{out} \\dot m = 0`;
    * energy: :math:`\\sum_{in} \\dot m h - \\sum_{out} \\dot m h + \\dot Q_{in}
      - P_{out} - \\dot Q_{loss} = 0` with, per type, turbine :math:`-P`, pump
      :math:`+P`, boiler :math:`+\\dot Q`, condenser :math:`-\\dot Q`; heat exchanger
      :math:`\\dot m_c (h_{c,out} - h_{c,in}) = \\dot Q` and
      :math:`\\dot m_h (h_{h,in} - h_{h,out}) = \\dot Q + \\dot Q_{loss}`; a condenser
      with a coolant side also :math:`\\dot m_w (h_{w,out} - h_{w,in}) = \\dot Q`;
    * splitter: :math:`h_k = h_{in}`, :math:`p_k = p_{in}` per outlet; valve
      :math:`h_{out} = h_{in}`;
    * generator: :math:`\\sum P_{turbine} = P_e (1 + f) + L`;
    * state: :math:`h = h(p, T)` (single phase) or :math:`T = T_{sat}(p)` and, with
      a known quality, :math:`h = h(p, x)` (wet);
    * firing side, when ``[performance]`` names a flue-gas analysis: the boiler
      energy balance by the heat-loss method, the metered combustion air and the
      agreement of two analysers (:mod:`perftest.plant.combustion`; variables
      ``combustion.*``, rows ``combustion:*``).
    """
    cached = getattr(plant, "_perftest_model", None)
    if cached is not None:
        return cached
    spec = read_model_spec(plant)
    b = _Builder()
    for sid, stream in spec.streams.items():
        for var in STREAM_VARIABLES:
            b.slot(f"{sid}.{var}", stream.sources[var], _STREAM_QUANTITY[var])
        if "quality" in stream.sources:
            b.slot(f"{sid}.quality", stream.sources["quality"], "fraction")
    for uid, unit in spec.units.items():
        for var, src in unit.variables.items():
            b.slot(f"{uid}.{var}", src, _UNIT_QUANTITY[var])
    tag_ids = list(spec.tag_ids)
    fired = firing.read_combustion(plant, spec, b.index, tag_ids)
    if fired is not None:
        for name, (src, quantity) in fired[1].items():
            b.slot(name, src, quantity)
        spec = replace(spec, tag_ids=tuple(tag_ids))
    _mass_rows(spec, b)
    _unit_rows(spec, b)
    _state_rows(spec, b)
    if fired is not None:
        b.combustion = (fired[0], firing.add_rows(fired[0], b))
    model = PlantModel(plant, spec, b)
    # The model lives on the plant (which is frozen, hence object.__setattr__), so the
    # cache goes away with the plant; a plant type that refuses is simply not cached.
    try:
        object.__setattr__(plant, "_perftest_model", model)
    except (AttributeError, TypeError):
        pass
    return model
