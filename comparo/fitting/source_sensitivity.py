"""Which sources drive a scaling fit: leave-one-source-out, basis filters,
leave-one-taxon-out jackknife and Monte Carlo propagation of measurement error.

Every number here comes from refitting the same line (:func:`comparo.fitting.fit`)
on a changed input; the verdict line is built only from those numbers.

References
----------
Quenouille, M. H. (1956) Notes on bias in estimation. Biometrika 43, 353-360.
Efron, B. (1982) The Jackknife, the Bootstrap and Other Resampling Plans. SIAM.
JCGM 101:2008 Evaluation of measurement data - Supplement 1 to the GUM:
propagation of distributions using a Monte Carlo method.
Fuller, W. A. (1987) Measurement Error Models. Wiley.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import os
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import json_safe as _json
from comparo.base.numbers import number
from comparo.base.progress import ProgressBar
from comparo.base.results import Result
from comparo.fitting.result import FitResult
from comparo.fitting.scaling import fit, renamed_against
from comparo.fitting.slope_spread import analytic_se, measurement_error_mc, taxon_jackknife

BASIS_STEPS = ("reported", "computed", "digitized", "proxy", "assumed")
#: A refit that moves the slope by at least this many analytic SEs counts as influential.
SHIFT_THRESHOLD = 1.0


def loso_lines(
    rows: list[dict], total: int, fitted: str, refit: Callable[[dict], str]
) -> list[str]:
    """The leave-one-source-out lines of a summary: a heading for *total* sources, then one
    line per row of *rows*: ``refit(row)`` when its *fitted* key holds a refit, else why not."""
    out = [f"  leave one source out ({total} sources), most influential first:"]
    for r in rows:
        head = f"    without {r['source_id']:<12} "
        if r[fitted] is None:
            out.append(f"{head}{r['n']} taxa left  {r.get('note') or 'not refitted'}")
        else:
            out.append(f"{head}n {r['n']:>4}  {refit(r)}")
    return out


@dataclass(frozen=True)
class SensitivityResult(Result):
    """How much the fitted slope depends on single sources, bases, taxa and measurement error.

    Attributes
    ----------
    method, x, y : str
    slope : float
        Slope of the fit on all data (dimensionless on log-log axes).
    slope_se : float
        Its analytic standard error (see :func:`analytic_se`).
    ci_level : float
    test : dict or None
        ``{"value", "p"}`` of the full fit's slope test.
    leave_one_source_out : list of dict or None
        ``{"source_id", "n", "slope", "slope_ci", "p", "shift_se", "flips", "note"}``,
        most influential (largest ``|shift_se|``) first; ``shift_se`` = (slope
        without the source - slope) / slope_se. ``n`` is the taxa refitted, or when
        the line could not be refitted (``slope`` None) the taxa left with both
        values, ``note`` saying why. None for a plain table.
    by_basis : list of dict or None
        ``{"bases", "n", "slope", "slope_ci", "p", "shift_se", "ci_change"}``,
        one step per cumulative basis set (reported, + computed, ...);
        ``shift_se`` and ``ci_change`` (relative change of CI width) against
        the step before. None for a plain table.
    jackknife_se : dict
        ``{"slope_jackknife", "slope_analytic", "ratio", "n"}`` (and ``"note"``
        when not computed, e.g. for pgls).
    measurement_error : dict
        ``{"draws", "seed", "slope_mean", "spread", "sampling_se", "total_se",
        "share", "fixed_x", "fixed_y", "note"}`` (``fixed_x``/``fixed_y``: taxa whose x/y
        has no uncertainty and is held fixed; ``"points"``: taxa drawn, once matched);
        ``"draws_asked"`` as well when the method's draws were capped (lts, pgls: :data:`MC_CAP`).
    verdict : str
    """

    method: str
    x: str
    y: str
    slope: float
    slope_se: float
    ci_level: float
    test: dict | None
    leave_one_source_out: list[dict] | None
    by_basis: list[dict] | None
    jackknife_se: dict
    measurement_error: dict
    verdict: str
    unavailable: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """JSON-safe dict with the keys of the ``"sensitivity"`` contract (docs/sensitivity.md)."""
        return _json(
            {
                "leave_one_source_out": self.leave_one_source_out,
                "by_basis": self.by_basis,
                "jackknife_se": self.jackknife_se,
                "measurement_error": self.measurement_error,
                "verdict": self.verdict,
            }
        )

    def to_frame(self):
        """One row per refit: part (source/basis), what was changed, n, slope, CI, p, shift_se."""
        import pandas as pd

        rows = []
        for r in self.leave_one_source_out or []:
            rows.append(
                {
                    "part": "leave_one_source_out",
                    "changed": f"without {r['source_id']}",
                    "n": r["n"],
                    "slope": r["slope"],
                    "ci_low": r["slope_ci"][0],
                    "ci_high": r["slope_ci"][1],
                    "p": r["p"],
                    "shift_se": r["shift_se"],
                }
            )
        for r in self.by_basis or []:
            rows.append(
                {
                    "part": "by_basis",
                    "changed": "+".join(r["bases"]),
                    "n": r["n"],
                    "slope": r["slope"],
                    "ci_low": r["slope_ci"][0],
                    "ci_high": r["slope_ci"][1],
                    "p": r["p"],
                    "shift_se": r["shift_se"],
                }
            )
        return pd.DataFrame(
            rows, columns=["part", "changed", "n", "slope", "ci_low", "ci_high", "p", "shift_se"]
        )

    def _repr_html_(self) -> str:
        """Compact table for notebooks: the refits of :meth:`to_frame`, the jackknife and
        measurement-error standard errors, and the verdict."""
        from comparo.base.display import frame_html

        j, m = self.jackknife_se, self.measurement_error
        notes = [
            f"jackknife SE {number(j.get('slope_jackknife'), 4, '-')}; analytic SE "
            f"{number(j.get('slope_analytic'), 4, '-')}"
        ]
        if m.get("spread") is not None:
            notes.append(
                f"measurement error ({m['draws']} draws): spread {number(m['spread'], 4, '-')}, "
                f"total SE {number(m['total_se'], 4, '-')}"
            )
        notes += [f"not available: {u}" for u in self.unavailable]
        notes.append(f"verdict: {self.verdict}")
        title = (
            f"sensitivity of the {self.method.upper()} slope {number(self.slope, 4, '-')} (SE "
            f"{number(self.slope_se, 4, '-')})"
        )
        return frame_html(title, self.to_frame(), notes)

    def summary(self, top: int = 5) -> str:
        """Plain-text account for people."""
        f = functools.partial(number, digits=4, missing="-")
        lines = [
            f"sensitivity of the {self.method.upper()} slope {f(self.slope)} (SE "
            f"{f(self.slope_se)})"
        ]
        if self.leave_one_source_out is not None:

            def refit(r: dict) -> str:
                lo, hi = r["slope_ci"]
                flip = "  flips the test" if r["flips"] else ""
                return (
                    f"slope {f(r['slope'])}  CI {f(lo)} .. {f(hi)}  p {f(r['p'])}  shift "
                    f"{f(r['shift_se'])} SE{flip}"
                )

            lines += loso_lines(
                self.leave_one_source_out[:top], len(self.leave_one_source_out), "slope", refit
            )
        if self.by_basis is not None:
            lines.append("  by basis (cumulative):")
            for r in self.by_basis:
                lo, hi = r["slope_ci"]
                lines.append(
                    f"    {'+'.join(r['bases']):<40} n {r['n']:>4}  slope {f(r['slope'])}  CI "
                    f"{f(lo)} .. {f(hi)}"
                )
        j = self.jackknife_se
        lines.append(
            f"  jackknife SE (leave one taxon out) {f(j['slope_jackknife'])}; analytic SE "
            f"{f(j['slope_analytic'])}"
        )
        if j.get("note"):
            lines.append(f"    note: {j['note']}")
        m = self.measurement_error
        if m.get("spread") is not None:
            lines.append(
                f"  measurement error ({m['draws']} draws, seed {m['seed']}): spread "
                f"{f(m['spread'])}, sampling SE {f(m['sampling_se'])}, total {f(m['total_se'])}"
            )
        if m.get("note"):
            lines.append(f"    note: {m['note']}")
        lines += [f"  not available: {u}" for u in self.unavailable]
        lines.append(f"  verdict: {self.verdict}")
        return "\n".join(lines)


def _refit(
    ds, h, rows, changed, base_table, x, y, method, kwargs
) -> tuple[FitResult | None, int, str | None]:
    """Refit after a change of the rows flagged ``changed``.

    Aggregation is per taxon, so only the taxa with a changed row are rebuilt
    (:func:`comparo.curation.aggregation.per_taxon` on their rows); the others keep their
    per-taxon values from ``base_table``.
    """
    table = rebuilt_table(ds, h, rows, changed, base_table)
    if x not in table.columns or y not in table.columns:
        return None, 0, f"no {x if x not in table.columns else y} values remain"
    n_left = _points(table, x, y)
    try:
        return fit(table, x, y, method, **kwargs), n_left, None
    except UsageError as exc:
        return None, n_left, str(exc)


def rebuilt_table(ds, h, rows, changed, base_table, keep_cols: tuple[str, ...] = ()):
    """The per-taxon table after a change of the rows flagged ``changed``: the taxa with a
    changed row rebuilt from their rows, the others as in ``base_table``; *keep_cols* (e.g. a
    factor) are carried over from ``base_table`` for the rebuilt taxa."""
    import pandas as pd

    from comparo.curation.aggregation import per_taxon

    touched = set(rows.loc[changed, "accepted"])
    sub_rows = rows[rows["accepted"].isin(touched)]
    sub = per_taxon(ds, harmonised=dataclasses.replace(h, rows=sub_rows))
    keep = base_table[~base_table["taxon"].isin(touched)]
    sub = sub[[c for c in keep.columns if c in sub.columns]].copy()
    for c in keep_cols:
        sub[c] = sub["taxon"].map(base_table.drop_duplicates("taxon").set_index("taxon")[c])
    return pd.concat([keep, sub], ignore_index=True).sort_values("taxon", kind="stable")


def _points(table, x: str, y: str) -> int:
    """Taxa with a positive finite x and y (the points a log-log refit could use)."""
    import pandas as pd

    xs = pd.to_numeric(table[x], errors="coerce").to_numpy(dtype=float)
    ys = pd.to_numeric(table[y], errors="coerce").to_numpy(dtype=float)
    return int(np.sum(np.isfinite(xs) & np.isfinite(ys) & (xs > 0) & (ys > 0)))


def _p(r: FitResult | None) -> float | None:
    return r.against["p"] if r is not None and r.against else None


def _record(
    r: FitResult | None, base_slope: float, se: float, n_left: int = 0, why: str | None = None
) -> dict:
    """One refit's numbers; *n_left* points remained when it could not be refitted (*why*)."""
    if r is None:
        return {
            "n": int(n_left),
            "slope": None,
            "slope_ci": [None, None],
            "p": None,
            "shift_se": None,
            "note": f"not refitted: {why}" if why else "not refitted",
        }
    shift = (r.slope - base_slope) / se if se > 0 else float("nan")
    return {
        "n": int(r.n),
        "slope": r.slope,
        "slope_ci": list(r.slope_ci),
        "p": _p(r),
        "shift_se": shift,
        "note": None,
    }


