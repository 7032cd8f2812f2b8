"""What a fit's printed verdicts may say: grouped fits whose slopes differ, fits on few
taxa, weak correlations for model II lines, and the measurement-error sentence.

Independent routes: statsmodels (the OLS interaction F test and per-group OLS slopes),
numpy (Pearson r). Invented, seeded data.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from comparo.fitting import fit
from comparo.fitting.source_sensitivity import make_verdict
from comparo.report.render import summary_rows


def _groups(slopes: tuple[float, float], seed: int = 3, n: int = 20) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 2, 2 * n)
    g = np.repeat(["A", "B"], n)
    y = (
        0.2
        + np.where(g == "A", slopes[0], slopes[1]) * x
        + np.where(g == "B", 0.3, 0.0)
        + rng.normal(0, 0.08, 2 * n)
    )
    return pd.DataFrame({"taxon": [f"s{i}" for i in range(2 * n)], "m": 10**x, "f": 10**y, "g": g})


def _statsmodels(t: pd.DataFrame) -> tuple[float, dict[str, float]]:
    """Interaction F test p (anova of nested OLS models) and per-group OLS slopes."""
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    d = pd.DataFrame({"lx": np.log10(t["m"]), "ly": np.log10(t["f"]), "g": t["g"]})
    small = smf.ols("ly ~ lx + g", d).fit()
    big = smf.ols("ly ~ lx * g", d).fit()
    p = float(anova_lm(small, big)["Pr(>F)"].iloc[1])
    slopes = {k: float(smf.ols("ly ~ lx", d[d["g"] == k]).fit().params["lx"]) for k in ("A", "B")}
    return p, slopes


def test_slopes_differ_no_common_slope_headline_and_no_elevation_test():
    """statsmodels: the interaction F test rejects equal slopes; comparo then shows no common
    exponent and no elevation test, and its summary row lists the group slopes."""
    t = _groups((0.4, 1.2))
    p_sm, slopes_sm = _statsmodels(t)
    assert p_sm < 1e-6
    r = fit(t, "m", "f", "ols", by="g")
    gt = r.group_tests
    assert gt["common_slope"]["p"] == pytest.approx(p_sm, rel=1e-6, abs=1e-300)
    assert gt["slopes_differ"] is True and gt["elevation"] is None and gt["shift"] is None
    assert "common slope" in gt["omitted"]
    for g in r.groups:
        assert g["slope"] == pytest.approx(slopes_sm[g["group"]], rel=1e-9)
    text = r.summary()
    assert "differ in slope" in text and "common exponent" not in text
    assert "same height" not in text
    assert "(common)" not in set(r.to_frame()["group"].dropna())
    json.dumps(r.to_dict(), allow_nan=False)
    (row,) = summary_rows([{"id": "a", "method": "ols", "result": r.to_dict()}], {})
    assert row["slope"] is None and row["differ"]
    assert "differ in slope" in row["test"] and "common slope " not in row["test"]
    for name, b in slopes_sm.items():
        assert f"{name} {b:.3g}"[:6] in row["test"]
    # the scaling figure's legend names the pooled line as such
    from comparo.report import figures as plots

    fig = plots.scaling_plot(r, pd.DataFrame(list(r.points)), by="g", seed=1)
    texts = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert any(t.startswith("all taxa pooled (the groups differ in slope): b = ") for t in texts)
    # the report command's printed summary does not headline the pooled slope either
    from comparo.report.result import ReportResult

    printed = ReportResult("out", True, 0, 0, fits=({"id": "a", "result": r.to_dict()},)).summary()
    assert "differ in slope" in printed and f"slope {r.slope:.4g}"[:10] not in printed


def test_slopes_equal_elevation_shown_with_its_assumption():
    """statsmodels: equal slopes not rejected; the elevation test is shown, saying it
    assumes the common slope."""
    t = _groups((0.8, 0.8), seed=4)
    p_sm, _ = _statsmodels(t)
    assert p_sm > 0.05
    r = fit(t, "m", "f", "ols", by="g")
    gt = r.group_tests
    assert gt["slopes_differ"] is False and gt["elevation"] is not None
    assert "assume" in gt["assumes"]
    text = r.summary()
    assert "common exponent" in text and "assuming the common slope" in text
    (row,) = summary_rows([{"id": "a", "method": "ols", "result": r.to_dict()}], {})
    assert row["slope"] == pytest.approx(r.slope) and "assuming the common slope" in row["test"]


@pytest.mark.parametrize("n, warned", [(7, True), (9, True), (10, False)])
def test_few_taxa_caution_in_text_json_and_report(n, warned):
    """Rule of thumb (common practice): a scaling exponent from fewer than 10 taxa carries a
    caution wherever the fit is shown."""
    rng = np.random.default_rng(n)
    x = rng.uniform(0, 3, n)
    f = 10 ** (0.5 * x + rng.normal(0, 0.05, n))
    t = pd.DataFrame({"taxon": [f"s{i}" for i in range(n)], "m": 10**x, "f": f})
    for method in ("ols", "sma"):
        r = fit(t, "m", "f", method)
        d = r.to_dict()
        few = [c for c in d.get("cautions", []) if c["rule"] == "few_taxa"]
        assert bool(few) is warned
        if warned:
            assert few[0]["n"] == n and few[0]["minimum"] == 10
            assert "CAUTION" in r.summary() and f"only {n} taxa" in r.summary()
            (row,) = summary_rows([{"id": "a", "method": method, "result": d}], {})
            assert f"only {n} taxa" in row["caution"]


def test_few_taxa_caution_for_a_small_group():
    t = _groups((0.8, 0.8), seed=5, n=12)
    t = t.iloc[: 12 + 8]  # group B keeps 8 taxa
    r = fit(t, "m", "f", "sma", by="g")
    groups = {c["group"] for c in r.to_dict()["cautions"] if c["rule"] == "few_taxa"}
    assert groups == {"B"}


@pytest.mark.parametrize("method", ["sma", "ma"])
def test_weak_correlation_caution_is_a_json_key(method):
    """numpy's Pearson r below 0.3 (the cut-off is common practice): the caution is in the
    JSON with r; above it there is none; OLS never carries it."""
    rng = np.random.default_rng(8)
    x = rng.uniform(0, 2, 40)
    weak = pd.DataFrame(
        {"taxon": [f"s{i}" for i in range(40)], "m": 10**x, "f": 10 ** rng.normal(0, 0.5, 40)}
    )
    r_np = float(np.corrcoef(x, np.log10(weak["f"]))[0, 1])
    assert abs(r_np) < 0.3
    d = fit(weak, "m", "f", method).to_dict()
    (c,) = [c for c in d["cautions"] if c["rule"] == "weak_correlation"]
    assert c["r"] == pytest.approx(r_np, rel=1e-9) and c["threshold"] == 0.3
    assert "cautions" not in fit(weak, "m", "f", "ols").to_dict()
    strong = weak.assign(f=10 ** (0.8 * x + rng.normal(0, 0.1, 40)))
    assert "cautions" not in fit(strong, "m", "f", method).to_dict()


@pytest.mark.parametrize("share", [0.02, 0.08, 0.2, 0.45, 0.7])
def test_measurement_error_sentence_uses_one_measure(share):
    """One measure throughout: the share of the slope variance, never an SE increase."""
    jack = {"ratio": 1.0}
    v = make_verdict(None, None, jack, {"share": share, "points": 20})
    assert "slope SE" not in v
    if share >= 0.1:
        assert f"{100 * share:.0f}% of the slope variance" in v
    else:
        assert "under 10% of the slope variance" in v


def test_a_folder_is_never_called_a_plain_table():
    """The report's sensitivity of a fit on a derived quantity of a dataset folder (the
    demo) runs on the derived table; its verdict says why the source-level parts are
    missing without calling the folder a plain table."""
    from support import DEMO

    import comparo
    from comparo.report.per_fit import run_sensitivity

    ds = comparo.load(DEMO)
    table = comparo.tabulate(ds)
    data = comparo.derive(table, ds.settings.get("derive", {}))
    a = {"x": "frequency_hydraulic_bound", "y": "frequency_observed"}
    res = fit(data, a["x"], a["y"], "ols")
    s, notes = run_sensitivity(ds, table, data, a, res, {}, 1, 0, True)
    assert "plain table" not in s.verdict and "plain table" not in " ".join(s.unavailable)
    assert "source-level checks not available (frequency_hydraulic_bound is derived" in s.verdict
