"""The HTML report: the whole pipeline on one dataset folder, written as one
self-contained HTML file with its figures, tables and a provenance appendix.

:func:`build_report` runs check -> harmonise -> audit -> per-taxon -> derive ->
the fits declared in ``comparo.toml`` (``[[analysis]]``) or a default set, and
writes, under the output folder::

    report.html        self-contained (figures as base64 PNG, inline sorting script)
    figures/*.png|svg  every figure, byte-identical across runs
    tables/*.csv       per_taxon, derived, fits, flags, points, audit, sources, problems
    tables/fits.json   each fit's ``to_dict()`` (the ``comparo fit --format json`` object)
    tables/sensitivity_*.csv, sensitivity.json
                       leave-one-source-out, basis filters, jackknife and measurement-error
                       parts of each fit (:func:`comparo.reliance.sensitivity`)
    run.json           input SHA-256 hashes, settings, package versions, seed

Every number in the HTML is read from the same result objects that are written
to ``tables/``. The report is a research aid; it does not replace reading the sources.
"""

from __future__ import annotations

import base64
import hashlib
import html
import math
import platform
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from comparo.config import DEFAULT_ANALYSES  # noqa: F401  (the default fits, kept importable here)

#: Monte Carlo draws of the measurement-error part of the report's sensitivity section. A modest
#: number keeps the report fast; ``comparo fit --sensitivity`` uses 1000. The spread of the
#: slopes is estimated to about 1/sqrt(2 (draws - 1)) relative, 5% at 200 draws (common practice).
SENSITIVITY_DRAWS = 200

DISCLAIMER = ("This report is a research aid: it summarises a compilation and the fits run on it. "
              "Check every value against its source before relying on it.")


@dataclass(frozen=True)
class ReportResult:
    """What :func:`build_report` wrote.

    Attributes
    ----------
    out_dir : str
    ok : bool
        False when validation found errors (only the error page was written).
    n_errors, n_warnings : int
    figures, tables : tuple of str
        Paths relative to *out_dir*.
    fits : tuple of dict
        ``{"id", "x", "y", "method", "by", "result"}`` (``result``: ``to_dict()``) or
        ``{"id", ..., "error"}`` for a fit that could not run.
    notes : tuple of str
        What the report could not do, and why.
    sensitivity : tuple of dict
        ``{"id", "verdict"}`` per fit whose sensitivity ran.
    """

    out_dir: str
    ok: bool
    n_errors: int
    n_warnings: int
    figures: tuple[str, ...] = ()
    tables: tuple[str, ...] = ()
    fits: tuple[dict, ...] = ()
    notes: tuple[str, ...] = field(default=())
    sensitivity: tuple[dict, ...] = field(default=())

    def to_dict(self) -> dict:
        return {"out_dir": self.out_dir, "ok": self.ok, "n_errors": self.n_errors, "n_warnings": self.n_warnings,
                "figures": list(self.figures), "tables": list(self.tables), "fits": list(self.fits),
                "notes": list(self.notes), "sensitivity": list(self.sensitivity)}

    def summary(self) -> str:
        if not self.ok:
            return f"validation found {self.n_errors} error(s); the report lists them: {self.out_dir}/report.html"
        lines = [f"report written to {self.out_dir}/report.html ({len(self.figures)} figures, {len(self.tables)} tables)"]
        for f in self.fits:
            if "error" in f:
                lines.append(f"  {f['id']}: not fitted ({f['error']})")
            else:
                r = f["result"]
                lo, hi = r["slope_ci"]
                lines.append(f"  {f['id']}: slope {_num(r['slope'])} (CI {_num(lo)} to {_num(hi)}), n = {r['n']}")
        lines += [f"  {s['id']} sensitivity: {s['verdict']}" for s in self.sensitivity]
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


# --------------------------------------------------------------------------- helpers


def _against(analysis: dict) -> float | None:
    """The exponent an ``[[analysis]]`` entry tests against: ``against``, or its old name ``test_slope``."""
    return analysis.get("against", analysis.get("test_slope"))


def _num(v: Any, digits: int = 4) -> str:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "n/a"
    return "n/a" if v != v or v in (float("inf"), float("-inf")) else f"{v:.{digits}g}"


def _e(v: Any) -> str:
    return html.escape("" if v is None else str(v))


def _cell(v: Any) -> str:
    """A table cell; numbers keep their full value in ``data-value`` (for sorting and checks)."""
    if isinstance(v, bool) or v is None:
        return f"<td>{_e(v)}</td>"
    if isinstance(v, int | float) or hasattr(v, "dtype"):
        try:
            f = float(v)
        except (TypeError, ValueError):
            return f"<td>{_e(v)}</td>"
        if f != f:
            return "<td></td>"
        return f'<td class="n" data-value="{f!r}">{_num(f)}</td>'
    return f"<td>{_e(v)}</td>"


def _table(frame, cls: str = "sortable", limit: int | None = None, tid: str | None = None) -> str:
    rows = frame if limit is None else frame.head(limit)
    head = "".join(f"<th>{_e(c)}</th>" for c in rows.columns)
    body = "".join("<tr>" + "".join(_cell(v) for v in rec) + "</tr>" for rec in rows.itertuples(index=False))
    ident = f' id="{_e(tid)}"' if tid else ""
    return f'<table class="{cls}"{ident}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def input_hashes(folder: str | Path) -> dict[str, str]:
    """SHA-256 of every regular, non-hidden file at the top of the dataset folder."""
    folder = Path(folder)
    return {p.name: _sha256(p) for p in sorted(folder.iterdir()) if p.is_file() and not p.name.startswith(".")}


