"""Reconciling a plant's measurements: :func:`reconcile` and its result."""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
import scipy.sparse as sp

from perftest.balance._threads import one_blas_thread_when_small
from perftest.balance.ambiguity import TIE_RTOL  # noqa: F401 - kept importable here
from perftest.balance.plant_elimination import EliminatedTag, bound, choice_table, trusted_tags
from perftest.balance.plant_elimination import eliminate as _eliminate_tags
from perftest.defaults import RECONCILIATION_ALPHA
from perftest.errors import ConvergenceError, InputError, ReconciliationWarning
from perftest.plant import states as thermo
from perftest.plant.equations import ROW_UNITS, PlantModel, build_model
from perftest.plant.guess import initial_guess
from perftest.plant.phases import check_declared_phases

__all__ = [
    "PlantReconciliation",
    "EliminatedTag",
    "reconcile",
    "DEFAULT_DEAD_STATE",
    "WEAK_RTOL",
]

#: Dead state used when the plant file states none: 25 degC and one standard
#: atmosphere, the usual reference environment of exergy tables (common practice,
#: no source).
DEFAULT_DEAD_STATE = (298.15, 101325.0)

# Problems with at most this many variables (measured + unmeasured) go to the balance
# engine with dense Jacobians; larger ones sparse (see _solve).
_DENSE_LIMIT = 500

# Stream quantities derived from (p, h) after the reconciliation.
_DERIVED = ("entropy", "exergy", "exergy_flow")
_DERIVED_QUANTITY = {
    "entropy": "specific_entropy",
    "exergy": "specific_exergy",
    "exergy_flow": "power",
}


#: An observable unmeasured variable whose standard uncertainty exceeds this
#: fraction of its magnitude is "weakly determined": the balances give it a value,
#: but one that says next to nothing (for instance a liquid's pressure known only
#: through the small pressure dependence of its enthalpy, which may land at
#: hundreds of bar).  Our own threshold: at u = |value| / 2 the 95 % interval
#: (about +-2u) already reaches zero.
WEAK_RTOL = 0.5


