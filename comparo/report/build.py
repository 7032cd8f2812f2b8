"""The report pipeline: check -> harmonise -> audit -> per-taxon -> derive -> fits -> flags
-> sensitivity -> figures -> tables and HTML, written atomically under the output folder."""

from __future__ import annotations

import hashlib
import platform
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import comparo.report.per_fit as pieces
import comparo.report.render as render
from comparo.base.progress import ProgressBar
from comparo.report.result import SENSITIVITY_DRAWS, ReportResult


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def input_hashes(folder: str | Path) -> dict[str, str]:
    """SHA-256 of every file the dataset is read from: each regular, non-hidden file at the
    top of a dataset folder; a dataset workbook and the tree and comparo.toml beside it."""
    from comparo.reading.folder import input_files

    return {p.name: _sha256(p) for p in input_files(folder)}


def package_versions() -> dict[str, str]:
    """Versions of comparo, Python and the libraries the report relies on."""
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version()}
    for name in (
        "comparo",
        "numpy",
        "scipy",
        "pandas",
        "statsmodels",
        "matplotlib",
        "dendropy",
        "pint",
        "jinja2",
    ):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out


def analyses(
    settings: dict, table, catalog=None, taxa_columns: set[str] | None = None
) -> tuple[list[dict], str, list[str]]:
    """The fits to run (:func:`comparo.validation.settings.analyses`), where they come from, and the
    defaults used in words.

    Without ``[[analysis]]`` in comparo.toml: :data:`DEFAULT_ANALYSES` whose columns exist.
    """
    from comparo.fitting.declared import analyses as choose

    chosen, origin = choose(settings, table, catalog, taxa_columns)
    if (settings or {}).get("analysis"):
        return chosen, origin, []
    fits = (
        ", ".join(pieces.fit_title(a, catalog) for a in chosen)
        or "none (no default pair of columns is present)"
    )
    return (
        chosen,
        "from the default set",
        [f"fits ([[analysis]]): the default set, here {fits}; log10 axes, 95% CIs"],
    )


def _write_error_page(
    out: Path, folder: Path, result, seed: int, temperature: bool, draws: int
) -> ReportResult:
    from comparo.base.csvsafe import to_csv
    from comparo.base.outputs import atomic_write_text

    probs = result.problems
    errs = probs[probs["severity"] == "error"]
    page = render.render(
        "error.html.j2",
        title="comparo report: validation failed",
        folder=str(folder),
        n_errors=len(errs),
        errors=errs,
        problems=probs,
    )
    atomic_write_text(out / "report.html", page)
    atomic_write_text(out / "tables" / "problems.csv", to_csv(probs))
    _write_run(out, folder, {}, seed, temperature, draws, ok=False)
    return ReportResult(
        str(out), False, result.n_errors, result.n_warnings, tables=("tables/problems.csv",)
    )


def _write_run(
    out: Path,
    folder: Path,
    settings: dict,
    seed: int,
    temperature: bool,
    draws: int,
    ok: bool,
    since: Path | None = None,
) -> None:
    from comparo.base.outputs import atomic_write_text, dumps

    record = {
        "created_utc": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "dataset": folder.name,
        "inputs_sha256": input_hashes(folder),
        "settings": settings,
        "seed": int(seed),
        "temperature_normalised": bool(temperature),
        "sensitivity_draws": int(draws),
        "validation_ok": ok,
        "versions": package_versions(),
    }
    if (
        since is not None
    ):  # the older version of --since: what the "What changed" section compares with
        record["since"] = {"dataset": since.name, "inputs_sha256": input_hashes(since)}
    atomic_write_text(out / "run.json", dumps(record) + "\n")


