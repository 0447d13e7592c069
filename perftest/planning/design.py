"""The design point and the planned measurements of a pre-test uncertainty plan.

:func:`read_design` reads the plant file's ``[design]`` table (docs/plant-file.md);
:func:`planned_measurements` turns it, with the instrument list of ``[tags]``, into
the :class:`~perftest.run.measurements.Measurements` the planned test should give.

Per tag, the systematic standard uncertainty is the stated one evaluated at the
design value (``TagSpec.systematic_standard_uncertainty``).  The random part is
the standard deviation of the mean of the samples logged during the test,

.. math:: u_r = \\frac{s}{\\sqrt{n_{eff}}},\\qquad
          n_{eff} = \\frac{n}{1 + 2\\sum_{k=1}^{n-1}(1 - k/n)\\rho^k},\\qquad
          \\rho = e^{-\\Delta t/\\tau}

with :math:`s` the expected scatter of single samples (``scatter``), :math:`n`
samples at the interval :math:`\\Delta t` over the duration and :math:`\\tau` the
noise correlation time (AR(1) noise; :math:`\\tau = 0`: independent samples) [1]_.
Groups of redundant instruments are averaged as :meth:`perftest.Run.average`
does (plain mean, random and systematic parts propagated separately), and a
calibration lot shared by several tags is one systematic source.

References
----------
.. [1] G. E. P. Box, G. M. Jenkins and G. C. Reinsel, *Time Series Analysis*,
   4th ed., Wiley, 2008, Sect. 3.2 (variance of the mean of an AR(1) process;
   from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import InputError, PerftestError

__all__ = ["DesignPoint", "read_design", "effective_samples", "planned_measurements"]

#: Stated defaults when neither the call nor ``[design]`` gives them.
DEFAULT_DURATION = 7200.0  # s: two hours, a usual acceptance-test run (common practice)
DEFAULT_INTERVAL = 60.0  # s: one sample a minute

_DESIGN_KEYS = ("duration", "interval", "tags", "allowed")
_DESIGN_TAG_KEYS = ("value", "scatter", "interval", "correlation_time")


# --------------------------------------------------------------------------- design point


@dataclass(frozen=True)
class DesignPoint:
    """The ``[design]`` table: design values and planned logging, in SI.

    Attributes
    ----------
    values : dict[str, float]
        Design value per tag [SI].
    scatter : dict[str, float]
        Standard deviation of single samples about the mean in a steady test [SI].
    interval : dict[str, float]
        Sampling interval per tag [s].
    correlation_time : dict[str, float]
        Correlation time of the sample noise per tag [s] (0: independent samples).
    duration : float
        Planned test duration [s].
    allowed : dict[str, tuple]
        Per result, the expanded uncertainty the contract allows:
        ``(value, "percent")`` (of the result) or ``(value [SI], "absolute")``.
    notes : tuple of str
        Assumptions taken (defaults used).
    """

    values: dict
    scatter: dict
    interval: dict
    correlation_time: dict
    duration: float
    allowed: dict = field(default_factory=dict)
    notes: tuple = ()


def _seconds(value, what: str, fail) -> float:
    """A duration written as text (``"2h"``, ``"5s"``) or a number of seconds."""
    try:
        if isinstance(value, str):
            s = pd.Timedelta(value).total_seconds()
        elif isinstance(value, bool):
            raise ValueError
        else:
            s = float(value)
    except (TypeError, ValueError):
        raise fail(
            f'{what} must be a duration such as "2h", "1min", "5s" or a number of '
            f"seconds. Got {value!r}."
        ) from None
    if not (math.isfinite(s) and s >= 0):
        raise fail(f"{what} must be a non-negative duration. Got {value!r}.")
    return float(s)


def _plant_fail(plant, *keys):
    def fail(message):
        err = getattr(plant, "error", None)
        if callable(err):
            return err(message, *keys)
        return PerftestError(message)

    return fail


def _atmosphere(plant, raw_tags: Mapping) -> float | None:
    """Absolute atmospheric pressure [Pa] for gauge tags: the barometer's design value."""
    from perftest.units import to_si

    site = plant.site
    baro = site.barometer_tag
    if baro and baro in raw_tags and baro in plant.tags:
        entry = raw_tags[baro]
        v = entry.get("value") if isinstance(entry, Mapping) else None
        if isinstance(v, int | float) and not isinstance(v, bool):
            try:
                return float(to_si(float(v), plant.tags[baro].unit, quantity="pressure"))
            except PerftestError:
                pass
    return site.atmospheric_pressure


