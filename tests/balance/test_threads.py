"""The engine runs small problems with one BLAS thread and leaves large ones alone."""

from __future__ import annotations

import numpy as np
import pytest
import threadpoolctl

import perftest.balance.linear as lin
from perftest.balance import _threads, reconcile_linear, reconcile_nonlinear


def _blas_threads():
    return max(i["num_threads"] for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas")


def _spy(monkeypatch):
    seen = []
    solve_dense = lin.solve_dense

    def spy(p, **kw):
        seen.append(_blas_threads())
        return solve_dense(p, **kw)

    monkeypatch.setattr(lin, "solve_dense", spy)
    return seen


def _chain(n):
    """n meters on one pipe: n - 1 rows x_i - x_{i+1} = 0."""
    A = np.zeros((n - 1, n))
    A[np.arange(n - 1), np.arange(n - 1)] = 1.0
    A[np.arange(n - 1), np.arange(1, n)] = -1.0
    return A, 10.0 + np.linspace(-0.1, 0.1, n)


def test_small_problem_runs_with_one_blas_thread(monkeypatch):
    seen = _spy(monkeypatch)
    A, x = _chain(20)
    with threadpoolctl.threadpool_limits(limits=2, user_api="blas"):
        assert _blas_threads() == 2  # the user's setting, as the test makes it
        reconcile_linear(x, np.eye(20) * 0.01, A)
        reconcile_nonlinear(lambda xx, yy: A @ xx, x, np.eye(20) * 0.01)
        assert _blas_threads() == 2  # restored on return
    assert seen and set(seen) == {1}


def test_large_problem_keeps_the_user_setting(monkeypatch):
    seen = _spy(monkeypatch)
    n = _threads.SMALL + 1
    A, x = _chain(n)
    with threadpoolctl.threadpool_limits(limits=2, user_api="blas"):
        reconcile_linear(x, np.eye(n) * 0.01, A)
    assert seen == [2]


def test_bad_input_is_still_reported_by_the_function():
    from perftest.errors import InputError

    with pytest.raises(InputError, match="'x' parameter of reconcile_linear"):
        reconcile_linear("ten", np.eye(1), [[1.0]])
