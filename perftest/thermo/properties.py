"""Thermodynamic properties of water, steam, air, refrigerants and humid air.

Everything goes through CoolProp's low-level ``AbstractState``:

* ``"water"`` is IAPWS-IF97 (CoolProp's ``IF97`` backend), the formulation that
  acceptance-test codes for steam plant prescribe;
* ``"water:IAPWS95"`` is the scientific formulation IAPWS-95 (``HEOS`` backend);
* ``"air"`` is CoolProp's pseudo-pure air; any other CoolProp fluid (``"R134a"``,
  ``"nitrogen"``, ``"CO2"``, ``"ammonia"`` ...) is found by name or alias, ignoring case,
  spaces, hyphens and underscores;
* humid air goes through :func:`humid_air_state` (CoolProp's ``HAPropsSI``).

All inputs and outputs are SI: Pa (absolute), K, J/kg, J/(kg K), kg/m3.  Every
function takes floats, numpy arrays or pandas Series (a Series in gives a Series out
with the same index).  NaN inputs give NaN outputs, so gaps in a logged signal pass
through without an error.

States within ``saturation_margin`` (0.05 K by default) of the saturation line are
ambiguous when given by pressure and temperature: a measured 597.8 K at 12 MPa may be
compressed liquid or superheated steam.  Such states raise
:class:`~perftest.errors.PropertyRangeError` unless the caller declares the phase;
with a declared phase the state is computed on the declared side (see
:meth:`Fluid.state_pT`).
"""

from __future__ import annotations

import difflib
import functools
import importlib
import importlib.util
import math
import re
import sys
import threading
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perftest.errors import InputError, PropertyRangeError

__all__ = [
    "Fluid",
    "State",
    "HumidAir",
    "get_fluid",
    "specific_exergy",
    "humid_air_state",
    "fluid_names",
]

PHASES = ("liquid", "vapour", "gas", "supercritical", "wet")

# Relative pressure step of the central difference that gives (dh/dp)_T where CoolProp
# offers no analytic derivative (IF97 backend).  At 1e-5 the step moves the saturation
# temperature by at most ~2e-4 K (dTsat/dp * p is below ~20 K for water at any pressure),
# far inside the 0.05 K margin, so the stencil never crosses the saturation line; the
# truncation error (~1e-10 relative) and the round-off (~1e-10 J/kg / 1e-5 p) are both
# negligible against the uncertainty of any plant measurement.
_FD_REL_STEP = 1e-5
_MIN_MARGIN = 1e-3  # [K] the margin must exceed the saturation shift of the FD stencil


# --------------------------------------------------------------------------------------
# array plumbing: scalar / ndarray / Series in, the same kind out
# --------------------------------------------------------------------------------------
class _Args:
    """Broadcast inputs to flat float arrays and remember how to shape outputs."""

    def __init__(self, func: str, **named):
        self.index = None
        arrays = []
        for name, value in named.items():
            if isinstance(value, pd.Series):
                if self.index is None:
                    self.index = value.index
                elif not value.index.equals(self.index):
                    raise InputError(
                        f"The {name!r} parameter of {func} must have the same index as "
                        "the other Series arguments.",
                        parameter=name,
                    )
                value = value.to_numpy(dtype=float)
            if value is None:  # np.asarray(None, float) would be a silent NaN
                raise InputError(
                    f"The {name!r} parameter of {func} must be a number or an array of "
                    "numbers. Got None.",
                    parameter=name,
                )
            try:
                arr = np.asarray(value, dtype=float)
            except (TypeError, ValueError):
                raise InputError(
                    f"The {name!r} parameter of {func} must be a number or an array of "
                    f"numbers. Got {type(value).__name__}.",
                    parameter=name,
                ) from None
            arrays.append(arr)
        try:
            arrays = np.broadcast_arrays(*arrays)
        except ValueError:
            shapes = ", ".join(f"{k}: {np.shape(v)}" for k, v in named.items())
            raise InputError(
                f"The arguments of {func} must have broadcastable shapes. Got {shapes}."
            ) from None
        self.shape = arrays[0].shape
        self.scalar = self.shape == () and self.index is None
        self.flat = [np.ascontiguousarray(a, dtype=float).ravel() for a in arrays]

    def out(self, arr):
        arr = np.asarray(arr, dtype=float).reshape(self.shape)
        if self.index is not None:
            return pd.Series(arr, index=self.index)
        if self.scalar:
            return float(arr)
        return arr


def _fmt_state(p, T=None, *, h=None, s=None, x=None) -> str:
    parts = [f"p = {p / 1e6:.6g} MPa"]
    if T is not None:
        parts.append(f"T = {T:.2f} K")
    if h is not None:
        parts.append(f"h = {h / 1e3:.6g} kJ/kg")
    if s is not None:
        parts.append(f"s = {s / 1e3:.6g} kJ/(kg K)")
    if x is not None:
        parts.append(f"x = {x:.4g}")
    return ", ".join(parts)


def _prefix(where) -> str:
    return f"{where}: " if where else ""


# --------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class State:
    """A fluid state (floats, ndarrays or Series, all of the same shape).

    Attributes
    ----------
    p : pressure [Pa]
    T : temperature [K]
    h : specific enthalpy [J/kg]
    s : specific entropy [J/(kg K)]
    cp : isobaric specific heat capacity [J/(kg K)]; NaN in the two-phase region
    rho : density [kg/m3]
    x : vapour quality (mass fraction of vapour) [-]; NaN outside the two-phase region
    dh_dT_p : (dh/dT) at constant p [J/(kg K)]; NaN in the two-phase region
    dh_dp_T : (dh/dp) at constant T [m3/kg = J/(kg Pa)]; NaN in the two-phase region
    """

    p: object
    T: object
    h: object
    s: object
    cp: object
    rho: object
    x: object
    dh_dT_p: object
    dh_dp_T: object

    def to_frame(self) -> pd.DataFrame:
        """Return the state as a DataFrame, one column per attribute."""
        cols = {
            k: np.atleast_1d(np.asarray(getattr(self, k), dtype=float)).ravel()
            for k in self.__dataclass_fields__
        }
        index = self.p.index if isinstance(self.p, pd.Series) else None
        return pd.DataFrame(cols, index=index)


@dataclass(frozen=True)
class HumidAir:
    """State of moist air (floats, ndarrays or Series).

    Attributes
    ----------
    T : dry-bulb temperature [K]
    p : total pressure [Pa]
    relative_humidity : [-] (0 to 1)
    humidity_ratio : mass of water vapour per mass of dry air [kg/kg]
    wet_bulb : thermodynamic wet-bulb temperature [K]
    dew_point : dew-point temperature [K]
    h : specific enthalpy per kg of dry air [J/kg]
    volume : specific volume per kg of dry air [m3/kg]
    """

    T: object
    p: object
    relative_humidity: object
    humidity_ratio: object
    wet_bulb: object
    dew_point: object
    h: object
    volume: object


