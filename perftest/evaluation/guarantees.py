"""Guarantees of a plant and the rules of their verdicts.

A :class:`Guarantee` compares a result corrected to reference conditions (see
:mod:`perftest.evaluation.corrections`), with its expanded uncertainty, with the guaranteed
value.  Contracts differ in how the test uncertainty enters the verdict, so the
rule is chosen per guarantee (``rule`` in ``[[guarantees]]``) or for the whole
plant file (``[acceptance] rule``); :data:`RULES` lists them and
:meth:`Guarantee.statement` writes the one used into the reports.

References
----------
.. [1] JCGM 100:2008 (GUM), clause 6 (expanded uncertainty).
.. [2] JCGM 106:2012, *Evaluation of measurement data - The role of measurement
   uncertainty in conformity assessment*, 2012, clause 8 (acceptance and rejection
   zones, guarded acceptance and guarded rejection; clause number from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from perftest.errors import InputError, PlantFileError

__all__ = [
    "Guarantee",
    "guarantee_from_table",
    "guarantees_from_plant",
    "RULES",
    "DEFAULT_RULE",
    "DIRECTIONS",
    "VERDICTS",
]

DIRECTIONS = ("at_least", "at_most")
VERDICTS = ("met", "not met", "inconclusive")
#: Columns of a table of verdicts, one row per guarantee (:meth:`Guarantee.judge`).
VERDICT_COLUMNS = (
    "quantity",
    "corrected_value",
    "U95",
    "guaranteed",
    "direction",
    "verdict",
    "unit",
    "margin",
    "rule",
    "rule_statement",
)

Converter = Callable[..., object]


def _default_convert() -> Converter:
    from perftest.units import to_si

    def convert(values, unit, difference=False):
        return to_si(values, unit, difference=difference)

    return convert


#: Verdict rules a contract may choose (``rule`` of a guarantee or ``[acceptance]``).
RULES = ("guarded", "supplier_benefit", "plain", "tolerance")

#: The rule used when neither the guarantee nor ``[acceptance]`` names one.
DEFAULT_RULE = "guarded"

_RULE_TEXT = {
    "guarded": (
        "guard bands of U95 on both sides: met only when the whole interval corrected "
        "value +- U95 lies on the guaranteed side ({met}), not met only when it lies wholly "
        "on the other side ({fail}), inconclusive otherwise"
    ),
    "supplier_benefit": (
        "the test uncertainty is granted to the supplier as a tolerance: met when the "
        "guarantee is reached within U95 ({met}), not met otherwise"
    ),
    "plain": (
        "plain comparison of the corrected value with the guarantee ({met}), no allowance "
        "for the test uncertainty; U95 is reported for information only"
    ),
    "tolerance": (
        "contractual tolerance of {tol} stated in the plant file: met when the corrected "
        "value is within it of the guarantee or better ({met}), not met otherwise; U95 is "
        "reported for information only"
    ),
}


@dataclass(frozen=True)
class Guarantee:
    """A guaranteed value of a (corrected) result and the rule of its verdict.

    Parameters
    ----------
    quantity : str
        Result name, e.g. ``"corrected_net_power"``.
    guaranteed : float [SI]
        Guaranteed value.
    direction : {"at_least", "at_most"}
        ``at_least`` for output or efficiency, ``at_most`` for heat rate.
    unit : str, optional
        Unit for display only (the value is SI).
    rule : {"guarded", "supplier_benefit", "plain", "tolerance"}, default "guarded"
        How the test uncertainty enters the verdict (see Notes).
    tolerance : float, optional [SI]
        Contractual tolerance, required by (and only allowed with) ``rule="tolerance"``.

    Notes
    -----
    With corrected value :math:`y`, expanded uncertainty :math:`U = U_{95}`,
    guaranteed value :math:`G` and contractual tolerance :math:`T`, for
    ``at_least`` (``at_most`` mirrors every inequality):

    ===================  ===========================  ===========================
    rule                 met                          not met
    ===================  ===========================  ===========================
    ``guarded``          :math:`y - U \\ge G`          :math:`y + U < G`
    ``supplier_benefit`` :math:`y + U \\ge G`          otherwise
    ``plain``            :math:`y \\ge G`              otherwise
    ``tolerance``        :math:`y + T \\ge G`          otherwise
    ===================  ===========================  ===========================

    ``guarded`` is inconclusive between its two zones; the others always decide.
    ``guarded`` is guarded acceptance together with guarded rejection of [2]_
    (acceptance limit moved inside the tolerance limit by the guard band
    :math:`w = U`); ``supplier_benefit`` is guarded rejection alone (the
    acceptance zone is widened by :math:`U`, the risk falls on the purchaser);
    ``plain`` is simple acceptance (shared risk, :math:`w = 0`), and ``tolerance``
    a fixed contractual allowance instead of the measured uncertainty (the last
    three from common contract practice, no source).

    Examples
    --------
    >>> g = Guarantee("corrected_net_power", 400e6, "at_least", unit="MW")
    >>> g.verdict(405e6, 3e6), g.verdict(401e6, 3e6), g.verdict(395e6, 3e6)
    ('met', 'inconclusive', 'not met')
    >>> Guarantee("corrected_net_power", 400e6, "at_least", rule="supplier_benefit").verdict(
    ...     398e6, 3e6)
    'met'
    """

    quantity: str
    guaranteed: float
    direction: str
    unit: str | None = None
    rule: str = DEFAULT_RULE
    tolerance: float | None = None

    def __post_init__(self):
        if self.direction not in DIRECTIONS:
            raise InputError(
                f"Guarantee '{self.quantity}': 'direction' must be one of {DIRECTIONS}. "
                f"Got {self.direction!r}.",
                parameter="direction",
            )
        try:
            g = float(self.guaranteed)
        except (TypeError, ValueError):
            g = math.nan
        if not math.isfinite(g):
            raise InputError(
                f"Guarantee '{self.quantity}': 'guaranteed' must be a finite number. "
                f"Got {self.guaranteed!r}.",
                parameter="guaranteed",
            )
        object.__setattr__(self, "guaranteed", g)
        if self.rule not in RULES:
            raise InputError(
                f"Guarantee '{self.quantity}': 'rule' must be one of {RULES}. Got {self.rule!r}.",
                parameter="rule",
            )
        if self.rule == "tolerance":
            try:
                t = float(self.tolerance) if self.tolerance is not None else math.nan
            except (TypeError, ValueError):
                t = math.nan
            if not (math.isfinite(t) and t >= 0):
                raise InputError(
                    f"Guarantee '{self.quantity}': rule 'tolerance' needs a finite "
                    f"non-negative 'tolerance'. Got {self.tolerance!r}.",
                    parameter="tolerance",
                )
            object.__setattr__(self, "tolerance", t)
        elif self.tolerance is not None:
            raise InputError(
                f"Guarantee '{self.quantity}': 'tolerance' is only used by rule "
                f"'tolerance'; this guarantee uses rule {self.rule!r}. Remove the tolerance "
                "or set rule = 'tolerance'.",
                parameter="tolerance",
            )

    def _inputs(self, corrected_value, U95=0.0) -> tuple[float, float]:
        try:
            y, u = float(corrected_value), float(U95)
        except (TypeError, ValueError):
            y, u = math.nan, math.nan
        if not math.isfinite(y):
            raise InputError(
                f"Guarantee '{self.quantity}': the corrected value must be a finite number. "
                f"Got {corrected_value!r}.",
                parameter="corrected_value",
            )
        if not (math.isfinite(u) and u >= 0):
            raise InputError(
                f"Guarantee '{self.quantity}': 'U95' must be a finite non-negative number. "
                f"Got {U95!r}.",
                parameter="U95",
            )
        return y, u

    def verdict(self, corrected_value, U95) -> str:
        """``"met"``, ``"not met"`` or ``"inconclusive"`` by the guarantee's rule.

        Parameters
        ----------
        corrected_value : float [SI]
        U95 : float [SI]
            Expanded uncertainty (about 95 % coverage) of ``corrected_value``.

        Raises
        ------
        InputError
            If a value is not finite or ``U95`` is negative.
        """
        y, u = self._inputs(corrected_value, U95)
        # Work with the margin d (positive = better than guaranteed), so that one set
        # of inequalities serves both directions.
        d = y - self.guaranteed if self.direction == "at_least" else self.guaranteed - y
        if self.rule == "guarded":
            if d - u >= 0:
                return "met"
            if d + u < 0:
                return "not met"
            return "inconclusive"
        allowance = {"supplier_benefit": u, "plain": 0.0}.get(self.rule, self.tolerance)
        return "met" if d + allowance >= 0 else "not met"

    def margin(self, corrected_value) -> float:
        """Signed margin by which the guarantee is beaten [SI] (positive = better).

        ``y - G`` for ``at_least``, ``G - y`` for ``at_most``.
        """
        y, _ = self._inputs(corrected_value)
        return y - self.guaranteed if self.direction == "at_least" else self.guaranteed - y

    def judge(self, corrected_value, U95) -> dict:
        """The verdict with what it rests on: one row of a table of verdicts.

        Parameters
        ----------
        corrected_value : float [SI]
        U95 : float [SI]
            Expanded uncertainty of ``corrected_value``.

        Returns
        -------
        dict
            Keyed by :data:`VERDICT_COLUMNS`.
        """
        return dict(
            quantity=self.quantity,
            corrected_value=corrected_value,
            U95=U95,
            guaranteed=self.guaranteed,
            direction=self.direction,
            verdict=self.verdict(corrected_value, U95),
            unit=self.unit,
            margin=self.margin(corrected_value),
            rule=self.rule,
            rule_statement=self.statement(),
        )

    def statement(self) -> str:
        """One sentence stating the verdict rule, for reports.

        Examples
        --------
        >>> Guarantee("corrected_heat_rate", 2.5, "at_most", rule="plain").statement()[:43]
        'Rule plain (y corrected value, G guarantee)'
        """
        ge, lt = (">=", "<") if self.direction == "at_least" else ("<=", ">")
        sign = "-" if self.direction == "at_least" else "+"
        other = "+" if sign == "-" else "-"
        met = {
            "guarded": f"y {sign} U95 {ge} G",
            "supplier_benefit": f"y {other} U95 {ge} G",
            "plain": f"y {ge} G",
            "tolerance": f"y {other} T {ge} G",
        }[self.rule]
        tol = ""
        if self.rule == "tolerance":
            tol = _display(self.tolerance, self.unit, difference=True)
        text = _RULE_TEXT[self.rule].format(met=met, fail=f"y {other} U95 {lt} G", tol=tol)
        return f"Rule {self.rule} (y corrected value, G guarantee): {text}."


def _display(value: float, unit: str | None, *, difference: bool = False) -> str:
    """``value`` [SI] written in the display ``unit`` when it converts, else in SI."""
    if unit:
        try:
            from perftest.units import from_si

            return f"{float(from_si(value, unit, difference=difference)):.6g} {unit}"
        except (ImportError, ValueError):
            pass
    return f"{value:.6g} (SI)"


def _fail(plant, file, message: str, *keys) -> PlantFileError:
    """A :class:`PlantFileError` located at ``keys`` (line and key when ``plant`` can)."""
    err = getattr(plant, "error", None)
    if callable(err):
        return err(message, *keys)
    dotted = ".".join(f"[{k}]" if isinstance(k, int) else str(k) for k in keys)
    dotted = dotted.replace(".[", "[")
    return PlantFileError(f"Plant file key '{dotted}': {message}", key=dotted, file=file)


def _tolerance(raw, guaranteed: float, convert, fail, keys) -> float:
    """``{ value, kind = "percent" }`` (of the guarantee) or ``{ value, unit }`` -> SI."""
    if not isinstance(raw, Mapping) or "value" not in raw:
        raise fail(
            'must be { value = 1.0, kind = "percent" } (percent of the guaranteed value) '
            f'or {{ value = 0.3, unit = "MW" }}. Got {raw!r}.',
            *keys,
        )
    extra = sorted(set(raw) - {"value", "kind", "unit"})
    if extra:
        raise fail(f"unknown key {extra[0]!r}; use 'value' with 'kind' or 'unit'.", *keys)
    try:
        v = float(raw["value"])
    except (TypeError, ValueError):
        v = math.nan
    if not (math.isfinite(v) and v >= 0):
        raise fail(f"'value' must be a finite non-negative number. Got {raw['value']!r}.", *keys)
    kind = raw.get("kind", "absolute")
    if kind == "percent":
        if "unit" in raw:
            raise fail("a percent tolerance has no 'unit'.", *keys)
        return v / 100.0 * abs(guaranteed)
    if kind != "absolute":
        raise fail(f'\'kind\' must be "percent" or "absolute". Got {kind!r}.', *keys)
    if raw.get("unit") is None:
        return v
    try:
        return float(np.asarray((convert or _default_convert())(v, raw["unit"], True)))
    except (InputError, ValueError) as exc:
        raise fail(f"cannot convert the tolerance: {exc}", *keys) from None


def guarantee_from_table(
    table: Mapping,
    *,
    convert: Converter | None = None,
    key: str = "guarantees",
    file=None,
    rule: str = DEFAULT_RULE,
    tolerance=None,
    plant=None,
    index: int | None = None,
) -> Guarantee:
    """Build a :class:`Guarantee` from one ``[[guarantees]]`` TOML table.

    Parameters
    ----------
    table : mapping
        ``quantity``, ``value``, ``unit`` (optional; SI when left out),
        ``direction``; optional ``rule`` (one of :data:`RULES`) and ``tolerance``
        (``{ value, kind = "percent" }`` of the guaranteed value, or
        ``{ value, unit }``) for ``rule = "tolerance"``.
    convert : callable, optional
        As for :func:`curve_from_table`.
    rule, tolerance
        Plant-wide defaults (``[acceptance]``) used when the table has none.
    plant : Plant, optional
        For messages with the line number (``plant.error``); ``index`` is the
        position of the table in ``[[guarantees]]``.

    Returns
    -------
    Guarantee  (value in SI, ``unit`` kept for display)

    Raises
    ------
    PlantFileError
        Naming the key (and line, with ``plant``) when an entry is missing or
        malformed.

    Examples
    --------
    >>> g = guarantee_from_table({"quantity": "corrected_net_power", "value": 400,
    ...                           "unit": "MW", "direction": "at_least"},
    ...                          convert=lambda v, u, difference=False: v * 1e6)
    >>> g.guaranteed, g.rule
    (400000000.0, 'guarded')
    """
    base = ("guarantees", index) if index is not None else tuple(key.split("."))

    def fail(message, *keys):
        if plant is None:
            k = ".".join([key, *map(str, keys[len(base) :])]) if keys else key
            return PlantFileError(f"Plant file key '{k}': {message}", key=k, file=file)
        return _fail(plant, file, message, *keys)

    if not isinstance(table, Mapping):
        raise fail("must be a table.", *base)
    known = ("quantity", "value", "unit", "direction", "rule", "tolerance", "description")
    for k in table:
        if k not in known:
            raise fail(f"unknown key {k!r}. Known keys: {', '.join(known)}.", *base, k)
    for req in ("quantity", "value", "direction"):
        if req not in table:
            raise fail(f"needs '{req}'.", *base)
    unit = table.get("unit")
    try:
        value = float(table["value"])
    except (TypeError, ValueError):
        raise fail(f"must be a number. Got {table['value']!r}.", *base, "value") from None
    if unit is not None:
        try:
            value = float(np.asarray((convert or _default_convert())(value, unit), dtype=float))
        except (InputError, ValueError) as exc:
            raise fail(f"cannot convert the value: {exc}", *base, "unit") from None
    g_rule = table.get("rule", rule)
    where = (*base, "rule") if "rule" in table else base
    if g_rule not in RULES:
        raise fail(f"'rule' must be one of {', '.join(RULES)}. Got {g_rule!r}.", *where)
    tol = None
    if g_rule == "tolerance":
        raw = table.get("tolerance", tolerance)
        tkeys = (*base, "tolerance") if "tolerance" in table else ("acceptance", "tolerance")
        if raw is None:
            raise fail(
                "rule 'tolerance' needs tolerance = { value = 1.0, kind = \"percent\" } "
                "here or under [acceptance].",
                *where,
            )
        tol = _tolerance(raw, value, convert, fail, tkeys)
    elif "tolerance" in table:
        raise fail(
            f"'tolerance' is used only by rule 'tolerance'; this guarantee uses {g_rule!r}.",
            *base,
            "tolerance",
        )
    try:
        return Guarantee(
            str(table["quantity"]), value, table["direction"], unit=unit, rule=g_rule, tolerance=tol
        )
    except InputError as exc:
        raise fail(str(exc), *base, exc.parameter or "direction") from None


def _entries(plant, section: str):
    sections = getattr(plant, "sections", plant)
    entries = sections.get(section, []) if isinstance(sections, Mapping) else []
    if isinstance(entries, Mapping):
        entries = [entries]
    return entries, getattr(plant, "path", None)


def guarantees_from_plant(plant, *, convert: Converter | None = None) -> list[Guarantee]:
    """All ``[[guarantees]]`` of a plant (``Plant`` or its ``sections`` dict), in SI.

    The plant-wide ``[acceptance]`` table may set ``rule`` (default ``"guarded"``) and
    ``tolerance`` for every guarantee that does not set its own.
    """
    entries, file = _entries(plant, "guarantees")
    sections = getattr(plant, "sections", plant)
    acc = sections.get("acceptance", {}) if isinstance(sections, Mapping) else {}
    located = plant if callable(getattr(plant, "error", None)) else None
    if not isinstance(acc, Mapping):
        raise _fail(located, file, "must be a table [acceptance].", "acceptance")
    for k in acc:
        if k not in ("rule", "tolerance"):
            raise _fail(
                located, file, f"unknown key {k!r}. Known keys: rule, tolerance.", "acceptance", k
            )
    rule = acc.get("rule", DEFAULT_RULE)
    if rule not in RULES:
        raise _fail(
            located,
            file,
            f"'rule' must be one of {', '.join(RULES)}. Got {rule!r}.",
            "acceptance",
            "rule",
        )
    return [
        guarantee_from_table(
            t,
            convert=convert,
            key=f"guarantees[{i}]",
            file=file,
            rule=rule,
            tolerance=acc.get("tolerance"),
            plant=located,
            index=i,
        )
        for i, t in enumerate(entries)
    ]