@dataclass(frozen=True, eq=False)
class PlantReconciliation:
    """Outcome of :func:`reconcile`.

    Attributes
    ----------
    plant : Plant
    model : PlantModel
        The model as bound in the final reconciliation.
    measurements : Measurements
        As passed in.
    result : perftest.balance.Reconciliation
        The balance engine's result; its ``x`` holds ``solver_tags``.
    solver_tags : tuple of str
        Tags in ``result.x``: the model's measured tags, then tags outside the
        balance that are correlated with them (adjusted through the correlation).
    carried : tuple of str
        Tags outside the balance and uncorrelated with it: carried through unchanged.
    eliminated : tuple of EliminatedTag
        Serial-elimination steps (empty unless ``eliminate=True``).
    alpha : float
        Significance level of the global and measurement tests.
    dead_state : tuple of float
        ``(T0 [K], p0 [Pa])`` of the exergy values.
    dead_state_source : str
        Where the dead state came from (plant file value, tag or default).
    alternatives : tuple of PlantReconciliation
        Where elimination took out several tags the tests could not tell apart, the
        reconciliation of each single choice among them (its last ``eliminated``
        step names the one tag it drops); see :meth:`choice_spread`.
    trusted : tuple of str
        Tags never dropped (plant file ``trusted = true`` or the ``trusted`` argument).
    """

    plant: object
    model: PlantModel
    measurements: object
    result: object
    solver_tags: tuple
    carried: tuple
    eliminated: tuple
    alpha: float
    dead_state: tuple
    dead_state_source: str
    _T0_index: int | None = field(default=None, repr=False)
    alternatives: tuple = ()
    trusted: tuple = ()

    @property
    def eliminated_tags(self) -> tuple:
        """Every tag elimination dropped, in order (sets the test could not tell apart
        are kept: their steps say ``shared``)."""
        return tuple(e.tag for e in self.eliminated if not e.shared)

    def choice_spread(self, names=None) -> pd.DataFrame:
        """What the choice among tags the tests could not tell apart would change.

        Parameters
        ----------
        names : sequence of str, optional
            Tags or model variables (as for :meth:`value`); default every tag in the
            balance and every model variable.

        Returns
        -------
        pandas.DataFrame
            Index ``name``; columns ``value``, ``u`` (this reconciliation, with the
            whole set taken out), one column ``without <tag>`` per alternative, then
            ``low``, ``high``, ``spread`` and ``depends_on_choice``: the spread over
            the alternatives exceeds ``CHOICE_RTOL`` (0.1) times the largest standard
            uncertainty among them, or an alternative leaves the value undetermined.
            Without alternatives the spread is 0 and nothing depends on the choice.
        """
        return choice_table(self, names)

    # ------------------------------------------------------------ joint vector
    # Every reported quantity is a linear function (at the solution) of the joint
    # vector z = [x (solver tags), y (unmeasured), carried tags].
    @cached_property
    def _joint(self):
        r = self.result
        n, k = r.x.size, r.y.size
        meas = self.measurements
        ci = np.array([meas.index(t) for t in self.carried], dtype=int)
        c = ci.size
        values = np.concatenate([r.x, r.y, np.asarray(meas.value, dtype=float)[ci]])
        cov = np.zeros((n + k + c, n + k + c))
        cov[:n, :n] = r.x_cov
        cov[:n, n : n + k] = r.xy_cov
        cov[n : n + k, :n] = np.asarray(r.xy_cov).T
        cov[n : n + k, n : n + k] = r.y_cov
        cov[n + k :, n + k :] = meas.cov[np.ix_(ci, ci)]
        where = {t: i for i, t in enumerate(self.solver_tags)}
        where.update({t: n + k + i for i, t in enumerate(self.carried)})
        return values, cov, where

    @cached_property
    def _slots(self) -> np.ndarray:
        """Values of every model variable at the solution."""
        return self.model.slot_values(self.result.x[: self.model.n_x], self.result.y)

    def _slot_gradient(self, slot: int) -> tuple[float, dict]:
        model = self.model
        n = self.result.x.size
        if model._slot_x[slot] >= 0:
            return float(self._slots[slot]), {int(model._slot_x[slot]): 1.0}
        if model._slot_y[slot] >= 0:
            j = int(model._slot_y[slot])
            return float(self._slots[slot]), {n + j: 1.0}
        return float(self._slots[slot]), {}

    @cached_property
    def _derived(self) -> dict:
        """Entropy and exergy of every stream from (p, h), with their gradients."""
        T0, p0 = self.dead_state
        out = {}
        idx = self.model.index
        by_fluid: dict = {}
        for sid, st in self.model.spec.streams.items():
            by_fluid.setdefault(st.fluid, []).append(sid)
        for fl, sids in by_fluid.items():
            p = np.array([self._slots[idx[f"{s}.pressure"]] for s in sids])
            h = np.array([self._slots[idx[f"{s}.enthalpy"]] for s in sids])
            st = thermo.state_ph(fl, p, h, tuple(sids))
            T = np.atleast_1d(np.asarray(st.T, dtype=float))
            s = np.atleast_1d(np.asarray(st.s, dtype=float))
            rho = np.atleast_1d(np.asarray(st.rho, dtype=float))
            h0, s0 = thermo.dead_state(fl, T0, p0)
            for i, sid in enumerate(sids):
                out[sid] = dict(T=T[i], s=s[i], rho=rho[i], e=h[i] - h0 - T0 * (s[i] - s0), s0=s0)
        return out

    @cached_property
    def _direct(self) -> dict:
        """Name -> ``(joint index, None)`` or ``(None, model slot)`` of every tag and
        model variable :meth:`_linear` reads directly, in its order of precedence."""
        model = self.model
        out: dict = {}
        # A tag not in x (dropped or never measured): its estimate is the model
        # variable it measures (the first one, when it measures several).
        tags = set(self.eliminated_tags) | set(model.spec.tag_ids)
        for slot, var in reversed(list(enumerate(model.variables))):
            tag = model.sources[var].tag
            if tag in tags:
                out[tag] = (None, slot)
        for name, slot in model.index.items():
            out[name] = (None, slot)
        for name, i in self._joint[2].items():
            out[name] = (i, None)
        return out

    def _linear(self, name: str) -> tuple[float, dict]:
        """Value and gradient (over the joint vector) of a tag or model variable."""
        model = self.model
        hit = self._direct.get(name)
        if hit is not None:
            i, slot = hit
            if i is not None:
                return float(self._joint[0][i]), {i: 1.0}
            return self._slot_gradient(slot)
        stream, _, var = name.rpartition(".")
        if stream in model.spec.streams and var in _DERIVED:
            d = self._derived[stream]
            pv, pg = self._slot_gradient(model.index[f"{stream}.pressure"])
            hv, hg = self._slot_gradient(model.index[f"{stream}.enthalpy"])
            T0 = self.dead_state[0]
            # Gibbs relation T ds = dh - v dp: ds/dh = 1/T, ds/dp = -1/(rho T);
            # exergy e = h - h0 - T0 (s - s0).
            if var == "entropy":
                value, dh, dp = d["s"], 1.0 / d["T"], -1.0 / (d["rho"] * d["T"])
            else:
                value, dh, dp = d["e"], 1.0 - T0 / d["T"], T0 / (d["rho"] * d["T"])
            grad: dict = {}
            for g, c in ((hg, dh), (pg, dp)):
                for i, a in g.items():
                    grad[i] = grad.get(i, 0.0) + a * c
            if var != "entropy" and self._T0_index is not None:
                # de/dT0 = -(s - s0) at fixed p0 (dh0 = T0 ds0 along the isobar)
                grad[self._T0_index] = grad.get(self._T0_index, 0.0) - (d["s"] - d["s0"])
            if var == "exergy_flow":
                mv, mg = self._slot_gradient(model.index[f"{stream}.mass_flow"])
                grad = {i: mv * a for i, a in grad.items()}
                for i, a in mg.items():
                    grad[i] = grad.get(i, 0.0) + a * value
                value = mv * value
            return float(value), grad
        raise InputError(
            f"The 'name' parameter must be a tag, a group or a model variable of plant "
            f"'{self.plant.name}' ('<stream>.mass_flow|pressure|temperature|enthalpy|"
            f"entropy|exergy|exergy_flow', '<unit>.power|heat|heat_loss|losses'). "
            f"Got {name!r}.",
            parameter="name",
        )

    def value(self, name: str) -> float:
        """Reconciled value of a tag or model variable [SI].

        Parameters
        ----------
        name : str
            Tag or group id (reconciled value; for tags outside the balance the
            measured value), or a model variable such as ``"main_steam.temperature"``,
            ``"hp_turbine.power"``, ``"boiler.heat"``, ``"main_steam.exergy"``.

        Returns
        -------
        float
            ``nan`` for an unobservable unmeasured variable.
        """
        return self._linear(name)[0]

    def uncertainty(self, name: str) -> float:
        """Standard uncertainty of :meth:`value` [SI]."""
        return float(np.sqrt(self.covariance([name])[0, 0]))

    def covariance(self, names) -> np.ndarray:
        """Joint covariance of tags and model variables [SI].

        Parameters
        ----------
        names : sequence of str
            As for :meth:`value`.

        Returns
        -------
        ndarray (len(names), len(names))
            From the reconciled covariance, propagated linearly through the property
            derivatives for entropy and exergy.  Rows of unobservable variables are nan.
        """
        if isinstance(names, str):
            names = [names]
        _, cov, _ = self._joint
        G = np.zeros((len(names), cov.shape[0]))
        for r, name in enumerate(names):
            value, grad = self._linear(name)
            for i, a in grad.items():
                G[r, i] += a
            if not math.isfinite(value):
                G[r, :] = np.nan
        # nan entries of y_cov (unobservable) must not leak into observable rows
        used = np.flatnonzero(np.any(G != 0, axis=0) | np.any(np.isnan(G), axis=0))
        Gu = np.nan_to_num(G[:, used])
        out = Gu @ np.nan_to_num(cov[np.ix_(used, used)]) @ Gu.T
        bad = np.any(np.isnan(G), axis=1) | np.any(
            (G[:, used] != 0) & np.isnan(np.diag(cov)[used])[None, :], axis=1
        )
        out[bad, :] = np.nan
        out[:, bad] = np.nan
        return out

    # ------------------------------------------------------------ tables
    @property
    def global_test(self) -> dict:
        """``{"chi2", "dof", "p_value", "passed"}`` of the final reconciliation."""
        r = self.result
        return {
            "chi2": float(r.chi2),
            "dof": int(r.dof),
            "p_value": float(r.p_value),
            "passed": bool(r.p_value >= self.alpha),
        }

    def nodal_test(self, alpha: float | None = None) -> pd.DataFrame:
        """The nodal test of the final reconciliation, one row per balance tested.

        Each row is a balance of the plant model (``balance``, e.g. ``"mix:mass"``);
        where unmeasured variables enter it, it is combined with the balances that
        determine them (for flows, the classic merging of the units joined by
        unmeasured streams; see :func:`perftest.balance.nodal_test`).  The residual is
        the balance's imbalance at the measured values (linearised at the solution)
        in SI units, ``u`` its standard deviation without gross error and
        ``statistic`` their ratio, against the Sidak-corrected ``critical`` value at
        ``alpha`` (default: the reconciliation's).

        Returns
        -------
        pandas.DataFrame
            Columns ``balance, kind, owner, residual, u, unit, statistic, critical,
            flagged``; ``statistic`` is nan (and ``flagged`` False) for a row of
            rounding size, which no measurement enters.
        """
        from perftest.balance.gross import nodal_test

        test = nodal_test(self.result, self.alpha if alpha is None else alpha)
        rows = [self.model.rows[i] for i in test.constraint]
        scale = np.array([r.scale for r in rows])
        return pd.DataFrame(
            {
                "balance": [r.name for r in rows],
                "kind": [r.kind for r in rows],
                "owner": [r.owner for r in rows],
                "residual": np.asarray(self.result.constraint_residual) * scale,
                "u": np.asarray(self.result.constraint_u) * scale,
                "unit": [ROW_UNITS[r.kind] for r in rows],
                "statistic": test.statistic,
                "critical": test.critical,
                "flagged": test.flagged,
            }
        )

    def to_frame(self, units="logged") -> pd.DataFrame:
        """One row per measured tag (every tag of the measurements).

        Parameters
        ----------
        units : "si", "logged", "engineering" or mapping, default "logged"
            Units of the values, uncertainties and adjustments: SI (as used inside),
            each tag's logged unit, bar/°C/t/h... by quantity, or a mapping of tag id
            or quantity to a unit.  Other than "si", a ``unit`` column names the unit
            of each row's numbers.

        Returns
        -------
        pandas.DataFrame
            Columns ``tag, quantity, measured, u_measured, reconciled, u_reconciled,
            adjustment, z, redundant, suspect, in_balance, eliminated, variables``
            [SI].  Tags outside the balance keep their measured value (``in_balance``
            False, ``z`` nan); eliminated tags show the balance's estimate of the
            variable they measured and are marked suspect.
        """
        r = self.result
        meas = self.measurements
        pos = {t: i for i, t in enumerate(self.solver_tags)}
        flagged = set(int(i) for i in r.suspects(self.alpha))
        elim = set(self.eliminated_tags)
        uses: dict = {}
        for var in self.model.variables:
            tag = self.model.sources[var].tag
            if tag is not None:
                uses.setdefault(tag, []).append(var)
        rows = []
        for i, tag in enumerate(meas.tags):
            measured = float(meas.value[i])
            u_m = float(meas.u[i])
            z = float("nan")
            redundant = suspect = False
            if tag in pos:
                j = pos[tag]
                rec, u_rec = float(r.x[j]), float(r.u_reconciled[j])
                z = float(r.z[j])
                redundant = bool(r.redundant[j])
                suspect = j in flagged
            elif tag in elim or tag in uses:
                rec, u_rec = self.value(tag), self.uncertainty(tag)
                suspect = tag in elim
            else:
                rec, u_rec = measured, u_m
            rows.append(
                dict(
                    tag=tag,
                    quantity=meas.quantities[i],
                    measured=measured,
                    u_measured=u_m,
                    reconciled=rec,
                    u_reconciled=u_rec,
                    adjustment=rec - measured,
                    z=z,
                    redundant=redundant,
                    suspect=suspect,
                    in_balance=tag in uses,
                    eliminated=tag in elim,
                    variables=", ".join(uses.get(tag, ())),
                )
            )
        if isinstance(units, str) and units == "si":
            return pd.DataFrame(rows)
        from perftest.display.views import reconciliation_frame

        return reconciliation_frame(pd.DataFrame(rows), self, units)

    @cached_property
    def streams(self) -> pd.DataFrame:
        """Reconciled state of every stream, with standard uncertainties.

        Index: stream id.  Columns ``fluid, phase`` and, each followed by ``u_<name>``:
        ``mass_flow`` [kg/s], ``pressure`` [Pa], ``temperature`` [K], ``enthalpy``
        [J/kg], ``entropy`` [J/(kg K)], ``exergy`` [J/kg] (specific flow exergy
        against :attr:`dead_state`) and ``exergy_flow`` [W].
        """
        cols = ("mass_flow", "pressure", "temperature", "enthalpy", *_DERIVED)
        records = []
        for sid, st in self.model.spec.streams.items():
            names = [f"{sid}.{c}" for c in cols]
            cov = self.covariance(names)
            rec = {"stream": sid, "fluid": st.fluid, "phase": st.phase}
            for j, c in enumerate(cols):
                rec[c] = self.value(names[j])
                rec[f"u_{c}"] = float(np.sqrt(cov[j, j]))
            records.append(rec)
        return pd.DataFrame(records).set_index("stream")

    @cached_property
    def unmeasured(self) -> pd.DataFrame:
        """Estimates of the unmeasured model variables.

        Columns ``name, quantity, value, u, observable, weak`` [SI]; value and u
        are nan where the balances do not determine the variable; ``weak`` marks an
        observable variable whose u exceeds ``WEAK_RTOL`` times its magnitude
        (determined in name only: do not use its value).
        """
        r = self.result
        names = self.model.unmeasured
        return pd.DataFrame(
            {
                "name": list(names),
                "quantity": [self.model.quantities[n] for n in names],
                # y may end with the shared biases of elimination (not model variables)
                "value": r.y[: len(names)],
                "u": r.y_u[: len(names)],
                "observable": r.observable[: len(names)],
                "weak": _weak(r)[: len(names)],
            }
        )

    @property
    def notes(self) -> tuple:
        """Notes for the reports: the weakly determined unmeasured variables."""
        return tuple(_weak_notes(self.model.unmeasured, self.model.quantities, self.result))

    def closure(self) -> pd.DataFrame:
        """Mass and energy imbalance of every unit at the reconciled values.

        Computed directly from the reconciled stream values and unit variables
        (not from the solver's residuals):
        mass :math:`\\sum_{in}\\dot m - \\sum_{out}\\dot m` [kg/s] over all streams of
        the unit, energy :math:`\\sum_{in}\\dot m h - \\sum_{out}\\dot m h + \\dot Q_{in}
        - P_{out} - \\dot Q_{out} - \\dot Q_{loss}` [W] (for a generator
        :math:`\\sum P_{turbine} - P_e - L`).  Both should be ~0.

        Returns
        -------
        pandas.DataFrame
            Columns ``unit, type, mass_imbalance, energy_imbalance, energy_throughput``;
            ``energy_throughput`` [W] is the sum of the inflowing energy terms, a size
            for judging the imbalance.
        """
        v = self._slots
        idx = self.model.index
        out = []
        for uid, unit in self.model.spec.units.items():

            def val(name):
                return v[idx[name]] if name in idx else 0.0

            if unit.type == "generator":
                shaft = sum(val(f"{t}.power") for t in unit.shaft)
                elec = val(f"{uid}.power")
                loss = val(f"{uid}.losses") + (unit.loss_fraction or 0.0) * elec
                out.append((uid, unit.declared_type, np.nan, shaft - elec - loss, shaft))
                continue
            m_in = sum(val(f"{s}.mass_flow") for s in unit.inlets)
            m_out = sum(val(f"{s}.mass_flow") for s in unit.outlets)
            e_in = sum(val(f"{s}.mass_flow") * val(f"{s}.enthalpy") for s in unit.inlets)
            e_out = sum(val(f"{s}.mass_flow") * val(f"{s}.enthalpy") for s in unit.outlets)
            t = unit.type
            extra = 0.0
            if t in ("turbine", "generic"):
                extra -= val(f"{uid}.power")
            if t == "pump":
                extra += val(f"{uid}.power")
            if t in ("boiler", "generic"):
                extra += val(f"{uid}.heat")
            if t == "condenser" and not unit.ports.get("coolant_inlet"):
                extra -= val(f"{uid}.heat")
            extra -= val(f"{uid}.heat_loss")
            energy = e_in - e_out + extra if "energy" in unit.balances else np.nan
            mass = m_in - m_out if "mass" in unit.balances else np.nan
            out.append((uid, unit.declared_type, mass, energy, e_in + max(extra, 0.0)))
        cols = ["unit", "type", "mass_imbalance", "energy_imbalance", "energy_throughput"]
        return pd.DataFrame(out, columns=cols)

    def __repr__(self) -> str:
        from perftest.display.views import reconciliation_text

        return reconciliation_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import reconciliation_html

        return reconciliation_html(self)