def flips(p_full: float | None, p: float | None, alpha: float) -> bool:
    return p_full is not None and p is not None and (p_full < alpha) != (p < alpha)


# --------------------------------------------------------------------------- entry point


def sensitivity(
    dataset_or_table: Any,
    x: str,
    y: str,
    method: str = "sma",
    *,
    against: float | None = None,
    ci: float = 0.95,
    log: str = "10",
    mc: int = 1000,
    seed: int = 20240601,
    progress: bool = False,
    temperature: bool = True,
    taxon_col: str = "taxon",
    taxa: list[str] | None = None,
    no_sources: str | None = None,
    harmonised: Any = None,
    **fit_options: Any,
) -> SensitivityResult:
    """Source-level sensitivity and measurement-error propagation of a scaling fit.

    Parameters
    ----------
    dataset_or_table : comparo.Dataset or pandas.DataFrame
        A loaded dataset (all parts) or a per-taxon table (no source-level parts:
        a plain table does not say which source each value came from).
    x, y, method, against, ci, log
        As for :func:`comparo.fitting.fit`.
    mc : int
        Monte Carlo draws for the measurement-error part (0: skip).
    seed : int
        Seed of ``numpy.random.default_rng``.
    progress : bool
        Rich progress bars on standard error.
    taxa : list of str, optional
        Restrict a dataset to these accepted taxon names (used per group by
        :func:`sensitivity_by_group`).
    no_sources : str, optional
        For a table: why it records no source or basis per value (default: it is a
        plain table). Said in ``unavailable`` and the verdict; e.g. a table derived
        from a dataset folder, whose derived values rest on several sources each.
    harmonised : comparo.curation.harmonise.Harmonised, optional
        The dataset already harmonised with the same *temperature* (as
        :func:`comparo.curation.harmonise.harmonise` returned it), so that it is not
        harmonised again (the report passes the one it made).
    **fit_options
        Further options of :func:`comparo.fitting.fit` (e.g. ``tree`` for pgls).

    Returns
    -------
    SensitivityResult

    Notes
    -----
    Leave-one-source-out drops every row of a source and rebuilds the per-taxon
    table, so a taxon measured by two sources keeps the other source's value.
    ``shift_se`` = (b_without - b) / SE(b). A source "flips" the test when the
    slope test's p falls on the other side of alpha = 1 - ci. The jackknife
    leaves out one taxon at a time (Quenouille 1956; Efron 1982). The Monte Carlo
    follows JCGM 101:2008.
    """
    import pandas as pd

    from comparo.base.arguments import check_count, check_draws, check_kind, check_level, check_seed
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
    mc = check_count(mc, "mc")
    seed = check_seed(seed, "seed")
    ci = check_level(ci)
    against = renamed_against(fit_options, against)
    alpha = 1 - ci
    kw = dict(against=against, ci=ci, log=str(log), taxon_col=taxon_col, **fit_options)
    unavailable = []
    ds = dataset_or_table if isinstance(dataset_or_table, Dataset) else None
    if ds is not None:
        h, table = _harmonised(ds, temperature, taxa, harmonised)
    else:
        table = dataset_or_table
        why = no_sources or "a plain table does not record the source and basis of each value"
        unavailable.append(
            f"leave-one-source-out and basis filters need values with one source each ({why})"
        )
    base = fit(table, x, y, method, **kw)
    check_draws(mc, base.n, method, "mc")  # the bound of the command line, before the draws
    se = analytic_se(base)
    p_full = _p(base)
    loso = by_basis = None
    if ds is not None:
        loso, by_basis = _source_parts(ds, h, table, base, kw, alpha, progress)
    jack = taxon_jackknife(base, kw, table=table)
    me_options = dict(taxon_col=taxon_col, progress=progress, fit_options=fit_options)
    me = measurement_error_mc(table, base, log=str(log), mc=mc, seed=seed, **me_options)
    plain = (no_sources or "a plain table") if unavailable else False
    verdict = make_verdict(loso, by_basis, jack, me, against=against, unavailable=plain)
    test = {"value": against, "p": p_full} if against is not None else None
    return SensitivityResult(
        method=method,
        x=x,
        y=y,
        slope=base.slope,
        slope_se=se,
        ci_level=float(ci),
        test=test,
        leave_one_source_out=loso,
        by_basis=by_basis,
        jackknife_se=jack,
        measurement_error=me,
        verdict=verdict,
        unavailable=tuple(unavailable),
    )


