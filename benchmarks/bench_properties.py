"""Speed of water properties against plain CoolProp calls measured in the same run.

1. Many states.  Reference: a plain Python loop over
   ``AbstractState("IF97", "Water").update(PT_INPUTS, p, T)`` + ``hmass()``.
   Target: 100,000 enthalpies at most 1.5x the reference time.  The calls that return
   more than one quantity are reported against the same reference for information,
   with the number of CoolProp evaluations per state they need.

2. The property calls of one model residual (what ``PlantModel._properties`` asks of
   ``perftest.plant.states`` at a new point: h, cp and (dh/dp)_T from (p, T) of every
   state row, the saturation temperature and its slope), on the 42-stream cycle of
   ``bench_model.py`` and on the Brackenfold demo plant.  Reference: the CoolProp
   calls those values need, made directly with no checks: one ``fast_evaluate`` for
   h and cp and one for h at p +/- dp per group of streams, and the ``PQ_INPUTS``
   updates of the saturation line.  Targets: the model's property calls within 2.0x
   of that reference on the cycle and 2.5x on the demo plant, whose groups hold 1 to
   6 states so that the fixed cost of a call weighs more.  Before the lean paths of
   the property layer the ratios were 3.9 and 9.4 (same script, same machine, one
   run), so the targets ask for the layer's time per residual cut by 2x and 3.8x at
   least.  Also printed: the floor, the same CoolProp work with every (p, T) state
   in one pair of ``fast_evaluate`` calls (as the model now asks for them).

3. The states from (p, h) that a reconciliation reads once at its solution
   (``perftest.plant.states.state_ph``: T, s, rho, cp and (dh/dp)_T of every
   stream), for the water streams of the Brackenfold demo plant at its reconciled
   solution (9 streams, one of them wet) and of the 42-stream cycle at its true
   values.  Reference: the CoolProp calls those values need, made directly with no
   checks: one ``fast_evaluate`` of IF97's backward T(p, h) and the quality, Newton
   steps T -= (h(p, T) - h)/cp on the forward equation (one ``fast_evaluate`` of h
   and cp each) until every step is below 1e-9 T (at most 3, the layer's rule), one
   of s, cp and rho and one of h at p +/- dp for (dh/dp)_T, and a ``PQ_INPUTS``
   update per wet stream.  Targets: within TARGETS_PH of that reference, set from the
   ratios measured before the (p, h) path took one CoolProp call per Newton step
   (same script, same machine): the time per call cut by 2x at least on the demo
   plant and 1.7x on the cycle.

Run:  python benchmarks/bench_properties.py
"""

from __future__ import annotations

import os

# one BLAS thread, as the other benchmarks (the model's setup does small factorisations)
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import CoolProp.CoolProp as CP  # noqa: E402
import numpy as np  # noqa: E402

from perftest.thermo.properties import get_fluid  # noqa: E402

N = 100_000
TARGET = 1.5
# state_ph against plain CoolProp (section 3).  Before: 5.4 to 5.9 on the demo plant and
# 2.4 to 2.7 on the cycle (three runs).  Demo plant: half the larger.  Cycle: its time
# is mostly CoolProp's own (42 backward evaluations, three Newton steps), which leaves
# less to cut; 1.4 asks for 1.7x at least (measured 1.2 to 1.3 after, 2.0 to 2.2x).
TARGETS_PH = {"demo plant": 2.9, "42-stream cycle": 1.4}
HERE = Path(__file__).resolve().parent
DEMO = HERE.parent / "sample_data" / "brackenfold"


def _best(func, repeat=3):
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        best = min(best, time.perf_counter() - t0)
    return best


def _per_call_pair(f, g, n=200, repeat=15):
    """Best time of one call [s] of `f` and of `g`, their rounds of `n` calls alternating.

    Alternating rounds expose both to the same load of a shared machine.
    """
    best_f = best_g = np.inf
    for _ in range(repeat):
        best_f = min(best_f, _best(lambda: [f() for _ in range(n)], 1) / n)
        best_g = min(best_g, _best(lambda: [g() for _ in range(n)], 1) / n)
    return best_f, best_g


