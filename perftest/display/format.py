"""Numbers for people: display units, rounding to the uncertainty, compact tables.

Every number inside perftest is SI.  This module turns SI numbers into what an
engineer reads: the unit a tag was logged in (or one the user names), results in
engineering units (MW, %, kJ/kWh, °C), each value rounded to its expanded
uncertainty, no e-notation, and small HTML and text tables for the notebook
representations of the pipeline objects.

It imports only :mod:`perftest.errors` and :mod:`perftest.units`, so every layer
(plant, run, balance, evaluation, planning, report) may call it.

Rounding follows GUM (JCGM 100:2008) 7.2.6: the expanded uncertainty is stated with
at most two significant digits and the value is rounded to the same decimal place.
"""

from __future__ import annotations

import html as _html
import math
from collections.abc import Mapping, Sequence

import numpy as np

from perftest import units as _units
from perftest.errors import InputError, PerftestError

__all__ = [
    "COLOURS",
    "CSS",
    "fmt_number",
    "fmt_dof",
    "fmt_plain",
    "fmt_uncertain",
    "fmt_u",
    "unit_label",
    "engineering_unit",
    "result_unit",
    "convert",
    "resolve_units",
    "html_table",
    "text_table",
    "html_block",
    "is_number_text",
    "numeric_columns",
    "decimals_for",
    "fmt_fixed",
    "k95",
    "NO_UNIT",
]

#: One colour per thing, shared by the report figures, the report's HTML and the
#: notebook tables, so a reconciled value is the same blue everywhere.
COLOURS = {
    "measured": "#7f8c8d",
    "reconciled": "#1f5f8b",
    "uncertainty": "#5dade2",
    "band": "#d4efdf",
    "band_edge": "#27ae60",
    "window": "#f9e79f",
    "suspect": "#c0392b",
    "flag_background": "#fdecea",
    "energy": "#e67e22",
    "exergy": "#1f5f8b",
    "destroyed": "#c0392b",
    "bound": "#6c3483",
    "heading": "#eaf2f8",
    "grid": "#d5d8dc",
}

# Engineering unit per glossary quantity: used when no logged unit is known or the
# logged one cannot be shown (a gauge unit without atmospheric pressure).  Chosen as
# what test reports of thermal plants commonly print (common practice, no source).
_ENGINEERING = {
    "pressure": "bar",
    "temperature": "degC",
    "temperature_difference": "K",
    "mass_flow": "kg/s",
    "volume_flow": "m3/h",
    "power": "MW",
    "heat_flow": "MW",
    "specific_enthalpy": "kJ/kg",
    "specific_entropy": "kJ/(kg K)",
    "specific_exergy": "kJ/kg",
    "specific_energy": "MJ/kg",
    "heat_rate": "kJ/kWh",
    "energy": "MWh",
    "fraction": "%",
}

# Unit strings as they should be printed (the parser's ASCII spellings on the left).
_LABELS = {
    "degC": "°C",
    "deg C": "°C",
    "degF": "°F",
    "deg F": "°F",
    "m3/h": "m³/h",
    "m3/s": "m³/s",
    "Nm3/h": "Nm³/h",
    "kg/m3": "kg/m³",
    "1": "–",
    "": "",
}

# Text that reads as "no unit" in a table column.
NO_UNIT = "–"


# ----------------------------------------------------------------------- numbers
def fmt_number(value, digits: int = 4) -> str:
    """A number with ``digits`` significant digits, never in e-notation.

    Parameters
    ----------
    value : float
    digits : int
        Significant digits; large numbers keep all their integer digits.

    Returns
    -------
    str
        ``"–"`` for nan and None, ``"∞"`` for infinity.

    Examples
    --------
    >>> fmt_number(1.4e-14), fmt_number(33.8546), fmt_number(1.1888e6)
    ('0', '33.85', '1188800')
    """
    if value is None:
        return NO_UNIT
    if isinstance(value, bool):
        return "yes" if value else "no"
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(f):
        return NO_UNIT
    if math.isinf(f):
        return "∞" if f > 0 else "−∞"
    if f == 0:
        return "0"
    decimals = digits - 1 - int(math.floor(math.log10(abs(f))))
    # Below a millionth of the unit shown a number is zero for a reader of a test
    # report; six decimals keep e-notation out of every column.
    decimals = min(max(decimals, 0), 6)
    text = f"{f:.{decimals}f}"
    if float(text) == 0:
        return "0"
    return text.replace("-", "−")


def fmt_plain(value, digits: int = 8) -> str:
    """A stated number (a guarantee, a reference) as written: no trailing zeros.

    >>> fmt_plain(33.0), fmt_plain(11462.0), fmt_plain(0.125)
    ('33', '11462', '0.125')
    """
    text = fmt_number(value, digits)
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text