def package_versions() -> dict[str, str]:
    """Versions of comparo, Python and the libraries the report relies on."""
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for name in ("comparo", "numpy", "scipy", "pandas", "statsmodels", "matplotlib", "dendropy", "pint"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out


def _tree_labels(ds) -> dict[str, str] | None:
    """Accepted taxon -> tip, from taxa.csv (one taxon on two tips is an InputError)."""
    if ds.taxa is None or ds.tree is None:
        return None
    from comparo.phylo import dataset_tree_labels, tip_labels

    return dataset_tree_labels(ds.taxa, tip_labels(ds.tree)) or None


def _analysis_id(i: int, a: dict) -> str:
    by = f"_by_{a['by']}" if a.get("by") else ""
    return f"fit{i + 1}_{a.get('method', 'sma')}_{a['y']}_vs_{a['x']}{by}"


def fit_points(result, table, x: str, y: str, by: str | None, taxon_col: str = "taxon"):
    """The points of a fit with their data values, weakest basis and obs_ids.

    Uses ``result.points`` when the method gives them; otherwise (PGLS) the rows
    of *table* with positive finite x and y that the fit neither excluded nor
    pruned, with residuals from the fitted line (ordinary, not phylogenetically
    transformed, residuals).
    """
    import numpy as np
    import pandas as pd

    from comparo.plots import weakest_basis

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
        tf = {"10": np.log10, "e": np.log, "none": lambda v: v}[result.log]
        with np.errstate(divide="ignore", invalid="ignore"):
            X, Y = tf(xs[ok]), tf(ys[ok])
        fitted = result.intercept + result.slope * X
        pts = pd.DataFrame({"label": table[taxon_col].astype(str).to_numpy()[ok], "x_fit": X, "y_fit": Y,
                            "fitted": fitted, "residual": Y - fitted})
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
    pts["basis"] = [weakest_basis(str(a), str(b)) for a, b in zip(pts["x_basis"], pts["y_basis"], strict=True)]
    if by and "group" not in pts and by in idx:
        pts["group"] = idx.loc[lab, by].to_numpy()
    return pts


# --------------------------------------------------------------------------- HTML pieces

_CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#1a1a1a;line-height:1.45}
h1{font-size:1.6em;border-bottom:3px solid #0072B2;padding-bottom:.2em}h2{margin-top:2em;color:#0072B2}
.banner{background:#FFF4D6;border-left:5px solid #E69F00;padding:.6em 1em;margin:1em 0}
.errors{background:#FCE4DC;border-left:5px solid #D55E00;padding:.6em 1em}
table{border-collapse:collapse;font-size:.85em;margin:.6em 0}th,td{border:1px solid #ccc;padding:2px 6px;text-align:left}
th{background:#EEF4FA;cursor:pointer}td.n{text-align:right;font-variant-numeric:tabular-nums}
img{max-width:100%;height:auto;border:1px solid #eee}pre{background:#f6f6f6;padding:.6em;overflow-x:auto;font-size:.85em}
nav a{margin-right:1em}
"""

_SORT_JS = """
document.querySelectorAll('table.sortable th').forEach(function(th){th.addEventListener('click',function(){
var t=th.closest('table'),b=t.tBodies[0],i=Array.prototype.indexOf.call(th.parentNode.children,th),d=th.dataset.dir==='a'?-1:1;
th.dataset.dir=d===1?'a':'d';var rows=Array.prototype.slice.call(b.rows);
rows.sort(function(r,s){var p=r.cells[i],q=s.cells[i],x=p.dataset.value,y=q.dataset.value;
if(x!==undefined&&y!==undefined){return d*(parseFloat(x)-parseFloat(y));}return d*p.textContent.localeCompare(q.textContent);});
rows.forEach(function(r){b.appendChild(r);});});});
"""


def _page(title: str, body: str) -> str:
    return (f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"><title>{_e(title)}</title>'
            f"<style>{_CSS}</style></head><body>{body}<script>{_SORT_JS}</script></body></html>\n")


def _img(png: bytes, alt: str) -> str:
    return f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{base64.b64encode(png).decode()}"></figure>'


def _banner(settings: dict, folder: Path) -> str:
    synthetic = "synthetic" in str(settings.get("title", "")).lower() or "invented" in str(settings.get("title", "")).lower()
    extra = (" <strong>The data of this compilation are invented (synthetic demo data): no number in it "
             "describes a real animal.</strong>") if synthetic else ""
    return f'<div class="banner">{_e(DISCLAIMER)}{extra}</div>'


_METHODS = """
<h2 id="methods">Methods</h2>
<ul>
<li>Validation, harmonisation to canonical units (one unit registry), standard uncertainties from the reported
spread, merging of duplicates and temperature normalisation of rates and frequencies with Q10 to the reference
temperature.</li>
<li>Scaling fits on log-log axes: ordinary least squares (OLS), standardised major axis (SMA) and major axis (MA)
with their confidence intervals and tests for a common slope, elevation and shift among groups
(Warton DI, Wright IJ, Falster DS, Westoby M 2006, Bivariate line-fitting methods for allometry, Biological Reviews 81: 259-291).</li>
<li>Phylogenetic generalised least squares (Grafen A 1989, The phylogenetic regression, Philosophical Transactions of
the Royal Society B 326: 119-157) with Pagel's lambda (Pagel M 1999, Inferring the historical patterns of biological
evolution, Nature 401: 877-884), estimated by maximum likelihood with a profile-likelihood interval.</li>
<li>Influence: leverage and Cook's distance (Cook RD 1977, Detection of influential observation in linear regression,
Technometrics 19: 15-18); points above 4/n are flagged (common practice).</li>
<li>Band of a line in the figures: pointwise percentile bootstrap of the OLS, SMA or MA line from resampled pairs
(Efron B, Tibshirani RJ 1993, An Introduction to the Bootstrap, Chapman &amp; Hall), seeded; no band is drawn for other methods.</li>
<li>Derived time scales: poroelastic time l²·η/(k·M) and kinetic time 1/(f + g) with frequency bounds, the hydraulic
permeability of fibre arrays (Happel J 1959, Viscous flow relative to arrays of cylinders, AIChE Journal 5: 174-177)
and the viscosity of water (Huber ML et al. 2009, New international formulation for the viscosity of H2O,
Journal of Physical and Chemical Reference Data 38: 101-125), with GUM propagation of uncertainty
(JCGM 100:2008, Evaluation of measurement data - Guide to the expression of uncertainty in measurement).</li>
<li>Sensitivity of each fit: the line refitted without each source in turn (per-taxon table rebuilt) and
with the values of each basis added step by step; the leave-one-taxon-out jackknife standard error
(Quenouille MH 1956, Notes on bias in estimation, Biometrika 43: 353-360; Efron B 1982, The Jackknife, the Bootstrap
and Other Resampling Plans, SIAM) beside the analytic one; and Monte Carlo propagation of the per-taxon standard
uncertainties into the slope, log-normal draws for positive values (JCGM 101:2008, Evaluation of measurement data -
Supplement 1 to the GUM: propagation of distributions using a Monte Carlo method; errors in x attenuate an OLS slope as
Fuller WA 1987, Measurement Error Models, Wiley, describes).</li>
<li>Colours: palette for colour-blind readers of Okabe M and Ito K (2002), Color Universal Design; traits on the tree
in the cividis colour map (Nuñez JR, Anderton CR, Renslow RS 2018, Optimizing colormaps with consideration for color
vision deficiency to enable accurate interpretation of scientific data, PLoS ONE 13: e0199239).</li>
</ul>
"""


# --------------------------------------------------------------------------- the report


def _write_error_page(out: Path, folder: Path, result, seed: int, temperature: bool, draws: int) -> ReportResult:
    from comparo.csvsafe import to_csv
    from comparo.outputs import atomic_write_text

    probs = result.problems
    errs = probs[probs["severity"] == "error"]
    body = (f"<h1>comparo report: validation failed</h1>{_banner({}, folder)}"
            f'<div class="errors"><p><strong>{len(errs)} error(s)</strong> in <code>{_e(folder)}</code> stop the analysis. '
            "Fix them (each row says file, row, column, value, rule and a hint) and run the report again.</p></div>"
            f"<h2>Errors</h2>{_table(errs)}<h2>All problems</h2>{_table(probs)}")
    atomic_write_text(out / "report.html", _page("comparo report: validation failed", body))
    atomic_write_text(out / "tables" / "problems.csv", to_csv(probs))
    _write_run(out, folder, {}, seed, temperature, draws, ok=False)
    return ReportResult(str(out), False, result.n_errors, result.n_warnings, tables=("tables/problems.csv",))


def _write_run(out: Path, folder: Path, settings: dict, seed: int, temperature: bool, draws: int, ok: bool) -> None:
    from comparo.outputs import atomic_write_text, dumps

    record = {"created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"), "dataset": folder.name,
              "inputs_sha256": input_hashes(folder), "settings": settings, "seed": int(seed),
              "temperature_normalised": bool(temperature), "sensitivity_draws": int(draws), "validation_ok": ok,
              "versions": package_versions()}
    atomic_write_text(out / "run.json", dumps(record) + "\n")


class _Steps:
    """A rich progress bar on standard error when asked (a terminal), else nothing."""

    def __init__(self, on: bool, total: int):
        self.bar = None
        if on:
            from rich.console import Console
            from rich.progress import Progress

            self.bar = Progress(console=Console(stderr=True), transient=True)
            self.bar.start()
            self.task = self.bar.add_task("report", total=total)

    def step(self, what: str) -> None:
        if self.bar is not None:
            self.bar.update(self.task, advance=1, description=what)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.stop()


def build_report(folder: str | Path, out_dir: str | Path, *, seed: int = 20240601, temperature: bool = True,
                 progress: bool = False, sensitivity_draws: int = SENSITIVITY_DRAWS) -> ReportResult:
    """Run the pipeline on a dataset folder and write the report into *out_dir*.

    Parameters
    ----------
    folder : path of the dataset (observations, sources, optional taxa, tree, comparo.toml).
    out_dir : output folder (created; files in it are replaced atomically).
    seed : seed of every random step (figure bands; fits that resample).
    temperature : normalise rates and frequencies to the reference temperature.
    progress : show a progress bar on standard error (for a terminal).
    sensitivity_draws : Monte Carlo draws of the measurement-error part of each fit's
        sensitivity (0 skips that part); recorded in run.json.

    Returns
    -------
    ReportResult
        ``ok`` is False when validation found errors; then report.html lists them.
    """
    folder, out = Path(folder), Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    steps = _Steps(progress, 7)
    try:
        return _build(folder, out, seed, temperature, steps, int(sensitivity_draws))
    finally:
        steps.close()


def _build(folder: Path, out: Path, seed: int, temperature: bool, steps: _Steps, draws: int) -> ReportResult:
    import pandas as pd

    from comparo import plots
    from comparo.config import analyses as choose_analyses
    from comparo.config import derive_settings
    from comparo.csvsafe import to_csv
    from comparo.curate import harmonise, per_taxon, review
    from comparo.errors import ComparoError
    from comparo.lines import fit
    from comparo.outputs import atomic_write_bytes, atomic_write_text, dumps
    from comparo.provenance import audit

    steps.step("checking")
    checked = review(folder)
    if not checked.ok or checked.dataset is None:
        return _write_error_page(out, folder, checked, seed, temperature, draws)
    ds = checked.dataset
    settings = ds.settings or {}
    notes: list[str] = []
    steps.step("harmonising and auditing")
    h = harmonise(ds, temperature=temperature)
    table = per_taxon(ds, temperature=temperature, harmonised=h)
    aud = audit(ds, temperature=temperature, harmonised=h)
    derived = None
    steps.step("deriving time scales")
    try:
        from comparo.derivation import derive

        dset = derive_settings(settings)
        derived = derive(table, dset, seed=seed)
    except (ImportError, ComparoError, ValueError, KeyError) as exc:  # the section says why
        notes.append(f"derived quantities unavailable: {type(exc).__name__}: {exc}")
    data = derived if derived is not None else table

    tables: dict[str, str] = {"per_taxon": to_csv(table), "audit": to_csv(aud.to_frame()),
                              "sources": to_csv(aud.sources_frame()), "problems": to_csv(checked.problems)}
    if derived is not None:
        tables["derived"] = to_csv(derived)
    figures: dict[str, tuple[bytes, bytes]] = {}

    analyses, origin = choose_analyses(settings, data, ds.catalog,
                                       set(ds.taxa.columns) if ds.taxa is not None else set())
    fits: list[dict] = []
    fit_frames, flag_rows, point_frames = [], [], []
    sections = []
    labels = _tree_labels(ds)
    tree_drawn, tree_notes = False, {}
    any_pgls = any(b.get("method") == "pgls" for b in analyses)
    steps.step("fitting and drawing")
    for i, a in enumerate(analyses):
        aid = _analysis_id(i, a)
        method, by = a.get("method", "sma"), a.get("by")
        rec = {"id": aid, "x": a["x"], "y": a["y"], "method": method, "by": by}
        opts: dict[str, Any] = {}
        if method == "pgls":
            if ds.tree is None:
                rec["error"] = "method pgls needs a tree (tree.nwk)"
                fits.append(rec)
                continue
            opts["tree"] = ds.tree
            if labels:
                opts["tree_labels"] = labels
        try:
            res = fit(data, a["x"], a["y"], method, by=by, against=_against(a), seed=seed, **opts)
        except ComparoError as exc:
            rec["error"] = str(exc)
            fits.append(rec)
            continue
        rec["result"] = res.to_dict()
        fits.append(rec)
        frame = res.to_frame()
        frame.insert(0, "analysis", aid)
        fit_frames.append(frame)
        for o in res.outliers:
            flag_rows.append({"analysis": aid, "label": o["label"], "kind": "flag", "reason": o["reason"], "statistic": o.get("statistic")})
        for e in res.excluded:
            flag_rows.append({"analysis": aid, "label": e["label"], "kind": "excluded", "reason": e["reason"], "statistic": None})
        pts = fit_points(res, data, a["x"], a["y"], by)
        pf = pts.copy()
        pf.insert(0, "analysis", aid)
        point_frames.append(pf)
        figures[f"{aid}_scaling"] = plots.render(plots.scaling_plot(res, pts, catalog=ds.catalog, by=by, seed=seed))
        figures[f"{aid}_diagnostics"] = plots.render(plots.diagnostics(pts, title=f"{aid}: residual diagnostics"))
        if method == "pgls" and res.lambda_ is not None and res.loglik is not None:
            figures[f"{aid}_lambda"] = plots.render(_lambda_figure(res, data, a, by, opts, aid))
        if ds.tree is not None and (method == "pgls" or (not tree_drawn and not any_pgls)):
            drawn = _tree_figure(ds, pts, a, labels, aid, notes, res.log)
            if drawn is not None:
                figures[f"{aid}_tree"] = plots.render(drawn[0])
                tree_notes[aid] = drawn[1]
                tree_drawn = True
        sections.append((aid, res, frame, pts, a, opts))

    fits_frame = pd.concat(fit_frames, ignore_index=True) if fit_frames else pd.DataFrame()
    flags_frame = pd.DataFrame(flag_rows, columns=["analysis", "label", "kind", "reason", "statistic"])
    points_frame = pd.concat(point_frames, ignore_index=True) if point_frames else pd.DataFrame()
    tables |= {"fits": to_csv(fits_frame), "flags": to_csv(flags_frame), "points": to_csv(points_frame)}

    steps.step("sensitivity: sources, bases, taxa, measurement error")
    sens: dict[str, dict] = {}
    sens_json, sens_rows = [], []
    for aid, res, _frame, _pts, a, opts in sections:
        s, snotes = _sensitivity(ds, table, data, a, res, opts, seed, draws, temperature)
        entry = {"id": aid, "x": a["x"], "y": a["y"], "method": res.method, "draws": draws, "seed": int(seed),
                 "notes": snotes}
        if s is None:
            entry["error"] = snotes[-1]
            notes.append(f"{aid}: {snotes[-1]}")
            sens_json.append(entry)
            continue
        entry["result"] = s.to_dict()
        sens_json.append(entry)
        refits = sensitivity_frame(s)
        summary_row = sensitivity_summary_row(aid, s, snotes)
        sens_rows.append(summary_row)
        tables[f"sensitivity_{aid}"] = to_csv(refits)
        sens[aid] = {"result": s, "refits": refits, "summary": pd.DataFrame([summary_row]), "notes": snotes}
        if s.leave_one_source_out:
            figures[f"{aid}_sensitivity"] = plots.render(plots.forest_plot(
                s.leave_one_source_out, slope=res.slope, slope_ci=res.slope_ci, ci=res.ci_level,
                xlabel=_slope_label(res), title=f"{res.method.upper()}, {res.y} on {res.x}: leave one source out"))
    if sens_rows:
        tables["sensitivity_summary"] = to_csv(pd.DataFrame(sens_rows))

    steps.step("drawing the regime and coverage")
    if derived is not None:
        fig = plots.regime_plot(derived)
        if fig is not None:
            figures["regime"] = plots.render(fig)
        else:
            notes.append("regime plot not drawn: no taxon has the observed frequency, both bounds and the poro-kinetic ratio")
    ad = aud.to_dict()
    figures["coverage"] = plots.render(plots.coverage_map(ad["coverage"]))
    figures["sources"] = plots.render(plots.source_chart(aud.sources_frame()))

    steps.step("writing")
    for name, text in tables.items():
        atomic_write_text(out / "tables" / f"{name}.csv", text)
    atomic_write_text(out / "tables" / "fits.json", dumps([f for f in fits]) + "\n")
    atomic_write_text(out / "tables" / "sensitivity.json", dumps(sens_json) + "\n")
    for stem, (png, svg) in figures.items():
        atomic_write_bytes(out / "figures" / f"{stem}.png", png)
        atomic_write_bytes(out / "figures" / f"{stem}.svg", svg)

    html_text = _render_html(folder, settings, checked, aud, table, derived, fits, origin, sections, fits_frame,
                             flags_frame, points_frame, figures, notes, ds, seed, sens, tree_notes, draws)
    atomic_write_text(out / "report.html", html_text)
    _write_run(out, folder, settings, seed, temperature, draws, ok=True)
    return ReportResult(str(out), True, checked.n_errors, checked.n_warnings,
                        figures=tuple(f"figures/{s}.{ext}" for s in figures for ext in ("png", "svg")),
                        tables=tuple(f"tables/{n}.csv" for n in tables) + ("tables/fits.json", "tables/sensitivity.json"),
                        fits=tuple(fits), notes=tuple(notes),
                        sensitivity=tuple({"id": k, "verdict": v["result"].verdict} for k, v in sens.items()))


def _slope_label(res) -> str:
    unit = "dimensionless on log-log axes" if res.log != "none" else f"units of {res.y} per unit of {res.x}"
    return f"slope of {res.y} on {res.x} ({unit})"


def _tree_figure(ds, pts, a: dict, labels: dict | None, aid: str, notes: list[str], log: str):
    """The tree with the fit's y value of each fitted taxon at its tip, or None (with a note) if it cannot be drawn.

    Returns (figure, text under the figure).
    """
    from comparo import plots
    from comparo.errors import ComparoError
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
    label = plots.axis_label(y, ds.catalog)
    positive = all(v > 0 for v in values.values() if v == v)
    fig = plots.tree_trait(ds.tree, values, label=label, names=names, log=log != "none" and positive,
                           title=f"{str(a.get('method', 'sma')).upper()} fit: {y} of each fitted taxon at its tip")
    text = (f"Tips coloured by {y} of the {len(values)} fitted taxa ({_e(label)}); open tiles: "
            f"{len(m.tips_without_data)} tips without a fitted value.")
    if m.taxa_without_tips:
        text += f" Fitted taxa not in the tree ({len(m.taxa_without_tips)}): {', '.join(m.taxa_without_tips)}."
    return fig, text


def _floats(values) -> list[float]:
    import pandas as pd

    return pd.to_numeric(pd.Series(values), errors="coerce").astype(float).tolist()


def _sensitivity(ds, table, data, a: dict, res, opts: dict, seed: int, draws: int, temperature: bool):
    """Run :func:`comparo.reliance.sensitivity` for one report fit: (result or None, notes).

    Source-level parts need x and y recorded in the dataset; a derived x or y gets the
    jackknife and the Monte Carlo only (on the derived table). A grouped fit is checked on
    its pooled line; a PGLS fit keeps lambda at its full-data estimate in every refit.
    """
    from comparo.reliance import sensitivity

    x, y = a["x"], a["y"]
    notes: list[str] = []
    kw = dict(opts)
    if a.get("by"):
        notes.append(f"checked on the line of all taxa pooled; the groups by {a['by']} are not refitted one by one")
    if res.method == "pgls" and res.lambda_ is not None:
        kw["lambda_"] = res.lambda_
        notes.append(f"Pagel's lambda held at the full-data estimate {_num(res.lambda_)} in every refit")
    if x in table.columns and y in table.columns:
        source = ds
    else:
        source = data
        derived = ", ".join(q for q in (x, y) if q not in table.columns)
        notes.append(f"{derived} is derived, so the values behind it have no single source or basis: "
                     "only the jackknife and the Monte Carlo parts run (on the derived table)")
    try:
        s = sensitivity(source, x, y, res.method, against=_against(a), ci=res.ci_level, log=res.log,
                        mc=draws, seed=seed, temperature=temperature, **kw)
    except Exception as exc:  # noqa: BLE001 - any failure is shown in the report and the command's notes
        return None, notes + [f"sensitivity could not run: {type(exc).__name__}: {exc}"]
    if not math.isclose(s.slope, res.slope, rel_tol=1e-9, abs_tol=1e-12):
        notes.append(f"the sensitivity's fit on all data has slope {s.slope!r}, the report's fit {res.slope!r}")
    return s, notes


def sensitivity_frame(s):
    """One row per refit (:meth:`SensitivityResult.to_frame`) with ``ci_change`` and ``flips`` added."""
    f = s.to_frame()
    loso, basis = s.leave_one_source_out or [], s.by_basis or []
    f["ci_change"] = [None] * len(loso) + [r.get("ci_change") for r in basis]
    f["flips"] = [bool(r.get("flips")) for r in loso] + [bool(r.get("flips")) for r in basis]
    return f


def sensitivity_summary_row(aid: str, s, notes: list[str]) -> dict:
    """One row of tables/sensitivity_summary.csv: jackknife and measurement-error parts and the verdict."""
    j, m = s.jackknife_se, s.measurement_error
    return {"analysis": aid, "method": s.method, "x": s.x, "y": s.y, "n": j.get("n"), "slope": s.slope,
            "slope_se": s.slope_se, "jackknife_se": j.get("slope_jackknife"), "analytic_se": j.get("slope_analytic"),
            "se_ratio": j.get("ratio"), "mc_draws": m.get("draws"), "mc_seed": m.get("seed"),
            "mc_slope_mean": m.get("slope_mean"), "me_spread": m.get("spread"), "sampling_se": m.get("sampling_se"),
            "total_se": m.get("total_se"), "me_share": m.get("share"), "fixed_x": m.get("fixed_x"),
            "fixed_y": m.get("fixed_y"), "mc_note": m.get("note") or "", "verdict": s.verdict,
            "notes": "; ".join(notes + list(s.unavailable))}


#: Fixed lambda values at which the PGLS profile likelihood is drawn.
LAMBDA_GRID = tuple(i / 10 for i in range(11))


def _lambda_figure(res, data, a: dict, by: str | None, opts: dict, aid: str):
    """Profile log-likelihood of lambda: the PGLS of *res* refitted at each lambda of :data:`LAMBDA_GRID`."""
    from comparo import plots
    from comparo.lines import fit

    lls = [fit(data, a["x"], a["y"], "pgls", by=by, **{**opts, "lambda_": lam}).loglik for lam in LAMBDA_GRID]
    return plots.lambda_profile(LAMBDA_GRID, lls, lam_hat=res.lambda_, loglik_hat=res.loglik, lam_ci=res.lambda_ci,
                                ci=res.ci_level)


def _regime_lines(derived, by: str | None) -> list[str]:
    if derived is None or "regime" not in derived:
        return []
    reg = derived["regime"].astype("string").fillna("undetermined").replace("", "undetermined")
    keys = derived[by] if by and by in derived else pd_series_all(len(derived))
    out = []
    for g in dict.fromkeys(keys):
        counts = reg[keys == g].value_counts()
        kin, hyd = int(counts.get("kinetic", 0)), int(counts.get("hydraulic", 0))
        und = int(counts.sum()) - kin - hyd
        verdict = "kinetic limited" if kin > hyd else "hydraulic limited" if hyd > kin else "no majority"
        out.append(f"<li><strong>{_e(g)}</strong>: {verdict} among the {kin + hyd} taxa with a derived regime "
                   f"({kin} kinetic, {hyd} hydraulic; {und} undetermined for lack of inputs)</li>")
    return out


def pd_series_all(n: int):
    import pandas as pd

    return pd.Series(["all taxa"] * n)


def _render_html(folder, settings, checked, aud, table, derived, fits, origin, sections, fits_frame, flags_frame,
                 points_frame, figures, notes, ds, seed, sens, tree_notes, draws) -> str:
    title = settings.get("title") or f"comparo report: {folder.name}"
    parts = [f"<h1>{_e(title)}</h1>", _banner(settings, folder),
             '<nav><a href="#summary">Summary</a><a href="#analyses">Analyses</a><a href="#sensitivity">Sensitivity</a>'
             '<a href="#regime">Regime</a>'
             '<a href="#data">Data quality</a><a href="#appendix">Provenance appendix</a><a href="#methods">Methods</a></nav>']
    # summary
    parts.append('<h2 id="summary">Summary</h2>')
    parts.append(f"<p>Dataset <code>{_e(folder.name)}</code>: {len(table)} taxa. Fits {_e(origin)}; seed {int(seed)}.</p>")
    rows = []
    for f in fits:
        if "error" in f:
            rows.append(f"<tr><td>{_e(f['id'])}</td><td colspan='6'>not fitted: {_e(f['error'])}</td></tr>")
            continue
        r = f["result"]
        cs = (r.get("group_tests") or {}).get("common_slope") or {}
        test = f"equal slopes: p = {_num(cs.get('p'), 3)}" if cs else ""
        if r.get("lambda") is not None:
            test = f"lambda = {_num(r['lambda'], 3)}"
        if r.get("against"):
            test += f"; slope = {r['against']['value']:g}: p = {_num(r['against']['p'], 3)}"
        rows.append(f"<tr><td>{_e(f['id'])}</td><td>{_e(f['method'].upper())}</td>{_cell(r['n'])}{_cell(r['slope'])}"
                    f"{_cell(r['slope_ci'][0])}{_cell(r['slope_ci'][1])}<td>{_e(test)}</td></tr>")
    parts.append('<table class="sortable" id="summary-fits"><thead><tr><th>analysis</th><th>method</th><th>n</th>'
                 "<th>exponent (slope)</th><th>CI low</th><th>CI high</th><th>tests</th></tr></thead><tbody>"
                 + "".join(rows) + "</tbody></table>")
    if sens:
        parts.append('<p>Which sources drive each fit (details in <a href="#sensitivity">Sensitivity</a>):</p>'
                     '<ul id="summary-verdicts">' + "".join(
                         f'<li><strong>{_e(k)}</strong>: <span class="verdict">{_e(v["result"].verdict)}</span></li>'
                         for k, v in sens.items()) + "</ul>")
    by = next((f["by"] for f in fits if f.get("by")), None)
    reg = _regime_lines(derived, by)
    if reg:
        parts.append("<p>Kinetic or hydraulic limited (majority of taxa with a derived regime):</p><ul>" + "".join(reg) + "</ul>")
    else:
        parts.append("<p>Kinetic or hydraulic limited: not determined (no derived regime).</p>")
    parts.append(f"<p>Data quality: {checked.n_warnings} warning(s), {checked.n_notes} note(s).</p><pre>{_e(aud.summary())}</pre>")
    for n in notes:
        parts.append(f'<p class="banner">{_e(n)}</p>')
    # analyses
    parts.append('<h2 id="analyses">Analyses</h2>')
    for aid, res, frame, _pts, _a, _opts in sections:
        parts.append(f'<h3 id="{_e(aid)}">{_e(aid)}</h3>')
        parts.append(_img(figures[f"{aid}_scaling"][0], f"scaling plot {aid}"))
        parts.append(f"<pre>{_e(res.summary())}</pre>")
        parts.append(_table(frame))
        parts.append(_img(figures[f"{aid}_diagnostics"][0], f"residual diagnostics {aid}"))
        if res.method == "pgls":
            parts.append("<p>Residuals of the PGLS line are the ordinary residuals y - (a + b x), not the "
                         "phylogenetically transformed ones.</p>")
            if f"{aid}_lambda" in figures:
                parts.append(_img(figures[f"{aid}_lambda"][0], f"lambda profile {aid}"))
                parts.append(f"<p>Profile: the same PGLS refitted at fixed lambda = {', '.join(f'{v:g}' for v in LAMBDA_GRID)}.</p>")
        if f"{aid}_tree" in figures:
            parts.append(_img(figures[f"{aid}_tree"][0], f"tree with {res.y} mapped {aid}"))
            parts.append(f"<p>{tree_notes.get(aid, '')} Colour map cividis (readable with colour-vision deficiency); "
                         "the colours show the values as compiled, not a reconstruction of ancestral states.</p>")
    fl = flags_frame
    parts.append("<h3>Flags and exclusions</h3>" + (_table(fl) if len(fl) else "<p>None.</p>"))
    parts.append(_sensitivity_html(sections, sens, figures, notes, draws, seed))
    # regime
    parts.append('<h2 id="regime">Regime</h2>')
    if "regime" in figures:
        parts.append(_img(figures["regime"][0], "regime plot"))
        cols = [c for c in ("taxon", "poroelastic_time", "kinetic_time", "poro_kinetic_ratio", "frequency_observed",
                            "frequency_kinetic_bound", "frequency_hydraulic_bound", "frequency_ratio", "regime")
                if c in derived]
        shown = derived.loc[derived["regime"].notna() & (derived["regime"].astype("string") != ""), cols]
        parts.append("<p>Taxa with a derived regime (times in s, frequencies in Hz, ratios dimensionless; "
                     "uncertainties and inputs in tables/derived.csv):</p>" + _table(shown))
    else:
        why = "; ".join(n for n in notes if "deriv" in n or "regime" in n) or "no derived values"
        parts.append(f"<p>The regime plot is unavailable: {_e(why)}.</p>")
    # data quality
    parts.append('<h2 id="data">Data quality and coverage</h2>')
    parts.append(_img(figures["coverage"][0], "coverage map"))
    parts.append(_img(figures["sources"][0], "source contributions"))
    parts.append("<h3>Problems found by the check</h3>" + (_table(checked.problems) if len(checked.problems) else "<p>None.</p>"))
    # appendix
    parts.append('<h2 id="appendix">Provenance appendix</h2><p>Every plotted point: its values (canonical units), '
                 "the observation rows behind them, their sources, locators and basis.</p>")
    parts.append(_appendix(points_frame, ds))
    parts.append(_METHODS)
    parts.append(f"<p><small>comparo {_e(_version())}. {_e(DISCLAIMER)}</small></p>")
    return _page(title, "".join(parts))


def _sensitivity_html(sections, sens, figures, notes, draws: int, seed: int) -> str:
    """The sensitivity section: per fit the verdict, forest plot and the tables of tables/sensitivity_*.csv."""
    out = ['<h2 id="sensitivity">Sensitivity: which sources, bases and taxa drive each fit</h2>',
           f"<p>Each fit is refitted without each source in turn, with the values of each basis added step by step "
           f"(reported first), without each taxon in turn (jackknife), and {int(draws)} times with every per-taxon value "
           f"redrawn from its standard uncertainty (Monte Carlo, seed {int(seed)}). Shifts are in units of the full fit's "
           "analytic standard error (SE); a shift of 1 SE or more, or a slope test whose conclusion changes, counts as "
           "influential. The same numbers are in tables/sensitivity_*.csv and tables/sensitivity.json.</p>"
           "<p>What this does not establish: a bias shared by many sources is invisible to leaving one out; the 1 SE mark "
           "is a flag, not a test (among many sources some pass it by chance); the Monte Carlo carries only the stated "
           "uncertainties (values without one are held fixed) and no error shared across taxa.</p>"]
    for aid, *_ in sections:
        out.append(f'<h3 id="sens-{_e(aid)}">{_e(aid)}</h3>')
        if aid not in sens:
            why = next((n for n in notes if n.startswith(f"{aid}: sensitivity")), "sensitivity not available")
            out.append(f"<p>{_e(why)}</p>")
            continue
        v = sens[aid]
        s, refits, summ = v["result"], v["refits"], v["summary"]
        out.append(f'<p><strong>Verdict:</strong> <span class="verdict">{_e(s.verdict)}</span></p>')
        for n in v["notes"] + list(s.unavailable):
            out.append(f"<p><em>Note:</em> {_e(n)}.</p>")
        if f"{aid}_sensitivity" in figures:
            out.append(_img(figures[f"{aid}_sensitivity"][0], f"leave one source out {aid}"))
        cols = ["changed", "n", "slope", "ci_low", "ci_high", "p", "shift_se", "flips"]
        lo = refits[refits["part"] == "leave_one_source_out"]
        if len(lo):
            out.append("<h4>Leave one source out</h4><p>Most influential first; slope and CI of the refit without the "
                       "source; p of the slope test (empty: no test asked); shift in SE of the full fit.</p>"
                       + _table(lo[cols], tid=f"sens-loso-{aid}"))
        bb = refits[refits["part"] == "by_basis"]
        if len(bb):
            out.append("<h4>Basis filters</h4><p>Cumulative: each row adds one basis to the rows above; shift in SE and "
                       "relative change of CI width (ci_change) against the row before.</p>"
                       + _table(bb[cols[:-1] + ["ci_change", "flips"]], tid=f"sens-basis-{aid}"))
        out.append("<h4>Jackknife and analytic standard error of the slope</h4>"
                   + _table(summ[["n", "slope", "jackknife_se", "analytic_se", "se_ratio"]], tid=f"sens-jack-{aid}"))
        me = summ[["mc_draws", "mc_seed", "mc_slope_mean", "me_spread", "sampling_se", "total_se", "me_share",
                   "fixed_x", "fixed_y"]]
        note = summ["mc_note"].iat[0]
        out.append("<h4>Measurement error</h4><p>spread: SD of the Monte Carlo slopes; total SE = sqrt(spread² + "
                   "sampling SE²); share: spread² / total²; fixed_x, fixed_y: taxa whose value has no uncertainty "
                   "(held fixed).</p>" + _table(me, tid=f"sens-me-{aid}") + (f"<p>{_e(note)}</p>" if note else ""))
    return "".join(out)


def _version() -> str:
    from comparo import __version__

    return __version__


def _appendix(points, ds) -> str:
    if points is None or not len(points):
        return "<p>No plotted points.</p>"
    obs = ds.observations.set_index("obs_id")
    src = ds.sources.set_index("source_id")
    rows = []
    seen = set()
    for p in points.itertuples(index=False):
        for val, ids in ((p.x_value, p.x_obs), (p.y_value, p.y_obs)):
            for oid in [s for s in str(ids).split(";") if s]:
                key = (p.label, oid)
                if key in seen or oid not in obs.index:
                    continue
                seen.add(key)
                o = obs.loc[oid]
                sid = o["source_id"]
                s = src.loc[sid] if sid in src.index else None
                cite = _e(s["citation"]) if s is not None else "(source missing)"
                doi = s.get("doi") if s is not None else None
                if isinstance(doi, str) and doi:
                    cite += f' <a href="https://doi.org/{_e(doi)}">doi:{_e(doi)}</a>'
                rows.append(f"<tr><td>{_e(p.label)}</td><td>{_e(o['quantity_key'])}</td>{_cell(val)}<td>{_e(oid)}</td>"
                            f"<td>{_e(o['value'])} {_e(o['unit'])}</td><td>{_e(o['basis_effective'])}</td>"
                            f"<td>{_e(sid)}</td><td>{cite}</td><td>{_e(o['locator'])}</td></tr>")
    head = "".join(f"<th>{h}</th>" for h in ("taxon", "quantity", "value used", "obs_id", "as reported", "basis",
                                              "source", "citation", "locator"))
    return f'<table class="sortable" id="appendix-table"><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}</tbody></table>'