def _cycle_model():
    """The 42-stream cycle of bench_model.py at its true values."""
    from perftest import load_plant
    from perftest.plant import build_model

    sys.path.insert(0, str(HERE))
    import bench_model

    text, truth = bench_model.build(bench_model.STAGES)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "plant.toml"
        path.write_text(text, encoding="utf-8")
        plant = load_plant(path)
    model = build_model(plant)
    return model, np.array([truth[t] for t in model.measured])


def _demo_model():
    """The Brackenfold demo plant at the mean of its sample logs."""
    from perftest import load_plant, read_run
    from perftest.plant import build_model

    plant = load_plant(DEMO / "plant.toml")
    model = build_model(plant)
    run = read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant=plant)
    mean = run.average()
    return model, np.array([mean[t].value for t in model.measured])


def model_calls(name, model, x, target):
    """Time the property calls of one residual of `model` against plain CoolProp."""
    from perftest.plant.guess import initial_guess

    v = model.slot_values(x, initial_guess(model, x))
    groups = [(g[0], g[1], g[3], v[g[4]], v[g[5]]) for g in model._state_groups]
    sats = [(g[0], g[3], v[g[4]]) for g in model._sat_groups]
    quals = [(g[0], g[3], v[g[4]], v[g[6]]) for g in model._quality_groups]
    fluids = {g[0] for g in groups} | {g[0] for g in sats} | {g[0] for g in quals}
    if fluids != {"water"} or quals:
        raise SystemExit(f"{name}: the reference below covers IF97 water states only")

    def layer():
        model._prop_cache = ()  # a new point: nothing kept
        model._properties(v)

    AS = CP.AbstractState("IF97", "Water")
    h_cp = np.array([CP.iHmass, CP.iCpmass], dtype=np.int32)
    h_only = h_cp[:1].copy()

    def coolprop_calls(pairs):
        for p, T in pairs:
            n = p.size
            out = np.empty((n, 2))
            status = np.empty(n, dtype=np.int32)
            AS.fast_evaluate(CP.PT_INPUTS, p, T, h_cp, out, status)
            dp = 1e-5 * p
            out2 = np.empty((2 * n, 1))
            status2 = np.empty(2 * n, dtype=np.int32)
            pp, TT = np.concatenate((p + dp, p - dp)), np.concatenate((T, T))
            AS.fast_evaluate(CP.PT_INPUTS, pp, TT, h_only, out2, status2)
        for _, _, p in sats:
            for pi in p.tolist():
                AS.update(CP.PQ_INPUTS, pi, 0.0)
                AS.T(), AS.hmass(), AS.rhomass()
            for pi in p.tolist():
                AS.update(CP.PQ_INPUTS, pi, 1.0)
                AS.hmass(), AS.rhomass()

    per_group = [(p, T) for _, _, _, p, T in groups]
    together = [tuple(np.concatenate(z) for z in zip(*per_group, strict=True))]

    def plain():
        coolprop_calls(per_group)

    def floor():
        coolprop_calls(together)

    layer(), plain(), floor()  # warm up
    t_layer, t_plain = _per_call_pair(layer, plain)
    _, t_floor = _per_call_pair(layer, floor)
    ratio = t_layer / t_plain
    sizes = ", ".join(f"{ph} {p.size}" for _, ph, _, p, _ in groups)
    sizes += "".join(f", saturation {p.size}" for _, _, p in sats)
    print(
        f"{name} ({sizes}): property layer {t_layer * 1e6:.1f} us, plain CoolProp "
        f"{t_plain * 1e6:.1f} us per residual; ratio {ratio:.2f}  "
        f"{'PASS' if ratio <= target else 'FAIL'} (target <= {target}); floor (every "
        f"state in one call) {t_floor * 1e6:.1f} us, ratio {t_layer / t_floor:.2f}"
    )
    return ratio


