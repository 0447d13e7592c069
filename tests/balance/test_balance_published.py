"""Outside checks of the reconciliation engine against published worked examples.

Source
------
"Basic Concepts in Data Reconciliation", module "Introduction to Data Reconciliation",
Program for North American Mobility in Higher Education, North Carolina State University
(USA) and University of Ottawa (Canada), 2003.  Tier I:

* Chapter 2, "Linear Steady-State Data Reconciliation with All Variables Measured",
  sections 2.1 (solution to reconciled values) and 2.2 (statistical properties);
* Chapter 3, "Linear Steady-State Data Reconciliation with Both Measured and Unmeasured
  Variables", sections 3.1, 3.2 (estimates of measured and unmeasured variables) and 3.3
  (observability and redundancy analysis).

The running example of both chapters is a cooling-water network: a cooling-water station
feeds plant 1 (stream F1), which splits into F2 (to plant 2) and F3 (to plant 3); F2 leaves
plant 2 as F4, F3 leaves plant 3 as F5, and F4 and F5 join in plant 4, which returns F6.

The numbers below were read from a copy of that example in a university course
notebook, "Data Reconciliation / Mérleghiba kiegyenlítés", Abonyi research group
(University of Pannonia), which states it follows the module (via
https://chemeng-processing.blogspot.com/2014/04/basic-concepts-in-data-reconciliation.html):
https://github.com/abonyilab/SystemsEngineering/blob/7e8bbbe439c6cf5880d1ab5489b6cf7c854c05bf/08_DataReconciliation_MerleghibaKiegyenlites.ipynb
The module's own result tables appear there only as pictures; every value used below is one
printed as text (markdown or printed cell output).  No test statistics (chi-square, global
or measurement test) are printed for this example, so none are compared against the source.

Tolerances
----------
A value printed with d decimals stands for anything within half a unit of its last digit,
so it is compared with ``atol = 0.5 * 10**-d``.  Nothing else is loosened.
"""

import numpy as np
import pytest
import scipy.sparse as sp

import perftest

# --- Data of the cooling-water network (module chapter 2.1) ---------------------------
# Measured flows F1..F6 [kt/h], as printed: y = [110.5, 60.8, 35, 68.9, 38.6, 101.4].
FLOWS = np.array([110.5, 60.8, 35.0, 68.9, 38.6, 101.4])
# Measurement variances [(kt/h)^2], the printed diagonal of V.  (They are the squares of
# standard deviations 0.82, 0.53, 0.46, 0.71, 0.45 and 1.2.)
VARIANCES = np.array([0.6724, 0.2809, 0.2116, 0.5041, 0.2025, 1.44])
# Printed incidence matrix: one row per plant (node), one column per stream,
# +1 into the node and -1 out of it.
#   plant 1: F1 - F2 - F3 = 0    plant 2: F2 - F4 = 0
#   plant 3: F3 - F5 = 0         plant 4: F4 + F5 - F6 = 0
INCIDENCE = np.array(
    [
        [1.0, -1.0, -1.0, 0.0, 0.0, 0.0],
        [0.0, 1.0, 0.0, -1.0, 0.0, 0.0],
        [0.0, 0.0, 1.0, 0.0, -1.0, 0.0],
        [0.0, 0.0, 0.0, 1.0, 1.0, -1.0],
    ]
)

DENSE_AND_SPARSE = pytest.mark.parametrize(
    "form", [np.asarray, sp.csr_matrix], ids=["dense", "sparse"]
)


def _split(measured):
    """Measured values, covariance, A and B for a choice of measured streams (0-based)."""
    unmeasured = [j for j in range(FLOWS.size) if j not in measured]
    return (
        FLOWS[measured],
        np.diag(VARIANCES[measured]),
        INCIDENCE[:, measured],
        INCIDENCE[:, unmeasured],
    )


# --- Chapter 2: all six flows measured -------------------------------------------------


@DENSE_AND_SPARSE
def test_all_measured_reconciled_flows(form):
    # Printed cell output of y_hat = y - V A^T (A V A^T)^-1 A y, 8 decimals, so
    # atol = 0.5e-8 (half a unit of the 8th decimal).
    printed = np.array(
        [103.24010825, 65.41556049, 37.82454776, 65.41556049, 37.82454776, 103.24010825]
    )
    r = perftest.reconcile_linear(FLOWS, form(np.diag(VARIANCES)), form(INCIDENCE))
    np.testing.assert_allclose(r.x, printed, rtol=0, atol=0.5e-8)
    # Four independent node balances, no unmeasured flow: four degrees of freedom, and
    # every measurement is adjusted.
    assert r.dof == 4
    assert r.redundant.all()


