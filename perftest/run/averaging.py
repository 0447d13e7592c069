"""Averaging a run (or window) to :class:`~perftest.run.measurements.Measurements`.

``Run.average`` calls :func:`average`: per-tag means with their random and systematic
uncertainty, groups of redundant instruments, the covariance between entries.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from perftest.defaults import TREND_ALPHA
from perftest.errors import DataError, DataQualityWarning, InputError
from perftest.plant.records import TagSpec
from perftest.run import stats
from perftest.run.common import PERCENT_KINDS, column_list, field, fmt_time
from perftest.run.measurements import Measurements
from perftest.run.trend import _p_text, _trend
from perftest.run.trend import _warn as _warn_trend
from perftest.run.windows import _coverage, check_min_coverage

__all__ = ["average", "check_agreement", "atmospheric_pressure"]


def atmospheric_pressure(run):
    """Mean of the barometer tag in the run, else the site's stated pressure [Pa] (or None)."""
    site = field(run.plant, "site")
    baro = field(site, "barometer_tag")
    if baro and baro in run.data.columns:
        p = run.data[baro].mean()
        if np.isfinite(p):
            return float(p)
    return field(site, "atmospheric_pressure")


def _atmospheric_pressure(run, x: np.ndarray, pos: dict):
    """:func:`atmospheric_pressure` with the barometer's samples taken from ``x`` (one
    column per tag of ``pos``) when it is averaged too."""
    site = field(run.plant, "site")
    baro = field(site, "barometer_tag")
    j = pos.get(baro) if baro else None
    if j is None:
        return atmospheric_pressure(run)
    p = _series_mean(x[:, j])
    if np.isfinite(p):
        return float(p)
    return field(site, "atmospheric_pressure")


def _series_mean(values: np.ndarray):
    """``pd.Series(values).mean()`` of float64 values, in its arithmetic: NaN set to 0,
    summed, over the count of the others (NaN without any)."""
    nan = np.isnan(values)
    if nan.any():
        values = values.copy()
        np.putmask(values, nan, 0.0)
    count = np.float64(nan.size - nan.sum())
    total = values.sum()
    return total / count if count > 0 else np.nan