def _weak(result) -> np.ndarray:
    """Observable unmeasured variables with u > WEAK_RTOL * |value|."""
    y = np.asarray(result.y, dtype=float)
    u = np.asarray(result.y_u, dtype=float)
    obs = np.asarray(result.observable, dtype=bool)
    with np.errstate(invalid="ignore"):
        return obs & np.isfinite(y) & (u > WEAK_RTOL * np.abs(y))


def _weak_notes(names, quantities, result) -> list[str]:
    weak = np.flatnonzero(_weak(result)[: len(names)])
    return [
        f"Unmeasured '{names[i]}' ({quantities[names[i]]}) is only weakly determined by "
        f"the balances: {result.y[i]:.4g} with u = {result.y_u[i]:.3g} [SI], more than "
        f"{WEAK_RTOL:g} times its magnitude; do not use this value, measure it instead."
        for i in weak
    ]


def _dead_state(plant, measurements):
    site = plant.site
    T0, p0 = DEFAULT_DEAD_STATE
    src = []
    T0_tag = None
    if site.dead_state_temperature is not None:
        T0 = float(site.dead_state_temperature)
        src.append("T0 from [site] dead_state_temperature")
    elif site.dead_state_temperature_tag and site.dead_state_temperature_tag in measurements:
        T0_tag = site.dead_state_temperature_tag
        T0 = float(measurements[T0_tag].value)
        src.append(f"T0 = mean of tag '{T0_tag}'")
    else:
        src.append("T0 = 298.15 K (default)")
    tag = site.dead_state_pressure_tag
    if tag and tag in measurements:
        p0 = float(measurements[tag].value)
        src.append(f"p0 = mean of tag '{tag}'")
    elif site.dead_state_pressure is not None:
        p0 = float(site.dead_state_pressure)
        src.append("p0 from [site] (default 101.325 kPa)")
    return (T0, p0), "; ".join(src), T0_tag


