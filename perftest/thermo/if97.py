"""IAPWS-IF97 region 4: the saturation line of water, explicit in both directions.

Evaluated in numpy because the IF97 backend's fast array path does not take
saturation inputs; tests check it against CoolProp's own PQ/QT updates.

References
----------
.. [1] IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997 for
   the Thermodynamic Properties of Water and Steam.
"""

from __future__ import annotations

import numpy as np

# IAPWS R7-97(2012), Table 34: coefficients of the saturation equation (Eq. 30, 31).
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
#: Critical pressure [Pa] and temperature [K], IAPWS R7-97(2012) Eq. 2 and 3.
P_CRITICAL = 22.064e6
T_CRITICAL = 647.096
#: Saturation pressure at 273.15 K from Eq. 30 [Pa].
P_TRIPLE = 611.212677
#: Lowest temperature of the formulation [K].
T_MIN = 273.15


def if97_psat(T):
    """Saturation pressure [Pa] at `T` [K] (ndarray), IF97 Eq. 30 [1]."""
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N4
    th = T + n9 / (T - n10)
    a = th * th + n1 * th + n2
    b = n3 * th * th + n4 * th + n5
    c = n6 * th * th + n7 * th + n8
    return (2.0 * c / (-b + np.sqrt(b * b - 4.0 * a * c))) ** 4 * 1e6


def if97_tsat(p):
    """Saturation temperature [K] at `p` [Pa] (ndarray), IF97 Eq. 31 [1]."""
    n1, n2, n3, n4, n5, n6, n7, n8, n9, n10 = _N4
    beta = (p / 1e6) ** 0.25
    e = beta * beta + n3 * beta + n6
    f = n1 * beta * beta + n4 * beta + n7
    g = n2 * beta * beta + n5 * beta + n8
    d = 2.0 * g / (-f - np.sqrt(f * f - 4.0 * e * g))
    return (n10 + d - np.sqrt((n10 + d) ** 2 - 4.0 * (n9 + n10 * d))) / 2.0
