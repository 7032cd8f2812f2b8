"""Per-fit pieces of the report: the plotted points, flags, titles, the tree and lambda
figures and the sensitivity run of one fit. Pure functions of result objects and tables."""

from __future__ import annotations

import math

from comparo.base.scales import to_scale
from comparo.report.fmt import num
from comparo.report.result import LAMBDA_GRID


def tree_labels(ds) -> dict[str, str] | None:
    """Accepted taxon -> tip, from taxa.csv (one taxon on two tips is an InputError)."""
    if ds.taxa is None or ds.tree is None:
        return None
    from comparo.phylo import dataset_tree_labels, tip_labels

    return dataset_tree_labels(ds.taxa, tip_labels(ds.tree)) or None


def analysis_id(i: int, a: dict) -> str:
    """The id of the i-th analysis (anchors, file names): ``fit1_sma_y_vs_x[_by_g]``."""
    by = f"_by_{a['by']}" if a.get("by") else ""
    return f"fit{i + 1}_{a.get('method', 'sma')}_{a['y']}_vs_{a['x']}{by}"


def quantity_name(key: str, catalog) -> str:
    """The catalogue label of *key* in lower case (``observed cycle frequency``), or the key
    in words."""
    q = catalog.get(key) if catalog is not None else None
    if q is None:
        return key.replace("_", " ")
    label = q.label
    return label[0].lower() + label[1:] if label[:2] != label[:2].upper() else label


def fit_title(a: dict, catalog) -> str:
    """A fit's title in words from the catalogue labels: ``Observed cycle frequency against
    body mass (SMA, by clade)``."""
    y, x = quantity_name(a["y"], catalog), quantity_name(a["x"], catalog)
    by = f", by {a['by']}" if a.get("by") else ""
    return f"{y[0].upper() + y[1:]} against {x} ({str(a.get('method', 'sma')).upper()}{by})"


def fit_points(result, table, x: str, y: str, by: str | None, taxon_col: str = "taxon"):
    """The points of a fit with their data values, weakest basis and obs_ids.

    Uses ``result.points`` when the method gives them; otherwise (PGLS) the rows
    of *table* with positive finite x and y that the fit neither excluded nor
    pruned, with residuals from the fitted line (ordinary, not phylogenetically
    transformed, residuals).
    """
    import numpy as np
    import pandas as pd

    from comparo.report.figures import weakest_basis

    if result.points:
        pts = pd.DataFrame(list(result.points))
    else:
        drop = {e["label"] for e in result.excluded}
        ph = result.phylo or {}
        for key in ("tips_pruned", "taxa_without_tips"):
            drop |= {str(v) for v in (ph.get(key) or [])}
        xs = pd.to_numeric(table[x], errors="coerce").to_numpy(float)
        ys = pd.to_numeric(table[y], errors="coerce").to_numpy(float)
        ok = np.isfinite(xs) & np.isfinite(ys)
        if result.log != "none":
            ok &= (xs > 0) & (ys > 0)
        ok &= ~table[taxon_col].astype(str).isin(drop).to_numpy()
        X, Y = to_scale(xs[ok], result.log), to_scale(ys[ok], result.log)
        fitted = result.intercept + result.slope * X
        pts = pd.DataFrame(
            {
                "label": table[taxon_col].astype(str).to_numpy()[ok],
                "x_fit": X,
                "y_fit": Y,
                "fitted": fitted,
                "residual": Y - fitted,
            }
        )
        if by and by in table:
            pts["group"] = table[by].to_numpy()[ok]
    idx = table.set_index(table[taxon_col].astype(str))
    lab = pts["label"].astype(str)
    pts["x_value"] = idx.loc[lab, x].to_numpy()
    pts["y_value"] = idx.loc[lab, y].to_numpy()
    for q, col in ((x, "x_basis"), (y, "y_basis")):
        pts[col] = idx.loc[lab, f"{q}_basis"].to_numpy() if f"{q}_basis" in idx else ""
    for q, col in ((x, "x_obs"), (y, "y_obs")):
        pts[col] = idx.loc[lab, f"{q}_obs"].fillna("").to_numpy() if f"{q}_obs" in idx else ""
    pts["basis"] = [
        weakest_basis(str(a), str(b)) for a, b in zip(pts["x_basis"], pts["y_basis"], strict=True)
    ]
    if by and "group" not in pts and by in idx:
        pts["group"] = idx.loc[lab, by].to_numpy()
    return pts


