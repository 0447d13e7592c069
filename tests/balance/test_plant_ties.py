"""Plant-level serial elimination among tags the measurement test cannot tell apart.

A water line on an invented test bench: s_in -> valve u1 -> s_mid -> valve u2 -> s_out,
with flow meters on the streams.  Liquid water at 1 bar and 30 degC (values of our own).
The reference for the statistics is the closed form of weighted least squares with
equal flows along the line (each flow reconciled to the weighted mean of the meters).
"""

from __future__ import annotations

import math
import types
import warnings

import numpy as np
import pytest

import perftest
from perftest.balance.plant_elimination import trusted_tags
from perftest.errors import InputError, ReconciliationWarning
from perftest.run.measurements import Measurements

PLANT = """\
[site]
name = "Hollin Cross test bench"

[tags.FT-1]
unit = "kg/s"
[tags.FT-2]
unit = "kg/s"
[tags.FT-3]
unit = "kg/s"
[tags.TT-1]
unit = "degC"
[tags.PT-1]
unit = "bar"

[streams.s_in]
fluid = "water"
phase = "liquid"
mass_flow = "FT-1"
pressure = "PT-1"
temperature = "TT-1"

[streams.s_mid]
fluid = "water"
phase = "liquid"
mass_flow = "FT-2"

[streams.s_out]
fluid = "water"
phase = "liquid"
{out_flow}

[units.u1]
type = "valve"
inlets = ["s_in"]
outlets = ["s_mid"]

[units.u2]
type = "valve"
inlets = ["s_mid"]
outlets = ["s_out"]
"""


def _plant(tmp_path, three_meters):
    text = PLANT.format(out_flow='mass_flow = "FT-3"' if three_meters else "")
    if not three_meters:
        text = text.replace('[tags.FT-3]\nunit = "kg/s"\n', "")
    path = tmp_path / "plant.toml"
    path.write_text(text, encoding="utf-8")
    return perftest.load_plant(path)


def _measurements(flows, u_flows):
    tags = [f"FT-{i + 1}" for i in range(len(flows))] + ["PT-1", "TT-1"]
    values = np.array([*flows, 1.0e5, 303.15])
    u = np.array([*u_flows, 1.0e3, 0.2])
    return Measurements.from_values(tags, values, u)


def test_two_meters_on_one_line_keep_their_readings(tmp_path):
    plant = _plant(tmp_path, three_meters=False)
    meas = _measurements([10.0, 11.0], [0.1, 0.11])
    with pytest.warns(ReconciliationWarning, match="cannot tell apart"):
        rec = perftest.reconcile(plant, meas, eliminate=True)
    (step,) = rec.eliminated
    assert step.shared and {step.tag, *step.tied_with} == {"FT-1", "FT-2"}
    # one balance, one degree of freedom, which the step takes out
    assert (step.dof, step.redundancy_lost, rec.result.dof) == (1, 1, 0)
    # z = |r| / sqrt(u1^2 + u2^2) for one balance (closed form; rounding only)
    assert step.z == pytest.approx(1.0 / math.hypot(0.1, 0.11), rel=1e-9)
    assert rec.eliminated_tags == ()
    # Neither meter is dropped or adjusted: the readings stand (to the solver's
    # step tolerance, 1e-9 of u).
    frame = rec.to_frame(units="si").set_index("tag")
    np.testing.assert_allclose(frame.loc[["FT-1", "FT-2"], "reconciled"], [10.0, 11.0], atol=1e-9)
    assert not frame.loc[["FT-1", "FT-2"], "eliminated"].any()
    # and the valve's mass balance shows the 1 kg/s the set leaves open
    closure = rec.closure().set_index("unit")
    assert closure.loc["u1", "mass_imbalance"] == pytest.approx(-1.0, abs=1e-8)
    # Each single choice: dropping one meter gives both flows the other's reading.
    spread = rec.choice_spread(["FT-1", "FT-2", "s_out.mass_flow", "TT-1"])
    assert list(spread.columns[2:4]) == ["without FT-1", "without FT-2"]
    np.testing.assert_allclose(spread.loc["FT-1", ["without FT-1", "without FT-2"]], [11.0, 10.0])
    np.testing.assert_allclose(spread.loc["s_out.mass_flow", "spread"], 1.0, rtol=1e-9)
    assert spread.loc[["FT-1", "FT-2", "s_out.mass_flow"], "depends_on_choice"].all()
    # the temperature enters no redundant balance with the flows: no dependence
    assert not spread.loc["TT-1", "depends_on_choice"]
    assert len(rec.alternatives) == 2
    assert [a.eliminated[-1].tag for a in rec.alternatives] == ["FT-1", "FT-2"]


