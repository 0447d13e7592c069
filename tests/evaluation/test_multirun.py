"""Tests of several repeated runs or load points (perftest.evaluation.multirun, joint).

Outside checks:

* the variance of a weighted sum of correlated estimates against GUM Eq. (13)
  (JCGM 100:2008, 5.2.2) written out as a double sum, and against the textbook
  closed form for N equicorrelated estimates, u^2 (1 + (N - 1) rho) / N (GUM Eq. 13
  with c_i = 1/N and r(x_i, x_j) = rho);
* a Monte Carlo with numpy: simulated tests whose instrument systematic offsets are
  drawn once per test and whose random noise is drawn per run, against the
  reported u of the combined result;
* the split of each result into random and systematic parts against finite
  differences of the whole reconcile + evaluate chain (an independent method);
* the bundled scenarios' generator truth (sample_data/*/truth.json): the steam
  unit as two repeated runs and the chiller per load point within U95.
"""

from __future__ import annotations

import dataclasses
import json
import math
import shutil
import warnings

import numpy as np
import pandas as pd
import pytest

import perftest
from perftest.demo import SCENARIOS, data_dir
from perftest.errors import InputError, PlantFileError
from perftest.evaluation.joint import (
    VarianceSplit,
    combine,
    joint_covariance,
    mean_variance,
    repeatability,
)
from perftest.evaluation.multirun import Campaign, evaluate_test

STEAM_RUNS = [("2026-05-14 09:00", "2026-05-14 10:30"), ("2026-05-14 10:30", "2026-05-14 12:00")]
CHILLER_POINTS = [
    ("100 %", "2026-07-09 08:30", "2026-07-09 09:30"),
    ("75 %", "2026-07-09 10:00", "2026-07-09 11:00"),
    ("50 %", "2026-07-09 11:30", "2026-07-09 12:30"),
]


def _load(name):
    folder = data_dir(name)
    plant = perftest.load_plant(folder / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([folder / f for f in SCENARIOS[name].files], plant)
    truth = json.loads((folder / "truth.json").read_text())
    return plant, run, truth


@pytest.fixture(scope="module")
def steam():
    plant, run, truth = _load("brackenfold")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        test = evaluate_test(plant, run, runs=STEAM_RUNS)
    return plant, run, truth, test


@pytest.fixture(scope="module")
def chiller():
    plant, run, truth = _load("ostrenby")
    points = [dict(label=p[0], start=p[1], end=p[2], weight=w)
              for p, w in zip(CHILLER_POINTS, (0.2, 0.4, 0.4), strict=True)]  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        test = evaluate_test(plant, run, points=points)
    return plant, run, truth, test


# --------------------------------------------------------------------- GUM Eq. (13)


def test_mean_variance_is_gum_eq13_double_sum():
    rng = np.random.default_rng(5)
    A = rng.normal(size=(4, 4))
    C = A @ A.T + 0.1 * np.eye(4)
    x = rng.normal(size=4)
    w = np.array([0.1, 0.2, 0.3, 0.4])
    # GUM Eq. (13): u_c^2(y) = sum_i sum_j (df/dx_i)(df/dx_j) u(x_i, x_j), df/dx_i = w_i
    by_hand = sum(w[i] * w[j] * C[i, j] for i in range(4) for j in range(4))
    value, var = mean_variance(x, C, w)
    assert value == pytest.approx(float(np.sum(w * x)), rel=1e-12)
    assert var == pytest.approx(by_hand, rel=1e-12)  # same sum, other order: rounding only


@pytest.mark.parametrize("n, rho", [(2, 0.0), (2, 1.0), (3, 0.6), (5, 0.25)])
def test_mean_of_equicorrelated_runs_closed_form(n, rho):
    u = 0.7
    C = u**2 * (rho * np.ones((n, n)) + (1 - rho) * np.eye(n))
    _, var = mean_variance(np.zeros(n), C)
    # GUM Eq. (13) with c_i = 1/N, u(x_i, x_j) = rho u^2: u^2 (1 + (N - 1) rho) / N
    assert var == pytest.approx(u**2 * (1 + (n - 1) * rho) / n, rel=1e-12)  # rounding only


# --------------------------------------------------------------------- Monte Carlo


def _split(grad, cov_r, cov_s, sources, names):
    G = pd.DataFrame(grad, index=names, columns=sources)
    Gz = np.asarray(grad)
    return VarianceSplit(
        sources=tuple(sources), gradient=G, cov_random=cov_r, cov_systematic=cov_s,
        u_random=pd.Series(np.sqrt(np.einsum("ij,jk,ik->i", Gz, cov_r, Gz)), index=names),
        u_systematic=pd.Series(np.sqrt(np.einsum("ij,jk,ik->i", Gz, cov_s, Gz)), index=names),
    )  # fmt: skip


def test_combined_runs_against_monte_carlo_of_simulated_tests():
    """COP = m cp dT / P from three instruments, three runs at slightly different
    readings; systematic offsets drawn once per simulated test (one as percent of
    reading, so the runs' systematic parts differ in size), noise drawn per run."""
    cp = 4186.0
    truth = [np.array([48.0, 5.45, 204e3]), np.array([47.5, 5.50, 203e3]),
             np.array([48.3, 5.40, 205e3])]  # fmt: skip
    sources = ["FT", "DT", "JT"]
    names = ["cop"]
    # systematic: flow 0.5 % of reading, dT 0.03 K, power 0.4 % of reading; random parts
    sys_rel = np.array([0.005, 0.0, 0.004])
    sys_abs = np.array([0.0, 0.03, 0.0])
    u_rand = np.array([0.08, 0.012, 300.0])

    def f(x):
        return x[..., 0] * cp * x[..., 1] / x[..., 2]

    splits, covs, values = [], [], []
    for x in truth:
        u_s = sys_rel * x + sys_abs
        Cs, Cr = np.diag(u_s**2), np.diag(u_rand**2)
        g = np.array([[cp * x[1] / x[2], x[0] * cp / x[2], -f(x) / x[2]]])
        splits.append(_split(g, Cr, Cs, sources, names))
        covs.append(pd.DataFrame(g @ (Cr + Cs) @ g.T, index=names, columns=names))
        values.append([f(x)])
    joint = joint_covariance(splits, covs, names)
    frame, _ = combine(np.array(values), joint, names, np.full(3, 1 / 3), np.full((3, 1), np.inf))
    u_reported = float(frame.loc["cop", "u"])

    rng = np.random.default_rng(20261205)
    M = 40_000
    xi = rng.standard_normal((M, 3))  # one systematic draw per simulated test
    combined = np.zeros(M)
    for x in truth:
        offset = xi * (sys_rel * x + sys_abs)  # same instrument error, scaled per reading
        noise = rng.standard_normal((M, 3)) * u_rand  # new scatter every run
        combined += f(x + offset + noise) / 3
    u_mc = float(np.std(combined, ddof=1))
    # 40 000 tests resolve a standard deviation to 1/sqrt(2M) = 0.35 %; the model's
    # curvature at 0.5 % input uncertainties adds well under 0.1 %: 2 % is generous
    # and still fails if the shared systematic part were treated as independent
    # (that would shrink u by about 25 % here).
    assert u_reported == pytest.approx(u_mc, rel=0.02)
    # the independent-runs answer must be clearly wrong, so the check can fail
    naive = math.sqrt(sum(float(c.iloc[0, 0]) for c in covs)) / 3
    assert abs(naive / u_mc - 1) > 0.1


def test_repeatability_two_runs_is_the_difference_test():
    # two runs, random parts 1 and 1: allowed |r1 - r2| = 1.96 sqrt(2) = 2.772
    rep = repeatability(np.array([[0.0, 0.0], [2.7, 2.9]]), np.ones((2, 2)), ["a", "b"])
    assert rep.loc["a", "limit"] == pytest.approx(1.959964 * math.sqrt(2), rel=1e-6)
    assert bool(rep.loc["a", "passed"]) and not bool(rep.loc["b", "passed"])
    # chi-squared with one dof of d^2 / (u1^2 + u2^2): p = 2 (1 - Phi(|d| / sqrt 2))
    from scipy.stats import norm

    assert rep.loc["b", "p_value"] == pytest.approx(2 * norm.sf(2.9 / math.sqrt(2)), rel=1e-9)


# --------------------------------------------------------------------- the steam unit


def test_split_adds_up_to_each_runs_variance(steam):
    *_, test = steam
    for w in test.windows:
        u = w.performance.results["u"]
        total = w.split.u_random**2 + w.split.u_systematic**2
        ok = u > 0
        # both come from the same linearisation; rounding only
        assert np.allclose(total[ok], u[ok] ** 2, rtol=1e-6)


def test_split_gradient_against_finite_differences(steam):
    """d(result)/d(mean of a tag) by re-running reconcile and evaluate."""
    plant, _, _, test = steam
    w = test.windows[0]
    m = w.measurements
    from perftest.balance.plant import reconcile
    from perftest.evaluation.results import evaluate

    for tag, result in (("FT-201", "first_law_efficiency"), ("JT-101", "net_power"),
                        ("TT-181", "net_power")):  # fmt: skip
        i = m.index(tag)
        h = 0.2 * float(m.u[i])
        vals = []
        for s in (-1, 1):
            v = np.array(m.value, dtype=float)
            v[i] += s * h
            mm = dataclasses.replace(m, value=v)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                rec = reconcile(plant, mm, eliminate=True)  # as the window was (FT-171 out)
                perf = evaluate(plant, rec, monte_carlo=False, detail=False)
            vals.append(perf.value(result))
        fd = (vals[1] - vals[0]) / (2 * h)
        g = float(w.split.gradient.loc[result, tag])
        scale = abs(g) * float(m.u[i]) + 1e-12 * abs(perf.value(result))
        # central difference over +-0.2 u: the nonlinear balances bend little over
        # that step; 2 % of the contribution u * g leaves room for the solver's tolerance
        assert abs(fd - g) * float(m.u[i]) <= 0.02 * scale + 1e-9 * abs(vals[0])


def test_steam_two_runs_against_truth(steam):
    _, _, truth, test = steam
    assert test.mode == "runs" and len(test.windows) == 2
    res = test.results
    for name in ("net_power", "first_law_efficiency", "heat_rate", "corrected_net_power",
                 "corrected_heat_rate"):  # fmt: skip
        # the generator's true value must lie inside the combined U95 (a 95 % interval:
        # these five are strongly correlated, so one miss is unlikely by chance)
        assert abs(res.loc[name, "value"] - truth["results"][name]) <= res.loc[name, "U95"]
        runs = [w.performance.results.loc[name] for w in test.windows]
        assert res.loc[name, "value"] == pytest.approx(np.mean([r["value"] for r in runs]))
        # averaging shrinks the random part only: the mean's u lies between the shared
        # systematic part and the larger run's u
        u_sys = min(w.split.u_systematic[name] for w in test.windows)
        assert u_sys * (1 - 1e-9) <= res.loc[name, "u"] <= max(r["u"] for r in runs)


def test_steam_guarantees_judged_on_the_mean(steam):
    plant, _, _, test = steam
    g = test.guarantees.set_index("quantity")
    assert set(g.index) == {"corrected_net_power", "corrected_heat_rate"}
    for q, row in g.iterrows():
        assert row["corrected_value"] == pytest.approx(test.results.loc[q, "value"])
        assert row["U95"] == pytest.approx(test.results.loc[q, "U95"])


def test_repr_and_html(steam, chiller):
    for t in (steam[-1], chiller[-1]):
        assert isinstance(t, Campaign)
        text, html = repr(t), t._repr_html_()
        for w in t.windows:
            assert w.label in text and w.label in html
    assert "mean" in repr(steam[-1]) and "weighted_cop" in repr(chiller[-1])


# --------------------------------------------------------------------- the chiller


def test_chiller_points_against_truth(chiller):
    *_, truth, test = chiller
    assert [w.label for w in test.windows] == [p["label"] for p in truth["points"]]
    for w, p in zip(test.windows, truth["points"], strict=True):
        res = w.performance.results
        for name in ("cooling_capacity", "power_input", "cop", "corrected_cop",
                     "corrected_cooling_capacity"):  # fmt: skip
            # each point's result within its own U95 of the generator's truth
            assert abs(res.loc[name, "value"] - p["results"][name]) <= res.loc[name, "U95"], (
                w.label,
                name,
            )


def test_chiller_weighted_cop(chiller):
    *_, test = chiller
    w = np.array([0.2, 0.4, 0.4])
    cops = np.array([x.performance.results.loc["cop", "value"] for x in test.windows])
    assert test.results.loc["weighted_cop", "value"] == pytest.approx(float(w @ cops), rel=1e-12)
    # its variance is Eq. (13) over the three points' joint covariance
    j = test.joint.xs("cop", level="name").xs("cop", level="name", axis=1).to_numpy()
    assert test.results.loc["weighted_cop", "u"] ** 2 == pytest.approx(float(w @ j @ w))
    # points share instruments: positively correlated, so more than independent
    assert float(w @ j @ w) > float(w**2 @ np.diag(j))


def test_chiller_guarantees_per_point(chiller):
    *_, test = chiller
    # the plant's full-load guarantees are judged at the rated (first) point only:
    # a full-load capacity judged at 50 % load would be a false "not met"
    assert set(test.guarantees["point"]) == {"100 %"}
    assert len(test.guarantees) == 2
    assert any("rated point" in n for n in test.notes)
    assert test.repeatability.empty


# --------------------------------------------------------------------- plant file, CLI


POINTS_TOML = """

[[points]]
label = "100 %"
start = "2026-07-09 08:30"
end = "2026-07-09 09:30"

[[points]]
label = "50 %"
start = "2026-07-09 11:30"
end = "2026-07-09 12:30"
reference = { "cw_in.temperature" = { value = 27.0, unit = "degC" } }
guarantees = [{ quantity = "corrected_cop", value = 6.0, unit = "kW/kW", direction = "at_least" }]
"""


def _chiller_copy(tmp_path, extra):
    folder = data_dir("ostrenby")
    for f in SCENARIOS["ostrenby"].files:
        shutil.copy(folder / f, tmp_path / f)
    (tmp_path / "plant.toml").write_text((folder / "plant.toml").read_text() + extra)
    return tmp_path / "plant.toml", [tmp_path / f for f in SCENARIOS["ostrenby"].files]


def test_plant_file_points_with_reference_and_guarantees(tmp_path, chiller):
    plant_path, files = _chiller_copy(tmp_path, POINTS_TOML)
    from perftest.demo import run_pipeline

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = run_pipeline(plant_path, files, out_dir=tmp_path / "o")
    s = json.loads((tmp_path / "o" / "summary.json").read_text())
    md = (tmp_path / "o" / "report.md").read_text()
    # the header lists the points, a section shows them, the part-load figure exists
    assert "| Load points | 100 %: 2026-07-09 08:30 to 09:30; 50 %: 2026-07-09 11:30" in md
    assert "## Load points" in md and "figures/part_load.png" in md
    assert (tmp_path / "o" / "figures" / "part_load.png").stat().st_size > 1000
    assert [p["label"] for p in s["points"]] == ["100 %", "50 %"]
    p50 = s["points"][1]
    assert [g["quantity"] for g in p50["guarantees"]] == ["corrected_cop"]
    assert len(s["points"][0]["guarantees"]) == 2  # the plant's two guarantees
    # reference 27.0 degC instead of 29.5: the curve factor at the point's condition
    # over the factor at 27.0 (1.056 in the plant's curve) must relate the two
    # corrected COPs of the same window
    base = chiller[-1].windows[2].performance.results.loc["corrected_cop", "value"]
    assert p50["results"]["corrected_cop"]["value"] == pytest.approx(base * 1.056, rel=1e-9)
    assert out.test.mode == "points"


def test_plant_file_point_reference_of_a_polynomial_correction_is_refused(tmp_path):
    # A point can move the reference of a table curve only; a polynomial correction
    # is refused with its key and line.
    folder = data_dir("ostrenby")
    text = (folder / "plant.toml").read_text()
    text = text.replace(
        "curve = { x = [20.0, 24.0, 27.0, 29.5, 32.0, 35.0], y = [1.215, 1.122, 1.056, 1.0, "
        '0.946, 0.884], x_unit = "degC" }',
        "polynomial = [1.0, -0.02]",
    )
    assert "polynomial = [1.0, -0.02]" in text
    plant_path, files = _chiller_copy(tmp_path, POINTS_TOML)
    plant_path.write_text(text + POINTS_TOML)
    plant = perftest.load_plant(plant_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run(files, plant)
    with pytest.raises(PlantFileError, match="polynomial or a surface") as info:
        evaluate_test(plant, run)
    assert info.value.line is not None


def test_plant_file_point_reference_to_unknown_variable(tmp_path):
    bad = POINTS_TOML.replace('"cw_in.temperature"', '"cw_out.temperature"')
    plant_path, files = _chiller_copy(tmp_path, bad)
    plant = perftest.load_plant(plant_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run(files, plant)
    with pytest.raises(PlantFileError, match="cw_out.temperature"):
        evaluate_test(plant, run)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(runs=STEAM_RUNS, points=[("a", "2026-05-14 09:00", "2026-05-14 10:00")]), "both"),
        (dict(runs=STEAM_RUNS[:1]), "at least two runs"),
        (dict(runs=[STEAM_RUNS[0] + ("x",), STEAM_RUNS[1] + ("x",)]), "must differ"),
        # the same window twice would count its random part twice as independent
        (dict(runs=[STEAM_RUNS[0], STEAM_RUNS[0]]), "overlap"),
        (
            dict(
                points=[
                    ("a", "2026-05-14 09:00", "2026-05-14 10:00"),
                    ("b", "2026-05-14 09:30", "2026-05-14 10:30"),
                ]
            ),
            "overlap",
        ),
        (dict(runs=[("2026-05-14 10:00", "2026-05-14 09:00"), STEAM_RUNS[1]]), "ends before"),
        (dict(points=[("a", "2026-05-14 09:00")]), "label, start, end"),
        (
            dict(
                points=[
                    dict(label="a", start="2026-05-14 09:00", end="2026-05-14 10:00", weight=1.0),
                    ("b", "2026-05-14 10:00", "2026-05-14 11:00"),
                ]
            ),
            "every load point",
        ),  # fmt: skip
        (dict(), "needs 'runs' or 'points'"),
    ],
)
def test_bad_windows(steam, kwargs, match):
    plant, run, *_ = steam
    with pytest.raises(InputError, match=match):
        evaluate_test(plant, run, **kwargs)


def test_cli_runs_writes_runs_and_repeatability(tmp_path, capsys):
    from perftest.cli import main

    folder = data_dir("brackenfold")
    args = ["report", str(folder / "plant.toml"), "-q", "--json", str(tmp_path / "s.json"),
            "--markdown", str(tmp_path / "r.md"), "--no-figures"]  # fmt: skip
    for f in SCENARIOS["brackenfold"].files:
        args += ["--data", str(folder / f)]
    for a, b in STEAM_RUNS:
        args += ["--run", a, b]
    assert main(args) == 0
    s = json.loads((tmp_path / "s.json").read_text())
    assert [r["start"][:16] for r in s["runs"]] == ["2026-05-14T09:00", "2026-05-14T10:30"]
    assert set(s["repeatability"]["results"]) >= {"net_power", "corrected_heat_rate"}
    mean = np.mean([r["results"]["corrected_heat_rate"]["value"] for r in s["runs"]])
    assert s["results"]["corrected_heat_rate"]["value"] == pytest.approx(mean, rel=1e-12)
    assert "repeatability" in capsys.readouterr().out
    md = (tmp_path / "r.md").read_text()
    assert "| Repeated runs | run 1: 2026-05-14 09:00 to 10:30; run 2:" in md
    assert "## Repeated runs" in md and "chi-squared test of the runs" in md
    # a window option and --run contradict each other: one line, status 2
    assert main([*args, "--start", "2026-05-14 09:00"]) == 2
    assert "--run states the windows" in capsys.readouterr().err


