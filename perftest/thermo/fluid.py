"""The pure-fluid handle :class:`Fluid` and its lookup by name, :func:`get_fluid`.

A :class:`Fluid` holds the state (CoolProp ``AbstractState``, critical and triple
points, the saturation margin); its methods are a few lines each that call the module
functions doing the work:

* :mod:`perftest.thermo.single_phase`: (p, T) inputs and the saturation-margin rules;
* :mod:`perftest.thermo.inverse`: (p, h) and (p, s) inputs;
* :mod:`perftest.thermo.saturation`: the saturation line and wet states;
* :mod:`perftest.thermo.exergy`: the dead state;
* :mod:`perftest.thermo.backend`: the raw CoolProp calls underneath all of them.
"""

from __future__ import annotations

import difflib
import functools
import math
import re

import perftest.thermo.exergy as exergy
import perftest.thermo.inverse as inverse
import perftest.thermo.saturation as saturation
import perftest.thermo.single_phase as single_phase
from perftest.errors import InputError
from perftest.thermo.coolprop_core import _coolprop
from perftest.thermo.if97 import P_CRITICAL, P_TRIPLE, T_CRITICAL, T_MIN
from perftest.thermo.states import State

__all__ = ["Fluid", "get_fluid", "fluid_names"]

_MIN_MARGIN = 1e-3  # [K] the margin must exceed the saturation shift of the FD stencil


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

    Notes
    -----
    A thin handle: the object holds the CoolProp ``AbstractState`` (``_as``), the
    compiled core (``_CP``), the output keys and getters and the fluid's limits; every
    method calls one function of :mod:`~perftest.thermo.single_phase`,
    :mod:`~perftest.thermo.inverse`, :mod:`~perftest.thermo.saturation` or
    :mod:`~perftest.thermo.exergy`, which take the Fluid as first argument.
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
            self.T_critical, self.p_critical = T_CRITICAL, P_CRITICAL
            self.T_min, self.p_triple = T_MIN, P_TRIPLE
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
        # fast_evaluate output codes per tuple of keys (backend.out_keys) and the
        # bounds of the quick saturation test (single_phase.far_from_saturation)
        self._out_codes = {}
        self._screen = None
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
        return saturation.saturation_T(self, p, where=where)

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
        return saturation.saturation_p(self, T, where=where)

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
        return single_phase.state_pT(self, p, T, phase, where=where)

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
        return single_phase.h_pT(self, p, T, phase, where=where)

    def enthalpy_pT(self, p, T, phase=None, *, where=None):
        """Specific enthalpy at (p, T) only (no derivatives) [J/kg].

        Same rules as :meth:`state_pT`; the cheapest way to many enthalpies.

        Examples
        --------
        >>> round(get_fluid("water").enthalpy_pT(3e6, 500.0) / 1e3, 6)  # IF97 Table 5
        975.542239
        """
        return single_phase.enthalpy_pT(self, p, T, phase, where=where)

    def s_pT(self, p, T, phase=None, *, where=None):
        """Specific entropy at (p, T) [J/(kg K)].

        Same rules as :meth:`state_pT`.

        Examples
        --------
        >>> round(get_fluid("water").s_pT(3e6, 500.0) / 1e3, 8)  # IF97 Table 5
        2.58041912
        """
        return single_phase.s_pT(self, p, T, phase, where=where)

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
        return inverse.state_ph(self, p, h, where=where)

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
        return inverse.state_ps(self, p, s, where=where)

    def T_ph(self, p, h, *, where=None):
        """Temperature from pressure and enthalpy [K] (see :meth:`state_ph`).

        Examples
        --------
        >>> round(get_fluid("water").T_ph(3e6, 500e3), 3)  # backward eq. (Table 7): 391.799
        391.792
        """
        return inverse.T_ph(self, p, h, where=where)

    def s_ph(self, p, h, *, where=None):
        """Specific entropy from pressure and enthalpy [J/(kg K)] (see :meth:`state_ph`).

        Examples
        --------
        >>> round(get_fluid("water").s_ph(3e6, 115331.273), 1)   # IF97 Table 5: 392.3
        392.3
        """
        return inverse.s_ph(self, p, h, where=where)

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
        return saturation.state_px(self, p, x, where=where)

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
        return saturation.state_Tx(self, T, x, where=where)

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
        return exergy.dead_state(self, T0, p0, where=where)
