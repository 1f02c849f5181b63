"""The progress display of a running scan (rich, on stderr).

Shown only when asked for (by default when stderr is a terminal), so ``lowfold scan
--json`` prints nothing but its JSON.
"""

from __future__ import annotations

__all__ = ["ScanDisplay"]


class ScanDisplay:
    """Rich progress bar on stderr (done/total, failed, running, elapsed, time left)."""

    def __init__(self, enabled: bool, total: int, done: int, title: str):
        self.progress = None
        if not enabled:
            return
        from rich.console import Console
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                                   TimeElapsedColumn, TimeRemainingColumn)

        console = Console(stderr=True)
        console.print(f"[bold]{title}[/]: {total} points, {done} already stored")
        self.progress = Progress(
            TextColumn("points"), BarColumn(), MofNCompleteColumn(),
            TextColumn("failed [red]{task.fields[failed]}[/]  running {task.fields[running]}"),
            TimeElapsedColumn(), TextColumn("left"), TimeRemainingColumn(),
            console=console)
        self.task = self.progress.add_task("scan", total=total, completed=done, failed=0, running=0)
        self.progress.start()

    def update(self, *, advance: int = 0, **fields):
        if self.progress is not None:
            self.progress.update(self.task, advance=advance, **fields)

    def close(self):
        if self.progress is not None:
            self.progress.stop()
