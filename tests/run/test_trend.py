"""Tests of perftest.run.trend: the test for a trend inside a window, by Monte Carlo."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from scipy.signal import lfilter

from perftest.errors import InputError, StabilityWarning
from perftest.run.core import Run
from perftest.run.trend import _slope_statistics


def _ar1(tau, n, reps, rng):
    """AR(1) scatter, correlation time tau samples (rho_k = exp(-k/tau)), stationary start."""
    phi = math.exp(-1.0 / tau)
    e = rng.normal(size=(n, reps))
    e[0] /= math.sqrt(1.0 - phi**2)
    return lfilter([1.0], [1.0, -phi], e, axis=0)


@pytest.mark.parametrize("tau", [0.01, 1, 5, 10, 12])
def test_false_alarm_rate_at_most_nominal_on_wandering_scatter(tau):
    # numpy Monte Carlo: 2000 steady records of 120 samples; a test at 5 % must not
    # flag many more than 5 % of them.  Measured 2-6 %; the plain residual
    # effective-sample-size form gave 13 % at tau 5 and 20 % at 10.  Binomial sd of
    # the rate at 5 % over 2000 records: 0.5 %; 8 % allowed.
    n, reps = 120, 2000
    x = _ar1(tau, n, reps, np.random.default_rng(2000 + int(10 * tau)))
    slope, u, dof, _, _ = _slope_statistics(x, np.arange(n, dtype=float))
    p = 2.0 * sps.t.sf(np.abs(slope / u), dof)
    assert np.mean(p < 0.05) <= 0.08


def test_slope_uncertainty_matches_spread_of_slopes():
    # the reported u(b) against the spread of the fitted slopes over 2000 records
    # (1.6 % sampling error); measured 0.87-1.04 for tau 0-12: 0.8-1.1 allowed
    n, reps = 120, 2000
    x = _ar1(8, n, reps, np.random.default_rng(2008))
    slope, u, _, _, _ = _slope_statistics(x, np.arange(n, dtype=float))
    assert 0.8 <= np.std(slope, ddof=1) / math.sqrt(np.mean(u**2)) <= 1.1


def _run(values, start="2031-05-04 08:00"):
    idx = pd.date_range(start, periods=len(values), freq="1min", tz="UTC")
    return Run.from_frame(
        pd.DataFrame({"TT-1": values}, index=idx), quantities={"TT-1": "temperature"}
    )


def test_settling_ramp_is_found_and_reported():
    # a unit still settling: 0.5 K drift over a 2 h window against 0.1 K of scatter
    rng = np.random.default_rng(5)
    n = 120
    x = 500.0 + 0.5 * np.arange(n) / n + 0.1 * rng.normal(size=n)
    run = _run(x)
    # the change is shown as a temperature difference in a display unit (K and °C
    # intervals are equal), never as a bare SI number in e-notation
    with pytest.warns(StabilityWarning, match=r"TT-1 \(\+0\.\d+ °C over the window, p [<=] "):
        table = run.trend()
    assert bool(table.loc["TT-1", "trending"])
    # the slope against numpy's least squares (an independent fit)
    ref = np.polyfit(np.arange(n) * 60.0, x, 1)[0]
    assert table.loc["TT-1", "slope"] == pytest.approx(ref, rel=1e-9)  # same formula, round-off
    with pytest.warns(StabilityWarning):
        m = run.average()
    assert m["TT-1"].trend_p < 0.05 / 1
    assert any("trend inside the window" in s for s in m.notes)


def test_steady_record_is_quiet_and_alpha_is_checked():
    # one steady white-noise record; its p-value (0.68 for this seed) is a draw from
    # the uniform distribution, so a seed was taken whose draw is far from the level
    # (the rate over many records is the Monte Carlo test above)
    rng = np.random.default_rng(8)
    run = _run(500.0 + 0.1 * rng.normal(size=120))
    with warnings.catch_warnings():
        warnings.simplefilter("error", StabilityWarning)
        table = run.trend()
        m = run.average()
    assert not bool(table.loc["TT-1", "trending"])
    assert np.isfinite(m["TT-1"].trend_p)
    with pytest.raises(InputError, match="'alpha' parameter of Run.trend"):
        run.trend(alpha=1.5)
