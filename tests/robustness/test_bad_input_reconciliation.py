"""Truth table of bad inputs to the reconciliation: ``reconcile_linear``,
``reconcile_nonlinear`` and ``perftest.reconcile`` (plant + measurements).

Every malformed argument must be refused before any arithmetic, with an
``InputError`` naming the parameter and what it got (house error shape, after
scikit-learn's parameter validation); a problem that only shows while solving
must be a ``ConvergenceError`` or ``PropertyRangeError``, never a numpy or scipy
exception and never a result holding NaN.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import perftest
from perftest.errors import ConvergenceError, InputError, PerftestError
from perftest.run.measurements import Measurements

# A splitter: stream 1 = stream 2 + stream 3.  Flows in kg/s (invented numbers).
X = np.array([100.0, 60.0, 41.0])
COV = np.diag([1.0, 0.5, 0.5])
A = np.array([[1.0, -1.0, -1.0]])
NAN = float("nan")


def lin(**kw):
    args = {"x": X, "cov": COV, "A": A}
    args.update(kw)
    return lambda: perftest.reconcile_linear(
        args["x"], args["cov"], args["A"], b=args.get("b"), B=args.get("B")
    )


def split_residual(x, y):
    return np.array([x[0] - x[1] - x[2]])


def non(**kw):
    args = {"residual": split_residual, "x": X, "cov": COV}
    args.update(kw)
    residual = args.pop("residual")
    x = args.pop("x")
    cov = args.pop("cov")
    return lambda: perftest.reconcile_nonlinear(residual, x, cov, **args)


# (call, error class, fragment)
LINEAR = [
    pytest.param(lin(x=[]), InputError, r"'x' parameter.*at least one", id="x-empty"),
    pytest.param(lin(x="abc"), InputError, r"'x' parameter", id="x-text"),
    pytest.param(lin(x=None), InputError, r"'x' parameter", id="x-none"),
    pytest.param(lin(x=[[1.0, 2.0, 3.0]]), InputError, r"'x' parameter.*1-D", id="x-2d"),
    pytest.param(lin(x=[100.0, NAN, 41.0]), InputError, r"'x'.*finite.*index 1", id="x-nan"),
    pytest.param(lin(x=[100.0, np.inf, 41.0]), InputError, r"'x'.*finite", id="x-inf"),
    pytest.param(lin(x=[100.0, 60.0]), InputError, r"'A' parameter|'cov'", id="x-short"),
    pytest.param(lin(cov=np.eye(2)), InputError, r"'cov' parameter.*\(3, 3\)", id="cov-shape"),
    pytest.param(lin(cov=[1.0, 0.5]), InputError, r"'cov' parameter", id="cov-vector-short"),
    pytest.param(
        lin(cov=np.diag([1.0, 0.0, 0.5])),
        InputError,
        r"'cov'.*positive definite.*index 1",
        id="cov-zero-variance",
    ),
    pytest.param(
        lin(cov=np.diag([1.0, -0.5, 0.5])),
        InputError,
        r"'cov'.*positive definite",
        id="cov-negative-variance",
    ),
    pytest.param(
        lin(cov=np.array([[1.0, 0.9, 0], [0.0, 0.5, 0], [0, 0, 0.5]])),
        InputError,
        r"'cov'.*symmetric",
        id="cov-asymmetric",
    ),
    pytest.param(
        lin(cov=np.array([[1.0, 2.0, 0], [2.0, 1.0, 0], [0, 0, 1.0]])),
        InputError,
        r"'cov'.*positive definite",
        id="cov-indefinite",
    ),
    pytest.param(lin(cov=np.diag([1.0, NAN, 0.5])), InputError, r"'cov'.*finite", id="cov-nan"),
    pytest.param(lin(cov=np.diag([1.0, np.inf, 0.5])), InputError, r"'cov'.*finite", id="cov-inf"),
    pytest.param(lin(A=[[1.0, -1.0]]), InputError, r"'A' parameter.*shape", id="A-columns"),
    pytest.param(lin(A=np.ones((1, 3, 1))), InputError, r"'A' parameter.*2-D", id="A-3d"),
    pytest.param(lin(A=[[1.0, NAN, -1.0]]), InputError, r"'A'.*finite", id="A-nan"),
    pytest.param(lin(A="A"), InputError, r"'A' parameter", id="A-text"),
    pytest.param(lin(b=[0.0, 0.0]), InputError, r"'b' parameter.*one entry per row", id="b-len"),
    pytest.param(lin(b=[NAN]), InputError, r"'b'.*finite", id="b-nan"),
    pytest.param(lin(B=[[1.0], [2.0]]), InputError, r"'B' parameter.*rows", id="B-rows"),
    pytest.param(lin(B=[[NAN]]), InputError, r"'B'.*finite", id="B-nan"),
    pytest.param(
        lin(A=np.array([[1.0, -1.0, -1.0], [2.0, -2.0, -2.0]]), b=[0.0, 5.0]),
        InputError,
        r"linearly dependent constraints whose right-hand sides disagree",
        id="dependent-rows-disagree",
    ),
]

NONLINEAR = [
    pytest.param(non(residual=42), InputError, r"'residual' parameter.*callable", id="res-int"),
    pytest.param(non(jacobian="J"), InputError, r"'jacobian' parameter.*callable", id="jac-text"),
    pytest.param(
        non(residual=lambda x, y: np.array([[x[0] - x[1] - x[2]]])),
        InputError,
        r"'residual'.*1-D",
        id="res-2d",
    ),
    pytest.param(
        non(jacobian=lambda x, y: np.array([[1.0, -1.0, -1.0]])),
        InputError,
        r"'jacobian'.*pair",
        id="jac-not-pair",
    ),
    pytest.param(non(x=[100.0, NAN, 41.0]), InputError, r"'x'.*finite", id="x-nan"),
    pytest.param(non(cov=np.diag([1.0, 0.0, 0.5])), InputError, r"'cov'", id="cov-zero"),
    pytest.param(non(y0=[NAN]), InputError, r"'y0'", id="y0-nan"),
    pytest.param(
        non(residual=lambda x, y: np.array([np.nan])),
        PerftestError,
        r"residual",
        id="res-returns-nan",
    ),
    pytest.param(
        non(residual=lambda x, y: np.array([x[0] ** 2 + 1.0])),
        ConvergenceError,
        r"did not converge",
        id="no-solution",
    ),
    pytest.param(
        non(residual=lambda x, y: np.array([x[0] - x[1] - x[2]]), max_iter=0),
        InputError,
        r"max_iter",
        id="max-iter-zero",
    ),
    pytest.param(
        non(residual=lambda x, y: np.array([x[0] - x[1] - x[2]]), tol=-1.0),
        InputError,
        r"tol",
        id="tol-negative",
    ),
]


@pytest.mark.parametrize("call, error, fragment", LINEAR)
def test_bad_linear_input(call, error, fragment):
    with pytest.raises(error, match=fragment):
        call()


@pytest.mark.parametrize("call, error, fragment", NONLINEAR)
def test_bad_nonlinear_input(call, error, fragment):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(error, match=fragment):
            call()


# --- perftest.reconcile(plant, measurements) ------------------------------------------


def with_values(m: Measurements, **values) -> Measurements:
    """A copy of ``m`` with some tag values [SI] replaced (uncertainties kept)."""
    v = np.array(m.value, dtype=float)
    for tag, val in values.items():
        v[m.index(tag.replace("_", "-"))] = val
    return _rebuild(m, v, np.array(m.cov, dtype=float))


def _rebuild(m: Measurements, value, cov) -> Measurements:
    from dataclasses import fields, replace

    names = {f.name for f in fields(m)}
    changes = {"value": value}
    if "cov" in names:
        changes["cov"] = cov
    return replace(m, **changes)


PLANT_LEVEL = [
    pytest.param({"alpha": 0.0}, None, InputError, r"'alpha' parameter of reconcile", id="a0"),
    pytest.param({"alpha": 1.5}, None, InputError, r"'alpha' parameter of reconcile", id="a>1"),
    pytest.param({"alpha": NAN}, None, InputError, r"'alpha' parameter of reconcile", id="a-nan"),
    pytest.param(
        {},
        {"TT_101": 200.0},  # 200 K: below the triple point, no water state
        PerftestError,
        r"main_steam|TT-101",
        id="steam-at-200K",
    ),
    pytest.param(
        {},
        {"PT_101": -5e5},
        PerftestError,
        r"main_steam|PT-101|positive",
        id="negative-pressure",
    ),
    pytest.param(
        {},
        {"TT_151": 500.0},  # condensate declared liquid at 500 K and 10 kPa: vapour
        PerftestError,
        r"condensate|TT-151",
        id="liquid-stream-above-saturation",
    ),
]


@pytest.mark.parametrize("kwargs, values, error, fragment", PLANT_LEVEL)
def test_bad_plant_reconciliation(demo_measurements, kwargs, values, error, fragment):
    plant, m = demo_measurements
    if values:
        m = with_values(m, **values)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(error, match=fragment):
            perftest.reconcile(plant, m, **kwargs)


def test_plant_reconcile_refuses_zero_uncertainty(demo_measurements):
    plant, m = demo_measurements
    from dataclasses import replace

    cov = np.array(m.cov, dtype=float)
    i = m.index("FT-101")
    cov[i, :] = 0.0
    cov[:, i] = 0.0
    ur = np.array(m.u_random, dtype=float)
    us = np.array(m.u_systematic, dtype=float)
    ur[i] = us[i] = 0.0
    m0 = replace(m, cov=cov, u_random=ur, u_systematic=us)
    with pytest.raises(InputError, match=r"Tag 'FT-101' has a zero uncertainty"):
        perftest.reconcile(plant, m0)


def test_plant_reconcile_wrong_types(demo_measurements):
    plant, m = demo_measurements
    with pytest.raises(InputError, match="'measurements' parameter of reconcile"):
        perftest.reconcile(plant, "measurements")
    with pytest.raises(InputError, match="'plant' parameter of reconcile"):
        perftest.reconcile("plant.toml", m)


# --- issue 17: messages a user can act on ---------------------------------------------


@pytest.mark.parametrize("rec", [None, "reconciliation", 3.0], ids=["none", "text", "number"])
def test_evaluate_without_a_reconciliation(demo_measurements, rec):
    from perftest.evaluation.results import evaluate

    plant, _ = demo_measurements
    with pytest.raises(InputError, match=r"'reconciliation' parameter of evaluate must be the "
                       r"result of perftest\.reconcile\(plant, measurements\)\. Got "):  # fmt: skip
        evaluate(plant, rec)


def test_singular_covariance_names_the_tags(demo_measurements):
    # one sample per tag: no random part, and the two cooling-water RTDs share a
    # calibration lot (fully correlated systematic parts): the covariance is singular
    plant, m = demo_measurements
    from dataclasses import replace

    ur = np.zeros(len(m.tags))
    us = np.array(m.u_systematic, dtype=float)
    i, j = m.index("TT-181"), m.index("TT-182")
    cov = np.diag(us**2)
    cov[i, j] = cov[j, i] = us[i] * us[j]
    single = replace(m, cov=cov, u_random=ur, n_samples=np.ones(len(m.tags), dtype=int))
    with pytest.raises(InputError, match=r"covariance is singular.*tags TT-18[12], TT-18[12] "
                       r"have no random scatter.*window is too short"):  # fmt: skip
        perftest.reconcile(plant, single)


def test_exergy_balance_of_an_unmeasured_loop_is_logged(demo_measurements):
    # without the cooling-water flow and outlet temperature the condenser's coolant
    # side is not observable: the note must say so, not "imbalance nan %"
    from perftest.evaluation.results import evaluate

    plant, m = demo_measurements
    keep = [t for t in m.tags if t not in ("FT-181", "TT-182")]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        perf = evaluate(plant, perftest.reconcile(plant, m.subset(keep)))
    notes = [n for n in perf.notes if "exergy balance" in n]
    assert notes == [
        "Plant exergy balance not checked: the exergy destroyed in condenser is unknown "
        "(their streams are not observable: no measurement fixes them). Add a measurement "
        "on that loop to close it."
    ]
    assert not any("nan" in n for n in perf.notes)
