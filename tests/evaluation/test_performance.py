"""Tests of perftest.evaluation.performance against textbook thermodynamics and trade facts."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from perftest.errors import InputError, PerftestWarning
from perftest.evaluation.performance import (
    carnot_cop_heat_pump,
    carnot_cop_refrigeration,
    carnot_efficiency,
    cop_second_law_efficiency,
    curzon_ahlborn_efficiency,
    exergetic_efficiency,
    exergy_destruction,
    first_law_efficiency,
    from_btu_per_kwh,
    from_kj_per_kwh,
    gouy_stodola_closure,
    gouy_stodola_destruction,
    heat_exergy,
    heat_rate,
    net_power,
    second_law_efficiency,
    to_btu_per_kwh,
    to_kj_per_kwh,
)

# Molar gas constant, CODATA 2018 (exact since the 2019 SI), and molar mass of dry
# air 28.9647 g/mol (common textbook value, from memory).
R_MOLAR = 8.314462618
M_AIR = 28.9647e-3


# --------------------------------------------------------------------------- first law


def test_first_law_and_heat_rate_are_reciprocal():
    # 400 MW from 1000 MW of fuel: 40 %, heat rate 2.5 J/J = 9000 kJ/kWh
    # (the SI convention in docs/architecture.md; 3600 kJ per kWh exactly).
    assert first_law_efficiency(400e6, 1000e6) == pytest.approx(0.4, rel=1e-15)
    assert heat_rate(1000e6, 400e6) == pytest.approx(2.5, rel=1e-15)
    assert to_kj_per_kwh(2.5) == pytest.approx(9000.0, rel=1e-15)
    assert from_kj_per_kwh(9000.0) == pytest.approx(2.5, rel=1e-15)


def test_heat_rate_of_full_efficiency_in_btu():
    # 100 % efficiency is 3412.14 Btu/kWh (common fact of the trade, no source);
    # 1 Btu_IT = 1.055 055 852 62 kJ exactly (NIST SP 811, Appendix B).
    # Tolerance: the trade figure is rounded to 0.01 Btu/kWh.
    assert to_btu_per_kwh(heat_rate(1.0, 1.0)) == pytest.approx(3412.14, abs=0.005)
    # 9000 kJ/kWh in Btu/kWh: 9000 / 1.05505585262 = 8530.35 (hand arithmetic).
    assert to_btu_per_kwh(2.5) == pytest.approx(8530.35, abs=0.005)
    # Round trip is exact up to round-off (two multiplications).
    assert from_btu_per_kwh(to_btu_per_kwh(2.5)) == pytest.approx(2.5, rel=1e-15)


def test_net_power_and_series_in_series_out():
    idx = pd.date_range("2024-01-01", periods=3, freq="min")
    gross = pd.Series([410e6, 411e6, 409e6], index=idx)
    aux = pd.Series([10e6, 10.5e6, 9e6], index=idx)
    net = net_power(gross, aux)
    assert isinstance(net, pd.Series) and net.index.equals(idx)
    np.testing.assert_allclose(net.to_numpy(), [400e6, 400.5e6, 400e6], rtol=1e-15)
    eta = first_law_efficiency(net, pd.Series(1000e6, index=idx))
    assert isinstance(eta, pd.Series) and eta.index.equals(idx)


def test_first_law_above_one_warns():
    with pytest.warns(PerftestWarning, match="above 1"):
        first_law_efficiency(2.0, 1.0)


# --------------------------------------------------------------------------- Carnot


def test_carnot_and_second_law_textbook():
    # Heat engine between 600 K and 300 K: Carnot 50 %; an engine of 30 % first-law
    # efficiency has a second-law efficiency of 60 % (textbook arithmetic, e.g.
    # Cengel & Boles, Thermodynamics: An Engineering Approach, ch. 6 and 8; from memory).
    eta_c = carnot_efficiency(600.0, 300.0)
    assert eta_c == pytest.approx(0.5, rel=1e-15)
    assert second_law_efficiency(0.3, eta_c) == pytest.approx(0.6, rel=1e-15)


def test_curzon_ahlborn_west_thurrock():
    # Curzon & Ahlborn 1975 (Am. J. Phys. 43, 22, DOI 10.1119/1.10023), table of
    # plants: West Thurrock coal-fired station, T_sink 25 degC, T_source 565 degC,
    # Carnot 0.64, CA 0.40 (from memory).  Published to two decimals: half a unit.
    t_hot, t_cold = 565.0 + 273.15, 25.0 + 273.15
    assert carnot_efficiency(t_hot, t_cold) == pytest.approx(0.64, abs=0.005)
    assert curzon_ahlborn_efficiency(t_hot, t_cold) == pytest.approx(0.40, abs=0.005)
    # CA never exceeds Carnot (sqrt(r) > r for 0 < r < 1).
    r = np.linspace(0.05, 0.95, 19)
    assert np.all(curzon_ahlborn_efficiency(1.0, r) < carnot_efficiency(1.0, r))


def test_carnot_cops():
    # Refrigerator between 270 K and 300 K: COP_R = 270/30 = 9, COP_HP = 300/30 = 10
    # (textbook arithmetic, Cengel & Boles ch. 6).
    assert carnot_cop_refrigeration(270.0, 300.0) == pytest.approx(9.0, rel=1e-15)
    assert carnot_cop_heat_pump(270.0, 300.0) == pytest.approx(10.0, rel=1e-15)
    # First law for a cycle: Q_H = Q_L + W, hence COP_HP = COP_R + 1 for any pair.
    tc = np.array([250.0, 273.15, 280.0])
    th = np.array([300.0, 308.15, 400.0])
    np.testing.assert_allclose(
        carnot_cop_heat_pump(tc, th), carnot_cop_refrigeration(tc, th) + 1.0, rtol=1e-14
    )
    # A chiller with COP 4.5 against the 9.0 bound works at 50 % of Carnot.
    assert cop_second_law_efficiency(4.5, 9.0) == pytest.approx(0.5, rel=1e-15)


def test_second_law_above_one_warns():
    with pytest.warns(PerftestWarning, match="Carnot"):
        second_law_efficiency(0.6, 0.5)
    with pytest.warns(PerftestWarning, match="Carnot COP"):
        cop_second_law_efficiency(10.0, 9.0)


# --------------------------------------------------------------------------- exergy


def test_heat_exergy_is_carnot_fraction():
    # 100 kW delivered at 600 K with T0 = 300 K carries 50 kW of exergy
    # (Bejan, Tsatsaronis & Moran 1996, exergy of heat; textbook arithmetic).
    assert heat_exergy(100e3, 600.0, 300.0) == pytest.approx(50e3, rel=1e-15)
    t = np.array([350.0, 500.0, 900.0])
    np.testing.assert_allclose(
        heat_exergy(1.0, t, 298.15), carnot_efficiency(t, 298.15), rtol=1e-15
    )
    # Heat drawn from a cold space (T < T0): negative exergy factor.
    assert heat_exergy(1.0, 250.0, 300.0) < 0


def _ideal_gas_flow_exergy(m, T, p, T0, p0, cp, R):
    """Specific flow exergy of an ideal gas with constant cp (textbook form), times m."""
    dh = cp * (T - T0)
    ds = cp * math.log(T / T0) - R * math.log(p / p0)
    return m * (dh - T0 * ds)


def test_gouy_stodola_on_throttling_of_ideal_gas():
    # Adiabatic throttling of air (ideal gas): h and T unchanged, entropy generated
    # S_gen = m R ln(p1/p2) (Cengel & Boles ch. 7; Bejan et al. 1996 ch. 3).
    R = R_MOLAR / M_AIR
    cp = 1004.5  # J/(kg K), dry air near 300 K (common textbook value, from memory)
    m, T, p1, p2 = 2.0, 320.0, 10e5, 2e5
    T0, p0 = 298.15, 101325.0
    s_gen = m * R * math.log(p1 / p2)
    # Exergy in and out computed independently from the ideal-gas flow exergy.
    ex_in = _ideal_gas_flow_exergy(m, T, p1, T0, p0, cp, R)
    ex_out = _ideal_gas_flow_exergy(m, T, p2, T0, p0, cp, R)
    destroyed_balance = exergy_destruction(ex_in, ex_out)
    destroyed_gs = gouy_stodola_destruction(s_gen, T0)
    # Same physics by two routes; only floating-point round-off separates them.
    assert destroyed_gs == pytest.approx(destroyed_balance, rel=1e-12)
    closure = gouy_stodola_closure([destroyed_gs], [0.0], ex_in, ex_out, rtol=1e-9)
    assert closure.closed
    assert abs(closure.imbalance) < 1e-9 * ex_in  # round-off only
    # Forgetting the destruction leaves the whole exergy drop unaccounted for.
    assert not gouy_stodola_closure([0.0], [0.0], ex_in, ex_out, rtol=1e-6).closed


def test_heat_transfer_across_finite_temperature_difference():
    # Q flows from T_H to T_L through a wall: S_gen = Q (1/T_L - 1/T_H), and the
    # exergy destroyed is the drop in heat exergy (Bejan et al. 1996 ch. 3).
    Q, th, tl, t0 = 1e6, 800.0, 400.0, 300.0
    s_gen = Q * (1.0 / tl - 1.0 / th)
    d_balance = exergy_destruction(
        0.0, 0.0, heat_exergy_in=heat_exergy(Q, th, t0), heat_exergy_out=heat_exergy(Q, tl, t0)
    )
    assert d_balance == pytest.approx(gouy_stodola_destruction(s_gen, t0), rel=1e-12)
    # 375 kW by hand: 1e6 * 300 * (1/400 - 1/800).
    assert d_balance == pytest.approx(375e3, rel=1e-12)


def test_exergy_destruction_of_turbine_and_exergetic_efficiency():
    # Turbine: 100 MW of flow exergy in, 30 MW out, 60 MW shaft work: 10 MW destroyed.
    assert exergy_destruction(100e6, 30e6, work_out=60e6) == pytest.approx(10e6, rel=1e-15)
    # Pump: 1 MW in, 0.8 MW flow-exergy rise: 0.2 MW destroyed.
    assert exergy_destruction(5e6, 5.8e6, work_in=1e6) == pytest.approx(0.2e6, rel=1e-9)
    assert exergetic_efficiency(40.0, 100.0) == pytest.approx(0.4, rel=1e-15)


def test_negative_entropy_generation_warns():
    with pytest.warns(PerftestWarning, match="negative entropy generation"):
        gouy_stodola_destruction(-1.0, 300.0)


# --------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    ("func", "args", "match"),
    [
        (carnot_efficiency, (300.0, 600.0), "'sink_temperature'.*below 'source_temperature'"),
        (carnot_efficiency, (600.0, 600.0), "'sink_temperature'.*below"),
        (carnot_efficiency, (600.0, -1.0), "'sink_temperature'.*positive absolute"),
        (carnot_efficiency, (0.0, 300.0), "'source_temperature'.*positive absolute.*Got 0"),
        (curzon_ahlborn_efficiency, (300.0, 600.0), "'sink_temperature'.*below"),
        (carnot_cop_refrigeration, (300.0, 270.0), "'cold_temperature'.*below"),
        (carnot_cop_heat_pump, (300.0, 300.0), "'cold_temperature'.*below"),
        (first_law_efficiency, (1.0, 0.0), "'heat_input'.*positive.*Got 0"),
        (first_law_efficiency, (1.0, -5.0), "'heat_input'.*Got -5"),
        (heat_rate, (1.0, 0.0), "'power'.*positive"),
        (net_power, (100.0, -1.0), "'auxiliary_power'.*non-negative"),
        (second_law_efficiency, (0.3, 0.0), "'carnot_efficiency'.*positive"),
        (second_law_efficiency, (0.3, 1.5), "'carnot_efficiency'.*at most 1"),
        (cop_second_law_efficiency, (3.0, -1.0), "'carnot_cop'.*positive"),
        (heat_exergy, (1.0, 0.0, 300.0), "'source_temperature'.*positive"),
        (heat_exergy, (1.0, 400.0, -3.0), "'dead_state_temperature'.*positive"),
        (exergetic_efficiency, (1.0, 0.0), "'exergy_input'.*positive"),
        (gouy_stodola_destruction, (1.0, 0.0), "'dead_state_temperature'.*positive"),
        (gouy_stodola_closure, ([1.0], [0.0], 0.0, 0.0), "'exergy_in'.*positive"),
        (carnot_efficiency, ("hot", 300.0), "'source_temperature'.*numeric"),
    ],
)
def test_errors(func, args, match):
    with pytest.raises(InputError, match=match):
        func(*args)


def test_error_in_array_names_the_offending_value():
    src = np.array([600.0, 500.0, 400.0])
    sink = np.array([300.0, 300.0, 450.0])
    with pytest.raises(InputError, match="sink_temperature = 450 K, source_temperature = 400 K"):
        carnot_efficiency(src, sink)


def test_nan_passes_through():
    out = carnot_efficiency(np.array([600.0, np.nan]), np.array([300.0, 300.0]))
    assert out[0] == pytest.approx(0.5) and np.isnan(out[1])
