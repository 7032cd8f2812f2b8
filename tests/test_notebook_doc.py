"""docs/notebook.md runs as written, and the result objects follow the notebook conventions."""

from __future__ import annotations

import math
import re
from pathlib import Path

import pandas as pd
import pytest

DOC = Path(__file__).resolve().parents[1] / "docs" / "notebook.md"


def _blocks() -> list[str]:
    return re.findall(r"```python\n(.*?)```", DOC.read_text(encoding="utf-8"), flags=re.S)


def test_notebook_page_runs(tmp_path, monkeypatch):
    """Every python block of the page, in order, in one namespace (as cells of one notebook)."""
    monkeypatch.chdir(tmp_path)
    blocks = _blocks()
    assert len(blocks) >= 5
    ns: dict = {}
    for i, code in enumerate(blocks):
        try:
            exec(compile(code, f"{DOC.name} block {i + 1}", "exec"), ns)
        except Exception as exc:  # pragma: no cover - the message names the block
            pytest.fail(f"{DOC.name} block {i + 1} failed: {exc!r}")
    for name in ("audit", "res", "sens"):
        html = ns[name]._repr_html_()
        assert html.startswith("<div") or html.startswith("<p"), name
        assert isinstance(ns[name].to_frame(), pd.DataFrame) and isinstance(
            ns[name].to_dict(), dict
        ), name


def test_fit_html_shows_the_estimates_and_escapes_labels():
    from comparo.fitting import fit

    t = pd.DataFrame(
        {
            "taxon": ["<b>a</b>", "b", "c", "d", "e"],
            "m": [1, 10, 100, 1000, 1e4],
            "f": [2, 4.1, 7.9, 16.2, 33.0],
            "g": ["<x>", "<x>", "y", "y", "y"],
        }
    )
    r = fit(t, "m", "f", "ols", against=0.3)
    html = r._repr_html_()
    assert "OLS fit of f on m" in html and "slope" in html and "slope = 0.3?" in html
    assert f"{r.slope:.5g}" in html
    assert "<b>a</b>" not in html  # labels from a data file never become markup


def test_plot_returns_the_axes_it_drew_on():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from comparo.fitting import fit

    t = pd.DataFrame(
        {
            "taxon": list("abcdefgh"),
            "m": [1, 3, 10, 30, 100, 300, 1000, 3000],
            "f": [2, 2.9, 4.1, 5.8, 7.9, 11.5, 16.2, 23.0],
        }
    )
    r = fit(t, "m", "f", "sma")
    fig, ax = plt.subplots()
    assert r.plot(ax=ax) is ax
    line = ax.get_lines()[1]  # after the points: the fitted line y = 10^a x^b on log axes
    x, y = line.get_data()
    assert ax.get_xscale() == "log"
    assert y[0] == pytest.approx(10 ** (r.intercept + r.slope * math.log10(x[0])))
    assert (
        len(ax.get_lines()[0].get_xdata()) == 8
    )  # every point drawn, none dropped for lack of a basis
    own = r.plot()
    assert own is not ax and own.figure is not fig
    plt.close("all")
