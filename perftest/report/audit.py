"""The audit record of an evaluation: what was done to the data, and with what.

A test result can decide a contract payment, so the report must let a reviewer
see that nothing was lost or quietly changed between the logged files and the
stated number.  :func:`build_audit` gathers, from the objects of the pipeline,

- the samples masked at import and in the window, counted per tag and reason;
- the outliers the screen rejected, per tag;
- the instruments dropped by serial elimination, with the global test before
  each step;
- the unit conversions applied (tag: logged unit -> SI unit);
- the SHA-256 fingerprint and size of every input file (plant file and run files);
- the versions of perftest, Python and the libraries that computed the numbers;
- the options of the evaluation (window, significance levels, elimination, seed).

The record is a frozen dataclass; :meth:`AuditRecord.to_dict` gives the JSON-safe
form stored under ``"audit"`` in ``summary.json`` and shown in the reports.
"""

from __future__ import annotations

import hashlib
import platform
import re
import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from perftest.display import fmt_number

__all__ = [
    "AuditRecord",
    "MaskedSamples",
    "DroppedInstrument",
    "UnitConversion",
    "InputFile",
    "build_audit",
    "audit_lines",
    "file_fingerprint",
    "library_versions",
    "normalise_reason",
    "AUDIT_LIBRARIES",
]

#: Distributions whose version is recorded (the ones that compute or read numbers).
AUDIT_LIBRARIES = (
    "perftest",
    "numpy",
    "scipy",
    "pandas",
    "pyarrow",
    "CoolProp",
    "pint",
    "uncertainties",
    "matplotlib",
)

_CHUNK = 1 << 20

# Exclusion reasons carry the offending text and line ("text 'n/a' in a numeric cell
# (line 17)"); counted per reason they are grouped by their kind.
_LINE = re.compile(r"\s*\(line \d+\)$")
_TEXT = re.compile(r"^text .* in a numeric cell$", re.DOTALL)


@dataclass(frozen=True)
class MaskedSamples:
    """Samples of one tag excluded for one reason.

    Attributes
    ----------
    tag : str
    reason : str
        The kind of reason (line numbers and cell texts are in ``Run.exclusions``).
    in_run : int
        Count over the whole run.
    in_window : int
        Count inside the averaged window (these are the ones that changed an average).
    """

    tag: str
    reason: str
    in_run: int
    in_window: int


@dataclass(frozen=True)
class DroppedInstrument:
    """One serial-elimination step: the tag dropped and the test that dropped it.

    ``tied_with`` lists the tags the measurement test could not tell from it.
    """

    tag: str
    z: float
    chi2: float
    dof: int
    p_value: float
    tied_with: tuple = ()


@dataclass(frozen=True)
class UnitConversion:
    """A tag's logged unit and the SI unit its values were converted to."""

    tag: str
    quantity: str
    unit: str
    si_unit: str


@dataclass(frozen=True)
class InputFile:
    """Fingerprint of one input file.

    Attributes
    ----------
    role : str
        ``"plant"`` or ``"run"``.
    name : str
        File name (the path as given is in ``path``).
    path : str
    size : int or None
        [byte]; None when the file cannot be read any more.
    sha256 : str or None
        Hex digest of every byte of the file.
    note : str
        Empty, or why the fingerprint may not be the imported file's (it changed
        since the import, or is gone).
    """

    role: str
    name: str
    path: str
    size: int | None
    sha256: str | None
    note: str = ""


