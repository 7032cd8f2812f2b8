"""The report's HTML: Jinja2 templates (package data under ``templates/``) filled from the
result objects and tables of one run. Nothing here computes a statistic; it arranges
what :mod:`comparo.report.build` computed, in words a reader can follow.
"""

from __future__ import annotations

import base64
from functools import lru_cache
from importlib import resources
from typing import Any

from markupsafe import Markup

from comparo.fitting.cautions import caution_lines
from comparo.report import fmt
from comparo.report.per_fit import quantity_name
from comparo.report.result import DISCLAIMER, LAMBDA_GRID


@lru_cache(maxsize=1)
def environment():
    """The Jinja2 environment over the package's templates (autoescaping on)."""
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.PackageLoader("comparo.report", "templates"),
        autoescape=jinja2.select_autoescape(default=True, default_for_string=True),
        trim_blocks=True,
        lstrip_blocks=True,
        undefined=jinja2.StrictUndefined,
    )
    env.filters["cell"] = fmt.cell
    env.filters["num"] = fmt.num
    env.filters["head"] = fmt.head
    return env


def _asset(name: str) -> Markup:
    return Markup(
        resources.files("comparo.report").joinpath("templates", name).read_text(encoding="utf-8")
    )


def render(template: str, **context: Any) -> str:
    """Render *template* with the page's style and sorting script."""
    return (
        environment()
        .get_template(template)
        .render(css=_asset("report.css"), js=_asset("sort.js"), disclaimer=DISCLAIMER, **context)
        + "\n"
    )


def fig(figures: dict, stem: str, alt: str) -> dict | None:
    """A figure for the templates: PNG as base64 and its alt text; None when not drawn."""
    if stem not in figures:
        return None
    return {"png": base64.b64encode(figures[stem][0]).decode(), "alt": alt}


def grouped_notes(notes: list[str]) -> list[dict]:
    """Repeated notes once each, with their count, in first-seen order."""
    counts: dict[str, int] = {}
    for n in notes:
        counts[n] = counts.get(n, 0) + 1
    return [{"text": t, "count": c} for t, c in counts.items()]


def summary_rows(fits: list[dict], titles: dict[str, str]) -> list[dict]:
    """One row per fit of the summary table: title, method, n, slope and CI, tests in words."""
    rows = []
    for f in fits:
        row = {"id": f["id"], "title": titles.get(f["id"], f["id"]), "error": f.get("error")}
        if "error" not in f:
            r = f["result"]
            gt = r.get("group_tests") or {}
            cs, el = gt.get("common_slope") or {}, gt.get("elevation") or {}
            test = ""
            differ = bool(gt.get("slopes_differ"))
            if cs and differ:
                slopes = ", ".join(
                    f"{g['group']} {fmt.num(g.get('slope'))}"
                    for g in r.get("groups") or []
                    if g.get("slope") is not None
                )
                test = (
                    f"the groups differ in slope (equal slopes rejected: p = "
                    f"{fmt.num(cs.get('p'), 3)}); group slopes: {slopes}; no common slope, "
                    "and no elevation test (it assumes one)"
                )
            elif cs:
                lo, hi = cs.get("slope_ci") or (None, None)
                test = (
                    f"common slope of the {len(r.get('groups') or [])} groups "
                    f"{fmt.num(cs.get('slope'))} (CI {fmt.num(lo)} to {fmt.num(hi)}); equal slopes "
                    f"across groups: p = {fmt.num(cs.get('p'), 3)}"
                )
                if el:
                    test += (
                        "; equal elevations, assuming the common slope: "
                        f"p = {fmt.num(el.get('p'), 3)}"
                    )
            if r.get("lambda") is not None:
                test = f"Pagel's λ = {fmt.num(r['lambda'], 3)}"
            ts = r.get("against") or r.get("test_slope")
            if ts:
                test += f"{'; ' if test else ''}slope = {ts['value']:g}: p = {fmt.num(ts['p'], 3)}"
            caution = "; ".join(caution_lines(r.get("cautions") or []))
            row |= {
                "method": f["method"].upper(),
                "n": r["n"],
                "slope": r["slope"],
                "lo": r["slope_ci"][0],
                "hi": r["slope_ci"][1],
                "test": test,
                "differ": differ,
                "caution": caution,
            }
            if differ:  # the pooled line is no group's exponent: the row does not headline it
                row |= {"slope": None, "lo": None, "hi": None}
        rows.append(row)
    return rows


