"""The records a plant file is read into: :class:`Plant` and what it holds.

:class:`Plant` carries the validated ``[site]`` (:class:`SiteSettings`), ``[tags]``
(:class:`TagSpec`), ``[groups]`` (:class:`GroupSpec`) and ``[stability]``
(:class:`StabilityLimit`) tables, and keeps the other sections as raw tables in
:attr:`Plant.sections` for the modules that own them.  Those modules report their
own problems with :meth:`Plant.error` and read values with units with
:meth:`Plant.read_quantity`, so that every message has the same shape::

    plant.toml, line 12, key 'tags.TT-101.unit': ... .
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from statistics import NormalDist

import numpy as np

from perftest import units as _units
from perftest.errors import InputError, PlantFileError
from perftest.plant.scanner import line_of as _locate
from perftest.plant.scanner import located_error as _make_error
from perftest.plant.values import read_quantity as _read_quantity

__all__ = [
    "Plant",
    "SiteSettings",
    "TagSpec",
    "GroupSpec",
    "UncertaintySpec",
    "StabilityLimit",
    "DEFAULT_STABILITY",
]

_STANDARD_ATMOSPHERE = 101325.0  # [Pa], by definition (NIST SP 811, B.8)


@dataclass(frozen=True)
class UncertaintySpec:
    """Systematic uncertainty of an instrument as stated by its maker or calibration.

    Attributes
    ----------
    value : float
        Stated value: in the tag's unit (``absolute``) or in percent.
    kind : str
        ``"absolute"``, ``"percent_of_reading"`` or ``"percent_of_span"``.
    level : float or str
        Coverage probability it was stated at (``0.95``) or ``"standard"``.
    k : float or None
        Coverage factor written in the file (e.g. ``2`` from a calibration
        certificate); overrides the one derived from ``level``.
    """

    value: float
    kind: str
    level: float | str = 0.95
    k: float | None = None

    @property
    def coverage_factor(self) -> float:
        """Divisor from the stated to the standard uncertainty.

        Notes
        -----
        A level ``p`` is read as a normal distribution with infinite degrees of
        freedom: :math:`k = \\Phi^{-1}((1 + p)/2)`, so 95 % gives 1.960 (JCGM 100:2008,
        G.1.3 and Table G.1).  Certificates that state ``k = 2`` for "about 95 %"
        should write ``k = 2``: dividing by 1.96 instead would overstate the standard
        uncertainty by 2 %.
        """
        if self.k is not None:
            return float(self.k)
        if self.level == "standard":
            return 1.0
        return NormalDist().inv_cdf(0.5 + float(self.level) / 2.0)


@dataclass(frozen=True)
class StabilityLimit:
    """Permissible variation of a reading about its window mean.

    Attributes
    ----------
    value : float
        As written: percent of the mean, or an interval in ``unit``.
    kind : str
        ``"percent"`` or ``"absolute"``.
    unit : str or None
        Unit of an absolute value.
    value_si : float
        Absolute value converted to SI as an interval (for ``percent``: the
        fraction, ``value / 100``).
    """

    value: float
    kind: str
    unit: str | None = None
    value_si: float = 0.0

    def limit_si(self, mean_si):
        """Permissible variation [SI] for a window mean [SI] (scalar or array)."""
        if self.kind == "percent":
            return np.abs(mean_si) * self.value_si
        return self.value_si + 0.0 * np.asarray(mean_si, dtype=float)


def _default_stability() -> dict[str, StabilityLimit]:
    # Common practice, no source: permissible variations a performance engineer
    # typically accepts over a steady test window.  Override per quantity with
    # [stability.<quantity>] or per tag with `stability`.
    pct = {
        "pressure": 1.0,
        "mass_flow": 2.0,
        "volume_flow": 2.0,
        "power": 1.0,
        "heat_flow": 2.0,
        "frequency": 0.5,
        "speed": 0.5,
    }
    out = {q: StabilityLimit(v, "percent", None, v / 100.0) for q, v in pct.items()}
    out["temperature"] = StabilityLimit(0.5, "absolute", "K", 0.5)
    out["temperature_difference"] = StabilityLimit(0.5, "absolute", "K", 0.5)
    return out


#: Default permissible variation per quantity (common practice, no source).
DEFAULT_STABILITY: dict[str, StabilityLimit] = _default_stability()


@dataclass(frozen=True)
class SiteSettings:
    """The ``[site]`` table.

    Attributes
    ----------
    name : str
    timezone : str
        IANA zone of timestamps without offset.
    atmospheric_pressure : float or None
        Fixed reference for gauge pressures [Pa].
    barometer_tag : str or None
        Logged absolute-pressure tag used instead, sample by sample.
    dead_state_temperature : float or None
        [K]
    dead_state_temperature_tag : str or None
    dead_state_pressure : float or None
        [Pa]; 101325 Pa when neither it nor its tag is given.
    dead_state_pressure_tag : str or None
    """

    name: str
    timezone: str = "UTC"
    atmospheric_pressure: float | None = None
    barometer_tag: str | None = None
    dead_state_temperature: float | None = None
    dead_state_temperature_tag: str | None = None
    dead_state_pressure: float | None = _STANDARD_ATMOSPHERE
    dead_state_pressure_tag: str | None = None


@dataclass(frozen=True)
class TagSpec:
    """One logged instrument (``[tags.<ID>]``).

    Attributes
    ----------
    id, column, quantity : str
    unit : str or None
        Unit as logged; None when the run file carries a units row.
    description : str
    uncertainty : UncertaintySpec or None
    span : tuple(float, float) or None
        Calibrated range in the tag's unit.
    calibration : tuple of float or None
        Polynomial coefficients, ascending powers, in the tag's unit.
    shared_calibration : str or None
        Calibration lot: systematic errors within a lot are fully correlated.
    density : float or None
        [kg/m3] for a volume-flow unit converted to mass flow.
    stability : StabilityLimit or None
        Per-tag override of the permissible variation.
    source : str or None
        File stem the column must come from.
    sentinels : tuple
        Extra values (numbers or texts) that mean "bad sample".
    """

    id: str
    column: str
    quantity: str
    unit: str | None = None
    description: str = ""
    uncertainty: UncertaintySpec | None = None
    span: tuple[float, float] | None = None
    calibration: tuple[float, ...] | None = None
    shared_calibration: str | None = None
    density: float | None = None
    stability: StabilityLimit | None = None
    source: str | None = None
    sentinels: tuple = ()

    def _unit_for(self, unit, what: str) -> str:
        unit = unit if unit is not None else self.unit
        if unit is None:
            raise InputError(
                f"Tag {self.id!r} has no unit in the plant file, so {what} cannot be "
                "converted. Pass unit= (the unit of the run file) or set the tag's unit.",
                tag=self.id,
                parameter="unit",
            )
        return unit

    def systematic_standard_uncertainty(self, mean_si, *, atmospheric_pressure=None, unit=None):
        """Systematic standard uncertainty of the tag's reading [SI].

        Parameters
        ----------
        mean_si : float or array_like
            Mean reading [SI] (used by ``percent_of_reading``).
        atmospheric_pressure : float or array_like, optional
            [Pa], needed for ``percent_of_reading`` of a gauge-pressure tag: the
            percentage applies to the gauge reading.
        unit : str, optional
            Unit of the run file when the plant file gives none.

        Returns
        -------
        float or ndarray
            Standard uncertainty [SI]; 0 when the tag states no uncertainty.

        Notes
        -----
        .. math:: u = U / k, \\quad U = \\begin{cases} a & \\text{absolute} \\\\
                  |\\bar x|\\,p/100 & \\text{percent of reading} \\\\
                  (x_{hi} - x_{lo})\\,p/100 & \\text{percent of span} \\end{cases}

        with :math:`\\bar x` the mean in the tag's unit and :math:`k` the coverage
        factor of the stated level (:attr:`UncertaintySpec.coverage_factor`).
        The interval is converted to SI without offset (``difference=True``).

        References
        ----------
        JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
        uncertainty in measurement", 4.3.3 (expanded to standard uncertainty).
        """
        spec = self.uncertainty
        if spec is None:
            return 0.0 * np.asarray(mean_si, dtype=float) + 0.0
        unit = self._unit_for(unit, "its uncertainty")
        if spec.kind == "absolute":
            stated = spec.value
        elif spec.kind == "percent_of_span":
            stated = (self.span[1] - self.span[0]) * spec.value / 100.0
        else:
            reading = _units.from_si(
                mean_si,
                unit,
                quantity=self.quantity,
                atmospheric_pressure=atmospheric_pressure,
                density=self._density_for(unit),
            )
            stated = np.abs(reading) * spec.value / 100.0
        u = _units.to_si(
            stated,
            unit,
            quantity=self.quantity,
            density=self._density_for(unit),
            difference=True,
        )
        return u / spec.coverage_factor

    def _density_for(self, unit):
        spec = _units.parse_unit(unit)
        if spec.density_exponent == 1 and self.quantity == "volume_flow":
            return None
        return self.density if spec.needs_density else None

    def apply_calibration(self, values_in_tag_unit):
        """Apply the calibration polynomial, in the tag's own unit.

        .. math:: x_{corr} = c_0 + c_1 x + c_2 x^2 + \\dots

        A Series keeps its index; without a calibration the values come back
        unchanged (a copy for arrays).
        """
        if self.calibration is None:
            if hasattr(values_in_tag_unit, "copy"):
                return values_in_tag_unit.copy()
            return values_in_tag_unit
        x = np.asarray(values_in_tag_unit, dtype=float)
        # Horner's scheme: one multiply-add per coefficient
        out = np.full_like(x, self.calibration[-1], dtype=float)
        for c in self.calibration[-2::-1]:
            out = out * x + c
        if hasattr(values_in_tag_unit, "index") and getattr(values_in_tag_unit, "ndim", 0) == 1:
            import pandas as pd

            return pd.Series(out, index=values_in_tag_unit.index, name=values_in_tag_unit.name)
        return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class GroupSpec:
    """Redundant instruments averaged into one value (``[groups.<ID>]``).

    Attributes
    ----------
    id : str
    tags : tuple of str
        Member tag ids (at least two, same quantity).
    quantity : str
    agreement : StabilityLimit or None
        Largest permitted difference between member means.
    description : str
    """

    id: str
    tags: tuple[str, ...]
    quantity: str
    agreement: StabilityLimit | None = None
    description: str = ""


@dataclass(frozen=True)
class Plant:
    """A validated plant file.

    Attributes
    ----------
    path : pathlib.Path
    name : str
    site : SiteSettings
    tags : dict[str, TagSpec]
    groups : dict[str, GroupSpec]
    stability : dict[str, StabilityLimit]
        Defaults (:data:`DEFAULT_STABILITY`) overridden by ``[stability]``.
    sections : dict
        Raw tables ``streams``, ``units``, ``fuel``, ``performance``, ``reference``
        (dicts) and ``corrections``, ``guarantees`` (lists); empty when absent.
    text : str
        The file text.
    """

    path: Path
    name: str
    site: SiteSettings
    tags: dict[str, TagSpec]
    groups: dict[str, GroupSpec]
    stability: dict[str, StabilityLimit]
    sections: dict
    text: str = field(repr=False)
    _lines: dict = field(default_factory=dict, repr=False, compare=False)

    def locate(self, *keys) -> int | None:
        """Line number (1-based) of a key path, e.g. ``locate("tags", "TT-101", "unit")``.

        Array-of-table entries are addressed by index: ``locate("guarantees", 0,
        "value")``.  A single dotted string is split at dots when it is not a key
        itself.  When the key itself is not written, the line of its nearest
        written parent is returned; None when nothing matches.
        """
        return _locate(self._lines, keys)

    def error(self, message: str, *keys) -> PlantFileError:
        """Build (not raise) a :class:`PlantFileError` located at ``keys``.

        The message gets the prefix ``"plant.toml, line 12, key 'streams.main.fluid': "``
        and the error's ``file``, ``line``, ``key`` (and ``tag``) fields are set.
        """
        return _make_error(self.path, self._lines, message, keys)

    def read_quantity(self, value, quantity: str, *keys, default_unit=None, difference=False):
        """Read ``{ value, unit }`` or a bare number (in ``default_unit``) as SI.

        Parameters
        ----------
        value : dict or number
            The TOML value.
        quantity : str
            Glossary quantity it must be.
        *keys
            Where it is written (for messages).
        default_unit : str, optional
            Unit of a bare number; without it a bare number is an error.
        difference : bool
            True for intervals (no offset, no gauge shift).

        Returns
        -------
        float
            SI value.  Gauge units use ``site.atmospheric_pressure``.

        Raises
        ------
        PlantFileError
        """
        return _read_quantity(
            self.path,
            self._lines,
            value,
            quantity,
            keys,
            default_unit=default_unit,
            difference=difference,
            atmospheric_pressure=self.site.atmospheric_pressure,
        )

    def quantity_of(self, name: str) -> str:
        """Quantity of a tag or group id (KeyError when it is neither)."""
        if name in self.tags:
            return self.tags[name].quantity
        return self.groups[name].quantity

    def is_measured(self, name: str) -> bool:
        """True when ``name`` is a tag or group id."""
        return name in self.tags or name in self.groups

    @property
    def tags_without_uncertainty(self) -> tuple[str, ...]:
        """Tag ids whose systematic uncertainty is not stated (taken as 0)."""
        return tuple(t for t, s in self.tags.items() if s.uncertainty is None)

    def __repr__(self) -> str:
        from perftest.display.views import plant_text

        return plant_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import plant_html

        return plant_html(self)