def _solve(model: PlantModel, extra: tuple, measurements, y0, shared=()):
    """Run the balance engine on ``model`` with tags ``extra`` appended to ``x``.

    ``shared``: directions freed by elimination, each a mapping tag -> weight [SI];
    the readings are taken as :math:`x = x_t + d\\, b`, one unmeasured ``b`` per
    direction appended to ``y`` (see :mod:`perftest.balance.plant_elimination`).
    """
    from perftest.balance.nonlinear import reconcile_nonlinear

    tags = (*model.measured, *extra)
    idx = np.array([measurements.index(t) for t in tags], dtype=int)
    x = np.asarray(measurements.value, dtype=float)[idx]
    cov = np.asarray(measurements.cov, dtype=float)[np.ix_(idx, idx)]
    n = model.n_x
    k = model.n_y
    where = {t: i for i, t in enumerate(tags)}
    D = np.zeros((len(tags), len(shared)))
    for c, direction in enumerate(shared):
        for t, w in direction.items():
            if t in where:  # a tag of the set dropped at a later step has left x
                D[where[t], c] = w
    q = D.shape[1]

    def true_x(xx, yy):
        return (xx - D @ yy[k:])[:n] if q else xx[:n]

    def residual(xx, yy):
        return model.residual(true_x(xx, yy), yy[:k])

    # The model's Jacobian is sparse; the balance engine's dense path is faster for
    # plant-sized problems (measured on benchmarks/bench_model.py: 185 variables,
    # dense about 2x faster), so small problems are handed over dense.
    dense = len(tags) + model.n_y <= _DENSE_LIMIT

    def jacobian(xx, yy):
        if dense:
            Jx, Jy = model.dense_jacobian(true_x(xx, yy), yy[:k])
            if extra:
                Jx = np.hstack([Jx, np.zeros((Jx.shape[0], len(extra)))])
            if q:
                Jy = np.hstack([Jy, -(Jx @ D)])
            return Jx, Jy
        Jx, Jy = model.jacobian(true_x(xx, yy), yy[:k])
        if extra:
            Jx = sp.hstack([Jx, sp.csr_matrix((Jx.shape[0], len(extra)))], format="csr")
        if q:
            Jy = sp.hstack([Jy, sp.csr_matrix(-(Jx @ D))], format="csr")
        return Jx, Jy

    # y sizes for the step test: the engineering size of each quantity, so that a
    # near-zero heat loss is not judged relative to 1 W.
    typical = {
        "mass_flow": 1.0,
        "pressure": 1e5,
        "temperature": 1.0,
        "specific_enthalpy": 1e3,
        "power": 1e3,
        "heat_flow": 1e3,
        "fraction": 1e-3,
    }
    y_scale = np.array([typical.get(model.quantities[v], 1.0) for v in model.unmeasured])
    y_scale = np.maximum(np.abs(y0), y_scale) if y0.size else y_scale
    # a shared bias is counted in standard uncertainties of its candidates
    y0 = np.concatenate([y0, np.zeros(q)])
    y_scale = np.concatenate([y_scale, np.ones(q)])
    _check_cov(cov, tags, measurements)
    try:
        result = reconcile_nonlinear(residual, x, cov, y0=y0, jacobian=jacobian, y_scale=y_scale)
    except ConvergenceError as exc:
        # The engine's message speaks of its own options (max_iter, y0); say what a
        # user of a plant file can change.
        raise ConvergenceError(
            f"The balances of the plant model did not close: the reconciliation stopped "
            f"after {exc.iterations} iterations with a constraint residual norm of "
            f"{exc.residual_norm:.3g}. Check the measured values against the tags' units "
            "and the streams' phases in the plant file, average a steadier window, or "
            "drop a suspect instrument; from Python, reconcile(..., start=...) gives "
            "starting values.",
            residual_norm=exc.residual_norm,
            iterate=exc.iterate,
            iterations=exc.iterations,
        ) from None
    return result, tags


