"""Speed of water properties from (p, T) against a bare CoolProp loop.

Reference (measured in the same run): a plain Python loop over
``AbstractState("IF97", "Water").update(PT_INPUTS, p, T)`` + ``hmass()``.
Target: 100,000 enthalpies at most 1.5x the reference time.  The calls that return
more than one quantity are reported against the same reference for information, with
the number of CoolProp evaluations per state they need.

Run:  python benchmarks/bench_properties.py
"""

from __future__ import annotations

import time

import CoolProp.CoolProp as CP
import numpy as np

from perftest.thermo.properties import get_fluid

N = 100_000
TARGET = 1.5


def _best(func, repeat=3):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - t0)
    return best


def main():
    rng = np.random.default_rng(20240501)
    # compressed liquid and superheated steam well away from the saturation line
    p = rng.uniform(1e5, 2e7, N)
    T = np.where(rng.random(N) < 0.5, rng.uniform(280.0, 370.0, N), rng.uniform(700.0, 850.0, N))
    water = get_fluid("water")
    state = CP.AbstractState("IF97", "Water")

    def reference():
        out = np.empty(N)
        for i in range(N):
            state.update(CP.PT_INPUTS, p[i], T[i])
            out[i] = state.hmass()
        return out

    t_ref = _best(reference)
    np.testing.assert_allclose(water.enthalpy_pT(p, T), reference(), rtol=1e-14)
    t_h = _best(lambda: water.enthalpy_pT(p, T))
    t_hd = _best(lambda: water.h_pT(p, T))
    t_state = _best(lambda: water.state_pT(p, T))
    ratio = t_h / t_ref
    print(f"reference loop (update + hmass), {N} states: {t_ref:.3f} s")
    print(
        f"Fluid.enthalpy_pT  (h; 1 evaluation/state):        {t_h:.3f} s  "
        f"ratio {ratio:.2f}  {'PASS' if ratio <= TARGET else 'FAIL'} (target <= {TARGET})"
    )
    print(
        f"Fluid.h_pT         (h, cp, dh/dp; 4 evaluations):  {t_hd:.3f} s  "
        f"ratio {t_hd / t_ref:.2f}  (information)"
    )
    print(
        f"Fluid.state_pT     (h, s, cp, rho, dh/dp; 6 eval.): {t_state:.3f} s  "
        f"ratio {t_state / t_ref:.2f}  (information)"
    )


if __name__ == "__main__":
    main()
