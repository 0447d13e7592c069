"""Speed of ``Run.average`` and ``Run.steadiest_window`` against bare pandas/numpy.

Each case is timed against references computed in the same run on the same data,
and the ratios perftest / reference are printed (best of ``--repeat`` calls, wall
clock).  There is no target yet: the ratios are for tracking.

average
    200 tags x 10,000 samples one second apart (first-order autoregressive noise,
    lag-one correlation 0.9, on different levels), no masked sample.
    References: (a) ``DataFrame.mean`` + ``DataFrame.std`` (the floor: no
    autocorrelation, no covariance); (b) the same random part as
    ``Run.average`` computed bare with numpy: mean, standard deviation, effective
    uncertainty of the mean from the FFT autocovariances (``perftest.run.stats``
    documents the rule: Sokal's window with the mean-bias correction).  The largest
    relative difference of u_random between perftest and (b) is printed as a check that
    both compute the same.
steadiest_window
    A day of one-minute data (1,440 samples) for 200 tags (pressures: the default
    permissible variation applies), windows of 60 minutes ending at every sample.
    References: (a) ``DataFrame.rolling("60min").std()``; (b) the rolling
    statistics the method needs, bare pandas: rolling count, mean, max, min and
    the four sums of the least-squares slope.

Usage::

    python benchmarks/bench_run.py [--tags 200] [--samples 10000] [--repeat 5]
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np
import pandas as pd
from scipy import fft as sfft
from scipy.signal import lfilter

from perftest.run.core import Run

PHI = 0.9  # lag-one correlation of the test signals


def best_of(func, repeat: int) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = func()
        best = min(best, time.perf_counter() - t0)
    return best, out


def signals(n: int, tags: int, freq: str, seed: int = 1) -> pd.DataFrame:
    """Autocorrelated noise around a level per tag, pressures in Pa."""
    rng = np.random.default_rng(seed)
    e = rng.normal(size=(n, tags))
    e[0] /= np.sqrt(1.0 - PHI * PHI)  # start stationary
    x = lfilter([1.0], [1.0, -PHI], e, axis=0)
    level = rng.uniform(1.0e5, 1.0e7, tags)
    idx = pd.date_range("2031-05-04", periods=n, freq=freq, tz="UTC")
    cols = [f"PT-{i:03d}" for i in range(tags)]
    return pd.DataFrame(level + 1.0e-4 * level * x, index=idx, columns=cols)


def bare_random_part(x: np.ndarray) -> np.ndarray:
    """u of the mean per column with numpy only (no masked samples), by the rule
    ``perftest.run.stats`` documents: autocovariances from the FFT, window sums
    V(M) = S(M) / (n - 1 - 2 sum (1 - k/n)), the first M >= 5 tau(M) with
    tau = n V / (2 (gamma_0 + V)), at most n // 2, V at least s^2 / (2 n)."""
    n = x.shape[0]
    k_max = n // 2
    d = x - x.mean(axis=0)
    nfft = sfft.next_fast_len(n + k_max + 1, real=True)
    f = sfft.rfft(d, nfft, axis=0)
    sums = sfft.irfft(f * np.conj(f), nfft, axis=0)[: k_max + 1]
    lags = np.arange(k_max + 1)
    gamma = sums / (n - lags)[:, None]
    w = (1.0 - lags[1:] / n)[:, None]
    S = gamma[0] + 2.0 * np.cumsum(w * gamma[1:], axis=0)
    denom = n - 1.0 - 2.0 * np.cumsum(w * np.ones_like(gamma[1:]), axis=0)
    V = np.where(denom > 0, S / denom, np.nan)
    tau = n * V / (2.0 * (gamma[0] + V))
    ok = (lags[1:, None] >= 4.0 * tau) & (denom > 0)
    last = k_max - 1 - np.argmax((denom > 0)[::-1], axis=0)
    first = np.where(ok.any(axis=0), np.argmax(ok, axis=0), last)
    v = V[first, np.arange(x.shape[1])]
    v = np.maximum(v, 0.5 * gamma[0] / (n - 1.0))
    return np.sqrt(v)


def bare_rolling(df: pd.DataFrame, window: str) -> pd.DataFrame:
    """The rolling statistics steadiest_window needs, straight from pandas."""
    t = (df.index - df.index[0]) / pd.Timedelta(seconds=1)
    tt = pd.DataFrame(np.repeat(np.asarray(t, float)[:, None], df.shape[1], axis=1), df.index)
    tt.columns = df.columns
    r = dict(window=window, min_periods=1)
    out = [
        df.notna().rolling(**r).sum(),
        df.rolling(**r).mean(),
        df.rolling(**r).max(),
        df.rolling(**r).min(),
        tt.rolling(**r).sum(),
        (tt * tt).rolling(**r).sum(),
        (tt * df).rolling(**r).sum(),
    ]
    return out[-1]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tags", type=int, default=200)
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args(argv)

    df = signals(args.samples, args.tags, "1s")
    quantities = dict.fromkeys(df.columns, "pressure")
    run = Run.from_frame(df, quantities=quantities)
    x = df.to_numpy()
    t_avg, m = best_of(lambda: run.average(), args.repeat)
    t_avg_plain, _ = best_of(lambda: run.average(autocorrelation=False), args.repeat)
    t_pd, _ = best_of(lambda: (df.mean(), df.std()), args.repeat)
    t_np, u_ref = best_of(lambda: bare_random_part(x), args.repeat)
    diff = float(np.max(np.abs(m.u_random / u_ref - 1.0)))
    print(f"average: {args.tags} tags x {args.samples} samples")
    print(
        f"  Run.average(): {t_avg * 1e3:.1f} ms; / (a) DataFrame.mean+std {t_pd * 1e3:.1f} ms "
        f"= {t_avg / t_pd:.1f}; / (b) bare numpy with n_eff {t_np * 1e3:.1f} ms = "
        f"{t_avg / t_np:.2f}; u_random agrees with (b) to {diff:.1e} (relative)"
    )
    print(
        f"  Run.average(autocorrelation=False): {t_avg_plain * 1e3:.1f} ms; / (a) = "
        f"{t_avg_plain / t_pd:.1f}"
    )

    day = signals(1440, args.tags, "1min", seed=2)
    run_day = Run.from_frame(day, quantities=dict.fromkeys(day.columns, "pressure"))
    t_sw, best = best_of(lambda: run_day.steadiest_window("60min"), args.repeat)
    t_std, _ = best_of(lambda: day.rolling("60min").std(), args.repeat)
    t_roll, _ = best_of(lambda: bare_rolling(day, "60min"), args.repeat)
    print(f"steadiest_window: {args.tags} tags x 1440 one-minute samples, 60 min windows")
    print(
        f"  Run.steadiest_window('60min'): {t_sw * 1e3:.1f} ms; / (a) rolling std "
        f"{t_std * 1e3:.1f} ms = {t_sw / t_std:.2f}; / (b) the rolling statistics it needs "
        f"{t_roll * 1e3:.1f} ms = {t_sw / t_roll:.2f}; window ends {best.data.index[-1]}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
