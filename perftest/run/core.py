"""A logged test run: time-indexed SI data with its quality mask and audit trail.

:class:`Run` is what the importers build and what scripts slice: pick a window
(:meth:`Run.window`, :meth:`Run.steadiest_window`), judge it
(:meth:`Run.stability`), screen outliers (:meth:`Run.screen_outliers`) and
average it to :class:`~perftest.run.measurements.Measurements` (:meth:`Run.average`).
Every operation returns a new Run; the raw data, every exclusion and every step
taken stay with it.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterable, Mapping, MutableMapping
from types import MappingProxyType

import numpy as np
import pandas as pd

from perftest.run import stats
from perftest.errors import DataError, DataQualityWarning, InputError, StabilityWarning
from perftest.run.measurements import Measurements
from perftest.plant.file import DEFAULT_STABILITY

__all__ = ["Run", "EXCLUSION_COLUMNS"]

EXCLUSION_COLUMNS = ("time", "tag", "reason", "raw_value", "source")

# share of a tag's samples rejected as outliers above which screen_outliers warns
# (common practice, no source: a healthy log has a few spikes, not a tenth of it)
_HEAVY_REJECTION = 0.10

_PERCENT_KINDS = {"percent", "percent_of_reading", "relative"}

# bytes handled at a time by the column-wise loops (the mask check of Run(), the
# neighbours' median of screen_outliers): bounds their temporaries to a few MB
_CHECK_BYTES = 1 << 22


def _get(obj, name, default=None):
    if obj is None:
        return default
    if isinstance(obj, Mapping):
        return obj.get(name, default)
    return getattr(obj, name, default)


def _empty_exclusions() -> pd.DataFrame:
    return pd.DataFrame(
        {
            "time": pd.Series([], dtype="datetime64[ns, UTC]"),
            "tag": pd.Series([], dtype=object),
            "reason": pd.Series([], dtype=object),
            "raw_value": pd.Series([], dtype=object),
            "source": pd.Series([], dtype=object),
        }
    )


def _fmt_time(t) -> str:
    return "None" if t is None else pd.Timestamp(t).isoformat()


def _half_window(window) -> int | None:
    if window is None:
        return None
    ok = isinstance(window, int | np.integer) and not isinstance(window, bool)
    # with 2 neighbours the "median" is their mean, which a spike next door moves
    if not ok or window < 5 or window % 2 == 0:
        raise InputError(
            "The 'window' parameter of Run.screen_outliers must be an odd number of samples, "
            f"at least 5 (or None to compare with the mean). Got {window!r}.",
            parameter="window",
        )
    return int(window) // 2


def _neighbour_median(x: np.ndarray, half: int) -> np.ndarray:
    """Median of the ``2 half`` samples around each sample (itself and NaN left out).

    ``x`` is (samples, tags); NaN where no neighbour is valid.  A few tags at a time,
    so that the window copies stay small.
    """
    n, m = x.shape
    out = np.full(x.shape, np.nan)
    if n == 0 or m == 0:
        return out
    step = max(1, _CHECK_BYTES // max(16 * half * n, 1))
    for a in range(0, m, step):
        pad = np.full((n + 2 * half, min(step, m - a)), np.nan)
        pad[half : half + n] = x[:, a : a + step]
        win = np.lib.stride_tricks.sliding_window_view(pad, 2 * half + 1, axis=0)
        nb = np.delete(win, half, axis=2)  # (samples, tags, 2 half), a copy
        gaps = np.isnan(nb).any(axis=2)
        med = out[:, a : a + step]
        mid = np.partition(nb, [half - 1, half], axis=2)  # the two middle values
        med[:] = 0.5 * (mid[..., half - 1] + mid[..., half])
        if gaps.any():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)  # no valid neighbour: NaN
                med[gaps] = np.nanmedian(nb[gaps], axis=1)
    return out


class Run:
    """A logged test run in SI with its raw data, quality mask and audit log.

    Parameters
    ----------
    data : DataFrame
        SI values, one column per tag id, DatetimeIndex sorted in time.  A naive
        index is taken to be in the plant's time zone (``plant.site.timezone``),
        or UTC without a plant.  NaN where a sample is missing or masked.  All
        float64 columns are used as they are, without a copy (pandas copy-on-write
        keeps the caller's frame and the run apart); other numeric columns are
        converted.
    raw : mapping of str -> DataFrame, optional
        Untouched source tables, keyed by source (file stem).  Kept as a read-only
        mapping: a read-only one (such as the importer's, which reads the files again
        on first access) as given, any other as a copy.
    mask : DataFrame of bool, optional
        True where a sample is excluded; same index and columns as ``data``.
        Missing values in ``data`` are always treated as excluded.  A mask that is
        True exactly where ``data`` is NaN is kept as given; otherwise it is
        completed, and masked values of ``data`` become NaN (in a copy).
    exclusions : DataFrame, optional
        One row per excluded sample: ``time, tag, reason, raw_value, source``.
    log : iterable of str, optional
        Audit trail of what was done to the data.
    plant : Plant, optional
        The plant description (tags, groups, stability limits, site).
    units : dict of str -> str, optional
        Display unit per tag (as logged).
    quantities : dict of str -> str, optional
        Glossary quantity per tag.  Missing entries are taken from the plant.
    start, end : Timestamp, optional
        Bounds of the window this run was cut to (set by :meth:`window`).

    Raises
    ------
    InputError
        If ``data`` is not a DataFrame with a DatetimeIndex sorted in time, has
        repeated or non-numeric columns, or ``mask`` does not match it.

    Examples
    --------
    >>> idx = pd.date_range("2031-05-04 10:00", periods=4, freq="1min", tz="UTC")
    >>> run = Run.from_frame(pd.DataFrame({"PT-1": [2.0e5, 2.1e5, 2.0e5, 1.9e5]}, index=idx),
    ...                      quantities={"PT-1": "pressure"})
    >>> float(run.average()["PT-1"].value)
    200000.0
    """

    def __init__(
        self,
        data: pd.DataFrame,
        *,
        raw: Mapping[str, pd.DataFrame] | None = None,
        mask: pd.DataFrame | None = None,
        exclusions: pd.DataFrame | None = None,
        log: Iterable[str] = (),
        plant=None,
        units: Mapping[str, str] | None = None,
        quantities: Mapping[str, str] | None = None,
        start=None,
        end=None,
    ):
        if not isinstance(data, pd.DataFrame):
            raise InputError(
                "The 'data' parameter of Run must be a pandas DataFrame. Got "
                f"{type(data).__name__}.",
                parameter="data",
            )
        if not isinstance(data.index, pd.DatetimeIndex):
            raise InputError(
                "The 'data' parameter of Run must have a DatetimeIndex (sample times). Got "
                f"{type(data.index).__name__}. Set the time column as index "
                "(DataFrame.set_index(pd.to_datetime(...))).",
                parameter="data",
            )
        if not data.columns.is_unique:
            dup = data.columns[data.columns.duplicated()].unique().tolist()
            raise InputError(
                f"The 'data' parameter of Run must have one column per tag. Got repeated "
                f"columns {dup}.",
                parameter="data",
                tag=str(dup[0]),
            )
        self.plant = plant
        index = data.index
        if index.tz is None:
            index = index.tz_localize(self._default_tz(), ambiguous="raise", nonexistent="raise")
        if not index.is_monotonic_increasing:
            raise InputError(
                "The 'data' parameter of Run must be sorted in time. Sort it with "
                "DataFrame.sort_index() first.",
                parameter="data",
            )
        values = self._float_frame(data, index)
        if mask is None:
            m = values.isna()
        else:
            if not isinstance(mask, pd.DataFrame) or mask.shape != data.shape:
                raise InputError(
                    "The 'mask' parameter of Run must be a boolean DataFrame shaped like "
                    f"'data' {data.shape}. Got "
                    f"{getattr(mask, 'shape', type(mask).__name__)}.",
                    parameter="mask",
                )
            values, m = self._agree(values, mask)
        self.data = values
        self.mask = m
        if raw is None:
            self.raw = MappingProxyType({})
        elif isinstance(raw, Mapping) and not isinstance(raw, MutableMapping):
            self.raw = raw  # read-only already (file tables read on demand, a proxy)
        else:
            self.raw = MappingProxyType(dict(raw))
        if exclusions is None:
            self.exclusions = _empty_exclusions()
        else:
            missing = [c for c in EXCLUSION_COLUMNS if c not in exclusions.columns]
            if missing:
                raise InputError(
                    "The 'exclusions' parameter of Run must have columns "
                    f"{list(EXCLUSION_COLUMNS)}. Missing {missing}.",
                    parameter="exclusions",
                )
            self.exclusions = exclusions.reset_index(drop=True)
        self.log = list(log)
        q = {} if quantities is None else {str(k): v for k, v in quantities.items()}
        u = {} if units is None else {str(k): v for k, v in units.items()}
        tagspecs = _get(plant, "tags", {}) or {}
        for c in values.columns:
            spec = tagspecs.get(c)
            if c not in q and _get(spec, "quantity"):
                q[c] = _get(spec, "quantity")
            if c not in u and _get(spec, "unit"):
                u[c] = _get(spec, "unit")
        self.quantities = q
        self.units = u
        self.start = None if start is None else pd.Timestamp(start)
        self.end = None if end is None else pd.Timestamp(end)

    @staticmethod
    def _float_frame(data: pd.DataFrame, index: pd.DatetimeIndex) -> pd.DataFrame:
        """``data`` with float64 columns named by str, on ``index``; no copy when it has them."""
        names = [str(c) for c in data.columns]
        dtypes = data.dtypes
        if all(dt == np.float64 for dt in dtypes):
            # a new frame on the same values: copy-on-write keeps later changes to
            # either one from reaching the other
            out = data.copy(deep=False)
            if index is not data.index:
                out = out.set_axis(index, axis=0)
            if not all(isinstance(c, str) for c in data.columns):
                out = out.set_axis(names, axis=1)
            return out
        cols = {}
        for c, name, dt in zip(data.columns, names, dtypes, strict=True):
            col = data[c]
            if not (pd.api.types.is_numeric_dtype(dt) or col.isna().all()):
                raise InputError(
                    f"Column '{c}' of the run data must be numeric (SI values). Got dtype "
                    f"{dt}. Convert it or mark the bad cells as NaN.",
                    parameter="data",
                    tag=str(c),
                )
            cols[name] = col.to_numpy(dtype=float, na_value=np.nan)
        return pd.DataFrame(cols, index=index, columns=names)

    @staticmethod
    def _agree(values: pd.DataFrame, mask: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Values NaN wherever masked and a mask True wherever NaN, copying only to fix.

        A few columns at a time, so that no temporary as large as the frame is made.
        """
        n, m_cols = values.shape
        step = max(1, _CHECK_BYTES // max(8 * n, 1))
        fix_mask = fix_values = False
        parts = []
        for a in range(0, m_cols, step):
            v = values.iloc[:, a : a + step].to_numpy(dtype=float)
            f = mask.iloc[:, a : a + step].to_numpy(dtype=bool)
            nan = np.isnan(v)
            fix_mask |= bool((nan & ~f).any())
            fix_values |= bool((f & ~nan).any())
            parts.append(f)
        as_given = mask.index is values.index or mask.index.equals(values.index)
        as_given &= all(dt == np.bool_ for dt in mask.dtypes)
        if fix_mask or fix_values or not as_given:
            flags = np.concatenate(parts, axis=1) if parts else np.zeros((n, 0), bool)
            if fix_mask:
                flags = flags | values.isna().to_numpy()
            m = pd.DataFrame(flags, index=values.index, columns=values.columns)
        else:
            m = mask.set_axis(values.columns, axis=1)  # a new frame, same flags
        if fix_values:
            values = values.mask(m)
        return values, m

    # ----------------------------------------------------------------- building
    @classmethod
    def from_frame(cls, df: pd.DataFrame, plant=None, units=None, quantities=None) -> Run:
        """Wrap a DataFrame of SI values (scripts and tests).

        Parameters
        ----------
        df : DataFrame
            SI values, DatetimeIndex, one column per tag id; NaN = missing.
        plant, units, quantities : optional
            As in :class:`Run`.

        Returns
        -------
        Run
            With ``raw = {"frame": df}`` and a mask marking the missing values.
        """
        # pandas copy-on-write: a shallow copy cannot be changed through the caller's frame
        raw = {"frame": df.copy(deep=False)}
        run = cls(df, raw=raw, plant=plant, units=units, quantities=quantities)
        n_missing = int(run.mask.to_numpy().sum())
        run.log.append(
            f"from_frame: {run.data.shape[1]} tags x {run.data.shape[0]} samples, "
            f"{n_missing} missing values masked"
        )
        if n_missing:
            t, c = np.nonzero(run.mask.to_numpy())
            run.exclusions = pd.DataFrame(
                {
                    "time": run.data.index[t],
                    "tag": run.data.columns[c].to_numpy(dtype=object),
                    "reason": "missing value",
                    "raw_value": np.full(t.size, np.nan, dtype=object),
                    "source": "frame",
                }
            )
        return run

    def _default_tz(self) -> str:
        tz = _get(_get(self.plant, "site"), "timezone")
        return tz or "UTC"

    def _replace(self, **changes) -> Run:
        fields = dict(
            data=self.data,
            raw=self.raw,
            mask=self.mask,
            exclusions=self.exclusions,
            log=list(self.log),
            plant=self.plant,
            units=self.units,
            quantities=self.quantities,
            start=self.start,
            end=self.end,
        )
        fields.update(changes)
        data = fields.pop("data")
        return Run(data, **fields)

    def __repr__(self) -> str:
        t0 = _fmt_time(self.data.index[0]) if len(self.data) else "-"
        t1 = _fmt_time(self.data.index[-1]) if len(self.data) else "-"
        return (
            f"Run({self.data.shape[1]} tags, {self.data.shape[0]} samples, {t0} .. {t1}, "
            f"{int(self.mask.to_numpy().sum())} masked)"
        )

    @property
    def tags(self) -> tuple[str, ...]:
        """Tag ids (columns of ``data``)."""
        return tuple(self.data.columns)

    def _check_tags(self, tags, func: str) -> list[str]:
        if tags is None:
            return list(self.data.columns)
        tags = [tags] if isinstance(tags, str) else list(tags)
        unknown = [t for t in tags if t not in self.data.columns]
        if unknown:
            raise InputError(
                f"The 'tags' parameter of Run.{func} names tags that are not in the run: "
                f"{unknown}. Known tags: {list(self.data.columns)[:20]}.",
                parameter="tags",
                tag=str(unknown[0]),
            )
        return tags

    def _timestamp(self, t, name: str, func: str) -> pd.Timestamp | None:
        if t is None:
            return None
        try:
            ts = pd.Timestamp(t)
        except (TypeError, ValueError):
            raise InputError(
                f"The '{name}' parameter of Run.{func} must be a time (string or Timestamp). "
                f"Got {t!r}.",
                parameter=name,
            ) from None
        if ts is pd.NaT:
            raise InputError(
                f"The '{name}' parameter of Run.{func} must be a time. Got NaT.", parameter=name
            )
        if ts.tz is None:
            try:
                ts = ts.tz_localize(self._default_tz(), ambiguous="raise", nonexistent="raise")
            except Exception as exc:  # pytz/pandas NonExistentTimeError, AmbiguousTimeError
                tz = self._default_tz()
                offsets = [
                    (ts + pd.Timedelta(hours=h)).tz_localize(tz).strftime("%z")
                    for h in (-6, 6)
                ]
                offsets = [f"{o[:3]}:{o[3:]}" for o in offsets]
                twice = "nonexistent" not in str(exc)
                raise InputError(
                    f"The '{name}' parameter of Run.{func} is {t!r}, a local time that "
                    f"{'occurs twice' if twice else 'does not exist'} in time zone {tz} "
                    f"(a clock change). Give it with its UTC offset, e.g. "
                    f"'{ts.isoformat()}{offsets[0]}' or '{ts.isoformat()}{offsets[1]}'.",
                    parameter=name,
                ) from None
        return ts.tz_convert(self.data.index.tz)

    # ----------------------------------------------------------------- windows
    def window(self, start=None, end=None) -> Run:
        """The samples with ``start <= time < end``.

        Parameters
        ----------
        start, end : str or Timestamp, optional
            Window bounds.  Times without a zone are read in the plant's time
            zone (UTC without a plant).  None: from the first / to the last sample.

        Returns
        -------
        Run
            Same tags, mask and raw data; ``exclusions`` and ``log`` are kept whole
            and the cut is logged.

        Raises
        ------
        InputError
            If a bound is not a time, ``end <= start``, or no sample falls in the window.
        """
        t0 = self._timestamp(start, "start", "window")
        t1 = self._timestamp(end, "end", "window")
        if t0 is not None and t1 is not None and not t1 > t0:
            raise InputError(
                f"The 'end' parameter of Run.window must be later than 'start'. Got start "
                f"{_fmt_time(t0)}, end {_fmt_time(t1)}.",
                parameter="end",
            )
        idx = self.data.index
        keep = np.ones(len(idx), dtype=bool)
        if t0 is not None:
            keep &= idx >= t0
        if t1 is not None:
            keep &= idx < t1
        if not keep.any():
            raise InputError(
                f"No sample of the run falls in the window {_fmt_time(t0)} to {_fmt_time(t1)}. "
                f"The run covers {_fmt_time(idx[0]) if len(idx) else '-'} to "
                f"{_fmt_time(idx[-1]) if len(idx) else '-'}.",
                parameter="start",
            )
        return self._cut(keep, t0, t1, f"window {_fmt_time(t0)} to {_fmt_time(t1)}")

    def _cut(self, keep: np.ndarray, t0, t1, what: str) -> Run:
        data = self.data.iloc[keep]
        mask = self.mask.iloc[keep]
        log = list(self.log)
        log.append(
            f"{what}: {int(keep.sum())} of {len(keep)} samples kept, "
            f"{int(mask.to_numpy().sum())} masked in the window"
        )
        return self._replace(data=data, mask=mask, log=log, start=t0, end=t1)

    def _duration_seconds(self) -> float:
        """Window length used to turn a slope into a drift [s]."""
        idx = self.data.index
        if len(idx) < 2:
            return 0.0
        return float((idx[-1] - idx[0]) / pd.Timedelta(seconds=1))

    # ----------------------------------------------------------------- stability
    def _permissible_spec(self, tag: str, limits):
        """Return ``(spec, basis)`` for a tag following the documented priority."""
        quantity = self.quantities.get(tag)
        if limits is not None:
            if tag in limits:
                return limits[tag], "argument (tag)"
            if quantity is not None and quantity in limits:
                return limits[quantity], "argument (quantity)"
        spec = _get(_get(self.plant, "tags", {}) or {}, tag)
        override = _get(spec, "stability")
        if override is not None:
            return override, "plant tag"
        plant_limits = _get(self.plant, "stability", {}) or {}
        if quantity is not None and quantity in plant_limits:
            lim = plant_limits[quantity]
            return lim, ("default" if lim == DEFAULT_STABILITY.get(quantity) else "plant quantity")
        if quantity in DEFAULT_STABILITY:
            return DEFAULT_STABILITY[quantity], "default"
        return None, "none"

    def _permissible(self, tags: list[str], means: np.ndarray, limits):
        """Permissible variation [SI] per tag (NaN where none) and its basis.

        ``means`` may be 1-D (one per tag) or 2-D (windows x tags).
        """
        from perftest.units import to_si

        means = np.asarray(means, dtype=float)
        out = np.full(means.shape, np.nan)
        basis = []
        for j, tag in enumerate(tags):
            spec, where = self._permissible_spec(tag, limits)
            basis.append(where)
            if spec is None:
                continue
            col = (..., j)
            if hasattr(spec, "limit_si"):  # a plant-file StabilityLimit, already in SI
                out[col] = spec.limit_si(means[col])
                continue
            if isinstance(spec, int | float | np.floating | np.integer):
                value, kind, unit = float(spec), "absolute", None
            else:
                value = _get(spec, "value")
                kind = str(_get(spec, "kind", "absolute"))
                unit = _get(spec, "unit")
                if value is None:
                    raise InputError(
                        f"The stability limit of tag '{tag}' ({where}) has no 'value'. Give "
                        "{value, kind} with kind 'percent' or 'absolute'.",
                        parameter="limits",
                        tag=tag,
                    )
                value = float(value)
            if not (value > 0 and math.isfinite(value)):
                raise InputError(
                    f"The stability limit of tag '{tag}' ({where}) must be a positive number. "
                    f"Got {value!r}.",
                    parameter="limits",
                    tag=tag,
                )
            if kind in _PERCENT_KINDS:
                out[col] = value / 100.0 * np.abs(means[col])
            elif kind == "absolute":
                if unit:
                    value = float(
                        to_si(value, unit, quantity=self.quantities.get(tag), difference=True)
                    )
                out[col] = value
            else:
                raise InputError(
                    f"The stability limit of tag '{tag}' ({where}) must have kind 'percent' or "
                    f"'absolute'. Got {kind!r}.",
                    parameter="limits",
                    tag=tag,
                )
        return out, basis

    def stability(self, limits=None, *, tags=None, warn: bool = True) -> pd.DataFrame:
        """Judge how steady each tag is over the run (or window).

        Parameters
        ----------
        limits : dict, optional
            Permissible variation keyed by tag id or quantity: a number [SI,
            absolute] or ``{"value": v, "kind": "percent" | "absolute", "unit": u}``.
        tags : list of str, optional
            Tags to judge (default all).
        warn : bool, default True
            Issue a :class:`~perftest.errors.StabilityWarning` listing the failing tags.

        Returns
        -------
        DataFrame
            Indexed by tag: ``quantity, n, mean, std, min, max, max_deviation,
            drift, permissible, ratio, passed, basis`` (SI).  ``passed`` is
            ``<NA>`` when no permissible variation is known for the tag.

        Notes
        -----
        ``max_deviation`` is the largest :math:`|x_i - \\bar x|`; ``drift`` is the
        least-squares slope times the window length :math:`t_{last} - t_{first}`;

        .. math:: r = \\max(\\text{max\\_deviation}, |\\text{drift}|) / \\text{permissible}

        and a tag passes when :math:`r \\le 1`.  The permissible variation is taken
        from, in order: ``limits[tag]``, ``limits[quantity]``, the tag's
        ``stability`` in the plant file, the plant's ``[stability.<quantity>]``,
        :data:`DEFAULT_STABILITY` (common practice, no source).  Percent limits
        are a percentage of the window mean.
        """
        tags = self._check_tags(tags, "stability")
        x = self.data[tags].to_numpy(dtype=float)
        n = np.isfinite(x).sum(axis=0)
        t = (self.data.index - self.data.index[0]) / pd.Timedelta(seconds=1)
        t = np.asarray(t, dtype=float)[:, None] * np.ones((1, len(tags)))
        with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            mean = np.nanmean(x, axis=0)
            std = np.nanstd(x, axis=0, ddof=1)
            lo = np.nanmin(x, axis=0)
            hi = np.nanmax(x, axis=0)
            maxdev = np.maximum(hi - mean, mean - lo)
            tv = np.where(np.isfinite(x), t, np.nan)
            tm = np.nanmean(tv, axis=0)
            sxx = np.nansum((tv - tm) ** 2, axis=0)
            sxy = np.nansum((tv - tm) * (x - mean), axis=0)
            slope = np.where(sxx > 0, sxy / sxx, 0.0)
        drift = slope * self._duration_seconds()
        drift = np.where(n >= 2, drift, np.nan)
        perm, basis = self._permissible(tags, mean, limits)
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = np.maximum(maxdev, np.abs(drift)) / perm
        passed = pd.array(
            [pd.NA if not np.isfinite(r) else bool(r <= 1.0) for r in ratio], dtype="boolean"
        )
        table = pd.DataFrame(
            {
                "quantity": [self.quantities.get(tg, "") for tg in tags],
                "n": n,
                "mean": mean,
                "std": std,
                "min": lo,
                "max": hi,
                "max_deviation": maxdev,
                "drift": drift,
                "permissible": perm,
                "ratio": ratio,
                "passed": passed,
                "basis": basis,
            },
            index=pd.Index(tags, name="tag"),
        )
        failing = table.index[table["passed"].fillna(True).to_numpy() == False].tolist()  # noqa: E712
        if warn and failing:
            worst = table.loc[failing, "ratio"].sort_values(ascending=False)
            shown = ", ".join(f"{tg} ({r:.2f})" for tg, r in worst.items())
            warnings.warn(
                f"{len(failing)} tag(s) vary more than permitted in the window "
                f"{_fmt_time(self.data.index[0])} to {_fmt_time(self.data.index[-1])} "
                f"(ratio to the permissible variation): {shown}.",
                StabilityWarning,
                stacklevel=2,
            )
        return table

    def steadiest_window(self, length, *, step=None, tags=None, limits=None) -> Run:
        """The window of the given length in which the tags vary least.

        Parameters
        ----------
        length : str or Timedelta
            Window length (``"2h"``, ``"30min"``).
        step : str or Timedelta, optional
            Spacing of the candidate windows' end times (default: every sample).
        tags : list of str, optional
            Tags that decide (default: every tag with a permissible variation).
        limits : dict, optional
            As in :meth:`stability`.

        Returns
        -------
        Run
            The samples in ``(end - length, end]`` of the best window; the log
            records the window, its score and the tag that set it.

        Raises
        ------
        InputError
            If ``length`` is not a positive duration, the run is shorter than it,
            or no tag has a permissible variation.
        DataError
            If no candidate window has at least 2 valid samples of every deciding tag.

        Notes
        -----
        Each candidate is scored by the ratio of :meth:`stability`, taken over the
        deciding tags: :math:`\\max_j \\max(\\text{max\\_dev}_j, |\\text{drift}_j|)
        / \\text{permissible}_j`.  The smallest score wins (the earliest on a tie).
        Rolling sums give every candidate's mean, extremes and regression slope
        in one pass, so a day of one-minute data is scored in milliseconds.
        """
        L = self._timedelta(length, "length")
        S = None if step is None else self._timedelta(step, "step")
        tags = self._check_tags(tags, "steadiest_window")
        idx = self.data.index
        if len(idx) < 2:
            raise InputError(
                f"Run.steadiest_window needs at least two samples. Got {len(idx)}.",
                parameter="length",
            )
        dt = idx.to_series().diff().median()
        span = idx[-1] - idx[0]
        if L > span + dt:
            raise InputError(
                f"The 'length' parameter of Run.steadiest_window ({L}) is longer than the run "
                f"({span + dt}). Choose a shorter window.",
                parameter="length",
            )
        x = self.data[tags]
        valid = x.notna()
        # seconds from the run's middle keep the regression sums well conditioned
        t_mid = idx[0] + span / 2
        tsec = np.asarray((idx - t_mid) / pd.Timedelta(seconds=1), dtype=float)
        T = pd.DataFrame(np.where(valid, tsec[:, None], 0.0), index=idx, columns=tags)
        X = x.fillna(0.0)
        roll = dict(window=L, min_periods=1)
        cnt = valid.astype(float).rolling(**roll).sum()
        sx = X.rolling(**roll).sum()
        st = T.rolling(**roll).sum()
        stt = (T * T).rolling(**roll).sum()
        stx = (T * X).rolling(**roll).sum()
        rmax = x.rolling(**roll).max()
        rmin = x.rolling(**roll).min()
        with np.errstate(invalid="ignore", divide="ignore"):
            c = cnt.to_numpy()
            mean = sx.to_numpy() / c
            sxx = stt.to_numpy() - st.to_numpy() ** 2 / c
            sxy = stx.to_numpy() - st.to_numpy() * sx.to_numpy() / c
            slope = np.where(sxx > 0, sxy / sxx, 0.0)
            maxdev = np.maximum(rmax.to_numpy() - mean, mean - rmin.to_numpy())
        # a full window ending at sample t holds (t - L, t]; its regression span is
        # from its first to its last sample, L - dt on a regular grid
        drift = slope * ((L - dt) / pd.Timedelta(seconds=1))
        perm, _ = self._permissible(tags, mean, limits)
        decides = np.isfinite(perm).any(axis=0)
        if not decides.any():
            raise InputError(
                "Run.steadiest_window needs a permissible variation for at least one tag. "
                "None of the tags has a quantity with a default, a plant limit or a "
                "'limits' entry. Pass limits={tag: ...} or set quantities.",
                parameter="limits",
            )
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = np.maximum(maxdev, np.abs(drift)) / perm
        ratio = ratio[:, decides]
        ratio = np.where(c[:, decides] >= 2, ratio, np.inf)
        ratio = np.where(np.isnan(ratio), np.inf, ratio)
        score = ratio.max(axis=1)
        full = np.asarray(idx >= idx[0] + L - dt)
        if S is not None:
            grid = pd.date_range(idx[full][0], idx[-1], freq=S)
            pos = idx.get_indexer(grid, method="pad")
            on_grid = np.zeros(len(idx), dtype=bool)
            on_grid[pos[pos >= 0]] = True
            full &= on_grid
        score = np.where(full, score, np.inf)
        best = int(np.argmin(score))
        if not np.isfinite(score[best]):
            raise DataError(
                f"No {L} window of the run has at least 2 valid samples of every deciding tag. "
                "Pass tags=[...] to leave out tags that are masked for long stretches.",
                parameter="tags",
            )
        dec_tags = [t for t, d in zip(tags, decides, strict=True) if d]
        worst_tag = dec_tags[int(np.argmax(ratio[best]))]
        t1 = idx[best]
        keep = np.asarray((idx > t1 - L) & (idx <= t1))
        run = self._cut(
            keep,
            t1 - L,
            t1,
            f"steadiest_window(length={L}, step={S}) over {int(np.isfinite(score).sum())} "
            f"candidate windows: {_fmt_time(t1 - L)} (excl.) to {_fmt_time(t1)}, "
            f"score {score[best]:.3g} set by '{worst_tag}'",
        )
        return run

    def _timedelta(self, value, name: str) -> pd.Timedelta:
        try:
            td = pd.Timedelta(value)
        except (TypeError, ValueError):
            raise InputError(
                f"The '{name}' parameter of Run.steadiest_window must be a duration such as "
                f"'2h' or '30min'. Got {value!r}.",
                parameter=name,
            ) from None
        if td is pd.NaT or td <= pd.Timedelta(0):
            raise InputError(
                f"The '{name}' parameter of Run.steadiest_window must be a positive duration. "
                f"Got {value!r}.",
                parameter=name,
            )
        return td

    # ----------------------------------------------------------------- outliers
    def screen_outliers(self, alpha: float = 0.05, tags=None, *, window: int | None = 11) -> Run:
        """Reject spikes per tag with the modified Thompson tau test, sized for long logs.

        Parameters
        ----------
        alpha : float, default 0.05
            Probability that a tag whose samples are independent normal scatter loses
            any sample at all (the level of the whole screen of one tag, not of each
            single test; see Notes).
        tags : list of str, optional
            Tags to screen (default all).
        window : int or None, default 11
            Odd number of samples, at least 5: each sample is compared with the median
            of the ``window - 1`` samples around it.  None compares with the tag's
            mean (the textbook form, for a short steady record).

        Returns
        -------
        Run
            With each rejected sample masked and listed in ``exclusions`` (reason
            ``"outlier (modified Thompson tau, alpha=0.05)"``, ``raw_value`` the SI
            value, ``source`` ``"screen_outliers"``) and a log line with the rule and
            the counts.

        Raises
        ------
        InputError
            If ``alpha`` is not in (0, 1) or ``window`` is not an odd number >= 5.

        Warns
        -----
        DataQualityWarning
            When more than 10 % of a tag's samples are rejected.

        Notes
        -----
        For each tag with :math:`n` tested samples the deviation of every sample from
        the median of its neighbours,

        .. math:: d_i = x_i - \\operatorname{median}\\{x_{i-h}, ..., x_{i-1},
                  x_{i+1}, ..., x_{i+h}\\}, \\quad h = (\\text{window} - 1)/2,

        (masked neighbours left out, the sample itself too, so that a spike does not
        pull its own reference) goes through the modified Thompson tau test of ASME
        PTC 19.1 [1]_ one sample at a time: the largest :math:`|d_i - \\bar d|` is
        rejected when it exceeds :math:`\\tau s_d`, :math:`\\bar d` and :math:`s_d`
        are recomputed without it, and the screen stops at the first pass that
        rejects nothing (:func:`perftest.run.stats.thompson_tau_outliers`).  The critical
        value is :math:`\\tau(k, \\alpha/n)` (:func:`perftest.run.stats.modified_thompson_tau`,
        :math:`k` samples left) at the per-sample level :math:`\\alpha/n`.

        Why not the textbook level: tested at :math:`\\alpha` per pass, the largest of
        hundreds of normal deviations exceeds :math:`\\tau \\to z_{\\alpha/2}` = 1.96
        standard deviations almost surely, and the iteration keeps cutting the tails
        until about 18 % of a long, perfectly normal record is gone.  Splitting
        :math:`\\alpha` over the :math:`n` samples (Bonferroni) makes :math:`\\alpha`
        the chance that a clean record loses any sample, about :math:`\\alpha` false
        rejections per tag on average (for :math:`n` = 10 000 and :math:`\\alpha` =
        0.05, :math:`\\tau` = 4.56).  With that substitution the critical value is the
        two-sided Grubbs criterion (from memory).  The neighbours' median takes out
        slow changes (drift, load swings, the wander of an autocorrelated signal) that
        the mean would leave in the deviations, so a spike is judged against the
        sample-to-sample scatter rather than the range of the whole record.  The
        deviations of autocorrelated samples are neither independent nor quite
        normal: expect somewhat more false rejections than :math:`\\alpha` (about 0.5
        per tag of 10 000 samples at a lag-one correlation of 0.9 or 0.99, by
        simulation), still nowhere near the textbook cascade.

        Limits:

        - the deviations are taken as roughly normal: heavy-tailed noise loses more
          samples than :math:`\\alpha` suggests;
        - a signal that sits on one value with rare one-digit steps (coarse
          resolution) has almost no scatter of :math:`d`, and those steps are
          rejected: read the log, and the warning beyond 10 % of a tag;
        - a disturbance lasting more than :math:`h` consecutive samples moves the
          median and is not an outlier here (it is a stability question);
        - several large spikes inflate :math:`s_d` and can hide smaller ones (the
          test removes the largest first);
        - a sample without a valid neighbour in its window, and every sample of a
          tag with fewer than 3 such samples, is not tested (the log lists the tags).

        References
        ----------
        .. [1] ASME PTC 19.1-2018, Test Uncertainty.
        """
        tags = self._check_tags(tags, "screen_outliers")
        stats.modified_thompson_tau(3, alpha)  # validates alpha with a clear message
        half = _half_window(window)
        x = self.data[tags].to_numpy(dtype=float)
        if half is None:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN tags: not tested
                d = x - np.nanmean(x, axis=0)
        else:
            d = x - _neighbour_median(x, half)
        n_tested = np.isfinite(d).sum(axis=0)
        rej = np.zeros(x.shape, dtype=bool)
        for n in np.unique(n_tested):
            if n >= 3:
                cols = np.flatnonzero(n_tested == n)
                rej[:, cols] = stats.thompson_tau_outliers(d[:, cols], alpha / n)
        reason = f"outlier (modified Thompson tau, alpha={alpha:g})"
        t_i, c_i = np.nonzero(rej)
        new = pd.DataFrame(
            {
                "time": self.data.index[t_i],
                "tag": np.asarray(tags, dtype=object)[c_i],
                "reason": reason,
                "raw_value": x[t_i, c_i].astype(object),
                "source": "screen_outliers",
            }
        )
        mask = self.mask.copy()
        if t_i.size:
            cols = np.array([self.data.columns.get_loc(t) for t in tags])
            m = mask.to_numpy(copy=True)
            m[t_i, cols[c_i]] = True
            mask = pd.DataFrame(m, index=mask.index, columns=mask.columns)
        exclusions = (
            pd.concat([self.exclusions, new], ignore_index=True) if len(new) else self.exclusions
        )
        counts = pd.Series(c_i).value_counts().sort_index()
        detail = ", ".join(f"{tags[k]}: {v}" for k, v in counts.items())
        few = [tg for tg, k in zip(tags, n_tested, strict=True) if k < 3]
        rule = (
            "deviations from the tag's mean"
            if half is None
            else f"deviations from the median of the {2 * half} neighbouring samples"
        )
        log = list(self.log)
        log.append(
            f"screen_outliers(alpha={alpha:g}, window={window}) on {len(tags)} tags: modified "
            f"Thompson tau on {rule}, one at a time at the per-sample level alpha/n; "
            f"{t_i.size} samples rejected"
            + (f" ({detail})" if detail else "")
            + (f"; not tested (fewer than 3 valid samples): {few}" if few else "")
        )
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = rej.sum(axis=0) / n_tested
        heavy = [tg for tg, f in zip(tags, frac, strict=True) if f > _HEAVY_REJECTION]
        if heavy:
            warnings.warn(
                f"screen_outliers(alpha={alpha:g}) rejected more than "
                f"{_HEAVY_REJECTION:.0%} of the samples of {heavy}. That is more than spikes: "
                "look at the record (coarse resolution, many spikes, steps) before averaging.",
                DataQualityWarning,
                stacklevel=2,
            )
        return self._replace(data=self.data, mask=mask, exclusions=exclusions, log=log)

    # ----------------------------------------------------------------- averaging
    def _atmospheric_pressure(self):
        site = _get(self.plant, "site")
        baro = _get(site, "barometer_tag")
        if baro and baro in self.data.columns:
            p = self.data[baro].mean()
            if np.isfinite(p):
                return float(p)
        return _get(site, "atmospheric_pressure")

    def average(self, *, autocorrelation: bool = True, tags=None, keep_members: bool = False):
        """Average the run (or window) to :class:`~perftest.run.measurements.Measurements`.

        Parameters
        ----------
        autocorrelation : bool, default True
            Use the effective number of samples for the random uncertainty.
        tags : list of str, optional
            Tags to average (default all columns).  Groups of the plant whose
            members are all present are added.
        keep_members : bool, default False
            Keep the members of redundant groups as entries of their own besides
            the group entry.

        Returns
        -------
        Measurements
            One entry per tag (members of a group replaced by the group id unless
            ``keep_members``), SI values, covariance, notes.

        Raises
        ------
        DataError
            If a tag has no valid sample in the window (names tag and window).

        Warns
        -----
        DataQualityWarning
            When a group's members disagree, or a tag has a single valid sample.

        Notes
        -----
        Per tag, from the :math:`m` valid samples:

        - value: :math:`\\bar x`; random part
          :math:`u_r = s/\\sqrt{n_{eff}}` with :math:`\\nu_r = n_{eff} - 1` (at
          least 1) (:func:`perftest.run.stats.random_uncertainty_of_mean`);
        - systematic part :math:`u_s` from the plant's
          ``TagSpec.systematic_standard_uncertainty(mean)``, taken with infinite
          degrees of freedom (a stated instrument uncertainty is treated as
          exactly known, GUM G.4.3 for Type B with no doubt about the bound);
          0 with a note for a tag the plant does not describe;
        - combined :math:`u = \\sqrt{u_r^2 + u_s^2}`, degrees of freedom by
          Welch-Satterthwaite (GUM G.2b) :math:`\\nu = u^4/(u_r^4/\\nu_r)`.

        Covariance: :math:`C = \\mathrm{diag}(u_r^2) + S` with
        :math:`S_{ij} = u_{s,i}u_{s,j}` when i and j share a calibration lot
        (correlation 1) and :math:`S_{ii} = u_{s,i}^2`.  A group entry is the plain
        mean of its members' means, :math:`g = w^T x` with :math:`w_i = 1/k`; its
        variances follow :math:`w^T C w` for the random and systematic parts
        separately, so shared lots are not averaged away.  Members disagree when
        their spread exceeds the group's ``agreement`` or when a pair differs by
        more than 1.96 standard uncertainties of the difference (95 %, normal).
        """
        tags = self._check_tags(tags, "average")
        x = self.data[tags].to_numpy(dtype=float)
        n_valid = np.isfinite(x).sum(axis=0)
        t0 = self.start if self.start is not None else (self.data.index[0] if len(x) else None)
        t1 = self.end if self.end is not None else (self.data.index[-1] if len(x) else None)
        empty = [tg for tg, k in zip(tags, n_valid, strict=True) if k == 0]
        if empty:
            raise DataError(
                f"Tag '{empty[0]}' has no valid sample in the window {_fmt_time(t0)} to "
                f"{_fmt_time(t1)}"
                + (f" (nor do {empty[1:]})" if len(empty) > 1 else "")
                + ". Choose another window, fix the source data, or leave the tag out with "
                "average(tags=[...]).",
                tag=empty[0],
            )
        notes: list[str] = []
        _, mean, _, neff, u_r = stats.mean_statistics(x, autocorrelation)
        dof_r = np.maximum(neff - 1.0, 1.0)
        single = [tg for tg, k in zip(tags, n_valid, strict=True) if k == 1]
        if single:
            u_r = np.where(n_valid == 1, 0.0, u_r)
            dof_r = np.where(n_valid == 1, np.inf, dof_r)
            msg = (
                f"only one valid sample in the window for {single}: random uncertainty not "
                "evaluated (taken as 0)"
            )
            notes.append(msg)
            warnings.warn(msg[0].upper() + msg[1:] + ".", DataQualityWarning, stacklevel=2)
        # systematic part
        tagspecs = _get(self.plant, "tags", {}) or {}
        atm = self._atmospheric_pressure()
        u_s = np.zeros(len(tags))
        lots: list[str | None] = []
        unknown = []
        for j, tg in enumerate(tags):
            spec = tagspecs.get(tg)
            lots.append(_get(spec, "shared_calibration"))
            func = _get(spec, "systematic_standard_uncertainty")
            if spec is None or func is None or _get(spec, "uncertainty", 0) is None:
                unknown.append(tg)
                continue
            u_s[j] = float(func(float(mean[j]), atmospheric_pressure=atm, unit=self.units.get(tg)))
        if unknown:
            notes.append(
                f"no instrument uncertainty in the plant for {unknown}: systematic uncertainty "
                "taken as 0"
            )
        C_s = np.diag(u_s**2)
        lot_arr = np.array([lot or "" for lot in lots], dtype=object)
        for lot in sorted({lot for lot in lots if lot}):
            ix = np.flatnonzero(lot_arr == lot)
            C_s[np.ix_(ix, ix)] = np.outer(u_s[ix], u_s[ix])
        C_r = np.diag(u_r**2)
        # output entries: tags (minus group members) + groups, as rows of L
        groups = _get(self.plant, "groups", {}) or {}
        pos = {tg: j for j, tg in enumerate(tags)}
        out_tags: list[str] = []
        rows: list[np.ndarray] = []
        grouped: set[str] = set()
        group_rows: dict[str, np.ndarray] = {}
        for gid, g in groups.items():
            members = list(_get(g, "tags", ()) or ())
            if not members:
                continue
            missing = [m for m in members if m not in pos]
            if missing:
                notes.append(f"group '{gid}' not averaged: members {missing} not in the run")
                continue
            w = np.zeros(len(tags))
            w[[pos[m] for m in members]] = 1.0 / len(members)
            group_rows[gid] = w
            grouped.update(members)
            self._check_agreement(gid, g, members, pos, mean, C_r + C_s, notes)
        for tg in tags:
            if keep_members or tg not in grouped:
                e = np.zeros(len(tags))
                e[pos[tg]] = 1.0
                out_tags.append(tg)
                rows.append(e)
        for gid, w in group_rows.items():
            out_tags.append(gid)
            rows.append(w)
        L = np.array(rows).reshape(len(rows), len(tags))
        value = L @ mean
        cov_r = L @ C_r @ L.T
        cov_s = L @ C_s @ L.T
        cov = cov_r + cov_s
        ur_out = np.sqrt(np.clip(np.diag(cov_r), 0.0, None))
        us_out = np.sqrt(np.clip(np.diag(cov_s), 0.0, None))
        # make the diagonal exactly consistent with the parts
        np.fill_diagonal(cov, ur_out**2 + us_out**2)
        # Welch-Satterthwaite: random contributions |L_ij| u_r,j with dof_r,j;
        # systematic parts carry infinite dof and drop out of the denominator
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            contrib = (L * u_r[None, :]) ** 2
            utot2 = ur_out**2 + us_out**2
            denom = np.sum(np.where(np.isinf(dof_r), 0.0, contrib**2 / dof_r), axis=1)
            dof = np.where(denom > 0, utot2**2 / denom, np.inf)
        n_samp = ((L > 0) @ n_valid).astype(int)
        n_masked = self.mask[tags].to_numpy().sum(axis=0)
        n_excl = ((L > 0) @ n_masked).astype(int)
        quantities, units = [], []
        for w in L:
            members = [tags[j] for j in np.flatnonzero(w)]
            q = {self.quantities.get(m, "") for m in members}
            u = {self.units.get(m, "") for m in members}
            quantities.append(q.pop() if len(q) == 1 else "")
            units.append(u.pop() if len(u) == 1 else "")
        for gid in group_rows:
            notes.append(
                f"group '{gid}' averaged from {len(_get(groups[gid], 'tags'))} members "
                "("
                + ", ".join(_member_text(self, m, mean[pos[m]]) for m in _get(groups[gid], "tags"))
                + ")"
            )
        return Measurements(
            tags=tuple(out_tags),
            quantities=tuple(quantities),
            units=tuple(units),
            value=value,
            u_random=ur_out,
            u_systematic=us_out,
            dof=dof,
            n_samples=n_samp,
            n_excluded=n_excl,
            cov=cov,
            start=t0,
            end=t1,
            notes=tuple(notes),
        )

    def _check_agreement(self, gid, group, members, pos, mean, C, notes) -> None:
        from perftest.units import to_si

        ix = [pos[m] for m in members]
        mm = mean[ix]
        problems = []
        agreement = _get(group, "agreement")
        if agreement is not None:
            centre = abs(float(np.mean(mm)))
            if hasattr(agreement, "limit_si"):  # plant-file StabilityLimit
                limit = float(agreement.limit_si(centre))
            elif isinstance(agreement, int | float):
                limit = float(agreement)  # absolute, SI
            else:
                value = float(_get(agreement, "value"))
                if str(_get(agreement, "kind", "percent")) in _PERCENT_KINDS:
                    limit = value / 100.0 * centre
                else:
                    unit = _get(agreement, "unit") or self.units.get(members[0])
                    q = self.quantities.get(members[0])
                    limit = (
                        float(to_si(value, unit, quantity=q, difference=True)) if unit else value
                    )
            spread = float(mm.max() - mm.min())
            if spread > limit:
                problems.append(f"spread {spread:.4g} exceeds the agreement limit {limit:.4g}")
        k = stats.coverage_factor(math.inf, 0.95)
        for a in range(len(ix)):
            for b in range(a + 1, len(ix)):
                i, j = ix[a], ix[b]
                ud = math.sqrt(max(C[i, i] + C[j, j] - 2.0 * C[i, j], 0.0))
                d = abs(mean[i] - mean[j])
                if d > k * ud:
                    problems.append(
                        f"{members[a]} - {members[b]} = {mean[i] - mean[j]:.4g} exceeds "
                        f"{k:.2f} u = {k * ud:.4g}"
                    )
        if problems:
            msg = f"group '{gid}' members disagree: " + "; ".join(problems)
            notes.append(msg)
            warnings.warn(
                f"Redundant instruments of {msg}. Check them before using the group mean.",
                DataQualityWarning,
                stacklevel=3,
            )

    # ----------------------------------------------------------------- quality
    def report_quality(self) -> pd.DataFrame:
        """Per-tag sample counts and gaps.

        Returns
        -------
        DataFrame
            Indexed by tag: ``samples`` (rows in the run), ``valid``, ``masked``,
            ``duplicates`` (exclusions whose reason starts with "duplicate"),
            ``gaps`` (intervals between consecutive valid samples longer than 1.5
            times the run's median sampling interval; common practice, no source),
            ``longest_gap_s`` [s], ``reasons`` (exclusion reasons with counts).
        """
        idx = self.data.index
        valid = self.data.notna()
        dt = idx.to_series().diff().median() if len(idx) > 1 else pd.Timedelta(0)
        tsec = (
            np.asarray((idx - idx[0]) / pd.Timedelta(seconds=1), dtype=float)
            if len(idx)
            else np.zeros(0)
        )
        ex = self.exclusions
        if len(idx):
            # exclusions may cover the whole run; count those inside this run's span
            t_ex = pd.to_datetime(ex["time"], utc=True)
            lo, hi = idx[0], idx[-1]
            ex = ex[(t_ex >= lo) & (t_ex <= hi)]
        rows = []
        for tg in self.data.columns:
            tv = tsec[valid[tg].to_numpy()]
            gaps = np.diff(tv)
            limit = 1.5 * dt / pd.Timedelta(seconds=1) if dt is not pd.NaT else np.inf
            big = gaps[gaps > limit] if gaps.size else gaps
            exs = ex[ex["tag"] == tg]
            reasons = exs["reason"].value_counts()
            rows.append(
                {
                    "samples": len(idx),
                    "valid": int(tv.size),
                    "masked": int(self.mask[tg].sum()),
                    "duplicates": int(
                        exs["reason"].astype(str).str.lower().str.startswith("duplicate").sum()
                    ),
                    "gaps": int(big.size),
                    "longest_gap_s": float(big.max()) if big.size else 0.0,
                    "reasons": "; ".join(f"{r}: {c}" for r, c in reasons.items()),
                }
            )
        return pd.DataFrame(rows, index=pd.Index(list(self.data.columns), name="tag"))


def _member_text(run, tag: str, value: float) -> str:
    """A group member's mean in its logged unit (no e-notation), for the notes."""
    from perftest.display import convert, fmt_number, unit_label

    shown, unit = convert(value, run.units.get(tag), quantity=run.quantities.get(tag) or None)
    return f"{tag} = {fmt_number(float(shown), 6)} {unit_label(unit)}".rstrip()
