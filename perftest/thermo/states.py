"""The result of a pure-fluid property call: :class:`State`."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["State"]


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


def make_state(args, pp, T, out, x):
    """Shape the flat arrays of a (p, h) or (p, s) solve into a :class:`State`."""
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
