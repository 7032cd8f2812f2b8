"""From a table to fitted-scale arrays: the log transform, labels, groups and excluded rows with
reasons."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.scales import to_scale

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def prepare(table: pd.DataFrame, x: str, y: str, log: str, taxon_col: str, by: str | None):
    """Numeric fitted-scale arrays, labels, groups and the excluded rows with reasons."""
    import pandas as pd

    for col, what in ((x, "x"), (y, "y")) + (((by, "by"),) if by else ()):
        if col not in table.columns:
            shown = ", ".join(map(str, list(table.columns)[:20]))
            raise UsageError(f"{what} column {col!r} is not in the table; columns are: {shown}")
    if taxon_col in table.columns:
        labels = table[taxon_col].astype(str).tolist()
    else:
        labels = [f"row {i + 2}" for i in range(len(table))]
    values = {}
    for col in (x, y):
        raw = table[col]
        num = pd.to_numeric(raw, errors="coerce")
        if num.notna().sum() == 0 and raw.notna().sum() > 0:
            raise UsageError(f"column {col!r} is not numeric (e.g. {raw.dropna().iloc[0]!r})")
        values[col] = (raw, num.to_numpy(dtype=float))
    excluded, keep = [], []
    for i, lab in enumerate(labels):
        reasons = []
        for col in (x, y):
            raw, num = values[col]
            v = num[i]
            if pd.isna(raw.iloc[i]):
                reasons.append(f"missing {col}")
            elif not np.isfinite(v):
                reasons.append(f"{col} value {raw.iloc[i]!r} is not a number")
            elif log != "none" and v <= 0:
                reasons.append(
                    f"{col} = {v:g} is not positive (log{'10' if log == '10' else ''} transform)"
                )
        if by and pd.isna(table[by].iloc[i]):
            reasons.append(f"missing group ({by})")
        if reasons:
            excluded.append({"label": lab, "reason": "; ".join(reasons)})
        else:
            keep.append(i)
    keep_arr = np.asarray(keep, dtype=int)
    X = to_scale(values[x][1][keep_arr], log)
    Y = to_scale(values[y][1][keep_arr], log)
    labs = [labels[i] for i in keep]
    groups = table[by].iloc[keep_arr].astype(str).to_numpy() if by else None
    return X, Y, labs, groups, excluded, keep_arr