def build_report(
    folder: str | Path,
    out_dir: str | Path,
    *,
    seed: int = 20240601,
    temperature: bool = True,
    progress: bool = False,
    sensitivity_draws: int = SENSITIVITY_DRAWS,
    since: str | Path | None = None,
    gate: Callable[[Path], Any] | None = None,
) -> ReportResult:
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
    gate : the check of the dataset folder (folder -> CheckResult): ``comparo check``'s,
        :func:`comparo.pipeline.check`, which ``comparo.build_report`` passes. Required.

    Returns
    -------
    ReportResult
        ``ok`` is False when validation found errors; then report.html lists them.
    """
    from comparo.base.arguments import check_count, check_path, check_seed
    from comparo.base.errors import UsageError
    from comparo.base.outputs import protecting, resolve_output
    from comparo.validation.tables import folder_of

    folder, out = check_path(folder_of(folder), "folder"), check_path(out_dir, "out_dir")
    if gate is None:
        raise UsageError("gate: give the dataset check (comparo.build_report passes it)")
    seed = check_seed(seed, "seed")
    sensitivity_draws = check_count(sensitivity_draws, "sensitivity_draws")
    old = None
    if since is not None:
        since = check_path(since, "since")
        if not since.exists():
            raise UsageError(
                f"since: the older version {since} does not exist "
                "(give its dataset folder or workbook)"
            )
    with protecting([folder] if since is None else [folder, since]):
        for name in ("", "report.html", "run.json", "tables", "figures"):  # links into the inputs
            resolve_output(out / name)
        if since is not None:
            old = _load_old(since)
        out.mkdir(parents=True, exist_ok=True)
        with ProgressBar(progress, "report", 7 if since is None else 8) as steps:
            draws = int(sensitivity_draws)
            return _build(folder, out, seed, temperature, steps, draws, old, since, gate)


def _load_old(since: Path):
    """The older version given with ``since``; its problems name it (exit 2)."""
    from comparo.base.errors import InputError
    from comparo.validation.dataset import load

    try:
        return load(since)
    except InputError as exc:
        raise InputError(
            exc.problems, f"since: the older version {since} has problems:\n{exc}"
        ) from None


@dataclass
class _Run:
    """Everything one report run computes, gathered for the tables and the HTML."""

    folder: Path
    ds: Any
    seed: int
    temperature: bool
    draws: int
    checked: Any = None
    h: Any = None
    table: Any = None
    aud: Any = None
    derived: Any = None
    data: Any = None
    analyses: list[dict] = field(default_factory=list)
    origin: str = ""
    defaults: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    tables: dict[str, str] = field(default_factory=dict)
    figures: dict[str, tuple[bytes, bytes]] = field(default_factory=dict)
    fits: list[dict] = field(default_factory=list)
    sections: list[dict] = field(default_factory=list)
    sens: dict[str, dict] = field(default_factory=dict)
    sens_json: list[dict] = field(default_factory=list)
    frames: dict[str, Any] = field(default_factory=dict)
    cycles: Any = None  # comparo.traces.files.TraceSet when the dataset has traces.csv
    comparisons: list[dict] = field(default_factory=list)
    since: Any = None  # comparo.history.versions.VersionDiff of the older version against this one
    since_path: Path | None = None


def _build(
    folder: Path,
    out: Path,
    seed: int,
    temperature: bool,
    steps: ProgressBar,
    draws: int,
    old: Any = None,
    since: Path | None = None,
    gate: Callable[[Path], Any] | None = None,
) -> ReportResult:
    from comparo.curation.aggregation import per_taxon
    from comparo.curation.harmonise import harmonise
    from comparo.curation.provenance import audit
    from comparo.phylo.completion import imputation_audit
    from comparo.phylo.outliers import phylo_outliers

    steps.advance(description="checking")
    checked = gate(folder)
    if not checked.ok or checked.dataset is None:
        return _write_error_page(out, folder, checked, seed, temperature, draws)
    run = _Run(folder, checked.dataset, seed, temperature, draws, checked=checked)
    steps.advance(description="harmonising and auditing")
    run.h = harmonise(run.ds, temperature=temperature)
    run.table = per_taxon(run.ds, temperature=temperature, harmonised=run.h)
    phylo = phylo_outliers(run.ds, run.table)
    run.aud = audit(
        run.ds,
        temperature=temperature,
        harmonised=run.h,
        table=run.table,
        phylo=phylo,
        imputed=imputation_audit(run.ds),
    )
    steps.advance(description="deriving time scales")
    _derive(run)
    steps.advance(description="fitting and drawing")
    _fit_all(run)
    _compare_all(run)
    steps.advance(description="sensitivity: sources, bases, taxa, measurement error")
    _sensitivity_all(run)
    if old is not None:
        from comparo.history.versions import diff

        steps.advance(description="comparing with the older version")
        run.since, run.since_path = diff(old, run.ds, temperature=temperature, seed=seed), since
    steps.advance(description="drawing the regime, coverage and cycles")
    _overview_figures(run)
    _cycles(run)
    steps.advance(description="writing")
    return _write(run, out)


def _derive(run: _Run) -> None:
    from comparo.base.csvsafe import to_csv
    from comparo.base.errors import ComparoError
    from comparo.curation.aggregation import column_units

    settings = run.ds.settings or {}
    try:
        from comparo.derivation import derive
        from comparo.validation.settings import derive_settings

        run.derived = derive(run.table, derive_settings(settings), seed=run.seed)
    except (ImportError, ComparoError, ValueError, KeyError) as exc:  # the section says why
        run.notes.append(f"derived quantities unavailable: {type(exc).__name__}: {exc}")
    run.data = run.derived if run.derived is not None else run.table
    run.analyses, run.origin, run.defaults = analyses(
        settings, run.data, run.ds.catalog, _taxa_columns(run.ds)
    )
    run.tables |= {
        "per_taxon": to_csv(run.table),
        "per_taxon.units": to_csv(column_units(run.table, run.ds.catalog)),
        "audit": to_csv(run.aud.to_frame()),
        "sources": to_csv(run.aud.sources_frame()),
        "problems": to_csv(run.checked.problems),
    }
    if run.derived is not None:
        run.tables["derived"] = to_csv(run.derived)
        run.tables["derived.units"] = to_csv(column_units(run.derived, run.ds.catalog))
    if not settings:
        run.defaults.append(
            f"the reference temperature ({run.ds.reference_temperature_c:g} °C) and the Q10 of "
            f"each "
            "temperature-sensitive quantity from the catalogue"
        )


def _taxa_columns(ds) -> set[str]:
    return set(ds.taxa.columns) if ds.taxa is not None else set()


def _fit_all(run: _Run) -> None:
    """Every analysis: the fit, its flags and figures (one section each)."""
    import pandas as pd

    from comparo.base.csvsafe import to_csv

    todo = run.analyses
    labels = pieces.tree_labels(run.ds)
    any_pgls = any(b.get("method") == "pgls" for b in todo)
    state = {"tree_drawn": False}
    fit_frames, flag_rows, point_frames, diag_frames = [], [], [], []
    for i, a in enumerate(todo):
        sec = _fit_one(run, i, a, labels, any_pgls, state)
        if sec is None:
            continue
        run.sections.append(sec)
        fit_frames.append(sec["frame"])
        flag_rows += sec["flag_rows"]
        point_frames.append(
            sec["points"].assign(analysis=sec["id"])[["analysis", *sec["points"].columns]]
        )
        if sec["diag"] is not None:
            diag_frames.append(sec["diag"])
    cat = lambda frames: pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()  # noqa: E731
    run.frames = {
        "fits": cat(fit_frames),
        "points": cat(point_frames),
        "diagnostics": cat(diag_frames),
        "flags": pd.DataFrame(
            flag_rows,
            columns=["analysis", "label", "kind", "rule", "reason", "statistic", "residuals"],
        ),
    }
    run.tables |= {k: to_csv(run.frames[k]) for k in ("fits", "flags", "points", "diagnostics")}


def _fit_one(run: _Run, i: int, a: dict, labels, any_pgls: bool, state: dict) -> dict | None:
    import comparo.report.figures as plots
    from comparo.base.errors import ComparoError
    from comparo.fitting import fit

    ds, aid = run.ds, pieces.analysis_id(i, a)
    method, by = a.get("method", "sma"), a.get("by")
    rec = {"id": aid, "x": a["x"], "y": a["y"], "method": method, "by": by}
    run.fits.append(rec)
    opts: dict[str, Any] = {}
    if method == "pgls":
        if ds.tree is None:
            rec["error"] = "method pgls needs a tree (tree.nwk)"
            return None
        opts = {"tree": ds.tree, **({"tree_labels": labels} if labels else {})}
    try:
        res = fit(
            run.data,
            a["x"],
            a["y"],
            method,
            by=by,
            against=a.get("against", a.get("test_slope")),
            seed=run.seed,
            **opts,
        )
    except ComparoError as exc:
        rec["error"] = str(exc)
        return None
    pts = pieces.fit_points(res, run.data, a["x"], a["y"], by)
    res, frep = pieces.flag_report(res, pts, opts, aid, run.notes)
    rec["result"] = res.to_dict()
    frame = res.to_frame()
    frame.insert(0, "analysis", aid)
    title = pieces.fit_title(a, ds.catalog)
    kind = "" if frep is None else plots.RESIDUAL_NAMES[frep.residuals]
    flag_rows = [
        {
            "analysis": aid,
            "label": f.label,
            "kind": "flag",
            "rule": f.rule,
            "reason": f.reason,
            "statistic": float(f.statistic),
            "residuals": kind,
        }
        for f in (frep.flags if frep else ())
    ]
    flag_rows += [
        {
            "analysis": aid,
            "label": e["label"],
            "kind": "excluded",
            "rule": "",
            "reason": e["reason"],
            "statistic": None,
            "residuals": "",
        }
        for e in res.excluded
    ]
    figs = run.figures
    figs[f"{aid}_scaling"] = plots.render_later(
        plots.scaling_plot(
            res, pts, catalog=ds.catalog, by=by, seed=run.seed, title=f"{title}, n = {res.n}"
        )
    )
    diag = None
    if frep is not None:
        diag = frep.to_frame()
        diag.insert(0, "analysis", aid)
        diag.insert(1, "residuals", kind)
        figs[f"{aid}_diagnostics"] = plots.render_later(plots.diagnostics(frep, title=title))
    sec = {
        "id": aid,
        "title": title,
        "res": res,
        "frame": frame,
        "points": pts,
        "a": a,
        "opts": opts,
        "flag_rows": flag_rows,
        "diag": diag,
        "lambda_note": "",
        "tree_caption": "",
    }
    if method == "pgls" and res.lambda_ is not None and res.loglik is not None:
        lf, sec["lambda_note"] = pieces.lambda_figure(res, run.data, a, by, opts)
        if lf is not None:
            figs[f"{aid}_lambda"] = plots.render_later(lf)
    if ds.tree is not None and (method == "pgls" or (not state["tree_drawn"] and not any_pgls)):
        drawn = pieces.tree_figure(ds, pts, a, labels, aid, run.notes, res.log, res.temperature)
        if drawn is not None:
            figs[f"{aid}_tree"] = plots.render_later(drawn[0])
            sec["tree_caption"] = drawn[1]
            state["tree_drawn"] = True
    return sec


def comparison_id(i: int, c: dict) -> str:
    """The id of the i-th comparison (anchors, file names): ``compare1_ols_y``."""
    return f"compare{i + 1}_{c.get('method', 'ols')}_{c['y']}"


def _added_variable(run: _Run, rec: dict, res: Any, opts: dict) -> None:
    """The added-variable plots of a comparison (:mod:`comparo.report.added_variable`)."""
    import comparo.report.figures as plots
    from comparo.base.errors import ComparoError
    from comparo.report.added_variable import comparison_figure

    cols = {c for f in res.fits for c in f.predictors} | {res.y}
    labels = {c: plots.axis_label(c, run.ds.catalog) for c in cols}
    try:
        drawn = comparison_figure(run.data, res, labels=labels, **opts)
    except ComparoError as exc:  # the section says why there is no figure
        run.notes.append(f"added-variable plots of {rec['id']} not drawn: {exc}")
        return
    if drawn is not None:
        run.figures[f"{rec['id']}_added_variable"] = plots.render(drawn[0])
        rec["added_variable_caption"] = drawn[1]


def _compare_all(run: _Run) -> None:
    """Every ``[[comparison]]`` of comparo.toml (:func:`comparo.fitting.compare`) on the data the
    fits use; a comparison that cannot run is kept with the reason."""
    import pandas as pd

    from comparo.base.csvsafe import to_csv
    from comparo.base.errors import ComparoError
    from comparo.fitting.comparison import compare
    from comparo.fitting.declared import comparisons

    declared = comparisons(run.ds.settings or {}, run.ds.catalog, _taxa_columns(run.ds))
    labels = pieces.tree_labels(run.ds)
    for i, c in enumerate(declared):
        cid, method = comparison_id(i, c), c.get("method", "ols")
        rec: dict[str, Any] = {
            "id": cid,
            "name": c.get("name") or f"models of {c['y']}",
            "y": c["y"],
            "method": method,
            "factor": c.get("factor"),
            "models": [list(m) for m in c["models"]],
        }
        run.comparisons.append(rec)
        opts: dict[str, Any] = {}
        if method == "pgls":
            if run.ds.tree is None:
                rec["error"] = "method pgls needs a tree (tree.nwk)"
                continue
            opts = {"tree": run.ds.tree, **({"tree_labels": labels} if labels else {})}
        try:
            res = compare(
                run.data, c["y"], c["models"], factor=c.get("factor"), method=method, **opts
            )
        except ComparoError as exc:
            rec["error"] = str(exc)
            continue
        rec["result"] = res.to_dict()
        _added_variable(run, rec, res, opts)
        rows = [
            {
                "model": " + ".join(m["predictors"]) or "1 (intercept only)",
                "k": m["k"],
                "loglik": m["loglik"],
                "aicc": m["aicc"],
                "delta_aicc": m["delta_aicc"],
                "weight": m["weight"],
            }
            for m in rec["result"]["models"]
        ]
        rec["frame"] = pd.DataFrame(rows)
        rec["summary"] = res.summary()
        run.tables[cid] = to_csv(rec["frame"])


def _sensitivity_all(run: _Run) -> None:
    import pandas as pd

    import comparo.report.figures as plots
    from comparo.base.csvsafe import to_csv

    rows = []
    for sec in run.sections:
        aid, res, a = sec["id"], sec["res"], sec["a"]
        s, snotes = pieces.run_sensitivity(
            run.ds,
            run.table,
            run.data,
            a,
            res,
            sec["opts"],
            run.seed,
            run.draws,
            run.temperature,
            harmonised=run.h,
        )
        entry = {
            "id": aid,
            "x": a["x"],
            "y": a["y"],
            "method": res.method,
            "draws": run.draws,
            "seed": int(run.seed),
            "notes": snotes,
        }
        run.sens_json.append(entry)
        if s is None:
            entry["error"] = snotes[-1]
            run.notes.append(f"{aid}: {snotes[-1]}")
            continue
        entry["result"] = s.to_dict()
        refits = pieces.sensitivity_frame(s)
        row = pieces.sensitivity_summary_row(aid, s, snotes)
        rows.append(row)
        run.tables[f"sensitivity_{aid}"] = to_csv(refits)
        run.sens[aid] = {
            "result": s,
            "refits": refits,
            "summary": pd.DataFrame([row]),
            "notes": snotes,
        }
        if s.leave_one_source_out:
            run.figures[f"{aid}_sensitivity"] = plots.render_later(
                plots.forest_plot(
                    s.leave_one_source_out,
                    slope=res.slope,
                    slope_ci=res.slope_ci,
                    ci=res.ci_level,
                    xlabel=pieces.slope_label(res),
                    title=f"{sec['title']}: leave one source out",
                )
            )
    if rows:
        run.tables["sensitivity_summary"] = to_csv(pd.DataFrame(rows))


def _overview_figures(run: _Run) -> None:
    import comparo.report.figures as plots

    if run.derived is not None:
        fig = plots.regime_plot(run.derived)
        if fig is not None:
            run.figures["regime"] = plots.render_later(fig)
        else:
            run.notes.append(
                "regime plot not drawn: no taxon has the observed frequency, both bounds and the "
                "poro-kinetic ratio"
            )
    run.figures["coverage"] = plots.render_later(plots.coverage_map(run.aud.to_dict()["coverage"]))
    run.figures["sources"] = plots.render_later(plots.source_chart(run.aud.sources_frame()))


def _cycles(run: _Run) -> None:
    """The dataset's traces reduced (comparo.curation.harmonise.cycles) and each one's loop
    drawn."""
    if getattr(run.ds, "traces", None) is None:
        return
    import comparo.report.figures as plots
    from comparo.base.csvsafe import to_csv
    from comparo.base.errors import ComparoError
    from comparo.curation.harmonise import cycles

    try:
        run.cycles = cycles(run.ds, temperature=run.temperature, harmonised=run.h)
    except ComparoError as exc:  # check is the gate; a trace problem here is reported, not raised
        run.notes.append(f"cycles unavailable: {exc}")
        return
    for t in run.cycles.results:
        run.figures[f"cycle_{t.trace_id}"] = plots.render_later(plots.loop_plot(t))
    run.tables["cycles"] = to_csv(run.cycles.to_frame())
    run.tables["cycles_by_taxon"] = to_csv(run.cycles.by_taxon())


def _write(run: _Run, out: Path) -> ReportResult:
    from comparo.base.outputs import atomic_write_bytes, atomic_write_text, dumps
    from comparo.report.page import report_html

    for name, text in run.tables.items():
        atomic_write_text(out / "tables" / f"{name}.csv", text)
    atomic_write_text(out / "tables" / "fits.json", dumps(list(run.fits)) + "\n")
    atomic_write_text(out / "tables" / "sensitivity.json", dumps(run.sens_json) + "\n")
    if run.comparisons:
        shown = [
            {k: v for k, v in c.items() if k not in ("frame", "summary")} for c in run.comparisons
        ]
        atomic_write_text(out / "tables" / "comparisons.json", dumps(shown) + "\n")
    if run.since is not None:
        atomic_write_text(out / "tables" / "since.json", dumps(run.since.to_dict()) + "\n")
    for stem, (png, svg) in run.figures.items():
        atomic_write_bytes(out / "figures" / f"{stem}.png", png)
        atomic_write_bytes(out / "figures" / f"{stem}.svg", svg)
    atomic_write_text(out / "report.html", report_html(run))
    _write_run(
        out,
        run.folder,
        run.ds.settings or {},
        run.seed,
        run.temperature,
        run.draws,
        ok=True,
        since=run.since_path,
    )
    c = run.checked
    return ReportResult(
        str(out),
        True,
        c.n_errors,
        c.n_warnings,
        figures=tuple(f"figures/{s}.{ext}" for s in run.figures for ext in ("png", "svg")),
        tables=tuple(f"tables/{n}.csv" for n in run.tables)
        + ("tables/fits.json", "tables/sensitivity.json")
        + (("tables/comparisons.json",) if run.comparisons else ())
        + (("tables/since.json",) if run.since is not None else ()),
        fits=tuple(run.fits),
        notes=tuple(run.notes),
        sensitivity=tuple({"id": k, "verdict": v["result"].verdict} for k, v in run.sens.items()),
    )
