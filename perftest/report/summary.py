"""``summary.json``: the machine-readable result of a test run.

The top-level keys ``global_test``, ``measurements``, ``results`` and
``guarantees`` and the keys inside them are a contract with outside checks
(see the design notes); more keys may be added, none renamed.  Values are SI
(temperatures in K, efficiencies as fractions, heat rate in J/J), each result
states its unit, and every NaN becomes ``null`` so that any JSON reader accepts
the file.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from perftest.report.data import CAUTION, ReportData, as_bool, finite_or_none

__all__ = ["summary_json", "write_summary", "CONTRACT_RESULTS", "dumps"]

#: Result names the summary always carries (``null`` values when not computed).
CONTRACT_RESULTS = (
    "first_law_efficiency",
    "carnot_efficiency",
    "second_law_efficiency",
    "source_temperature",
    "sink_temperature",
)


def _jsonable(obj):
    """Recursively replace numpy scalars, NaN and infinities by JSON values."""
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        return finite_or_none(obj)
    if obj is None or isinstance(obj, str):
        return obj
    try:
        if obj != obj:  # pandas NA / NaT
            return None
    except (TypeError, ValueError):
        return None
    return str(obj)


def summary_json(data: ReportData) -> dict:
    """Build the summary dictionary (JSON-safe).

    Parameters
    ----------
    data : ReportData

    Returns
    -------
    dict
        ``{"plant", "perftest_version", "caution", "window", "global_test",
        "measurements", "results", "guarantees", "eliminated", "excluded_samples",
        "corrections", "exergy", "notes", "missing_stages", "timings", "audit"}``.
        ``audit`` is :meth:`perftest.report.audit.AuditRecord.to_dict` (masked samples,
        outliers, eliminated instruments, unit conversions, input file SHA-256,
        versions, options, ``created`` time stamp).
        ``global_test`` is ``{"chi2", "dof", "p_value", "passed"}`` (nulls when
        the reconciliation did not run); each measurement is ``{"tag", "measured",
        "u_measured", "reconciled", "u_reconciled", "z", "suspect", ...}``; each
        result ``{"value", "u", "U95", "unit"}``; each guarantee ``{"quantity",
        "corrected_value", "U95", "guaranteed", "direction", "verdict", "unit"}``.
        A test of several runs adds ``runs`` and ``repeatability`` (``results`` are
        then the mean of the runs); of load points, ``points`` (``results`` are then
        the first point's plus the weighted part-load figures, and each guarantee
        names its ``point``).
    """
    gt = data.global_test or {}
    global_test = {
        "chi2": finite_or_none(gt.get("chi2")),
        "dof": int(gt["dof"]) if gt.get("dof") is not None else None,
        "p_value": finite_or_none(gt.get("p_value")),
        "passed": as_bool(gt.get("passed")),
    }

    measurements = []
    rec = data.reconciliation
    if not rec.empty:
        for r in rec.itertuples(index=False):
            measurements.append(
                {
                    "tag": str(r.tag),
                    "measured": finite_or_none(r.measured),
                    "u_measured": finite_or_none(r.u_measured),
                    "reconciled": finite_or_none(r.reconciled),
                    "u_reconciled": finite_or_none(r.u_reconciled),
                    "z": finite_or_none(r.z),
                    "suspect": bool(r.suspect),
                    "quantity": str(getattr(r, "quantity", "")),
                    "redundant": as_bool(getattr(r, "redundant", None)),
                    "eliminated": as_bool(getattr(r, "eliminated", None)),
                }
            )
    elif not data.measurements.empty:
        # No reconciliation: report the averages; reconciled stays null.
        for r in data.measurements.itertuples(index=False):
            measurements.append(
                {
                    "tag": str(r.tag),
                    "measured": finite_or_none(r.value),
                    "u_measured": finite_or_none(r.u),
                    "reconciled": None,
                    "u_reconciled": None,
                    "z": None,
                    "suspect": False,
                    "quantity": str(r.quantity),
                }
            )

    results: dict = {}
    for name, r in data.results.iterrows():
        results[str(name)] = {
            "value": finite_or_none(r["value"]),
            "u": finite_or_none(r["u"]),
            "U95": finite_or_none(r["U95"]),
            "unit": str(r["unit"]),
        }
        for extra in ("k", "dof"):
            if extra in r.index:
                results[str(name)][extra] = finite_or_none(r[extra])
        if "basis" in r.index and isinstance(r["basis"], str) and r["basis"]:
            results[str(name)]["basis"] = r["basis"]
    for name in CONTRACT_RESULTS:
        results.setdefault(name, {"value": None, "u": None, "U95": None, "unit": ""})

    guarantees = []
    for r in data.guarantees.itertuples(index=False):
        guarantees.append(
            {
                "quantity": str(r.quantity),
                "corrected_value": finite_or_none(r.corrected_value),
                "U95": finite_or_none(r.U95),
                "guaranteed": finite_or_none(r.guaranteed),
                "direction": str(r.direction),
                "verdict": str(r.verdict),
                "unit": _si_unit(data, r.quantity),
                "display_unit": r.unit,
                "rule": str(getattr(r, "rule", "guarded")),
                "rule_statement": str(getattr(r, "rule_statement", "")),
            }
        )
        if hasattr(r, "point"):
            guarantees[-1]["point"] = str(r.point)

    excluded = []
    if not data.exclusions.empty and {"tag", "reason"} <= set(data.exclusions.columns):
        counts = data.exclusions.groupby(["tag", "reason"]).size()
        excluded = [{"tag": t, "reason": why, "count": int(n)} for (t, why), n in counts.items()]

    out = {
        "plant": data.title,
        "perftest_version": data.version,
        "caution": CAUTION,
        "window": dict(data.window),
        "global_test": global_test,
        "measurements": measurements,
        "results": results,
        "guarantees": guarantees,
        "eliminated": [dict(e) for e in data.eliminated],
        "excluded_samples": excluded,
        "corrections": data.corrections.to_dict(orient="records")
        if not data.corrections.empty
        else [],
        "exergy": data.exergy.to_dict(orient="records") if not data.exergy.empty else [],
        "notes": list(data.notes),
        "missing_stages": list(data.missing),
        "timings": dict(data.timings),
        "audit": dict(data.audit),
    }
    from perftest.report.campaign import campaign_summary

    out.update(campaign_summary(data))
    return _jsonable(out)


def _si_unit(data: ReportData, quantity: str) -> str:
    if quantity in data.results.index:
        return str(data.results.loc[quantity, "unit"])
    return ""


def dumps(summary: dict) -> str:
    """Serialise strictly (``allow_nan=False``: a NaN left over is a bug, not output)."""
    return json.dumps(summary, indent=2, allow_nan=False, ensure_ascii=False) + "\n"


def write_summary(data: ReportData, path) -> Path:
    """Write :func:`summary_json` to ``path``; returns the path."""
    from perftest.report.output import write_atomic

    return write_atomic(path, dumps(summary_json(data)))
