"""Data quality of a run: sample counts, masks and gaps per tag.

``Run.report_quality`` calls :func:`report_quality`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["report_quality"]


def report_quality(run) -> pd.DataFrame:
    """Per-tag sample counts and gaps.

    Returns
    -------
    DataFrame
        Indexed by tag: ``samples`` (rows in the run), ``valid``, ``masked``,
        ``duplicates`` (exclusions whose reason starts with "duplicate"),
        ``gaps`` (intervals between consecutive valid samples longer than 1.5
        times the run's median sampling interval; common practice, no source),
        ``longest_gap_s`` [s], ``reasons`` (exclusion reasons with counts).
    """
    idx = run.data.index
    valid = run.data.notna()
    dt = idx.to_series().diff().median() if len(idx) > 1 else pd.Timedelta(0)
    tsec = (
        np.asarray((idx - idx[0]) / pd.Timedelta(seconds=1), dtype=float)
        if len(idx)
        else np.zeros(0)
    )
    ex = run.exclusions
    if len(idx):
        # exclusions may cover the whole run; count those inside this run's span
        t_ex = pd.to_datetime(ex["time"], utc=True)
        lo, hi = idx[0], idx[-1]
        ex = ex[(t_ex >= lo) & (t_ex <= hi)]
    rows = []
    for tg in run.data.columns:
        tv = tsec[valid[tg].to_numpy()]
        gaps = np.diff(tv)
        limit = 1.5 * dt / pd.Timedelta(seconds=1) if dt is not pd.NaT else np.inf
        big = gaps[gaps > limit] if gaps.size else gaps
        exs = ex[ex["tag"] == tg]
        reasons = exs["reason"].value_counts()
        rows.append(
            {
                "samples": len(idx),
                "valid": int(tv.size),
                "masked": int(run.mask[tg].sum()),
                "duplicates": int(
                    exs["reason"].astype(str).str.lower().str.startswith("duplicate").sum()
                ),
                "gaps": int(big.size),
                "longest_gap_s": float(big.max()) if big.size else 0.0,
                "reasons": "; ".join(f"{r}: {c}" for r, c in reasons.items()),
            }
        )
    return pd.DataFrame(rows, index=pd.Index(list(run.data.columns), name="tag"))
