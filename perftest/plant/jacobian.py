"""The Jacobian of a plant model: its fixed entry pattern and its assembly.

:class:`~perftest.plant.equations.PlantModel` writes its Jacobian as COO entries
(row, model variable, value) and hands them over as two blocks, ``Jx`` over the
measured tags and ``Jy`` over the unmeasured variables, sparse (CSR) or dense.

* :class:`Pattern`: the entries of the linear, bilinear (m h) and property rows come
  in the same order with the same rows and columns at every point, so rows,
  columns, the divisor of each entry and where each group's derivatives land are
  laid out once (:func:`pattern`) and :func:`entries` only writes the values.  The
  order is the one the entries always had (linear, bilinear by flow, bilinear by
  enthalpy, then per group of state rows dh/dp and dh/dT, per saturation group
  dT/dp, per quality group dh/dp and dh/dx, then the firing side), so duplicates
  are summed in the same order as ever.
* :class:`Assembly`: for one entry pattern, where each entry lands in the CSR arrays
  and in a dense array of each block (duplicates summed by ``np.bincount``, in the
  order of the entries).
* A CSR block is made by copying a kept matrix of the same structure and giving it
  the new values (:func:`_csr_state`): scipy's constructor checks its arguments,
  which costs ten times the assembly itself, and the result is the same object a
  constructor call gives (the same attributes with the same arrays, checked once
  per pattern).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = ["cat", "Pattern", "pattern", "entries", "Assembly", "assembly", "to_csr", "to_dense"]


@dataclass(frozen=True)
class Pattern:
    """Entries of a model's Jacobian without the firing side (see the module docstring).

    Attributes
    ----------
    rows, cols : ndarray of int
        Row and model variable of each entry.
    scale : ndarray
        Divisor of each entry's row (the row's scale).
    fixed : ndarray
        The values of the linear entries, zeros elsewhere (copied by :func:`entries`).
    n_lin, n_bil : int
        Number of linear entries and of bilinear terms.
    at : tuple of ndarray
        Positions of dh/dp and dh/dT of the state rows, dT/dp of the saturation rows,
        dh/dp and dh/dx of the quality rows, each end to end over its groups.
    """

    rows: np.ndarray
    cols: np.ndarray
    scale: np.ndarray
    fixed: np.ndarray
    n_lin: int
    n_bil: int
    at: tuple


def cat(arrays, dtype=int) -> np.ndarray:
    """`arrays` joined end to end as one array of `dtype` (empty when there are none)."""
    return np.concatenate([np.zeros(0, dtype), *arrays]).astype(dtype)


def pattern(lin, bil, state_groups, sat_groups, quality_groups, row_scale) -> Pattern:
    """Lay out the fixed entries of a model (``PlantModel._lin``, ``._bil`` and groups)."""
    lr, lc, la = lin
    br, bm, bh, _ = bil
    rows, cols = [lr, br, br], [lc, bm, bh]
    at = lr.size + 2 * br.size
    spans: tuple = ([], [], [], [], [])  # dh/dp, dh/dT, dT/dp, quality dh/dp, dh/dx

    def place(which, rr, c):
        nonlocal at
        rows.append(rr)
        cols.append(c)
        spans[which].append(np.arange(at, at + rr.size))
        at += rr.size

    for _, _, rr, _, p, T, _ in state_groups:
        place(0, rr, p)
        place(1, rr, T)
    for _, _, rr, _, p, _, _ in sat_groups:
        place(2, rr, p)
    for _, _, rr, _, p, _, q in quality_groups:
        place(3, rr, p)
        place(4, rr, q)
    r = cat(rows)
    return Pattern(
        rows=r,
        cols=cat(cols),
        scale=row_scale[r],
        fixed=np.concatenate([np.asarray(la, dtype=float), np.zeros(at - lr.size)]),
        n_lin=int(lr.size),
        n_bil=int(br.size),
        at=tuple(cat(s) for s in spans),
    )


def entries(pat: Pattern, bil, v: np.ndarray, props, firing_entries):
    """COO entries ``(rows, cols, values)`` at slot values `v` (unscaled).

    `props` are the model's property values (``PlantModel._properties``),
    `firing_entries` the firing side's ``(row, slot, value)`` list (None or empty
    when there is none).  Without firing entries the rows and columns returned are
    the pattern's own arrays (the caller finds its assembly by identity).
    """
    (_, dhdT, dhdp), (_, dTdp), (_, qdp, qdx) = props
    _, bm, bh, bc = bil
    a = pat.fixed.copy()
    n0, nb = pat.n_lin, pat.n_bil
    a[n0 : n0 + nb] = bc * v[bh]
    a[n0 + nb : n0 + 2 * nb] = bc * v[bm]
    for pos, val in zip(pat.at, (dhdp, dhdT, dTdp, qdp, qdx), strict=True):
        if pos.size:
            a[pos] = -val
    if not firing_entries:
        return pat.rows, pat.cols, a
    er, ec, ev = (np.array(z) for z in zip(*firing_entries, strict=True))
    return (
        np.concatenate([pat.rows, er.astype(int)]),
        np.concatenate([pat.cols, ec.astype(int)]),
        np.concatenate([a, ev.astype(float)]),
    )


@dataclass(frozen=True)
class Assembly:
    """How the COO entries of one pattern become ``Jx`` and ``Jy``.

    ``blocks`` holds per block the selected entries, where each lands among the
    block's sorted unique positions, the CSR indices and pointers and the number of
    columns; ``flat`` the flat positions in a dense array; ``csr`` the kept state of
    a CSR matrix of the block's structure (:func:`_csr_state`) or None.
    """

    r: np.ndarray
    c: np.ndarray
    blocks: tuple
    flat: tuple
    csr: tuple


def assembly(r, c, blocks_of, m: int) -> Assembly:
    """The :class:`Assembly` of entries ``(r, c)``.

    Parameters
    ----------
    r, c : ndarray of int
        Rows and model variables of the entries.
    blocks_of : sequence of (ndarray, int)
        Per block, the position of each model variable in the block (-1: not in it)
        and the block's number of columns.
    m : int
        Number of rows.
    """
    blocks, flat, csr = [], [], []
    for slot, cols in blocks_of:
        to = slot[c]
        sel = np.flatnonzero(to >= 0)
        keys = r[sel] * cols + to[sel]
        uniq, inv = np.unique(keys, return_inverse=True)
        indices = (uniq % cols).astype(np.int32) if cols else uniq.astype(np.int32)
        counts = np.bincount(uniq // cols if cols else uniq, minlength=m)
        indptr = np.concatenate([[0], np.cumsum(counts)]).astype(np.int32)
        blocks.append((sel, inv.ravel(), indices, indptr, cols))
        flat.append(keys)
        csr.append(_csr_state(indices, indptr, (m, cols)))
    return Assembly(r.copy(), c.copy(), tuple(blocks), tuple(flat), tuple(csr))


def _csr_state(indices, indptr, shape):
    """Class and attributes of a CSR matrix of this structure, or None.

    None unless a matrix copied from them equals the constructor's in every
    attribute (names, order, types, arrays and their dtypes); :func:`to_csr` then
    calls the constructor.
    """
    data = np.zeros(indices.size)
    made = sp.csr_matrix((data, indices.copy(), indptr.copy()), shape=shape)
    state = dict(vars(made))
    if not {"data", "indices", "indptr"} <= state.keys():
        return None
    if any(getattr(k, "__slots__", ()) for k in type(made).__mro__):
        return None
    copy = _from_state((type(made), state), data, indices.copy(), indptr.copy())
    a, b = vars(made), vars(copy)
    if list(a) != list(b) or type(copy) is not type(made):
        return None
    for k in a:
        x, y = a[k], b[k]
        if isinstance(x, np.ndarray):
            if not (isinstance(y, np.ndarray) and x.dtype == y.dtype and np.array_equal(x, y)):
                return None
        elif type(x) is not type(y) or x != y:
            return None
    return type(made), state


def _from_state(kept, data, indices, indptr):
    cls, state = kept
    out = cls.__new__(cls)
    out.__dict__.update(state)
    out.data, out.indices, out.indptr = data, indices, indptr
    return out


def to_csr(plan: Assembly, a: np.ndarray, m: int):
    """``(Jx, Jy)`` as CSR matrices from the scaled entry values `a`."""
    out = []
    for (sel, inv, indices, indptr, cols), kept in zip(plan.blocks, plan.csr, strict=True):
        data = np.bincount(inv, weights=a[sel], minlength=indices.size)
        if kept is None:
            out.append(sp.csr_matrix((data, indices.copy(), indptr.copy()), shape=(m, cols)))
        else:
            out.append(_from_state(kept, data, indices.copy(), indptr.copy()))
    return out[0], out[1]


def to_dense(plan: Assembly, a: np.ndarray, m: int):
    """``(Jx, Jy)`` as dense arrays from the scaled entry values `a` (the same numbers)."""
    out = []
    for (sel, _, _, _, cols), flat in zip(plan.blocks, plan.flat, strict=True):
        out.append(np.bincount(flat, weights=a[sel], minlength=m * cols).reshape(m, cols))
    return out[0], out[1]
