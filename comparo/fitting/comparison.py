"""Model comparison :func:`compare`: candidate sets of predictors of one y, every model fitted
by maximum likelihood on the same taxa, ranked by AICc with Akaike weights, and
likelihood-ratio tests of the nested pairs.

Burnham KP, Anderson DR (2002) Model Selection and Multimodel Inference: A Practical
Information-Theoretic Approach, 2nd ed. Springer, New York (AICc, Delta_i, Akaike weights).
Hurvich CM, Tsai C-L (1989) Regression and time series model selection in small samples.
Biometrika 76:297-307 (AICc).
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.numbers import number
from comparo.base.results import Result
from comparo.fitting.multiple import (
    MultipleFit,
    check_options,
    design,
    fit_design,
    linear_predictors,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: What an Akaike weight is not, said wherever weights are shown.
WEIGHT_CAUTION = (
    "An Akaike weight is the relative support for a model among the candidates given, on these "
    "taxa; it is not the probability that the model is true, and it changes when candidates are "
    "added or removed. Models within 2 AICc units of the best are not distinguished by the data "
    "(a difference below 2 is not a preference). A well-supported model may still be a poor "
    "description: check its residuals."
)
#: When a model-averaged coefficient means something, said wherever averages are shown.
AVERAGING_CAUTION = (
    "Model-averaged coefficients are averaged per term over the models that contain it, with "
    "their Akaike weights renormalised over those models; the standard error is the "
    "unconditional one (within-model variance plus the spread of the estimates between models; "
    "Burnham & Anderson 2002). Every model here has the same y, the same log scale and the same "
    "taxa, so a term is on one scale in all of them; but a coefficient is a partial effect whose "
    "meaning depends on the other predictors in its model, so with correlated predictors the "
    "average mixes different quantities: read it beside each model's own estimate, not instead."
)


def model_average(fits: Sequence[MultipleFit], weights: Sequence[float]) -> list[dict]:
    """Model-averaged coefficients (Burnham & Anderson 2002, ch. 4): for each term other than
    the intercept, over the models containing it, with weights w~_i = w_i / sum of w_j over
    those models, estimate = sum w~_i b_i and the unconditional standard error
    se = sum w~_i sqrt(se_i^2 + (b_i - estimate)^2). Rows ``{"term", "estimate", "se",
    "models", "weight"}``: ``models`` counts the models containing the term, ``weight`` is
    their summed Akaike weight. Terms in the order they first appear (best model first)."""
    rows: dict[str, list[tuple[float, float, float]]] = {}
    for f, w in zip(fits, weights, strict=True):
        for t in f.terms:
            if t["term"] == "intercept":
                continue
            rows.setdefault(t["term"], []).append((w, t["estimate"], t["se"]))
    out = []
    for term, got in rows.items():
        total = sum(w for w, _, _ in got)
        est = se = None
        if total > 0 and all(b is not None and s is not None for _, b, s in got):
            est = sum(w * b for w, b, _ in got) / total
            se = sum(w * math.sqrt(s * s + (b - est) ** 2) for w, b, s in got) / total
        out.append(
            {
                "term": term,
                "estimate": _f(est),
                "se": _f(se),
                "models": len(got),
                "weight": _f(total),
            }
        )
    return out


def akaike_weights(values: Sequence[float]) -> list[float]:
    """w_i = exp(-Delta_i/2) / sum_j exp(-Delta_j/2), Delta_i = AICc_i - min AICc
    (Burnham & Anderson 2002)."""
    best = min(values)
    rel = [math.exp(-0.5 * (v - best)) for v in values]
    total = sum(rel)
    return [r / total for r in rel]


@dataclass(frozen=True)
class Comparison(Result):
    """Candidate models of one y on the same n taxa, sorted by AICc (best first)."""

    y: str
    method: str
    n: int
    factor: str | None
    reference: str | None
    log: str
    fits: tuple[MultipleFit, ...]
    delta: tuple[float, ...]
    weights: tuple[float, ...]
    tests: tuple[dict, ...]
    excluded: tuple[dict, ...]
    lambda_: str | float

    def to_dict(self) -> dict:
        models = []
        for f, d, w in zip(self.fits, self.delta, self.weights, strict=True):
            models.append(
                {
                    "predictors": list(f.predictors),
                    "k": f.k,
                    "loglik": _f(f.loglik),
                    "aicc": _f(f.aicc),
                    "delta_aicc": _f(d),
                    "weight": _f(w),
                    "lambda": _f(f.lambda_),
                    "terms": [{**t, "scale": f.scale(t["term"])} for t in f.terms],
                }
            )
        return {
            "y": self.y,
            "n": self.n,
            "method": self.method,
            "likelihood": "ML",
            "log": self.log,
            "factor": self.factor,
            "reference_level": self.reference,
            "lambda": self.lambda_ if self.method == "pgls" else None,
            "models": models,
            "likelihood_ratio_tests": [dict(t) for t in self.tests],
            "excluded": [dict(e) for e in self.excluded],
            "caution": WEIGHT_CAUTION,
            "averaged": model_average(self.fits, self.weights),
            "linear": sorted({c for f in self.fits for c in f.linear}),
            "averaging_caution": AVERAGING_CAUTION,
        }

    def to_frame(self):
        """One row per model, best first: ``predictors``, ``k``, ``loglik``, ``aicc``,
        ``delta_aicc``, ``weight``, ``lambda``."""
        import pandas as pd

        keys = ["k", "loglik", "aicc", "delta_aicc", "weight", "lambda"]
        rows = [
            {"predictors": " + ".join(m["predictors"]), **{k: m[k] for k in keys}}
            for m in self.to_dict()["models"]
        ]
        return pd.DataFrame(rows, columns=["predictors", *keys])

    def summary(self) -> str:
        lam = ""
        if self.method == "pgls":
            lam = (
                ", Pagel's lambda by ML in each model"
                if self.lambda_ == "ml"
                else f", Pagel's lambda fixed at {float(self.lambda_):g}"
            )
        lines = [
            f"Model comparison for {self.y} (log {self.log}), method {self.method}{lam}, "
            "maximum likelihood",
            f"n = {self.n} taxa with every variable of every model",
        ]
        if self.excluded:
            n = len(self.excluded)
            lines.append(
                f"{n} {'taxon' if n == 1 else 'taxa'} left out (the same for every model):"
            )
            lines += [f"  {e['label']}: {e['reason']}" for e in self.excluded[:20]]
            if len(self.excluded) > 20:
                lines.append(f"  ... and {len(self.excluded) - 20} more (JSON key 'excluded')")
        linear = sorted({c for f in self.fits for c in f.linear})
        if linear:
            lines.append(
                f"entered untransformed (linear, not log): {', '.join(linear)}; "
                "their coefficients are change in log y per unit"
            )
        if self.factor:
            lines.append(
                f"every model includes the factor {self.factor} "
                f"(reference level {self.reference!r})"
            )
        lines.append("")
        names = [" + ".join(f.predictors) or "1 (intercept only)" for f in self.fits]
        w = max(len("model"), *(len(s) for s in names))
        lines.append(
            f"{'model':<{w}}  {'k':>3}  {'logLik':>10}  {'AICc':>10}  {'dAICc':>7}  {'weight':>6}"
        )
        for s, f, d, wt in zip(names, self.fits, self.delta, self.weights, strict=True):
            lines.append(
                f"{s:<{w}}  {f.k:>3}  {f.loglik:>10.3f}  {f.aicc:>10.3f}  {d:>7.2f}  {wt:>6.3f}"
            )
        lines.append("")
        lines.append("Coefficients (log scale):")
        for s, f in zip(names, self.fits, strict=True):
            parts = [
                f"{t['term']} {number(t['estimate'])} [{number(t['ci'][0])}, {number(t['ci'][1])}]"
                for t in f.terms
            ]
            extra = f"; lambda {f.lambda_:.3f}" if f.lambda_ is not None else ""
            lines.append(f"  {s}: " + ", ".join(parts) + extra)
        if self.tests:
            lines.append("")
            lines.append("Likelihood-ratio tests of nested models (chi-squared):")
            for t in self.tests:
                lines.append(
                    f"  {t['smaller']} within {t['larger']}: LR = {number(t['statistic'])}, "
                    f"df = {t['df']}, p = {number(t['p'])}"
                )
        lines += self._averaged_lines()
        lines.append("")
        lines += textwrap.wrap(WEIGHT_CAUTION, 100)
        return "\n".join(lines)

    def _averaged_lines(self) -> list[str]:
        """The model-averaged coefficients and when they make sense."""
        rows = model_average(self.fits, self.weights)
        if not rows:
            return []
        w = max(len("term"), *(len(r["term"]) for r in rows))
        lines = [
            "",
            "Model-averaged coefficients (over the models containing each term):",
            f"  {'term':<{w}}  {'estimate':>10}  {'SE (uncond.)':>12}  {'models':>6}  "
            f"{'sum of weights':>14}",
        ]
        lines += [
            f"  {r['term']:<{w}}  {number(r['estimate']):>10}  {number(r['se']):>12}  "
            f"{r['models']:>6}  {number(r['weight']):>14}"
            for r in rows
        ]
        return lines + ["", *textwrap.wrap(AVERAGING_CAUTION, 100)]


def _label(predictors: Sequence[str]) -> str:
    return " + ".join(predictors) or "1"


def compare(
    table: pd.DataFrame,
    y: str,
    models: Sequence[Sequence[str] | str],
    *,
    factor: str | None = None,
    method: str = "ols",
    log: str = "10",
    ci: float = 0.95,
    tree: Any = None,
    lambda_: Any = "ml",
    tree_labels: Mapping[str, str] | None = None,
    taxon_col: str = "taxon",
    linear: Sequence[str] | None = None,
) -> Comparison:
    """Compare candidate models of *y*: each a list of predictors (or a comma-separated
    string; ``"1"`` or ``""`` for the intercept-only model), all log-transformed like y.

    Every model is fitted by maximum likelihood (OLS, or PGLS with Pagel's lambda estimated
    in each model or fixed) on the same taxa: those with y, every predictor of every model,
    the *factor* (in every model, treatment coding) and, for pgls, a tip. Returns the models
    sorted by AICc with Delta AICc, Akaike weights and the likelihood-ratio tests of every
    nested pair (chi-squared with the difference in k as df).

    *table* is one row per taxon: a per-taxon table (:func:`comparo.tabulate`) or, for the
    derived bounds and ratios as predictors, the derived table (:func:`comparo.derive`),
    which ``comparo compare`` builds itself from a dataset folder. Values in the table's
    canonical units; coefficients are on the log scale of *log*, except for predictors named
    in *linear* and ``temperature_c`` (degrees Celsius), which enter untransformed
    (:func:`comparo.fitting.multiple.linear_predictors`).
    """
    sets = [parse_model(m) for m in models]
    if len(sets) < 2:
        raise UsageError("a comparison needs at least two models (give --model more than once)")
    seen: dict[tuple[str, ...], int] = {}
    for i, s in enumerate(sets):
        key = tuple(sorted(s))
        if key in seen:
            raise UsageError(f"model {i + 1} ({_label(s)}) repeats model {seen[key] + 1}")
        seen[key] = i
    log = check_options(log, ci, method, max(len(s) for s in sets))
    if method == "pgls" and tree is None:
        raise UsageError("method pgls needs a tree")
    columns = list(dict.fromkeys(c for s in sets for c in s))
    d = design(
        table,
        y,
        columns,
        factor=factor,
        log=log,
        taxon_col=taxon_col,
        tree=tree if method == "pgls" else None,
        tree_labels=tree_labels,
        linear=linear_predictors(columns, linear, y),
    )
    fits = [fit_design(d, y, s, method=method, lambda_=lambda_, ci=ci, log=log) for s in sets]
    fits.sort(key=lambda f: f.aicc)
    best = fits[0].aicc
    weights = akaike_weights([f.aicc for f in fits])
    return Comparison(
        y,
        method,
        len(d.y),
        factor,
        d.reference,
        log,
        tuple(fits),
        tuple(f.aicc - best for f in fits),
        tuple(weights),
        tuple(_nested_tests(fits)),
        d.excluded,
        lambda_ if method == "pgls" else "none",
    )


def parse_model(model: Sequence[str] | str) -> list[str]:
    """A model given as 'X1,X2' (or a list) to its predictor names; '1' is the intercept-only
    model."""
    parts = model.split(",") if isinstance(model, str) else list(model)
    names = [p.strip() for p in parts if p.strip() and p.strip() != "1"]
    if len(set(names)) != len(names):
        raise UsageError(f"model {model!r} names a predictor twice")
    return names


def _nested_tests(fits: Sequence[MultipleFit]) -> list[dict]:
    """LR = 2(l_large - l_small), chi-squared with k_large - k_small df, for every pair whose
    predictors are a strict subset of the other's (Wilks 1938)."""
    from scipy.special import chdtrc

    out = []
    for a in fits:
        for b in fits:
            if set(a.predictors) < set(b.predictors):
                q = b.k - a.k
                stat = max(0.0, 2.0 * (b.loglik - a.loglik))
                out.append(
                    {
                        "smaller": _label(a.predictors),
                        "larger": _label(b.predictors),
                        "statistic": _f(stat),
                        "df": q,
                        "p": _f(chdtrc(q, stat)),
                    }
                )
    return out
