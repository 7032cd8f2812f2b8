"""Columns of a derived table: reading table columns, why a value is missing, and the basis,
obs_ids, method and Monte Carlo columns of each output.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.derivation.uncertainty import MC_SUFFIXES, Propagation

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Bases from strongest to weakest (the weakest one among a value's inputs is its basis);
#: ``imputed`` (predicted from relatives on the tree, docs/methods/imputation.md) is weaker
#: than ``assumed`` and exists only in per-taxon tables comparo builds.
BASIS_ORDER = ("reported", "computed", "digitized", "proxy", "assumed", "imputed")


def column(table: pd.DataFrame, name: str, factor: float = 1.0) -> np.ndarray:
    """The numeric column *name* of *table* times *factor* (NaN where absent or not a number)."""
    if name not in table.columns:
        return np.full(len(table), np.nan)
    import pandas as pd

    return pd.to_numeric(table[name], errors="coerce").to_numpy(dtype=float) * factor


def text_column(table: pd.DataFrame, name: str) -> list[str]:
    """The text column *name* of *table* ('' where absent or missing)."""
    if name not in table.columns:
        return [""] * len(table)
    return [
        "" if (v is None or (isinstance(v, float) and math.isnan(v))) else str(v)
        for v in table[name].tolist()
    ]


def join_reasons(*reasons: np.ndarray) -> np.ndarray:
    """Row-wise '; '-joined non-empty reasons of several text arrays."""
    out = np.full(len(reasons[0]), "", dtype=object)
    for r in reasons:
        out = np.where(r == "", out, np.where(out == "", r, out + "; " + r))
    return out


def _weakest(bases: list[str]) -> str:
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    return max(bases, key=lambda b: rank.get(b, len(BASIS_ORDER) - 1)) if bases else ""


def pd_concat(frame: pd.DataFrame, columns: Mapping[str, Any]) -> pd.DataFrame:
    """*frame* with *columns* appended (one concat, no fragmentation)."""
    import pandas as pd

    extra = pd.DataFrame(dict(columns), index=frame.index)
    return pd.concat([frame, extra], axis=1)


def lineage_columns(
    key: str,
    y: np.ndarray,
    prop: Propagation,
    basis,
    obs,
    display,
    reason,
    method,
    passthrough=None,
    cache: dict | None = None,
) -> dict[str, Any]:
    """KEY_basis, KEY_obs, KEY_method and KEY_missing of one output.

    *cache* (one dict per derive() call) keeps each leaf's basis ranks and obs_id
    tokens, which every output reuses.
    """
    n = len(y)
    has = np.isfinite(y)
    reason = np.where(has, "", np.where(reason == "", "not computable from the inputs", reason))
    reason = reason.astype(object)
    for i in np.flatnonzero(has):
        lacking = prop.unknown_u[key][i]
        if lacking:
            reason[i] = "uncertainty: no " + ", ".join(f"{display[lf]}_u" for lf in lacking)
    cache = {} if cache is None else cache
    deps = prop.deps[key]
    names = list(deps)
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    for lf in names:
        if lf not in cache:
            cache[lf] = (
                [rank.get(b or "assumed", -1) for b in basis[lf]],
                [tuple(t.strip() for t in o.split(";") if t.strip()) for o in obs[lf]],
            )
    ranks = np.array([cache[lf][0] for lf in names], dtype=np.int64).reshape(len(names), n)
    dep = np.array([deps[lf] for lf in names], dtype=bool).reshape(len(names), n)
    if (ranks[dep] < 0).any():  # a basis outside BASIS_ORDER: fall back to the row-wise rule
        weakest = [
            _weakest([basis[lf][i] or "assumed" for lf in names if deps[lf][i]] + ["computed"])
            for i in range(n)
        ]
    else:
        top = np.max(np.where(dep, ranks, rank["computed"]), axis=0, initial=rank["computed"])
        weakest = [BASIS_ORDER[t] for t in top]
    b_col, o_col = [""] * n, [""] * n
    for i in np.flatnonzero(has):
        if passthrough is not None and not np.isnan(passthrough[1][i]):
            b_col[i] = passthrough[2][i] or "assumed"
            used = [passthrough[0]]  # a leaf too, so in the cache
        else:
            b_col[i] = weakest[i]
            used = [names[j] for j in np.flatnonzero(dep[:, i])]
        o_col[i] = ";".join(dict.fromkeys(t for lf in used for t in cache[lf][1][i]))
    method = np.broadcast_to(np.asarray(method, dtype=object), (n,))
    return {
        f"{key}_basis": b_col,
        f"{key}_obs": o_col,
        f"{key}_method": np.where(has, method, ""),
        f"{key}_missing": reason,
    }


def mc_columns(
    key: str, summ: dict[str, np.ndarray], gum_u: np.ndarray, factor: float
) -> dict[str, Any]:
    """The Monte Carlo columns of derived quantity *key* (percentiles, MC SE, nonlinearity) in its
    unit."""
    cols = {f"{key}{sfx}": summ[sfx] * factor for sfx in (*MC_SUFFIXES, "_mc_u")}
    mcu = cols[f"{key}_mc_u"]
    with np.errstate(divide="ignore", invalid="ignore"):
        cols[f"{key}_nonlinear"] = np.where(
            np.isfinite(gum_u) & np.isfinite(mcu) & (gum_u > 0),
            np.abs(mcu / gum_u - 1.0) > 0.2,
            False,
        )
    return cols
