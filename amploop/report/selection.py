"""Which corners get a page of their own in the report.

Up to :data:`EVERY_CORNER_UP_TO` corners, every corner does. Above, a page per corner would
bury the few that matter (a thousand-corner run made a report of over a thousand pages):
the report then gives one overview page of all corners and pages for the worst few, a
few that are not ok and the corners named on the command line; ``--all-corner-pages`` asks for
every one.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

from amploop.errors import JobError, did_you_mean

__all__ = ["EVERY_CORNER_UP_TO", "FAILED_PAGES", "WORST_PAGES", "corner_pages"]

#: Up to this many corners every corner has its page (and no overview page is drawn).
EVERY_CORNER_UP_TO = 50
#: Above it: pages for this many corners of the smallest phase margin ...
WORST_PAGES = 8
#: ... and for this many of the corners that are not ok (an error, or suspect: their page
#: says why).
FAILED_PAGES = 3


def _lowest(corners: Sequence[dict], key: str, count: int) -> list[str]:
    measured = [c for c in corners if c.get(key) is not None]
    return [c["name"] for c in sorted(measured, key=lambda c: c[key])[:count]]


def corner_pages(corners: Sequence[dict], *, named: Iterable[str] = (),
                 every: bool = False) -> list[str]:
    """The corners that get a page, in the job's order.

    Parameters
    ----------
    corners
        The corner entries of results.json (``name``, ``status``, ``phase_margin_deg``,
        ``unity_gain_hz``, ``gain_margin_db``), in the job's order.
    named
        Corner names that always get a page.
    every
        Give every corner a page, however many there are.

    Returns
    -------
    list of str
        Every corner when ``every`` or when there are at most :data:`EVERY_CORNER_UP_TO`;
        else the :data:`WORST_PAGES` of smallest phase margin, the corners of the smallest
        unity-gain frequency and of the smallest gain margin, the first
        :data:`FAILED_PAGES` that are not ok, and ``named``.

    Raises
    ------
    JobError
        When a name in ``named`` is not a corner of the run.
    """
    names = [c["name"] for c in corners]
    known = set(names)
    named = list(named)
    for name in named:
        if name not in known:
            raise JobError(f"no corner {name!r} in this run" + did_you_mean(name, names),
                           place="--corner-page")
    if every or len(names) <= EVERY_CORNER_UP_TO:
        return names
    chosen = set(named)
    chosen.update(_lowest(corners, "phase_margin_deg", WORST_PAGES))
    chosen.update(_lowest(corners, "unity_gain_hz", 1))
    chosen.update(_lowest(corners, "gain_margin_db", 1))
    chosen.update([c["name"] for c in corners if c.get("status") != "ok"][:FAILED_PAGES])
    return [name for name in names if name in chosen]
