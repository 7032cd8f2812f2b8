"""The context of report.html: the sections of one run, arranged for the templates."""

from __future__ import annotations

from typing import Any

from comparo.fitting.cautions import caution_lines
from comparo.fitting.comparison import WEIGHT_CAUTION
from comparo.report import render
from comparo.report.appendix import appendix
from comparo.report.per_fit import diagnostics_caption

#: Columns of the regime table (times in s, frequencies in Hz, ratios dimensionless).
REGIME_COLUMNS = (
    "taxon",
    "poroelastic_time",
    "kinetic_time",
    "poro_kinetic_ratio",
    "poro_kinetic_ratio_u",
    "frequency_observed",
    "frequency_kinetic_bound",
    "frequency_hydraulic_bound",
    "frequency_ratio",
    "frequency_ratio_u",
    "regime",
    "frequency_vs_bound",
)


def _synthetic(settings: dict) -> bool:
    title = str(settings.get("title", "")).lower()
    return "synthetic" in title or "invented" in title


def _analysis_view(run, sec: dict) -> dict:
    aid, res, figs = sec["id"], sec["res"], run.figures
    tree_caption = ""
    if f"{aid}_tree" in figs:
        tree_caption = (
            f"{sec['tree_caption']} Colour map cividis (readable with colour-vision deficiency); "
            f"the colours "
            "show the values as compiled, not a reconstruction of ancestral states."
        )
    return {
        "id": aid,
        "title": sec["title"],
        "summary": res.summary(),
        "frame": sec["frame"],
        "cautions": caution_lines(res.cautions),
        "scaling": render.fig(figs, f"{aid}_scaling", f"scaling plot: {sec['title']}"),
        "diagnostics": render.fig(
            figs, f"{aid}_diagnostics", f"residual diagnostics: {sec['title']}"
        ),
        "diagnostics_caption": diagnostics_caption(res, run.frames["flags"], aid),
        "lambda_fig": render.fig(figs, f"{aid}_lambda", f"lambda profile: {sec['title']}"),
        "lambda_caption": render.lambda_caption(res) if res.method == "pgls" else "",
        "lambda_note": sec["lambda_note"],
        "tree": render.fig(figs, f"{aid}_tree", f"tree with {res.y}: {sec['title']}"),
        "tree_caption": tree_caption,
    }


def _sensitivity_view(run, sec: dict) -> dict:
    aid = sec["id"]
    view: dict[str, Any] = {"id": aid, "title": sec["title"], "unavailable": ""}
    if aid not in run.sens:
        view["unavailable"] = next(
            (n for n in run.notes if n.startswith(f"{aid}: sensitivity")),
            "sensitivity not available",
        )
        return view
    v = run.sens[aid]
    s, refits, summ = v["result"], v["refits"], v["summary"]
    cols = ["changed", "n", "slope", "ci_low", "ci_high", "p", "shift_se", "flips"]
    me = summ[
        [
            "mc_draws",
            "mc_seed",
            "mc_slope_mean",
            "me_spread",
            "sampling_se",
            "total_se",
            "me_share",
            "fixed_x",
            "fixed_y",
        ]
    ]
    return view | {
        "verdict": s.verdict,
        "notes": v["notes"] + list(s.unavailable),
        "forest": render.fig(
            run.figures, f"{aid}_sensitivity", f"leave one source out: {sec['title']}"
        ),
        "loso": refits.loc[refits["part"] == "leave_one_source_out", cols + ["note"]],
        "basis": refits.loc[
            refits["part"] == "by_basis", cols[:-1] + ["ci_change", "flips", "note"]
        ],
        "jack": summ[["n", "slope", "jackknife_se", "analytic_se", "se_ratio"]],
        "me": me,
        "me_note": summ["mc_note"].iat[0],
    }


def _comparison_views(run) -> list[dict]:
    """Each ``[[comparison]]``: its table of models, the taxa used and left out, or why it did not
    run."""
    views = []
    for c in getattr(run, "comparisons", []):
        v = {
            "id": c["id"],
            "name": c["name"],
            "y": c["y"],
            "method": c["method"],
            "error": c.get("error", ""),
        }
        r = c.get("result")
        if r is not None:
            lam = ""
            if r["method"] == "pgls":
                lam = (
                    "; Pagel's lambda by maximum likelihood in each model"
                    if r["lambda"] == "ml"
                    else f"; Pagel's lambda fixed at {r['lambda']}"
                )
            factor = (
                f"; every model includes the factor {r['factor']} (reference level "
                f"{r['reference_level']!r})"
                if r["factor"]
                else ""
            )
            v |= {
                "frame": c["frame"],
                "summary": c["summary"],
                "n": r["n"],
                "excluded": r["excluded"],
                "how": f"{r['method'].upper()} by maximum likelihood on log{r['log']} values"
                f"{lam}{factor}",
            }
        views.append(v)
    return views


