"""Peak memory of the steadiest-window search against the size of the run's frame.

Issue 20 target: on 7 days at 1 s (604,800 samples x 8 tags = 4.8 M values) the
search must peak within 2x the run's frame (``Run.data``, 8 bytes a value).  The
peak is measured with ``tracemalloc`` (Python and numpy allocations) around
``Run.steadiest_window("2h", step="1min")`` alone, after the run is built, and
printed over ``run.data.memory_usage().sum()`` of the same run.

Usage::

    python benchmarks/bench_steady_memory.py [--days 7] [--tags 8] [--step 1min]
"""

from __future__ import annotations

import argparse
import math
import time
import tracemalloc

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from perftest.run.core import Run


def main() -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--days", type=float, default=7.0)
    ap.add_argument("--tags", type=int, default=8)
    ap.add_argument("--step", default="1min")
    args = ap.parse_args()
    n = int(args.days * 86400)
    rng = np.random.default_rng(20)
    phi = math.exp(-1.0 / 30.0)
    e = rng.normal(size=(n, args.tags))
    e[0] /= math.sqrt(1.0 - phi**2)
    x = 5.0e6 + 1.0e3 * lfilter([1.0], [1.0, -phi], e, axis=0)
    del e
    idx = pd.date_range("2031-05-01", periods=n, freq="1s", tz="UTC")
    cols = [f"PT-{i}" for i in range(args.tags)]
    run = Run(pd.DataFrame(x, index=idx, columns=cols), quantities=dict.fromkeys(cols, "pressure"))
    del x
    frame = int(run.data.memory_usage(deep=True).sum())
    tracemalloc.start()
    t0 = time.perf_counter()
    w = run.steadiest_window("2h", step=args.step)
    elapsed = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    ratio = peak / frame
    print(
        f"steadiest_window('2h', step={args.step!r}) on {n} samples x {args.tags} tags "
        f"({n * args.tags / 1e6:.1f} M values): {elapsed:.1f} s, window {w.start} to {w.end}"
    )
    print(
        f"  peak {peak / 1e6:.0f} MB / frame {frame / 1e6:.0f} MB = {ratio:.2f} "
        f"(target <= 2): {'PASS' if ratio <= 2.0 else 'FAIL'}"
    )
    return 0 if ratio <= 2.0 else 1


if __name__ == "__main__":
    raise SystemExit(main())
