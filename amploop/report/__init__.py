"""The review: a PDF of Bode plots and evidence per run, rebuilt from the out folder alone.

:func:`build_report` reads results.json and the journal (never the simulator), draws the
pages and writes ``report.pdf`` plus PNG copies of the plot pages in ``report/``.
"""

from __future__ import annotations

import datetime as _dt
import os
import time
import zlib
from collections.abc import Callable, Iterable
from pathlib import Path

import matplotlib.pyplot as plt
from matplotlib.backends.backend_pdf import PdfPages

from amploop.corners.outputs import OutFolder, is_folder
from amploop.errors import JobError, OutputError
from amploop.report import selection, style
from amploop.report.corner import corner_page
from amploop.report.data import ReportData, load_report_data
from amploop.report.history import convergence_page
from amploop.report.mapview import map_page
from amploop.report.overview import overview_page
from amploop.report.spread import spread_page, spread_pages
from amploop.report.steps import time_domain_page
from amploop.report.summary import summary_page_count, summary_pages
from amploop.spec.names import safe_filename

__all__ = ["PNG_CORNER_PAGES", "ReportOutcome", "build_report"]

#: Above this many corners, only the limiting corner's page gets a PNG copy (the PDF has
#: every page); drawing a PNG costs about as much as drawing the page itself.
PNG_CORNER_PAGES = 30


class ReportOutcome:
    """Where the report went and what it took.

    Parameters
    ----------
    pdf
        The PDF written.
    pngs
        The PNG copies written, in page order.
    pages
        How many pages the PDF has.
    seconds
        Wall time of reading and drawing, seconds.
    analyses_read
        How many analyses were read from the journal.
    """

    def __init__(self, pdf: Path, pngs: list[Path], pages: int, seconds: float,
                 analyses_read: int) -> None:
        self.pdf, self.pngs, self.pages = pdf, pngs, pages
        self.seconds, self.analyses_read = seconds, analyses_read


def _page_count(data: ReportData, corner_names: list[str], overview: bool) -> int:
    return (summary_page_count(len(data.corner_names)) + overview + len(corner_names)
            + bool(data.maps) + (data.command == "tune") + bool(data.steps)
            + len(spread_pages(data.results)))


def build_report(out: str | Path, *, pngs: bool = True, corner_pages: Iterable[str] = (),
                 all_corner_pages: bool = False,
                 progress: Callable[[int, int], None] | None = None) -> ReportOutcome:
    """Write ``report.pdf`` (and ``report/page-NN-*.png``) for an out folder.

    Pages: summary and corner table (continued over pages for long corner lists); above
    :data:`~.selection.EVERY_CORNER_UP_TO` corners an overview of all corners; one page
    per corner in the job's order (above that count only the corners
    :func:`~.selection.corner_pages` picks); the compensation map of the limiting corner;
    how the tuning converged; the closed-loop step responses.

    The folder is held (its lock) while the report is drawn, so that no run changes
    results.json or the journal meanwhile. The PDF and the PNG copies are written under
    temporary names and put in place when all are written: a failure (a full disk) leaves
    no partial file, and no report from earlier results either.

    Parameters
    ----------
    out
        The out folder of a ``measure`` or ``tune`` run.
    pngs
        Also write PNG copies of the first page and the plot pages into ``report/``,
        replacing those there (beyond :data:`PNG_CORNER_PAGES` corners, of the corner
        pages only the limiting corner's).
    corner_pages
        Corners that get a page whatever their figures.
    all_corner_pages
        A page for every corner, however many.
    progress
        Called after each page with (pages done, pages in all).

    Raises
    ------
    JobError
        When ``out`` is not a folder or lacks results.json (the command line names no out
        folder of amploop's).
    OutputError, JournalError
        When the out folder lacks the journal entries results.json names, is used by
        another run, or the report cannot be written.
    JobError
        When a name in ``corner_pages`` is not a corner of the run.
    """
    started = time.perf_counter()
    if not is_folder(out):
        raise JobError("not a folder", file=out)
    folder = OutFolder(out)
    with folder.lock(join=True), load_report_data(folder.path) as data:
        pages_of = selection.corner_pages(data.results.get("corners", []), named=corner_pages,
                                          every=all_corner_pages)
        overview = len(pages_of) < len(data.corner_names)
        total = _page_count(data, pages_of, overview)
        written, count = _draw(data, pages_of, overview, pngs=pngs,
                               progress=lambda done: progress and progress(done, total))
        return ReportOutcome(data.out / "report.pdf", written, count,
                             time.perf_counter() - started, data.analyses_read)


