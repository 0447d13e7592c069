"""The tables :func:`~perftest.evaluation.results.evaluate` returns, built quickly.

A trend of many windows builds the same results table (same rows, units and
descriptions, new numbers) thousands of times.  :class:`ResultsLayout` builds the
text columns and the index once, with the ordinary ``pandas.DataFrame``
constructor, and then makes each table from its blocks (one float block of the
five number columns, one block per text column): the table is the one the
constructor makes, without its per-column type inference.  Every layout checks at
creation that the quick table equals the constructor's (values, dtypes, index and
its name); where it does not, or where pandas lacks
``pandas.api.internals.create_dataframe_from_blocks`` (before pandas 3), the
constructor is used.

Tables never share mutable parts: each gets its own copies of the index, the
columns and the text arrays.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

try:  # pandas >= 3
    from pandas.api.internals import create_dataframe_from_blocks as _from_blocks
except ImportError:  # pragma: no cover - pandas 2: the constructor is used
    _from_blocks = None

__all__ = ["RESULT_COLUMNS", "ResultsLayout", "results_frame", "empty_frame", "budget_frames"]

#: Columns of the results table, in order.
RESULT_COLUMNS = ("value", "u", "U95", "unit", "k", "dof", "description", "basis")
_NUMBERS = ("value", "u", "U95", "k", "dof")
_TEXT = ("unit", "description", "basis")
_NUMBER_AT = np.array([RESULT_COLUMNS.index(c) for c in _NUMBERS], dtype=np.intp)
_TEXT_AT = tuple(np.array([RESULT_COLUMNS.index(c)], dtype=np.intp) for c in _TEXT)


def results_frame(names, value, u, U, k, dof, units, descriptions, bases) -> pd.DataFrame:
    """The results table by the ``pandas.DataFrame`` constructor (index ``name``)."""
    return pd.DataFrame(
        {
            "value": value,
            "u": u,
            "U95": U,
            "unit": list(units),
            "k": k,
            "dof": dof,
            "description": list(descriptions),
            "basis": list(bases),
        },
        index=pd.Index(names, name="name"),
    )


def _same(a: pd.DataFrame, b: pd.DataFrame) -> bool:
    return (
        a.equals(b)
        and list(a.columns) == list(b.columns)
        and a.columns.dtype == b.columns.dtype
        and list(a.dtypes) == list(b.dtypes)
        and a.index.equals(b.index)
        and a.index.dtype == b.index.dtype
        and a.index.names == b.index.names
        and type(a.index) is type(b.index)
    )


_QUICK: list = []  # [True/False] once checked in this process


def _quick_frames() -> bool:
    """Whether tables built from blocks equal the constructor's (checked once)."""
    if not _QUICK:
        ok = _from_blocks is not None
        if ok:
            names = ("a", "b_c", "d é")
            args = (["W", "1", "J/J"], ["A", "", "Désc, x"], ["", "lhv", ""])
            probe = np.array([[0.5, -1.0, 2.0e9], [0.0, np.inf, np.nan]] * 2 + [[1, 2, 3.0]])
            try:
                layout = object.__new__(ResultsLayout)
                proto = results_frame(names, *probe, *args)
                layout._index, layout._columns = proto.index, proto.columns
                layout._text = tuple(proto[c].array for c in _TEXT)
                ok = _same(layout._build(probe.copy()), proto)
            except Exception:  # noqa: BLE001 - any failure: use the constructor
                ok = False
        _QUICK.append(ok)
    return _QUICK[0]


class ResultsLayout:
    """Rows, units, descriptions and bases of a results table, for many tables.

    Parameters
    ----------
    names, units, descriptions, bases : sequence of str
        Per row: result name, SI unit, description, heating-value basis.
    """

    def __init__(self, names, units, descriptions, bases):
        self.names = tuple(names)
        self._units, self._descriptions, self._bases = list(units), list(descriptions), list(bases)
        m = len(self.names)
        probe = np.arange(5 * m, dtype=float).reshape(5, m) + 0.5
        proto = results_frame(self.names, *probe, self._units, self._descriptions, self._bases)
        self._index = proto.index
        self._columns = proto.columns
        self._text = tuple(proto[c].array for c in _TEXT)
        self._plain = pd.Index(self.names)
        self._quick = _quick_frames() and all(
            isinstance(a, pd.api.extensions.ExtensionArray) for a in self._text
        )

    def _build(self, numbers: np.ndarray) -> pd.DataFrame:
        blocks = [(numbers, _NUMBER_AT)]
        blocks += [(a.copy(), at) for a, at in zip(self._text, _TEXT_AT, strict=True)]
        return _from_blocks(blocks, index=self._index.view(), columns=self._columns.view())

    def frame(self, value, u, U, k, dof) -> pd.DataFrame:
        """The table with these numbers (each an (m,) array) [SI]."""
        cols = (value, u, U, k, dof)
        m = len(self.names)
        if self._quick and all(
            isinstance(a, np.ndarray) and a.dtype == np.float64 and a.shape == (m,) for a in cols
        ):
            return self._build(np.array(cols))
        return results_frame(
            self.names, value, u, U, k, dof, self._units, self._descriptions, self._bases
        )

    def square(self, matrix: np.ndarray) -> pd.DataFrame:
        """``pd.DataFrame(matrix, index=names, columns=names)`` (a covariance)."""
        return pd.DataFrame(matrix, index=self._plain.view(), columns=self._plain.view())


_EMPTY = pd.DataFrame()


def empty_frame() -> pd.DataFrame:
    """A new ``pd.DataFrame()`` (a deep copy of one kept: a third of the cost)."""
    return _EMPTY.copy(deep=True)


#: Columns of a result's uncertainty budget in :attr:`Performance.budgets`.
BUDGET_COLUMNS = ("estimate", "u", "sensitivity", "u_contribution", "share")


def budget_frames(prop, outputs, droppable) -> dict:
    """Uncertainty budget of each output, without the droppable inputs it does not use.

    Parameters
    ----------
    prop : perftest.evaluation.propagation.Propagation
    outputs : sequence of str
        Output names (of ``prop``) to tabulate.
    droppable : sequence of bool
        Per input of ``prop``: left out of an output's budget where its sensitivity
        is zero.

    Returns
    -------
    dict[str, pandas.DataFrame]
        ``prop.budget_for(o)[list(BUDGET_COLUMNS)]`` without those rows (index
        ``input``): the same numbers, from the arrays instead of the long table.
    """
    s = prop.sensitivities
    u_x = np.asarray(prop.u_x, dtype=float)
    x = np.asarray(prop.x, dtype=float)
    var_y = prop.u**2
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(var_y[:, None] > 0, prop.contributions / var_y[:, None], np.nan)
    u_contribution = np.abs(s * u_x)
    names = np.asarray(prop.input_names, dtype=object)
    drop = np.asarray(droppable, dtype=bool)
    row = {name: k for k, name in enumerate(prop.output_names)}
    out = {}
    for o in outputs:
        k = row[o]
        keep = np.flatnonzero(~(drop & (s[k] == 0)))
        out[o] = pd.DataFrame(
            {
                "estimate": x[keep],
                "u": u_x[keep],
                "sensitivity": s[k, keep],
                "u_contribution": u_contribution[k, keep],
                "share": share[k, keep],
            },
            index=pd.Index(names[keep].tolist(), name="input"),
        )
    return out
