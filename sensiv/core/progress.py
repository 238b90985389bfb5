"""A progress bar on stderr for long loops (bootstraps, Monte Carlo priors), drawn by rich.

Quiet unless stderr is a terminal, the caller enabled it (the CLI disables it under
``--json``) and the loop has run for :data:`PROGRESS_AFTER` seconds, so JSON output, logs and
quick runs stay clean.  The bar disappears when the loop ends.

Examples
--------
>>> bar = Progress(total=3, label="bootstrap", enabled=False)
>>> for done in range(1, 4):
...     bar.update(done)
>>> bar.close()
"""

from __future__ import annotations

import contextlib
import contextvars
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

PROGRESS_AFTER = 2.0
"""Seconds a loop must have run before its bar is shown."""


SILENT: contextvars.ContextVar[bool] = contextvars.ContextVar("sensiv_progress_silent",
                                                              default=False)
"""True while every bar is off (the CLI sets it for a command run with ``--json``)."""


@contextlib.contextmanager
def silenced(silent: bool = True) -> Iterator[None]:
    """Turn every progress bar off inside the block (when ``silent``)."""
    token = SILENT.set(silent or SILENT.get())
    try:
        yield
    finally:
        SILENT.reset(token)


def stderr_is_terminal() -> bool:
    """Whether stderr is an interactive terminal."""
    stream = sys.stderr
    return bool(stream is not None and hasattr(stream, "isatty") and stream.isatty())


@dataclass
class Progress:
    """Progress of a loop of ``total`` steps, shown as a rich bar labelled ``label``.

    Call :meth:`update` with the number of steps done and :meth:`close` at the end (or use
    the object as a context manager).
    """

    total: int
    label: str = "resampling"
    enabled: bool = True
    _start: float = field(default=0.0, init=False, repr=False)
    _bar: Any = field(default=None, init=False, repr=False)
    _task: Any = field(default=None, init=False, repr=False)
    _show: bool = field(default=False, init=False, repr=False)

    def __post_init__(self) -> None:
        self._start = time.monotonic()
        self._show = bool(self.enabled) and not SILENT.get() and stderr_is_terminal()

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def update(self, done: int) -> None:
        """Record ``done`` steps out of :attr:`total`."""
        if not self._show:
            return
        if self._bar is None:
            if time.monotonic() - self._start < PROGRESS_AFTER:
                return
            self._open()
        self._bar.update(self._task, completed=done)

    def _open(self) -> None:
        from rich.console import Console
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress as RichProgress,
                                   TextColumn, TimeRemainingColumn)

        self._bar = RichProgress(TextColumn("{task.description}"), BarColumn(),
                                 MofNCompleteColumn(), TimeRemainingColumn(),
                                 console=Console(file=sys.stderr), transient=True)
        self._bar.start()
        self._task = self._bar.add_task(self.label, total=self.total)

    def close(self) -> None:
        """Remove the bar (if it was shown)."""
        if self._bar is not None:
            self._bar.stop()
            self._bar = None
