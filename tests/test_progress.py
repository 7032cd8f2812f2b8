"""comparo.base.progress.ProgressBar, the one progress bar, checked through rich's own Progress
(its task records what was counted: rich documentation, "Progress Display")."""

from __future__ import annotations

from comparo.base.progress import ProgressBar


def test_bar_counts_every_step_and_leaves_standard_output_alone(capsys):
    with ProgressBar(True, "draws", 10) as bar:
        bar.advance(4)
        bar.advance(6, description="last draws")
        task = bar._bar.tasks[0]
        assert (task.completed, task.total, task.description) == (10, 10, "last draws")
    assert bar._bar is None  # stopped on leaving
    assert capsys.readouterr().out == ""


def test_bar_off_or_below_its_minimum_does_nothing():
    for bar in (ProgressBar(False, "x", 100), ProgressBar(True, "x", 1, minimum=2)):
        with bar as b:
            b.advance(5)
            assert b._bar is None