def _check_cov(cov, tags, measurements) -> None:
    """Refuse a singular covariance of the solver's tags, naming the tags and why."""
    try:
        np.linalg.cholesky(cov)
        return
    except np.linalg.LinAlgError:
        pass
    w, v = np.linalg.eigh(cov)
    # the tags of the (near) null direction, largest share first
    weight = np.abs(v[:, 0])
    names = [tags[i] for i in np.argsort(-weight) if weight[i] > 0.1][:5]
    u_r = np.asarray(getattr(measurements, "u_random", np.full(len(tags), np.nan)), float)
    n_s = getattr(measurements, "n_samples", None)
    idx = [measurements.index(t) for t in names]
    no_random = [t for t, i in zip(names, idx, strict=True) if not u_r[i] > 0]
    if no_random:
        counts = sorted({int(n_s[i]) for i in idx}) if n_s is not None else []
        few = f" ({', '.join(map(str, counts))} sample(s) each)" if counts else ""
        why = (
            f"tags {', '.join(no_random)} have no random scatter in the window{few} and "
            "share fully correlated systematic uncertainties. The window is too short or "
            "the tags are constant (a frozen signal): average a window of several samples "
            "per tag, or check those tags"
        )
    else:
        why = f"tags {', '.join(names)} are (nearly) perfectly correlated"
    raise InputError(
        f"The measurements' covariance is singular (smallest eigenvalue {w[0]:.3g}): {why}.",
        parameter="measurements",
        tag=names[0] if names else None,
    )