# --------------------------------------------------------------------------------------
# IAPWS-IF97 region 4 (saturation line), explicit in both directions
# --------------------------------------------------------------------------------------
# IAPWS R7-97(2012), Table 34: coefficients of the saturation equation (Eq. 30, 31).
# Evaluated in numpy because the IF97 backend's fast array path does not take
# saturation inputs; tests check it against CoolProp's own PQ/QT updates.
_N4 = (
    0.11670521452767e4,
    -0.72421316703206e6,
    -0.17073846940092e2,
    0.12020824702470e5,
    -0.32325550322333e7,
    0.14915108613530e2,
    -0.48232657361591e4,
    0.40511340542057e6,
    -0.23855557567849,
    0.65017534844798e3,
)
_IF97_PC = 22.064e6
_IF97_TC = 647.096
_IF97_PT = 611.212677  # [Pa] psat(273.15 K) from Eq. 30
_IF97_TMIN = 273.15


def _if97_psat(T):
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N4
    th = T + n9 / (T - n10)
    a = th * th + n1 * th + n2
    b = n3 * th * th + n4 * th + n5
    c = n6 * th * th + n7 * th + n8
    return (2.0 * c / (-b + np.sqrt(b * b - 4.0 * a * c))) ** 4 * 1e6


def _if97_tsat(p):
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N4
    beta = (p / 1e6) ** 0.25
    e = beta * beta + n3 * beta + n6
    f = n1 * beta * beta + n4 * beta + n7
    g = n2 * beta * beta + n5 * beta + n8
    d = 2.0 * g / (-f - np.sqrt(f * f - 4.0 * e * g))
    return (n10 + d - np.sqrt((n10 + d) ** 2 - 4.0 * (n9 + n10 * d))) / 2.0


# --------------------------------------------------------------------------------------
# CoolProp's compiled core, loaded without the package's start-up work
# --------------------------------------------------------------------------------------
# ``import CoolProp`` runs CoolProp/__init__.py, which asks the library for its list of
# fluids; that loads every Helmholtz-energy (HEOS) fluid, 5-7 s of CPU time, although
# IF97 water needs none of them.  The compiled core ``CoolProp.CoolProp`` holds
# everything used here (AbstractState, the input-pair and parameter constants, PropsSI,
# HAPropsSI, the global parameter strings) and loads in ~0.01 s on its own.
#
# _coolprop() imports the core under its real name while a bare package object (built
# from the package's own spec, __init__.py not executed) stands in for ``CoolProp`` in
# sys.modules.  The stand-in is removed at once; the core stays registered as
# ``CoolProp.CoolProp``.  A later ``import CoolProp`` (user code, tests, other modules)
# therefore runs the real __init__.py, which finds and re-uses that same core module:
# one extension module, one set of classes, one fluid library.  HEOS fluids, humid air
# and fluid_names() load the fluid library inside CoolProp when first used.  The global
# import lock is held while the stand-in is visible so that no other thread can import
# ``CoolProp`` and see it.  Any failure falls back to the plain import.
_CORE = None
_CORE_LOCK = threading.Lock()


def _coolprop():
    """Return CoolProp's compiled core module ``CoolProp.CoolProp`` (loaded once)."""
    global _CORE
    if _CORE is None:
        with _CORE_LOCK:
            if _CORE is None:
                _CORE = _load_coolprop_core()
    return _CORE


def _load_coolprop_core():
    name, parent = "CoolProp.CoolProp", "CoolProp"
    core = sys.modules.get(name)
    if core is not None:
        return core
    if parent in sys.modules:  # the package is imported already: nothing to save
        return importlib.import_module(name)
    import _imp

    core = None
    _imp.acquire_lock()
    try:
        if parent not in sys.modules and name not in sys.modules:
            spec = importlib.util.find_spec(parent)
            if spec is not None and spec.submodule_search_locations is not None:
                stand_in = importlib.util.module_from_spec(spec)
                sys.modules[parent] = stand_in
                try:
                    core = importlib.import_module(name)
                except Exception:
                    sys.modules.pop(name, None)
                    core = None
                finally:
                    if sys.modules.get(parent) is stand_in:
                        del sys.modules[parent]
    finally:
        _imp.release_lock()
    if core is None or not hasattr(core, "AbstractState"):
        core = importlib.import_module(name)  # plain import: pays the full start-up
    return core


def _ha_props_si():
    """CoolProp's ``HAPropsSI`` (in the core for CoolProp 8, a submodule before)."""
    core = _coolprop()
    func = getattr(core, "HAPropsSI", None)
    if func is None:
        from CoolProp.HumidAirProp import HAPropsSI as func
    return func


# --------------------------------------------------------------------------------------
# fluid name lookup
# --------------------------------------------------------------------------------------
def _norm(name: str) -> str:
    return re.sub(r"[\s_\-()]", "", name).lower()


@functools.lru_cache(maxsize=1)
def _name_table() -> dict[str, str]:
    CP = _coolprop()

    table = {}
    for fluid in CP.get_global_param_string("FluidsList").split(","):
        table[_norm(fluid)] = fluid
        for alias in CP.get_fluid_param_string(fluid, "aliases").split(","):
            if alias.strip():
                table.setdefault(_norm(alias), fluid)
    return table


def fluid_names() -> list[str]:
    """Return the fluid names that :func:`get_fluid` accepts (besides aliases).

    Examples
    --------
    >>> "R134a" in fluid_names()
    True
    """
    CP = _coolprop()

    return ["water", "water:IAPWS95", "air"] + sorted(
        CP.get_global_param_string("FluidsList").split(",")
    )


def get_fluid(name: str, *, saturation_margin: float = 0.05) -> Fluid:
    """Return the :class:`Fluid` of that name (cached).

    Parameters
    ----------
    name : str
        ``"water"`` (IAPWS-IF97), ``"water:IAPWS95"``, ``"air"`` or any CoolProp fluid
        name or alias, in any case (``"R134a"``, ``"nitrogen"``, ``"CO2"``).
    saturation_margin : float [K]
        Temperature band either side of the saturation line within which a state given
        by (p, T) is ambiguous and needs a declared phase.  At least 0.001 K.

    Returns
    -------
    Fluid

    Raises
    ------
    InputError
        Unknown name (the message lists close matches) or a bad margin.

    Examples
    --------
    >>> water = get_fluid("water")
    >>> round(water.h_pT(1e6, 400.0)[0] / 1e3, 3)  # kJ/kg
    533.463
    """
    if not isinstance(name, str):
        raise InputError(
            f"The 'name' parameter of get_fluid must be a fluid name (str). "
            f"Got {type(name).__name__}.",
            parameter="name",
        )
    margin = float(saturation_margin)
    if not (margin >= _MIN_MARGIN) or not math.isfinite(margin):
        raise InputError(
            f"The 'saturation_margin' parameter of get_fluid must be a finite temperature "
            f"of at least {_MIN_MARGIN} K. Got {saturation_margin!r}.",
            parameter="saturation_margin",
        )
    # the cache key ignores case so that "water" and "Water" share one instance; messages
    # quote the name as the caller wrote it
    key = name.strip().lower()
    try:
        return _get_fluid(key, margin)
    except InputError as exc:
        raise InputError(exc.message.replace(repr(key), repr(name)), parameter="name") from None


