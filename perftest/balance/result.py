"""Result records of the reconciliation engine."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import scipy.sparse as sp
import scipy.special

from perftest.balance._stats import check_alpha, sidak_critical_value

__all__ = [
    "Reconciliation",
    "BatchReconciliation",
    "EliminationStep",
    "EliminationAlternative",
    "Elimination",
]

#: An estimate "depends on the choice" among instruments the tests cannot tell apart
#: when its alternatives spread by more than this fraction of its standard
#: uncertainty.  Our own threshold: a tenth of u is where a difference starts to show
#: in a result quoted to two significant digits of its uncertainty.
CHOICE_RTOL = 0.1


@dataclass(frozen=True, eq=False)
class Reconciliation:
    """Outcome of a data reconciliation.

    Attributes
    ----------
    x : ndarray (n,)
        Reconciled measured values [unit of the measurement].
    y : ndarray (k,)
        Estimates of the unmeasured variables; ``nan`` where not observable.
    chi2 : float
        Global test statistic: the weighted sum of squared adjustments at the
        solution, :math:`(\\hat x - x)^T S^{-1} (\\hat x - x)`.
    dof : int
        Its degrees of freedom: the rank of the constraints left after the
        unmeasured variables are eliminated.
    p_value : float
        Chi-square survival probability of ``chi2`` with ``dof`` degrees of freedom
        (1 when ``dof`` is 0).
    z : ndarray (n,)
        Measurement-test statistic :math:`|a_i| / \\sqrt{V_{ii}}` with the adjustment
        :math:`a = \\hat x - x` and its covariance :math:`V`; ``nan`` where the
        measurement is not redundant.
    redundant : ndarray of bool (n,)
        Measurements that the constraints adjust (adjustment variance above a tiny
        fraction of the measurement variance).
    observable : ndarray of bool (k,)
        Unmeasured variables that the constraints determine.
    converged : bool
        Whether the solver met its convergence criteria (always True for linear).
    iterations : int
        Iterations used (1 for linear).
    x_measured : ndarray (n,)
        The measured values passed in.
    cov_measured : ndarray (n, n) or sparse matrix
        Their covariance as passed in.
    u_reconciled : ndarray (n,)
        Standard uncertainties of ``x`` (square root of the diagonal of ``x_cov``).
    y_u : ndarray (k,)
        Standard uncertainties of ``y`` (``nan`` where not observable).
    adjustment_u : ndarray (n,)
        Standard deviations of the adjustments, :math:`\\sqrt{V_{ii}}`.
    residual_norm : float
        Euclidean norm of the constraint residual at the solution, in the units of
        the constraints (for linear problems: :math:`\\|A\\hat x + B\\hat y - b\\|`).
    method : str
        ``"linear-dense"``, ``"linear-sparse"`` or ``"nonlinear"``.
    constraint_residual : ndarray (p,)
        Residuals of the reduced (unmeasured-free) constraints at the measured values;
        used by the nodal test.
    constraint_u : ndarray (p,)
        Their standard deviations, :math:`\\sqrt{(A_r S A_r^T)_{jj}}`.
    constraint_rows : ndarray of int (p,)
        The constraint each reduced row belongs to: the constraint itself without
        unmeasured variables; with them, the balance the row is anchored to (the row
        is that balance combined with the balances that determine the unmeasured
        variables, in its units; see :func:`perftest.balance.nodal_test`).

    Notes
    -----
    ``x_cov``, ``y_cov`` and ``xy_cov`` (cross-covariance of ``x`` and ``y``) are
    properties.  A dense problem computes them at once; a sparse problem computes
    them only when first asked for, since they are dense (n, n) matrices.  Every
    other field of a sparse result is obtained without forming them.
    """

    x: np.ndarray
    y: np.ndarray
    chi2: float
    dof: int
    p_value: float
    z: np.ndarray
    redundant: np.ndarray
    observable: np.ndarray
    converged: bool
    iterations: int
    x_measured: np.ndarray
    cov_measured: object
    u_reconciled: np.ndarray
    y_u: np.ndarray
    adjustment_u: np.ndarray
    residual_norm: float
    method: str
    constraint_residual: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    constraint_u: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    constraint_rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=int), repr=False)
    # Callable returning (x_cov, y_cov, xy_cov); called once on first access.
    covariance_source: Callable | None = field(default=None, repr=False)

    @cached_property
    def _covariances(self):
        return self.covariance_source()

    @property
    def x_cov(self) -> np.ndarray:
        """Covariance of the reconciled measured values, (n, n)."""
        return self._covariances[0]

    @property
    def y_cov(self) -> np.ndarray:
        """Covariance of the unmeasured estimates, (k, k); ``nan`` rows/columns where
        not observable."""
        return self._covariances[1]

    @property
    def xy_cov(self) -> np.ndarray:
        """Cross-covariance of ``x`` and ``y``, (n, k)."""
        return self._covariances[2]

    @property
    def adjustments(self) -> np.ndarray:
        """Adjustments :math:`\\hat x - x` [unit of the measurement]."""
        return self.x - self.x_measured

    @property
    def u_measured(self) -> np.ndarray:
        """Standard uncertainties of the measured values."""
        d = self.cov_measured.diagonal()
        return np.sqrt(np.asarray(d, dtype=float))

    @property
    def passed(self) -> bool:
        """Whether the global test passes at the 5 % level."""
        return bool(self.p_value >= 0.05)

    def suspects(self, alpha: float = 0.05) -> np.ndarray:
        """Indices of measurements flagged by the Sidak-corrected measurement test.

        Parameters
        ----------
        alpha : float
            Family-wise significance level over all redundant measurements.

        Returns
        -------
        ndarray of int
            Indices into ``x``, in increasing order.
        """
        # The measurement test of perftest.balance.gross.measurement_test, computed
        # here so that the record does not import the tests built on it.
        alpha = check_alpha(alpha, "Reconciliation.suspects")
        crit, _ = sidak_critical_value(alpha, int(np.count_nonzero(self.redundant)))
        z = self.z
        return np.flatnonzero(np.where(np.isnan(z), False, z > crit))

    def ufloats(self, tags: Sequence[str] | None = None):
        """Reconciled measured values as correlated ``uncertainties`` ufloats.

        Parameters
        ----------
        tags : sequence of str, optional
            Tag of each value (stored on the underlying variables).

        Returns
        -------
        tuple of uncertainties.UFloat
            Values whose standard deviations and correlations reproduce ``x_cov``.
        """
        import uncertainties

        cov = np.asarray(self.x_cov, dtype=float)
        return tuple(uncertainties.correlated_values(self.x, cov, tags=tags))

    def y_ufloats(self):
        """Observable unmeasured estimates as ufloats correlated with :meth:`ufloats`.

        Returns
        -------
        tuple
            ``(x_ufloats, y_ufloats)``; unobservable ``y`` come back as ``nan`` floats.
        """
        import uncertainties

        obs = np.flatnonzero(self.observable)
        n = self.x.size
        values = np.concatenate([self.x, self.y[obs]])
        cov = np.empty((n + obs.size,) * 2)
        cov[:n, :n] = self.x_cov
        cov[:n, n:] = self.xy_cov[:, obs]
        cov[n:, :n] = cov[:n, n:].T
        cov[n:, n:] = self.y_cov[np.ix_(obs, obs)]
        both = uncertainties.correlated_values(values, cov)
        y = [float("nan")] * self.y.size
        for j, i in enumerate(obs):
            y[i] = both[n + j]
        return tuple(both[:n]), tuple(y)

    def to_frame(self, names: Sequence[str] | None = None, alpha: float = 0.05):
        """One row per measurement.

        Parameters
        ----------
        names : sequence of str, optional
            Measurement names; default ``"x0", "x1", ...``.
        alpha : float
            Significance level of the ``suspect`` column (Sidak-corrected measurement test).

        Returns
        -------
        pandas.DataFrame
            Columns ``name, measured, reconciled, adjustment, u_measured, u_reconciled,
            z, redundant, suspect``.
        """
        import pandas as pd

        n = self.x.size
        if names is None:
            names = [f"x{i}" for i in range(n)]
        elif len(names) != n:
            from perftest.errors import InputError

            raise InputError(
                f"The 'names' parameter of Reconciliation.to_frame must have {n} entries. "
                f"Got {len(names)}.",
                parameter="names",
            )
        suspect = np.zeros(n, dtype=bool)
        suspect[self.suspects(alpha)] = True
        return pd.DataFrame(
            {
                "name": list(names),
                "measured": self.x_measured,
                "reconciled": self.x,
                "adjustment": self.adjustments,
                "u_measured": self.u_measured,
                "u_reconciled": self.u_reconciled,
                "z": self.z,
                "redundant": self.redundant,
                "suspect": suspect,
            }
        )


@dataclass(frozen=True, eq=False)
class BatchReconciliation:
    """Reconciliation of many snapshots of the same linear model.

    Attributes
    ----------
    x : ndarray (N, n)
        Reconciled values, one row per snapshot.
    y : ndarray (N, k)
        Unmeasured estimates (``nan`` columns where not observable).
    chi2 : ndarray (N,)
        Global test statistic per snapshot.
    z : ndarray (N, n)
        Measurement-test statistics (``nan`` columns where not redundant).
    dof : int
        Degrees of freedom, shared.
    x_cov, y_cov : ndarray
        Covariances, shared by every snapshot (they do not depend on the data).
    u_reconciled, y_u, adjustment_u : ndarray
        Standard uncertainties, shared.
    redundant, observable : ndarray of bool
        Classification, shared.
    """

    x: np.ndarray
    y: np.ndarray
    chi2: np.ndarray
    z: np.ndarray
    dof: int
    x_cov: np.ndarray
    y_cov: np.ndarray
    u_reconciled: np.ndarray
    y_u: np.ndarray
    adjustment_u: np.ndarray
    redundant: np.ndarray
    observable: np.ndarray

    @property
    def p_value(self) -> np.ndarray:
        """Chi-square survival probability per snapshot."""
        if self.dof == 0:
            return np.ones_like(self.chi2)
        return scipy.special.chdtrc(self.dof, self.chi2)


@dataclass(frozen=True)
class EliminationStep:
    """One step of serial elimination.

    Attributes
    ----------
    dropped : int or None
        Index (into the original ``x``) of the measurement moved to the unmeasured
        variables at this step; None for the starting reconciliation.
    name : str or None
        Its name, when names were given.
    chi2, dof, p_value : float, int, float
        Global test of the reconciliation after this step.
    max_z : float
        Largest measurement-test statistic after this step (``nan`` if none is
        redundant).
    passed : bool
        Whether the global test passes after this step.
    tied_with : tuple of int
        At a step that met measurements the tests could not tell apart (equal
        statistics, or within their sampling spread: see
        :mod:`perftest.balance.ambiguity`): all of them, largest statistic first.
        None is dropped (``dropped`` is None); the redundancy they share is taken out
        instead.  Empty at other steps.
    tied_names : tuple of str
        Their names, when names were given.
    redundancy_lost : int
        Degrees of freedom this step took out (0 for the starting reconciliation).
    """

    dropped: int | None
    name: str | None
    chi2: float
    dof: int
    p_value: float
    max_z: float
    passed: bool
    tied_with: tuple = ()
    tied_names: tuple = ()
    redundancy_lost: int = 0


@dataclass(frozen=True, eq=False)
class EliminationAlternative:
    """One single choice at an elimination step whose candidates could not be told apart.

    Attributes
    ----------
    step : int
        Index into :attr:`Elimination.steps` of the step it is an alternative to.
    dropped : int
        The one measurement (index into the original ``x``) this alternative drops,
        besides those dropped at earlier steps.
    result : Reconciliation
        The reconciliation with that choice.
    x : ndarray (n,)
        Estimate of every original measured quantity under this choice (as
        :attr:`Elimination.x`).
    u : ndarray (n,)
        Their standard uncertainties.
    """

    step: int
    dropped: int
    result: Reconciliation
    x: np.ndarray
    u: np.ndarray


@dataclass(frozen=True, eq=False)
class Elimination:
    """Outcome of serial elimination.

    Attributes
    ----------
    steps : tuple of EliminationStep
        The starting reconciliation followed by one record per dropped measurement.
    dropped : tuple of int
        Indices of the dropped measurements, in the order they were dropped.
    result : Reconciliation
        The final reconciliation over the measurements that remain (its ``x`` has the
        remaining measurements; the dropped ones are the last entries of its ``y``).
    keep : ndarray of int
        Indices (into the original ``x``) of the measurements that remain.
    x : ndarray (n,)
        Final estimate of every original measured quantity: reconciled values for the
        kept ones and the estimates from the balance for the dropped ones
        (``nan`` if a dropped one is not observable).  Measurements of a set the
        tests could not tell apart are kept, unjudged by the redundancy they share.
    passed : bool
        Whether the last global test passes.
    alternatives : tuple of EliminationAlternative
        Where a step met several measurements the tests could not tell apart, the
        reconciliation of each single choice among them (that one dropped).
    trusted : tuple of int
        Measurements that were never candidates for dropping.
    shared : tuple of tuple of int
        The sets whose shared redundancy was taken out, in step order.

    Notes
    -----
    :attr:`choice_spread` and :attr:`depends_on_choice` say which estimates the
    arbitrary choice would have moved.
    """

    steps: tuple
    dropped: tuple
    result: Reconciliation
    keep: np.ndarray
    x: np.ndarray
    passed: bool
    alternatives: tuple = ()
    trusted: tuple = ()
    shared: tuple = ()

    @property
    def choice_spread(self) -> np.ndarray:
        """Largest minus smallest estimate of each measured quantity over the
        alternatives of any ambiguous step (0 where there are none, ``nan`` where an
        alternative leaves it unobservable) [unit of the measurement]."""
        spread = np.zeros(self.x.size)
        for step in sorted({a.step for a in self.alternatives}):
            xs = np.array([a.x for a in self.alternatives if a.step == step])
            with np.errstate(invalid="ignore"):
                spread = np.fmax(spread, xs.max(axis=0) - xs.min(axis=0))
            spread[np.isnan(xs).any(axis=0)] = np.nan
        return spread

    @property
    def depends_on_choice(self) -> np.ndarray:
        """Estimates whose alternatives spread by more than ``CHOICE_RTOL`` times
        their largest standard uncertainty, or that some alternative leaves
        unobservable (bool, (n,))."""
        if not self.alternatives:
            return np.zeros(self.x.size, dtype=bool)
        u = np.nanmax(np.array([a.u for a in self.alternatives]), axis=0)
        spread = self.choice_spread
        with np.errstate(invalid="ignore"):
            return np.isnan(spread) | (spread > CHOICE_RTOL * u)


def as_dense(mat) -> np.ndarray:
    """Dense ndarray view of a matrix (sparse or dense)."""
    return mat.toarray() if sp.issparse(mat) else np.asarray(mat)
