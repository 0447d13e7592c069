"""Tests of perftest.evaluation.uncertainty against published examples and independent methods."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import uncertainties
from scipy import optimize, stats
from uncertainties import umath

from perftest.errors import InputError
from perftest.evaluation.uncertainty import (
    coverage_factor,
    effective_dof,
    expanded,
    monte_carlo,
    propagate,
    propagate_linear,
    to_ufloats,
)

# --------------------------------------------------------------------------- GUM H.2

# JCGM 100:2008 (GUM) Annex H.2, Table H.2: five sets of simultaneous observations
# of voltage V [V], current I [mA] and phase angle phi [rad] (values from memory;
# their means, standard deviations of the means and correlation coefficients are
# checked against the published ones below, which guards against a mistyped value).
GUM_H2_OBSERVATIONS = np.array(
    [
        [5.007, 19.663, 1.0456],
        [4.994, 19.639, 1.0438],
        [5.005, 19.640, 1.0468],
        [4.990, 19.685, 1.0428],
        [4.999, 19.678, 1.0433],
    ]
) * np.array([1.0, 1e-3, 1.0])  # I to SI (A)

# GUM Table H.2, last rows: means, s of the means, correlation coefficients
# (from memory; published to the digits written here).
GUM_H2_MEANS = (4.9990, 19.6610e-3, 1.04446)
GUM_H2_S_MEANS = (0.0032, 0.0095e-3, 0.00075)
GUM_H2_R_INPUTS = {(0, 1): -0.36, (0, 2): 0.86, (1, 2): -0.65}

# GUM Table H.3, approach 1 (from memory): R, X, Z [ohm], u [ohm], correlations.
GUM_H3_VALUES = (127.732, 219.847, 254.260)
GUM_H3_U = (0.071, 0.295, 0.236)
GUM_H3_R = {(0, 1): -0.588, (0, 2): -0.485, (1, 2): 0.993}


def _impedance(v):
    V, current, phi = v[0], v[1], v[2]
    z = V / current
    return np.array([z * np.cos(phi), z * np.sin(phi), z])


def _impedance_jacobian(v):
    V, current, phi = v
    z = V / current
    return np.array(
        [
            [np.cos(phi) / current, -z * np.cos(phi) / current, -z * np.sin(phi)],
            [np.sin(phi) / current, -z * np.sin(phi) / current, z * np.cos(phi)],
            [1.0 / current, -z / current, 0.0],
        ]
    )


@pytest.fixture(scope="module")
def gum_h2_inputs():
    obs = GUM_H2_OBSERVATIONS
    mean = obs.mean(axis=0)
    cov_mean = np.cov(obs.T, ddof=1) / obs.shape[0]  # GUM Eq. 5 and Eq. 17
    return mean, cov_mean


def test_gum_h2_observations_reproduce_published_statistics(gum_h2_inputs):
    mean, cov = gum_h2_inputs
    s = np.sqrt(np.diag(cov))
    r = cov / np.outer(s, s)
    # Means published to the last digit of the observations plus one: 5e-5 relative
    # is half a unit of the last published digit of I (the coarsest).
    np.testing.assert_allclose(mean, GUM_H2_MEANS, rtol=5e-5)
    # s of the means published to two significant digits: half a unit of the 2nd.
    np.testing.assert_allclose(s, GUM_H2_S_MEANS, rtol=0.05 / 3.2 * 2)
    for (i, j), published in GUM_H2_R_INPUTS.items():
        # Correlations published to two decimals: half a unit of the second.
        assert r[i, j] == pytest.approx(published, abs=0.005 + 1e-9)


@pytest.mark.parametrize("method", ["analytic", "numerical"])
def test_gum_h2_resistance_reactance_impedance(gum_h2_inputs, method):
    mean, cov = gum_h2_inputs
    jac = _impedance_jacobian if method == "analytic" else None
    p = propagate(_impedance, mean, cov, method=method, jacobian=jac, output_names=["R", "X", "Z"])
    # Values published to 1 mohm; half a unit of the last digit.
    np.testing.assert_allclose(p.value, GUM_H3_VALUES, atol=0.5e-3 + 1e-9)
    # u published to 1 mohm.  The GUM worked from rounded intermediate values: exact
    # propagation from Table H.2 gives u(X) = 0.2956 against the published 0.295,
    # so the tolerance is 1 mohm (two half-units).  Ignoring the correlations gives
    # u(R) = 0.195, far outside it.
    np.testing.assert_allclose(p.u, GUM_H3_U, atol=1e-3)
    for (i, j), published in GUM_H3_R.items():
        # Correlations published to three decimals: half a unit of the third.
        assert p.correlation[i, j] == pytest.approx(published, abs=5e-4 + 1e-9)


def test_gum_h2_correlation_matters(gum_h2_inputs):
    """The check above fails when the input correlations are dropped."""
    mean, cov = gum_h2_inputs
    p = propagate(_impedance, mean, np.diag(np.diag(cov)))
    assert abs(p.u[0] - GUM_H3_U[0]) > 0.1


def test_gum_h2_effective_dof_is_clipped(gum_h2_inputs):
    """Each input has 4 dof (5 observations); WS is clipped to [4, 12] (see docstring)."""
    mean, cov = gum_h2_inputs
    p = propagate(_impedance, mean, cov, dof=[4, 4, 4])
    assert np.all(p.dof >= 4.0) and np.all(p.dof <= 12.0)
    # R: the raw formula gives ~0.13 because of cancelling correlations; the floor
    # gives 4, the dof GUM H.2.4 (approach 2) uses for R.
    assert p.dof[0] == 4.0
    # Coverage factor is Student's t from scipy with that dof (reference library).
    assert p.k[0] == pytest.approx(stats.t.ppf(0.975, 4.0), rel=1e-12)


# --------------------------------------------------------------------------- GUM-S1 9.2


def _additive(x):
    return x[0] + x[1] + x[2] + x[3]


def test_gum_s1_additive_model_linear():
    # JCGM 101:2008 9.2.2: four independent standard normal inputs, u(y) = 2 and
    # the 95 % coverage interval [-3.92, 3.92] by the GUM uncertainty framework.
    p = propagate(_additive, np.zeros(4), np.eye(4))
    # Linear model: linear propagation is exact up to round-off of central differences.
    assert p.u[0] == pytest.approx(2.0, rel=1e-9)
    # Published to two decimals: half a unit of the second.
    assert p.U[0] == pytest.approx(3.92, abs=0.005)


def test_gum_s1_additive_model_monte_carlo_normal():
    mc = monte_carlo(_additive, np.zeros(4), np.eye(4), n=200_000, seed=20080101)
    # Standard error of a sample standard deviation is u/sqrt(2M) = 0.0032: allow ~5x.
    assert mc.u[0] == pytest.approx(2.0, abs=0.016)
    # Standard error of the mean is u/sqrt(M) = 0.0045: allow ~5x.
    assert mc.value[0] == pytest.approx(0.0, abs=0.022)
    # Standard error of a 2.5 % quantile: sqrt(p(1-p)/M)/pdf(1.96) * u = 0.012;
    # 0.06 is 5x (the published 3.92 is itself rounded to 0.005).
    assert mc.low[0] == pytest.approx(-3.92, abs=0.06)
    assert mc.high[0] == pytest.approx(3.92, abs=0.06)


def test_gum_s1_additive_model_monte_carlo_rectangular():
    # JCGM 101:2008 9.2.3: the same model with rectangular inputs of u = 1; Monte
    # Carlo interval [-3.88, 3.88] (from memory), narrower than the GUF's +-3.92.
    mc = monte_carlo(
        _additive, np.zeros(4), np.eye(4), n=1_000_000, seed=7, dist="uniform", interval="symmetric"
    )
    assert mc.u[0] == pytest.approx(2.0, abs=0.007)  # 5 x u/sqrt(2M)
    # Quantile standard error ~0.005 at M = 1e6 (the sum of four rectangles is
    # close to normal); 0.02 is 4x and still separates 3.88 from 3.92.
    assert mc.high[0] == pytest.approx(3.88, abs=0.02)
    assert mc.low[0] == pytest.approx(-3.88, abs=0.02)


# --------------------------------------------------------------------------- independent


def test_linear_matches_uncertainties_package_nonlinear_correlated():
    x = np.array([2.0, 0.7, 5.0])
    u = np.array([0.05, 0.02, 0.3])
    r = np.array([[1.0, 0.4, -0.3], [0.4, 1.0, 0.2], [-0.3, 0.2, 1.0]])
    cov = r * np.outer(u, u)

    def f(v):
        return np.array(
            [v[0] * v[1] / v[2], np.exp(v[0]) * np.sin(v[1]), np.sqrt(v[0] ** 2 + v[2])]
        )

    a, b, c = uncertainties.correlated_values(x, cov)
    ref = [a * b / c, umath.exp(a) * umath.sin(b), umath.sqrt(a**2 + c)]
    ref_cov = np.array(uncertainties.covariance_matrix(ref))
    p = propagate(f, x, cov)
    np.testing.assert_allclose(p.value, [y.nominal_value for y in ref], rtol=1e-14)
    # The package differentiates exactly; central differences with h = 1e-3 u have a
    # truncation error ~ (h/x)^2 ~ 1e-10 relative: 1e-7 leaves room for round-off.
    np.testing.assert_allclose(p.cov, ref_cov, rtol=1e-7)
    # And the analytic branch with the package's exact derivatives as the Jacobian
    # (taken on independent variables: derivatives depend on the estimates only).
    ai, bi, ci = (uncertainties.ufloat(v, 1.0) for v in x)
    outs = [ai * bi / ci, umath.exp(ai) * umath.sin(bi), umath.sqrt(ai**2 + ci)]
    jac = np.array([[y.derivatives.get(v, 0.0) for v in (ai, bi, ci)] for y in outs])
    pa = propagate(f, x, cov, jacobian=lambda _: jac)
    np.testing.assert_allclose(pa.cov, ref_cov, rtol=1e-12)  # same numbers, round-off only


def test_monte_carlo_agrees_with_linear_on_nearly_linear_function():
    # Efficiency = P / Q with 0.5 % and 0.7 % standard uncertainties: second-order
    # terms are ~(u/x)^2 ~ 5e-5 relative, far below Monte Carlo noise.
    x = np.array([400e6, 1000e6])
    u = np.array([2e6, 7e6])
    cov = np.diag(u**2)
    cov[0, 1] = cov[1, 0] = 0.3 * u[0] * u[1]
    p = propagate(lambda v: v[0] / v[1], x, cov)
    mc = monte_carlo(lambda v: v[0] / v[1], x, cov, n=200_000, seed=3)
    # Relative standard error of the MC standard deviation is 1/sqrt(2M) = 0.16 %:
    # 1 % is ~6 standard errors.
    assert mc.u[0] == pytest.approx(p.u[0], rel=0.01)
    # Mean: standard error u/sqrt(M) ~ 6e-6 absolute on 0.4; allow 5x.
    assert mc.value[0] == pytest.approx(p.value[0], abs=5 * p.u[0] / np.sqrt(200_000))
    # Interval half-width: quantile noise ~0.6 % of U; 3 % tolerance.
    assert (mc.high[0] - mc.low[0]) / 2 == pytest.approx(p.U[0], rel=0.03)


def test_shortest_and_symmetric_intervals_lognormal():
    # y = exp(x), x ~ N(0, 0.5^2): y is lognormal (scipy.stats.lognorm, reference library).
    sigma = 0.5
    dist = stats.lognorm(s=sigma)
    sym = monte_carlo(np.exp, [0.0], [[sigma**2]], n=400_000, seed=11, interval="symmetric")
    sho = monte_carlo(np.exp, [0.0], [[sigma**2]], n=400_000, seed=11, interval="shortest")
    # Probabilistically symmetric: the 2.5 % and 97.5 % quantiles.  Quantile standard
    # error at M = 4e5 is < 0.3 % of the value; 1.5 % relative is 5x.
    assert sym.low[0] == pytest.approx(dist.ppf(0.025), rel=0.015)
    assert sym.high[0] == pytest.approx(dist.ppf(0.975), rel=0.015)
    # Shortest 95 % interval of the lognormal found independently with scipy.optimize.
    res = optimize.minimize_scalar(
        lambda a: dist.ppf(a + 0.95) - dist.ppf(a), bounds=(1e-9, 0.05 - 1e-9), method="bounded"
    )
    lo, hi = dist.ppf(res.x), dist.ppf(res.x + 0.95)
    assert sho.low[0] == pytest.approx(lo, rel=0.015)  # same quantile noise as above
    assert sho.high[0] == pytest.approx(hi, rel=0.015)
    assert sho.high[0] - sho.low[0] < sym.high[0] - sym.low[0]


def test_monte_carlo_deterministic_with_seed():
    cov = [[1.0, 0.3], [0.3, 2.0]]

    def f(v):
        return np.array([v[0] * v[1], v[0] - v[1]])

    a = monte_carlo(f, [1.0, 2.0], cov, n=1000, seed=5, keep_samples=True)
    b = monte_carlo(f, [1.0, 2.0], cov, n=1000, seed=5, keep_samples=True)
    c = monte_carlo(f, [1.0, 2.0], cov, n=1000, seed=6)
    np.testing.assert_array_equal(a.samples, b.samples)
    assert a.value[0] != c.value[0]
    assert a.samples.shape == (2, 1000)
    # Non-vectorised evaluation draws the same inputs, so gives the same samples.
    d = monte_carlo(f, [1.0, 2.0], cov, n=1000, seed=5, vectorized=False, keep_samples=True)
    np.testing.assert_allclose(d.samples, a.samples, rtol=1e-15)


def test_monte_carlo_singular_covariance():
    # Two fully correlated inputs: Cholesky fails, the eigen factor is used.  y = x0 - x1
    # is then exactly zero in every trial.
    u = 0.2
    cov = np.full((2, 2), u**2)
    mc = monte_carlo(lambda v: v[0] - v[1], [1.0, 1.0], cov, n=1000, seed=1)
    assert mc.u[0] == pytest.approx(0.0, abs=1e-12)  # round-off of the factor only


# --------------------------------------------------------------------------- budget etc.


def test_budget_independent_inputs_are_textbook_terms():
    # Y = 2 X1 - 3 X2 + X3 with independent inputs: (c_i u_i)^2 per input (GUM Eq. 10).
    u = np.array([0.1, 0.2, 0.3])
    p = propagate_linear([2.0, -3.0, 1.0], np.diag(u**2), names=["a", "b", "c"])
    b = p.budget_for(0)
    np.testing.assert_allclose(b["variance_contribution"], [0.04, 0.36, 0.09], rtol=1e-14)
    np.testing.assert_allclose(b["u_contribution"], [0.2, 0.6, 0.3], rtol=1e-14)
    assert b["share"].sum() == pytest.approx(1.0, rel=1e-14)
    assert p.u[0] ** 2 == pytest.approx(0.49, rel=1e-14)


def test_budget_correlated_splits_cross_terms():
    # Y = X1 + X2, u = 1 each, r = -0.5: u^2 = 1 + 1 - 1 = 1.  Each input keeps its
    # own term and half of the cross term: 1 - 0.5 = 0.5 each.
    cov = np.array([[1.0, -0.5], [-0.5, 1.0]])
    p = propagate_linear([1.0, 1.0], cov, x=[3.0, 4.0], value=[7.0])
    b = p.budget_for("y0")
    np.testing.assert_allclose(b["variance_contribution"], [0.5, 0.5], rtol=1e-14)
    assert p.u[0] == pytest.approx(1.0, rel=1e-14)
    assert list(b["estimate"]) == [3.0, 4.0]


def test_budget_rows_and_series_names():
    x = pd.Series([2.0, 3.0], index=["P", "Q"])
    p = propagate(
        lambda v: np.array([v[0] * v[1], v[0] / v[1]]),
        x,
        np.diag([0.01, 0.04]),
        output_names=["prod", "ratio"],
    )
    assert p.input_names == ("P", "Q")
    assert len(p.budget) == 4
    sums = p.budget.groupby("output", sort=False)["variance_contribution"].sum()
    np.testing.assert_allclose(sums.to_numpy(), p.u**2, rtol=1e-12)
    frame = p.to_frame()
    assert list(frame.index) == ["prod", "ratio"]


def test_welch_satterthwaite_and_k():
    # Two equal contributions with 10 dof each: nu_eff = 20 (GUM Eq. G.2b arithmetic).
    nu = effective_dof([[1.0, 1.0]], np.eye(2), [10, 10])
    assert nu[0] == pytest.approx(20.0, rel=1e-14)
    p = propagate_linear([1.0, 1.0], np.eye(2), dof=[10, 10])
    # t_{0.975, 20} = 2.086 (Student t table; common practice, from memory), and scipy.
    assert p.k[0] == pytest.approx(stats.t.ppf(0.975, 20), rel=1e-12)
    assert p.k[0] == pytest.approx(2.086, abs=5e-4)
    pk = propagate_linear([1.0, 1.0], np.eye(2), dof=[10, 10], k=2)
    assert pk.U[0] == pytest.approx(2 * np.sqrt(2), rel=1e-14)


def test_expanded_and_coverage_factor():
    assert expanded(1.0) == pytest.approx(stats.norm.ppf(0.975), rel=1e-12)
    assert expanded(0.5, k=2) == 1.0
    assert coverage_factor(5, 0.95) == pytest.approx(stats.t.ppf(0.975, 5), rel=1e-12)
    s = pd.Series([1.0, 2.0], index=["a", "b"])
    out = expanded(s, dof=5)
    assert isinstance(out, pd.Series) and list(out.index) == ["a", "b"]
    assert out["b"] == pytest.approx(2 * stats.t.ppf(0.975, 5), rel=1e-12)


def test_to_ufloats_round_trip():
    cov = np.array([[0.04, 0.01], [0.01, 0.09]])
    a, b = to_ufloats([1.0, 2.0], cov, names=["a", "b"])
    np.testing.assert_allclose(uncertainties.covariance_matrix([a, b]), cov, rtol=1e-12)
    s = to_ufloats(pd.Series([1.0, 2.0], index=["p", "q"]), cov)
    assert list(s.index) == ["p", "q"]
    assert s["q"].std_dev == pytest.approx(0.3, rel=1e-12)


def test_propagation_ufloats():
    p = propagate(lambda v: np.array([v[0] + v[1], v[0] - v[1]]), [1.0, 2.0], np.eye(2))
    y0, y1 = p.ufloats()
    # (x0 + x1) and (x0 - x1) are uncorrelated for equal variances: 0 up to round-off.
    assert uncertainties.covariance_matrix([y0, y1])[0][1] == pytest.approx(0.0, abs=1e-9)


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"cov": [[1.0, 0.2], [0.3, 1.0]]}, "symmetric"),
        ({"cov": [[1.0, 0.0], [0.0, -1.0]]}, "non-negative variances"),
        ({"cov": np.eye(3)}, r"\(2, 2\) covariance"),
        ({"cov": [[1.0, 2.0], [2.0, 1.0]]}, r"\|correlation\| <= 1"),
        ({"method": "magic"}, "'method'.*'analytic' or 'numerical'"),
        ({"method": "analytic"}, "'jacobian' parameter"),
        ({"dof": [10, -1]}, "'dof'.*positive"),
        ({"level": 95}, "'level'.*0.95"),
        ({"x": [1.0, np.nan]}, "'x'.*finite"),
        ({"names": ["a"]}, "'names'.*2 entries"),
    ],
)
def test_propagate_errors(kwargs, match):
    args = {"x": [1.0, 2.0], "cov": np.eye(2)}
    args.update(kwargs)
    x, cov = args.pop("x"), args.pop("cov")
    with pytest.raises(InputError, match=match):
        propagate(lambda v: v[0] * v[1], x, cov, **args)


@pytest.mark.parametrize(
    ("cov", "kwargs", "match"),
    [
        # |r| <= 1 pairwise but not positive semi-definite (eigenvalue -0.8).
        ([[1.0, 0.9, 0.9], [0.9, 1.0, -0.9], [0.9, -0.9, 1.0]], {}, "positive semi-definite"),
        ([[1.0, 0.1, 0.0], [0.1, 1.0, 0.0], [0.0, 0.0, 1.0]], {"dist": "uniform"}, "diagonal"),
        (np.eye(3), {"dist": "cauchy"}, "'dist'"),
        (np.eye(3), {"interval": "widest"}, "'interval'"),
        (np.eye(3), {"n": 10}, "'n'.*>= 100"),
    ],
)
def test_monte_carlo_errors(cov, kwargs, match):
    with pytest.raises(InputError, match=match):
        monte_carlo(lambda v: v[0] + v[1] + v[2], [0.0, 0.0, 0.0], cov, **kwargs)


def test_monte_carlo_bad_function_shape():
    with pytest.raises(InputError, match="vectorized=False"):
        monte_carlo(lambda v: float(v[0][0]), [0.0], [[1.0]], n=100)


def test_expanded_errors():
    with pytest.raises(InputError, match="'u'.*non-negative"):
        expanded(-1.0)
    with pytest.raises(InputError, match="'k'.*positive"):
        expanded(1.0, k=0)