@dataclass(frozen=True)
class AuditRecord:
    """Everything done to the data on the way to the result, and with what.

    Attributes
    ----------
    created : str
        UTC time the record was made (ISO 8601); differs between two runs of the
        same inputs, like ``versions`` across installations.
    masked : tuple of MaskedSamples
        Samples excluded at import or by the screen, per tag and reason.
    outliers : dict[str, int]
        Samples the outlier screen rejected in the window, per tag.
    eliminated : tuple of DroppedInstrument
        Serial-elimination steps, in order.
    unit_conversions : tuple of UnitConversion
    input_files : tuple of InputFile
    versions : dict[str, str]
        ``python`` and each of :data:`AUDIT_LIBRARIES` (``"not installed"``).
    options : dict
        Options of the evaluation (as given to the pipeline).
    """

    created: str
    masked: tuple = ()
    outliers: dict = field(default_factory=dict)
    eliminated: tuple = ()
    unit_conversions: tuple = ()
    input_files: tuple = ()
    versions: dict = field(default_factory=dict)
    options: dict = field(default_factory=dict)

    @property
    def n_masked_in_run(self) -> int:
        """Samples excluded over the whole run."""
        return sum(m.in_run for m in self.masked)

    @property
    def n_masked_in_window(self) -> int:
        """Samples excluded inside the averaged window."""
        return sum(m.in_window for m in self.masked)

    def to_dict(self) -> dict:
        """JSON-ready form (plain lists and dicts; numbers as Python floats/ints)."""
        return {
            "created": self.created,
            "masked_samples": [
                {"tag": m.tag, "reason": m.reason, "in_run": m.in_run, "in_window": m.in_window}
                for m in self.masked
            ],
            "outliers_rejected": dict(self.outliers),
            "eliminated": [
                {
                    "tag": e.tag,
                    "z": e.z,
                    "chi2": e.chi2,
                    "dof": e.dof,
                    "p_value": e.p_value,
                    "tied_with": list(e.tied_with),
                }
                for e in self.eliminated
            ],
            "unit_conversions": [
                {"tag": c.tag, "quantity": c.quantity, "unit": c.unit, "si_unit": c.si_unit}
                for c in self.unit_conversions
            ],
            "input_files": [
                {
                    "role": f.role,
                    "name": f.name,
                    "path": f.path,
                    "size": f.size,
                    "sha256": f.sha256,
                    "note": f.note,
                }
                for f in self.input_files
            ],
            "versions": dict(self.versions),
            "options": dict(self.options),
        }

    def lines(self) -> list[str]:
        """The record as short sentences for the Markdown and HTML reports."""
        return audit_lines(self.to_dict())


def audit_lines(audit: Mapping) -> list[str]:
    """Short sentences of an audit record in its :meth:`AuditRecord.to_dict` form."""
    out = []
    for f in audit.get("input_files", ()):
        size = "-" if f.get("size") is None else f"{f['size']} bytes"
        note = f" ({f['note']})" if f.get("note") else ""
        out.append(
            f"Input {f.get('role', '')} file {f.get('name', '')}: {size}, "
            f"SHA-256 {f.get('sha256') or '-'}{note}"
        )
    masked = list(audit.get("masked_samples", ()))
    if masked:
        n_run = sum(int(m["in_run"]) for m in masked)
        n_win = sum(int(m["in_window"]) for m in masked)
        out.append(f"Samples excluded: {n_run} over the run, {n_win} inside the window")
        for m in masked:
            out.append(
                f"Excluded {m['tag']}: {m['reason']} ({m['in_run']} in run, "
                f"{m['in_window']} in window)"
            )
    else:
        out.append("Samples excluded: none")
    outliers = audit.get("outliers_rejected") or {}
    if outliers:
        out.append(
            "Outliers rejected: " + ", ".join(f"{t} {n}" for t, n in sorted(outliers.items()))
        )
    else:
        out.append("Outliers rejected: none")
    steps = list(audit.get("eliminated", ()))
    for k, e in enumerate(steps, 1):
        out.append(
            f"Dropped by serial elimination, step {k}: {e['tag']} (|z| = "
            f"{fmt_number(abs(e['z']), 3)}; before the step χ² = {fmt_number(e['chi2'], 4)}, "
            f"{e['dof']} degrees of freedom, p = {fmt_number(e['p_value'], 3)})"
            + (
                "; tied with (the test cannot tell them apart) " + ", ".join(e["tied_with"])
                if e.get("tied_with")
                else ""
            )
        )
    if not steps:
        out.append("Instruments dropped by serial elimination: none")
    conv = [c for c in audit.get("unit_conversions", ()) if c["unit"] != c["si_unit"]]
    if conv:
        out.append(
            "Unit conversions to SI: "
            + ", ".join(f"{c['tag']} {c['unit']} -> {c['si_unit']}" for c in conv)
        )
    options = audit.get("options") or {}
    if options:
        out.append("Options: " + ", ".join(f"{k} = {v}" for k, v in options.items()))
    versions = audit.get("versions") or {}
    if versions:
        out.append("Versions: " + ", ".join(f"{k} {v}" for k, v in versions.items()))
    if audit.get("created"):
        out.append(f"Record made {audit['created']} (UTC)")
    return out


