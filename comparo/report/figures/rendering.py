"""Rendering figures in forked processes while the report goes on with its analyses.

:func:`render_later` forks a child that renders the figure it inherits (the same
:func:`comparo.base.figure_style.render`, on the same objects, so the bytes are the ones the
parent would have made) and sends its PNG and SVG bytes back through a pipe; the parent
carries on and collects them when it reads the result. At most :data:`CHILDREN_PER_CORE`
children per core the process may use (``os.sched_getaffinity``) run at once, each at a
lower priority (:data:`CHILD_NICENESS`) than the caller; with one core, or where ``fork`` is
not the way to start processes (anything but Linux), the figure is rendered at once in the
calling process. A child that fails is replaced by rendering in the parent, whose error (if
any) is then raised where the result is read.
"""

from __future__ import annotations

import os
import sys
from typing import TYPE_CHECKING

from comparo.base.figure_style import pyplot, render

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

_running: list[Pending] = []
#: Children rendering at once per usable core: enough that the caller rarely waits for one.
CHILDREN_PER_CORE = 4
#: Children run this much nicer than the caller, whose analyses make the next figures: the
#: caller keeps a core, the children share what is left and every core once it is done.
CHILD_NICENESS = 5


def render_jobs() -> int:
    """How many figures may render at once in forked children: the cores this process may
    use, or 1 (render in the calling process) where forking is not used."""
    if not sys.platform.startswith("linux") or not hasattr(os, "fork"):
        return 1
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # pragma: no cover - every Linux has it
        return os.cpu_count() or 1


class Pending:
    """The PNG and SVG bytes of a figure being rendered by a forked child. Reading them
    (``png, svg = pending``, ``pending[0]`` or :meth:`result`) waits for the child."""

    def __init__(self, fig: Figure, pid: int, fd: int) -> None:
        self._fig, self._pid, self._fd = fig, pid, fd
        self._value: tuple[bytes, bytes] | None = None

    def result(self) -> tuple[bytes, bytes]:
        """``(png, svg)`` bytes, as :func:`comparo.base.figure_style.render` returns them."""
        if self._value is None:
            data, ok = self._collect()
            if ok and len(data) >= 8:
                n = int.from_bytes(data[:8], "big")
                self._value = (data[8 : 8 + n], data[8 + n :])
            else:  # the child failed: render here, where an error reaches the caller
                self._value = render(self._fig)
            self._fig = None
        return self._value

    def _collect(self) -> tuple[bytes, bool]:
        chunks = []
        try:
            while chunk := os.read(self._fd, 1 << 20):
                chunks.append(chunk)
        finally:
            os.close(self._fd)
            _, status = os.waitpid(self._pid, 0)
            if self in _running:
                _running.remove(self)
        return b"".join(chunks), os.waitstatus_to_exitcode(status) == 0

    def __iter__(self):
        return iter(self.result())

    def __getitem__(self, i: int) -> bytes:
        return self.result()[i]

    def __len__(self) -> int:
        return 2


def _child(fig: Figure, write: int) -> None:  # pragma: no cover - runs in the forked child
    code = 1
    try:
        os.nice(CHILD_NICENESS)
        png, svg = render(fig)
        view = memoryview(len(png).to_bytes(8, "big") + png + svg)
        while view:
            view = view[os.write(write, view) :]
        code = 0
    finally:
        os._exit(code)  # no exit handlers, no buffered output of the parent flushed twice


def render_later(fig: Figure, jobs: int | None = None) -> Pending | tuple[bytes, bytes]:
    """PNG and SVG bytes of *fig* (closed in pyplot at once), rendered in a forked child when
    *jobs* (default :func:`render_jobs`) is above 1; else rendered now, as :func:`render`.
    With :data:`CHILDREN_PER_CORE` x *jobs* children running, the oldest is waited for first."""
    jobs = render_jobs() if jobs is None else jobs
    if jobs < 2:
        return render(fig)
    while len(_running) >= CHILDREN_PER_CORE * jobs:
        _running[0].result()
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # pragma: no cover - the child
        os.close(read)
        _child(fig, write)
    os.close(write)
    pyplot().close(fig)  # out of pyplot's list of open figures; still drawable if the child fails
    pending = Pending(fig, pid, read)
    _running.append(pending)
    return pending


def finish_renders() -> None:
    """Wait for every figure still rendering (their bytes are kept by their :class:`Pending`)."""
    while _running:
        _running[0].result()