@functools.lru_cache(maxsize=64)
def _get_fluid(name: str, margin: float) -> Fluid:
    base, _, formulation = name.partition(":")
    key = _norm(base)
    formulation = formulation.strip().upper()
    if key == "humidair":
        raise InputError(
            "Humid air is not a pure fluid: use perftest.thermo.properties.humid_air_state(T, p, "
            "relative_humidity=...) for psychrometric states."
        )
    if key == "water" and formulation in ("", "IF97"):
        return Fluid("water", "IF97", "Water", margin)
    if formulation not in ("", "HEOS", "IAPWS95"):
        raise InputError(
            f"Unknown formulation {formulation!r} in fluid name {name!r}. Use 'water' "
            "(IAPWS-IF97), 'water:IAPWS95', or a plain CoolProp fluid name."
        )
    if formulation == "IAPWS95" and key != "water":
        raise InputError(f"IAPWS-95 is a formulation for water only. Got {name!r}.")
    table = _name_table()
    cp_name = table.get(key)
    if cp_name is None:
        close = difflib.get_close_matches(key, list(table), n=5, cutoff=0.6)
        hints = sorted({table[c] for c in close})
        hint = f" Close matches: {', '.join(hints)}." if hints else ""
        raise InputError(
            f"Unknown fluid {name!r}.{hint} Use 'water', 'water:IAPWS95', 'air' or a "
            "CoolProp fluid name (see perftest.thermo.properties.fluid_names()).",
            parameter="name",
        )
    label = "water:IAPWS95" if cp_name == "Water" else cp_name
    if cp_name == "Air":
        label = "air"
    return Fluid(label, "HEOS", cp_name, margin)


