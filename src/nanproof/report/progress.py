"""Progress on standard error for long runs (never in the report)."""
from __future__ import annotations

import time


class Bar:
    """Shows a rich progress bar once a run has taken more than ``delay`` seconds."""

    def __init__(self, delay: float = 1.0) -> None:
        self.start = time.monotonic()
        self.delay = delay
        self._progress = None
        self._task = None

    def update(self, done: int, total: int) -> None:
        if self._progress is None:
            if time.monotonic() - self.start < self.delay or done >= total:
                return
            from rich.console import Console
            from rich.progress import (
                BarColumn,
                MofNCompleteColumn,
                Progress,
                TextColumn,
                TimeRemainingColumn,
            )

            self._progress = Progress(TextColumn("scanning"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn(), console=Console(stderr=True), transient=True)
            self._progress.start()
            self._task = self._progress.add_task("scan", total=total)
        self._progress.update(self._task, completed=done, total=total)

    def close(self) -> None:
        if self._progress is not None:
            self._progress.stop()
