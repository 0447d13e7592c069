"""A logged test run: time-indexed SI data with its quality mask and audit trail.

:class:`Run` is what the importers build and what scripts slice: pick a window
(:meth:`Run.window`, :meth:`Run.steadiest_window`), judge it
(:meth:`Run.stability`), screen outliers (:meth:`Run.screen_outliers`) and
average it to :class:`~perftest.run.measurements.Measurements` (:meth:`Run.average`).
Every operation returns a new Run; the raw data, every exclusion and every step
taken stay with it.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, MutableMapping
from types import MappingProxyType

import numpy as np
import pandas as pd

from perftest.defaults import OUTLIER_ALPHA, OUTLIER_WINDOW
from perftest.errors import InputError
from perftest.run import averaging, outliers, quality, stability, steady, trend, windows
from perftest.run.common import CHECK_BYTES as _CHECK_BYTES
from perftest.run.common import EXCLUSION_COLUMNS
from perftest.run.common import column_list as _column_list
from perftest.run.common import empty_exclusions as _empty_exclusions
from perftest.run.common import field as _get
from perftest.run.common import fmt_time as _fmt_time
from perftest.run.measurements import Measurements

__all__ = ["Run", "EXCLUSION_COLUMNS"]


def _doc(func):
    """Give a Run method the docstring of the function it calls, without its ``run`` argument."""

    def wrap(method):
        doc = func.__doc__ or ""
        method.__doc__ = doc.replace(
            "    run : Run\n        The run (or window) to work on.\n", "", 1
        )
        return method

    return wrap


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
        return tuple(_column_list(self.data.columns))

    def _check_tags(self, tags, func: str) -> list[str]:
        if tags is None:
            return _column_list(self.data.columns)
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

    # ----------------------------------------------------------------- windows
    @_doc(windows.window)
    def window(self, start=None, end=None, *, min_coverage=None) -> Run:
        return windows.window(self, start, end, min_coverage=min_coverage)

    @_doc(steady.steadiest_window)
    def steadiest_window(
        self, length, *, step=None, tags=None, limits=None, min_coverage=None
    ) -> Run:
        return steady.steadiest_window(
            self, length, step=step, tags=tags, limits=limits, min_coverage=min_coverage
        )

    @_doc(windows.coverage)
    def coverage(self, tags=None, *, interval=None) -> pd.Series:
        return windows.coverage(self, tags, interval=interval)

    @_doc(trend.trend_test)
    def trend(self, tags=None, *, alpha=None, warn: bool = True) -> pd.DataFrame:
        return trend.trend_test(self, tags, alpha=alpha, warn=warn)

    # ----------------------------------------------------------------- stability
    @_doc(stability.stability)
    def stability(self, limits=None, *, tags=None, warn: bool = True) -> pd.DataFrame:
        return stability.stability(self, limits, tags=tags, warn=warn)

    # ----------------------------------------------------------------- outliers
    @_doc(outliers.screen_outliers)
    def screen_outliers(
        self, alpha: float = OUTLIER_ALPHA, tags=None, *, window: int | None = OUTLIER_WINDOW
    ) -> Run:
        return outliers.screen_outliers(self, alpha, tags, window=window)

    # ----------------------------------------------------------------- averaging
    @_doc(averaging.average)
    def average(
        self,
        *,
        autocorrelation: bool = True,
        tags=None,
        keep_members: bool = False,
        min_coverage=None,
        trend: bool = True,
    ) -> Measurements:
        return averaging.average(
            self,
            autocorrelation=autocorrelation,
            tags=tags,
            keep_members=keep_members,
            min_coverage=min_coverage,
            trend=trend,
        )

    # ----------------------------------------------------------------- quality
    @_doc(quality.report_quality)
    def report_quality(self) -> pd.DataFrame:
        return quality.report_quality(self)