def read_design(plant, *, duration=None, interval=None) -> DesignPoint:
    """Read and check the plant file's ``[design]`` table.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
    duration, interval : str or float, optional
        Planned test duration and default sampling interval (``"2h"``, ``"1min"``
        or seconds), overriding ``[design] duration`` / ``interval``.  Without
        either, 2 h and 1 min are assumed and named in ``notes``.

    Returns
    -------
    DesignPoint

    Raises
    ------
    PlantFileError
        Naming the key and line: no ``[design]`` table, a tag without a design
        value, an unknown tag or key, a value that is not a number.
    InputError
        When ``duration`` or ``interval`` given here is not a duration.
    """
    from perftest.units import to_si

    raw = plant.sections.get("design")
    if not isinstance(raw, Mapping) or not raw:
        raise _plant_fail(plant, "design")(
            "pre-test planning needs a [design] table with the design value of every tag "
            '(e.g. [design.tags] "FT-101" = { value = 98.5 }); see docs/plant-file.md.'
        )
    for k in raw:
        if k not in _DESIGN_KEYS:
            raise _plant_fail(plant, "design", k)(
                f"unknown key {k!r} in [design]. Known keys: {', '.join(_DESIGN_KEYS)}."
            )
    notes = []

    def arg_fail(name):
        def fail(message):
            return InputError(f"The '{name}' parameter of plan: {message}", parameter=name)

        return fail

    def seconds(given, key, default, note):
        """The argument if given, else the [design] key, else the default (noted)."""
        if given is not None:
            return _seconds(given, f"the {key}", arg_fail(key))
        if key in raw:
            return _seconds(raw[key], f"'{key}'", _plant_fail(plant, "design", key))
        notes.append(note)
        return default

    dur = seconds(duration, "duration", DEFAULT_DURATION,
                  "Test duration not stated in [design]: 2 h assumed.")  # fmt: skip
    dt0 = seconds(interval, "interval", DEFAULT_INTERVAL,
                  "Sampling interval not stated in [design]: 1 min assumed.")  # fmt: skip
    if not dur > 0 or not dt0 > 0:
        raise InputError(
            f"The planned duration and interval must be positive. Got {dur} s and {dt0} s.",
            parameter="duration" if not dur > 0 else "interval",
        )

    tags_raw = raw.get("tags", {})
    if not isinstance(tags_raw, Mapping):
        raise _plant_fail(plant, "design", "tags")(
            '[design.tags] must be a table: "<tag>" = { value = ..., scatter = ... }.'
        )
    for tid in tags_raw:
        if tid not in plant.tags:
            raise _plant_fail(plant, "design", "tags", tid)(
                f"tag {tid!r} under [design.tags] is not a tag of the plant ([tags])."
            )
    missing = [t for t in plant.tags if t not in tags_raw]
    if missing:
        raise _plant_fail(plant, "design", "tags")(
            f"no design value for tag(s) {', '.join(missing)}; every planned instrument "
            'needs one: "<tag>" = { value = ... } in the tag\'s unit.'
        )
    atm = _atmosphere(plant, tags_raw)
    values, scatter, dts, taus = {}, {}, {}, {}
    for tid, spec in plant.tags.items():
        entry = tags_raw[tid]
        keys = ("design", "tags", tid)
        if not isinstance(entry, Mapping):
            entry = {"value": entry}
        for k in entry:
            if k not in _DESIGN_TAG_KEYS:
                raise _plant_fail(plant, *keys, k)(
                    f"unknown key {k!r}. Known keys: {', '.join(_DESIGN_TAG_KEYS)}."
                )
        for k in ("value", "scatter"):
            v = entry.get(k, 0.0 if k == "scatter" else None)
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                raise _plant_fail(plant, *keys, k)(
                    f"'{k}' of tag {tid!r} must be a finite number in the tag's unit "
                    f"({spec.unit}). Got {v!r}."
                )
        if entry.get("scatter", 0.0) < 0:
            raise _plant_fail(plant, *keys, "scatter")(
                f"'scatter' of tag {tid!r} must not be negative. Got {entry['scatter']!r}."
            )
        if spec.unit is None:
            raise _plant_fail(plant, "tags", tid)(
                f"tag {tid!r} has no unit in the plant file, so its design value cannot be "
                "converted; give the tag a unit."
            )
        try:
            values[tid] = float(
                to_si(
                    float(entry["value"]),
                    spec.unit,
                    quantity=spec.quantity,
                    atmospheric_pressure=atm,
                    density=spec.density,
                )
            )
            scatter[tid] = float(
                to_si(
                    float(entry.get("scatter", 0.0)),
                    spec.unit,
                    quantity=spec.quantity,
                    atmospheric_pressure=atm,
                    density=spec.density,
                    difference=True,
                )
            )
        except PerftestError as exc:
            raise _plant_fail(plant, *keys, "value")(f"cannot convert: {exc}") from None
        dts[tid] = (
            _seconds(entry["interval"], "'interval'", _plant_fail(plant, *keys, "interval"))
            if "interval" in entry
            else dt0
        )
        if not dts[tid] > 0:
            raise _plant_fail(plant, *keys, "interval")("'interval' must be positive.")
        taus[tid] = (
            _seconds(
                entry["correlation_time"],
                "'correlation_time'",
                _plant_fail(plant, *keys, "correlation_time"),
            )
            if "correlation_time" in entry
            else 0.0
        )
    if interval is not None:
        dts = {t: dt0 for t in dts}
    allowed = _allowed(plant, raw.get("allowed", {}))
    if not any(scatter.values()):
        notes.append(
            "No 'scatter' stated under [design.tags]: random uncertainty taken as 0, "
            "the prediction covers the systematic part only."
        )
    return DesignPoint(values, scatter, dts, taus, dur, allowed, tuple(notes))