def regime_lines(derived, by: str | None) -> list[dict]:
    """Per group (or all taxa): how many taxa are kinetic limited, hydraulic limited,
    undetermined (the 95% interval of Π holds the boundary) or cycle above their smaller
    bound (counted apart: limited by neither), and which of these holds a majority."""
    if derived is None or "regime" not in derived:
        return []
    import pandas as pd

    reg = derived["regime"].astype("string").fillna("").to_numpy()
    pos = (
        derived["frequency_vs_bound"].astype("string").fillna("").to_numpy()
        if "frequency_vs_bound" in derived
        else [""] * len(derived)
    )
    cat = pd.Series(
        ["above" if p == "above" else r for r, p in zip(reg, pos, strict=True)], index=derived.index
    )
    keys = (
        derived[by]
        if by and by in derived
        else pd.Series(["all taxa"] * len(derived), index=derived.index)
    )
    words = {
        "kinetic": "kinetic limited",
        "hydraulic": "hydraulic limited",
        "undetermined": "undetermined",
        "above": "above their smaller bound",
    }
    out = []
    for g in dict.fromkeys(keys):
        counts = cat[keys == g].value_counts()
        n = {k: int(counts.get(k, 0)) for k in words}
        missing = int(counts.sum()) - sum(n.values())
        total = sum(n.values())
        if total == 0:
            out.append(
                {
                    "group": g,
                    "text": f"not determined: none of its {missing} taxa has the inputs of a "
                    "regime",
                }
            )
            continue
        parts = [
            f"{n['kinetic']} kinetic",
            f"{n['hydraulic']} hydraulic",
            f"{n['undetermined']} undetermined",
        ]
        if n["above"]:
            parts.append(f"{n['above']} above its smaller bound (limited by neither)")
        top = max(words, key=lambda k: n[k])
        verdict = f"mostly {words[top]}" if 2 * n[top] > total else "no majority"
        text = f"{verdict} (of {total} taxa with a derived regime: {', '.join(parts)}"
        text += f"; {missing} without the inputs)" if missing else ")"
        out.append({"group": g, "text": text})
    return out


def temperature_view(h, ds, temperature: bool) -> dict:
    """The Summary's temperature table: per quantity the reference temperature and the Q10 or Ea
    used."""
    from comparo.curation.provenance import temperature_rules

    if not temperature:
        return {"off": True}
    rules = temperature_rules(h)
    frame = rules.assign(quantity=[quantity_name(k, ds.catalog) for k in rules["quantity_key"]])
    frame = frame.assign(rule=[_rule_words(r) for r in frame.itertuples(index=False)])
    frame = frame[["quantity", "rule", "rows", "factor_min", "factor_max"]].rename(
        columns={"factor_min": "factor (lowest)", "factor_max": "factor (highest)"}
    )
    return {
        "off": False,
        "ref": ds.reference_temperature_c,
        "frame": frame,
        "ref_default": "reference_temperature_c" not in (ds.settings or {}),
        "operating": h.policy is not None and h.policy.operating,
        "kept": int((frame["rule"].str.startswith("as measured")).sum()) if len(frame) else 0,
    }


def _rule_words(r) -> str:
    if r.rule == "Q10":
        return f"Q10 = {r.q10:g}"
    if r.rule == "Arrhenius":
        return f"Arrhenius, activation energy {r.ea_kj_mol:g} kJ/mol"
    if r.rule == "as measured":
        return "as measured (in vivo, endotherm or heterotherm at its operating temperature)"
    return "none (no measurement temperature)"


def problems_view(problems) -> dict:
    """Errors and warnings in full; notes grouped by rule with a count, their rows and one
    example."""
    if problems is None or not len(problems):
        return {"main": problems if problems is not None else [], "groups": []}
    main = problems[problems["severity"] != "note"]
    groups = []
    for rule, part in problems[problems["severity"] == "note"].groupby("rule", sort=False):
        rows = ", ".join(
            str(int(r)) for r in part["row"].dropna()
        )  # a note about a whole file has no row
        groups.append(
            {
                "rule": rule,
                "count": len(part),
                "example": part["message"].iat[0],
                "rows": rows,
                "file": ", ".join(dict.fromkeys(part["file"].astype(str))),
            }
        )
    return {"main": main, "groups": groups}


def lambda_caption(res) -> str:
    grid = ", ".join(f"{v:g}" for v in LAMBDA_GRID)
    return (
        f"Profile log-likelihood of Pagel's λ: the same PGLS refitted at fixed λ = {grid}; maximum "
        f"at λ = {fmt.num(res.lambda_, 3)}."
    )