def flag_report(res, pts, opts: dict, aid: str, notes: list[str]):
    """(result, FlagReport or None): the flags the figure and the flags table share.

    For least-squares-type fits the flags are those the fit computed (checked equal); a
    PGLS fit gets the flags of its whitened regression, set as its ``outliers``.
    """
    from dataclasses import replace

    from comparo.fitting.flags import fit_flags

    try:
        frep = fit_flags(res, pts, tree=opts.get("tree"), tree_labels=opts.get("tree_labels"))
    except ValueError as exc:
        notes.append(f"{aid}: no outlier or influence flags and no diagnostics figure: {exc}")
        return res, None
    found = [f.to_dict() for f in frep.flags]
    if res.method == "pgls":
        return replace(res, outliers=found), frep
    if [(o["label"], o["reason"]) for o in res.outliers] != [
        (o["label"], o["reason"]) for o in found
    ]:
        notes.append(
            f"{aid}: the flags recomputed from the plotted points differ from the fit's flags"
        )
    return res, frep


def diagnostics_caption(res, flags_frame, aid: str) -> str:
    """The words under a diagnostics figure: which residuals, which cut-offs, which taxa are
    marked."""
    fl = flags_frame[(flags_frame["analysis"] == aid) & (flags_frame["kind"] == "flag")]
    marked = list(dict.fromkeys(fl["label"]))
    if res.method == "pgls":
        what = (
            "Phylogenetically whitened residuals: the PGLS regression multiplied on both sides "
            "by C(λ)^(-1/2) at "
            f"λ = {num(res.lambda_, 3)}; its least-squares fit is the PGLS line."
        )
    else:
        what = (
            "Residuals, leverage and Cook's distance of the least-squares line of y on x on the "
            "fitted scale"
            + (
                f" (the {res.method.upper()} line of the scaling plot is not the line these "
                "statistics refer to)."
                if res.method != "ols"
                else "."
            )
        )
    cuts = (
        "Dashed: Bonferroni cut of the studentized residual and leverage 2p/n; dotted: Cook's "
        "distance 4/n and "
        "F(0.5; 2, n - 2)."
    )
    who = (
        f"Marked in vermillion, as in the flags table: {', '.join(marked)}."
        if marked
        else "No taxon breaks a rule; none is marked."
    )
    return f"{what} {cuts} {who}"


def slope_label(res) -> str:
    unit = (
        "dimensionless on log-log axes"
        if res.log != "none"
        else f"units of {res.y} per unit of {res.x}"
    )
    return f"slope of {res.y} on {res.x} ({unit})"


def tree_figure(
    ds,
    pts,
    a: dict,
    labels: dict | None,
    aid: str,
    notes: list[str],
    log: str,
    temperature: dict | None = None,
):
    """The tree with the fit's y value of each fitted taxon at its tip, or None (with a note)
    if it cannot be drawn.

    *temperature*: the fit's temperature summary (``FitResult.temperature``), so that the
    colour bar of a temperature-sensitive y says the temperature its values refer to, as
    the scaling plot's axis does.

    Returns (figure, text under the figure).
    """
    import comparo.report.figures as plots
    from comparo.base.errors import ComparoError
    from comparo.phylo import match_tips

    y = a["y"]
    try:
        m = match_tips(ds.tree, [str(v) for v in pts["label"]], labels)
    except ComparoError as exc:
        notes.append(f"{aid}: tree not drawn: {exc}")
        return None
    yv = dict(zip(pts["label"].astype(str), _floats(pts["y_value"]), strict=True))
    tip_of = m.tip_of
    values = {tip: yv[lab] for lab, tip in tip_of.items()}
    names = {tip: lab for lab, tip in tip_of.items()}
    label = plots.axis_label(y, ds.catalog, temperature)
    positive = all(v > 0 for v in values.values() if v == v)
    fig = plots.tree_trait(
        ds.tree,
        values,
        label=label,
        names=names,
        log=log != "none" and positive,
        title=f"{str(a.get('method', 'sma')).upper()} fit: {y} of each fitted taxon at its tip",
    )
    text = (
        f"Tips coloured by {y} of the {len(values)} fitted taxa "
        f"({label.replace(chr(10), ' ')}); open tiles: "
        f"{len(m.tips_without_data)} tips without a fitted value."
    )
    if m.taxa_without_tips:
        text += (
            f" Fitted taxa not in the tree ({len(m.taxa_without_tips)}): "
            f"{', '.join(m.taxa_without_tips)}."
        )
    return fig, text


def _floats(values) -> list[float]:
    import pandas as pd

    return pd.to_numeric(pd.Series(values), errors="coerce").astype(float).tolist()