def _harmonised(ds, temperature: bool, taxa: list[str] | None, harmonised=None):
    """The harmonised rows of *ds* (*harmonised* when given; only those of *taxa* when given)
    and its per-taxon table."""
    from comparo.curation.aggregation import per_taxon
    from comparo.curation.harmonise import harmonise

    h = harmonised if harmonised is not None else harmonise(ds, temperature=temperature)
    if taxa is not None:
        h = dataclasses.replace(
            h, rows=h.rows[h.rows["accepted"].astype(str).isin(set(map(str, taxa)))]
        )
    return h, per_taxon(ds, harmonised=h)


def _source_parts(ds, h, table, base: FitResult, kw: dict, alpha: float, progress: bool):
    """Leave-one-source-out and the basis steps of the fit *base* (its options *kw*)."""
    x, y, taxon_col = base.x, base.y, kw["taxon_col"]
    if x not in table.columns or y not in table.columns:
        raise UsageError(
            f"{x!r} and {y!r} must both be quantities of the dataset for the source-level parts"
        )
    rows = h.rows[h.rows["quantity_key"].isin([x, y])].copy()
    cols = [taxon_col] + [
        c for c in table.columns if c.startswith((f"{x}", f"{y}")) and c != taxon_col
    ]
    xy_table = table[[c for c in dict.fromkeys(["taxon", *cols]) if c in table.columns]]
    used = rows[rows["status"] == "used"]
    refit = functools.partial(
        _refit, ds, h, base_table=xy_table, x=x, y=y, method=base.method, kwargs=kw
    )
    se, p_full = analytic_se(base), _p(base)
    loso = _leave_one_source_out(rows, used, refit, base, se, p_full, alpha, progress)
    return loso, _basis_steps(rows, used, refit, base, alpha)


