"""Records shared by the dense and sparse linear solvers.

Layer: the lowest of the balance engine besides :mod:`perftest.balance._checks` and
:mod:`perftest.balance._dense`; it imports neither solver, so both can import it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["Problem", "Core"]


@dataclass
class Problem:
    """Checked inputs of a linear reconciliation."""

    x: np.ndarray
    S: Any  # dense ndarray or CSR
    sdiag: np.ndarray
    is_diag: bool
    A: Any
    b: np.ndarray
    B: Any  # (m, k), dense or CSR; k may be 0
    sparse: bool


@dataclass
class Core:
    """Everything the linear solve produces, before it is wrapped in a result."""

    xhat: np.ndarray
    y: np.ndarray  # minimum-norm estimate, finite everywhere
    observable: np.ndarray
    lam: np.ndarray  # multipliers of the original constraints
    chi2: float
    dof: int
    vdiag: np.ndarray | None  # variances of the adjustments
    redundant: np.ndarray | None
    covariances: Any  # callable -> (x_cov, y_cov, xy_cov), unobservable y not masked
    y_var: np.ndarray | None  # variances of y (unobservable not masked)
    constraint_residual: np.ndarray
    constraint_u: np.ndarray
    constraint_rows: np.ndarray  # the constraint each row above is anchored to
    inconsistent: tuple | None
    # Deferred statistics: a callable -> (vdiag, redundant, y_var, covariances) that
    # fills the fields above left None (a solve whose step alone is wanted).
    finish: Any = None
    # False when a final solve took a shortcut whose numbers equal those of the step
    # solve to rounding only (see linear.solve_dense, ``final``).
    exact: bool = True

    def complete(self) -> Core:
        """Fill the deferred statistics (no-op when they are there); returns self."""
        if self.finish is not None:
            self.vdiag, self.redundant, self.y_var, self.covariances = self.finish()
            self.finish = None
        return self
