"""Behaviour of comparo.flags: planted outliers, rule bookkeeping, robust and LTS evidence."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from comparo.fit import fit
from comparo.flags import OUTLIER_RULES, bonferroni_cut, flag_points


def _planted(seed: int, n: int = 100):
    rng = np.random.default_rng(seed)
    x = rng.normal(0, 1, n)
    y = 0.5 + 0.75 * x + rng.normal(0, 0.1, n)
    planted = [3, 40, 77]
    y[planted] += np.array([1.2, -1.0, 1.5])
    return x, y, [f"p{i}" for i in range(n)], planted


def test_planted_outliers_are_flagged_and_few_clean_points_are():
    """Common practice check: 20 seeded data sets (default_rng(100 + k)) of 100 points with 3 planted vertical
    outliers (10-15 residual sd): every planted point is flagged by the Bonferroni rule, and at most 5% of the
    clean points across all sets are flagged as outliers."""
    clean_flagged = clean_total = 0
    for k in range(20):
        x, y, labels, planted = _planted(100 + k)
        rep = flag_points(x, y, labels)
        out = set(rep.labels(("bonferroni",)))
        assert {labels[i] for i in planted} <= out
        clean_flagged += len(out - {labels[i] for i in planted})
        clean_total += len(labels) - len(planted)
    assert clean_flagged / clean_total <= 0.05


def test_flags_never_remove_points():
    x, y, labels, planted = _planted(1)
    t = pd.DataFrame({"taxon": labels, "m": 10**x, "f": 10**y})
    r = fit(t, "m", "f", "ols")
    assert r.n == 100 and r.excluded == []
    assert {"p3", "p40", "p77"} <= {o["label"] for o in r.outliers}
    assert all(set(o) == {"label", "reason", "statistic"} for o in r.outliers)


def test_bonferroni_cut_grows_with_n():
    assert bonferroni_cut(20) < bonferroni_cut(200) < bonferroni_cut(2000)
    assert bonferroni_cut(28, alpha=0.10) < bonferroni_cut(28, alpha=0.05)


def test_cooks_rule_reports_the_strongest_cut_once():
    x = np.r_[np.linspace(0, 1, 15), 5.0]
    y = np.r_[np.linspace(0, 1, 15) + 0.01 * np.sin(np.arange(15)), -3.0]
    rep = flag_points(x, y, [f"s{i}" for i in range(16)])
    cook = [f for f in rep.flags if f.rule == "cooks_d" and f.label == "s15"]
    assert len(cook) == 1 and "F(0.5" in cook[0].reason and cook[0].statistic > rep.cuts["cooks_f"]


def test_weight_and_lts_rules():
    x = np.arange(10.0)
    y = x.copy()
    w = np.ones(10)
    w[2] = 0.3
    std = np.zeros(10)
    std[5] = -4.0
    rep = flag_points(x, y + 0.01 * np.cos(x), [str(i) for i in range(10)], weights=w, lts_std=std)
    assert rep.labels(("robust_weight",)) == ["2"]
    assert rep.labels(("lts_residual",)) == ["5"]
    assert set(rep.labels(OUTLIER_RULES)) == {"2", "5"}
    tab = rep.to_frame()
    assert {"label", "leverage", "studentized", "cooks_d", "weight", "lts_std"} <= set(tab.columns)
    assert "flag(s)" in rep.summary()
    assert rep.to_dict()["cuts"]["leverage"] == pytest.approx(0.4)