def _leave_one_source_out(
    rows, used, refit, base: FitResult, se: float, p_full, alpha: float, progress: bool
) -> list[dict]:
    """Refit without each source in turn; most influential (largest |shift_se|) first."""
    loso = []
    for sid, r, changed in without_each_source(rows, used, progress):
        res, n_left, why = refit(rows=r, changed=changed)
        rec = {"source_id": sid, **_record(res, base.slope, se, n_left, why)}
        rec["flips"] = flips(p_full, rec["p"], alpha)
        loso.append(rec)
    loso.sort(
        key=lambda d: (
            -abs(d["shift_se"])
            if d["shift_se"] is not None and math.isfinite(d["shift_se"])
            else 0.0
        )
    )
    return loso


def without_each_source(rows, used, progress: bool):
    """For each source of the *used* rows, in order of its id: ``(source_id, rows with that
    source's rows excluded, mask of those rows)``, with a progress bar when asked."""
    sources = sorted(used["source_id"].astype(str).unique())
    with ProgressBar(progress, "leave one source out", len(sources)) as bar:
        for sid in sources:
            r = rows.copy()
            changed = (r["source_id"].astype(str) == sid).to_numpy()
            r.loc[changed, "status"] = "excluded"
            yield sid, r, changed
            bar.advance()


