"""Honesty of u_random of the demo's wattmeter pair JT-101 over many regenerated runs.

The Brackenfold generator (sample_data/brackenfold/generate.py) is run with
``--seeds`` different seeds: each time its logs are written to a temporary folder,
read back with the bundled plant file, a fixed window is cut (``--hours`` long
from 10:00, after the unit has settled; default 2 h) or the steadiest window of
that length (``--steadiest``), and the window averaged.  Each meter's mean minus
the true value and the systematic offset the generator put into it is the random
error of the mean; its spread over the seeds is the true random standard
uncertainty, printed over the rms and the mean of the reported ``u_random`` for
the group JT-101 and for each member, with the share of 95 % t-intervals (lag-window
dof, ``perftest.run.stats.mean_dof``) that hold the truth.  Target (issue 16):
spread / mean u within about 10 % for the group.

Usage::

    python benchmarks/bench_demo_wander.py [--seeds 200] [--steadiest] [--hours 2]
"""

from __future__ import annotations

import argparse
import importlib.util
import math
import shutil
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats import t as t_dist

import perftest
from perftest.run import stats

HERE = Path(__file__).resolve().parent
GEN = HERE.parent / "sample_data" / "brackenfold" / "generate.py"
SCALE = {"JT-101A": 1e6, "JT-101B": 1e3}  # logged unit (MW, kW) to W


def _generator():
    spec = importlib.util.spec_from_file_location("_brackenfold_generate", GEN)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seeds", type=int, default=200)
    ap.add_argument("--first-seed", type=int, default=1)
    ap.add_argument("--steadiest", action="store_true")
    ap.add_argument("--hours", type=float, default=2.0, help="window length [h]")
    args = ap.parse_args()
    gen = _generator()
    balance = gen.solve_heat_balance()
    tmp = Path(tempfile.mkdtemp(prefix="perftest-wander-"))
    shutil.copy(GEN.parent / "plant.toml", tmp / "plant.toml")
    plant = perftest.load_plant(tmp / "plant.toml")
    names = ("JT-101", "JT-101A", "JT-101B")
    err = {k: [] for k in names}
    u = {k: [] for k in names}
    dof = {k: [] for k in names}
    try:
        for seed in range(args.first_seed, args.first_seed + args.seeds):
            hist, log, offsets = gen.make_logs(balance, np.random.default_rng(seed))
            gen.write_logs(hist, log, tmp)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                run = perftest.read_run([tmp / "historian.csv", tmp / "logger.csv"], plant)
                end = pd.Timestamp("2026-05-14 10:00:00") + pd.Timedelta(hours=args.hours)
                win = (
                    run.steadiest_window(f"{int(args.hours * 60)}min")
                    if args.steadiest
                    else run.window("2026-05-14 10:00:00", str(end))
                )
                m = win.average(tags=["JT-101A", "JT-101B"], keep_members=True, trend=False)
            tags = list(m.tags)
            x = win.data[["JT-101A", "JT-101B"]].to_numpy(dtype=float)
            nu = stats.mean_statistics(x, with_dof=True)[5]
            d = {"JT-101A": nu[0], "JT-101B": nu[1], "JT-101": min(nu)}
            e = {}
            for t in ("JT-101A", "JT-101B"):
                true = gen.INSTRUMENTS[t][2](balance) + offsets[t]  # logged unit
                e[t] = m.value[tags.index(t)] - true * SCALE[t]
            e["JT-101"] = 0.5 * (e["JT-101A"] + e["JT-101B"])
            for k in names:
                err[k].append(e[k])
                u[k].append(m.u_random[tags.index(k)])
                dof[k].append(d[k])
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    how = "steadiest" if args.steadiest else "fixed (from 10:00)"
    print(f"{args.seeds} regenerated demo runs, {how} {args.hours:g} h window")
    ok = True
    for k in names:
        ee, uu = np.asarray(err[k]), np.asarray(u[k])
        spread = float(np.std(ee, ddof=1))
        r_rms = spread / math.sqrt(float(np.mean(uu**2)))
        r_mean = spread / float(np.mean(uu))
        # relative standard error of a sample std over N seeds: 1/sqrt(2(N-1))
        se = 1.0 / math.sqrt(2.0 * (len(ee) - 1))
        # 95 % interval with Student's t at the lag-window dof (a group: its members'
        # fewest, as perftest.run.averaging does for correlated members)
        cover = float(np.mean(np.abs(ee) <= t_dist.ppf(0.975, np.asarray(dof[k])) * uu))
        print(
            f"{k:8s}: spread {spread:8.0f} W  mean u {np.mean(uu):8.0f} W  "
            f"spread/rms u {r_rms:.3f}  spread/mean u {r_mean:.3f}  (+- {se:.3f})  "
            f"t-interval coverage {cover:.3f}"
        )
        if k == "JT-101":
            ok = 0.9 <= r_mean <= 1.1
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