def _allowed(plant, raw) -> dict:
    """``[design.allowed]``: result = { value, kind = "percent" } or { value, unit }."""
    from perftest.units import to_si

    if not isinstance(raw, Mapping):
        raise _plant_fail(plant, "design", "allowed")(
            '[design.allowed] must be a table: <result> = { value = 1.0, kind = "percent" }.'
        )
    out = {}
    for name, entry in raw.items():
        fail = _plant_fail(plant, "design", "allowed", name)
        if not isinstance(entry, Mapping) or not set(entry) <= {"value", "kind", "unit"}:
            raise fail(
                f'{name} must be {{ value = 1.0, kind = "percent" }} (percent of the '
                f'result) or {{ value = 70, unit = "kJ/kWh" }}. Got {entry!r}.'
            )
        v = entry.get("value")
        if isinstance(v, bool) or not isinstance(v, int | float) or not (v > 0 and v < math.inf):
            raise fail(f"'value' must be a positive number. Got {v!r}.")
        kind = entry.get("kind", "percent" if "unit" not in entry else "absolute")
        if kind == "percent" and "unit" not in entry:
            out[name] = (float(v), "percent")
        elif kind == "absolute" and isinstance(entry.get("unit"), str):
            try:
                out[name] = (float(to_si(float(v), entry["unit"], difference=True)), "absolute")
            except PerftestError as exc:
                raise fail(f"cannot convert: {exc}") from None
        else:
            raise fail(
                'give kind = "percent" without a unit, or a unit (kind = "absolute"). '
                f"Got kind {kind!r}, unit {entry.get('unit')!r}."
            )
    return out


def effective_samples(duration: float, interval: float, correlation_time: float = 0.0):
    """Number of samples and effective number of independent samples of a mean.

    Parameters
    ----------
    duration : float [s]
    interval : float [s]
    correlation_time : float [s]
        AR(1) correlation time of the sample noise; 0 for independent samples.

    Returns
    -------
    (int, float)
        :math:`n = \\lfloor T/\\Delta t \\rfloor` (at least 1) and :math:`n_{eff}`
        (module notes).

    Examples
    --------
    >>> effective_samples(3600.0, 60.0)
    (60, 60.0)
    >>> n, ne = effective_samples(3600.0, 60.0, 60.0)
    >>> n, round(ne, 2)
    (60, 28.13)
    """
    n = max(int(math.floor(duration / interval + 1e-9)), 1)
    if correlation_time <= 0 or n == 1:
        return n, float(n)
    rho = math.exp(-interval / correlation_time)
    k = np.arange(1, n)
    factor = 1.0 + 2.0 * float(np.sum((1.0 - k / n) * rho**k))
    return n, float(n / factor)


# --------------------------------------------------------------------------- measurements


@dataclass(frozen=True, eq=False)
class _Planned:
    measurements: object
    sources: pd.DataFrame  # label, instrument, part
    B: np.ndarray  # entries x sources
    instruments: pd.DataFrame


