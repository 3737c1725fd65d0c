"""What the command line does to the terminal: one-line errors, exit codes on signals, held-back
warnings and the progress bar. Only the CLI uses this module; the library never prints.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
from collections.abc import Iterator
from typing import Any, NoReturn

import typer

from .errors import SheetfitError

PROG = "sheetfit"
STAGES = ("reading", "fitting", "checking", "assembling tables", "writing")   # as pipeline.STAGES


def fail(message: str, code: int = 1) -> NoReturn:
    """Print `sheetfit: error: <message>` as one line on stderr and exit with `code`."""
    typer.echo(f"{PROG}: error: {' '.join(str(message).split())}", err=True)
    raise typer.Exit(code)


class Terminated(KeyboardInterrupt):
    """SIGTERM, raised as a KeyboardInterrupt so every cleanup that Ctrl-C runs (temporary files) runs too."""


def _raise_terminated(signum: int, frame: Any) -> NoReturn:
    raise Terminated()


@contextlib.contextmanager
def _sigterm_as_interrupt() -> Iterator[None]:
    """While the command runs, SIGTERM raises Terminated; the previous handler comes back after."""
    try:
        previous = signal.signal(signal.SIGTERM, _raise_terminated)
    except (ValueError, OSError):          # not the main thread: leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@contextlib.contextmanager
def _warnings_held(debug: bool) -> Iterator[None]:
    """Python and library warnings (numpy, xlsxwriter) are recorded, not printed; --debug shows them after."""
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        if debug:
            warnings.simplefilter("always")
        try:
            yield
        finally:
            for w in caught if debug else ():
                text = " ".join(str(w.message).split())
                typer.echo(f"{PROG}: warning: {w.category.__name__}: {text} ({w.filename}:{w.lineno})", err=True)


@contextlib.contextmanager
def error_boundary(debug: bool) -> Iterator[None]:
    """The one place user errors become a one-line message and an exit code; --debug re-raises.

    Warnings are held back (shown with --debug); SIGTERM is handled as Ctrl-C (exit 143, Ctrl-C 130).
    """
    try:
        with _sigterm_as_interrupt(), _warnings_held(debug):
            yield
    except SheetfitError as exc:
        if debug:
            raise
        fail(str(exc) or type(exc).__name__)
    except KeyboardInterrupt as exc:
        if debug:
            raise
        stopped = isinstance(exc, Terminated)
        typer.echo(f"{PROG}: {'stopped by SIGTERM' if stopped else 'interrupted'}; no output written", err=True)
        raise typer.Exit(143 if stopped else 130) from None


def _stderr_is_tty() -> bool:
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


class StageBar:
    """A one-line progress display on stderr: stage, elapsed time and a moving bar.

    Shown only on a terminal and only once the run has taken more than `delay` seconds, so quick
    runs print nothing. The run reports its stages through `stage`; every stage's start is kept.
    """

    def __init__(self, enabled: bool, stages: tuple[str, ...] = STAGES, delay: float = 2.0):
        import threading
        import time

        self._clock = time.perf_counter
        self.enabled = enabled and _stderr_is_tty()
        self.t0 = self._clock()
        self.delay = delay
        self.stages = stages
        self.current = ""
        self.started: dict[str, float] = {}
        self.shown = False
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        if self.enabled:
            self._thread = threading.Thread(target=self._tick, daemon=True)
            self._thread.start()

    def _line(self) -> str:
        step = (len(self.stages) if self.current == "done" else
                self.stages.index(self.current) + 1 if self.current in self.stages else 0)
        width = 20
        done = round(width * step / len(self.stages))
        bar = "#" * done + "-" * (width - done)
        return f"\r[{bar}] {self.current:<18} {self._clock() - self.t0:6.1f} s"

    def _tick(self) -> None:
        while not self._stop.wait(0.5):
            if self._clock() - self.t0 >= self.delay and self.current:
                sys.stderr.write(self._line())
                sys.stderr.flush()
                self.shown = True

    def stage(self, name: str) -> None:
        self.started[name] = self._clock()
        self.current = name

    def done(self) -> None:
        self.started["done"] = self._clock()
        if self._thread is not None:
            self._stop.set()
            self._thread.join()
            if self.shown:
                self.current = "done"
                sys.stderr.write(self._line() + "\n")
                sys.stderr.flush()


@contextlib.contextmanager
def stage_bar(enabled: bool, stages: tuple[str, ...] = STAGES) -> Iterator[StageBar]:
    """A StageBar that always ends its line, whatever happens to the run."""
    bar = StageBar(enabled, stages)
    try:
        yield bar
    finally:
        bar.done()


def print_timings(results: Any, bar: StageBar) -> None:
    """With SHEETFIT_TIMINGS set: read, fit+checks and write times on stderr (for bench/run.py)."""
    if not os.environ.get("SHEETFIT_TIMINGS"):
        return
    about = dict(results.about)
    write = bar.started.get("done", 0.0) - bar.started.get("writing", 0.0)
    sys.stderr.write(f"timings: read {about['time to read (s)']:.2f} s, fit+checks "
                     f"{about['time to fit and check (s)']:.2f} s, write {write:.2f} s\n")


# ── demo ──
