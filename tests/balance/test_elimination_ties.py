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

from perftest.balance import serial_elimination, serial_elimination_nonlinear
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


def test_exact_tie_drops_neither_and_shows_the_spread():
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
    assert step.dropped is None and set(step.tied_with) == {0, 1}
    assert set(step.tied_names) == {"F0", "F1"}
    assert out.dropped == () and out.shared == (step.tied_with,)
    # The redundancy they share is the header row's: one degree of freedom out.
    assert out.steps[0].dof == 2 and step.dof == 1 and step.redundancy_lost == 1
    assert out.passed
    # Both feeds keep their readings (the header row no longer judges them), and
    # the split row alone reconciles x2..x4, whose data are exact: the truth.
    # (rounding only)
    np.testing.assert_allclose(out.x, [68.0, 40.0, 100.0, 70.0, 30.0], rtol=1e-12)
    # The shared bias, in units of the feeds' u along (+1, +1): the header's excess
    # of 8 kg/s split evenly, b = 4 (closed form of one free direction, rounding only).
    assert out.result.y[-1] == pytest.approx(4.0, rel=1e-12)
    # The alternatives: dropping x0 gives x0 = x2 - x1 = 100 - 40; dropping x1 keeps
    # x0 at its reading, 68, and gives x1 = 100 - 68 (rounding only).
    alt = {a.dropped: a for a in out.alternatives}
    assert set(alt) == {0, 1}
    np.testing.assert_allclose(alt[0].x[:2], [60.0, 40.0], rtol=1e-12)
    np.testing.assert_allclose(alt[1].x[:2], [68.0, 32.0], rtol=1e-12)
    # the two choices differ by the injected error in both feeds, and by nothing in
    # the split row's streams
    np.testing.assert_allclose(out.choice_spread[:2], [8.0, 8.0], rtol=1e-9)
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
    assert (step.dropped, step.tied_with) == (None, (0, 1))
    assert step.redundancy_lost == 1 and out.passed
    # Independent solution of the same model, x = x_t + d b + e with d = (1, 1, 0...)
    # (both feeds' u, in the sense of their adjustments, which are both negative):
    # the constraints A (x - d b) = 0 as A x + B b = 0 with B = -A d, solved as a
    # KKT system of the weighted least-squares problem.
    d = np.array([1.0, 1.0, 0, 0, 0, 0])
    B = -(A @ d)[:, None]
    W = np.diag(1 / u**2)
    K = np.block(
        [
            [W, np.zeros((6, 1)), A.T],
            [np.zeros((1, 6)), np.zeros((1, 1)), B.T],
            [A, B, np.zeros((3, 3))],
        ]
    )
    sol = np.linalg.solve(K, np.concatenate([W @ x, [0.0], np.zeros(3)]))
    # two exact solvers, 10 variables: rounding only
    np.testing.assert_allclose(out.x, sol[:6], rtol=1e-10)
    assert out.result.y[-1] == pytest.approx(sol[6], rel=1e-10)
    # The single choices differ in the feeds by more than their u: flagged.
    assert out.depends_on_choice[:2].all()
    assert np.all(out.choice_spread[:2] > 1.0)


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
    assert non.shared == lin.shared == ((0, 1),)
    # the same linear problem solved by the nonlinear engine: to its step tolerance
    np.testing.assert_allclose(non.x, lin.x, atol=1e-6)
    # the same linear problem solved by the nonlinear engine: to its step tolerance
    np.testing.assert_allclose(non.choice_spread, lin.choice_spread, atol=1e-6)
    np.testing.assert_array_equal(non.depends_on_choice, lin.depends_on_choice)
