"""Fuel descriptions for combustion: gas by components or ultimate analysis.

Fuels
-----
Every function takes the fuel as its first argument, `composition`, in one of two forms:

* a **gas** by components: a mapping of component name (or formula) to **mole
  fraction**, exactly as ``[fuel] composition`` in the plant file, e.g.
  ``{"methane": 0.93, "ethane": 0.04, "nitrogen": 0.02, "carbon_dioxide": 0.01}``.
  The names, the range check (each fraction in [0, 1]) and the sum (1 within 1e-4)
  are those of :class:`perftest.thermo.fuel.Gas`, whose component table supplies the
  atoms of each molecule; a :class:`~perftest.thermo.fuel.Gas` is accepted as well.
* a **liquid or solid fuel** by ultimate analysis: an :class:`UltimateAnalysis`
  (**mass fractions** of C, H, O, N, S, moisture and ash, as fired), or a mapping
  whose keys are all among ``C, H, O, N, S, moisture, ash`` (no gas component has
  such a name, so the two forms cannot be confused), e.g.
  ``{"C": 0.857, "H": 0.131, "S": 0.002, "O": 0.006, "N": 0.002, "moisture": 0.001,
  "ash": 0.001}``.  The fractions must sum to 1 within 1e-3 (laboratory analyses are
  reported to 0.01 % per element; their sums are off by a few 0.01 % from rounding).

Both forms are reduced to :class:`FuelAtoms`, the atoms (and moisture, argon, ash) per
kg of fuel, which is all that :mod:`perftest.thermo.combustion` needs.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass

from perftest.errors import InputError, PerftestError
from perftest.thermo.fuel import COMPONENTS, Gas
from perftest.thermo.ideal_gas import ATOMIC_MASSES, MOLAR_MASSES

__all__ = ["UltimateAnalysis", "FuelAtoms", "fuel_atoms", "ultimate_analysis"]

_M_W = MOLAR_MASSES["H2O"]

_ULTIMATE_FIELDS = ("carbon", "hydrogen", "oxygen", "nitrogen", "sulfur", "moisture", "ash")
_ULTIMATE_KEYS = {
    "c": "carbon",
    "h": "hydrogen",
    "o": "oxygen",
    "n": "nitrogen",
    "s": "sulfur",
    "moisture": "moisture",
    "ash": "ash",
}
#: Tolerance on the sum of an ultimate analysis (mass fractions) [-].
ULTIMATE_SUM_TOLERANCE = 1e-3


# --------------------------------------------------------------------------------------
# fuels
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class UltimateAnalysis:
    """Ultimate analysis of a liquid or solid fuel, mass fractions as fired [kg/kg].

    Parameters
    ----------
    carbon, hydrogen : float [-]
        Mass fractions of carbon and hydrogen (hydrogen of the fuel substance, not of
        its moisture).
    oxygen, nitrogen, sulfur : float [-], default 0
    moisture : float [-], default 0
        Free water in the fuel.
    ash : float [-], default 0

    Raises
    ------
    InputError
        A fraction that is not a finite number in [0, 1], a sum that is not 1 within
        :data:`ULTIMATE_SUM_TOLERANCE` (1e-3), or a fuel that needs no oxygen.

    Examples
    --------
    >>> oil = UltimateAnalysis(carbon=0.86, hydrogen=0.13, sulfur=0.01)
    >>> oil == UltimateAnalysis.from_mapping({"C": 0.86, "H": 0.13, "S": 0.01})
    True
    """

    carbon: float
    hydrogen: float
    oxygen: float = 0.0
    nitrogen: float = 0.0
    sulfur: float = 0.0
    moisture: float = 0.0
    ash: float = 0.0

    def __post_init__(self):
        for f in _ULTIMATE_FIELDS:
            value = getattr(self, f)
            try:
                x = float(value)
            except (TypeError, ValueError):
                x = math.nan
            if isinstance(value, bool) or not (0.0 <= x <= 1.0):
                raise InputError(
                    f"The {f!r} parameter of UltimateAnalysis must be a mass fraction "
                    f"between 0 and 1 (not percent). Got {value!r}.",
                    parameter=f,
                )
            object.__setattr__(self, f, x)
        total = math.fsum(getattr(self, f) for f in _ULTIMATE_FIELDS)
        if abs(total - 1.0) > ULTIMATE_SUM_TOLERANCE:
            raise InputError(
                "The mass fractions of UltimateAnalysis (carbon, hydrogen, oxygen, "
                f"nitrogen, sulfur, moisture, ash) must sum to 1 within "
                f"{ULTIMATE_SUM_TOLERANCE:g}. Got {total:.6f}.",
                parameter="composition",
            )

    @classmethod
    def from_mapping(cls, mapping: Mapping) -> UltimateAnalysis:
        """Read ``{"C": .., "H": .., "O": .., "N": .., "S": .., "moisture": .., "ash": ..}``.

        Keys are case-insensitive; missing ones are 0 (C and H are required).
        """
        values = {}
        for key, value in mapping.items():
            field = _ULTIMATE_KEYS.get(str(key).strip().lower())
            if field is None:
                raise InputError(
                    f"Unknown key {key!r} in an ultimate analysis. Use C, H, O, N, S, "
                    "moisture and ash (mass fractions).",
                    parameter="composition",
                )
            if field in values:
                raise InputError(
                    f"Key {key!r} appears twice in the ultimate analysis.",
                    parameter="composition",
                )
            values[field] = value
        for required in ("carbon", "hydrogen"):
            if required not in values:
                raise InputError(
                    f"An ultimate analysis needs {required[0].upper()} ({required}); "
                    "give 0 if the fuel has none.",
                    parameter="composition",
                )
        return cls(**values)


@dataclass(frozen=True)
class FuelAtoms:
    """Atoms per kg of fuel [mol/kg] (H, O, N as atoms), moisture, argon, ash [kg/kg]."""

    C: float
    H: float
    O: float  # noqa: E741 - element symbol
    N: float
    S: float
    W: float
    Ar: float
    ash: float

    @property
    def o2_stoich(self):
        return self.C + self.H / 4.0 + self.S - self.O / 2.0

    @property
    def d0(self):  # dry products of the fuel less the oxygen they take from the air
        return self.C + self.S + self.N / 2.0 + self.Ar - self.o2_stoich

    @property
    def h0(self):  # water vapour of the fuel (hydrogen and moisture)
        return self.H / 2.0 + self.W


def _from_ultimate(u: UltimateAnalysis) -> FuelAtoms:
    A = ATOMIC_MASSES
    return FuelAtoms(
        C=u.carbon / A["C"],
        H=u.hydrogen / A["H"],
        O=u.oxygen / A["O"],
        N=u.nitrogen / A["N"],
        S=u.sulfur / A["S"],
        W=u.moisture / _M_W,
        Ar=0.0,
        ash=u.ash,
    )


def _from_gas(fractions: Mapping[str, float]) -> FuelAtoms:
    # atoms per mol of gas, then per kg with the molar mass summed from the same atoms
    # (equal to the ISO 6976 table values, see perftest.thermo.ideal_gas.ATOMIC_MASSES)
    A = ATOMIC_MASSES
    n = dict.fromkeys(("C", "H", "O", "N", "S", "Ar"), 0.0)
    for name, x in fractions.items():
        atoms = COMPONENTS[name].atoms
        for el, k in zip(("C", "H", "O", "N", "S"), atoms, strict=True):
            n[el] += x * k
        if name == "argon":
            n["Ar"] += x
    M = math.fsum(n[el] * A[el] for el in n)
    return FuelAtoms(
        C=n["C"] / M,
        H=n["H"] / M,
        O=n["O"] / M,
        N=n["N"] / M,
        S=n["S"] / M,
        W=0.0,
        Ar=n["Ar"] / M,
        ash=0.0,
    )


def _gas_atoms(fuel: Mapping) -> FuelAtoms:
    """``_from_gas(Gas(fuel).composition)``, remembered per mapping content (in order).

    A fuel's composition is parsed again by every call of the heat-loss method, once
    per Monte Carlo trial; the atoms of the same mapping (the same names and fractions
    in the same order, so the same sums) are the same frozen record.  A failing
    mapping is not remembered: it raises again.
    """
    try:
        # the types too: 1 and True are equal keys, but not the same input
        key = tuple((k, type(v), v) for k, v in fuel.items())
        hash(key)
    except TypeError:  # unhashable fractions (arrays): no memo
        return _from_gas(Gas(fuel).composition)
    return _gas_atoms_of(key)


@functools.lru_cache(maxsize=64)
def _gas_atoms_of(items: tuple) -> FuelAtoms:
    return _from_gas(Gas({k: v for k, _, v in items}).composition)


def fuel_atoms(fuel, func: str) -> FuelAtoms:
    """The fuel in any accepted form as atoms per kg; errors name `func` and 'composition'."""
    try:
        if isinstance(fuel, UltimateAnalysis):
            f = _from_ultimate(fuel)
        elif isinstance(fuel, Gas):
            f = _from_gas(fuel.composition)
        elif isinstance(fuel, Mapping) and fuel:
            keys = [str(k).strip().lower() for k in fuel]
            known = [k in _ULTIMATE_KEYS for k in keys]
            if all(known):
                f = _from_ultimate(UltimateAnalysis.from_mapping(fuel))
            elif any(known):
                odd = [k for k, ok in zip(fuel, known, strict=True) if ok]
                raise InputError(
                    f"It mixes ultimate-analysis keys ({', '.join(map(repr, odd))}) with gas "
                    "components; give either mole fractions of gas components or mass "
                    "fractions C, H, O, N, S, moisture, ash.",
                    parameter="composition",
                )
            else:
                f = _gas_atoms(fuel)
        else:
            raise InputError(
                "It must be a mapping of gas component to mole fraction, a mapping of C, H, "
                "O, N, S, moisture, ash to mass fraction, an UltimateAnalysis or a Gas. "
                f"Got {fuel!r}.",
                parameter="composition",
            )
    except PerftestError as exc:
        raise InputError(
            f"The 'composition' parameter of {func} is not a valid fuel. {exc.message}",
            parameter="composition",
        ) from None
    if not f.o2_stoich > 0.0:
        raise InputError(
            f"The 'composition' parameter of {func} has nothing to burn (it needs no oxygen). "
            f"Got {fuel!r}.",
            parameter="composition",
        )
    return f


def ultimate_analysis(composition) -> UltimateAnalysis:
    """Ultimate analysis (mass fractions) of a fuel given in any accepted form.

    Parameters
    ----------
    composition : mapping or UltimateAnalysis or Gas
        See the module docstring.  A gas with argon cannot be written as an ultimate
        analysis and is refused.

    Returns
    -------
    UltimateAnalysis

    Examples
    --------
    >>> u = ultimate_analysis({"methane": 1.0})
    >>> round(u.carbon, 4), round(u.hydrogen, 4)
    (0.7487, 0.2513)
    """
    f = fuel_atoms(composition, "ultimate_analysis")
    if f.Ar > 0:
        raise InputError(
            "The 'composition' parameter of ultimate_analysis holds argon, which an ultimate "
            f"analysis has no place for. Got {composition!r}.",
            parameter="composition",
        )
    A = ATOMIC_MASSES
    return UltimateAnalysis(
        carbon=f.C * A["C"],
        hydrogen=f.H * A["H"],
        oxygen=f.O * A["O"],
        nitrogen=f.N * A["N"],
        sulfur=f.S * A["S"],
        moisture=f.W * _M_W,
        ash=f.ash,
    )