def fmt_dof(dof) -> str:
    """Degrees of freedom as a reader wants them: ``"∞"`` or ``">1000"`` past 1000.

    Past 1000 degrees of freedom the Student t factor for 95 % differs from the
    normal 1.96 by at most 0.12 % (t(0.975, 1000) = 1.962), below the two digits a
    U95 is stated with, so the exact number says nothing more.
    """
    try:
        f = float(dof)
    except (TypeError, ValueError):
        return str(dof)
    if math.isnan(f):
        return NO_UNIT
    if math.isinf(f):
        return "∞"
    if f > 1000:
        return ">1000"
    return f"{f:.0f}" if f >= 10 else f"{f:.1f}"


def k95(dof) -> float:
    """Coverage factor for about 95 % from the Student t distribution (GUM G.3).

    1.96 (the normal value) for infinite or more than a million degrees of freedom.
    """
    try:
        nu = float(dof)
    except (TypeError, ValueError):
        return 1.959963984540054
    if not math.isfinite(nu) or nu > 1e6 or nu <= 0:
        return 1.959963984540054
    from scipy.stats import t as student

    return float(student.ppf(0.975, nu))


def decimals_for(U) -> int | None:
    """Decimal places that leave two significant digits of ``U`` (GUM 7.2.6)."""
    try:
        u = float(U)
    except (TypeError, ValueError):
        return None
    if not math.isfinite(u) or u <= 0:
        return None
    return 1 - int(math.floor(math.log10(u)))


def fmt_fixed(value, decimals: int | None, digits: int = 4) -> str:
    """``value`` with ``decimals`` places (negative: rounded to tens, hundreds ...)."""
    if decimals is None:
        return fmt_number(value, digits)
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(f):
        return fmt_number(f)
    if decimals < 0:
        f = round(f, decimals)
        text = f"{f:.0f}"
    else:
        text = f"{f:.{decimals}f}"
    if text.startswith("-") and float(text) == 0:
        text = text[1:]
    return text.replace("-", "−")


def fmt_u(value) -> str:
    """An uncertainty alone: two significant digits, integer digits rounded too.

    >>> fmt_u(0.01463), fmt_u(119.4), fmt_u(-0.0038)
    ('0.015', '120', '−0.0038')
    """
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    return fmt_fixed(f, decimals_for(abs(f)), 2)


def fmt_uncertain(value, U) -> tuple[str, str]:
    """Value and expanded uncertainty rounded together (GUM 7.2.6).

    ``U`` keeps two significant digits and the value is rounded to the same
    decimal place.  Without a usable ``U`` the value gets four significant digits.

    Examples
    --------
    >>> fmt_uncertain(33.85465, 0.07012)
    ('33.855', '0.070')
    >>> fmt_uncertain(11475.7, 71.7)
    ('11476', '72')
    """
    d = decimals_for(U)
    if d is None:
        return fmt_number(value), fmt_number(U, 2)
    return fmt_fixed(value, d), fmt_fixed(U, d)


# ------------------------------------------------------------------------- units
def unit_label(unit) -> str:
    """How a unit string is printed (``degC`` -> ``°C``, ``m3/h`` -> ``m³/h``)."""
    if unit is None:
        return ""
    text = str(unit)
    return _LABELS.get(text, text)


def engineering_unit(quantity: str | None) -> str | None:
    """The engineering display unit of a glossary quantity, or None."""
    return _ENGINEERING.get(quantity or "")


def result_unit(name: str, si_unit: str, value=None) -> tuple[str, float, float]:
    """Display unit of a result: ``(unit, scale, offset)``, display = SI * scale + offset.

    Generic over result names (any plant kind): powers and heat flows [W] in MW,
    or kW below 1 MW; heat rates [J/J] in kJ/kWh; fractions in %, except ratios
    that are read as plain numbers (COP, power-to-heat ratio: ``"1"``, printed
    ``"–"`` by :func:`unit_label`); temperatures [K] in ``degC``; specific energies
    [J/kg] in kJ/kg.  The unit strings are the parser's (:func:`unit_label` prints them).

    Parameters
    ----------
    name : str
        Result name (``corrected_`` prefix allowed).
    si_unit : str
        SI unit of the result as stored (``"W"``, ``"1"``, ``"J/J"``, ``"K"`` ...).
    value : float, optional
        SI value, to choose MW or kW by size.
    """
    base = str(name).removeprefix("corrected_")
    if si_unit == "W":
        try:
            small = value is not None and abs(float(value)) < 1e6
        except (TypeError, ValueError):
            small = False
        return ("kW", 1e-3, 0.0) if small else ("MW", 1e-6, 0.0)
    if si_unit == "J/J":
        return ("kJ/kWh", 3600.0, 0.0)
    if si_unit in ("1", ""):
        if "cop" in base.split("_") or base.endswith("ratio") or base in ("cop", "carnot_cop"):
            return ("1", 1.0, 0.0)
        if si_unit == "":
            return ("", 1.0, 0.0)
        return ("%", 100.0, 0.0)
    if si_unit == "K":
        return ("degC", 1.0, -273.15)
    if si_unit == "J/kg":
        return ("kJ/kg", 1e-3, 0.0)
    if si_unit == "Pa":
        return ("bar", 1e-5, 0.0)
    if si_unit == "kg/s":
        return ("kg/s", 1.0, 0.0)
    return (si_unit, 1.0, 0.0)