def _warm_solve(model: PlantModel, extra: tuple, measurements, x0, start):
    """``_solve`` from ``start`` (see :func:`reconcile`), or None to start cold."""
    from perftest.errors import PerftestError

    if start is None:
        return None
    if isinstance(start, PlantReconciliation):
        start = {name: start._slots[i] for name, i in start.model.index.items()}
    from collections.abc import Mapping

    if not isinstance(start, Mapping):
        raise InputError(
            "The 'start' parameter of reconcile must be a PlantReconciliation or a mapping "
            f"of model variable name -> value [SI]. Got {type(start).__name__}.",
            parameter="start",
        )
    y0 = np.array([float(start.get(v, np.nan)) for v in model.unmeasured], dtype=float)
    if not np.all(np.isfinite(y0)):
        cold = initial_guess(model, x0)
        y0 = np.where(np.isfinite(y0), y0, cold)
    try:
        model.residual(x0, y0)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            out = _solve(model, extra, measurements, y0)
    except (PerftestError, ArithmeticError, ValueError):
        # PerftestError includes ConvergenceError and PropertyRangeError: the cold
        # start decides, so that a window fails exactly as it does without a start.
        return None
    for w in caught:  # the solver's own notes, issued as the cold path issues them
        warnings.warn(w.message, w.category, stacklevel=4)
    return out