@DENSE_AND_SPARSE
def test_all_measured_covariance_of_reconciled_flows(form):
    # Module section 2.2: Cov(y_hat) = W V W^T, printed (upper triangle, "Symm.") to four
    # decimals, so atol = 0.5e-4.
    #
    # Discrepancy in the printed source: entries (F3, F6) and (F5, F6) are printed as
    # 0.0693, but the same matrix prints (F1, F3) = (F1, F5) = 0.0639, and after
    # reconciliation F6 = F1 exactly (plants 1-4 chain F1 -> F2 + F3 -> F4 + F5 -> F6), so
    # the F6 row must equal the F1 row.  0.0693 is a digit transposition of 0.0639 (the
    # exact value is 0.06393...); the consistent value 0.0639 is used for those two cells.
    printed_upper = [
        [0.1753, 0.1114, 0.0639, 0.1114, 0.0639, 0.1753],
        [None, 0.1365, -0.0251, 0.1365, -0.0251, 0.1114],
        [None, None, 0.0890, -0.0251, 0.0890, 0.0639],  # printed 0.0693 in the last cell
        [None, None, None, 0.1365, -0.0251, 0.1114],
        [None, None, None, None, 0.0890, 0.0639],  # printed 0.0693 in the last cell
        [None, None, None, None, None, 0.1753],
    ]
    expected = np.zeros((6, 6))
    for i, row in enumerate(printed_upper):
        for j, value in enumerate(row):
            if value is not None:
                expected[i, j] = expected[j, i] = value

    r = perftest.reconcile_linear(FLOWS, form(np.diag(VARIANCES)), form(INCIDENCE))
    np.testing.assert_allclose(r.x_cov, expected, rtol=0, atol=0.5e-4)
    # The typo really is one: the reconciled covariance is not 0.0693 in those cells.
    assert abs(r.x_cov[2, 5] - 0.0693) > 0.5e-4
    # Reconciled flows are more precise than the raw ones (the section's conclusion).
    assert np.all(r.u_reconciled < np.sqrt(VARIANCES))


# --- Chapter 3.1/3.2: F1, F3, F5 measured; F2, F4, F6 unmeasured --------------------------


@DENSE_AND_SPARSE
def test_measured_and_unmeasured_flows(form):
    x, cov, A, B = _split([0, 2, 4])
    r = perftest.reconcile_linear(x, form(cov), form(A), None, form(B))

    # Printed projection: P A_y = [0, 1, -1], a single redundancy equation F3 - F5 = 0
    # in which F1 does not appear.  Hence one degree of freedom, F1 nonredundant and
    # F3, F5 redundant.
    assert r.dof == 1
    np.testing.assert_array_equal(r.redundant, [False, True, True])

    # Printed estimates of the measured flows: [F1, F3, F5] = [110.5, 36.84, 36.84].
    # F1 is nonredundant, so it keeps its measured value exactly (stronger than the
    # half-unit tolerance 0.05 its printed precision would allow); F3 and F5 are printed
    # with two decimals, atol = 0.005.
    assert r.x[0] == FLOWS[0]
    np.testing.assert_allclose(r.x[1:], [36.84, 36.84], rtol=0, atol=0.005)

    # Printed estimates of the unmeasured flows: [F2, F4, F6] = [73.66, 73.66, 110.5],
    # all observable.  Two decimals for F2, F4 (atol = 0.005), one for F6 (atol = 0.05).
    np.testing.assert_array_equal(r.observable, [True, True, True])
    np.testing.assert_allclose(r.y[:2], [73.66, 73.66], rtol=0, atol=0.005)
    np.testing.assert_allclose(r.y[2], 110.5, rtol=0, atol=0.05)

    # Printed intermediate A_y y_hat = [73.66, 0, 0, 36.84] (two decimals, atol = 0.005).
    np.testing.assert_allclose(A @ r.x, [73.66, 0.0, 0.0, 36.84], rtol=0, atol=0.005)


# --- Chapter 3.3: only F1 and F6 measured -------------------------------------------------


@DENSE_AND_SPARSE
def test_observability_and_redundancy_with_two_measurements(form):
    x, cov, A, B = _split([0, 5])
    r = perftest.reconcile_linear(x, form(cov), form(A), None, form(B))

    # Printed: rank(A_z) = 3 with four unknowns; P = [0.5, 0.5, 0.5, 0.5], so
    # P A_y y_hat = F1 - F6 = 0, a global balance around the whole network in which "the
    # two measurements are redundant"; and no zero row in R1^-1 R2, so "all three unmeasured
    # flows, F2, F3, and F4 are also nonobservable", as is F5.
    assert r.dof == 1
    np.testing.assert_array_equal(r.redundant, [True, True])
    np.testing.assert_array_equal(r.observable, [False, False, False, False])
    assert np.isnan(r.y).all()
    # The reconciled pair satisfies the printed reduced balance F1 - F6 = 0 (to rounding
    # of values near 1e2: 1e-9 absolute) and lies between the two measurements.
    assert abs(r.x[0] - r.x[1]) < 1e-9
    assert FLOWS[5] < r.x[0] < FLOWS[0]
