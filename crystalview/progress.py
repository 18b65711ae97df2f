"""Progress bars for long single jobs, on stderr, only where a person watches.

A bar appears only when stderr is a terminal, the command was not asked for
JSON or ``--quiet``, and the job has already taken more than ``DELAY``
seconds (short jobs stay silent).  The library behind it is rich, which the
project already depends on.  In tests and pipes nothing is printed.
"""
from __future__ import annotations

import contextlib
import os
import sys
import time

#: Seconds a job runs before its bar appears.
DELAY = 1.0
_quiet = False


def set_quiet(flag=True):
    """Silence every bar (the CLI calls this for --json, --format json and --quiet).

    >>> set_quiet(True)
    >>> enabled()
    False
    >>> set_quiet(False)
    """
    global _quiet
    _quiet = bool(flag)


def enabled():
    """True when a bar may be shown: a terminal on stderr and nobody asked for quiet.

    >>> isinstance(enabled(), bool)
    True
    """
    if _quiet or os.environ.get("CRYSTALVIEW_QUIET"):
        return False
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


class _Bar:
    def __init__(self, description, total):
        self.description = description
        self.total = total
        self.t0 = time.perf_counter()
        self.prog = None
        self.task = None
        self.done = 0

    def update(self, advance=1, description=None):
        self.done += advance
        if description:
            self.description = description
        if self.prog is None:
            if not enabled() or time.perf_counter() - self.t0 < DELAY:
                return
            from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

            # no refresh thread: redrawn on each update, so a job may still fork safely while its bar shows
            self.prog = Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.percentage:>3.0f}%"),
                                 TimeElapsedColumn(), transient=True, console=_console(), auto_refresh=False)
            self.task = self.prog.add_task(self.description, total=self.total, completed=self.done)
            for t in self.prog.tasks:      # the clock counts from when the job began, not from the first redraw
                if t.id == self.task:
                    t.start_time = self.prog.get_time() - (time.perf_counter() - self.t0)
            self.prog.start()
        self.prog.update(self.task, completed=self.done, description=self.description)
        self.prog.refresh()

    def close(self):
        if self.prog is not None:
            self.prog.stop()


def _console():
    from rich.console import Console

    return Console(file=sys.stderr)


@contextlib.contextmanager
def bar(description, total):
    """A context giving ``update(advance=1, description=None)``; the bar
    shows only after DELAY seconds on a terminal.

    >>> with bar("holes", 3) as b:
    ...     for _ in range(3):
    ...         b.update()
    """
    b = _Bar(description, total)
    try:
        yield b
    finally:
        b.close()


@contextlib.contextmanager
def working(description):
    """A spinner with the elapsed time for one long step that cannot count its
    progress (a boolean union, a render, a large write): it appears after
    DELAY seconds on a terminal, and never otherwise.

    >>> with working("union of 3 parts"):
    ...     pass
    """
    if not enabled():
        yield
        return
    import threading

    state = {"status": None, "done": False}
    lock = threading.Lock()
    t0 = time.perf_counter()

    def start():
        with lock:
            if state["done"]:
                return
            st = _console().status(f"{description} ...")
            st.start()
            state["status"] = st

    timer = threading.Timer(DELAY, start)
    timer.daemon = True
    timer.start()
    try:
        yield
    finally:
        with lock:
            state["done"] = True
            timer.cancel()
            if state["status"] is not None:
                state["status"].stop()
                _console().print(f"{description}: {time.perf_counter() - t0:.1f} s", style="dim", highlight=False)
        timer.join()       # no thread outlives the step (the hole analysis forks only a single-threaded process)