def test_trusted_meter_settles_the_choice(tmp_path):
    plant = _plant(tmp_path, three_meters=False)
    meas = _measurements([10.0, 11.0], [0.1, 0.11])
    with warnings.catch_warnings():
        warnings.simplefilter("error", ReconciliationWarning)  # no tie to report
        rec = perftest.reconcile(plant, meas, eliminate=True, trusted=["FT-2"])
    assert rec.eliminated_tags == ("FT-1",) and rec.alternatives == ()
    assert rec.trusted == ("FT-2",)
    # the flow is then the trusted meter's reading (rounding only)
    assert rec.value("s_in.mass_flow") == pytest.approx(11.0, rel=1e-12)
    with pytest.raises(InputError, match="'trusted' parameter of reconcile.*'FT-9'"):
        perftest.reconcile(plant, meas, eliminate=True, trusted=["FT-9"])


def test_a_clear_fault_among_three_meters_is_dropped_alone(tmp_path):
    # Three meters on one line, equal u: V = I - 11^T / 3 in units of u^2, so an
    # error e in FT-1 gives z1 = e sqrt(2/3), z2 = z3 = e sqrt(1/6) and correlation
    # 1/2 between the adjustments; at e = 10 u the conditions of
    # perftest.balance.ambiguity fail (|z1 - z2 / 2| = 6.1 > 1.96 sqrt(3/4) = 1.7).
    plant = _plant(tmp_path, three_meters=True)
    meas = _measurements([11.0, 10.0, 10.0], [0.1, 0.1, 0.1])
    with warnings.catch_warnings():
        warnings.simplefilter("error", ReconciliationWarning)
        rec = perftest.reconcile(plant, meas, eliminate=True)
    (step,) = rec.eliminated
    assert (step.tag, step.tied_with, step.shared) == ("FT-1", (), False)
    assert step.z == pytest.approx(10.0 * math.sqrt(2.0 / 3.0), rel=1e-9)  # rounding only
    assert not rec.choice_spread()["depends_on_choice"].any()


def _stand_in(text, tags):
    """A plant as a future loader may give it: tag records without the key, the
    file text with it."""
    return types.SimpleNamespace(
        name="stand-in",
        path="plant.toml",
        tags={t: types.SimpleNamespace() for t in tags},
        groups={},
        text=text,
        locate=lambda *keys: 7 if keys == ("tags", "FT-2", "trusted") else None,
    )


def test_trusted_key_read_from_the_plant_file_text():
    text = '[tags.FT-1]\nunit = "kg/s"\n[tags.FT-2]\nunit = "kg/s"\ntrusted = true\n'
    assert trusted_tags(_stand_in(text, ["FT-1", "FT-2"])) == ("FT-2",)
    # a validated record that carries the key wins over the text
    plant = _stand_in(text, ["FT-1", "FT-2"])
    plant.tags["FT-1"].trusted = True
    plant.tags["FT-2"].trusted = False
    assert trusted_tags(plant) == ("FT-1",)
    bad = text.replace("trusted = true", 'trusted = "yes"')
    with pytest.raises(InputError, match=r"'trusted' key of tag 'FT-2'.*line 7.*true or false"):
        trusted_tags(_stand_in(bad, ["FT-1", "FT-2"]))