def _basis_steps(rows, used, refit, base: FitResult, alpha: float) -> list[dict]:
    """Refit on the reported values only, then adding one weaker basis at a time."""
    by_basis = []
    prev = None
    present = set(used["basis_effective"])
    for k in range(len(BASIS_STEPS)):
        bases = BASIS_STEPS[: k + 1]
        if k > 0 and BASIS_STEPS[k] not in present:
            continue
        r = rows.copy()
        changed = (~r["basis_effective"].isin(bases)).to_numpy()
        r.loc[changed, "status"] = "excluded"
        res, n_left, why = (
            (base, base.n, None) if set(present) <= set(bases) else refit(rows=r, changed=changed)
        )
        ref_se = analytic_se(prev) if prev is not None else float("nan")
        rec = {
            "bases": list(bases),
            **_record(res, prev.slope if prev is not None else float("nan"), ref_se, n_left, why),
        }
        if prev is None:
            rec["shift_se"] = None
        width = (res.slope_ci[1] - res.slope_ci[0]) if res is not None else float("nan")
        pw = (prev.slope_ci[1] - prev.slope_ci[0]) if prev is not None else float("nan")
        rec["ci_change"] = width / pw - 1 if prev is not None and pw > 0 else None
        rec["flips"] = flips(_p(prev), rec["p"], alpha) if prev is not None else False
        by_basis.append(rec)
        if res is not None:
            prev = res
    return by_basis


