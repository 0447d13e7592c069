"""Tests of perftest.run.measurements: shapes, covariance, views."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from uncertainties import correlated_values

from perftest.errors import InputError
from perftest.run.measurements import MeasurementRecord, Measurements


def make():
    cov = np.array([[0.04, 0.01, 0.0], [0.01, 0.09, 0.0], [0.0, 0.0, 0.25]])
    return Measurements(
        tags=("PT-1", "TT-1", "FT-1"),
        quantities=("pressure", "temperature", "mass_flow"),
        units=("bar", "degC", "t/h"),
        value=[2.0e5, 300.0, 10.0],
        u_random=[0.2, 0.0, 0.3],
        u_systematic=[0.0, 0.3, 0.4],
        dof=[10.0, math.inf, 25.0],
        n_samples=[120, 120, 118],
        n_excluded=[0, 0, 2],
        cov=cov,
    )


def test_combined_u_and_record():
    m = make()
    # u = sqrt(u_r^2 + u_s^2) (GUM Eq. 10 for two uncorrelated parts)
    np.testing.assert_allclose(m.u, [0.2, 0.3, 0.5], rtol=1e-15)
    rec = m["FT-1"]
    assert isinstance(rec, MeasurementRecord)
    assert (rec.value, rec.u, rec.n_excluded, rec.unit) == (10.0, 0.5, 2, "t/h")
    assert len(m) == 3 and list(m) == ["PT-1", "TT-1", "FT-1"] and "TT-1" in m


def test_frame_view_uses_si_units():
    df = make().to_frame(units="si")
    assert list(df.columns) == [
        "tag",
        "quantity",
        "value",
        "unit",
        "u_random",
        "u_systematic",
        "u",
        "dof",
        "n_samples",
        "n_excluded",
        "coverage",
        "trend_p",
    ]
    # SI units of the glossary quantities (SI brochure, common facts)
    assert df["unit"].tolist() == ["Pa", "K", "kg/s"]
    assert df["u"].tolist() == pytest.approx([0.2, 0.3, 0.5])


def test_subset_keeps_covariance_block_in_order():
    m = make()
    s = m.subset(["TT-1", "PT-1"])
    assert s.tags == ("TT-1", "PT-1")
    np.testing.assert_array_equal(s.cov, [[0.09, 0.01], [0.01, 0.04]])
    assert s.value.tolist() == [300.0, 2.0e5]
    # correlation 0.01 / (0.2 * 0.3)
    assert s.correlation[0, 1] == pytest.approx(0.01 / 0.06)


def test_covariance_agrees_with_uncertainties_package():
    # a sum of two correlated tags: u^2 = u1^2 + u2^2 + 2 cov12, evaluated by the
    # general-purpose `uncertainties` package from the same covariance
    m = make()
    a, b, _ = correlated_values(list(m.value), m.cov)
    w = np.array([1.0, 1.0, 0.0])
    assert math.sqrt(w @ m.cov @ w) == pytest.approx((a + b).std_dev, rel=1e-12)


def test_frozen_and_read_only():
    m = make()
    with pytest.raises(dataclasses.FrozenInstanceError):
        m.value = np.zeros(3)
    with pytest.raises(ValueError):
        m.value[0] = 1.0  # arrays are read-only, so a Measurements cannot drift


def test_from_values_paths():
    m = Measurements.from_values(["A", "B"], [1.0, 2.0], [0.1, 0.2], quantities=["power", "power"])
    assert m.u_systematic.tolist() == [0.0, 0.0] and m.u.tolist() == [0.1, 0.2]
    assert np.all(np.isinf(m.dof))
    np.testing.assert_allclose(m.cov, np.diag([0.01, 0.04]), rtol=1e-15)  # 0.1**2 rounding
    parts = Measurements.from_values(["A"], [1.0], u_random=[0.3], u_systematic=[0.4])
    assert parts.u[0] == pytest.approx(0.5)  # 3-4-5
    c = Measurements.from_values(["A", "B"], [1.0, 2.0], cov=[[0.04, 0.01], [0.01, 0.09]])
    assert c.u.tolist() == pytest.approx([0.2, 0.3])


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"values": [1.0]}, "'values' parameter of Measurements must hold one value per tag"),
        ({"u": [0.1, -0.1]}, "'u_random' of tag 'B' must be a non-negative"),
        ({"cov": [[1.0, 0.0], [0.0, 1.0], [0.0, 0.0]]}, "must be 2 x 2"),
        ({"u": None}, "needs uncertainties"),
        ({"dof": [5.0, 0.0]}, "'dof' of tag 'B' must be positive"),
    ],
)
def test_from_values_bad_input(kwargs, match):
    args = {"tags": ["A", "B"], "values": [1.0, 2.0], "u": [0.1, 0.1]}
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        Measurements.from_values(**args)


def test_constructor_checks_covariance():
    base = dict(
        tags=("A", "B"),
        quantities=("", ""),
        units=("", ""),
        value=[1.0, 2.0],
        u_random=[0.1, 0.1],
        u_systematic=[0.0, 0.0],
        dof=[math.inf, math.inf],
        n_samples=[1, 1],
        n_excluded=[0, 0],
    )
    with pytest.raises(InputError, match="must be symmetric"):
        Measurements(**base, cov=[[0.01, 0.002], [0.0, 0.01]])
    with pytest.raises(InputError, match="For tag 'B' got 0.02 instead of 0.01"):
        Measurements(**base, cov=[[0.01, 0.0], [0.0, 0.02]])
    with pytest.raises(InputError, match="must not repeat a tag. Got 'A' twice"):
        Measurements(**{**base, "tags": ("A", "A")}, cov=np.diag([0.01, 0.01]))


def test_unknown_tag_is_named():
    with pytest.raises(InputError, match="Tag 'XX-9' is not among the measurements") as info:
        make()["XX-9"]
    assert info.value.tag == "XX-9"
