"""Which sources drive a multiple regression (:func:`comparo.fitting.multiple_fit`): each
source's rows set aside in turn, the per-taxon table rebuilt and the model refitted; the
shift of every coefficient in standard errors and a one-line verdict (docs/sensitivity.md)."""

from __future__ import annotations

import functools
import math
import os
from dataclasses import dataclass
from typing import Any

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import json_safe as _json
from comparo.base.numbers import number
from comparo.base.results import Result
from comparo.fitting.source_sensitivity import (
    SHIFT_THRESHOLD,
    flips,
    loso_lines,
    rebuilt_table,
    without_each_source,
)


@dataclass(frozen=True)
class MultipleSensitivity(Result):
    """How much the coefficients of a multiple regression depend on single sources.

    Attributes
    ----------
    method, y : str
    predictors : tuple of str
    terms : dict
        term -> ``{"estimate", "se"}`` of the fit on all data (fitted log scale).
    leave_one_source_out : list of dict or None
        ``{"source_id", "n", "terms": {term: {"estimate", "shift_se"}}, "shift_se", "term",
        "p", "flips", "note"}``, most influential first; ``shift_se`` of a term is
        (b_without - b) / SE(b); the record's ``shift_se`` and ``term`` are those of the
        predictor or factor term moved most (the intercept is reported, not ranked). ``p`` is
        the joint ``against`` test's p without the source (None without ``against``).
        None for a plain table.
    verdict : str
    unavailable : tuple of str
    """

    method: str
    y: str
    predictors: tuple[str, ...]
    terms: dict
    leave_one_source_out: list[dict] | None
    verdict: str
    unavailable: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """JSON-safe dict: ``leave_one_source_out``, ``terms``, ``verdict``, ``unavailable``."""
        return _json(
            {
                "leave_one_source_out": self.leave_one_source_out,
                "terms": self.terms,
                "verdict": self.verdict,
                "unavailable": list(self.unavailable),
            }
        )

    def to_frame(self):
        """One row per source left out (most influential first): ``source_id``, ``n``,
        ``term`` moved most and its ``shift_se``, ``p`` and ``flips``; empty for a table."""
        import pandas as pd

        cols = ["source_id", "n", "term", "shift_se", "p", "flips", "note"]
        rows = [{c: r.get(c) for c in cols} for r in self.leave_one_source_out or []]
        return pd.DataFrame(rows, columns=cols)

    def summary(self, top: int = 5) -> str:
        """Plain-text account for people."""
        f = functools.partial(number, digits=4, missing="-")
        named = ", ".join(
            f"{t} {f(v['estimate'])} (SE {f(v['se'])})"
            for t, v in self.terms.items()
            if t != "intercept"
        )
        lines = [f"sensitivity of the {self.method.upper()} coefficients: {named}"]
        if self.leave_one_source_out is not None:

            def refit(r: dict) -> str:
                shifts = "  ".join(
                    f"{t} {f(v['estimate'])} ({f(v['shift_se'])} SE)"
                    for t, v in r["terms"].items()
                    if t != "intercept"
                )
                return shifts + ("  flips the joint test" if r["flips"] else "")

            lines += loso_lines(
                self.leave_one_source_out[:top], len(self.leave_one_source_out), "terms", refit
            )
        lines += [f"  not available: {u}" for u in self.unavailable]
        lines.append(f"  verdict: {self.verdict}")
        return "\n".join(lines)