def _build(plant, design: DesignPoint, factors: Mapping | None = None) -> _Planned:
    from perftest.run.measurements import Measurements

    factors = dict(factors or {})
    tags = list(plant.tags)
    atm = plant.site.atmospheric_pressure
    baro = plant.site.barometer_tag
    if baro and baro in design.values:
        atm = design.values[baro]
    rows, u_s, u_r = [], {}, {}
    for t in tags:
        spec = plant.tags[t]
        us = 0.0
        if spec.uncertainty is not None:
            us = float(
                spec.systematic_standard_uncertainty(
                    design.values[t], atmospheric_pressure=atm, unit=spec.unit
                )
            )
        us *= float(factors.get(t, 1.0))
        n, neff = effective_samples(design.duration, design.interval[t], design.correlation_time[t])
        ur = design.scatter[t] / math.sqrt(neff)
        u_s[t], u_r[t] = us, ur
        rows.append(
            dict(
                tag=t,
                quantity=spec.quantity,
                value=design.values[t],
                u_systematic=us,
                scatter=design.scatter[t],
                n_samples=n,
                n_effective=neff,
                u_random=ur,
                shared_calibration=spec.shared_calibration,
            )
        )
    instruments = pd.DataFrame(rows).set_index("tag")

    # entries: tags not in a group, then the groups (members replaced by the group)
    member_of = {}
    for gid, g in plant.groups.items():
        for m in g.tags:
            member_of[m] = gid
    entries = [t for t in tags if t not in member_of] + list(plant.groups)
    pos = {e: i for i, e in enumerate(entries)}
    L = np.zeros((len(entries), len(tags)))
    for j, t in enumerate(tags):
        if t in member_of:
            g = plant.groups[member_of[t]]
            L[pos[g.id], j] = 1.0 / len(g.tags)
        else:
            L[pos[t], j] = 1.0
    cols, labels = [], []
    lots: dict = {}
    for j, t in enumerate(tags):
        if u_r[t] > 0:
            cols.append(L[:, j] * u_r[t])
            labels.append((t, t, "random"))
        lot = plant.tags[t].shared_calibration
        if lot:
            lots.setdefault(lot, np.zeros(len(entries)))
            lots[lot] = lots[lot] + L[:, j] * u_s[t]
        elif u_s[t] > 0:
            cols.append(L[:, j] * u_s[t])
            labels.append((t, t, "systematic"))
    for lot, vec in lots.items():
        members = [t for t in tags if plant.tags[t].shared_calibration == lot]
        cols.append(vec)
        labels.append((f"{lot} ({', '.join(members)})", lot, "systematic"))
    B = np.column_stack(cols) if cols else np.zeros((len(entries), 0))
    is_random = np.array([p == "random" for _, _, p in labels], dtype=bool)
    Br, Bs = B[:, is_random], B[:, ~is_random]
    cov_r, cov_s = Br @ Br.T, Bs @ Bs.T
    value = L @ np.array([design.values[t] for t in tags])

    def quantity(e):
        return plant.quantity_of(e)

    def unit(e):
        return plant.tags[e].unit if e in plant.tags else plant.tags[plant.groups[e].tags[0]].unit

    n_samples = [
        int(instruments.loc[e, "n_samples"])
        if e in plant.tags
        else int(min(instruments.loc[m, "n_samples"] for m in plant.groups[e].tags))
        for e in entries
    ]
    m = Measurements(
        tags=tuple(entries),
        quantities=tuple(quantity(e) for e in entries),
        units=tuple(unit(e) or "" for e in entries),
        value=value,
        u_random=np.sqrt(np.diag(cov_r)),
        u_systematic=np.sqrt(np.diag(cov_s)),
        dof=np.full(len(entries), math.inf),
        n_samples=np.array(n_samples, dtype=int),
        n_excluded=np.zeros(len(entries), dtype=int),
        cov=cov_r + cov_s,
        notes=design.notes,
    )
    sources = pd.DataFrame(labels, columns=["label", "instrument", "part"])
    return _Planned(m, sources, B, instruments)


def planned_measurements(plant, design: DesignPoint | None = None, *, factors=None):
    """The measurements the planned test is expected to give, at the design point.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
    design : DesignPoint, optional
        Default :func:`read_design` of the plant.
    factors : mapping of tag -> float, optional
        Multiply the systematic uncertainty of these tags (what-if).

    Returns
    -------
    perftest.run.measurements.Measurements
        Entries as :meth:`perftest.Run.average` gives them (group members replaced
        by their group), design values [SI], planned uncertainties and covariance.
    """
    design = design if design is not None else read_design(plant)
    return _build(plant, design, factors).measurements
