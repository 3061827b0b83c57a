"""Progress of long work, shown by the command line (rich bars on a terminal, plain lines otherwise).

Pipeline functions report steps here; nothing is shown unless the CLI installs
a reporter, so library use and tests stay silent.  Steps may come from several
threads (Prefect's thread runner).
"""

from __future__ import annotations

import sys
import threading

_reporter = None
_lock = threading.Lock()


class PlainReporter:
    """One line per step: for cron, CI and log files."""

    def __init__(self, stream=None):
        self.stream = stream or sys.stdout
        self.total: dict[str, int] = {}
        self.done: dict[str, int] = {}

    def expect(self, stage: str, total: int) -> None:
        self.total[stage] = self.total.get(stage, 0) + total
        self.done.setdefault(stage, 0)

    def step(self, stage: str, what: str) -> None:
        self.done[stage] = self.done.get(stage, 0) + 1
        total = self.total.get(stage)
        count = f"{self.done[stage]}/{total}" if total else str(self.done[stage])
        print(f"  {stage} {count}: {what}", file=self.stream, flush=True)

    def close(self) -> None:
        pass


class RichReporter:
    """Progress bars on an interactive terminal."""

    def __init__(self):
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

        self.progress = Progress(TextColumn("{task.description:<10}"), BarColumn(), MofNCompleteColumn(),
                                 TextColumn("{task.fields[what]}"), TimeElapsedColumn(), transient=False)
        self.tasks: dict[str, int] = {}
        self.progress.start()

    def expect(self, stage: str, total: int) -> None:
        if stage not in self.tasks:
            self.tasks[stage] = self.progress.add_task(stage, total=total, what="")
        else:
            t = self.tasks[stage]
            self.progress.update(t, total=(self.progress.tasks[t].total or 0) + total)

    def step(self, stage: str, what: str) -> None:
        if stage not in self.tasks:
            self.expect(stage, 0)
        self.progress.update(self.tasks[stage], advance=1, what=what)

    def close(self) -> None:
        self.progress.stop()


def install(*, interactive: bool | None = None):
    """Show progress from now on: rich bars if ``interactive`` (default: stdout is a terminal)."""
    global _reporter
    interactive = sys.stdout.isatty() if interactive is None else interactive
    _reporter = RichReporter() if interactive else PlainReporter()
    return _reporter


def install_reporter(reporter) -> None:
    """Show progress through ``reporter`` (any object with ``expect``, ``step`` and ``close``), e.g. a web page's."""
    global _reporter
    with _lock:
        _reporter = reporter


def uninstall() -> None:
    global _reporter
    if _reporter is not None:
        _reporter.close()
    _reporter = None


def expect(stage: str, total: int) -> None:
    """Announce ``total`` more steps of ``stage`` ("read", "qc")."""
    if _reporter is not None and total:
        with _lock:
            _reporter.expect(stage, total)


def step(stage: str, what: str) -> None:
    """One step of ``stage`` is done (``what``: a file or deployment name)."""
    if _reporter is not None:
        with _lock:
            _reporter.step(stage, what)
