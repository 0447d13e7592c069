"""Soak test: reconcile and evaluate the demo many times and check memory does not grow.

The demo's averaged measurements are re-drawn around their values within their
uncertainty (a normal draw with the measurements' own covariance, seeded), then
reconciled with serial elimination and evaluated, ``--iterations`` times (default
1000).  Every ``--every`` iterations (default 100) the script records

- the resident set size of the process (``/proc/self/status`` VmRSS; the peak RSS
  from ``resource.getrusage`` where /proc is missing), and
- the number of memory blocks held by the Python allocator (``sys.getallocatedblocks``),

after a ``gc.collect()``.

Verdict ("memory does not grow"): the mean RSS of the last quarter of the samples
stays within ``RSS_TOLERANCE_MB`` of the mean of the second quarter (the first
quarter is warm-up: caches of property calls and imports fill there), and the
allocated blocks within ``BLOCKS_TOLERANCE`` (relative).  A leak of one small array
per iteration (~10 kB) would add ~5 MB over 500 iterations and fail.

Also printed: iterations per second, how many draws failed the global test or
dropped instruments (a sanity check that the draws are realistic), and the draws
refused with a PerftestError, by message.

Run:  python benchmarks/bench_soak.py [--iterations 1000] [--every 100] [--monte-carlo]
"""

from __future__ import annotations

import argparse
import gc
import os
import resource
import sys
import time
import warnings
from collections import Counter
from dataclasses import replace

import numpy as np

RSS_TOLERANCE_MB = 5.0
BLOCKS_TOLERANCE = 0.05


def rss_mb() -> float:
    """Current resident set size [MB] (peak RSS where /proc is not available)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / 1024.0 if sys.platform != "darwin" else peak / 2**20


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--iterations", type=int, default=1000)
    ap.add_argument("--every", type=int, default=100)
    ap.add_argument("--seed", type=int, default=20260514)
    ap.add_argument(
        "--monte-carlo", action="store_true", help="also run the Monte Carlo check each time"
    )
    args = ap.parse_args(argv)
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

    import perftest
    from perftest.demo import demo_measurements

    plant, m0 = demo_measurements()
    value0 = np.array(m0.value, dtype=float)
    cov = np.array(m0.cov, dtype=float)
    ok = np.isfinite(value0)
    L = np.zeros_like(cov)
    sub = np.ix_(ok, ok)
    L[sub] = np.linalg.cholesky(cov[sub])
    rng = np.random.default_rng(args.seed)

    samples = []  # (iteration, rss MB, allocated blocks)
    failed_global = dropped = errors = 0
    kinds = Counter()
    t0 = time.perf_counter()
    for i in range(1, args.iterations + 1):
        v = value0 + L @ rng.standard_normal(value0.size)
        m = replace(m0, value=v)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                rec = perftest.reconcile(plant, m, eliminate=True)
                perf = perftest.evaluate(plant, rec, monte_carlo=args.monte_carlo)
            except perftest.PerftestError as exc:
                errors += 1
                kinds[f"{type(exc).__name__}: {str(exc)[:160]}"] += 1
                rec = perf = None
        if rec is not None:
            failed_global += not rec.global_test["passed"]
            dropped += len(rec.eliminated)
            assert np.isfinite(perf.results["value"].astype(float)).all()
        del rec, perf, m, v
        if i % args.every == 0:
            gc.collect()
            samples.append((i, rss_mb(), sys.getallocatedblocks()))
            print(
                f"  iteration {i:5d}: RSS {samples[-1][1]:8.1f} MB, "
                f"Python blocks {samples[-1][2]:9d}",
                flush=True,
            )
    elapsed = time.perf_counter() - t0

    n = len(samples)
    if n < 4:
        print("FAIL: too few samples for a verdict (need iterations >= 4 x every)")
        return 1
    q = n // 4
    second = samples[q : 2 * q]
    last = samples[n - q :]
    rss2 = float(np.mean([s[1] for s in second]))
    rss4 = float(np.mean([s[1] for s in last]))
    blk2 = float(np.mean([s[2] for s in second]))
    blk4 = float(np.mean([s[2] for s in last]))
    print(
        f"{args.iterations} reconcile + evaluate of the demo in {elapsed:.1f} s "
        f"({args.iterations / elapsed:.1f} per s); {errors} errors, "
        f"{failed_global} failed global tests after elimination, {dropped} instruments dropped"
    )
    print(
        f"RSS: second quarter {rss2:.1f} MB, last quarter {rss4:.1f} MB, growth "
        f"{rss4 - rss2:+.2f} MB (ratio {rss4 / rss2:.4f}; tolerance {RSS_TOLERANCE_MB} MB)"
    )
    print(
        f"Python blocks: second quarter {blk2:.0f}, last quarter {blk4:.0f}, ratio "
        f"{blk4 / blk2:.4f} (tolerance {1 + BLOCKS_TOLERANCE:.2f})"
    )
    grows = (rss4 - rss2 > RSS_TOLERANCE_MB) or (blk4 / blk2 > 1.0 + BLOCKS_TOLERANCE)
    for kind, k in kinds.most_common(5):
        print(f"  refused {k} x: {kind}")
    print(("FAIL" if grows else "PASS") + ": memory does not grow")
    # a draw may be refused with a PerftestError (a drawn state on the wrong side of
    # saturation, say); anything else would have stopped the loop
    return 1 if grows else 0


if __name__ == "__main__":
    sys.exit(main())