def average(
    run,
    *,
    autocorrelation: bool = True,
    tags=None,
    keep_members: bool = False,
    min_coverage=None,
    trend: bool = True,
):
    """Average the run (or window) to :class:`~perftest.run.measurements.Measurements`.

    Parameters
    ----------
    run : Run
        The run (or window) to work on.
    autocorrelation : bool, default True
        Use the effective number of samples for the random uncertainty.
    tags : list of str, optional
        Tags to average (default all columns).  Groups of the plant whose
        members are all present are added.
    keep_members : bool, default False
        Keep the members of redundant groups as entries of their own besides
        the group entry.
    min_coverage : float, optional
        Smallest share of its expected samples each tag must hold in the window
        (:func:`perftest.run.windows.coverage`; default
        :data:`perftest.defaults.MIN_COVERAGE`, 0.8).
    trend : bool, default True
        Test each tag for a trend inside the window
        (:func:`perftest.run.trend.trend_test`), report its p-value and warn.

    Returns
    -------
    Measurements
        One entry per tag (members of a group replaced by the group id unless
        ``keep_members``), SI values, covariance, notes.

    Raises
    ------
    InputError
        If ``tags`` names a tag the run does not hold, or a tag twice.
    DataError
        If a tag has no valid sample in the window, or covers less than
        ``min_coverage`` of it (names tag, window and coverage).

    Warns
    -----
    DataQualityWarning
        When a group's members disagree, or a tag has a single valid sample.
    StabilityWarning
        When tags trend inside the window beyond their scatter.

    Notes
    -----
    Per tag, from the :math:`m` valid samples:

    - value: :math:`\\bar x`; random part
      :math:`u_r = s/\\sqrt{n_{eff}}`
      (:func:`perftest.run.stats.random_uncertainty_of_mean`) with
      :math:`\\nu_r = m/(2M+1)` in [1, m - 1], M the lag window the estimate used
      (:func:`perftest.run.stats.mean_dof`; m - 1 without ``autocorrelation``);
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
    tags = run._check_tags(tags, "average")
    if len(set(tags)) != len(tags):
        dup = next(tg for j, tg in enumerate(tags) if tg in tags[:j])
        raise InputError(
            f"The 'tags' parameter of Run.average names tag '{dup}' more than once. "
            "Give each tag once.",
            parameter="tags",
            tag=dup,
        )
    data = run.data
    every = column_list(data.columns) == tags
    if every:
        # no column selection: a view when it can be, its samples in the order a
        # selection of every column holds them (so that every sum below adds in
        # the same order)
        x = data.to_numpy(dtype=float)
    else:
        x = data[tags].to_numpy(dtype=float)
    valid = np.isfinite(x)
    n_valid = valid.sum(axis=0)
    t0 = run.start if run.start is not None else (data.index[0] if len(x) else None)
    t1 = run.end if run.end is not None else (data.index[-1] if len(x) else None)
    empty = [tags[j] for j in np.flatnonzero(n_valid == 0)]
    if empty:
        raise DataError(
            f"Tag '{empty[0]}' has no valid sample in the window {fmt_time(t0)} to "
            f"{fmt_time(t1)}"
            + (f" (nor do {empty[1:]})" if len(empty) > 1 else "")
            + ". Choose another window, fix the source data, or leave the tag out with "
            "average(tags=[...]).",
            tag=empty[0],
        )
    limit = check_min_coverage(min_coverage, "average")
    every_mask = column_list(run.mask.columns) == tags
    masked = run.mask.to_numpy() if every_mask else run.mask[tags].to_numpy()
    cover = _coverage(run, ~masked)
    low = [j for j, c in enumerate(cover) if c < limit]
    if low:
        shown = ", ".join(f"{tags[j]} ({cover[j]:.0%})" for j in low)
        raise DataError(
            f"In the window {fmt_time(t0)} to {fmt_time(t1)}, tag(s) {shown} hold less "
            f"than the minimum coverage {limit:.0%} of the samples expected (valid samples "
            "/ window length over the sampling interval). Choose another window, leave "
            "the tag out with average(tags=[...]), or pass min_coverage= to accept it.",
            tag=tags[low[0]],
        )
    notes: list[str] = []
    trend_p = np.full(len(tags), np.nan)
    if trend:
        # trend_test(run, tags)'s verdicts and warning, without its table
        tt = _trend(run, x, TREND_ALPHA)
        _warn_trend(run, tags, tt, TREND_ALPHA, stacklevel=4)
        trend_p = tt.p
        hit = np.flatnonzero(tt.hit)
        if hit.size:
            notes.append(
                "trend inside the window beyond the scatter for "
                + ", ".join(f"{tags[j]} (p {_p_text(tt.p[j])})" for j in hit)
            )
    _, mean, _, _, u_r, dof_r, V_r, M_r = stats._mean_statistics(x, autocorrelation)
    single = [tags[j] for j in np.flatnonzero(n_valid == 1)]
    if single:
        u_r = np.where(n_valid == 1, 0.0, u_r)
        dof_r = np.where(n_valid == 1, np.inf, dof_r)
        msg = (
            f"only one valid sample in the window for {single}: random uncertainty not "
            "evaluated (taken as 0)"
        )
        notes.append(msg)
        warnings.warn(msg[0].upper() + msg[1:] + ".", DataQualityWarning, stacklevel=3)
    # systematic part
    u_s, lots, unknown = _systematic(run, tags, mean, x)
    if unknown:
        notes.append(
            f"no instrument uncertainty in the plant for {unknown}: systematic uncertainty "
            "taken as 0"
        )
    C_s = np.diag(u_s**2)
    for lot in sorted({lot for lot in lots if lot}):
        ix = [j for j, name in enumerate(lots) if name == lot]
        C_s[np.ix_(ix, ix)] = np.outer(u_s[ix], u_s[ix])
    C_r = np.diag(u_r**2)
    # output entries: tags (minus group members) + groups, as rows of L
    groups = field(run.plant, "groups", {}) or {}
    pos = {tg: j for j, tg in enumerate(tags)}
    grouped: set[str] = set()
    group_ix: dict[str, list[int]] = {}
    for gid, g in groups.items():
        members = list(field(g, "tags", ()) or ())
        if not members:
            continue
        missing = [m for m in members if m not in pos]
        if missing:
            notes.append(f"group '{gid}' not averaged: members {missing} not in the run")
            continue
        ix = [pos[m] for m in members]
        group_ix[gid] = ix
        grouped.update(members)
        _correlate_members(C_r, x, ix, u_r, n_valid, autocorrelation, (V_r, M_r))
        check_agreement(run, gid, g, members, pos, mean, C_r + C_s, notes)
    single_ix = [j for j, tg in enumerate(tags) if keep_members or tg not in grouped]
    out_tags = [tags[j] for j in single_ix] + list(group_ix)
    L = np.zeros((len(out_tags), len(tags)))
    L[np.arange(len(single_ix)), single_ix] = 1.0
    for r, ix in enumerate(group_ix.values(), start=len(single_ix)):
        L[r, ix] = 1.0 / len(ix)
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
        # a group whose members' random parts are correlated: Welch-Satterthwaite
        # needs independent parts, so the group's random part counts as one part
        # with the fewest degrees of freedom of its members (conservative)
        offdiag = C_r - np.diag(np.diag(C_r))
        for r, ix in enumerate(group_ix.values(), start=len(single_ix)):
            on = np.unique(ix)  # (single rows have one entry)
            if on.size > 1 and np.any(offdiag[np.ix_(on, on)] != 0.0):
                nu = float(np.min(dof_r[on]))
                denom[r] = 0.0 if math.isinf(nu) else ur_out[r] ** 4 / nu
        dof = np.where(denom > 0, utot2**2 / denom, np.inf)
    n_samp = ((L > 0) @ n_valid).astype(int)
    n_masked = _excluded_counts(run, tags, masked)
    n_excl = ((L > 0) @ n_masked).astype(int)
    quantities = [run.quantities.get(tags[j], "") for j in single_ix]
    units = [run.units.get(tags[j], "") for j in single_ix]
    for ix in group_ix.values():
        q = {run.quantities.get(tags[j], "") for j in ix}
        u = {run.units.get(tags[j], "") for j in ix}
        quantities.append(q.pop() if len(q) == 1 else "")
        units.append(u.pop() if len(u) == 1 else "")
    for gid in group_ix:
        notes.append(
            f"group '{gid}' averaged from {len(field(groups[gid], 'tags'))} members "
            "("
            + ", ".join(_member_text(run, m, mean[pos[m]]) for m in field(groups[gid], "tags"))
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
        coverage=_per_entry(single_ix, group_ix, cover),
        trend_p=_per_entry(single_ix, group_ix, trend_p),
    )


def check_agreement(run, gid, group, members, pos, mean, C, notes) -> None:
    """Note and warn when the members of group ``gid`` disagree."""
    from perftest.units import to_si

    ix = [pos[m] for m in members]
    mm = mean[ix]
    problems = []
    agreement = field(group, "agreement")
    if agreement is not None:
        centre = abs(float(np.mean(mm)))
        if hasattr(agreement, "limit_si"):  # plant-file StabilityLimit
            limit = float(agreement.limit_si(centre))
        elif isinstance(agreement, int | float):
            limit = float(agreement)  # absolute, SI
        else:
            value = float(field(agreement, "value"))
            if str(field(agreement, "kind", "percent")) in PERCENT_KINDS:
                limit = value / 100.0 * centre
            else:
                unit = field(agreement, "unit") or run.units.get(members[0])
                q = run.quantities.get(members[0])
                limit = float(to_si(value, unit, quantity=q, difference=True)) if unit else value
        spread = float(mm.max() - mm.min())
        if spread > limit:
            problems.append(f"spread {spread:.4g} exceeds the agreement limit {limit:.4g}")
    k = stats._coverage_factor_scalar(math.inf, 0.95)  # (a checked constant: remembered)
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
            stacklevel=4,
        )


def _correlate_members(C_r, x, ix, u_r, n_valid, autocorrelation, known=None) -> None:
    """Put the covariance of the random parts of a group's members' means into ``C_r``.

    Redundant meters of one quantity see the same process wander; the covariance of
    their means comes from the joint record (:func:`perftest.run.stats.mean_covariance`,
    the same estimator as each tag's own u), scaled to the members' ``u_r`` (so the
    diagonal stays as it is).  Without ``autocorrelation``: the lag-0 sample
    correlation over the times both are valid.  Members with fewer than 2 valid
    samples stay uncorrelated.  ``known``: the ``(V, M)`` of every column of ``x`` from
    :func:`perftest.run.stats.mean_statistics`, used for the members when ``x``
    holds each column's samples side by side as the members' copy does (the
    estimate works column by column, so it gives the members' the same digits).
    """
    ok = [j for j in ix if n_valid[j] >= 2 and u_r[j] > 0]
    if len(ok) < 2:
        return
    sub = x[:, ok]
    if autocorrelation:
        if known is not None and known[0] is not None and stats._column_major(x):
            known = (known[0][ok], known[1][ok])
        else:
            known = None
        cv = stats._mean_covariance(sub, known=known)
        d = np.sqrt(np.clip(np.diag(cv), 1e-300, None))
        R = cv / np.outer(d, d)
    else:
        both = np.isfinite(sub).all(axis=1)
        if both.sum() < 3:
            return
        R = np.corrcoef(sub[both], rowvar=False)
        R = np.nan_to_num(R)
    for a, i in enumerate(ok):
        for b, j in enumerate(ok):
            if a != b:
                C_r[i, j] = float(np.clip(R[a, b], -1.0, 1.0)) * u_r[i] * u_r[j]


def _per_entry(single_ix, group_ix, per_tag) -> np.ndarray:
    """A per-tag quantity carried to the output entries (a group: the least of its members).

    ``single_ix``: the tag of each single entry; ``group_ix``: the members of each
    group entry after them.  NaN where no member has a finite value.
    """
    out = np.full(len(single_ix) + len(group_ix), np.nan)
    vals = per_tag[single_ix]
    finite = np.isfinite(vals)
    out[: len(single_ix)][finite] = vals[finite]
    for r, ix in enumerate(group_ix.values(), start=len(single_ix)):
        vals = per_tag[ix]
        vals = vals[np.isfinite(vals)]
        if vals.size:
            out[r] = np.min(vals)
    return out


def _excluded_counts(run, tags, mask: np.ndarray) -> np.ndarray:
    """Masked samples per tag in the window, leaving out those outside the tag's record.

    A tag is empty without an exclusion row before its first and after its last valid
    sample when its file does not reach there (another file's stamps at the edge of
    the aligned time base): those are not excluded samples.  Masked samples with an
    exclusion row, and every masked sample between valid ones, are counted.
    ``mask``: the run's mask of ``tags`` (samples x tags).
    """
    n = mask.sum(axis=0).astype(int)
    if not len(mask):
        return n
    idx = run.data.index
    ex = run.exclusions
    # only a tag masked at an edge of the window, with a valid sample, has edges to check
    edged = np.flatnonzero((mask[0] | mask[-1]) & ~mask.all(axis=0))
    for j in edged:
        tg = tags[j]
        col = mask[:, j]
        ok = np.flatnonzero(~col)
        edge = np.r_[np.arange(ok[0]), np.arange(ok[-1] + 1, col.size)]
        if not edge.size:
            continue
        times = pd.to_datetime(ex.loc[ex["tag"] == tg, "time"], utc=True)
        recorded = idx[edge].isin(pd.DatetimeIndex(times))
        n[j] -= int((~recorded).sum())
    return n


def _systematic(run, tags, mean: np.ndarray, x: np.ndarray):
    """``(u_s, lots, unknown)``: systematic standard uncertainty per tag [SI], its
    calibration lot (None when none) and the tags the plant states none for.

    ``TagSpec.systematic_standard_uncertainty`` of each tag at its mean (``x``: the
    samples, one column per tag, for the barometer's mean).  An
    absolute or percent-of-span uncertainty does not depend on the mean: it is
    remembered per tag description and unit (:func:`_fixed_systematic`).
    """
    tagspecs = field(run.plant, "tags", {}) or {}
    u_s = np.zeros(len(tags))
    lots: list = []
    unknown = []
    atm = _UNSET
    for j, tg in enumerate(tags):
        spec = tagspecs.get(tg)
        if type(spec) is TagSpec:  # noqa: E721 (a subclass may compute otherwise)
            lots.append(spec.shared_calibration)
            if spec.uncertainty is None:
                unknown.append(tg)
                continue
            unit = run.units.get(tg)
            if spec.uncertainty.kind in _FIXED_KINDS and (unit is None or type(unit) is str):
                u_s[j] = _fixed_systematic(spec, unit)
                continue
            func = spec.systematic_standard_uncertainty
        else:
            lots.append(field(spec, "shared_calibration"))
            func = field(spec, "systematic_standard_uncertainty")
            if spec is None or func is None or field(spec, "uncertainty", 0) is None:
                unknown.append(tg)
                continue
            unit = run.units.get(tg)
        if atm is _UNSET:
            atm = _atmospheric_pressure(run, x, {tg: j for j, tg in enumerate(tags)})
        u_s[j] = float(func(float(mean[j]), atmospheric_pressure=atm, unit=unit))
    return u_s, lots, unknown


_UNSET = object()

# uncertainty kinds of a TagSpec that do not depend on the mean reading
_FIXED_KINDS = frozenset(("absolute", "percent_of_span"))

# (TagSpec, unit) -> u [SI], keyed by the identity of the (frozen) TagSpec, which the
# entry holds so that the identity cannot pass to another object
_FIXED: dict = {}
_FIXED_MAX = 4096


def _fixed_systematic(spec, unit) -> float:
    """``spec.systematic_standard_uncertainty(...)`` of a mean-independent kind, remembered.

    A TagSpec is frozen and the unit conversions are fixed, so the answer for one
    TagSpec object and unit never changes; another plant (or a plant read again)
    has other TagSpec objects and gets its own entries.
    """
    key = (id(spec), unit)
    hit = _FIXED.get(key)
    if hit is not None and hit[0] is spec:
        return hit[1]
    u = float(spec.systematic_standard_uncertainty(0.0, unit=unit))
    if len(_FIXED) >= _FIXED_MAX:
        _FIXED.clear()
    _FIXED[key] = (spec, u)
    return u


def _member_text(run, tag: str, value: float) -> str:
    """A group member's mean in its logged unit (no e-notation), for the notes."""
    from perftest.display import convert, fmt_number, unit_label

    shown, unit = convert(value, run.units.get(tag), quantity=run.quantities.get(tag) or None)
    return f"{tag} = {fmt_number(float(shown), 6)} {unit_label(unit)}".rstrip()