# --------------------------------------------------------------------------------------
# the fluid
# --------------------------------------------------------------------------------------
class Fluid:
    """A pure fluid (or pseudo-pure air) with vectorised property functions.

    Obtain one with :func:`get_fluid`; instances are cached and share one CoolProp
    ``AbstractState``, so a Fluid must not be used from several threads at once.

    Parameters
    ----------
    name : str
        Display name (``"water"``, ``"water:IAPWS95"``, ``"air"``, ``"R134a"``).
    backend : str
        CoolProp backend (``"IF97"`` or ``"HEOS"``).
    coolprop_name : str
        CoolProp's fluid name.
    saturation_margin : float [K]
        See :func:`get_fluid`.
    """

    def __init__(self, name, backend, coolprop_name, saturation_margin=0.05):
        CP = _coolprop()

        self._CP = CP
        self.name = name
        self.backend = backend
        self.coolprop_name = coolprop_name
        self.saturation_margin = float(saturation_margin)
        self._as = CP.AbstractState(backend, coolprop_name)
        self.is_if97 = backend == "IF97"
        if self.is_if97:
            self.formulation = "IAPWS-IF97"
            self.T_critical, self.p_critical = _IF97_TC, _IF97_PC
            self.T_min, self.p_triple = _IF97_TMIN, _IF97_PT
        else:
            self.formulation = f"CoolProp HEOS ({coolprop_name})"
            self.T_critical = self._as.T_critical()
            self.p_critical = self._as.p_critical()
            self.T_min = self._as.Tmin()
            try:
                self.p_triple = self._as.p_triple()
            except ValueError:  # pseudo-pure fluids have no triple point
                self.p_triple = 0.0
        self._pseudo_pure = coolprop_name == "Air"
        self._keys = {
            "h": CP.iHmass,
            "s": CP.iSmass,
            "cp": CP.iCpmass,
            "rho": CP.iDmass,
            "T": CP.iT,
            "x": CP.iQ,
        }
        self._getters = {
            "h": self._as.hmass,
            "s": self._as.smass,
            "cp": self._as.cpmass,
            "rho": self._as.rhomass,
            "T": self._as.T,
            "p": self._as.p,
            "x": self._as.Q,
        }

    def __repr__(self) -> str:
        return f"Fluid({self.name!r}, {self.formulation})"

    # ---- raw CoolProp evaluation --------------------------------------------------
    def _fast(self, pair, a, b, keys):
        """IF97 array path: CoolProp's ``fast_evaluate``; failed points are NaN."""
        outs = np.array([int(self._keys[k]) for k in keys], dtype=np.int32)
        out = np.empty((a.size, outs.size))
        status = np.empty(a.size, dtype=np.int32)
        self._as.fast_evaluate(pair, a, b, outs, out, status)
        res = {k: out[:, i] for i, k in enumerate(keys)}
        ok = status == 0
        # The array path of CoolProp 8 rejects IF97 region 5 (T > 1073.15 K) as out of
        # range although the point update supports it: retry such points one by one.
        retry = (status == int(self._CP.fast_evaluate_out_of_range)) & (a == a) & (b == b)
        if retry.any():
            idx = np.flatnonzero(retry)
            r2, ok2, _ = self._loop(pair, a[idx], b[idx], keys)
            for k in keys:
                res[k][idx] = r2[k]
            ok[idx] = ok2
        for k in keys:
            res[k][~ok] = np.nan
        return res, ok

    def _loop(self, pair, a, b, keys):
        """Point-by-point path through ``AbstractState.update``; failures are NaN.

        Returns the outputs, an ok mask and the first CoolProp error message.
        """
        out = {k: np.full(a.size, np.nan) for k in keys}
        ok = np.zeros(a.size, dtype=bool)
        first_error = None
        AS, CP = self._as, self._CP
        getters = self._getters
        for i in range(a.size):
            ai, bi = a[i], b[i]
            if ai != ai or bi != bi:
                continue
            try:
                AS.update(pair, ai, bi)
                for k in keys:
                    if k == "dhdp":
                        out[k][i] = AS.first_partial_deriv(CP.iHmass, CP.iP, CP.iT)
                    elif k == "dhdT":
                        out[k][i] = AS.first_partial_deriv(CP.iHmass, CP.iT, CP.iP)
                    else:
                        out[k][i] = getters[k]()
                ok[i] = True
            except (ValueError, IndexError, RuntimeError) as exc:
                # CoolProp signals range problems as ValueError or IndexError
                if first_error is None:
                    first_error = str(exc)
        return out, ok, first_error

    def _raw_pT(self, p, T, keys):
        """Single-phase properties at (p, T) as the backend gives them."""
        CP = self._CP
        want_dhdp = "dhdp" in keys
        base = [k for k in keys if k != "dhdp"]
        if self.is_if97:
            if want_dhdp and "h" not in base:
                base.append("h")
            res, ok = self._fast(CP.PT_INPUTS, p, T, base) if base else ({}, np.ones(p.size, bool))
            err = None
            if want_dhdp:
                # The IF97 backend has no first_partial_deriv; central difference in p.
                dp = _FD_REL_STEP * p
                # a non-finite p gives nan steps, which _fast marks not ok
                with np.errstate(invalid="ignore"):
                    hp, okp = self._fast(CP.PT_INPUTS, p + dp, T, ["h"])
                    hm, okm = self._fast(CP.PT_INPUTS, p - dp, T, ["h"])
                    res["dhdp"] = (hp["h"] - hm["h"]) / (2.0 * dp)
                ok = ok & okp & okm
        else:
            res, ok, err = self._loop(CP.PT_INPUTS, p, T, keys)
        return res, ok, err

    # ---- saturation ---------------------------------------------------------------
    def _tsat_or_nan(self, p):
        """Saturation temperature where triple <= p < critical, NaN elsewhere."""
        p = np.asarray(p, dtype=float)
        inside = (p >= self.p_triple) & (p < self.p_critical)
        out = np.full(p.shape, np.nan)
        if self._pseudo_pure or not inside.any():
            # pseudo-pure air has dew and bubble lines, not one saturation line; it is
            # used far above them in plant work, so no ambiguity check is made.
            return out
        if self.is_if97:
            with np.errstate(invalid="ignore"):
                out[inside] = _if97_tsat(p[inside])
        else:
            res, ok, _ = self._loop(self._CP.PQ_INPUTS, p[inside], np.zeros(inside.sum()), ["T"])
            out[inside] = res["T"]
        return out

    def saturation_T(self, p, *, where=None):
        """Saturation temperature at pressure `p`.

        Parameters
        ----------
        p : float, array or Series [Pa]
            Between the triple-point and the critical pressure.
        where : str, optional
            Names the stream in error messages.

        Returns
        -------
        T : same kind as `p` [K]

        Raises
        ------
        PropertyRangeError
            `p` outside the saturation line.

        Notes
        -----
        For ``"water"`` this is the IAPWS-IF97 region-4 backward equation, Eq. 31 of [1]
        (exact inverse of Eq. 30); for other fluids CoolProp's ``PQ_INPUTS`` update.

        References
        ----------
        .. [1] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation
           1997 for the Thermodynamic Properties of Water and Steam.

        Examples
        --------
        >>> round(get_fluid("water").saturation_T(1e6), 6)
        453.035632
        """
        args = _Args("saturation_T", p=p)
        (pp,) = args.flat
        T = self._tsat_or_nan(pp)
        bad = np.isnan(T) & ~np.isnan(pp)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise PropertyRangeError(
                f"{_prefix(where)}p = {pp[i] / 1e6:.6g} MPa has no saturation temperature "
                f"for {self.name}: the saturation line runs from {self.p_triple:.6g} Pa to "
                f"the critical pressure {self.p_critical / 1e6:.6g} MPa."
            )
        return args.out(T)

    def saturation_p(self, T, *, where=None):
        """Saturation pressure at temperature `T`.

        Parameters
        ----------
        T : float, array or Series [K]
            Between the triple-point and the critical temperature.
        where : str, optional
            Names the stream in error messages.

        Returns
        -------
        p : same kind as `T` [Pa]

        Raises
        ------
        PropertyRangeError
            `T` outside the saturation line.

        Notes
        -----
        For ``"water"`` the IAPWS-IF97 saturation-pressure equation, Eq. 30 of [1]; for
        other fluids CoolProp's ``QT_INPUTS`` update.

        References
        ----------
        .. [1] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation
           1997 for the Thermodynamic Properties of Water and Steam.

        Examples
        --------
        >>> round(get_fluid("water").saturation_p(500.0) / 1e6, 8)
        2.63889776
        """
        args = _Args("saturation_p", T=T)
        (TT,) = args.flat
        inside = (TT >= self.T_min) & (TT <= self.T_critical)
        out = np.full(TT.shape, np.nan)
        if self.is_if97:
            out[inside] = _if97_psat(TT[inside])
        elif inside.any() and not self._pseudo_pure:
            res, ok, _ = self._loop(self._CP.QT_INPUTS, np.zeros(inside.sum()), TT[inside], ["p"])
            out[inside] = res["p"]
        bad = np.isnan(out) & ~np.isnan(TT)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise PropertyRangeError(
                f"{_prefix(where)}T = {TT[i]:.2f} K has no saturation pressure for "
                f"{self.name}: the saturation line runs from {self.T_min:.2f} K to the "
                f"critical temperature {self.T_critical:.3f} K."
            )
        return args.out(out)

    # ---- (p, T) on a declared side ------------------------------------------------
    def _check_phase(self, phase, where):
        if phase is not None and phase not in PHASES:
            raise InputError(
                f"{_prefix(where)}phase must be one of {', '.join(PHASES)} or None. Got {phase!r}.",
                parameter="phase",
            )

    def _pT(self, p, T, phase, keys, where):
        """Properties at (p, T) with the saturation-ambiguity rules applied.

        Returns a dict of flat arrays for `keys` (subset of h, s, cp, rho, dhdp).
        """
        self._check_phase(phase, where)
        if phase == "wet":
            raise PropertyRangeError(
                f"{_prefix(where)}a wet (two-phase) state is not fixed by pressure and "
                "temperature; give its enthalpy, entropy or quality (state_ph, state_ps, "
                "state_px)."
            )
        bad = (p <= 0) | (T <= 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise PropertyRangeError(
                f"{_prefix(where)}{_fmt_state(p[i], T[i])}: pressure and temperature must "
                "be positive and absolute (Pa, K)."
            )
        margin = self.saturation_margin
        tsat = self._tsat_or_nan(p)
        with np.errstate(invalid="ignore"):
            dT = T - tsat
            near = np.abs(dT) <= margin
        if phase is None and near.any():
            i = int(np.flatnonzero(near)[0])
            raise PropertyRangeError(
                f"{_prefix(where)}{_fmt_state(p[i], T[i])} is within {margin:g} K of "
                f"saturation ({tsat[i]:.2f} K); declare the stream's phase (liquid, vapour "
                "or wet) in the plant file." + _more(near)
            )
        anchor = np.zeros(p.size, dtype=bool)
        T_eval = T
        if phase == "liquid":
            wrong = dT > margin
            if wrong.any():
                i = int(np.flatnonzero(wrong)[0])
                raise PropertyRangeError(
                    f"{_prefix(where)}{_fmt_state(p[i], T[i])} is declared liquid but lies "
                    f"{dT[i]:.2f} K above saturation ({tsat[i]:.2f} K); check the "
                    "temperature and pressure readings or the declared phase." + _more(wrong)
                )
            anchor = near
            T_eval = np.where(anchor, tsat - margin, T)
        elif phase in ("vapour", "gas"):
            wrong = dT < -margin
            if wrong.any():
                i = int(np.flatnonzero(wrong)[0])
                raise PropertyRangeError(
                    f"{_prefix(where)}{_fmt_state(p[i], T[i])} is declared {phase} but lies "
                    f"{-dT[i]:.2f} K below saturation ({tsat[i]:.2f} K); check the "
                    "temperature and pressure readings or the declared phase." + _more(wrong)
                )
            anchor = near
            T_eval = np.where(anchor, tsat + margin, T)
        elif phase == "supercritical":
            wrong = (p < self.p_critical) & (T < self.T_critical)
            if wrong.any():
                i = int(np.flatnonzero(wrong)[0])
                raise PropertyRangeError(
                    f"{_prefix(where)}{_fmt_state(p[i], T[i])} is declared supercritical but "
                    f"lies below both the critical pressure ({self.p_critical / 1e6:.6g} MPa) "
                    f"and the critical temperature ({self.T_critical:.3f} K)." + _more(wrong)
                )
        need = list(keys)
        if anchor.any() and "cp" not in need:
            need.append("cp")
        res, ok, err = self._raw_pT(p, T_eval, need)
        failed = ~ok & ~np.isnan(p) & ~np.isnan(T)
        if failed.any():
            i = int(np.flatnonzero(failed)[0])
            detail = f" (CoolProp: {err})" if err else ""
            raise PropertyRangeError(
                f"{_prefix(where)}{_fmt_state(p[i], T[i])} is outside the range of "
                f"{self.formulation} for {self.name}{_range_hint(self)}.{detail}" + _more(failed)
            )
        if anchor.any():
            # Declared side within the margin: evaluate at Tsat -/+ margin (safely on the
            # declared side) and extrapolate along the isobar to T with (dh/dT)_p = cp and
            # (ds/dT)_p = cp/T.  Over at most 2 x margin = 0.1 K the neglected second-order
            # term (dcp/dT) dT^2 / 2 is below 1e-3 J/kg away from the critical point.
            # Density and the derivatives are held at the anchor value.
            Ta = T_eval[anchor]
            cpa = res["cp"][anchor]
            if "h" in res:
                res["h"][anchor] += cpa * (T[anchor] - Ta)
            if "s" in res:
                res["s"][anchor] += cpa * np.log(T[anchor] / Ta)
        return res

    # ---- public (p, T) ------------------------------------------------------------
    def state_pT(self, p, T, phase=None, *, where=None) -> State:
        """State from pressure and temperature.

        Parameters
        ----------
        p : float, array or Series [Pa]
            Absolute pressure.
        T : float, array or Series [K]
            Temperature.
        phase : {"liquid", "vapour", "gas", "supercritical", None}
            Declared phase.  Needed when (p, T) lies within ``saturation_margin`` of the
            saturation line; checked against the state otherwise.
        where : str, optional
            Names the stream in error messages, e.g. ``"stream 'main_steam'"``.

        Returns
        -------
        State
            With ``x`` NaN, ``dh_dT_p`` equal to ``cp``.

        Raises
        ------
        PropertyRangeError
            (p, T) within the saturation margin with no declared phase, a declared phase
            that contradicts the state, ``phase="wet"``, or a state outside the range of
            the equation of state.
        InputError
            Unknown phase or bad array shapes.

        Notes
        -----
        The isobaric derivative is the heat capacity, :math:`(\\partial h/\\partial
        T)_p = c_p`.  The isothermal derivative
        :math:`(\\partial h/\\partial p)_T = v - T (\\partial v/\\partial T)_p` comes from
        CoolProp's ``first_partial_deriv(iHmass, iP, iT)`` on HEOS fluids.  CoolProp's
        IF97 backend does not implement ``first_partial_deriv`` (it raises
        "calc_reducing_state is not implemented"), so for ``"water"`` it is the central
        difference :math:`[h(p+\\delta, T) - h(p-\\delta, T)] / 2\\delta` with
        :math:`\\delta = 10^{-5} p`.

        Within the margin and with a declared liquid (vapour) phase the state is
        evaluated at :math:`T_s - \\Delta` (:math:`T_s + \\Delta`) and extrapolated to T
        along the isobar, :math:`h = h_a + c_{p,a}(T - T_a)`,
        :math:`s = s_a + c_{p,a} \\ln(T/T_a)`.  The same rule holds for every backend
        (the IF97 backend ignores an imposed phase), so results do not depend on it.

        References
        ----------
        .. [1] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation
           1997 for the Thermodynamic Properties of Water and Steam.

        Examples
        --------
        >>> st = get_fluid("water").state_pT(3e6, 300.0)
        >>> round(st.h / 1e3, 6), round(1 / st.rho, 11)   # IF97 Table 5
        (115.331273, 0.00100215168)
        """
        args = _Args("state_pT", p=p, T=T)
        pp, TT = args.flat
        r = self._pT(pp, TT, phase, ["h", "s", "cp", "rho", "dhdp"], where)
        nan = np.full(pp.size, np.nan)
        return State(
            p=args.out(pp),
            T=args.out(TT),
            h=args.out(r["h"]),
            s=args.out(r["s"]),
            cp=args.out(r["cp"]),
            rho=args.out(r["rho"]),
            x=args.out(nan),
            dh_dT_p=args.out(r["cp"]),
            dh_dp_T=args.out(r["dhdp"]),
        )

    def h_pT(self, p, T, phase=None, *, where=None):
        """Enthalpy and its two partial derivatives at (p, T), for Jacobians.

        Parameters
        ----------
        p : float, array or Series [Pa]
        T : float, array or Series [K]
        phase : {"liquid", "vapour", "gas", "supercritical", None}
            As in :meth:`state_pT`.
        where : str, optional
            Names the stream in error messages.

        Returns
        -------
        h : [J/kg]
        dh_dT_p : [J/(kg K)]
            :math:`(\\partial h/\\partial T)_p = c_p`.
        dh_dp_T : [m3/kg]
            :math:`(\\partial h/\\partial p)_T`, see :meth:`state_pT` Notes.

        Examples
        --------
        >>> h, dhdT, dhdp = get_fluid("water").h_pT(1e6, 400.0)
        >>> round(dhdT), round(dhdp * 1e6)   # J/(kg K), J/(kg MPa)
        (4257, 685)
        """
        args = _Args("h_pT", p=p, T=T)
        pp, TT = args.flat
        r = self._pT(pp, TT, phase, ["h", "cp", "dhdp"], where)
        return args.out(r["h"]), args.out(r["cp"]), args.out(r["dhdp"])

    def enthalpy_pT(self, p, T, phase=None, *, where=None):
        """Specific enthalpy at (p, T) only (no derivatives) [J/kg].

        Same rules as :meth:`state_pT`; the cheapest way to many enthalpies.

        Examples
        --------
        >>> round(get_fluid("water").enthalpy_pT(3e6, 500.0) / 1e3, 6)  # IF97 Table 5
        975.542239
        """
        args = _Args("enthalpy_pT", p=p, T=T)
        pp, TT = args.flat
        return args.out(self._pT(pp, TT, phase, ["h"], where)["h"])

    def s_pT(self, p, T, phase=None, *, where=None):
        """Specific entropy at (p, T) [J/(kg K)].

        Same rules as :meth:`state_pT`.

        Examples
        --------
        >>> round(get_fluid("water").s_pT(3e6, 500.0) / 1e3, 8)  # IF97 Table 5
        2.58041912
        """
        args = _Args("s_pT", p=p, T=T)
        pp, TT = args.flat
        return args.out(self._pT(pp, TT, phase, ["s"], where)["s"])

    # ---- (p, h) and (p, s) --------------------------------------------------------
    def _sat_side_values(self, p, key):
        """Saturated-liquid and -vapour values of h or s at p (flat arrays, p < pc)."""
        CP = self._CP
        if self.is_if97:
            # Evaluate just inside each side and step to Tsat along the isobar (the
            # IF97 fast path rejects states exactly on the line); the 1 mK step leaves
            # an error below cp * 1e-3 K * 1e-3 relative, i.e. far below 1e-3 J/kg.
            ts = _if97_tsat(p)
            d = 1e-3
            lo, _ = self._fast(CP.PT_INPUTS, p, ts - d, [key, "cp"])
            hi, _ = self._fast(CP.PT_INPUTS, p, ts + d, [key, "cp"])
            if key == "h":
                return lo["h"] + lo["cp"] * d, hi["h"] - hi["cp"] * d
            return lo["s"] + lo["cp"] * np.log(ts / (ts - d)), hi["s"] - hi["cp"] * np.log(
                (ts + d) / ts
            )
        f, _, _ = self._loop(CP.PQ_INPUTS, p, np.zeros(p.size), [key])
        g, _, _ = self._loop(CP.PQ_INPUTS, p, np.ones(p.size), [key])
        return f[key], g[key]

    def _solve_T(self, p, target, key, where):
        """T, quality and side for (p, h) or (p, s) inputs (flat arrays).

        Returns ``T, x, two_phase, side`` with side +1 vapour/gas, -1 liquid, 0 above
        the critical pressure.
        """
        CP = self._CP
        pair = CP.HmassP_INPUTS if key == "h" else CP.PSmass_INPUTS
        n = p.size
        valid = ~np.isnan(p) & ~np.isnan(target)
        if self.is_if97 and key == "h":
            res, ok = self._fast(pair, target, p, ["T", "x"])
            err = None
        elif self.is_if97:
            res, ok, err = self._loop(pair, p, target, ["T", "x"])
        else:
            a, b = (target, p) if key == "h" else (p, target)
            res, ok, err = self._loop(pair, a, b, ["T", "x"])
        failed = valid & ~ok
        if failed.any():
            i = int(np.flatnonzero(failed)[0])
            state = _fmt_state(p[i], h=target[i]) if key == "h" else _fmt_state(p[i], s=target[i])
            detail = f" (CoolProp: {err})" if err else ""
            raise PropertyRangeError(
                f"{_prefix(where)}{state} is outside the range of {self.formulation} for "
                f"{self.name}{_range_hint(self)}.{detail}" + _more(failed)
            )
        # a NaN input is a gap: its state is NaN, whatever the backend made of it
        T = np.where(valid, res["T"], np.nan)
        x = np.where(valid, res["x"], np.nan)
        two = (x >= 0) & (x <= 1) & (p < self.p_critical)
        side = np.zeros(n)
        if not self.is_if97:
            tsat = self._tsat_or_nan(p)
            side = np.where(p < self.p_critical, np.where(T < tsat, -1.0, 1.0), 0.0)
            side[two] = 0.0
            return T, np.where(two, x, np.nan), two, side
        # IF97: CoolProp's (p, h) and (p, s) use the backward equations alone, whose
        # temperature may be off by up to 25 mK (region 1) or 10 mK (region 2), IF97 Table
        # 3; Newton steps on the forward equation make h(p, T) reproduce the input exactly.
        sub = (p < self.p_critical) & ~two & valid
        tsat = np.full(n, np.nan)
        tsat[sub] = _if97_tsat(p[sub])
        side[sub] = np.where(T[sub] < tsat[sub], -1.0, 1.0)
        # Near the line the backward T may sit on the wrong side: decide by the
        # saturated values there.
        close = sub & (np.abs(T - tsat) < 0.1)
        if close.any():
            f, g = self._sat_side_values(p[close], key)
            tc = target[close]
            side[close] = np.where(tc <= f, -1.0, np.where(tc >= g, 1.0, side[close]))
        single = valid & ~two
        if single.any():
            idx = np.flatnonzero(single)
            Ti = T[idx].copy()
            pi, ti, si = p[idx], target[idx], side[idx]
            phase_of = {-1.0: "liquid", 1.0: "vapour", 0.0: "supercritical"}
            for _ in range(3):
                val = np.empty(idx.size)
                cp = np.empty(idx.size)
                for sv in (-1.0, 0.0, 1.0):
                    m = si == sv
                    if not m.any():
                        continue
                    ph = phase_of[sv] if sv != 0.0 else None
                    r = self._pT_quiet(pi[m], Ti[m], ph, [key, "cp"])
                    val[m], cp[m] = r[key], r["cp"]
                slope = cp if key == "h" else cp / Ti
                step = (val - ti) / slope
                # keep the iterate on its side of the line (and never on it)
                Tn = Ti - step
                ts = tsat[idx]
                Tn = np.where(si < 0, np.minimum(Tn, ts - 1e-6), Tn)
                Tn = np.where(si > 0, np.maximum(Tn, ts + 1e-6), Tn)
                ok_step = np.isfinite(Tn)
                Ti = np.where(ok_step, Tn, Ti)
                if np.all(np.abs(step[ok_step]) < 1e-9 * Ti[ok_step]):
                    break
            T = T.copy()
            T[idx] = Ti
        return T, np.where(two, x, np.nan), two, side

    def _pT_quiet(self, p, T, phase, keys):
        """(p, T) on a known side without the ambiguity error (used inside solvers)."""
        margin = self.saturation_margin
        tsat = self._tsat_or_nan(p)
        near = np.abs(T - tsat) <= margin
        T_eval = T
        if phase == "liquid":
            T_eval = np.where(near, tsat - margin, T)
        elif phase == "vapour":
            T_eval = np.where(near, tsat + margin, T)
        else:
            near = np.zeros(p.size, dtype=bool)
        need = list(dict.fromkeys([*keys, "cp"]))
        res, _, _ = self._raw_pT(p, T_eval, need)
        if near.any():
            Ta = T_eval[near]
            cpa = res["cp"][near]
            if "h" in res:
                res["h"][near] += cpa * (T[near] - Ta)
            if "s" in res:
                res["s"][near] += cpa * np.log(T[near] / Ta)
        return res

    def _state_from(self, p, target, key, where):
        T, x, two, side = self._solve_T(p, target, key, where)
        n = p.size
        out = {k: np.full(n, np.nan) for k in ("h", "s", "cp", "rho", "dhdp")}
        out[key] = target.copy()
        other = "s" if key == "h" else "h"
        single = ~two & ~np.isnan(T)
        if single.any():
            phase_of = {-1.0: "liquid", 1.0: "vapour", 0.0: None}
            for sv in (-1.0, 0.0, 1.0):
                m = single & (side == sv)
                if not m.any():
                    continue
                r = self._pT_quiet(p[m], T[m], phase_of[sv], [other, "cp", "rho", "dhdp"])
                for k in (other, "cp", "rho", "dhdp"):
                    out[k][m] = r[k]
        if two.any():
            r, _, _ = self._loop(self._CP.PQ_INPUTS, p[two], x[two], [other, "rho"])
            out[other][two] = r[other]
            out["rho"][two] = r["rho"]
        return T, x, out

    def state_ph(self, p, h, *, where=None) -> State:
        """State from pressure and specific enthalpy.

        Parameters
        ----------
        p : float, array or Series [Pa]
        h : float, array or Series [J/kg]
        where : str, optional
            Names the stream in error messages.

        Returns
        -------
        State
            ``x`` is the quality inside the two-phase region (NaN outside), where
            ``cp`` and the derivatives are NaN.

        Raises
        ------
        PropertyRangeError
            State outside the range of the equation of state.

        Notes
        -----
        For ``"water"`` CoolProp's IF97 backend returns the temperature of the backward
        equation T(p, h) (IF97 Eq. 11 and 22), consistent with the forward equations to
        25 mK; perftest refines it by Newton steps
        :math:`T_{k+1} = T_k - [h(p, T_k) - h]/c_p` so that the returned state
        reproduces the given enthalpy to 1e-9 relative.  Other fluids use CoolProp's
        iterative HEOS solver.

        References
        ----------
        .. [1] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation
           1997 for the Thermodynamic Properties of Water and Steam.

        Examples
        --------
        >>> st = get_fluid("water").state_ph(1e6, 1.5e6)
        >>> round(st.T, 3), round(st.x, 4)
        (453.036, 0.366)
        """
        args = _Args("state_ph", p=p, h=h)
        pp, hh = args.flat
        T, x, out = self._state_from(pp, hh, "h", where)
        return self._make_state(args, pp, T, out, x)

    def state_ps(self, p, s, *, where=None) -> State:
        """State from pressure and specific entropy.

        Parameters
        ----------
        p : float, array or Series [Pa]
        s : float, array or Series [J/(kg K)]
        where : str, optional
            Names the stream in error messages.

        Returns
        -------
        State

        Raises
        ------
        PropertyRangeError
            State outside the range of the equation of state.

        Notes
        -----
        As :meth:`state_ph`, with the backward equations T(p, s) (IF97 Eq. 13 and 25)
        refined by Newton steps on :math:`(\\partial s/\\partial T)_p = c_p/T`.

        References
        ----------
        .. [1] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation
           1997 for the Thermodynamic Properties of Water and Steam.

        Examples
        --------
        >>> round(get_fluid("water").state_ps(3e6, 500.0).T, 2)  # backward eq.: 307.84
        307.85
        """
        args = _Args("state_ps", p=p, s=s)
        pp, ss = args.flat
        T, x, out = self._state_from(pp, ss, "s", where)
        return self._make_state(args, pp, T, out, x)

    def _make_state(self, args, pp, T, out, x):
        return State(
            p=args.out(pp),
            T=args.out(T),
            h=args.out(out["h"]),
            s=args.out(out["s"]),
            cp=args.out(out["cp"]),
            rho=args.out(out["rho"]),
            x=args.out(x),
            dh_dT_p=args.out(out["cp"]),
            dh_dp_T=args.out(out["dhdp"]),
        )

    def T_ph(self, p, h, *, where=None):
        """Temperature from pressure and enthalpy [K] (see :meth:`state_ph`).

        Examples
        --------
        >>> round(get_fluid("water").T_ph(3e6, 500e3), 3)  # backward eq. (Table 7): 391.799
        391.792
        """
        args = _Args("T_ph", p=p, h=h)
        pp, hh = args.flat
        T, _, _, _ = self._solve_T(pp, hh, "h", where)
        return args.out(T)

    def s_ph(self, p, h, *, where=None):
        """Specific entropy from pressure and enthalpy [J/(kg K)] (see :meth:`state_ph`).

        Examples
        --------
        >>> round(get_fluid("water").s_ph(3e6, 115331.273), 1)   # IF97 Table 5: 392.3
        392.3
        """
        return self.state_ph(p, h, where=where).s

    # ---- saturated and wet states -------------------------------------------------
    def _check_quality(self, x, func, where):
        bad = (x < 0) | (x > 1)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{_prefix(where)}the quality 'x' of {func} must lie between 0 and 1. "
                f"Got {x[i]!r}.",
                parameter="x",
            )

    def _wet(self, pair, a, b, pp_or_none, func, where, label):
        res, ok, err = self._loop(pair, a, b, ["T", "p", "h", "s", "rho"])
        valid = ~np.isnan(a) & ~np.isnan(b)
        failed = valid & ~ok
        if failed.any():
            i = int(np.flatnonzero(failed)[0])
            detail = f" (CoolProp: {err})" if err else ""
            raise PropertyRangeError(
                f"{_prefix(where)}{label(i)} is not a saturated or wet state of {self.name}; "
                f"the saturation line ends at the critical point "
                f"({self.p_critical / 1e6:.6g} MPa, {self.T_critical:.3f} K).{detail}"
                + _more(failed)
            )
        return res

    def state_px(self, p, x, *, where=None) -> State:
        """Saturated or wet state from pressure and quality.

        Parameters
        ----------
        p : float, array or Series [Pa]
            Below the critical pressure.
        x : float, array or Series [-]
            Vapour quality, 0 (saturated liquid) to 1 (saturated vapour).
        where : str, optional

        Returns
        -------
        State
            ``cp`` and the derivatives are NaN (undefined on the saturation line).

        Notes
        -----
        :math:`h = h' + x (h'' - h')`, likewise s and specific volume, with the
        saturated values from CoolProp (IF97 regions 1 and 2 at :math:`T_s(p)` for
        ``"water"``).

        Examples
        --------
        >>> round(get_fluid("water").state_px(1e5, 0.0).T, 6)   # IF97 Table 36
        372.755919
        """
        args = _Args("state_px", p=p, x=x)
        pp, xx = args.flat
        self._check_quality(xx, "state_px", where)
        res = self._wet(
            self._CP.PQ_INPUTS,
            pp,
            xx,
            pp,
            "state_px",
            where,
            lambda i: _fmt_state(pp[i], x=xx[i]),
        )
        nan = np.full(pp.size, np.nan)
        return State(
            p=args.out(pp),
            T=args.out(res["T"]),
            h=args.out(res["h"]),
            s=args.out(res["s"]),
            cp=args.out(nan),
            rho=args.out(res["rho"]),
            x=args.out(xx),
            dh_dT_p=args.out(nan),
            dh_dp_T=args.out(nan),
        )

    def state_Tx(self, T, x, *, where=None) -> State:
        """Saturated or wet state from temperature and quality.

        Parameters
        ----------
        T : float, array or Series [K]
            Below the critical temperature.
        x : float, array or Series [-]
            Vapour quality, 0 to 1.
        where : str, optional

        Returns
        -------
        State
            ``cp`` and the derivatives are NaN.

        Examples
        --------
        >>> round(get_fluid("water").state_Tx(500.0, 1.0).p / 1e6, 8)   # IF97 Table 35
        2.63889776
        """
        args = _Args("state_Tx", T=T, x=x)
        TT, xx = args.flat
        self._check_quality(xx, "state_Tx", where)
        res = self._wet(
            self._CP.QT_INPUTS,
            xx,
            TT,
            None,
            "state_Tx",
            where,
            lambda i: f"T = {TT[i]:.2f} K, x = {xx[i]:.4g}",
        )
        nan = np.full(TT.size, np.nan)
        return State(
            p=args.out(res["p"]),
            T=args.out(TT),
            h=args.out(res["h"]),
            s=args.out(res["s"]),
            cp=args.out(nan),
            rho=args.out(res["rho"]),
            x=args.out(xx),
            dh_dT_p=args.out(nan),
            dh_dp_T=args.out(nan),
        )

    # ---- exergy -------------------------------------------------------------------
    def dead_state(self, T0, p0, *, where="dead state"):
        """Enthalpy and entropy at the dead (environment) state.

        Parameters
        ----------
        T0 : float, array or Series [K]
            Dead-state temperature.
        p0 : float, array or Series [Pa]
            Dead-state pressure.

        Returns
        -------
        h0 : [J/kg]
        s0 : [J/(kg K)]

        Notes
        -----
        Water at the usual dead state (25 °C, 1 atm) is liquid; it is evaluated as
        liquid so that a dead state within the saturation margin still has a value.
        Other fluids are evaluated at (p0, T0) as they are.

        Examples
        --------
        >>> h0, s0 = get_fluid("water").dead_state(298.15, 101325.0)
        >>> round(h0 / 1e3, 2), round(s0 / 1e3, 4)
        (104.93, 0.3672)
        """
        phase = "liquid" if self.coolprop_name == "Water" else None
        args = _Args("dead_state", T0=T0, p0=p0)
        TT, pp = args.flat
        r = self._pT(pp, TT, phase, ["h", "s"], where)
        return args.out(r["h"]), args.out(r["s"])


