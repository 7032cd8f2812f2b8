"""The one progress bar of comparo: rich's, transient, on standard error.

Long steps (bootstrap resamples, Monte Carlo draws, leave-one-source-out refits, the steps of
a report) show it when the caller asks (a terminal); otherwise it does nothing and costs
nothing (rich is imported only when the bar is shown). Standard output is never touched, so a
command's output is the same with or without the bar.
"""

from __future__ import annotations

from typing import Any


class ProgressBar:
    """A context manager: ``with ProgressBar(on, "draws", total) as bar: bar.advance(k)``.

    *on* false (or *total* below *minimum*) gives a bar that does nothing. The bar shows the
    description, the bar, ``done/total`` and the time remaining, and disappears when done.
    """

    def __init__(self, on: bool, description: str, total: int, minimum: int = 1) -> None:
        self.on = bool(on) and total >= minimum
        self.description = description
        self.total = int(total)
        self._bar: Any = None
        self._task: Any = None

    def __enter__(self) -> ProgressBar:
        if self.on:
            from rich.console import Console
            from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

            self._bar = Progress(
                TextColumn("{task.description}"),
                BarColumn(),
                TextColumn("{task.completed}/{task.total}"),
                TimeRemainingColumn(),
                console=Console(stderr=True),
                transient=True,
            )
            self._bar.start()
            self._task = self._bar.add_task(self.description, total=self.total)
        return self

    def advance(self, steps: int = 1, description: str | None = None) -> None:
        """Count *steps* more done; *description* replaces the text before the bar."""
        if self._bar is not None:
            extra = {} if description is None else {"description": description}
            self._bar.update(self._task, advance=steps, **extra)

    def __exit__(self, *exc: Any) -> bool:
        if self._bar is not None:
            self._bar.stop()
            self._bar = None
        return False
