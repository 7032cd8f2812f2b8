"""Figures of one fit in the report: residual diagnostics of its flags, the profile
likelihood of Pagel's lambda and the leave-one-source-out forest.

References
----------
Cook RD (1977). Detection of influential observation in linear regression.
Technometrics 19: 15-18.
Blom G (1958). Statistical Estimates and Transformed Beta-Variables. Wiley
(plotting positions (i - 3/8)/(n + 1/4) of the normal QQ plot).
Pagel M (1999). Inferring the historical patterns of biological evolution. Nature 401: 877-884.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.figure_style import (
    PALETTE,
    label_points,
    new_figure,
    short,
    short_number,
)

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

#: Residual kinds of :class:`comparo.fitting.flags.FlagReport`, as the figure names them.
RESIDUAL_NAMES = {
    "ols": "least-squares residuals of y on x (fitted scale)",
    "whitened": "phylogenetically whitened residuals (PGLS)",
}
#: At most this many flagged points are named in the diagnostics figure (all are coloured).
DIAGNOSTIC_LABELS = 15


def _dots(ax: Any, xs: np.ndarray, ys: np.ndarray, mark: np.ndarray, n_flagged: int) -> None:
    """Points not flagged (blue) and flagged (vermillion), each named with its count."""
    ax.plot(
        xs[~mark],
        ys[~mark],
        ls="",
        marker="o",
        color=PALETTE[0],
        label=f"not flagged ({int((~mark).sum())})",
    )
    if mark.any():
        ax.plot(
            xs[mark],
            ys[mark],
            ls="",
            marker="o",
            color=PALETTE[3],
            label=f"flagged ({n_flagged})",
        )


def _residual_panel(
    ax: Any, fitted: np.ndarray, stud: np.ndarray, mark: np.ndarray, bc: float, n_flagged: int
) -> None:
    """Studentized residual against fitted value, with the Bonferroni cut ±*bc*."""
    ax.axhline(0, color="#777777", lw=0.8)
    for sign in (1, -1):
        ax.axhline(
            sign * bc,
            color="#777777",
            lw=0.8,
            ls="--",
            gid=f"cut:bonferroni:{bc!r}",
            label=f"Bonferroni cut ±{bc:.3g}" if sign > 0 else None,
        )
    _dots(ax, fitted, stud, mark, n_flagged)
    ax.set_xlabel("fitted value a + b x (log scale of y)")
    ax.set_ylabel("studentized residual (dimensionless)")
    ax.set_title("residual against fitted")


def _qq_panel(ax: Any, stud: np.ndarray, mark: np.ndarray) -> None:
    """Normal QQ plot of the studentized residuals at Blom's (1958) plotting positions."""
    from scipy import stats

    order = np.argsort(stud)
    q = stats.norm.ppf((np.arange(1, len(stud) + 1) - 0.375) / (len(stud) + 0.25))
    ax.plot(q, q, color="#000000", lw=1)
    ax.plot(q[~mark[order]], stud[order][~mark[order]], ls="", marker="o", color=PALETTE[0])
    ax.plot(q[mark[order]], stud[order][mark[order]], ls="", marker="o", color=PALETTE[3])
    ax.set_xlabel("normal quantile (standard units)")
    ax.set_ylabel("ordered studentized residual (dimensionless)")
    ax.set_title("normal QQ")


def _influence_cuts(ax: Any, cook: np.ndarray, cuts: Mapping[str, float]) -> None:
    """The cuts of the leverage-influence panel: Cook's D 4/n, leverage 2p/n, and Cook's D
    F(0.5), drawn when it lies in the panel, else only named in the legend."""
    c4, cf, cl = cuts["cooks_4n"], cuts["cooks_f"], cuts["leverage"]
    ax.axhline(
        c4,
        color="#777777",
        lw=0.8,
        ls=":",
        gid=f"cut:cooks_4n:{c4!r}",
        label=f"Cook's D 4/n = {c4:.3g}",
    )
    ax.axvline(
        cl,
        color="#777777",
        lw=0.8,
        ls="--",
        gid=f"cut:leverage:{cl!r}",
        label=f"leverage 2p/n = {cl:.3g}",
    )
    top = max(float(np.nanmax(cook)) if len(cook) else 0.0, c4) * 1.15
    if cf <= top:
        ax.axhline(
            cf,
            color="#000000",
            lw=0.8,
            ls=":",
            gid=f"cut:cooks_f:{cf!r}",
            label=f"Cook's D F(0.5) = {cf:.3g}",
        )
    else:  # the stronger cut lies above every point: named, not drawn (it would flatten the panel)
        ax.plot(
            [],
            [],
            ls="",
            gid=f"cut:cooks_f:{cf!r}",
            label=f"Cook's D F(0.5) = {cf:.3g} (above the panel)",
        )