def convert(
    values,
    unit: str | None,
    *,
    quantity: str | None = None,
    atmospheric_pressure=None,
    density=None,
    difference: bool = False,
):
    """SI values in a display unit, falling back to the quantity's engineering unit.

    Parameters
    ----------
    values : float or array_like [SI]
    unit : str or None
        Wanted unit.  ``None`` or ``""``: the engineering unit of ``quantity``.
    quantity : str, optional
        Glossary quantity of the values (for the fallback and the volume check).
    atmospheric_pressure : float, optional [Pa]
        For gauge units.
    density : float, optional [kg/m3]
        For a volume-flow unit shown for a mass flow.
    difference : bool
        Convert as an interval (uncertainty, deviation): scale only.

    Returns
    -------
    (ndarray, str)
        The converted values and the unit they are really in (the label belongs to
        the numbers: when ``unit`` cannot be used, both fall back together to an
        engineering or SI unit of the quantity, or to the SI values with no label).
    """
    arr = np.asarray(values, dtype=float)
    if not quantity and unit:
        try:
            quantity = _units.parse_unit(unit).quantity
        except PerftestError:
            quantity = None
    tries = []
    if unit:
        tries.append(unit)
    eng = engineering_unit(quantity)
    if eng and eng not in tries:
        tries.append(eng)
    for u in tries:
        try:
            spec = _units.parse_unit(u)
            # a density is needed (and allowed) only to show a mass flow in a volume unit
            rho = density if (spec.needs_density and quantity != spec.quantity) else None
            if spec.needs_density and quantity != spec.quantity and density is None:
                continue
            out = _units.from_si(
                arr,
                u,
                atmospheric_pressure=None if difference else atmospheric_pressure,
                density=rho,
                difference=difference,
                quantity=quantity or None,
            )
            return np.asarray(out, dtype=float), u
        except PerftestError:
            continue
    if quantity:
        try:
            return arr, _units.si_unit(quantity)
        except PerftestError:
            pass
    return arr, ""


def resolve_units(tags: Sequence[str], quantities: Sequence[str], logged: Sequence[str], units):
    """The unit to show each tag in.

    Parameters
    ----------
    tags, quantities, logged : sequences of str
        Tag ids, glossary quantities and logged units, one per tag.
    units : "logged", "si", "engineering" or mapping
        ``"logged"``: as logged; ``"si"``: the SI unit inside; ``"engineering"``:
        bar, °C, t/h... by quantity; a mapping names a unit per tag id or per
        quantity (tags not named keep their logged unit).

    Returns
    -------
    list of str
    """
    if units is None:
        units = "logged"
    if isinstance(units, str):
        if units not in ("logged", "si", "engineering"):
            raise InputError(
                "The 'units' parameter must be 'logged', 'si', 'engineering' or a mapping "
                f"of tag or quantity to unit. Got {units!r}.",
                parameter="units",
            )
        out = []
        for q, lg in zip(quantities, logged, strict=True):
            if units == "si":
                try:
                    out.append(_units.si_unit(q) if q else "")
                except PerftestError:
                    out.append("")
            elif units == "engineering":
                out.append(engineering_unit(q) or lg or "")
            else:
                out.append(lg or "")
        return out
    if not isinstance(units, Mapping):
        raise InputError(
            "The 'units' parameter must be 'logged', 'si', 'engineering' or a mapping "
            f"of tag or quantity to unit. Got {type(units).__name__}.",
            parameter="units",
        )
    out = []
    for t, q, lg in zip(tags, quantities, logged, strict=True):
        u = units.get(t, units.get(q, lg))
        if u and u not in ("si", "logged"):
            try:
                _units.parse_unit(u)
            except PerftestError as exc:
                raise InputError(
                    f"The 'units' parameter names unit {u!r} for '{t}', which perftest "
                    f"does not know: {exc}",
                    parameter="units",
                    tag=t,
                ) from None
        out.append(u or "")
    return out