def _pages(data: ReportData, corner_names: list[str], overview: bool):
    """(name, figure, is a plot page) for every page, each figure drawn when asked for,
    so that a report never holds more than one figure."""
    target = data.results.get("target", {}).get("phase_margin_deg")
    date = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    for i, fig in enumerate(summary_pages(data, date)):
        yield (f"summary-{i + 1}" if i else "summary"), fig, False
    if overview:
        yield "overview", overview_page(data, corner_names, target), True
    for name, entry in spread_pages(data.results):
        yield f"monte-carlo-{safe_filename(name)}", spread_page(data.results, name, entry), True
    many = len(data.corner_names) > PNG_CORNER_PAGES
    for name in corner_names:
        quick_look = not many or name == data.limiting_corner
        yield f"corner-{safe_filename(name)}", corner_page(data, name, target), quick_look
    if data.maps:
        yield "map", map_page(data), True
    if data.command == "tune":
        yield "convergence", convergence_page(data, target), True
    # with no step responses the page says why, and what runs them
    yield "step-response", time_domain_page(data, corner_names if overview else None), True


def _draw(data: ReportData, corner_names: list[str], overview: bool, *, pngs: bool,
          progress: Callable[[int], None]) -> tuple[list[Path], int]:
    """Draw the pages into temporary files, then put them in place; on any failure remove
    them and the report of earlier results. Returns the PNGs written and the page count."""
    pdf_path = data.out / "report.pdf"
    png_dir = data.out / "report"
    temporary = pdf_path.with_name(f".report.pdf.tmp{os.getpid()}")
    drawn: list[tuple[Path, Path]] = []  # (temporary PNG, its final name)
    count = 0
    try:
        with plt.rc_context(style.RC):
            if pngs:
                png_dir.mkdir(exist_ok=True)
            with open(temporary, "wb") as handle:
                pdf = PdfPages(handle, metadata={"Title": f"amploop report: {data.results['job']}",
                                                 "Creator": "amploop"})
                for number, (name, fig, is_plot) in enumerate(_pages(data, corner_names,
                                                                     overview), start=1):
                    try:
                        pdf.savefig(fig)
                        if pngs and (is_plot or number == 1):
                            png = png_dir / f"page-{number:02d}-{name}.png"
                            drawn.append((png.with_name(f".{png.name}.tmp"), png))
                            fig.savefig(drawn[-1][0], format="png")
                    finally:
                        plt.close(fig)
                    count = number
                    progress(number)
                pdf.close()
        if pngs:
            for old in png_dir.glob("page-*.png"):
                old.unlink()
            for partial, png in drawn:
                os.replace(partial, png)
        os.replace(temporary, pdf_path)
    except BaseException as exc:
        _remove([temporary, pdf_path, *(p for p, _ in drawn)]
                + (list(png_dir.glob("page-*.png")) if pngs else []))
        if isinstance(exc, (OSError, zlib.error)):  # zlib: the PDF's stream after a failed write
            raise OutputError(f"cannot write the report: {_write_failure(exc)}; no report.pdf "
                              "is left", file=data.out) from None
        raise
    return [png for _, png in drawn], count


def _write_failure(exc: BaseException) -> str:
    """What failed: the first OSError in the chain of ``exc`` (the PDF writer's zlib error
    comes while handling the write that failed), else ``exc`` itself."""
    cause = exc
    while cause is not None and not isinstance(cause, OSError):
        cause = cause.__context__
    return (cause.strerror or str(cause)) if cause is not None else str(exc)


def _remove(paths) -> None:
    for path in paths:
        try:
            path.unlink(missing_ok=True)
        except OSError:
            pass

