"""Serial elimination among instruments the tests cannot tell apart.

A small flow network (invented numbers; u in kg/s):
rows  x0 + x1 - x2 = 0   (two feeds into a header)
      x2 - x3 - x4 = 0   (the header splits)
      x1 - x5 = 0        (a second meter on feed 1)
The outside reference for every statistic here is the weighted least-squares closed
form, recomputed in each test from the matrices with numpy (not from the engine).
"""

from __future__ import annotations

import numpy as np
import pytest

from perftest.balance import reconcile_linear, serial_elimination, serial_elimination_nonlinear
from perftest.balance.ambiguity import SPREAD_K
from perftest.errors import InputError, ReconciliationWarning

A = np.array(
    [
        [1.0, 1.0, -1.0, 0.0, 0.0, 0.0],
        [0.0, 0.0, 1.0, -1.0, -1.0, 0.0],
        [0.0, 1.0, 0.0, 0.0, 0.0, -1.0],
    ]
)
TRUTH = np.array([60.0, 40.0, 100.0, 70.0, 30.0, 40.0])


def _adjustment_statistics(x, u, A):
    """Closed form: adjustments a = -S A^T (A S A^T)^-1 A x, their covariance
    V = S A^T (A S A^T)^-1 A S, z = |a| / sqrt(diag V), correlation of a."""
    S = np.diag(u**2)
    M = A @ S @ A.T
    a = -S @ A.T @ np.linalg.solve(M, A @ x)
    V = S @ A.T @ np.linalg.solve(M, A @ S)
    sd = np.sqrt(np.diag(V))
    return np.abs(a) / sd, V / np.outer(sd, sd)


def test_exact_tie_takes_both_out_and_shows_the_spread():
    # Without x5's row, feeds x0 and x1 enter only the header row: their columns of
    # A are equal, so their adjustments are perfectly correlated and their
    # statistics equal whatever the error.  A +8 kg/s error in x0.
    A2 = A[:2, :5]
    u = np.ones(5)
    x = TRUTH[:5].copy()
    x[0] += 8.0
    z, rho = _adjustment_statistics(x, u, A2)
    assert z[0] == pytest.approx(z[1], rel=1e-12) and abs(rho[0, 1]) == pytest.approx(1.0)
    with pytest.warns(ReconciliationWarning, match="cannot tell apart"):
        out = serial_elimination(x, np.diag(u**2), A2, names=["F0", "F1", "H", "P1", "P2"])
    step = out.steps[1]
    assert {step.dropped, *step.tied_with} == {0, 1} and len(step.tied_with) == 1
    assert {step.name, *step.tied_names} == {"F0", "F1"}
    assert sorted(out.dropped) == [0, 1]
    # Both out: the header row can no longer say anything about either feed alone.
    assert np.isnan(out.x[:2]).all()
    # One choice or both out: the header row adds no redundancy either way (its
    # remaining feed is determined by it), so no degree of freedom is lost here.
    assert step.redundancy_lost == 0 and step.dof == 1
    # The alternatives: dropping x0 gives x0 = x2 - x1 (the truth, 60, to within the
    # adjustments of the split row); dropping x1 gives x1 = x2 - x0, 8 kg/s low.
    alt = {a.dropped: a for a in out.alternatives}
    assert set(alt) == {0, 1}
    spread_feeds = out.choice_spread[:2]
    # the two alternatives differ by exactly the injected error in both feeds
    # (rounding only: the header flow is the same in both)
    np.testing.assert_allclose(spread_feeds, [8.0, 8.0], rtol=1e-9)
    # dropping x0: x0 = x2 - x1 = 100 - 40 (the split row's data are exact, so x2
    # stays 100); dropping x1: x0 keeps its measured 68 (rounding only)
    assert alt[0].x[0] == pytest.approx(60.0, rel=1e-12)
    assert alt[1].x[0] == pytest.approx(68.0, rel=1e-12)
    # The split row's streams do not depend on the choice: the header row is
    # non-redundant in both alternatives, so x2..x4 come from the split row alone.
    assert np.all(out.choice_spread[2:] < 1e-9)
    np.testing.assert_array_equal(out.depends_on_choice, [True, True, False, False, False])


