"""Progress of a compile on the terminal: the step running and the Monte Carlo's share done (rich).

A :class:`Progress` is what ``compile_inventory(progress=...)`` accepts: called as ``progress(done, total)``
during the Monte Carlo, and ``progress.stage(name)`` when a step begins (load, engine, checks, uncertainty,
key categories; tables, workbook, report while the outputs are written). Stages reach it through
:func:`stage`, which does nothing for a plain callable or ``None``.

It draws only when stdout and stderr are terminals and not ``quiet``; otherwise it is silent. It starts
no thread (the display is redrawn at each call), so the report can still be laid out in a forked process.
"""

from __future__ import annotations

import sys
import time


def stage(progress, name: str) -> None:
    """Tell ``progress`` that the step ``name`` begins (if it listens for steps)."""
    hook = getattr(progress, "stage", None)
    if hook is not None:
        hook(name)


class Progress:
    """The current step with its elapsed time, and a bar for the Monte Carlo, on stderr."""

    def __init__(self, quiet: bool = False):
        self.enabled = not quiet and sys.stdout.isatty() and sys.stderr.isatty()
        self._bar = None
        self._task = None
        self._name = ""
        self._started = time.monotonic()
        self._mc_task = None

    def _ensure(self) -> None:
        if self._bar is None:
            from rich.console import Console
            from rich.progress import BarColumn, Progress as Bar, TaskProgressColumn, TextColumn, TimeElapsedColumn

            self._bar = Bar(TextColumn("{task.description}"), BarColumn(), TaskProgressColumn(), TimeElapsedColumn(),
                            console=Console(file=sys.stderr), auto_refresh=False, transient=True,
                            redirect_stdout=False, redirect_stderr=False)
            self._bar.start()

    def stage(self, name: str) -> None:
        if not self.enabled:
            return
        self._ensure()
        if self._task is not None:
            self._bar.update(self._task, completed=1, total=1)
        self._name = name
        self._task = self._bar.add_task(name, total=None)
        self._bar.refresh()

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled or total <= 0:
            return
        self._ensure()
        if self._mc_task is None:
            self._mc_task = self._task if self._task is not None else self._bar.add_task("Monte Carlo", total=total)
            self._bar.update(self._mc_task, total=total)
        self._bar.update(self._mc_task, completed=done)
        self._bar.refresh()

    def close(self) -> None:
        if self._bar is not None:
            self._bar.stop()
            self._bar = None

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
