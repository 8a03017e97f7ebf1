"""The live progress displays of measure, tune and report, drawn with ``rich`` on stderr.

Each is a context manager that gives a callable for the run's ``progress`` argument, or
None where nothing is to be shown: ``--quiet``, or stderr not an interactive terminal (a
pipe, a log, CI, a test's captured stderr), which rich decides; ``TERM=dumb`` and
``TTY_INTERACTIVE=0`` also turn it off. The display ends when the ``with`` block does
(also on an error or Ctrl-C, so the cursor is never left hidden), or earlier by
:meth:`Display.close`, which the command line calls before it prints the results.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

from amploop.cli.terminal import TUNE_PROGRESS_KEY, tune_progress_line


def _console(quiet: bool):
    """A rich console on stderr, or None when ``quiet`` or stderr is not an interactive
    terminal (imported only then: rich takes some 50 ms to import)."""
    if quiet:
        return None
    from rich.console import Console

    console = Console(stderr=True, highlight=False)
    return console if console.is_interactive else None


class Display:
    """A live display: calling it redraws it with the run's latest news.

    Parameters
    ----------
    live
        The rich ``Live`` or ``Progress`` it draws with (started at the first call).
    draw
        Called with what the run reports; updates ``live``'s content.
    """

    def __init__(self, live, draw: Callable[..., None]) -> None:
        self._live = live
        self._draw = draw

    def __call__(self, *news) -> None:
        self._live.start()  # a no-op once started
        self._draw(*news)

    def close(self) -> None:
        """End the display (a counter is erased, tune's line is kept); again is a no-op."""
        self._live.stop()


@contextmanager
def _shown(display: Display | None) -> Iterator[Display | None]:
    try:
        yield display
    finally:
        if display is not None:
            display.close()


def _counter(quiet: bool, label: str) -> Display | None:
    """``  {label} 3/9 ━━━━━━━━━━       0:00:04`` (done/total, a bar, the time taken),
    redrawn at each call with (done, total, and anything after, unread) and erased when
    done reaches total."""
    console = _console(quiet)
    if console is None:
        return None
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    progress = Progress(
        TextColumn(f"  {label} {{task.completed:.0f}}/{{task.total:.0f}}", markup=False),
        BarColumn(), TimeElapsedColumn(),
        console=console, transient=True, redirect_stdout=False)
    task = progress.add_task(label, total=1)

    def draw(done: int, total: int, *_more) -> None:
        progress.update(task, completed=done, total=total, refresh=True)
        if done == total:
            progress.stop()

    return Display(progress, draw)


def page_progress(quiet: bool):
    """``report: page 3/12`` while the report draws (a context manager; its value is the
    report's ``progress`` callable, or None)."""
    return _shown(_counter(quiet, "report: page"))


def corner_progress(quiet: bool):
    """``corners 3/9`` while measure runs (a context manager; its value takes measure's
    ``progress`` arguments (done, total, result), or is None)."""
    return _shown(_counter(quiet, "corners"))


def tune_progress(quiet: bool, job):
    """Tune's progress line (:func:`~amploop.cli.terminal.tune_progress_line`), under its
    key, redrawn after each point and cut to the terminal's width; it stays on screen
    when the display ends (a context manager; its value takes a history entry, or is
    None)."""
    console = _console(quiet)
    if console is None:
        return _shown(None)
    from rich.live import Live
    from rich.text import Text

    live = Live(console=console, auto_refresh=False, redirect_stdout=False)
    best: dict = {}

    def draw(entry) -> None:
        if not best and entry.step == 1:
            console.print(TUNE_PROGRESS_KEY, markup=False, soft_wrap=True)  # above the line
        line = "  " + tune_progress_line(entry, best, job.target)
        live.update(Text(line, no_wrap=True, overflow="ellipsis"), refresh=True)

    return _shown(Display(live, draw))
