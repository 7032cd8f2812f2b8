"""What a report run returns (:class:`ReportResult`) and the report's fixed settings."""

from __future__ import annotations

from dataclasses import dataclass, field

from comparo.base.results import Result
from comparo.report.fmt import num
from comparo.validation.settings import DEFAULT_ANALYSES  # noqa: F401  (the default fits, kept importable here)

#: Monte Carlo draws of the measurement-error part of the report's sensitivity section. A modest
#: number keeps the report fast; ``comparo fit --sensitivity`` uses 1000. The spread of the
#: slopes is estimated to about 1/sqrt(2 (draws - 1)) relative, 5% at 200 draws (common practice).
SENSITIVITY_DRAWS = 200

#: Fixed lambda values at which the PGLS profile likelihood is drawn.
LAMBDA_GRID = tuple(i / 10 for i in range(11))

DISCLAIMER = (
    "This report is a research aid: it summarises a compilation and the fits run on it. Check "
    "every value against its source before relying on it."
)


@dataclass(frozen=True)
class ReportResult(Result):
    """What :func:`build_report` wrote.

    Attributes
    ----------
    out_dir : str
    ok : bool
        False when validation found errors (only the error page was written).
    n_errors, n_warnings : int
    figures, tables : tuple of str
        Paths relative to *out_dir* (each figure as PNG and SVG).
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

    @property
    def n_figures(self) -> int:
        """Figures drawn (one figure is written twice, as PNG and SVG)."""
        return len({p.rsplit(".", 1)[0] for p in self.figures})

    def to_dict(self) -> dict:
        return {
            "out_dir": self.out_dir,
            "ok": self.ok,
            "n_errors": self.n_errors,
            "n_warnings": self.n_warnings,
            "figures": list(self.figures),
            "tables": list(self.tables),
            "fits": list(self.fits),
            "notes": list(self.notes),
            "sensitivity": list(self.sensitivity),
        }

    def summary(self) -> str:
        if not self.ok:
            return (
                f"validation found {self.n_errors} error(s); the report lists them: "
                f"{self.out_dir}/report.html"
            )
        from comparo.fitting.cautions import caution_lines

        lines = [
            f"report written to {self.out_dir}/report.html ({self.n_figures} figures, each as PNG "
            f"and SVG; {len(self.tables)} tables)"
        ]
        for f in self.fits:
            if "error" in f:
                lines.append(f"  {f['id']}: not fitted ({f['error']})")
            else:
                r = f["result"]
                lo, hi = r["slope_ci"]
                gt = r.get("group_tests") or {}
                if gt.get("slopes_differ"):  # no single exponent to headline
                    slopes = ", ".join(
                        f"{g['group']} {num(g['slope'])}"
                        for g in r.get("groups") or []
                        if g.get("slope") is not None
                    )
                    p = num(gt["common_slope"]["p"], 3)
                    lines.append(
                        f"  {f['id']}: the groups differ in slope (equal slopes rejected: p = "
                        f"{p}); group slopes {slopes}; n = {r['n']}"
                    )
                else:
                    lines.append(
                        f"  {f['id']}: slope {num(r['slope'])} (CI {num(lo)} to {num(hi)}), n = "
                        f"{r['n']}"
                    )
                lines += [f"    caution: {line}" for line in caution_lines(r.get("cautions") or [])]
        lines += [f"  {s['id']} sensitivity: {s['verdict']}" for s in self.sensitivity]
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)