def diagnostics(report: Any, *, title: str = "") -> Figure:
    """Studentized residual against fitted value, its normal QQ plot, and leverage against
    Cook's distance, drawn from the statistics and cut-offs of a flag report.

    Parameters
    ----------
    report : comparo.fitting.flags.FlagReport
        Its ``table`` (fitted, studentized, leverage, cooks_d per point), ``cuts`` and
        ``flags``: the figure shows exactly the statistics the flags test, the cut-offs
        they use, and marks exactly the flagged points (vermillion; named up to
        :data:`DIAGNOSTIC_LABELS`).

    Notes
    -----
    For SVG readers: every named point is a text with ``gid="flag-label:<label>"``, every
    cut-off line has ``gid="cut:<name>:<value>"`` (value as Python ``repr``).
    """
    import pandas as pd

    t = pd.DataFrame(list(report.table))
    flagged = list(dict.fromkeys(f.label for f in report.flags))
    mark = t["label"].isin(flagged).to_numpy()
    fig, axes = new_figure(10.4, 4.0, ncols=3)
    stud, fitted = t["studentized"].to_numpy(float), t["fitted"].to_numpy(float)
    lev, cook = t["leverage"].to_numpy(float), t["cooks_d"].to_numpy(float)
    _residual_panel(axes[0], fitted, stud, mark, report.cuts["bonferroni"], len(flagged))
    _qq_panel(axes[1], stud, mark)
    ax = axes[2]
    _dots(ax, lev, cook, mark, len(flagged))
    _influence_cuts(ax, cook, report.cuts)
    named = [i for i in np.argsort(-cook) if mark[i]][:DIAGNOSTIC_LABELS]
    if named:
        label_points(
            ax,
            lev[named],
            cook[named],
            [short(t["label"].iat[i], 24) for i in named],
            fontsize=6.5,
            gids=[f"flag-label:{t['label'].iat[i]}" for i in named],
            color="#000000",
        )
    ax.set_xlabel("leverage h (dimensionless)")
    ax.set_ylabel("Cook's distance (dimensionless)")
    ax.set_title("leverage and influence")
    handles, names = [], []
    for a in axes:
        for hd, nm in zip(*a.get_legend_handles_labels(), strict=True):
            if nm not in names:
                handles.append(hd)
                names.append(nm)
    fig.legend(
        handles,
        names,
        loc="outside lower center",
        ncols=min(len(names), 5),
        frameon=False,
        fontsize=7.5,
    )
    kind = RESIDUAL_NAMES.get(report.residuals, report.residuals)
    fig.suptitle(f"Diagnostics: {title}; {kind}" if title else f"Diagnostics: {kind}", fontsize=10)
    return fig