def test_plan_predicts_mean_of_n_runs():
    plant = perftest.load_plant(data_dir("ostrenby") / "plant.toml")
    one = perftest.plan(plant, what_if=False)
    four = perftest.plan(plant, what_if=False, runs=4)
    assert "U95_mean" not in one.results
    r = four.results
    for name in ("cop", "corrected_cop"):
        rank = four.ranking(name)
        random_share = float(rank["random"].sum())
        # u^2 = u_s^2 + u_r^2 / N with u_r^2 = random share x u^2 (GUM Eq. 13, shared
        # systematic parts); rounding only
        expected = r.loc[name, "u_with"] ** 2 * (1 - random_share * (1 - 1 / 4))
        assert r.loc[name, "u_mean"] ** 2 == pytest.approx(expected, rel=1e-9)
        assert r.loc[name, "U95_mean"] < r.loc[name, "U95_with"]
    with pytest.raises(InputError, match="runs"):
        perftest.plan(plant, what_if=False, runs=0)


@pytest.mark.parametrize(
    "extra, match",
    [
        (
            '\n[[runs]]\nstart = "2026-07-09 08:30"\nend = "2026-07-09 09:30"\n',
            r"plant.toml, line \d+.*at least two runs",
        ),
        (
            '\n[[points]]\nstart = "2026-07-09 08:30"\nend = "2026-07-09 09:30"\n',
            r"plant.toml, line \d+.*needs a 'label'",
        ),
        (
            '\n[[points]]\nlabel = "a"\nstart = "2026-07-09 08:30"\nend = "2026-07-09 09:30"\n'
            'weight = 1\n[[points]]\nlabel = "b"\nstart = "2026-07-09 10:00"\n'
            'end = "2026-07-09 11:00"\n',
            r"line \d+.*every load point",
        ),
        (
            '\n[[points]]\nlabel = "a"\nstart = "noon"\nend = "2026-07-09 09:30"\n',
            r"plant.toml, line \d+.*noon",
        ),
    ],
)
def test_plant_file_windows_bad(tmp_path, extra, match):
    plant_path, files = _chiller_copy(tmp_path, extra)
    plant = perftest.load_plant(plant_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run(files, plant)
    with pytest.raises(PlantFileError, match=match):
        evaluate_test(plant, run)
