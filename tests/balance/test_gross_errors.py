"""Gross-error tests: statistics written out independently, chi-square and normal
quantiles from scipy.stats, detection of injected errors, false-alarm rates by
seeded Monte Carlo."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

import perftest
from perftest.balance import (
    global_test,
    measurement_test,
    nodal_test,
    reconcile_linear,
    reconcile_linear_batch,
    reconcile_nonlinear,
    serial_elimination,
    serial_elimination_nonlinear,
    vdi2048_criterion,
)
from perftest.errors import InputError, ReconciliationWarning

# Six-stream network of a splitter, exchanger, valve and mixer (see
# tests/test_balance_linear.py), with a recycle-free chain of two more nodes.
A_NET = np.array(
    [
        [1, -1, -1, 0, 0, 0, 0, 0],
        [0, 1, 0, -1, 0, 0, 0, 0],
        [0, 0, 1, 0, -1, 0, 0, 0],
        [0, 0, 0, 1, 1, -1, 0, 0],
        [0, 0, 0, 0, 0, 1, -1, 0],
        [0, 0, 0, 0, 0, 0, 1, -1],
    ],
    dtype=float,
)
TRUTH = np.array([100.0, 64.0, 36.0, 64.0, 36.0, 100.0, 100.0, 100.0])
U_NET = np.array([1.0, 0.8, 0.6, 0.8, 0.6, 1.0, 1.2, 1.0])


def test_global_test_against_chi2_quantile():
    rng = np.random.default_rng(0)
    x = TRUTH + rng.normal(size=8) * U_NET
    r = reconcile_linear(x, np.diag(U_NET**2), A_NET)
    g = global_test(r, alpha=0.1)
    assert g.critical == pytest.approx(scipy.stats.chi2.ppf(0.9, 6), rel=1e-12)
    assert g.passed == (r.chi2 <= g.critical)
    assert g.p_value == pytest.approx(scipy.stats.chi2.sf(r.chi2, 6), rel=1e-12)


def test_sidak_measurement_test_critical_value():
    r = reconcile_linear(TRUTH, np.diag(U_NET**2), A_NET)
    t = measurement_test(r, alpha=0.05)
    n_r = 8
    alpha_per = 1 - (1 - 0.05) ** (1 / n_r)
    assert t.alpha_per == pytest.approx(alpha_per, rel=1e-12)
    assert t.critical == pytest.approx(scipy.stats.norm.ppf(1 - alpha_per / 2), rel=1e-12)
    assert t.n_tested == n_r and not t.flagged.any()


def test_nodal_test_statistic_written_out():
    rng = np.random.default_rng(1)
    x = TRUTH + rng.normal(size=8) * U_NET
    x[2] += 5.0
    S = np.diag(U_NET**2)
    r = reconcile_linear(x, S, A_NET)
    t = nodal_test(r)
    stat = np.abs(A_NET @ x) / np.sqrt(np.diag(A_NET @ S @ A_NET.T))
    np.testing.assert_allclose(t.statistic, stat, rtol=1e-12)
    # A +5 bias on stream 2 (u 0.6) shows at the splitter and the valve, the two
    # nodes the stream touches.
    assert t.flagged[0] and t.flagged[2]


def test_vdi2048_matches_definition():
    rng = np.random.default_rng(2)
    x = TRUTH + rng.normal(size=8) * U_NET
    x[6] += 4.0
    S = np.diag(U_NET**2)
    r = reconcile_linear(x, S, A_NET)
    v = r.x - x
    var_v = np.diag(S) - np.diag(r.x_cov)
    np.testing.assert_array_equal(vdi2048_criterion(r), np.abs(v) / np.sqrt(var_v) <= 1.96)
    assert not vdi2048_criterion(r).all()


def test_measurement_test_family_wise_false_alarm_rate():
    # Without gross errors the Sidak-corrected test flags at least one measurement in
    # at most ~alpha of the snapshots (Sidak is exact for independent statistics and
    # conservative for correlated ones).
    rng = np.random.default_rng(3)
    N = 20000
    X = TRUTH + rng.normal(size=(N, 8)) * U_NET
    batch = reconcile_linear_batch(X, np.diag(U_NET**2), A_NET)
    r = reconcile_linear(X[0], np.diag(U_NET**2), A_NET)
    crit = measurement_test(r, 0.05).critical
    rate = np.mean((batch.z > crit).any(axis=1))
    # Binomial standard error at 5 %: sqrt(0.05 * 0.95 / N) ~ 0.0015; allow 4 of them
    # above alpha, and require the rate not to collapse to nothing (> 1 %).
    assert 0.01 < rate < 0.05 + 4 * 0.0015
    # The per-measurement statistic is |N(0, 1)|: its mean is sqrt(2/pi).
    assert batch.z.mean(axis=0) == pytest.approx(np.full(8, np.sqrt(2 / np.pi)), abs=0.03)


def test_serial_elimination_finds_injected_error():
    rng = np.random.default_rng(4)
    x = TRUTH + rng.normal(size=8) * U_NET * 0.5
    x[6] += 8.0  # stream 6 reads 8 high (about 7 standard uncertainties)
    S = np.diag(U_NET**2)
    names = [f"F{i}" for i in range(8)]
    out = serial_elimination(x, S, A_NET, alpha=0.05, names=names)
    assert out.dropped == (6,)
    assert out.steps[0].dropped is None and not out.steps[0].passed
    assert out.steps[1].name == "F6" and out.steps[1].passed and out.passed
    assert out.steps[1].dof == out.steps[0].dof - 1
    # Dropping measurement i with diagonal S lowers chi2 by exactly z_i^2
    # (the measurement test is then the maximum-power test).
    r0 = reconcile_linear(x, S, A_NET)
    assert out.steps[0].chi2 - out.steps[1].chi2 == pytest.approx(r0.z[6] ** 2, rel=1e-9)
    # The dropped flow is estimated from the balances, close to the truth.
    assert abs(out.x[6] - TRUTH[6]) < 3 * U_NET[6]
    assert r0.suspects().tolist() == [6]
    assert perftest.serial_elimination is serial_elimination


def test_serial_elimination_nonlinear_finds_injected_error():
    # Mixer mass and energy balances (x = m0, m1, m2, h0, h1, h2) plus a second
    # flow meter on stream 2 (x6).
    def res(x, y):
        m0, m1, m2, h0, h1, h2, m2b = x
        return np.array([m0 + m1 - m2, m0 * h0 + m1 * h1 - m2 * h2, m2 - m2b])

    truth = np.array([10.0, 5.0, 15.0, 100.0, 300.0, 500.0 / 3.0, 15.0])
    u = np.array([0.1, 0.05, 0.15, 1.0, 1.5, 1.2, 0.15])
    rng = np.random.default_rng(5)
    x = truth + rng.normal(size=7) * u * 0.3
    x[2] += 1.5  # ten standard uncertainties on the first meter of stream 2
    out = serial_elimination_nonlinear(res, x, np.diag(u**2), alpha=0.05)
    assert out.dropped[0] == 2 and out.passed
    assert abs(out.x[2] - truth[2]) < 3 * u[2]
    lin = reconcile_nonlinear(res, x, np.diag(u**2))
    assert 2 in lin.suspects().tolist()


def test_elimination_stops_without_redundancy():
    # Two meters on one pipe disagreeing grossly, with unequal uncertainties: the
    # one statistic they share (|r| / sqrt(u1^2 + u2^2) for one balance) cannot say
    # which is wrong.  Neither is dropped: the one redundancy they share is taken
    # out, which leaves no degree of freedom and both readings as they are.  Each
    # single choice is on record: dropping either gives the other's reading to both.
    with pytest.warns(ReconciliationWarning, match="cannot tell apart"):
        out = serial_elimination([10.0, 20.0], np.diag([1.0, 4.0]), [[1.0, -1.0]])
    assert len(out.steps) == 2 and out.steps[-1].dof == 0 and out.dropped == ()
    assert out.steps[-1].passed  # p_value 1 with no degrees of freedom
    np.testing.assert_allclose(out.x, [10.0, 20.0], rtol=1e-12)  # rounding only
    assert sorted(a.dropped for a in out.alternatives) == [0, 1]
    for a in out.alternatives:
        assert a.result.dof == 0 and a.result.p_value == 1.0
        kept = 1 - a.dropped
        np.testing.assert_allclose(a.x, [[10.0, 20.0][kept]] * 2, rtol=1e-12)
    # both estimates move by the full disagreement, 10, over the two choices
    np.testing.assert_allclose(out.choice_spread, [10.0, 10.0], rtol=1e-12)
    assert out.depends_on_choice.all()


@pytest.mark.parametrize("alpha", [0.0, 1.0, -0.1, "0.05"])
def test_bad_alpha(alpha):
    r = reconcile_linear(TRUTH, np.diag(U_NET**2), A_NET)
    with pytest.raises(InputError, match="'alpha' parameter of global_test"):
        global_test(r, alpha)