def make_verdict(loso, by_basis, jack, me, *, against=None, unavailable: bool | str = False) -> str:
    """One plain-language line built only from the sensitivity numbers.

    *unavailable*: the source-level parts did not run; a string says why (True: a
    plain table).

    A source (or a basis step) counts as influential when it moves the slope by
    at least ``SHIFT_THRESHOLD`` analytic SEs or flips the slope test.
    """
    parts = []
    if loso is not None:
        hit = [
            r
            for r in loso
            if r["flips"]
            or (
                r["shift_se"] is not None
                and math.isfinite(r["shift_se"])
                and abs(r["shift_se"]) >= SHIFT_THRESHOLD
            )
        ]
        mark = f"{SHIFT_THRESHOLD:g} SE or more" + (
            " or flips the test" if against is not None else ""
        )
        if not loso:
            parts.append("no sources to leave out")
        elif not hit:
            parts.append(f"no single source moves the slope by {mark}")
        else:
            words = []
            for r in hit[:3]:
                bits = (
                    [f"{r['shift_se']:+.1f} SE"]
                    if r["shift_se"] is not None and math.isfinite(r["shift_se"])
                    else []
                )
                bits += ["flips the test"] if r["flips"] else []
                words.append(f"{r['source_id']} ({', '.join(bits)})")
            more = f" and {len(hit) - 3} more" if len(hit) > 3 else ""
            parts.append(
                f"leaving out one source moves the slope by {mark}: {', '.join(words)}{more}"
            )
    elif unavailable:
        why = unavailable if isinstance(unavailable, str) else "a plain table"
        parts.append(
            f"source-level checks not available ({why})"
            if why != "a plain table"
            else "source-level checks not available for a plain table"
        )
    for r in (by_basis or [])[1:]:
        added = r["bases"][-1]
        moved = (
            r["shift_se"] is not None
            and math.isfinite(r["shift_se"])
            and abs(r["shift_se"]) >= SHIFT_THRESHOLD
        )
        widened = r["ci_change"] is not None and r["ci_change"] >= 0.2
        if moved or r["flips"] or widened:
            bits = []
            if moved:
                bits.append(f"slope moves {r['shift_se']:+.1f} SE")
            if r["flips"]:
                bits.append("flips the test")
            if r["ci_change"] is not None:
                bits.append(
                    f"CI {'widens' if r['ci_change'] >= 0 else 'narrows'} "
                    f"{abs(100 * r['ci_change']):.0f}%"
                )
            parts.append(f"sensitive to {added} values ({', '.join(bits)})")
    if jack.get("ratio") is not None and math.isfinite(jack["ratio"]) and jack["ratio"] > 1.5:
        parts.append(
            f"jackknife SE {jack['ratio']:.1f}x the analytic SE (a few taxa carry the fit)"
        )
    if me.get("share") is not None:
        share = me["share"]
        fixed = _not_propagated(me)
        where = " where known" if fixed else ""
        if share >= 0.5:  # one measure throughout: the share of the slope variance
            parts.append(
                f"measurement error{where} dominates the slope uncertainty ({100 * share:.0f}% of "
                f"the slope variance)"
            )
        elif share >= 0.1:
            parts.append(
                f"measurement error{where} accounts for {100 * share:.0f}% of the slope variance"
            )
        else:
            parts.append(
                f"measurement error{where} under 10% of the slope variance"
                if fixed
                else "measurement error negligible (under 10% of the slope variance)"
            )
        if fixed:
            parts.append(fixed)
    return "; ".join(parts) if parts else "nothing to report"


