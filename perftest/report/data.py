"""Everything a report shows, gathered once into plain tables.

:class:`ReportData` holds only pandas DataFrames, dicts, strings and numbers, so
that every writer (JSON, Markdown, HTML, figures) can be tested with hand-made
tables and never needs the objects of the lower layers.  :func:`collect` builds
it from the real pipeline objects (plant, run, measurements, reconciliation,
performance); any of them may be missing, and the report then says which parts
were not computed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.display import unit_label

__all__ = ["ReportData", "collect", "CAUTION"]

#: Printed at the top of every report (see README "Cautions").
CAUTION = (
    "Results of a performance test can decide contract payments and plant operation. "
    "This report was produced with perftest, which supports, and does not replace, the "
    "applicable test code, local regulations and the judgement of licensed engineers. "
    "Check the plant description, instrument uncertainties, the chosen window and every "
    "flagged instrument before using a result; a passed global test shows that the "
    "instruments agree with each other and with the balances as modelled, not that they "
    "are right."
)

_EMPTY = pd.DataFrame()


@dataclass(frozen=True, eq=False)
class ReportData:
    """Plain-table view of one evaluated test run.

    Attributes
    ----------
    title : str
        Plant name.
    window : dict
        ``{"start", "end", "how"}`` (ISO strings; ``how`` says how it was chosen).
    units : dict[str, str]
        Display unit per tag or group (the unit the instrument logs in).
    atmospheric_pressure : float or None
        [Pa] for showing gauge pressures.
    measurements : DataFrame
        ``Measurements.to_frame()`` (SI).
    stability : DataFrame
        ``Run.stability()`` (SI, indexed by tag).
    exclusions : DataFrame
        Excluded samples: ``time, tag, reason, raw_value, source``.
    reconciliation : DataFrame
        ``PlantReconciliation.to_frame()`` (SI).
    global_test : dict or None
        ``{"chi2", "dof", "p_value", "passed"}``.
    eliminated : list of dict
        Serial-elimination steps: ``tag, z, chi2, dof, p_value``.
    closure : DataFrame
        Unit mass/energy imbalances after reconciliation.
    streams : DataFrame
        Reconciled stream states.
    results : DataFrame
        ``Performance.results`` (SI; index = result name).
    budgets : dict[str, DataFrame]
    guarantees : DataFrame
    corrections : DataFrame
    exergy : DataFrame
    exergy_losses : dict[str, float]
    monte_carlo : DataFrame
    trends : DataFrame
        Time series [SI] of a few tags for the stability figure (whole run).
    log : list of str
        Audit trail (import, window, screening, reconciliation).
    notes : list of str
        Assumptions and warnings.
    missing : list of str
        Pipeline stages not computed, with the reason.
    timings : dict[str, float]
        Seconds per stage.
    alpha : float
        Significance level of the gross-error tests.
    critical_z : float
        Critical value of the measurement test.
    audit : dict
        :meth:`perftest.report.audit.AuditRecord.to_dict` of the evaluation (empty when
        built by hand).
    quantities : dict[str, str]
        Glossary quantity per tag or group.
    densities : dict[str, float]
        [kg/m3] per tag logged as a volume flow of a mass-flow quantity.
    inputs : DataFrame
        ``Performance.inputs`` (SI; index = input name; ``value, u, role``).
    meta : dict[str, str]
        The test's particulars for the report's header, in order (plant, site,
        date, window, samples, what the plant file says of the test).
    campaign : dict
        A test of several runs or load points
        (:func:`perftest.report.campaign.with_campaign`): ``mode``, ``windows`` (each
        with its results and guarantees), ``repeatability``, ``combined``; empty for a
        single window.
    """

    title: str = "perftest report"
    window: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)
    atmospheric_pressure: float | None = None
    measurements: pd.DataFrame = field(default_factory=pd.DataFrame)
    stability: pd.DataFrame = field(default_factory=pd.DataFrame)
    exclusions: pd.DataFrame = field(default_factory=pd.DataFrame)
    reconciliation: pd.DataFrame = field(default_factory=pd.DataFrame)
    global_test: dict | None = None
    eliminated: list = field(default_factory=list)
    closure: pd.DataFrame = field(default_factory=pd.DataFrame)
    streams: pd.DataFrame = field(default_factory=pd.DataFrame)
    results: pd.DataFrame = field(default_factory=pd.DataFrame)
    budgets: dict = field(default_factory=dict)
    guarantees: pd.DataFrame = field(default_factory=pd.DataFrame)
    corrections: pd.DataFrame = field(default_factory=pd.DataFrame)
    exergy: pd.DataFrame = field(default_factory=pd.DataFrame)
    exergy_losses: dict = field(default_factory=dict)
    monte_carlo: pd.DataFrame = field(default_factory=pd.DataFrame)
    trends: pd.DataFrame = field(default_factory=pd.DataFrame)
    log: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    missing: list = field(default_factory=list)
    timings: dict = field(default_factory=dict)
    alpha: float = 0.05
    critical_z: float = 1.959963984540054
    version: str = ""
    audit: dict = field(default_factory=dict)
    quantities: dict = field(default_factory=dict)
    densities: dict = field(default_factory=dict)
    inputs: pd.DataFrame = field(default_factory=pd.DataFrame)
    meta: dict = field(default_factory=dict)
    campaign: dict = field(default_factory=dict)


def _frame(obj, attr: str | None = None) -> pd.DataFrame:
    if obj is None:
        return _EMPTY.copy()
    value = getattr(obj, attr) if attr else obj
    if callable(value):
        # the report's tables are SI inside and converted for display at the end
        value = value(units="si") if attr == "to_frame" else value()
    return value.copy() if isinstance(value, pd.DataFrame) else _EMPTY.copy()


def _iso(ts) -> str | None:
    if ts is None:
        return None
    try:
        return pd.Timestamp(ts).isoformat()
    except (TypeError, ValueError):
        return str(ts)


def _display_units(plant) -> dict:
    units: dict = {}
    if plant is None:
        return units
    for tid, spec in plant.tags.items():
        units[tid] = spec.unit
    for gid, group in getattr(plant, "groups", {}).items():
        first = group.tags[0] if group.tags else None
        if first in units:
            units[gid] = units[first]
    return units


def _tag_facts(plant) -> tuple[dict, dict]:
    """Glossary quantity and density [kg/m3] per tag (groups take their first member's)."""
    quantities: dict = {}
    densities: dict = {}
    if plant is None:
        return quantities, densities
    for tid, spec in plant.tags.items():
        quantities[tid] = getattr(spec, "quantity", "") or ""
        if getattr(spec, "density", None) is not None:
            densities[tid] = float(spec.density)
    for gid, group in getattr(plant, "groups", {}).items():
        first = group.tags[0] if group.tags else None
        if first in quantities:
            quantities[gid] = quantities[first]
        if first in densities:
            densities[gid] = densities[first]
    return quantities, densities


def _duration_text(start, end) -> str:
    try:
        d = pd.Timestamp(end) - pd.Timestamp(start)
    except (TypeError, ValueError):
        return ""
    minutes = int(round(d.total_seconds() / 60.0))
    h, m = divmod(minutes, 60)
    return f"{h} h {m:02d} min" if h else f"{m} min"


def _meta(plant, window: dict, measurements, performance, reconciliation, paths) -> dict:
    """The header of the report: what was tested, when, and on what terms."""
    meta: dict = {}
    if plant is not None:
        meta["Plant"] = str(getattr(plant, "name", "") or "")
        path = getattr(plant, "path", None)
        if path:
            meta["Plant file"] = str(getattr(path, "name", path))
        site = getattr(plant, "site", None)
        tz = getattr(site, "timezone", None)
        if tz:
            meta["Time zone"] = str(tz)
    start, end = window.get("start"), window.get("end")
    if start:
        meta["Test date"] = str(pd.Timestamp(start).date())
        meta["Window"] = (
            f"{pd.Timestamp(start):%Y-%m-%d %H:%M} to {pd.Timestamp(end):%Y-%m-%d %H:%M}"
            f" ({_duration_text(start, end)})"
        )
    if window.get("how"):
        meta["Window chosen"] = str(window["how"])
    if measurements is not None and len(getattr(measurements, "n_samples", ())):
        n = np.asarray(measurements.n_samples)
        meta["Samples per tag"] = (
            f"{int(n.min())} to {int(n.max())}" if n.min() != n.max() else f"{int(n.min())}"
        ) + f" ({len(n)} tags or groups averaged)"
    if plant is not None:
        sections = getattr(plant, "sections", {}) or {}
        perf = sections.get("performance") or {}
        if perf.get("kind"):
            meta["Plant kind"] = str(perf["kind"])
        basis = perf.get("basis")
        if basis:
            meta["Heating-value basis"] = str(basis).upper()
        acc = sections.get("acceptance") or {}
        if acc.get("rule"):
            meta["Verdict rule (plant file)"] = str(acc["rule"])
        design = sections.get("design") or {}
        if design.get("duration") or design.get("interval"):
            meta["Planned test (plant file)"] = ", ".join(
                x
                for x in (
                    f"duration {design['duration']}" if design.get("duration") else "",
                    f"logging every {design['interval']}" if design.get("interval") else "",
                )
                if x
            )
        guarantees = sections.get("guarantees") or []
        if guarantees:
            meta["Guarantees (plant file)"] = "; ".join(
                f"{g.get('quantity')} {str(g.get('direction', '')).replace('_', ' ')} "
                f"{g.get('value')} {unit_label(g.get('unit', ''))}".strip()
                for g in guarantees
                if isinstance(g, dict)
            )
        refs = sections.get("corrections") or []
        ref_txt = []
        for c in refs:
            if isinstance(c, dict) and isinstance(c.get("reference"), dict):
                r = c["reference"]
                unit = unit_label(r.get("unit", ""))
                txt = f"{c.get('variable')} = {r.get('value')} {unit}".strip()
                if txt not in ref_txt:
                    ref_txt.append(txt)
        if ref_txt:
            meta["Reference conditions (plant file)"] = "; ".join(ref_txt)
    if reconciliation is not None:
        T0, p0 = getattr(reconciliation, "dead_state", (None, None))
        if T0 is not None:
            meta["Dead state"] = f"{float(T0) - 273.15:.1f} °C, {float(p0) / 1e5:.3f} bar" + (
                f" ({reconciliation.dead_state_source})"
                if getattr(reconciliation, "dead_state_source", "")
                else ""
            )
    if paths:
        meta["Run files"] = ", ".join(str(p) for p in paths)
    return meta


def _atmospheric(plant, measurements, window_run=None) -> float | None:
    if plant is None:
        return None
    site = plant.site
    if site.atmospheric_pressure is not None:
        return float(site.atmospheric_pressure)
    tag = site.barometer_tag
    if tag and measurements is not None and tag in measurements.tags:
        return float(measurements.value[measurements.index(tag)])
    if tag and window_run is not None and tag in window_run.data.columns:
        mean = float(window_run.data[tag].mean())  # the barometer over the window
        return mean if math.isfinite(mean) else None
    return None


_TREND_QUANTITIES = ("power", "mass_flow", "temperature", "pressure")


def _trend_tags(plant, run, n: int = 4) -> list:
    """A few tags that tell whether the unit was steady: power, a flow, steam T, p."""
    if run is None:
        return []
    cols = list(run.data.columns)
    picked: list = []
    quantities = getattr(run, "quantities", None) or {}
    for q in _TREND_QUANTITIES:
        for c in cols:
            if c not in picked and quantities.get(c) == q:
                picked.append(c)
                break
    for c in cols:
        if len(picked) >= n:
            break
        if c not in picked:
            picked.append(c)
    return picked[:n]


def collect(
    plant=None,
    run=None,
    window_run=None,
    measurements=None,
    reconciliation=None,
    performance=None,
    *,
    how: str = "",
    missing=(),
    timings=None,
    notes=(),
    trend_tags=None,
    options=None,
    paths=(),
) -> ReportData:
    """Gather the tables of one evaluation into a :class:`ReportData`.

    Parameters
    ----------
    plant : Plant, optional
    run : Run, optional
        The whole run (for the trends).
    window_run : Run, optional
        The window that was averaged, after outlier screening (its ``stability()``,
        ``exclusions`` and ``log`` go into the report).
    measurements : Measurements, optional
    reconciliation : PlantReconciliation, optional
    performance : Performance, optional
    how : str
        How the window was chosen (shown in the report).
    missing : sequence of str
        Stages that could not run, with the reason.
    timings : dict, optional
        Seconds per stage.
    notes : sequence of str
        Extra notes for the report.
    trend_tags : sequence of str, optional
        Tags for the stability figure (default: every tag whose stability was
        judged in the window; without a window, a power, a flow, a temperature and a
        pressure tag).
    options : mapping, optional
        Options of the evaluation, recorded in the audit record.
    paths : sequence of path
        Input files to fingerprint besides the plant file and the run's own files.

    Returns
    -------
    ReportData
    """
    import warnings

    from perftest import __version__

    title = getattr(plant, "name", None) or "perftest report"
    window = {"start": None, "end": None, "how": how}
    if measurements is not None:
        window["start"], window["end"] = _iso(measurements.start), _iso(measurements.end)
    if window_run is not None and window["start"] is None and len(window_run.data.index):
        window["start"] = _iso(window_run.data.index[0])
        window["end"] = _iso(window_run.data.index[-1])

    stability = _EMPTY.copy()
    exclusions = _EMPTY.copy()
    log: list = []
    if window_run is not None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            stability = _frame(window_run, "stability")
        exclusions = _frame(window_run, "exclusions")
        log = [str(s) for s in getattr(window_run, "log", [])]
    elif run is not None:
        exclusions = _frame(run, "exclusions")
        log = [str(s) for s in getattr(run, "log", [])]

    trends = _EMPTY.copy()
    if run is not None:
        if trend_tags:
            tags = list(trend_tags)
        elif not stability.empty:
            # every tag whose stability was judged, so the figure shows each band
            tags = [t for t in stability.index if t in run.data.columns]
        else:
            tags = _trend_tags(plant, run)
        tags = [t for t in tags if t in run.data.columns]
        trends = run.data[tags].copy()

    rec_frame = _EMPTY.copy()
    global_test = None
    eliminated: list = []
    closure = _EMPTY.copy()
    streams = _EMPTY.copy()
    alpha = 0.05
    all_notes = list(notes)
    if measurements is not None:
        all_notes += [str(s) for s in getattr(measurements, "notes", ())]
    if reconciliation is not None:
        rec_frame = _frame(reconciliation, "to_frame")
        global_test = dict(reconciliation.global_test)
        eliminated = [
            dict(
                tag=e.tag,
                z=e.z,
                chi2=e.chi2,
                dof=e.dof,
                p_value=e.p_value,
                tied_with=", ".join(getattr(e, "tied_with", ())),
                shared=bool(getattr(e, "shared", False)),
                redundancy_lost=int(getattr(e, "redundancy_lost", 0) or 0),
            )
            for e in getattr(reconciliation, "eliminated", ())
        ]
        closure = _frame(reconciliation, "closure")
        streams = _frame(reconciliation, "streams")
        alpha = float(getattr(reconciliation, "alpha", 0.05))
        all_notes += [str(s) for s in getattr(reconciliation, "notes", ())]

    results = budgets = guarantees = corrections = exergy = mc = None
    losses: dict = {}
    if performance is not None:
        results = performance.results.copy()
        budgets = {k: v.copy() for k, v in performance.budgets.items()}
        guarantees = performance.guarantees.copy()
        corrections = performance.corrections.copy()
        exergy = performance.exergy.copy()
        losses = dict(performance.exergy_losses)
        mc = performance.monte_carlo.copy() if performance.monte_carlo is not None else None
        all_notes += list(performance.notes)

    from statistics import NormalDist

    from perftest.report.audit import build_audit

    audit = build_audit(
        plant, run, window_run, reconciliation, paths=paths, options=options
    ).to_dict()

    quantities, densities = _tag_facts(plant)
    run_paths = [
        f["name"] for f in audit.get("input_files", ()) if f.get("role") == "run" and f.get("name")
    ]
    return ReportData(
        title=title,
        window=window,
        units=_display_units(plant),
        atmospheric_pressure=_atmospheric(plant, measurements, window_run),
        measurements=_frame(measurements, "to_frame"),
        stability=stability,
        exclusions=exclusions,
        reconciliation=rec_frame,
        global_test=global_test,
        eliminated=eliminated,
        closure=closure,
        streams=streams,
        results=results if results is not None else _EMPTY.copy(),
        budgets=budgets or {},
        guarantees=guarantees if guarantees is not None else _EMPTY.copy(),
        corrections=corrections if corrections is not None else _EMPTY.copy(),
        exergy=exergy if exergy is not None else _EMPTY.copy(),
        exergy_losses=losses,
        monte_carlo=mc if mc is not None else _EMPTY.copy(),
        trends=trends,
        log=log,
        notes=all_notes,
        missing=list(missing),
        timings=dict(timings or {}),
        alpha=alpha,
        critical_z=float(NormalDist().inv_cdf(1.0 - alpha / 2.0)),
        version=__version__,
        audit=audit,
        quantities=quantities,
        densities=densities,
        inputs=performance.inputs.copy() if performance is not None else _EMPTY.copy(),
        meta=_meta(plant, window, measurements, performance, reconciliation, run_paths),
    )


def finite_or_none(v):
    """A JSON-safe float: ``None`` for NaN/inf/None, else ``float(v)``."""
    if v is None:
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def as_bool(v) -> bool | None:
    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return None
    return bool(np.asarray(v).item())
