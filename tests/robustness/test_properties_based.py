"""Property-based tests (hypothesis): messy run files, random balance networks,
and invariance of the reconciliation to order and units.

The reference for the reconciliation properties is the algebra of weighted least
squares with linear constraints (e.g. S. Narasimhan, C. Jordache, "Data
Reconciliation and Gross Error Detection", 2000, ch. 3): the estimate satisfies the
constraints exactly, its covariance is the measured covariance minus a positive
semi-definite term (so no standard uncertainty grows), and the estimate does not
depend on the order of the measurements or constraints nor on the units of the
variables.  numpy.linalg gives the independent checks.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import perftest
from perftest.errors import PerftestError

# bounded examples and no per-example deadline: a few seconds per test on CPU
FAST = settings(
    max_examples=60,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
)

# --- messy CSV files -----------------------------------------------------------------

_HEADER_CHARS = st.characters(codec="utf-8", exclude_categories=("Cs",), exclude_characters="\x00")
_number = st.floats(-1e6, 1e6, allow_nan=False, width=32).map(lambda v: f"{v:.6g}")
_odd_cell = st.one_of(
    st.sampled_from(
        ["", " ", "n/a", "Bad", "-9999", "#VALUE!", "NaN", "inf", "1.2.3", "=A1", "+1-2"]
    ),
    st.text(_HEADER_CHARS, max_size=6),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
)
_odd_stamp = st.sampled_from(
    ["", "noon", "2031-13-01 00:00:00", "2031-05-04T10:00:00+01:00", "10:00", "31/12/2031"]
)


@st.composite
def csv_files(draw):
    """Bytes of a run file: separator, decimal mark, line ends, BOM, encoding, quoting,
    ragged rows, odd stamps and bad cells all drawn at random (mostly good data, so
    that both the refusals and the masking of bad cells get exercised)."""
    sep = draw(st.sampled_from([",", ";", "\t"]))
    decimal_comma = sep != "," and draw(st.booleans())
    n_cols = draw(st.integers(1, 5))
    names = ["time"] + draw(
        st.lists(
            st.text(_HEADER_CHARS, min_size=1, max_size=8).filter(
                lambda t: t.strip() and not set(t) & set(',;\t"\r\n')
            ),
            min_size=n_cols,
            max_size=n_cols,
            unique_by=lambda t: t.strip(),
        )
    )
    if draw(st.integers(0, 9)) == 0:
        names[1] = ""  # a blank header now and then
    n_rows = draw(st.integers(0, 12))
    minutes = sorted(draw(st.lists(st.integers(0, 59), min_size=n_rows, max_size=n_rows)))
    rows = []
    for k in minutes:
        stamp = f"2031-05-04 10:{k:02d}:00"
        if draw(st.integers(0, 19)) == 0:
            stamp = draw(_odd_stamp)
        cells = [stamp]
        for _ in range(n_cols):
            cell = draw(_number) if draw(st.integers(0, 9)) < 8 else draw(_odd_cell)
            if decimal_comma:
                cell = cell.replace(".", ",")
            cells.append(cell)
        ragged = draw(st.integers(0, 19))
        if ragged == 0:
            cells.append("1")  # one cell too many
        elif ragged == 1 and len(cells) > 2:
            cells.pop()  # one cell short
        if draw(st.integers(0, 4)) == 0:
            cells = ['"' + c.replace('"', '""') + '"' for c in cells]  # quoted fields
        rows.append(sep.join(cells))
    lines = [sep.join(names)]
    if draw(st.booleans()):
        lines.append(
            sep.join(
                [""]
                + [draw(st.sampled_from(["", "degC", "bar", "t/h", "?"])) for _ in range(n_cols)]
            )
        )
    lines += rows
    end = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = end.join(lines) + draw(st.sampled_from(["", end]))
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "cp1252", "latin-1", "utf-16"]))
    return text.encode(encoding, errors="replace")


def _read_or_refuse(path):
    """read_run may succeed or raise a PerftestError; anything else is a bug."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            return perftest.read_run(path)
        except PerftestError as exc:
            assert str(exc).strip(), "an error must say something"
            return None


@settings(
    max_examples=150,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
)
@given(content=csv_files())
def test_random_csv_never_crashes(tmp_path_factory, content):
    path = tmp_path_factory.mktemp("csv") / "run.csv"
    path.write_bytes(content)
    run = _read_or_refuse(path)
    if run is None:
        return
    # nothing lost: every masked cell has its exclusion record (one file, no time base)
    ex = run.exclusions
    mask = run.mask.to_numpy(dtype=bool)
    masked = int(mask.sum())
    recorded = int((~ex["reason"].astype(str).str.startswith("duplicate")).sum())
    assert masked == recorded
    # masked cells are NaN, unmasked cells are finite numbers
    values = run.data.to_numpy(dtype=float)
    assert np.all(np.isnan(values[mask]))
    assert np.all(np.isfinite(values[~mask]))


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(content=st.binary(max_size=400))
def test_random_bytes_never_crash(tmp_path_factory, content):
    path = tmp_path_factory.mktemp("bytes") / "run.csv"
    path.write_bytes(content)
    _read_or_refuse(path)


# --- random consistent linear networks -------------------------------------------------