def _since_view(run) -> dict | None:
    """The "What changed" section: the conclusions of the older version against this one first
    (slopes, intervals, shift in standard errors, verdicts; regimes), then counts and every list."""
    import pandas as pd

    d = getattr(run, "since", None)
    if d is None:
        return None
    ci = lambda c, i: None if c is None else c[i]  # noqa: E731
    analyses = pd.DataFrame(
        [
            {
                "analysis": a["name"],
                "slope_old": a["slope_old"],
                "ci_low_old": ci(a["ci_old"], 0),
                "ci_high_old": ci(a["ci_old"], 1),
                "slope_new": a["slope_new"],
                "ci_low_new": ci(a["ci_new"], 0),
                "ci_high_new": ci(a["ci_new"], 1),
                "shift_se": a["shift_se"],
                "tested_value": a["tested_value"],
                "verdict_old": a["verdict_old"],
                "verdict_new": a["verdict_new"],
                "verdict_changed": a["verdict_changed"],
            }
            for a in d.analyses
        ],
        columns=[
            "analysis",
            "slope_old",
            "ci_low_old",
            "ci_high_old",
            "slope_new",
            "ci_low_new",
            "ci_high_new",
            "shift_se",
            "tested_value",
            "verdict_old",
            "verdict_new",
            "verdict_changed",
        ],
    )
    regimes = pd.DataFrame(list(d.regimes), columns=["taxon", "old", "new"])
    counts = d.summary().split("\nCounts\n", 1)[1].split("\n\nDetails", 1)[0] if d.differs else ""
    frame = d.to_frame()
    return {
        "old": d.old,
        "differs": d.differs,
        "analyses": analyses,
        "regimes": regimes,
        "counts": [line.strip() for line in counts.splitlines() if line.strip()],
        "frame": frame.loc[~frame["section"].isin(["analysis", "regime"])],
    }


def _regime_view(run) -> dict:
    d = run.derived
    if "regime" not in run.figures:
        why = (
            "; ".join(n for n in run.notes if "deriv" in n or "regime" in n) or "no derived values"
        )
        return {"fig": None, "why": why}
    cols = [c for c in REGIME_COLUMNS if c in d]
    shown = d.loc[d["regime"].notna() & (d["regime"].astype("string") != ""), cols]
    return {"fig": render.fig(run.figures, "regime", "regime plot"), "frame": shown}


def _cycles_view(run) -> dict | None:
    """Each trace's loop figure and the per-taxon table of the cycles section (None: no traces)."""
    if run.cycles is None:
        return None
    loops = []
    for t in run.cycles.results:
        what = "strain cycle" if t.kind == "strain_cycle" else "work loop"
        loops.append(
            {
                "fig": render.fig(
                    run.figures, f"cycle_{t.trace_id}", f"{what} {t.trace_id} of {t.taxon}"
                ),
                "caption": f"{t.trace_id}: {what} of {t.taxon} ({t.cycles} whole cycles; "
                f"source {t.source_id}, "
                f"{t.locator}; file {t.file})",
            }
        )
    return {"loops": loops, "frame": run.cycles.by_taxon()}


def report_html(run) -> str:
    """The whole report.html of a run."""
    from comparo.base.version import __version__

    settings = run.ds.settings or {}
    titles = {s["id"]: s["title"] for s in run.sections}
    for f in run.fits:
        titles.setdefault(f["id"], f["id"])
    by = next((f["by"] for f in run.fits if f.get("by")), None)
    grouped = {f["id"] for f in run.fits if f.get("by")}
    verdicts = [
        {
            "title": titles[k],
            "verdict": v["result"].verdict,
            "scope": "on the line of all taxa pooled" if k in grouped else "",
        }
        for k, v in run.sens.items()
    ]
    return render.render(
        "report.html.j2",
        title=settings.get("title") or f"comparo report: {run.folder.name}",
        synthetic=_synthetic(settings),
        dataset=run.folder.name,
        n_taxa=len(run.table),
        origin=run.origin,
        defaults=run.defaults,
        seed=int(run.seed),
        summary_rows=render.summary_rows(run.fits, titles),
        verdicts=verdicts,
        any_groups=any(f.get("by") and "result" in f for f in run.fits),
        regime_lines=render.regime_lines(run.derived, by),
        temperature=render.temperature_view(run.h, run.ds, run.temperature),
        n_warnings=run.checked.n_warnings,
        n_notes=run.checked.n_notes,
        audit_summary=run.aud.summary(),
        notes=render.grouped_notes(run.notes),
        analyses=[_analysis_view(run, s) for s in run.sections],
        flags_frame=run.frames["flags"],
        sensitivity=[_sensitivity_view(run, s) for s in run.sections],
        comparisons=_comparison_views(run),
        weight_caution=WEIGHT_CAUTION,
        since=_since_view(run),
        draws=int(run.draws),
        regime=_regime_view(run),
        cycles=_cycles_view(run),
        coverage=render.fig(run.figures, "coverage", "coverage map"),
        sources_fig=render.fig(run.figures, "sources", "source contributions"),
        problems=render.problems_view(run.checked.problems),
        appendix=appendix(run.frames["points"], run.ds, run.h),
        version=__version__,
    )
