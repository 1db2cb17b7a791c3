"""Survey progress on the terminal: a rich progress bar on a terminal, plain log lines otherwise.

A command-line helper (it prints): :class:`ConsoleProgress` implements the :class:`vsini.survey.Progress`
methods that :func:`vsini.survey.run_survey` calls. On a terminal it shows a bar with the count, the
rate (stars per second) and the time left; when the output is a file or a pipe it writes one line per
star, ``[12/30] star LAN-012: measured (few_lines)``, so logs stay readable.
"""

from __future__ import annotations

import sys
import time

__all__ = ["ConsoleProgress"]


class ConsoleProgress:
    """Progress of a survey on a stream.

    Parameters
    ----------
    stream : file-like, optional
        Where to write (default: standard error, so the standard output stays clean for data).
    bar : bool, optional
        Force the progress bar (True) or plain lines (False). Default: a bar when ``stream`` is a terminal.
    quiet : bool
        Print only the final summary line.
    """

    def __init__(self, stream=None, *, bar=None, quiet=False):
        self.stream = stream if stream is not None else sys.stderr
        self.bar = bool(bar) if bar is not None else bool(getattr(self.stream, "isatty", lambda: False)())
        self.quiet = quiet
        self._total = 0
        self._count = 0
        self._done = 0
        self._start = 0.0
        self._progress = None
        self._task = None

    # -- Progress protocol -----------------------------------------------------------------------------

    def start(self, total, done=0):
        """Begin: ``total`` stars, ``done`` already finished in an earlier run."""
        self._total, self._count, self._done, self._start = int(total), int(done), int(done), time.monotonic()
        if self.quiet:
            return
        if done:
            self._line(f"resuming: {done} of {total} stars already in the journal")
        if self.bar:
            from rich.console import Console
            from rich.progress import (
                BarColumn,
                MofNCompleteColumn,
                Progress,
                TextColumn,
                TimeElapsedColumn,
                TimeRemainingColumn,
            )

            console = Console(file=self.stream)
            self._progress = Progress(
                TextColumn("[bold]survey"), BarColumn(), MofNCompleteColumn(),
                TextColumn("{task.fields[rate]}"), TextColumn("elapsed"), TimeElapsedColumn(),
                TextColumn("left"), TimeRemainingColumn(), TextColumn("{task.fields[last]}"),
                console=console, transient=False,
            )
            self._progress.start()
            self._task = self._progress.add_task("survey", total=total, completed=done, rate="", last="")

    def advance(self, star, status, detail=""):
        """One star finished."""
        self._count += 1
        if self.quiet:
            return
        if self._progress is not None:
            self._progress.update(self._task, advance=1, rate=self._rate(), last=f"{star}: {status}")
            if status == "failed":
                self._progress.console.print(f"  {star}: failed: {detail}", markup=False, highlight=False)
            return
        text = f"[{self._count}/{self._total}] star {star}: {status}"
        if detail:
            text += f" ({detail})"
        self._line(text)

    def stage(self, text):
        """A step after the stars."""
        if self.quiet:
            return
        if self._progress is not None:
            self._progress.console.print(text, markup=False, highlight=False)
        else:
            self._line(text)

    def finish(self, summary):
        """Stop the bar and print the one-line summary."""
        if self._progress is not None:
            self._progress.stop()
            self._progress = None
        self._line(f"{summary.line()} in {summary.elapsed_s:.1f} s")

    # -- helpers ---------------------------------------------------------------------------------------

    def _rate(self):
        dt = time.monotonic() - self._start
        return f"{(self._count - self._done) / dt:.2f} stars/s" if dt > 0 else ""

    def _line(self, text):
        print(text, file=self.stream, flush=True)