def run_sensitivity(
    ds,
    table,
    data,
    a: dict,
    res,
    opts: dict,
    seed: int,
    draws: int,
    temperature: bool,
    harmonised=None,
):
    """Run :func:`comparo.fitting.source_sensitivity.sensitivity` for one report fit: (result
    or None, notes).

    Source-level parts need x and y recorded in the dataset; a derived x or y gets the
    jackknife and the Monte Carlo only (on the derived table). A grouped fit is checked on
    its pooled line; a PGLS fit keeps lambda at its full-data estimate in every refit.
    *harmonised*: the report's harmonised dataset, not harmonised again for the source parts.
    """
    from comparo.fitting.source_sensitivity import sensitivity

    x, y = a["x"], a["y"]
    notes: list[str] = []
    kw = dict(opts)
    if a.get("by"):
        notes.append(
            f"checked on the line of all taxa pooled; the groups by {a['by']} are not refitted "
            "one by one"
        )
    if res.method == "pgls" and res.lambda_ is not None:
        kw["lambda_"] = res.lambda_
        notes.append(
            f"Pagel's lambda held at the full-data estimate {num(res.lambda_)} in every refit"
        )
    if x in table.columns and y in table.columns:
        source = ds
        kw["harmonised"] = harmonised
    else:
        source = data
        derived = ", ".join(q for q in (x, y) if q not in table.columns)
        kw["no_sources"] = f"{derived} is derived from several sources per taxon"
        notes.append(
            f"{derived} is derived, so the values behind it have no single source or basis: "
            "only the jackknife and the Monte Carlo parts run (on the derived table)"
        )
    try:
        s = sensitivity(
            source,
            x,
            y,
            res.method,
            against=a.get("against", a.get("test_slope")),
            ci=res.ci_level,
            log=res.log,
            mc=draws,
            seed=seed,
            temperature=temperature,
            **kw,
        )
    except Exception as exc:  # noqa: BLE001 - any failure is shown in the report and the command's notes
        return None, notes + [f"sensitivity could not run: {type(exc).__name__}: {exc}"]
    if not math.isclose(s.slope, res.slope, rel_tol=1e-9, abs_tol=1e-12):
        notes.append(
            f"the sensitivity's fit on all data has slope {s.slope!r}, "
            f"the report's fit {res.slope!r}"
        )
    return s, notes


def sensitivity_frame(s):
    """One row per refit (:meth:`SensitivityResult.to_frame`) with ``ci_change``, ``flips`` and
    ``note`` (why a refit could not be made, e.g. too few points left; empty otherwise) added."""
    f = s.to_frame()
    loso, basis = s.leave_one_source_out or [], s.by_basis or []
    f["ci_change"] = [None] * len(loso) + [r.get("ci_change") for r in basis]
    f["flips"] = [bool(r.get("flips")) for r in loso] + [bool(r.get("flips")) for r in basis]
    f["note"] = [r.get("note") or "" for r in loso] + [r.get("note") or "" for r in basis]
    return f


def sensitivity_summary_row(aid: str, s, notes: list[str]) -> dict:
    """One row of tables/sensitivity_summary.csv: jackknife and measurement-error parts and the
    verdict."""
    j, m = s.jackknife_se, s.measurement_error
    return {
        "analysis": aid,
        "method": s.method,
        "x": s.x,
        "y": s.y,
        "n": j.get("n"),
        "slope": s.slope,
        "slope_se": s.slope_se,
        "jackknife_se": j.get("slope_jackknife"),
        "analytic_se": j.get("slope_analytic"),
        "se_ratio": j.get("ratio"),
        "mc_draws": m.get("draws"),
        "mc_seed": m.get("seed"),
        "mc_slope_mean": m.get("slope_mean"),
        "me_spread": m.get("spread"),
        "sampling_se": m.get("sampling_se"),
        "total_se": m.get("total_se"),
        "me_share": m.get("share"),
        "fixed_x": m.get("fixed_x"),
        "fixed_y": m.get("fixed_y"),
        "mc_note": m.get("note") or "",
        "verdict": s.verdict,
        "notes": "; ".join(notes + list(s.unavailable)),
    }


def lambda_figure(res, data, a: dict, by: str | None, opts: dict):
    """Profile log-likelihood of lambda: the PGLS of *res* refitted at each lambda of
    :data:`LAMBDA_GRID`.

    Returns (figure, note). A lambda at which the fit cannot be made (at lambda = 1 a tree
    with zero-length tip edges has a singular covariance) is left out of the figure and named
    in the note.
    """
    import comparo.report.figures as plots
    from comparo.base.errors import ComparoError
    from comparo.fitting import fit

    lams, lls, skipped = [], [], []
    for lam in LAMBDA_GRID:
        try:
            lls.append(fit(data, a["x"], a["y"], "pgls", by=by, **{**opts, "lambda_": lam}).loglik)
            lams.append(lam)
        except ComparoError as exc:
            skipped.append(
                (
                    lam,
                    str(exc).split(";")[-1].strip()
                    if "tree-zero-tip" not in str(exc)
                    else (
                        "the tree has tip edges of length 0, so the covariance at this lambda "
                        "is singular"
                    ),
                )
            )
    note = "; ".join(f"λ = {lam:g} not drawn: {why}" for lam, why in skipped)
    if len(lams) < 2:
        return None, note or "too few lambda values could be fitted"
    fig = plots.lambda_profile(
        lams, lls, lam_hat=res.lambda_, loglik_hat=res.loglik, lam_ci=res.lambda_ci, ci=res.ci_level
    )
    return fig, note