def normalise_reason(reason) -> str:
    """The kind of an exclusion reason, without line numbers or the cell text."""
    text = _LINE.sub("", str(reason)).strip()
    if _TEXT.match(text):
        return "text in a numeric cell"
    return text


def library_versions() -> dict:
    """``{"python": ..., <distribution>: version or "not installed"}``."""
    from importlib import metadata

    out = {"python": platform.python_version()}
    for name in AUDIT_LIBRARIES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out


def file_fingerprint(path, *, size=None, crc32=None, role: str = "run") -> InputFile:
    """SHA-256 and size of a file, checked against the import's fingerprint.

    Parameters
    ----------
    path : path
    size : int, optional [byte]
        Size recorded at import.
    crc32 : int, optional
        zlib CRC-32 recorded at import.  When ``size`` or ``crc32`` differ from the
        file now, ``note`` says the file changed since the import.
    role : str
        ``"plant"`` or ``"run"``.

    Returns
    -------
    InputFile
    """
    p = Path(path)
    sha = hashlib.sha256()
    crc = 0
    n = 0
    try:
        with p.open("rb") as fh:
            while chunk := fh.read(_CHUNK):
                sha.update(chunk)
                crc = zlib.crc32(chunk, crc)
                n += len(chunk)
    except OSError as exc:
        return InputFile(
            role, p.name, str(p), None, None, f"cannot be read now: {exc.strerror or exc}"
        )
    note = ""
    if (size is not None and n != size) or (crc32 is not None and crc != crc32):
        note = "changed since the import: this fingerprint is not of the imported bytes"
    return InputFile(role, p.name, str(p), n, sha.hexdigest(), note)


def _masked(run, window_run) -> tuple:
    source = window_run if window_run is not None else run
    ex = getattr(source, "exclusions", None)
    if ex is None or ex.empty:
        return ()
    kinds = ex["reason"].map(normalise_reason)
    times = pd.to_datetime(ex["time"], utc=True, errors="coerce")
    inside = pd.Series(True, index=ex.index)
    if window_run is not None and len(window_run.data.index):
        idx = window_run.data.index
        t0 = window_run.start if window_run.start is not None else idx[0]
        t1 = window_run.end if window_run.end is not None else idx[-1]
        t0, t1 = pd.Timestamp(t0), pd.Timestamp(t1)
        t0 = t0.tz_localize("UTC") if t0.tz is None else t0.tz_convert("UTC")
        t1 = t1.tz_localize("UTC") if t1.tz is None else t1.tz_convert("UTC")
        inside = (times >= t0) & (times <= t1)
    frame = pd.DataFrame(
        {"tag": ex["tag"].astype(str), "reason": kinds, "inside": inside.to_numpy(bool)}
    )
    grouped = frame.groupby(["tag", "reason"], sort=True)["inside"].agg(["size", "sum"])
    return tuple(
        MaskedSamples(str(t), str(r), int(row["size"]), int(row["sum"]))
        for (t, r), row in grouped.iterrows()
    )


