"""The review: a PDF of Bode plots and evidence per run, rebuilt from the out folder alone.

:func:`build_report` reads results.json and the journal (never the simulator), draws the
pages and writes ``report.pdf`` plus PNG copies of the plot pages in ``report/``.
"""

from __future__ import annotations

import datetime as _dt
import time
from pathlib import Path

import matplotlib.pyplot as plt
from matplotlib.backends.backend_pdf import PdfPages

from ..errors import OutputError
from ..job import safe_filename
from . import style
from .data import ReportData, load_report_data
from .pages import convergence_page, corner_page, map_page, summary_pages, time_domain_page

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


def build_report(out: str | Path, *, pngs: bool = True) -> ReportOutcome:
    """Write ``report.pdf`` (and ``report/page-NN-*.png``) for an out folder.

    Pages: summary and corner table (continued over pages for long corner lists); one
    page per corner in the job's order; the compensation map of the limiting corner; how
    the tuning converged; the closed-loop step responses.

    Parameters
    ----------
    out
        The out folder of a ``measure`` or ``tune`` run.
    pngs
        Also write PNG copies of the first page and the plot pages into ``report/``,
        replacing those there (beyond :data:`PNG_CORNER_PAGES` corners, of the corner
        pages only the limiting corner's).

    Raises
    ------
    OutputError, JournalError
        When the out folder lacks results.json or the journal entries it names.
    """
    started = time.perf_counter()
    data = load_report_data(out)
    target = data.results.get("target", {}).get("phase_margin_deg")
    date = _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    # pages are drawn, saved and closed one at a time: a 100-corner report never holds
    # more than one figure
    def pages():
        for i, fig in enumerate(summary_pages(data, date)):
            yield (f"summary-{i + 1}" if i else "summary"), fig, False
        many = len(data.corner_names) > PNG_CORNER_PAGES
        for name in data.corner_names:
            quick_look = not many or name == data.limiting_corner
            yield f"corner-{safe_filename(name)}", corner_page(data, name, target), quick_look
        if data.maps:
            yield "map", map_page(data), True
        if data.command == "tune":
            yield "convergence", convergence_page(data, target), True
        # with no step responses the page says why, and what runs them
        yield "step-response", time_domain_page(data), True

    pdf_path = data.out / "report.pdf"
    png_dir = data.out / "report"
    written: list[Path] = []
    count = 0
    with plt.rc_context(style.RC):
        try:
            if pngs:
                png_dir.mkdir(exist_ok=True)
                for old in png_dir.glob("page-*.png"):
                    old.unlink()
            temporary = pdf_path.with_name(".report.pdf.tmp")
            with PdfPages(temporary, metadata={"Title": f"amploop report: {data.results['job']}",
                                               "Creator": "amploop"}) as pdf:
                for number, (name, fig, is_plot) in enumerate(pages(), start=1):
                    pdf.savefig(fig)
                    if pngs and (is_plot or number == 1):
                        png = png_dir / f"page-{number:02d}-{name}.png"
                        fig.savefig(png)
                        written.append(png)
                    plt.close(fig)
                    count = number
            temporary.replace(pdf_path)
        except OSError as exc:
            raise OutputError(f"cannot write the report: {exc.strerror or exc}", file=data.out) from None
    return ReportOutcome(pdf_path, written, count, time.perf_counter() - started,
                         data.analyses_read)


def report_data(out: str | Path) -> ReportData:
    """The report's data without drawing (for tests and notebooks)."""
    return load_report_data(out)
