"""Input checks shared by the reconciliation functions.

Every check raises :class:`perftest.errors.InputError` with a message that names
the parameter, what it must be and what it got.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from perftest.errors import InputError

# Relative tolerance for the symmetry of a covariance matrix.  Covariances
# assembled by hand or by a propagation step are symmetric to rounding; a
# larger asymmetry almost always means a wrong matrix was passed.
_SYMMETRY_RTOL = 1e-10


def vector(value, name: str, func: str, *, length: int | None = None) -> np.ndarray:
    """Return ``value`` as a finite 1-D float array, or raise InputError."""
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"The '{name}' parameter of {func} must be a 1-D array of numbers. Got {value!r}.",
            parameter=name,
        ) from exc
    if arr.ndim == 0 and length is not None:
        arr = np.full(length, float(arr))
    if arr.ndim != 1:
        raise InputError(
            f"The '{name}' parameter of {func} must be a 1-D array. Got shape {arr.shape}.",
            parameter=name,
        )
    if length is not None and arr.shape[0] != length:
        raise InputError(
            f"The '{name}' parameter of {func} must have length {length}. Got shape {arr.shape}.",
            parameter=name,
        )
    finite(arr, name, func)
    return arr


def finite(arr, name: str, func: str) -> None:
    """Raise InputError naming the first non-finite entry of ``arr``."""
    data = arr.data if sp.issparse(arr) else np.asarray(arr)
    # a finite sum says every entry is finite (inf and nan propagate); only a sum
    # that overflows or is not finite needs the test entry by entry
    if not data.size:
        return
    with np.errstate(all="ignore"):
        total = data.sum()
    if not (np.isfinite(total) or np.isfinite(data).all()):
        if sp.issparse(arr):
            coo = arr.tocoo()
            bad = np.flatnonzero(~np.isfinite(coo.data))[0]
            where = (int(coo.row[bad]), int(coo.col[bad]))
            got = coo.data[bad]
        else:
            flat = np.flatnonzero(~np.isfinite(data))[0]
            where = np.unravel_index(flat, data.shape)
            where = tuple(int(i) for i in where)
            got = data[where]
            if len(where) == 1:
                where = where[0]
        raise InputError(
            f"The '{name}' parameter of {func} must hold finite numbers only. "
            f"Got {got} at index {where}.",
            parameter=name,
        )


def matrix(value, name: str, func: str, *, rows: int | None, cols: int | None, allow_sparse=True):
    """Return a 2-D float matrix (dense ndarray or CSR matrix) with the given shape."""
    if sp.issparse(value):
        if not allow_sparse:
            value = value.toarray()
        else:
            mat = sp.csr_matrix(value, dtype=float)
            _shape(mat.shape, name, func, rows, cols)
            finite(mat, name, func)
            return mat
    try:
        mat = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"The '{name}' parameter of {func} must be a 2-D array of numbers. Got {value!r}.",
            parameter=name,
        ) from exc
    if mat.ndim == 1 and cols is not None and mat.shape[0] == cols:
        # A single constraint written as a vector.
        mat = mat[None, :]
    if mat.ndim != 2:
        raise InputError(
            f"The '{name}' parameter of {func} must be a 2-D array. Got shape {mat.shape}.",
            parameter=name,
        )
    _shape(mat.shape, name, func, rows, cols)
    finite(mat, name, func)
    return mat


def _shape(shape, name, func, rows, cols):
    want = (rows if rows is not None else "m", cols if cols is not None else "any")
    if (rows is not None and shape[0] != rows) or (cols is not None and shape[1] != cols):
        raise InputError(
            f"The '{name}' parameter of {func} must have shape ({want[0]}, {want[1]}) to match "
            f"the other inputs. Got shape {tuple(shape)}.",
            parameter=name,
        )


def covariance(cov, n: int, func: str, *, name: str = "cov"):
    """Check a covariance matrix; return ``(S, diag, is_diagonal, chol)``.

    ``S`` is a dense ndarray or a CSR matrix, ``diag`` its diagonal,
    ``chol`` the lower Cholesky factor for a dense non-diagonal ``S`` (else None).
    """
    if sp.issparse(cov):
        S = sp.csr_matrix(cov, dtype=float)
    else:
        S = np.asarray(cov, dtype=float)
        if S.ndim != 2:
            raise InputError(
                f"The '{name}' parameter of {func} must be an (n, n) covariance matrix with "
                f"n = {n}, the length of 'x'. Got shape {S.shape}.",
                parameter=name,
            )
    if S.shape != (n, n):
        raise InputError(
            f"The '{name}' parameter of {func} must have shape ({n}, {n}) to match 'x' of "
            f"shape ({n},). Got shape {tuple(S.shape)}.",
            parameter=name,
        )
    finite(S, name, func)
    diag = np.asarray(S.diagonal(), dtype=float)
    if sp.issparse(S):
        off = S - sp.diags(diag)
        off.eliminate_zeros()
        is_diag = off.nnz == 0
        asym = abs(S - S.T).max() if not is_diag else 0.0
    else:
        off_count = np.count_nonzero(S) - np.count_nonzero(diag)
        is_diag = off_count == 0
        asym = 0.0 if is_diag else float(np.max(np.abs(S - S.T)))
    scale = float(np.max(np.abs(diag))) if n else 0.0
    if asym > _SYMMETRY_RTOL * max(scale, np.finfo(float).tiny):
        raise InputError(
            f"The '{name}' parameter of {func} must be symmetric. Got a matrix whose largest "
            f"asymmetry |S - S.T| is {asym:.3g} (largest variance {scale:.3g}).",
            parameter=name,
        )
    if np.any(diag <= 0):
        i = int(np.flatnonzero(diag <= 0)[0])
        raise InputError(
            f"The '{name}' parameter of {func} must be symmetric positive definite. Got the "
            f"variance {diag[i]:.3g} at index {i}; every measurement needs a positive variance.",
            parameter=name,
        )
    chol = None
    if not is_diag:
        if sp.issparse(S):
            _sparse_spd(S, name, func)
        else:
            try:
                chol = scipy.linalg.cholesky(S, lower=True, check_finite=False)
            except np.linalg.LinAlgError:
                lam = float(scipy.linalg.eigvalsh(S, subset_by_index=[0, 0])[0])
                raise InputError(
                    f"The '{name}' parameter of {func} must be symmetric positive definite. "
                    f"Got a matrix with eigenvalue {lam:.3g}.",
                    parameter=name,
                ) from None
    return S, diag, is_diag, chol


def _sparse_spd(S, name, func):
    """Positive definiteness of a sparse covariance through a symmetric LDL^T-like LU."""
    import scipy.sparse.linalg as spla

    d = np.sqrt(S.diagonal())
    Sc = sp.diags(1 / d) @ S @ sp.diags(1 / d)
    try:
        lu = spla.splu(
            sp.csc_matrix(Sc),
            permc_spec="MMD_AT_PLUS_A",
            diag_pivot_thresh=0.0,
            options={"SymmetricMode": True},
        )
        piv = lu.U.diagonal()
        ok = np.all(piv > 1e-14)
    except RuntimeError:
        ok = False
    if not ok:
        lam = float(spla.eigsh(Sc, k=1, which="SA", return_eigenvectors=False)[0])
        raise InputError(
            f"The '{name}' parameter of {func} must be symmetric positive definite. Got a "
            f"matrix whose correlation form has eigenvalue {lam:.3g}.",
            parameter=name,
        )
