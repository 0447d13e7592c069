"""The plant model asks for the (p, T) states of one fluid in one call.

The values must be those of the property layer's call per group of streams
(``perftest.plant.states.h_pT``, which applies the saturation rules and names the
stream in its messages): exactly, since the same CoolProp evaluations are made.
Where a rule applies (a state within the saturation margin of its declared side, on
the wrong side, out of range) the one call declines and the groups are asked one by
one, so values and messages stay those of the group calls.

Outside checks: CoolProp's Helmholtz-energy backend gives the same numbers for a
state whatever it evaluated before (fresh ``AbstractState`` objects against one used
for other states first); scipy's ``csr_matrix`` constructor for the Jacobian blocks.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pytest
import scipy.sparse as sp

import perftest
from perftest.errors import PropertyRangeError
from perftest.plant import build_model
from perftest.plant import states as thermo
from perftest.plant.guess import initial_guess
from perftest.thermo.properties import get_fluid

ROOT = Path(__file__).resolve().parents[2]
SCENARIOS = ["brackenfold", "ostrenby", "wrenhollow"]


def _model(name):
    path = ROOT / "sample_data" / name / "plant.toml"
    plant = perftest.load_plant(path)
    model = build_model(plant)
    files = sorted(path.parent.glob("*.csv"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([str(f) for f in files], plant=plant)
        meas = run.average()
    x = np.array([meas[t].value for t in model.measured])
    return model, x, initial_guess(model, x)


def _by_group(model, v):
    """h, dh/dT, dh/dp of every state row from one property-layer call per group."""
    parts = [
        thermo.h_pT(fl, ph, v[p], v[T], sids) for fl, ph, _, sids, p, T, _ in model._state_groups
    ]
    return tuple(np.concatenate(z) for z in zip(*parts, strict=True))


def _vapour_state(model, fluid):
    """Pressure and temperature slots of the first declared-vapour stream of `fluid`
    whose temperature is measured or unmeasured (not fixed), and its stream id."""
    for fl, ph, _, sids, p, T, _ in model._state_groups:
        if fl == fluid and ph == "vapour":
            for sid, ps, ts in zip(sids, p, T, strict=True):
                if model._slot_x[ts] >= 0 or model._slot_y[ts] >= 0:
                    return int(ps), int(ts), sid
    raise AssertionError(f"no vapour stream of {fluid}")


def _set(model, x, y, slot, value):
    x, y = x.copy(), y.copy()
    if model._slot_x[slot] >= 0:
        x[model._slot_x[slot]] = value
    else:
        y[model._slot_y[slot]] = value
    return x, y


@pytest.mark.parametrize("name", SCENARIOS)
def test_one_call_per_fluid_equals_the_group_calls(name):
    model, x0, y0 = _model(name)
    assert model._st_batches  # the plant has states the one call takes
    rng = np.random.default_rng(11)
    for _ in range(4):
        x = x0 * (1 + 1e-3 * rng.standard_normal(x0.size))
        y = y0 * (1 + 1e-3 * rng.standard_normal(y0.size))
        v = model.slot_values(x, y)
        got = model._state_values(v)
        # the same CoolProp evaluations on the same inputs: equal to the last bit
        for a, b in zip(got, _by_group(model, v), strict=True):
            np.testing.assert_array_equal(a, b)
        # and the state rows of the residual use them
        r = model.imbalance(x, y)
        hslot = v[[model.index[f"{s}.enthalpy"] for g in model._state_groups for s in g[3]]]
        np.testing.assert_array_equal(r[model._st_rows], hslot - got[0])


@pytest.mark.parametrize(("name", "fluid"), [("brackenfold", "water"), ("ostrenby", "R134a")])
def test_state_inside_the_margin_takes_the_group_rules(name, fluid):
    """A declared vapour 0.03 K above saturation (inside the 0.05 K margin) is
    computed at the anchor Tsat + margin by the rules; the one call must decline."""
    model, x0, y0 = _model(name)
    v0 = model.slot_values(x0, y0)
    p_slot, T_slot, _ = _vapour_state(model, fluid)
    tsat = float(get_fluid(fluid).saturation_T(v0[p_slot]))
    x, y = _set(model, x0, y0, T_slot, tsat + 0.03)
    v = model.slot_values(x, y)
    batch = next(b for b in model._st_batches if b[0] == fluid)
    assert thermo.h_pT_sides(fluid, v[batch[3]], v[batch[4]], batch[5], batch[6]) is None
    for a, b in zip(model._state_values(v), _by_group(model, v), strict=True):
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize(("name", "fluid"), [("brackenfold", "water"), ("ostrenby", "R134a")])
def test_wrong_side_raises_the_group_message(name, fluid):
    model, x0, y0 = _model(name)
    v0 = model.slot_values(x0, y0)
    p_slot, T_slot, sid = _vapour_state(model, fluid)
    tsat = float(get_fluid(fluid).saturation_T(v0[p_slot]))
    x, y = _set(model, x0, y0, T_slot, tsat - 2.0)
    v = model.slot_values(x, y)
    with pytest.raises(PropertyRangeError) as expected:
        _by_group(model, v)
    with pytest.raises(PropertyRangeError) as got:
        model.residual(x, y)
    assert str(got.value) == str(expected.value)
    assert f"stream '{sid}'" in str(got.value) and "below saturation" in str(got.value)


@pytest.mark.parametrize("fluid", ["R134a", "Water", "CO2"])
def test_helmholtz_backend_values_do_not_depend_on_earlier_updates(fluid):
    """The one call evaluates the states of several groups in another order than the
    group calls did; this holds because a state's numbers do not depend on what the
    AbstractState evaluated before."""
    rng = np.random.default_rng(5)
    shared = CP.AbstractState("HEOS", fluid)
    pc, Tc = shared.p_critical(), shared.T_critical()
    checked = 0
    for _ in range(60):
        p, T = rng.uniform(0.05, 1.5) * pc, rng.uniform(0.7, 1.4) * Tc
        for _ in range(2):  # other updates first: saturation and single-phase states
            try:
                if rng.random() < 0.5:
                    shared.update(CP.PQ_INPUTS, rng.uniform(0.05, 0.9) * pc, float(rng.integers(2)))
                else:
                    shared.update(
                        CP.PT_INPUTS, rng.uniform(0.05, 1.5) * pc, rng.uniform(0.7, 1.4) * Tc
                    )
            except ValueError:
                pass
        fresh = CP.AbstractState("HEOS", fluid)
        try:
            fresh.update(CP.PT_INPUTS, p, T)
        except ValueError:
            continue
        shared.update(CP.PT_INPUTS, p, T)
        a, b = (
            (s.hmass(), s.cpmass(), s.first_partial_deriv(CP.iHmass, CP.iP, CP.iT))
            for s in (fresh, shared)
        )
        assert a == b  # bit for bit, not to a tolerance
        ps = rng.uniform(0.05, 0.95) * pc
        fresh = CP.AbstractState("HEOS", fluid)
        fresh.update(CP.PQ_INPUTS, ps, 0.0)
        shared.update(CP.PQ_INPUTS, ps, 0.0)
        assert fresh.T() == shared.T()
        checked += 1
    assert checked > 30


def test_csr_blocks_are_what_the_constructor_makes():
    model, x, y = _model("brackenfold")
    Jx, Jy = model.jacobian(x, y)
    for J in (Jx, Jy):
        ref = sp.csr_matrix((J.data.copy(), J.indices.copy(), J.indptr.copy()), shape=J.shape)
        assert type(J) is type(ref) and list(vars(J)) == list(vars(ref))
        for key, value in vars(ref).items():
            mine = vars(J)[key]
            if isinstance(value, np.ndarray):
                assert mine.dtype == value.dtype and np.array_equal(mine, value)
            else:
                assert mine == value
        assert J.has_canonical_format
    # each call hands out its own arrays: changing one matrix leaves the next intact
    Jx.indices[:] = 0
    Jx.data[:] = 0.0
    Jx2, _ = model.jacobian(x, y)
    assert np.any(Jx2.indices != 0) and np.any(Jx2.data != 0.0)


def test_jacobian_at_overflowing_values_warns_like_the_residual():
    """m h products that overflow warn in the residual; the Jacobian, which leaves
    the residual out where values are moderate, must still warn there."""
    model, x0, y0 = _model("brackenfold")
    x, y = x0.copy(), y0.copy()
    for j, name in enumerate(model.variables):
        if name.endswith((".mass_flow", ".enthalpy")):
            if model._slot_x[j] >= 0:
                x[model._slot_x[j]] *= 1e200
            elif model._slot_y[j] >= 0:
                y[model._slot_y[j]] *= 1e200
    for call in (model.residual, model.jacobian, model.dense_jacobian):
        with warnings.catch_warnings(record=True) as seen:
            warnings.simplefilter("always")
            call(x, y)
        assert any(
            issubclass(w.category, RuntimeWarning) and "overflow" in str(w.message) for w in seen
        )