# ------------------------------------------------------------------------ tables
CSS = f"""
<style>
.perftest-repr {{ font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial,
  sans-serif; font-size: 12px; }}
.perftest-repr .pt-title {{ font-weight: 600; margin: 2px 0 4px; }}
.perftest-repr .pt-lines {{ margin: 0 0 4px; color: #34495e; }}
.perftest-repr table {{ border-collapse: collapse; }}
.perftest-repr th {{ background: {COLOURS["heading"]}; text-align: left;
  padding: 2px 6px; border-bottom: 1px solid {COLOURS["grid"]}; }}
.perftest-repr td {{ padding: 1px 6px; border-bottom: 1px solid #f2f3f4; white-space: nowrap; }}
.perftest-repr td.num {{ text-align: right; font-variant-numeric: tabular-nums; }}
.perftest-repr td.txt {{ text-align: left; }}
.perftest-repr tr.flag td {{ background: {COLOURS["flag_background"]};
  color: {COLOURS["suspect"]}; font-weight: 600; }}
.perftest-repr .pt-more {{ color: #7f8c8d; }}
</style>
"""


def numeric_columns(rows, ncols: int) -> list:
    """Per column: whether it holds numbers (dashes for missing values allowed)."""
    out = []
    for j in range(ncols):
        cells = [str(r[j]) for r in rows if j < len(r)]
        filled = [c for c in cells if c not in ("", NO_UNIT)]
        out.append(bool(filled) and all(is_number_text(c) for c in filled))
    return out


def is_number_text(text: str) -> bool:
    """Whether a table cell holds a number (as formatted here), to right-align it."""
    t = text.replace("−", "-").replace("±", "").replace(">", "").replace(" ", "")
    if t in ("∞", "-∞", NO_UNIT):
        return True
    try:
        float(t)
    except ValueError:
        return False
    return True


def html_table(header, rows, *, flags=None, limit: int | None = 30) -> str:
    """Rows of strings as a compact HTML table; numbers right-aligned, text left.

    Parameters
    ----------
    header : sequence of str
        Column headings (in words, with the unit in brackets).
    rows : sequence of sequences of str
    flags : sequence of bool, optional
        Rows to highlight (suspect instruments, failed checks).
    limit : int or None
        Rows shown; the rest are counted in a last line.
    """
    rows = [list(r) for r in rows]
    flags = list(flags) if flags is not None else [False] * len(rows)
    shown = rows if limit is None else rows[:limit]
    head = "".join(f"<th>{_html.escape(str(h))}</th>" for h in header)
    numeric = numeric_columns(rows, len(header))
    body = []
    for flag, r in zip(flags, shown, strict=False):
        cells = "".join(
            f'<td class="{"num" if numeric[j] else "txt"}">{_html.escape(str(c))}</td>'
            for j, c in enumerate(r)
        )
        body.append(f"<tr{' class=flag' if flag else ''}>{cells}</tr>")
    more = ""
    if limit is not None and len(rows) > limit:
        more = (
            f'<tr><td class="pt-more" colspan="{len(header)}">… {len(rows) - limit} more '
            "rows (to_frame() has them all)</td></tr>"
        )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}{more}</tbody></table>"


def html_block(title: str, lines=(), tables=()) -> str:
    """A titled notebook block: a few summary lines, then tables (HTML strings)."""
    parts = [CSS, '<div class="perftest-repr">']
    parts.append(f'<div class="pt-title">{_html.escape(title)}</div>')
    if lines:
        items = "<br>".join(_html.escape(str(x)) for x in lines)
        parts.append(f'<div class="pt-lines">{items}</div>')
    parts.extend(tables)
    parts.append("</div>")
    return "".join(parts)


def text_table(header, rows, *, limit: int | None = 12) -> str:
    """Rows of strings as fixed-width text lines (numbers right-aligned)."""
    rows = [[str(c) for c in r] for r in rows]
    shown = rows if limit is None else rows[:limit]
    cols = list(zip(*([list(map(str, header))] + shown), strict=True)) if shown else []
    if not cols:
        return ""
    widths = [max(len(c) for c in col) for col in cols]
    numeric = [all(is_number_text(c) for c in col[1:]) for col in cols]

    def line(cells):
        return "  ".join(
            c.rjust(w) if num else c.ljust(w)
            for c, w, num in zip(cells, widths, numeric, strict=True)
        ).rstrip()

    out = [line(list(map(str, header)))] + [line(r) for r in shown]
    if limit is not None and len(rows) > limit:
        out.append(f"… {len(rows) - limit} more")
    return "\n".join(out)