def _more(mask) -> str:
    n = int(np.count_nonzero(mask))
    return f" ({n - 1} more state(s) in this call have the same problem.)" if n > 1 else ""


def _range_hint(fluid: Fluid) -> str:
    if fluid.is_if97:
        return (
            " (valid: 273.15 K <= T <= 1073.15 K at p <= 100 MPa, and 1073.15 K < T <= "
            "2273.15 K at p <= 50 MPa)"
        )
    return ""


# --------------------------------------------------------------------------------------
# exergy
# --------------------------------------------------------------------------------------
def specific_exergy(h, s, h0, s0, T0):
    """Specific flow exergy (physical part) of a stream.

    Parameters
    ----------
    h : float, array or Series [J/kg]
        Specific enthalpy of the stream.
    s : float, array or Series [J/(kg K)]
        Specific entropy of the stream.
    h0, s0 : float, array or Series [J/kg], [J/(kg K)]
        Enthalpy and entropy of the same fluid at the dead state
        (:meth:`Fluid.dead_state`).
    T0 : float, array or Series [K]
        Dead-state temperature.

    Returns
    -------
    e : same kind as `h` [J/kg]

    Notes
    -----
    .. math:: e = (h - h_0) - T_0 (s - s_0)

    kinetic, potential and chemical parts left out [1].  Zero at the dead state and
    positive at every other state of a simple compressible substance.

    References
    ----------
    .. [1] A. Bejan, G. Tsatsaronis, M. Moran, Thermal Design and Optimization,
       Wiley, 1996, Eq. 3.13.

    Examples
    --------
    >>> specific_exergy(3.0e6, 7000.0, 1.0e5, 350.0, 300.0)
    905000.0
    """
    args = _Args("specific_exergy", h=h, s=s, h0=h0, s0=s0, T0=T0)
    hh, ss, h0_, s0_, t0 = args.flat
    bad = t0 <= 0
    if bad.any():
        raise InputError(
            "The 'T0' parameter of specific_exergy must be an absolute temperature [K] "
            f"above zero. Got {t0[np.flatnonzero(bad)[0]]!r}.",
            parameter="T0",
        )
    return args.out((hh - h0_) - t0 * (ss - s0_))