def lambda_profile(
    lambdas: Sequence[float],
    logliks: Sequence[float],
    *,
    lam_hat: float,
    loglik_hat: float,
    lam_ci: Sequence[float] | None = None,
    ci: float = 0.95,
    title: str = "",
) -> Figure:
    """Profile log-likelihood of Pagel's lambda with its maximum and the likelihood-ratio cut.

    The cut is loglik_hat - χ²₁(ci)/2: lambda values above it lie inside the
    profile interval (Pagel 1999, Nature 401: 877-884).
    """
    from scipy import stats

    fig, ax = new_figure(6.4, 4.0)
    lam = np.asarray(lambdas, float)
    ll = np.asarray(logliks, float)
    order = np.argsort(lam)
    ax.plot(
        lam[order],
        ll[order],
        color=PALETTE[0],
        marker="o",
        lw=1.4,
        label="log-likelihood at fixed λ",
    )
    cut = loglik_hat - stats.chi2.ppf(ci, 1) / 2
    ax.axhline(cut, color="#777777", ls=":", lw=1, label=f"{100 * ci:g}% likelihood-ratio cut")
    ax.plot(
        [lam_hat],
        [loglik_hat],
        marker="D",
        color=PALETTE[3],
        ls="",
        label=f"maximum: λ = {short_number(lam_hat)}",
    )
    if lam_ci is not None and all(v is not None and np.isfinite(v) for v in lam_ci):
        ax.axvspan(
            lam_ci[0],
            lam_ci[1],
            color=PALETTE[3],
            alpha=0.12,
            lw=0,
            label=f"interval {short_number(lam_ci[0])} to {short_number(lam_ci[1])}",
        )
    ax.set_xlabel("Pagel's λ (dimensionless)")
    ax.set_ylabel("log-likelihood (dimensionless)")
    ax.set_title(title or "Profile likelihood of λ")
    ax.legend(frameon=False, loc="lower right")
    return fig


def forest_plot(
    rows: Sequence[Mapping[str, Any]],
    *,
    slope: float,
    slope_ci: Sequence[float],
    ci: float = 0.95,
    xlabel: str = "slope (dimensionless on log-log axes)",
    title: str = "",
) -> Figure:
    """Leave-one-source-out slopes with their CIs, one row per dropped source.

    Parameters
    ----------
    rows : sequence of mapping
        ``{"source_id", "n", "slope", "slope_ci", "flips"}`` as in
        :attr:`comparo.fitting.source_sensitivity.SensitivityResult.leave_one_source_out`,
        drawn top to bottom in the given order (most influential first). A row with no slope (the
        refit could not run) is named but has no point.
    slope, slope_ci : the fit on all data: a vertical line and a shaded band.
    ci : confidence level of the intervals.
    """
    n = len(rows)
    fig, ax = new_figure(7.2, min(18.0, max(2.8, 0.27 * n + 1.6)))
    pct = f"{100 * ci:g}%"
    lo, hi = slope_ci
    if lo is not None and hi is not None and np.isfinite(lo) and np.isfinite(hi):
        ax.axvspan(
            lo,
            hi,
            color="#000000",
            alpha=0.10,
            lw=0,
            label=f"all data: {pct} CI {short_number(lo)} to {short_number(hi)}",
        )
    ax.axvline(slope, color="#000000", lw=1.3, label=f"all data: slope {short_number(slope)}")
    yy = np.arange(n)
    names = []
    drawn = {False: False, True: False}
    for i, r in enumerate(rows):
        s = r.get("slope")
        note = "" if s is not None and np.isfinite(s) else "not refitted"
        names.append(
            f"without {r['source_id']} ("
            + (f"{note}; {r.get('n', 0)} taxa left)" if note else f"n = {r.get('n', 0)})")
        )
        if note:
            continue
        flip = bool(r.get("flips"))
        clo, chi = r.get("slope_ci") or (None, None)
        colour, marker = (PALETTE[3], "D") if flip else (PALETTE[0], "o")
        if clo is not None and chi is not None and np.isfinite(clo) and np.isfinite(chi):
            ax.plot([clo, chi], [i, i], color=colour, lw=1.4, solid_capstyle="butt")
        lab = None
        if not drawn[flip]:
            lab = (
                "without the source: flips the slope test"
                if flip
                else f"without the source: slope and {pct} CI"
            )
            drawn[flip] = True
        ax.plot([s], [i], ls="", marker=marker, color=colour, label=lab)
    ax.set_yticks(yy, [short(v) for v in names], fontsize=8 if n <= 40 else 6)
    ax.set_ylim(n - 0.5, -0.5)
    ax.grid(axis="y", visible=False)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("refit without one source (source_id)")
    ax.set_title(f"{title or 'Leave one source out'}\n({n} sources, most influential at the top)")
    ax.legend(frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig
