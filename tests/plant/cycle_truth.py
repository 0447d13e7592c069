"""True states of the invented steam cycles that the plant tests reconcile.

The states are synthesised with CoolProp's IAPWS-IF97 backend
(``PropsSI(..., "IF97::Water")``), independently of the model's equations.
tests/plant/test_model.py (dry extraction) and tests/plant/test_model_wet.py (wet
extraction) share the cycle and differ in the extraction pressure and the heater.
"""

from __future__ import annotations

from types import SimpleNamespace

import CoolProp.CoolProp as CP

IF97 = "IF97::Water"


def h_pT(p, T):
    return CP.PropsSI("H", "P", p, "T", T, IF97)


def T_ph(p, h):
    """T(p, h) consistent with the forward equation h(p, T).

    CoolProp's IF97 (p, h) input uses the backward equations, which agree with the
    forward ones only to some 10 mK (IAPWS R7-97(2012), consistency of the backward
    equations, from memory); Newton steps on the forward equation remove that, so
    that synthesised data are consistent to rounding.
    """
    T = CP.PropsSI("T", "P", p, "H", h, IF97)
    for _ in range(4):
        T -= (h_pT(p, T) - h) / CP.PropsSI("C", "P", p, "T", T, IF97)
    return T


def steam_cycle(*, p_ex, p_fw, T_fw, p_dr, T_dr) -> SimpleNamespace:
    """States of a one-extraction steam cycle [SI units].

    Main steam 100 bar, 540 °C, 100 kg/s; turbine sections at an isentropic efficiency
    of 0.85, pump at 0.80; condenser 0.08 bar; cooling water 20 -> 30 °C (all invented).
    The extraction pressure ``p_ex``, the feedwater outlet ``(p_fw, T_fw)`` and the
    heater drain ``(p_dr, T_dr)`` are the caller's.  The extraction flow follows from
    the heater's energy balance, the turbine power and condenser heat from the others.

    Returns
    -------
    SimpleNamespace
        Every quantity under its local name (``m``, ``p_ms``, ``h_ex``, ``m_ex``, ``P_t``...).
    """
    m = 100.0
    p_ms, T_ms = 100e5, 813.15
    h_ms = h_pT(p_ms, T_ms)
    s_ms = CP.PropsSI("S", "P", p_ms, "T", T_ms, IF97)
    h_ex = h_ms - 0.85 * (h_ms - CP.PropsSI("H", "P", p_ex, "S", s_ms, IF97))
    p_exh = 0.08e5
    h_exh = h_ms - 0.85 * (h_ms - CP.PropsSI("H", "P", p_exh, "S", s_ms, IF97))
    p_cd, T_cd = 0.08e5, 312.15
    h_cd = h_pT(p_cd, T_cd)
    p_po = 110e5
    v_cd = 1.0 / CP.PropsSI("D", "P", p_cd, "T", T_cd, IF97)
    h_po = h_cd + v_cd * (p_po - p_cd) / 0.80
    h_fw = h_pT(p_fw, T_fw)
    h_dr = h_pT(p_dr, T_dr)
    m_ex = m * (h_fw - h_po) / (h_ex - h_dr)
    P_t = m * h_ms - m_ex * h_ex - (m - m_ex) * h_exh
    Q_c = (m - m_ex) * h_exh + m_ex * h_dr - m * h_cd
    p_cwi, T_cwi, p_cwo, T_cwo = 2.5e5, 293.15, 2.0e5, 303.15
    m_cw = Q_c / (h_pT(p_cwo, T_cwo) - h_pT(p_cwi, T_cwi))
    return SimpleNamespace(**locals())