# --------------------------------------------------------------------------------------
# humid air
# --------------------------------------------------------------------------------------
_HA_INPUT = {
    "relative_humidity": "R",
    "humidity_ratio": "W",
    "wet_bulb": "B",
    "dew_point": "D",
}


def humid_air_state(
    T,
    p,
    *,
    relative_humidity=None,
    humidity_ratio=None,
    wet_bulb=None,
    dew_point=None,
    where=None,
) -> HumidAir:
    """Psychrometric state of moist air.

    Give the dry-bulb temperature, the total pressure and exactly one of the moisture
    inputs.

    Parameters
    ----------
    T : float, array or Series [K]
        Dry-bulb temperature.
    p : float, array or Series [Pa]
        Total (barometric) pressure.
    relative_humidity : float, array or Series [-], optional
        0 to 1 (not percent).
    humidity_ratio : float, array or Series [kg/kg], optional
        Mass of water vapour per mass of dry air.
    wet_bulb : float, array or Series [K], optional
        Thermodynamic wet-bulb temperature.
    dew_point : float, array or Series [K], optional
        Dew-point temperature.
    where : str, optional
        Names the measurement in error messages.

    Returns
    -------
    HumidAir

    Raises
    ------
    InputError
        Not exactly one moisture input, or relative humidity outside 0..1.
    PropertyRangeError
        A state CoolProp's humid-air model cannot evaluate (e.g. dew point above the
        dry bulb).

    Notes
    -----
    CoolProp's ``HAPropsSI`` implements the real-gas humid-air model of Herrmann,
    Kretzschmar and Gatley [1] (ASHRAE RP-1485), with enhancement factors and virial
    coefficients; it reduces to the ideal relations
    :math:`W = 0.621945\\, p_w / (p - p_w)` at low pressure.

    References
    ----------
    .. [1] S. Herrmann, H.-J. Kretzschmar, D. P. Gatley, Thermodynamic Properties of
       Real Moist Air, Dry Air, Steam, Water, and Ice, ASHRAE RP-1485, 2009.

    Examples
    --------
    >>> ha = humid_air_state(293.15, 101325.0, relative_humidity=1.0)
    >>> round(ha.humidity_ratio, 5)
    0.01476
    """
    given = {
        k: v
        for k, v in {
            "relative_humidity": relative_humidity,
            "humidity_ratio": humidity_ratio,
            "wet_bulb": wet_bulb,
            "dew_point": dew_point,
        }.items()
        if v is not None
    }
    if len(given) != 1:
        raise InputError(
            "humid_air_state needs exactly one of relative_humidity, humidity_ratio, "
            f"wet_bulb, dew_point. Got {sorted(given) or 'none'}."
        )
    ((kind, value),) = given.items()
    HAPropsSI = _ha_props_si()

    args = _Args("humid_air_state", T=T, p=p, value=value)
    TT, pp, vv = args.flat
    if kind == "relative_humidity" and ((vv < 0) | (vv > 1)).any():
        bad = vv[(vv < 0) | (vv > 1)][0]
        raise InputError(
            f"{_prefix(where)}relative_humidity must be a fraction between 0 and 1 (not "
            f"percent). Got {bad!r}.",
            parameter="relative_humidity",
        )
    key = _HA_INPUT[kind]
    outs = {
        "relative_humidity": "R",
        "humidity_ratio": "W",
        "wet_bulb": "B",
        "dew_point": "D",
        "h": "Hda",
        "volume": "Vda",
    }
    res = {k: np.full(TT.size, np.nan) for k in outs}
    for i in range(TT.size):
        if TT[i] != TT[i] or pp[i] != pp[i] or vv[i] != vv[i]:
            continue
        for k, code in outs.items():
            if k == kind:
                res[k][i] = vv[i]
                continue
            try:
                res[k][i] = HAPropsSI(code, "T", TT[i], "P", pp[i], key, vv[i])
            except (ValueError, IndexError, RuntimeError) as exc:
                raise PropertyRangeError(
                    f"{_prefix(where)}humid air at T = {TT[i]:.2f} K, p = {pp[i]:.6g} Pa, "
                    f"{kind} = {vv[i]:.6g} cannot be evaluated: {exc}"
                ) from None
            if not math.isfinite(res[k][i]):
                raise PropertyRangeError(
                    f"{_prefix(where)}humid air at T = {TT[i]:.2f} K, p = {pp[i]:.6g} Pa, "
                    f"{kind} = {vv[i]:.6g} is not a physical state (check that the dew "
                    "point and wet bulb do not exceed the dry bulb)."
                )
    return HumidAir(
        T=args.out(TT),
        p=args.out(pp),
        relative_humidity=args.out(res["relative_humidity"]),
        humidity_ratio=args.out(res["humidity_ratio"]),
        wet_bulb=args.out(res["wet_bulb"]),
        dew_point=args.out(res["dew_point"]),
        h=args.out(res["h"]),
        volume=args.out(res["volume"]),
    )
