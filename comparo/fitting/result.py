"""The result objects of a scaling fit: :class:`FitResult` and :class:`FlaggedRefit`."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from comparo.base.jsonsafe import json_safe as _json
from comparo.base.results import Result
from comparo.fitting.cautions import caution_lines
from comparo.fitting.numbers import NAN, as_float, num, pair, show, show_p

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


@dataclass(frozen=True)
class FitResult(Result):
    """A fitted scaling line Y = intercept + slope X on the fitted (log) scale.

    Attributes
    ----------
    method, x, y, log : str
        Method, the x and y columns, and the log base (``"10"``, ``"e"``, ``"none"``).
    n : int
        Points used.
    slope : float
        Exponent beta (dimensionless on log-log axes).
    slope_ci : tuple of float
        Confidence interval of the slope at ``ci_level``; NaN where unbounded.
    intercept : float
        alpha, on the fitted scale: log of y (in y's unit) at x = 1 (x's unit).
    intercept_ci : tuple of float
    r2 : float
        Squared correlation (ols, sma, ma), weighted R^2 (robust) or R^2 of
        the reweighted fit (lts).
    ci_level : float
    against : dict or None
        The test of slope = value (``against=``, ``--against``):
        ``{"value", "statistic", "test", "df", "p"}`` where ``test`` names the
        statistic: ``"t"`` (ols, lts, pgls; ``df`` an integer), ``"F(1, n-2)"``
        (sma, ma; ``df`` the pair [1, n - 2]) or ``"z"`` (robust; ``df`` None).
    lambda_, lambda_ci, loglik : PGLS only.
    groups : list of dict or None
        Per-group fits when ``by`` is given.
    group_tests : dict or None
        Common-slope, elevation and shift tests when ``by`` is given.
    outliers : list of dict
        ``{"label", "reason", "statistic"}``, see :mod:`comparo.fitting.flags`.
    excluded : list of dict
        ``{"label", "reason"}`` for rows left out.
    breakpoint : dict or None
        Segmented fit when asked.
    bootstrap : dict or None
        Percentile and BCa intervals when resampling was asked.
    sensitivity : dict or None
        Filled by the sensitivity analysis (not by :func:`fit`).
    phylo : dict or None
        PGLS only: the further results of :func:`comparo.phylo.pgls`
        (likelihood-ratio tests of lambda = 0 and 1, pruned tips, taxa without
        tips, sigma2, likelihood convention, measurement error).
    points : tuple of dict
        Per-point values: label, x_fit, y_fit, fitted, residual and, where
        the method has them, weight and lts_std.
    cautions : tuple of dict
        ``{"rule", "message", ...}`` per caution (:mod:`comparo.fitting.cautions`):
        ``few_taxa`` (``n``, ``minimum``, ``group``) and ``weak_correlation``
        (``r``, ``threshold``). In the JSON as ``cautions`` when there is one.
    temperature : dict or None
        What the temperature harmonisation did to the values behind the fitted taxa
        (:func:`comparo.validation.temperature.fit_temperature`: ``to``, ``values``, ``rescaled``,
        ``factor_min``, ``factor_max``, ``kept_as_measured``, ``without_temperature``,
        ``option``); None for a table that is not a comparo per-taxon table.
    """

    method: str
    x: str
    y: str
    log: str
    n: int
    slope: float
    slope_ci: tuple[float, float]
    intercept: float
    intercept_ci: tuple[float, float]
    r2: float
    ci_level: float
    against: dict | None = None
    lambda_: float | None = None
    lambda_ci: tuple[float, float] | None = None
    loglik: float | None = None
    groups: list[dict] | None = None
    group_tests: dict | None = None
    outliers: list[dict] = field(default_factory=list)
    excluded: list[dict] = field(default_factory=list)
    breakpoint: dict | None = None
    bootstrap: dict | None = None
    sensitivity: dict | None = None
    phylo: dict | None = None
    points: tuple[dict, ...] = field(default=(), repr=False)
    notes: tuple[str, ...] = ()
    refit_without_flagged: FlaggedRefit | None = None
    cautions: tuple[dict, ...] = ()
    temperature: dict | None = None

    __iter__ = None  # indexing by key (deprecated) does not make a fit a sequence

    def __getitem__(self, key: str) -> Any:
        """Deprecated: the dict that ``phylo_fit`` returned, read by key. Each key is an
        attribute (``slope``, ``lambda_``) or an entry of ``phylo`` (``sigma2``, ``df``); the
        warning names it. Values are as in :meth:`to_dict` (intervals as lists)."""
        import warnings

        phylo = self.phylo or {}
        if key in phylo:
            value, where = phylo[key], f"result.phylo[{key!r}]"
        else:
            d = self.to_dict()
            if key == "terms" or key not in d and key not in self.__dataclass_fields__:
                raise KeyError(key)
            value = d[key] if key in d else _json(getattr(self, key))
            where = "result." + ("lambda_" if key == "lambda" else key)
        warnings.warn(
            f"result[{key!r}] is deprecated: fits are FitResult objects, use {where}",
            DeprecationWarning,
            stacklevel=2,
        )
        return value

    def to_dict(self) -> dict:
        """JSON-safe dict with the keys of the ``fit --format json`` contract.

        ``group_tests`` (with ``by``), ``bootstrap`` (with resampling),
        ``refit_without_flagged`` (with ``drop_flagged``) and ``temperature`` (a fit
        of a comparo per-taxon table) are added only when they were computed.
        """
        out = {
            "method": self.method,
            "x": self.x,
            "y": self.y,
            "log": self.log,
            "n": int(self.n),
            "slope": num(self.slope),
            "slope_ci": pair(self.slope_ci),
            "intercept": num(self.intercept),
            "intercept_ci": pair(self.intercept_ci),
            "r2": num(self.r2),
            "ci_level": float(self.ci_level),
            "against": _json(self.against),
            "lambda": num(self.lambda_) if self.lambda_ is not None else None,
            "lambda_ci": pair(self.lambda_ci) if self.lambda_ci is not None else None,
            "loglik": num(self.loglik) if self.loglik is not None else None,
            "groups": _json(self.groups),
            "outliers": _json(list(self.outliers)),
            "excluded": _json(list(self.excluded)),
            "breakpoint": _json(self.breakpoint),
            "sensitivity": _json(self.sensitivity),
            "terms": self.terms(),
        }
        if self.group_tests is not None:
            out["group_tests"] = _json(self.group_tests)
        if self.cautions:
            out["cautions"] = _json([dict(c) for c in self.cautions])
        if self.bootstrap is not None:
            out["bootstrap"] = _json(self.bootstrap)
        if self.phylo is not None:
            out["phylo"] = _json(self.phylo)
        if self.refit_without_flagged is not None:
            out["refit_without_flagged"] = self.refit_without_flagged.to_dict()
        if self.temperature is not None:
            out["temperature"] = _json(self.temperature)
        return out

    def terms(self) -> list[dict]:
        """The line as the ``terms`` rows of a multiple fit: ``intercept`` and the x name, each
        ``{"term", "estimate", "se", "ci": [lo, hi], "t", "p"}`` (test of the term = 0).

        ols, pgls and lts (the reweighted least-squares fit, on the points it kept): se of the
        least-squares (GLS) estimate, ``t`` on n - 2 df (lts: kept - 2), the t-based CI.
        robust: the Huber fit's se, ``t`` holds the Wald z and ``p`` is from the normal, as
        the slope test of that method. sma and ma: the method's own exact intervals, and
        ``se``, ``t``, ``p`` null (their intervals are not estimate +/- quantile x se).
        """
        from scipy.special import ndtr, ndtri, stdtr, stdtrit

        pairs = (
            ("intercept", self.intercept, self.intercept_ci),
            (self.x, self.slope, self.slope_ci),
        )
        rows = []
        for term, est, ci in pairs:
            row = {
                "term": term,
                "estimate": num(est),
                "se": None,
                "ci": pair(ci),
                "t": None,
                "p": None,
            }
            se = df = None
            if self.method in ("ols", "lts", "robust") and ci is not None:
                if self.method == "lts":
                    df = int(sum(1 for p in self.points if p.get("weight", 1.0) > 0)) - 2
                elif self.method == "ols":
                    df = int(self.n) - 2
                q = (
                    float(ndtri(0.5 + self.ci_level / 2.0))
                    if df is None
                    else float(stdtrit(df, 0.5 + self.ci_level / 2.0))
                )
                se = (float(ci[1]) - float(ci[0])) / (2.0 * q)
            elif self.method == "pgls" and self.phylo:
                se = self.phylo.get("intercept_se" if term == "intercept" else "slope_se")
                df = self.phylo.get("df")
            if se is not None and df is not None and df < 1:
                se = None
            if se is not None and se > 0 and est is not None:
                t = float(est) / float(se)
                p = 2.0 * (float(ndtr(-abs(t))) if df is None else float(stdtr(df, -abs(t))))
                row.update(se=num(se), t=num(t), p=num(p))
            rows.append(row)
        return rows

    @classmethod
    def from_dict(cls, d: dict, *, points: tuple[dict, ...] = ()) -> FitResult:
        """Build a result from a contract dict (e.g. the PGLS fit of :mod:`comparo.phylo`)."""
        names = {f for f in cls.__dataclass_fields__}
        d = {k: v for k, v in d.items() if k != "terms"}
        kw = {
            ("lambda_" if k == "lambda" else k): v
            for k, v in d.items()
            if ("lambda_" if k == "lambda" else k) in names
        }
        for k in ("slope_ci", "intercept_ci", "lambda_ci"):
            if kw.get(k) is not None:
                kw[k] = tuple(as_float(v) for v in kw[k])
        for k in ("outliers", "excluded"):
            kw[k] = list(kw.get(k) or [])
        kw["cautions"] = tuple(kw.get("cautions") or ())
        rest = {k: v for k, v in d.items() if ("lambda_" if k == "lambda" else k) not in names}
        if rest:
            kw["phylo"] = rest
        return cls(**kw, points=points)

    def to_frame(self) -> pd.DataFrame:
        """Estimates table: one row per (group, term) with estimate and CI."""
        import pandas as pd

        rows = [
            {
                "group": None,
                "term": "slope",
                "estimate": self.slope,
                "ci_low": self.slope_ci[0],
                "ci_high": self.slope_ci[1],
                "n": self.n,
            },
            {
                "group": None,
                "term": "intercept",
                "estimate": self.intercept,
                "ci_low": self.intercept_ci[0],
                "ci_high": self.intercept_ci[1],
                "n": self.n,
            },
            {
                "group": None,
                "term": "r2",
                "estimate": self.r2,
                "ci_low": NAN,
                "ci_high": NAN,
                "n": self.n,
            },
        ]
        for g in self.groups or []:
            for term in ("slope", "intercept"):
                lo, hi = g.get(f"{term}_ci") or (NAN, NAN)
                rows.append(
                    {
                        "group": g["group"],
                        "term": term,
                        "estimate": g.get(term),
                        "ci_low": lo,
                        "ci_high": hi,
                        "n": g["n"],
                    }
                )
        gt = self.group_tests or {}
        if gt.get("common_slope") and not gt.get("slopes_differ"):
            cs = gt["common_slope"]
            lo, hi = cs.get("slope_ci") or (NAN, NAN)
            rows.append(
                {
                    "group": "(common)",
                    "term": "slope",
                    "estimate": cs.get("slope"),
                    "ci_low": lo,
                    "ci_high": hi,
                    "n": self.n,
                }
            )
        if self.breakpoint:
            bp = self.breakpoint
            for term, key in (
                ("breakpoint_x", "x"),
                ("slope_left", "slope_left"),
                ("slope_right", "slope_right"),
            ):
                lo, hi = bp.get(f"{key}_ci") or (NAN, NAN)
                rows.append(
                    {
                        "group": "(segmented)",
                        "term": term,
                        "estimate": bp.get(key),
                        "ci_low": lo,
                        "ci_high": hi,
                        "n": self.n,
                    }
                )
        if self.refit_without_flagged is not None:
            rows += self.refit_without_flagged.frame_rows()
        frame = pd.DataFrame(rows)
        frame.insert(0, "method", self.method)
        return frame

    def _repr_html_(self) -> str:
        """Compact table for notebooks: the estimates of :meth:`to_frame`, the slope test and
        the flags."""
        from comparo.base.display import frame_html

        scale = {"10": "log10", "e": "ln", "none": "untransformed"}[self.log]
        notes = [f"CAUTION: {line}" for line in caution_lines(self.cautions)]
        notes += [_against_text(self.against)] if self.against else []
        if self.group_tests:
            notes += [line.strip() for line in _group_comparison_lines(self.group_tests)]
        notes.append(f"flags: {len(self.outliers)}; excluded rows: {len(self.excluded)}")
        notes += list(self.notes)
        title = (
            f"{self.method.upper()} fit of {self.y} on {self.x} ({scale} axes), n = {self.n}, "
            f"CI {100 * self.ci_level:g}%"
        )
        return frame_html(title, self.to_frame().drop(columns=["method"]), notes)

    def plot(
        self,
        ax: Any = None,
        *,
        table: pd.DataFrame | None = None,
        catalog: Any = None,
        taxon_col: str = "taxon",
        seed: int = 20240601,
    ) -> Any:
        """The scaling figure of the report on a matplotlib Axes; returns the Axes.

        Parameters
        ----------
        ax : matplotlib Axes, optional
            Where to draw; a new figure (9.2 x 4.6 in) when None.
        table : DataFrame, optional
            The fitted table: with ``{x}_basis`` and ``{y}_basis`` columns the
            markers show the weakest basis of each point, as in the report.
        catalog : quantity catalogue, optional
            For axis labels with units.
        seed : int
            Seed of the bootstrap band of the line.
        """
        import comparo.fitting.plot as plots

        points = self.points_frame()
        if (
            table is not None
            and f"{self.x}_basis" in table
            and f"{self.y}_basis" in table
            and taxon_col in table
        ):
            by_label = {
                str(r[taxon_col]): plots.weakest_basis(
                    str(r[f"{self.x}_basis"]), str(r[f"{self.y}_basis"])
                )
                for _, r in table.iterrows()
            }
            points["basis"] = [by_label.get(str(lab), "") for lab in points["label"]]
        if ax is None:
            plots.matplotlib_cache()
            import matplotlib.pyplot as plt

            with plt.rc_context(plots.STYLE):
                _, ax = plt.subplots(figsize=(9.2, 4.6), layout="constrained")
        by = "group" if self.groups else None
        return plots.draw_scaling(ax, self, points, catalog=catalog, by=by, seed=seed)

    def points_frame(self) -> pd.DataFrame:
        """Per-point table (fitted scale): label, x_fit, y_fit, fitted, residual, ..."""
        import pandas as pd

        return pd.DataFrame(list(self.points))

    def summary(self) -> str:
        """Plain-text account of the fit for people."""
        pct = f"{100 * self.ci_level:g}%"
        scale = {"10": "log10", "e": "ln", "none": "untransformed"}[self.log]
        differ = bool(self.group_tests and self.group_tests.get("slopes_differ"))
        lines = [
            f"{self.method.upper()} fit of {self.y} on {self.x} ({scale} axes), n = {self.n}",
            *(
                [
                    "  the groups differ in slope: the line below pools all taxa and is the "
                    "exponent of no group"
                ]
                if differ
                else []
            ),
            *[f"  CAUTION: {line}" for line in caution_lines(self.cautions)],
            f"  slope      {show(self.slope)}   {pct} CI {_span(self.slope_ci)}",
            f"  intercept  {show(self.intercept)}   {pct} CI {_span(self.intercept_ci)}",
            f"  r2         {show(self.r2)}",
        ]
        if self.lambda_ is not None:
            lam_ci = self.lambda_ci or (NAN, NAN)
            lines.append(
                f"  lambda     {show(self.lambda_)}   CI {_span(lam_ci)}   "
                f"loglik {show(self.loglik)}"
            )
        if self.against:
            lines.append(f"  {_against_text(self.against)}")
        if self.bootstrap:
            b = self.bootstrap
            lines.append(f"  bootstrap ({b['resamples']} resamples, seed {b['seed']}):")
            for term in ("slope", "intercept"):
                per, bca = b[term]["percentile"], b[term]["bca"]
                lines.append(f"    {term:<9}  percentile {_span(per)}   BCa {_span(bca)}")
        if self.groups:
            lines.append("  groups:")
            for g in self.groups:
                lo, hi = g.get("slope_ci") or (NAN, NAN)
                lines.append(
                    f"    {str(g['group']):<16} n {g['n']:>4}  slope {show(g.get('slope'))}  "
                    f"CI {_span((lo, hi))}"
                )
        if self.group_tests:
            lines += _group_comparison_lines(self.group_tests)
        if self.breakpoint:
            bp = self.breakpoint
            lines.append(
                f"  breakpoint at x = {show(bp['x'])} (CI {_span(bp['x_ci'])}) "
                "of the least-squares "
                f"broken line{'' if self.method == 'ols' else f' (not {self.method.upper()})'}; "
                f"slopes {show(bp['slope_left'])} | {show(bp['slope_right'])}; "
                f"single line? p = {show_p(bp['p_single_line'])}"
            )
        if self.outliers:
            lines.append("  flags:")
            lines += [
                f"    {o['label']}: {o['reason']} ({show(o['statistic'])})" for o in self.outliers
            ]
        elif (
            self.method == "pgls"
        ):  # the report flags PGLS fits on whitened residuals (comparo.fitting.flags.fit_flags)
            lines.append(
                "  flags: not computed by this command for pgls (comparo report flags PGLS fits on "
                "phylogenetically whitened residuals)"
            )
        else:
            lines.append("  flags: none")
        if self.excluded:
            lines.append(f"  excluded ({len(self.excluded)}):")
            lines += [f"    {e['label']}: {e['reason']}" for e in self.excluded]
        lines += [f"  note: {s}" for s in self.notes]
        if self.temperature:
            from comparo.validation.temperature import fit_temperature_text

            text = fit_temperature_text(self.temperature)
            lines += [f"  {text}"] if text else []
        if self.refit_without_flagged is not None:
            lines.append(self.refit_without_flagged.summary(self))
        return "\n".join(lines)


@dataclass(frozen=True)
class FlaggedRefit:
    """The fit repeated without the points that broke the chosen flag rules.

    Asked with ``fit(..., drop_flagged=...)`` / ``--drop-flagged``; the original
    fit is kept and this refit is reported beside it. One pass: the refit's own
    flags are reported (in ``fit.outliers``) but nothing more is dropped.

    Attributes
    ----------
    rules : tuple of str
        Rule ids that caused a drop (see :func:`comparo.fitting.flags.drop_rules`).
    dropped : tuple of dict
        ``{"label", "rules", "reasons"}`` per dropped point, in point order.
    fit : FitResult or None
        The refit (None when nothing was dropped or the refit was impossible;
        ``note`` says why).
    slope_change : float or None
        Refit slope minus original slope (dimensionless on log-log axes).
    note : str or None
    """

    rules: tuple[str, ...]
    dropped: tuple[dict, ...]
    fit: FitResult | None
    slope_change: float | None = None
    note: str | None = None

    def to_dict(self) -> dict:
        """``{"rules", "dropped", "n_dropped", "slope_change", "fit", "note"}``; ``fit`` is a fit
        object."""
        return {
            "rules": list(self.rules),
            "dropped": _json([dict(d) for d in self.dropped]),
            "n_dropped": len(self.dropped),
            "slope_change": num(self.slope_change),
            "fit": self.fit.to_dict() if self.fit is not None else None,
            "note": self.note,
        }

    def frame_rows(self) -> list[dict]:
        """Rows for :meth:`FitResult.to_frame`: the refit's estimates, then one row per dropped
        point."""
        rows = []
        r = self.fit
        if r is not None:
            for term, est, ci in (
                ("slope", r.slope, r.slope_ci),
                ("intercept", r.intercept, r.intercept_ci),
                ("r2", r.r2, (NAN, NAN)),
            ):
                rows.append(
                    {
                        "group": "(without flagged)",
                        "term": term,
                        "estimate": est,
                        "ci_low": ci[0],
                        "ci_high": ci[1],
                        "n": r.n,
                    }
                )
        for d in self.dropped:
            rows.append(
                {
                    "group": "(dropped)",
                    "term": d["label"],
                    "estimate": NAN,
                    "ci_low": NAN,
                    "ci_high": NAN,
                    "n": NAN,
                    "flags": "; ".join(d["rules"]),
                }
            )
        return rows

    def summary(self, original: FitResult | None = None) -> str:
        pct = f"{100 * original.ci_level:g}%" if original is not None else "CI"
        lines = [
            f"  refit without flagged points (rules: {', '.join(self.rules) or 'none'}): "
            f"{len(self.dropped)} dropped"
        ]
        lines += [f"    dropped {d['label']}: {'; '.join(d['rules'])}" for d in self.dropped]
        r = self.fit
        if r is not None:
            was = (
                f" (was {show(original.slope)}, change {show(self.slope_change)})"
                if original is not None
                else ""
            )
            lines.append(
                f"    n = {r.n}  slope {show(r.slope)}   {pct} CI {_span(r.slope_ci)}{was}"
            )
            lines.append(
                f"    intercept {show(r.intercept)}   {pct} CI {_span(r.intercept_ci)}   "
                f"r2 {show(r.r2)}"
            )
            if r.against:
                lines.append(f"    {_against_text(r.against)}")
            if r.outliers:
                lines.append(
                    "    flags of the refit (not dropped): "
                    + ", ".join(dict.fromkeys(o["label"] for o in r.outliers))
                )
        if self.note:
            lines.append(f"    note: {self.note}")
        return "\n".join(lines)


#: How the group comparisons read in printed summaries (the published test names are
#: in docs/methods/fitting.md): key of ``group_tests`` -> question.
GROUP_QUESTIONS = {
    "common_slope": "one exponent for all groups?",
    "elevation": "same height at the common exponent?",
    "shift": "groups offset along the common line?",
}


def _span(pair) -> str:
    """An interval as summaries print it: ``lo .. hi``."""
    return f"{show(pair[0])} .. {show(pair[1])}"


def _against_text(t: dict) -> str:
    """``slope = 1?  t = 2.31 (df 10), p = 0.04`` or ``F(1, 10) = ...`` (the statistic named as
    the test is)."""
    name = t.get("test") or "statistic"
    df = t.get("df")
    if name.startswith("F(") and isinstance(df, list | tuple) and len(df) == 2:
        name, df = f"F({df[0]}, {df[1]})", None
    dft = "" if df is None else f" (df {df})"
    return f"slope = {t['value']:g}?  {name} = {show(t['statistic'])}{dft}, p = {show_p(t['p'])}"


def _group_comparison_lines(gt: dict) -> list[str]:
    """The group comparisons in comparo's phrasing, one line each.

    When equal slopes are rejected (``slopes_differ``) there is no common exponent to
    show: the lines say the groups differ in slope (their slopes are in the groups
    block) and why the elevation and shift tests are not given.
    """
    lines = []
    cs = gt.get("common_slope")
    differ = bool(gt.get("slopes_differ"))
    if differ:
        alpha = show(gt.get("alpha"))
        lines.append(
            f"  the groups differ in slope (equal slopes rejected at {alpha}): no exponent "
            "shared by the groups; see the group slopes"
        )
    elif cs:
        lo, hi = cs.get("slope_ci") or (NAN, NAN)
        lines.append(f"  common exponent {show(cs.get('slope'))}  CI {show(lo)} .. {show(hi)}")
    for key, question in GROUP_QUESTIONS.items():
        t = gt.get(key)
        if t:
            assumed = " (assuming the common slope)" if key != "common_slope" else ""
            lines.append(
                f"  {question}{assumed} {t['test']} {show(t['statistic'])}, df {t['df']}, "
                f"p = {show_p(t['p'])}"
            )
    if gt.get("omitted"):
        lines.append(f"  {gt['omitted']}")
    return lines
