"""perftest.planning.separability: instruments no measurement test can tell apart.

Outside checks:

* the test plant (tests/data/plants/parallel_branches.toml) is a pure mass-flow
  network, so its constraints are linear and written out here by hand: the weighted
  least-squares adjustment and the measurement test (Narasimhan and Jordache, Data
  Reconciliation and Gross Error Detection, 2000, Ch. 3 and 7, from memory:
  :math:`a = \\Sigma A^T (A \\Sigma A^T)^{-1} A x`, :math:`V = \\Sigma A^T (A \\Sigma
  A^T)^{-1} A \\Sigma`, :math:`z_i = |a_i| / \\sqrt{V_{ii}}`) are computed with numpy,
  independently of perftest, and a gross error planted in one branch meter gives the
  other branch meter the same statistic, while one in the feed meter does not;
* two parallel branches between a splitter and a mixer, and two meters in series
  with nothing else, cannot be told apart; a feed and an outlet meter can (common
  practice, no source);
* the chiller scenario's condenser-water circuit (flow meter and two thermometers)
  enters only its condenser's energy balance, so its three instruments cannot be told
  apart (issue 16 names exactly this set; common practice, no source).
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import numpy as np
import pytest

import perftest
from perftest.demo import data_dir
from perftest.errors import IndistinguishableWarning
from perftest.planning.prediction import plan
from perftest.report.plan import indistinguishable_table, plan_json, plan_markdown, plan_text

PLANT = Path(__file__).resolve().parents[1] / "data" / "plants" / "parallel_branches.toml"

# feed, branch_1, branch_2, outlet, bypass_in, bypass_out: design values [kg/s] and
# the stated uncertainties [% of reading] of the plant file (kind percent_of_reading,
# read as a standard uncertainty, no level given)
TAGS = ["FT-0", "FT-1", "FT-2", "FT-3", "FT-A", "FT-B"]
VALUES = np.array([10.0, 4.0, 6.0, 10.0, 5.0, 5.0])
PCT = np.array([1.0, 1.0, 1.5, 1.0, 1.0, 2.0])
# mass balances of the splitter, the mixer and the bypass valve
A = np.array(
    [
        [1.0, -1.0, -1.0, 0.0, 0.0, 0.0],
        [0.0, 1.0, 1.0, -1.0, 0.0, 0.0],
        [0.0, 0.0, 0.0, 0.0, 1.0, -1.0],
    ]
)


def _by_hand():
    """Covariance of the adjustments and the measurement test, written out."""
    Sigma = np.diag((PCT / 100.0 * VALUES) ** 2)
    K = Sigma @ A.T @ np.linalg.inv(A @ Sigma @ A.T)
    V = K @ A @ Sigma

    def z(x):
        a = K @ (A @ x)
        return np.abs(a) / np.sqrt(np.diag(V))

    return V, z


@pytest.fixture(scope="module")
def network_plan():
    with pytest.warns(IndistinguishableWarning) as record:
        tp = plan(PLANT, what_if=False)
    return tp, record


def _sets(tp, kind="identical"):
    s = tp.indistinguishable
    return {frozenset(t) for t, k in zip(s["tags"], s["kind"], strict=True) if k == kind}


def test_hand_calculation_shows_which_meters_tie():
    V, z = _by_hand()
    sd = np.sqrt(np.diag(V))
    rho = np.abs(V) / np.outer(sd, sd)
    # parallel branches and the series pair: |rho| = 1 to round-off (1e-12 is far above
    # the ~1e-15 round-off of a 6 x 6 product)
    assert rho[1, 2] == pytest.approx(1.0, abs=1e-12)
    assert rho[4, 5] == pytest.approx(1.0, abs=1e-12)
    # feed and outlet meters are told apart (|rho| well below the near threshold)
    assert rho[0, 3] < 0.9
    # a gross error of 5 % in branch 1: both branch meters get the same statistic
    x = VALUES.copy()
    x[1] *= 1.05
    zz = z(x)
    assert zz[1] == pytest.approx(zz[2], rel=1e-12)  # round-off only
    # in the feed meter: its own statistic is the largest, the outlet's differs
    x = VALUES.copy()
    x[0] *= 1.05
    zz = z(x)
    assert zz[0] > zz[3] + 1.0  # at least one unit of the statistic apart


def test_plan_lists_the_sets_the_hand_calculation_finds(network_plan):
    tp, _ = network_plan
    V, _ = _by_hand()
    sd = np.sqrt(np.diag(V))
    rho = np.abs(V) / np.outer(sd, sd)
    expected = set()
    for i in range(len(TAGS)):
        for j in range(i + 1, len(TAGS)):
            if rho[i, j] > 1 - 1e-9:  # the exact ties of the hand calculation
                expected.add(frozenset({TAGS[i], TAGS[j]}))
    assert expected == {frozenset({"FT-1", "FT-2"}), frozenset({"FT-A", "FT-B"})}
    assert _sets(tp) == expected
    assert not _sets(tp, "near")
    assert all(math.isinf(z) for z in tp.indistinguishable["separating_z"])


def test_warning_names_each_set(network_plan):
    _, record = network_plan
    text = " ".join(str(w.message) for w in record if w.category is IndistinguishableWarning)
    assert "{FT-1, FT-2}" in text and "{FT-A, FT-B}" in text
    assert "FT-0" not in text and "FT-3" not in text


def test_sets_in_tables_markdown_json_and_text(network_plan):
    tp, _ = network_plan
    table = indistinguishable_table(tp)
    assert set(table["tags"]) == {"FT-1, FT-2", "FT-A, FT-B"}
    assert set(table["separating_z"]) == {"never"}
    md = plan_markdown(tp, "rig")
    assert "## Instruments no test can tell apart" in md
    assert "| 1 | identical | FT-1, FT-2 |" in md
    data = json.loads(plan_json(tp, "rig"))
    assert {frozenset(s["tags"]) for s in data["indistinguishable"]} == _sets(tp)
    assert all(s["separating_z"] is None for s in data["indistinguishable"])
    assert "FT-A, FT-B" in plan_text(tp)


def test_trusted_instrument_settles_the_choice(tmp_path):
    text = PLANT.read_text(encoding="utf-8").replace(
        '[tags.FT-B]\nunit = "kg/s"', '[tags.FT-B]\nunit = "kg/s"\ntrusted = true'
    )
    assert "trusted = true" in text
    path = tmp_path / "plant.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.warns(IndistinguishableWarning) as record:
        tp = plan(path, what_if=False)
    assert _sets(tp) == {frozenset({"FT-1", "FT-2"})}
    assert "FT-A" not in " ".join(str(w.message) for w in record)


def test_chiller_condenser_water_circuit_is_one_set():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IndistinguishableWarning)
        tp = plan(data_dir("ostrenby") / "plant.toml", what_if=False)
    assert frozenset({"FT-311", "TT-311", "TT-312"}) in _sets(tp)


def test_no_warning_when_every_set_has_a_trusted_member(tmp_path):
    # One trusted meter in each pair: elimination knows which to drop, nothing to warn.
    text = PLANT.read_text(encoding="utf-8")
    for tag in ("FT-2", "FT-B"):
        text = text.replace(
            f'[tags.{tag}]\nunit = "kg/s"', f'[tags.{tag}]\nunit = "kg/s"\ntrusted = true'
        )
    assert text.count("trusted = true") == 2
    path = tmp_path / "plant.toml"
    path.write_text(text, encoding="utf-8")
    with warnings.catch_warnings():
        warnings.simplefilter("error", IndistinguishableWarning)
        tp = perftest.plan(path, what_if=False)
    assert tp.indistinguishable.empty
    assert json.loads(plan_json(tp))["indistinguishable"] == []
    assert "tell apart" not in plan_markdown(tp)


@pytest.mark.parametrize("near", [0.0, 1.0, 1.5, "0.9"])
def test_near_threshold_is_checked(network_plan, near):
    from perftest.planning.prediction import _reconcile
    from perftest.planning.separability import indistinguishable_sets

    tp, _ = network_plan
    rec = _reconcile(perftest.load_plant(PLANT), tp.measurements)
    with pytest.raises(perftest.InputError, match="'near' parameter of indistinguishable_sets"):
        indistinguishable_sets(rec, near=near)
    # a looser threshold finds the same identical sets (they are exact ties)
    loose = indistinguishable_sets(rec, near=0.5)
    assert {frozenset(t) for t, k in zip(loose["tags"], loose["kind"], strict=True)
            if k == "identical"} == _sets(tp)  # fmt: skip
