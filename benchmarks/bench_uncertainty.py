"""Speed of linear uncertainty propagation against the `uncertainties` package.

Both methods propagate the same 1,000 correlated inputs through the same linear
function (10 outputs, y = A x) in one run:

* reference: ``uncertainties.correlated_values`` builds correlated numbers, the
  function is evaluated on them, ``uncertainties.covariance_matrix`` gives V_y;
* perftest: ``propagate_linear(A, cov)`` (one matrix product S V S^T), and
  ``propagate`` with the Jacobian given (``method="analytic"``).

Target: perftest at least 50x faster, covariances agreeing to 1e-9 relative.
Prints the ratios; exits with status 1 if the target is missed.

Run: python benchmarks/bench_uncertainty.py [n_inputs] [n_outputs]
"""

from __future__ import annotations

import os
import sys
import time

# Both methods run on one core: the reference is single-threaded Python, and on a
# busy machine multi-threaded BLAS can be slower than one thread for matrices of
# this size.  Set OPENBLAS_NUM_THREADS yourself to measure otherwise.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402  (after the thread settings)
import uncertainties  # noqa: E402

from perftest.evaluation.uncertainty import propagate, propagate_linear  # noqa: E402

TARGET_RATIO = 50.0
TARGET_RTOL = 1e-9


def problem(n: int, m: int, seed: int = 1):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 10.0, n)
    u = 0.01 * x
    # Correlation from a few shared systematic effects plus independent parts.
    g = rng.normal(size=(n, 5)) * 0.3
    r = g @ g.T
    r += np.diag(1.0 - np.diag(r).clip(max=0.9))
    d = np.sqrt(np.diag(r))
    r = r / np.outer(d, d)
    cov = r * np.outer(u, u)
    a = rng.normal(size=(m, n))
    return x, cov, a


def best_of(func, repeat: int) -> tuple[float, object]:
    best, out = np.inf, None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = func()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main(n: int = 1000, m: int = 10) -> int:
    x, cov, a = problem(n, m)

    def reference():
        xs = uncertainties.correlated_values(x, cov)
        ys = [sum(a[i, j] * xs[j] for j in range(n)) for i in range(m)]
        return np.array(uncertainties.covariance_matrix(ys))

    def ours_linear():
        return propagate_linear(a, cov).cov

    def ours_propagate():
        return propagate(lambda v: a @ v, x, cov, jacobian=lambda v: a).cov

    t_ref, cov_ref = best_of(reference, 1)
    t_lin, cov_lin = best_of(ours_linear, 5)
    t_prop, cov_prop = best_of(ours_propagate, 5)

    scale = np.sqrt(np.outer(np.diag(cov_ref), np.diag(cov_ref)))
    err_lin = float(np.max(np.abs(cov_lin - cov_ref) / scale))
    err_prop = float(np.max(np.abs(cov_prop - cov_ref) / scale))

    threads = os.environ.get("OPENBLAS_NUM_THREADS")
    print(f"inputs {n}, outputs {m}, OPENBLAS_NUM_THREADS={threads}")
    print(f"uncertainties.correlated_values + covariance_matrix: {t_ref:9.4f} s")
    print(
        f"propagate_linear:                                  {t_lin:9.4f} s  "
        f"ratio {t_ref / t_lin:9.1f}x  max rel. diff {err_lin:.1e}"
    )
    print(
        f"propagate (jacobian given, with input checks):     {t_prop:9.4f} s  "
        f"ratio {t_ref / t_prop:9.1f}x  max rel. diff {err_prop:.1e}"
    )
    ok = t_ref / t_lin >= TARGET_RATIO and max(err_lin, err_prop) <= TARGET_RTOL
    print(
        f"target: >= {TARGET_RATIO:.0f}x and <= {TARGET_RTOL:.0e} relative: "
        f"{'met' if ok else 'MISSED'}"
    )
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main(*(int(v) for v in sys.argv[1:3])))
