"""Averaged measurements: one value per tag with its uncertainty and covariance.

:class:`Measurements` is what a :class:`~perftest.run.core.Run` window averages to and
what reconciliation takes in.  Every number is SI; ``units`` only remembers how
each tag is displayed.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import InputError

__all__ = ["Measurements", "MeasurementRecord"]


@dataclass(frozen=True)
class MeasurementRecord:
    """One tag of a :class:`Measurements` (returned by ``measurements[tag]``).

    Attributes
    ----------
    tag, quantity, unit : str
        Tag id, glossary quantity and display unit.
    value : float
        Mean [SI].
    u_random, u_systematic, u : float
        Standard uncertainties [SI]: random part, systematic part, combined.
    dof : float
        Welch-Satterthwaite degrees of freedom of ``u`` (inf allowed).
    n_samples, n_excluded : int
        Samples averaged and samples excluded in the window.
    coverage : float
        Valid samples over the samples expected in the window (NaN when unknown).
    trend_p : float
        p-value of the test for a trend inside the window (NaN when not tested).
    """

    tag: str
    quantity: str
    unit: str
    value: float
    u_random: float
    u_systematic: float
    u: float
    dof: float
    n_samples: int
    n_excluded: int
    coverage: float = float("nan")
    trend_p: float = float("nan")

    def __repr__(self) -> str:
        # value is SI and unit the display unit: the text shows the value in that
        # unit, so no number stands beside a unit it is not in
        from perftest.display.views import record_text

        return record_text(self)


def _vector(values, n: int, name: str, *, default=None, dtype=float) -> np.ndarray:
    if values is None:
        if default is None:
            raise InputError(f"The '{name}' parameter of Measurements is required.", parameter=name)
        return np.full(n, default, dtype=dtype)
    try:
        arr = np.asarray(values, dtype=dtype)
    except (TypeError, ValueError):
        raise InputError(
            f"The '{name}' parameter of Measurements must be numeric. Got {values!r}.",
            parameter=name,
        ) from None
    if arr.ndim == 0:
        arr = np.full(n, arr.item(), dtype=dtype)
    if arr.shape != (n,):
        raise InputError(
            f"The '{name}' parameter of Measurements must hold one value per tag ({n}). "
            f"Got shape {arr.shape}.",
            parameter=name,
        )
    return arr


def _strings(values, n: int, name: str, default: str) -> tuple[str, ...]:
    if values is None:
        return (default,) * n
    if isinstance(values, str):
        return (values,) * n
    out = tuple("" if v is None else str(v) for v in values)
    if len(out) != n:
        raise InputError(
            f"The '{name}' parameter of Measurements must hold one entry per tag ({n}). "
            f"Got {len(out)}.",
            parameter=name,
        )
    return out


@dataclass(frozen=True, eq=False)
class Measurements:
    """Mean value, uncertainty and covariance of a set of tags [SI].

    Build it with :meth:`Run.average <perftest.run.core.Run.average>` or
    :meth:`from_values`; the constructor checks every shape.

    Attributes
    ----------
    tags : tuple of str
        Tag (or redundant-group) ids, in order.
    quantities : tuple of str
        Glossary quantity of each tag (``""`` when unknown).
    units : tuple of str
        Display unit of each tag (as logged).
    value : ndarray
        Mean per tag [SI].
    u_random : ndarray
        Standard uncertainty of the mean from scatter (GUM Type A) [SI].
    u_systematic : ndarray
        Systematic standard uncertainty (instrument) [SI].
    dof : ndarray
        Welch-Satterthwaite degrees of freedom of the combined ``u`` (inf allowed).
    n_samples, n_excluded : ndarray of int
        Samples used and samples excluded per tag.
    cov : ndarray
        Covariance (n x n) [SI]: random part on the diagonal plus systematic
        part, correlated between tags that share a calibration lot.
    start, end : Timestamp or None
        Averaging window.
    notes : tuple of str
        Remarks made while averaging (missing plant info, group disagreement...).
    coverage : ndarray
        Per tag, valid samples over the samples expected in the window
        (:func:`perftest.run.windows.coverage`); NaN when unknown.
    trend_p : ndarray
        Per tag, p-value of the test for a trend inside the window
        (:func:`perftest.run.trend.trend_test`); NaN when not tested.

    Raises
    ------
    InputError
        On a length mismatch, a duplicate tag, a negative uncertainty, or a
        covariance that is not square, symmetric or consistent with ``u``.

    Examples
    --------
    >>> m = Measurements.from_values(["FT-1", "FT-2"], [10.0, 5.0], [0.1, 0.05])
    >>> m["FT-1"].value, round(float(m.u[1]), 3)
    (10.0, 0.05)
    """

    tags: tuple[str, ...]
    quantities: tuple[str, ...]
    units: tuple[str, ...]
    value: np.ndarray
    u_random: np.ndarray
    u_systematic: np.ndarray
    dof: np.ndarray
    n_samples: np.ndarray
    n_excluded: np.ndarray
    cov: np.ndarray
    start: pd.Timestamp | None = None
    end: pd.Timestamp | None = None
    notes: tuple[str, ...] = field(default=())
    coverage: np.ndarray | None = None
    trend_p: np.ndarray | None = None

    def __post_init__(self):
        tags = tuple(str(t) for t in self.tags)
        n = len(tags)
        seen = set()
        for t in tags:
            if t in seen:
                raise InputError(
                    f"The 'tags' parameter of Measurements must not repeat a tag. Got '{t}' twice.",
                    parameter="tags",
                    tag=t,
                )
            seen.add(t)
        set_ = object.__setattr__
        set_(self, "tags", tags)
        set_(self, "quantities", _strings(self.quantities, n, "quantities", ""))
        set_(self, "units", _strings(self.units, n, "units", ""))
        for name in ("value", "u_random", "u_systematic", "dof"):
            set_(self, name, _vector(getattr(self, name), n, name))
        for name in ("n_samples", "n_excluded"):
            set_(self, name, _vector(getattr(self, name), n, name, default=0, dtype=int))
        for name in ("coverage", "trend_p"):
            set_(self, name, _vector(getattr(self, name), n, name, default=np.nan))
        for name in ("u_random", "u_systematic"):
            arr = getattr(self, name)
            bad = np.flatnonzero(~(arr >= 0))
            if bad.size:
                i = bad[0]
                raise InputError(
                    f"The '{name}' of tag '{tags[i]}' must be a non-negative number. "
                    f"Got {arr[i]!r}.",
                    parameter=name,
                    tag=tags[i],
                )
        bad = np.flatnonzero(~(self.dof > 0))
        if bad.size:
            i = bad[0]
            raise InputError(
                f"The 'dof' of tag '{tags[i]}' must be positive (inf allowed). "
                f"Got {self.dof[i]!r}.",
                parameter="dof",
                tag=tags[i],
            )
        cov = np.asarray(self.cov, dtype=float)
        if cov.shape != (n, n):
            raise InputError(
                f"The 'cov' parameter of Measurements must be {n} x {n} (one row per tag). "
                f"Got shape {cov.shape}.",
                parameter="cov",
            )
        # (an exactly symmetric matrix, as averaging makes, passes without the tolerance)
        if n and not (cov == cov.T).all() and not np.allclose(cov, cov.T, rtol=1e-9, atol=0.0):
            raise InputError(
                "The 'cov' parameter of Measurements must be symmetric. Got a matrix whose "
                f"largest asymmetry is {np.max(np.abs(cov - cov.T)):.3g}.",
                parameter="cov",
            )
        u2 = self.u_random**2 + self.u_systematic**2
        diag = np.diag(cov)
        # (a diagonal equal to the parts, as averaging makes it, passes without the tolerance)
        off = diag != u2
        if off.any():
            off &= ~np.isclose(diag, u2, rtol=1e-9, atol=1e-300)
        if np.any(off):
            i = int(np.flatnonzero(off)[0])
            raise InputError(
                f"The diagonal of 'cov' must equal u_random**2 + u_systematic**2. For tag "
                f"'{tags[i]}' got {diag[i]:.6g} instead of {u2[i]:.6g}.",
                parameter="cov",
                tag=tags[i],
            )
        cov = cov.copy()
        cov.setflags(write=False)
        set_(self, "cov", cov)
        for name in (
            "value",
            "u_random",
            "u_systematic",
            "dof",
            "n_samples",
            "n_excluded",
            "coverage",
            "trend_p",
        ):
            getattr(self, name).setflags(write=False)
        set_(self, "notes", tuple(str(s) for s in self.notes))

    # ------------------------------------------------------------------ access
    @property
    def u(self) -> np.ndarray:
        """Combined standard uncertainty per tag [SI]: ``sqrt(u_random² + u_systematic²)``."""
        return np.hypot(self.u_random, self.u_systematic)

    @property
    def correlation(self) -> np.ndarray:
        """Correlation matrix (dimensionless); 0 off the diagonal where a ``u`` is 0."""
        s = np.sqrt(np.diag(self.cov))
        with np.errstate(invalid="ignore", divide="ignore"):
            r = self.cov / np.outer(s, s)
        r = np.where(np.isfinite(r), r, 0.0)
        np.fill_diagonal(r, 1.0)
        return r

    def __len__(self) -> int:
        return len(self.tags)

    def __iter__(self):
        return iter(self.tags)

    def __contains__(self, tag) -> bool:
        return tag in self.tags

    def index(self, tag: str) -> int:
        """Position of ``tag``; raises :class:`InputError` naming the tags known."""
        try:
            return self.tags.index(tag)
        except ValueError:
            shown = ", ".join(self.tags[:20]) + (" ..." if len(self.tags) > 20 else "")
            raise InputError(
                f"Tag '{tag}' is not among the measurements. Known tags: {shown}. "
                "Check the spelling or the plant file.",
                tag=str(tag),
            ) from None

    def __getitem__(self, tag: str) -> MeasurementRecord:
        i = self.index(tag)
        return MeasurementRecord(
            tag=self.tags[i],
            quantity=self.quantities[i],
            unit=self.units[i],
            value=float(self.value[i]),
            u_random=float(self.u_random[i]),
            u_systematic=float(self.u_systematic[i]),
            u=float(self.u[i]),
            dof=float(self.dof[i]),
            n_samples=int(self.n_samples[i]),
            n_excluded=int(self.n_excluded[i]),
            coverage=float(self.coverage[i]),
            trend_p=float(self.trend_p[i]),
        )

    def subset(self, tags: Iterable[str]) -> Measurements:
        """Measurements of ``tags`` only, in that order, covariance block kept."""
        tags = [tags] if isinstance(tags, str) else list(tags)
        idx = np.array([self.index(t) for t in tags], dtype=int)
        return Measurements(
            tags=tuple(self.tags[i] for i in idx),
            quantities=tuple(self.quantities[i] for i in idx),
            units=tuple(self.units[i] for i in idx),
            value=self.value[idx],
            u_random=self.u_random[idx],
            u_systematic=self.u_systematic[idx],
            dof=self.dof[idx],
            n_samples=self.n_samples[idx],
            n_excluded=self.n_excluded[idx],
            cov=self.cov[np.ix_(idx, idx)],
            start=self.start,
            end=self.end,
            notes=self.notes,
            coverage=self.coverage[idx],
            trend_p=self.trend_p[idx],
        )

    def to_frame(self, units="logged") -> pd.DataFrame:
        """One row per tag.

        Parameters
        ----------
        units : "si", "logged", "engineering" or mapping, default "logged"
            Units of ``value`` and the uncertainties: SI (as used inside), the unit
            each tag was logged in, bar/°C/t/h... by quantity, or a mapping of tag
            id or quantity to a unit (others keep their logged unit).  ``unit``
            always names the unit the numbers of its row are in; a gauge unit is
            shown as absolute bar (the measurements do not hold the barometer).

        Returns
        -------
        DataFrame
            Columns ``tag, quantity, value, unit, u_random, u_systematic, u, dof,
            n_samples, n_excluded, coverage, trend_p``; ``unit`` is ``""`` when the quantity is
            unknown.
        """
        if not (isinstance(units, str) and units == "si"):
            from perftest.display.views import measurements_frame

            return measurements_frame(self, units)
        from perftest.units import si_unit

        def _si(q: str) -> str:
            try:
                return si_unit(q) if q else ""
            except Exception:  # unknown quantity name: show no unit rather than fail
                return ""

        return pd.DataFrame(
            {
                "tag": list(self.tags),
                "quantity": list(self.quantities),
                "value": self.value,
                "unit": [_si(q) for q in self.quantities],
                "u_random": self.u_random,
                "u_systematic": self.u_systematic,
                "u": self.u,
                "dof": self.dof,
                "n_samples": self.n_samples,
                "n_excluded": self.n_excluded,
                "coverage": self.coverage,
                "trend_p": self.trend_p,
            }
        )

    # ------------------------------------------------------------------ build
    @classmethod
    def from_values(
        cls,
        tags: Sequence[str],
        values,
        u=None,
        *,
        quantities=None,
        units=None,
        u_random=None,
        u_systematic=None,
        dof=math.inf,
        cov=None,
        n_samples=None,
        start=None,
        end=None,
        notes=(),
    ) -> Measurements:
        """Build measurements from plain numbers (scripts and tests).

        Parameters
        ----------
        tags : sequence of str
            Tag ids.
        values : array_like
            Values [SI].
        u : array_like, optional
            Combined standard uncertainties [SI], stored as the random part unless
            ``u_random``/``u_systematic`` are given.  Omit it to take it from
            ``cov``.
        quantities, units : sequence of str, optional
            Glossary quantity and display unit per tag.
        u_random, u_systematic : array_like, optional
            The two parts separately [SI] (instead of ``u``).
        dof : float or array_like, default inf
            Degrees of freedom per tag.
        cov : array_like, optional
            Full covariance [SI].  Its diagonal must match the uncertainties; the
            off-diagonal part is kept as given.
        n_samples : array_like of int, optional
            Samples behind each value (default 1).
        start, end, notes : optional
            As in :class:`Measurements`.

        Returns
        -------
        Measurements

        Raises
        ------
        InputError
            If neither ``u``, the parts, nor ``cov`` is given, or shapes differ.

        Examples
        --------
        >>> m = Measurements.from_values(["A", "B"], [1.0, 2.0], cov=[[0.04, 0.01], [0.01, 0.09]])
        >>> m.u.round(2).tolist()
        [0.2, 0.3]
        """
        tags = tuple(tags)
        n = len(tags)
        value = _vector(values, n, "values")
        if cov is not None:
            cov = np.asarray(cov, dtype=float)
            if cov.shape != (n, n):
                raise InputError(
                    f"The 'cov' parameter of Measurements.from_values must be {n} x {n}. "
                    f"Got shape {cov.shape}.",
                    parameter="cov",
                )
        if u_random is not None or u_systematic is not None:
            if u is not None:
                raise InputError(
                    "Give either 'u' or 'u_random'/'u_systematic' to Measurements.from_values, "
                    "not both.",
                    parameter="u",
                )
            ur = _vector(u_random, n, "u_random", default=0.0)
            us = _vector(u_systematic, n, "u_systematic", default=0.0)
        elif u is not None:
            ur = _vector(u, n, "u")
            us = np.zeros(n)
        elif cov is not None:
            d = np.diag(cov)
            if np.any(d < 0):
                raise InputError(
                    "The 'cov' parameter of Measurements.from_values must have a non-negative "
                    f"diagonal. Got {d.tolist()}.",
                    parameter="cov",
                )
            ur = np.sqrt(d)
            us = np.zeros(n)
        else:
            raise InputError(
                "Measurements.from_values needs uncertainties: give 'u', 'u_random'/"
                "'u_systematic' or 'cov'.",
                parameter="u",
            )
        if cov is None:
            cov = np.diag(ur**2 + us**2)
        return cls(
            tags=tags,
            quantities=quantities,
            units=units,
            value=value,
            u_random=ur,
            u_systematic=us,
            dof=_vector(dof, n, "dof"),
            n_samples=_vector(n_samples, n, "n_samples", default=1, dtype=int),
            n_excluded=np.zeros(n, dtype=int),
            cov=cov,
            start=start,
            end=end,
            notes=tuple(notes),
        )

    # ------------------------------------------------------------------ display
    def __repr__(self) -> str:
        from perftest.display.views import measurements_text

        return measurements_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import measurements_html

        return measurements_html(self)