def _outliers(window_run) -> dict:
    ex = getattr(window_run, "exclusions", None)
    if ex is None or ex.empty:
        return {}
    hit = ex["reason"].astype(str).str.startswith("outlier")
    counts = ex.loc[hit, "tag"].astype(str).value_counts()
    return {str(t): int(n) for t, n in sorted(counts.items())}


def _conversions(run) -> tuple:
    if run is None:
        return ()
    from perftest.errors import PerftestError
    from perftest.units import si_unit

    out = []
    units = getattr(run, "units", {}) or {}
    quantities = getattr(run, "quantities", {}) or {}
    for tag in run.data.columns:
        unit = units.get(tag) or ""
        q = quantities.get(tag) or ""
        try:
            si = si_unit(q) if q else ""
        except PerftestError:
            si = ""
        out.append(UnitConversion(str(tag), str(q), str(unit), str(si or unit)))
    return tuple(out)


def _origin_fingerprint(origin) -> InputFile:
    """A workbook's or Parquet file's fingerprint, or a database query's (no password)."""
    if origin.path is not None:
        fp = file_fingerprint(origin.path)
        note = fp.note
        if not note and fp.sha256 != origin.sha256:
            note = "changed since the import: this fingerprint is not of the imported bytes"
        if origin.sheet is not None:
            note = "; ".join(x for x in (f"sheet {origin.sheet!r}", note) if x)
        return InputFile(fp.role, fp.name, fp.path, fp.size, fp.sha256, note)
    return InputFile(
        "run",
        origin.label,
        origin.url or "",
        None,
        origin.sha256,
        f"query: {origin.query}; SHA-256 of the rows returned",
    )


def _files(plant, run, paths: Sequence) -> tuple:
    out = []
    plant_path = getattr(plant, "path", None)
    if plant_path is not None:
        out.append(file_fingerprint(plant_path, role="plant"))
    raw = getattr(run, "raw", None)
    seen = set()
    if raw is not None and hasattr(raw, "source"):
        for stem in raw:
            src = raw.source(stem)
            origin = getattr(src, "origin", None)
            if origin is not None:
                out.append(_origin_fingerprint(origin))
                if origin.path is not None:
                    seen.add(str(Path(origin.path)))
                continue
            out.append(file_fingerprint(src.layout.path, size=src.size, crc32=src.crc32))
            seen.add(str(Path(src.layout.path)))
    for p in paths:
        if str(Path(p)) not in seen:
            out.append(file_fingerprint(p))
    return tuple(out)


def build_audit(
    plant=None,
    run=None,
    window_run=None,
    reconciliation=None,
    *,
    paths: Sequence = (),
    options: Mapping | None = None,
    created: str | None = None,
) -> AuditRecord:
    """Gather the audit record of one evaluation.

    Parameters
    ----------
    plant : Plant, optional
        Its file is fingerprinted.
    run : Run, optional
        The whole run as imported (units, run files).
    window_run : Run, optional
        The averaged window after outlier screening (exclusions, outliers).
    reconciliation : PlantReconciliation, optional
        Its serial-elimination steps.
    paths : sequence of path
        Further input files to fingerprint (run files of a Run built otherwise).
    options : mapping, optional
        Options of the evaluation, recorded as given.
    created : str, optional
        Time stamp of the record (default: now, UTC, to the second).

    Returns
    -------
    AuditRecord
    """
    if created is None:
        created = datetime.now(UTC).replace(microsecond=0).isoformat()
    eliminated = tuple(
        DroppedInstrument(
            str(e.tag),
            float(e.z),
            float(e.chi2),
            int(e.dof),
            float(e.p_value),
            tuple(str(t) for t in getattr(e, "tied_with", ())),
        )
        for e in getattr(reconciliation, "eliminated", ())
    )
    return AuditRecord(
        created=created,
        masked=_masked(run, window_run),
        outliers=_outliers(window_run),
        eliminated=eliminated,
        unit_conversions=_conversions(run),
        input_files=_files(plant, run, paths),
        versions=library_versions(),
        options={str(k): v for k, v in (options or {}).items()},
    )
