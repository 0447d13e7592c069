"""Honesty of the random uncertainty of a mean on slowly wandering signals (long check).

numpy Monte Carlo: first-order autoregressive records x_t = phi x_{t-1} + e_t with
phi = exp(-1/tau) (tau the time constant in samples, the e-folding lag of the
autocorrelation; the integrated autocorrelation time (1+phi)/(1-phi) is about
2 tau), started stationary.  For each tau the spread of the record means over
``--records`` records is the true standard uncertainty of one mean; it is printed
over the mean and over the rms of the u that
``perftest.run.stats.random_uncertainty_of_mean`` reports, with the share of 95 %
intervals mean +- t(0.975, nu) u (nu from ``perftest.run.stats.mean_dof``) that hold
the true mean.  Target (issue 16): spread / mean u within 0.95-1.10 and coverage
near 95 % for tau up to a tenth of the record (120 samples: tau 1, 5, 10, 12).  The
suite runs the same checks at fewer time constants (tests/run/test_stats.py).

Usage::

    python benchmarks/bench_mean_uncertainty.py [--samples 120] [--records 20000]
"""

from __future__ import annotations

import argparse
import math

import numpy as np
from scipy.signal import lfilter
from scipy.stats import t as t_dist

from perftest.run import stats


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--samples", type=int, default=120)
    ap.add_argument("--records", type=int, default=20000)
    ap.add_argument("--seed", type=int, default=2031)
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)
    n, reps = args.samples, args.records
    ok = True
    print(f"{n} samples per record, {reps} records; spread of means / reported u")
    for tau in (0.01, 1, 2, 5, 8, 10, 12, 15, 20):
        phi = math.exp(-1.0 / tau)
        e = rng.normal(size=(n, reps))
        e[0] /= math.sqrt(1.0 - phi**2)
        x = lfilter([1.0], [1.0, -phi], e, axis=0)
        spread = np.std(x.mean(axis=0), ddof=1)
        _, mean, _, _, u, dof = stats.mean_statistics(x, with_dof=True)
        r_rms = spread / math.sqrt(np.mean(u**2))
        r_mean = spread / np.mean(u)
        cover = float(np.mean(np.abs(mean) <= t_dist.ppf(0.975, dof) * u))
        target = tau <= n / 10
        good = 0.95 <= r_mean <= 1.10 and 0.93 <= cover <= 0.97
        ok &= good or not target
        flag = ("PASS" if good else "FAIL") if target else "(beyond n/10)"
        print(
            f"tau {tau:6.2f}: / mean u {r_mean:.3f}   / rms u {r_rms:.3f}   "
            f"95 % t-interval coverage {cover:.3f}   {flag}"
        )
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