def _not_propagated(me: dict) -> str:
    """'not propagated: no x uncertainty for 12 of 57 taxa, ...' or '' when every value had one."""
    n = me.get("points")
    of = f" of {n}" if n else ""
    bits = [
        f"no {axis} uncertainty for {me[f'fixed_{axis}']}{of} taxa"
        for axis in ("x", "y")
        if me.get(f"fixed_{axis}")
    ]
    return f"not propagated: {', '.join(bits)} (held fixed in the draws)" if bits else ""


def with_sensitivity(
    fit_result: FitResult,
    sens: SensitivityResult,
    by_group: dict[str, SensitivityResult | str] | None = None,
) -> FitResult:
    """The fit result with its ``sensitivity`` field filled from ``sens.to_dict()``.

    With *by_group* (from :func:`sensitivity_by_group`) the field also holds
    ``"by_group"``: group -> that group's sensitivity dict, or ``{"note"}``
    saying why it was not computed.
    """
    d = sens.to_dict()
    if by_group is not None:
        d["by_group"] = {
            str(g): (v.to_dict() if isinstance(v, SensitivityResult) else {"note": v})
            for g, v in by_group.items()
        }
    return dataclasses.replace(fit_result, sensitivity=d)


def sensitivity_by_group(
    dataset_or_table: Any,
    x: str,
    y: str,
    method: str = "sma",
    *,
    by: str,
    taxon_col: str = "taxon",
    temperature: bool = True,
    **options: Any,
) -> dict[str, SensitivityResult | str]:
    """:func:`sensitivity` within each group of column *by* (e.g. a clade from taxa.csv).

    Returns group -> :class:`SensitivityResult`, or a message saying why that
    group could not be analysed (e.g. fewer than 3 usable taxa); every group
    of the per-taxon table appears, in sorted order.
    """
    from comparo.validation.dataset import Dataset

    if isinstance(dataset_or_table, Dataset):
        from comparo.curation.aggregation import per_taxon

        table = per_taxon(dataset_or_table, temperature=temperature)
    else:
        table = dataset_or_table
    if by not in table.columns:
        raise UsageError(
            f"--by column {by!r} is not in the per-taxon table; columns are: "
            f"{', '.join(map(str, list(table.columns)[:20]))}"
        )
    out: dict[str, SensitivityResult | str] = {}
    groups = table[by].dropna().astype(str)
    for g in sorted(groups.unique()):
        taxa = (
            table.loc[groups[groups == g].index, taxon_col].astype(str).tolist()
            if taxon_col in table.columns
            else None
        )
        try:
            if isinstance(dataset_or_table, Dataset):
                out[g] = sensitivity(
                    dataset_or_table,
                    x,
                    y,
                    method,
                    taxon_col=taxon_col,
                    temperature=temperature,
                    taxa=taxa,
                    **options,
                )
            else:
                sub = table.loc[groups[groups == g].index]
                out[g] = sensitivity(
                    sub, x, y, method, taxon_col=taxon_col, temperature=temperature, **options
                )
        except UsageError as exc:
            out[g] = f"not computed for group {g}: {exc}"
    return out
