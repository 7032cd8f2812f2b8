"""Figures rendered in a forked child are the bytes matplotlib's own ``savefig`` makes in the
calling process (comparo.base.figure_style.render), and a failure in the child is not lost:
the figure is drawn again where the result is read, and its error is raised there.
Invented data."""

from __future__ import annotations

import sys

import pandas as pd
import pytest
from matplotlib.artist import Artist

from comparo.base.figure_style import render
from comparo.report.figures import rendering, source_chart

SOURCES = pd.DataFrame({"source_id": ["A1", "B2", "C3"], "values": [12, 5, 7], "taxa": [4, 2, 3]})

forking = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="fork is used on Linux")


@forking
def test_a_forked_render_gives_the_bytes_of_savefig_here():
    import matplotlib.pyplot as plt

    direct = render(source_chart(SOURCES))
    open_before = set(plt.get_fignums())
    pending = [rendering.render_later(source_chart(SOURCES), jobs=2) for _ in range(3)]
    assert all(isinstance(p, rendering.Pending) for p in pending)
    assert set(plt.get_fignums()) == open_before  # many figures do not pile up in pyplot
    for p in pending:
        png, svg = p
        assert (png, svg) == direct
        assert png.startswith(b"\x89PNG") and b"<svg" in svg


def test_one_job_renders_in_the_calling_process():
    out = rendering.render_later(source_chart(SOURCES), jobs=1)
    assert isinstance(out, tuple) and out == render(source_chart(SOURCES))


class _Broken(Artist):
    def draw(self, renderer):
        raise RuntimeError("this artist cannot be drawn")


@forking
def test_an_error_in_the_child_is_raised_where_the_result_is_read():
    fig = source_chart(SOURCES)
    fig.axes[0].add_artist(_Broken())
    pending = rendering.render_later(fig, jobs=2)
    with pytest.raises(RuntimeError, match="cannot be drawn"):
        pending.result()