def main():
    many_states()
    warnings.simplefilter("ignore")  # the demo logs carry flagged values on purpose
    model_calls("42-stream cycle", *_cycle_model(), target=2.0)
    model_calls("demo plant", *_demo_model(), target=2.5)
    state_calls("demo plant", *_demo_streams(), target=TARGETS_PH["demo plant"])
    state_calls("42-stream cycle", *_cycle_streams(), target=TARGETS_PH["42-stream cycle"])


def _demo_streams():
    """Pressure and enthalpy of the demo plant's water streams, reconciled."""
    from perftest import load_plant, read_run, reconcile

    plant = load_plant(DEMO / "plant.toml")
    run = read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant=plant)
    table = reconcile(plant, run.average()).streams
    water = table[table["fluid"] == "water"]
    return (
        tuple(water.index),
        water["pressure"].to_numpy(dtype=float),
        water["enthalpy"].to_numpy(dtype=float),
    )


def _cycle_streams():
    """Pressure and enthalpy of the 42-stream cycle's water streams at its true values."""
    from perftest.plant.guess import initial_guess

    model, x = _cycle_model()
    v = model.slot_values(x, initial_guess(model, x))
    sids = tuple(s for s, st in model.spec.streams.items() if st.fluid == "water")
    p = np.array([v[model.index[f"{s}.pressure"]] for s in sids])
    h = np.array([v[model.index[f"{s}.enthalpy"]] for s in sids])
    return sids, p, h


def state_calls(name, sids, p, h, target):
    """Time ``states.state_ph`` on the streams `sids` against plain CoolProp calls."""
    from perftest.plant import states

    AS = CP.AbstractState("IF97", "Water")
    codes = {
        k: np.array(v, dtype=np.int32)
        for k, v in (
            ("Tx", [CP.iT, CP.iQ]),
            ("hcp", [CP.iHmass, CP.iCpmass]),
            ("state", [CP.iSmass, CP.iCpmass, CP.iDmass]),
            ("h", [CP.iHmass]),
        )
    }

    def evaluate(pair, a, b, key):
        out = np.empty((a.size, codes[key].size))
        status = np.empty(a.size, dtype=np.int32)
        AS.fast_evaluate(pair, a, b, codes[key], out, status)
        return out

    def plain():
        Tx = evaluate(CP.HmassP_INPUTS, h, p, "Tx")
        wet = (Tx[:, 1] >= 0) & (Tx[:, 1] <= 1)
        one, ps, hs = ~wet, p[~wet], h[~wet]
        T = Tx[one, 0]
        for _ in range(3):
            hc = evaluate(CP.PT_INPUTS, ps, T, "hcp")
            step = (hc[:, 0] - hs) / hc[:, 1]
            T = T - step
            if (np.abs(step) < 1e-9 * T).all():
                break
        evaluate(CP.PT_INPUTS, ps, T, "state")
        dp = 1e-5 * ps
        evaluate(CP.PT_INPUTS, np.concatenate((ps + dp, ps - dp)), np.concatenate((T, T)), "h")
        for pi, xi in zip(p[wet].tolist(), Tx[wet, 1].tolist(), strict=True):
            AS.update(CP.PQ_INPUTS, pi, xi)
            AS.smass(), AS.rhomass()

    def layer():
        states.state_ph("water", p, h, sids)

    st = states.state_ph("water", p, h, sids)
    # h(p, T(p, h)) reproduces h (the Newton steps' stop test is 1e-9 K/K in T)
    single = np.isnan(st.x)
    back = np.array(
        [
            CP.PropsSI("H", "P", a, "T", b, "IF97::Water")
            for a, b in zip(p[single], st.T[single], strict=True)
        ]
    )
    np.testing.assert_allclose(back, h[single], rtol=1e-9)
    layer(), plain()  # warm up
    t_layer, t_plain = _per_call_pair(layer, plain, n=100)
    ratio = t_layer / t_plain
    print(
        f"{name} state_ph ({p.size} streams, {int((~single).sum())} wet): property layer "
        f"{t_layer * 1e6:.1f} us, plain CoolProp {t_plain * 1e6:.1f} us per call; ratio "
        f"{ratio:.2f}  {'PASS' if ratio <= target else 'FAIL'} (target <= {target})"
    )
    return ratio


def many_states():
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