def multiple_sensitivity(
    dataset_or_table: Any,
    y: str,
    predictors: list[str],
    method: str = "ols",
    *,
    factor: str | None = None,
    against: dict[str, float] | None = None,
    ci: float = 0.95,
    log: str = "10",
    temperature: bool = True,
    taxon_col: str = "taxon",
    progress: bool = False,
    **fit_options: Any,
) -> MultipleSensitivity:
    """Leave-one-source-out for a multiple regression (:func:`comparo.fitting.multiple_fit`).

    Each source's rows are set aside in turn and the per-taxon table rebuilt as for the
    one-predictor :func:`sensitivity` (a taxon measured by two sources keeps the other's
    value); the model is refitted on it. ``shift_se`` = (b_without - b) / SE(b) for every
    term. A plain table records no source per value, so the part is then unavailable.
    *fit_options*: ``tree``, ``lambda_``, ``tree_labels`` for pgls. The jackknife and the
    measurement-error Monte Carlo of the one-predictor sensitivity are not computed here.
    """
    import pandas as pd

    from comparo.base.arguments import check_kind, check_level
    from comparo.fitting.multiple import multiple_fit
    from comparo.validation.dataset import Dataset, as_dataset

    if isinstance(dataset_or_table, str | os.PathLike):  # a dataset folder
        dataset_or_table = as_dataset(dataset_or_table, "dataset_or_table")
    check_kind(
        dataset_or_table,
        (Dataset, pd.DataFrame),
        "dataset_or_table",
        "a Dataset (comparo.load(FOLDER)), a dataset folder or a per-taxon DataFrame "
        "(comparo.tabulate)",
    )
    ci = check_level(ci)
    predictors = list(predictors)
    kw = dict(
        factor=factor,
        method=method,
        log=str(log),
        ci=ci,
        taxon_col=taxon_col,
        against=against,
        **fit_options,
    )
    ds = dataset_or_table if isinstance(dataset_or_table, Dataset) else None
    unavailable = []
    if ds is not None:
        from comparo.curation.aggregation import per_taxon
        from comparo.curation.harmonise import harmonise

        h = harmonise(ds, temperature=temperature)
        table = per_taxon(ds, harmonised=h)
    else:
        table = dataset_or_table
        unavailable.append(
            "leave-one-source-out needs values with one source each (a plain table does not record "
            "the source of each value)"
        )
    missing = [c for c in [y, *predictors] if c not in table.columns]
    if ds is not None and missing:
        raise UsageError(
            f"{', '.join(map(repr, missing))} "
            f"{'is not a quantity' if len(missing) == 1 else 'are not quantities'}"
            " of the dataset; leave-one-source-out needs measured quantities (a derived column "
            "rests on several sources per taxon)"
        )
    base = multiple_fit(table, y, predictors, **kw)
    terms = {t["term"]: {"estimate": t["estimate"], "se": t["se"]} for t in base.terms}
    p_full = None if base.against is None else base.against["p"]
    loso = None
    if ds is not None:
        rows = h.rows[h.rows["quantity_key"].isin([y, *predictors])].copy()
        stems = (y, *predictors)
        cols = [c for c in table.columns if c == "taxon" or c.startswith(stems) or c == factor]
        base_table = table[list(dict.fromkeys(["taxon", *cols]))]
        used = rows[rows["status"] == "used"]
        loso = []
        for sid, r, changed in without_each_source(rows, used, progress):
            sub = rebuilt_table(
                ds, h, r, changed, base_table, keep_cols=(factor,) if factor else ()
            )
            loso.append(_multiple_record(sid, sub, y, predictors, kw, terms, p_full, 1 - ci))
        loso.sort(key=lambda d: -abs(d["shift_se"]) if d["shift_se"] is not None else 0.0)
    verdict = _multiple_verdict(loso, against is not None)
    return MultipleSensitivity(
        method, y, tuple(predictors), terms, loso, verdict, tuple(unavailable)
    )


def _multiple_record(
    sid: str, table, y: str, predictors: list[str], kw: dict, terms: dict, p_full, alpha: float
) -> dict:
    """One source left out: the refit's terms and shifts, or why there is none."""
    import pandas as pd

    from comparo.fitting.multiple import design, fit_design

    cols = [y, *predictors]
    n_left = 0
    if all(c in table.columns for c in cols):
        n_left = int(table[cols].apply(pd.to_numeric, errors="coerce").notna().all(axis=1).sum())
    pgls = kw["method"] == "pgls"
    try:  # multiple_fit without the flags (the refits need only the terms)
        d = design(
            table,
            y,
            predictors,
            factor=kw["factor"],
            log=kw["log"],
            taxon_col=kw["taxon_col"],
            tree=kw.get("tree") if pgls else None,
            tree_labels=kw.get("tree_labels"),
        )
        res = fit_design(
            d,
            y,
            predictors,
            method=kw["method"],
            lambda_=kw.get("lambda_", "ml"),
            ci=kw["ci"],
            log=kw["log"],
            against=kw["against"],
        )
    except UsageError as exc:
        return {
            "source_id": sid,
            "n": n_left,
            "terms": None,
            "shift_se": None,
            "term": None,
            "p": None,
            "flips": False,
            "note": str(exc),
        }
    out, best = {}, (None, None)
    for t in res.terms:
        ref = terms[t["term"]]
        shift = (t["estimate"] - ref["estimate"]) / ref["se"] if ref["se"] else None
        shift = shift if shift is not None and math.isfinite(shift) else None
        out[t["term"]] = {"estimate": t["estimate"], "shift_se": shift}
        if (
            t["term"] != "intercept"
            and shift is not None
            and (best[1] is None or abs(shift) > abs(best[1]))
        ):
            best = (t["term"], shift)
    p = None if res.against is None else res.against["p"]
    return {
        "source_id": sid,
        "n": int(res.n),
        "terms": out,
        "shift_se": best[1],
        "term": best[0],
        "p": p,
        "flips": flips(p_full, p, alpha),
        "note": None,
    }


def _multiple_verdict(loso: list[dict] | None, tested: bool) -> str:
    """One line from the leave-one-source-out numbers of a multiple regression."""
    if loso is None:
        return "source-level checks not available for a plain table"
    if not loso:
        return "no sources to leave out"
    mark = f"{SHIFT_THRESHOLD:g} SE or more" + (" or flips the joint test" if tested else "")
    hit = [
        r
        for r in loso
        if r["flips"] or (r["shift_se"] is not None and abs(r["shift_se"]) >= SHIFT_THRESHOLD)
    ]
    if not hit:
        return f"no single source moves a coefficient by {mark}"
    words = []
    for r in hit[:3]:
        bits = [f"{r['term']} {r['shift_se']:+.1f} SE"] if r["shift_se"] is not None else []
        bits += ["flips the joint test"] if r["flips"] else []
        words.append(f"{r['source_id']} ({', '.join(bits)})")
    more = f" and {len(hit) - 3} more" if len(hit) > 3 else ""
    return f"leaving out one source moves a coefficient by {mark}: {', '.join(words)}{more}"