def _plant_size(plant=None, measurements=None, *args, **kwargs):
    # every tag plus the unknowns of the streams (a plant model has a few per stream)
    return len(getattr(measurements, "tags", ())) + 4 * len(plant.sections.get("streams", {}))


@one_blas_thread_when_small(_plant_size)
def reconcile(
    plant, measurements, *, eliminate=False, alpha=RECONCILIATION_ALPHA, start=None, trusted=None
) -> PlantReconciliation:
    """Reconcile a plant's measurements against its mass and energy balances.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
        The plant (its ``[streams]`` and ``[units]`` make the model).
    measurements : perftest.run.measurements.Measurements
        Averaged tag values [SI] with their covariance.
    eliminate : bool
        When the global test fails, drop the measurement with the largest
        measurement-test statistic, reconcile again, and repeat until the test
        passes or nothing redundant is left (serial elimination).  Tags the test
        cannot tell from the one with the largest statistic (equal statistics, or
        within their sampling spread) are dropped with it rather than one picked;
        each single choice is reconciled as an alternative (see
        :meth:`PlantReconciliation.choice_spread`), with a
        :class:`ReconciliationWarning`.
    alpha : float
        Significance level of the global and measurement tests.
    start : PlantReconciliation or mapping of str to float, optional
        Starting values of the unmeasured variables [SI]: a reconciliation of the
        same plant (e.g. the neighbouring window of a trend) or model variable name
        -> value.  Variables it lacks start from the usual initial guess.  Only the
        path to the solution changes: a start that is not a valid state, or from
        which the iteration does not converge, is dropped and the usual initial
        guess used, so failures are those of a call without ``start``.
    trusted : sequence of str, optional
        Tags elimination never drops, besides those whose ``[tags.<ID>]`` table in
        the plant file says ``trusted = true``.

    Returns
    -------
    PlantReconciliation

    Raises
    ------
    PlantFileError
        The plant's streams or units are invalid, or a stream's measured pressure and
        temperature contradict its declared phase beyond their uncertainty
        (:func:`perftest.plant.phases.check_declared_phases`).
    PropertyRangeError
        A stream's state lies outside the property range or on the wrong side of
        saturation for its declared phase (names the stream and the state).
    ConvergenceError
        The nonlinear reconciliation did not converge.

    Notes
    -----
    Tags the model uses but the measurements lack (or hold as nan) become
    unmeasured variables, with a :class:`ReconciliationWarning`.  Tags the model does
    not use are carried through unchanged, except those correlated with a tag in the
    balance (a shared calibration): these enter the reconciliation without a balance
    of their own, so the correlation adjusts them consistently.
    """
    if not hasattr(plant, "tags") or not hasattr(plant, "sections"):
        raise InputError(
            "The 'plant' parameter of reconcile must be a Plant (perftest.load_plant). "
            f"Got {type(plant).__name__}.",
            parameter="plant",
        )
    if not all(hasattr(measurements, a) for a in ("value", "cov", "tags", "index")):
        raise InputError(
            "The 'measurements' parameter of reconcile must be Measurements (Run.average()). "
            f"Got {type(measurements).__name__}.",
            parameter="measurements",
        )
    if not 0.0 < alpha < 1.0:
        raise InputError(
            f"The 'alpha' parameter of reconcile must be between 0 and 1. Got {alpha!r}.",
            parameter="alpha",
        )
    trusted = trusted_tags(plant, trusted)
    model = build_model(plant)
    values = np.asarray(measurements.value, dtype=float)
    present = [
        t
        for t in model.spec.tag_ids
        if t in measurements and math.isfinite(values[measurements.index(t)])
    ]
    missing = [t for t in model.spec.tag_ids if t not in present]
    if missing:
        warnings.warn(
            f"Tags {', '.join(missing)} are used by the plant model but have no measured "
            "value; they are treated as unmeasured.",
            ReconciliationWarning,
            stacklevel=3,
        )
    # one record per tag: the zero-uncertainty check and the phase check share them
    records = {t: measurements[t] for t in present}
    for t, r in records.items():
        if not r.u > 0:
            raise InputError(
                f"Tag '{t}' has a zero uncertainty, which the reconciliation cannot weigh. "
                "State its uncertainty in the plant file or make the variable a fixed value.",
                tag=t,
            )
    # A declared phase the measurements contradict would make its thermometer a
    # gross error (a superheated stream declared wet): refuse it before solving.
    check_declared_phases(plant, model.spec, {t: (r.value, r.u) for t, r in records.items()})
    model = bound(model, present)
    in_model = set(present)
    cov = np.asarray(measurements.cov, dtype=float)
    mi = [measurements.index(t) for t in present]
    extra, carried = [], []
    for i, t in enumerate(measurements.tags):
        if t in in_model or t in model.spec.tag_ids:
            continue
        correlated = mi and np.any(cov[i, mi] != 0.0)
        (extra if correlated and math.isfinite(values[i]) else carried).append(t)
    extra = tuple(extra)

    x0 = values[[measurements.index(t) for t in model.measured]]
    result = _warm_solve(model, extra, measurements, x0, start)
    if result is None:
        y0 = initial_guess(model, x0)
        # The starting point must be a valid state of every stream; this raises a
        # PropertyRangeError naming the stream otherwise.
        model.residual(x0, y0)
        result, tags = _solve(model, extra, measurements, y0)
    else:
        result, tags = result

    steps, alternatives = [], []
    if eliminate:
        # Serial elimination (perftest.balance.plant_elimination): "unmeasured" means
        # the model variables a dropped tag measured become entries of y again.
        def solve(m, y0, shared=()):
            return _solve(m, extra, measurements, y0, shared)

        model, result, tags, steps, alternatives = _eliminate_tags(
            model, result, tags, measurements, alpha, trusted, solve
        )

    dead, dead_src, T0_tag = _dead_state(plant, measurements)
    rec = PlantReconciliation(
        plant=plant,
        model=model,
        measurements=measurements,
        result=result,
        solver_tags=tuple(tags),
        carried=tuple(carried),
        eliminated=tuple(steps),
        alpha=float(alpha),
        dead_state=dead,
        dead_state_source=dead_src,
        trusted=trusted,
    )
    alts = [
        dataclasses.replace(
            rec,
            model=a.model,
            result=a.result,
            solver_tags=a.solver_tags,
            eliminated=(*steps[: a.step], a.record),
        )
        for a in alternatives
    ]
    rec = dataclasses.replace(rec, alternatives=tuple(alts))
    for r in (rec, *alts):
        if T0_tag is not None:
            _, _, where = r._joint
            object.__setattr__(r, "_T0_index", where.get(T0_tag))
    if alternatives:
        warnings.warn(
            "Serial elimination met tags the measurement test cannot tell apart ("
            + ", ".join(dict.fromkeys(a.tag for a in alternatives))
            + "): none was dropped; the redundancy they share was taken out instead. "
            "See choice_spread() for the results that depend on the choice, or mark the "
            "instruments you trust (trusted = true).",
            ReconciliationWarning,
            stacklevel=3,
        )
    for text in _weak_notes(model.unmeasured, model.quantities, result):
        warnings.warn(text, ReconciliationWarning, stacklevel=3)
    if not rec.global_test["passed"]:
        warnings.warn(
            f"The global test fails (chi2 = {result.chi2:.3g}, dof = {result.dof}, "
            f"p = {result.p_value:.3g} < alpha = {alpha}): some measurements or the "
            "model disagree. See to_frame() for suspects, or use eliminate=True.",
            ReconciliationWarning,
            stacklevel=3,
        )
    return rec