def test_statistics_within_sampling_spread_are_not_picked_from():
    # With x5 (a poor meter, u = 4) on feed 1, x1 enters a second row: the
    # statistics of x0 and x1 differ, but by less than their sampling spread.  A +6
    # kg/s error in x0; the measurement test ranks x0 first, yet x1 is within reach.
    u = np.array([1.0, 1.0, 1.0, 1.0, 1.0, 4.0])
    x = TRUTH.copy()
    x[0] += 6.0
    z, rho = _adjustment_statistics(x, u, A)
    r01 = abs(rho[0, 1])
    assert z[0] > z[1]
    # The conditions of perftest.balance.ambiguity, from the closed form: the
    # difference within k sqrt(2 (1 - rho)), and an error in either explains both.
    assert z[0] - z[1] < SPREAD_K * np.sqrt(2 * (1 - r01))
    assert abs(z[1] - r01 * z[0]) < SPREAD_K * np.sqrt(1 - r01**2)
    assert abs(z[0] - r01 * z[1]) < SPREAD_K * np.sqrt(1 - r01**2)
    with pytest.warns(ReconciliationWarning, match="cannot tell apart"):
        out = serial_elimination(x, np.diag(u**2), A)
    step = out.steps[1]
    assert (step.dropped, step.tied_with) == (0, (1,))
    # One choice would keep dof 2 (3 rows, one measurement out); both out, the
    # header row only estimates x0: 1 degree of freedom lost.
    single = reconcile_linear(np.delete(x, 0), np.diag(np.delete(u, 0) ** 2), A[:, 1:], B=A[:, :1])
    assert single.dof == 2 and step.dof == 1 and step.redundancy_lost == 1
    # With both out, x1 = x5 and x0 = x2 - x1: the noise-free data give the truth.
    # (rounding only)
    np.testing.assert_allclose(out.x, TRUTH, rtol=1e-9)
    assert out.depends_on_choice[:2].all()
    assert out.passed


def test_a_clear_fault_is_dropped_alone():
    # A larger error (+12): z0 now stands clear of z1 by more than the spread.
    u = np.array([1.0, 1.0, 1.0, 1.0, 1.0, 4.0])
    x = TRUTH.copy()
    x[0] += 12.0
    z, rho = _adjustment_statistics(x, u, A)
    r01 = abs(rho[0, 1])
    assert abs(z[0] - r01 * z[1]) > SPREAD_K * np.sqrt(1 - r01**2)
    out = serial_elimination(x, np.diag(u**2), A)
    assert out.dropped == (0,) and out.steps[1].tied_with == () and out.alternatives == ()
    assert not out.depends_on_choice.any()


def test_trusted_instrument_settles_the_choice():
    A2 = A[:2, :5]
    u = np.ones(5)
    x = TRUTH[:5].copy()
    x[0] += 8.0
    out = serial_elimination(
        x, np.diag(u**2), A2, names=["F0", "F1", "H", "P1", "P2"], trusted=["F1"]
    )
    assert out.dropped == (0,) and out.alternatives == () and out.trusted == (1,)
    # x0 from the header row: x2 - x1 with x2, x1 adjusted by the split row only
    # (rounding only)
    assert out.x[0] == pytest.approx(out.x[2] - out.x[1], rel=1e-12)
    with pytest.raises(InputError, match="'trusted' parameter of serial_elimination"):
        serial_elimination(x, np.diag(u**2), A2, trusted=["F1"])


def test_nonlinear_elimination_handles_the_tie_the_same_way():
    A2 = A[:2, :5]
    u = np.ones(5)
    x = TRUTH[:5].copy()
    x[0] += 8.0

    def residual(xx, yy):
        return A2 @ xx

    with pytest.warns(ReconciliationWarning, match="cannot tell apart"):
        lin = serial_elimination(x, np.diag(u**2), A2)
        non = serial_elimination_nonlinear(residual, x, np.diag(u**2))
    assert sorted(non.dropped) == sorted(lin.dropped) == [0, 1]
    # the same linear problem solved by the nonlinear engine: to its step tolerance
    np.testing.assert_allclose(non.choice_spread, lin.choice_spread, atol=1e-6)
    np.testing.assert_array_equal(non.depends_on_choice, lin.depends_on_choice)