@st.composite
def networks(draw, max_decades=4.0):
    """A random full-rank constraint set A x + B y = b with true values that satisfy it,
    measurements scattered around them, and uncertainties over up to 2 + max_decades
    decades."""
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    n = draw(st.integers(3, 12))
    k = draw(st.integers(0, 2))
    m = draw(st.integers(1, max(1, n + k - 2)))
    decades = draw(st.floats(0.0, max_decades))
    A = rng.normal(size=(m, n))
    B = rng.normal(size=(m, k)) if k else None
    x_true = rng.uniform(1.0, 100.0, size=n)
    y_true = rng.uniform(1.0, 100.0, size=k)
    b = A @ x_true + (B @ y_true if k else 0.0)
    u = x_true * 10.0 ** rng.uniform(-2.0 - decades, -2.0, size=n)
    x = x_true + rng.normal(size=n) * u
    return x, np.diag(u**2), A, b, B


# a drawn network may leave no redundancy (dof 0): expected here, not news.
# Closure and shrinking u must hold however far the uncertainties spread (up to ten
# decades: the null-space solve takes over where the projected one loses closure);
# the invariance tests compare two float solutions, whose round-off grows with that
# spread, so they draw up to six decades (their 1e-6 tolerances hold there).
NO_DOF_WARNING = pytest.mark.filterwarnings("ignore:The constraints leave no redundancy")


@NO_DOF_WARNING
@FAST
@given(net=networks(max_decades=8.0))
def test_reconciled_values_close_the_balances(net):
    x, cov, A, b, B = net
    r = perftest.reconcile_linear(x, cov, A, b=b, B=B)
    y = r.y if B is not None else np.zeros(0)
    lhs = A @ r.x + (B @ np.nan_to_num(y) if B is not None else 0.0)
    if B is not None and not np.all(r.observable):
        return  # an unobservable y has no value; closure is checked on the rest
    # closure to round-off: relative to the size of the terms (|A| |x|)
    scale = np.abs(A) @ np.abs(r.x) + (np.abs(B) @ np.abs(y) if B is not None else 0.0) + 1.0
    assert np.all(np.abs(lhs - b) <= 1e-8 * scale)


@NO_DOF_WARNING
@FAST
@given(net=networks(max_decades=8.0))
def test_reconciled_uncertainty_never_exceeds_measured(net):
    x, cov, A, b, B = net
    r = perftest.reconcile_linear(x, cov, A, b=b, B=B)
    u_meas = np.sqrt(np.diag(cov))
    u_rec = np.sqrt(np.clip(np.diag(r.x_cov), 0.0, None))
    # x_cov = cov - (psd term): each variance can only shrink; 1e-9 relative for
    # round-off in the covariance update
    assert np.all(u_rec <= u_meas * (1.0 + 1e-9))
    assert np.all(np.isfinite(r.x))


@NO_DOF_WARNING
@FAST
@given(net=networks(), data=st.data())
def test_invariant_to_order_of_measurements_and_constraints(net, data):
    x, cov, A, b, B = net
    n, m = x.size, A.shape[0]
    p = np.array(data.draw(st.permutations(range(n))))
    q = np.array(data.draw(st.permutations(range(m))))
    r0 = perftest.reconcile_linear(x, cov, A, b=b, B=B)
    r1 = perftest.reconcile_linear(
        x[p], cov[np.ix_(p, p)], A[np.ix_(q, p)], b=b[q], B=None if B is None else B[q]
    )
    # same weighted least-squares problem: equal to round-off (1e-9 relative)
    np.testing.assert_allclose(r1.x, r0.x[p], rtol=1e-9, atol=1e-9 * np.abs(x).max())
    np.testing.assert_allclose(
        np.diag(r1.x_cov), np.diag(r0.x_cov)[p], rtol=1e-6, atol=1e-12 * cov.max()
    )
    assert r1.chi2 == pytest.approx(r0.chi2, rel=1e-6, abs=1e-9)
    assert r1.dof == r0.dof


@NO_DOF_WARNING
@FAST
@given(net=networks(), data=st.data())
def test_invariant_to_units_of_the_variables(net, data):
    x, cov, A, b, B = net
    # a change of unit per variable: x' = D x (e.g. t/h instead of kg/s: D = 3.6)
    d = np.array(
        data.draw(
            st.lists(
                st.sampled_from([1e-3, 3.6, 1.0, 1e3, 1e5, 1 / 3.6]),
                min_size=x.size,
                max_size=x.size,
            )
        )
    )
    r0 = perftest.reconcile_linear(x, cov, A, b=b, B=B)
    r1 = perftest.reconcile_linear(x * d, cov * np.outer(d, d), A / d, b=b, B=B)
    np.testing.assert_allclose(r1.x / d, r0.x, rtol=1e-8, atol=1e-9 * np.abs(x).max())
    assert r1.chi2 == pytest.approx(r0.chi2, rel=1e-6, abs=1e-8)
    np.testing.assert_allclose(
        np.sqrt(np.diag(r1.x_cov)) / d, np.sqrt(np.diag(r0.x_cov)), rtol=1e-6, atol=0.0
    )


def test_scaling_a_constraint_row_changes_nothing():
    # b_i and row i multiplied by the same factor describe the same balance
    rng = np.random.default_rng(7)
    A = rng.normal(size=(3, 8))
    x_true = rng.uniform(1, 10, 8)
    b = A @ x_true
    x = x_true + rng.normal(scale=0.05, size=8)
    cov = np.diag(np.full(8, 0.05**2))
    r0 = perftest.reconcile_linear(x, cov, A, b=b)
    s = np.array([1e-3, 1.0, 1e4])
    r1 = perftest.reconcile_linear(x, cov, A * s[:, None], b=b * s)
    np.testing.assert_allclose(r1.x, r0.x, rtol=1e-10)
    assert r1.chi2 == pytest.approx(r0.chi2, rel=1e-8)
