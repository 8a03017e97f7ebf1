"""What each point of a tuning history was simulated for: the kinds the strategies write
(:attr:`~amploop.strategy.common.HistoryEntry.kind`) and the words shown for them, the
same on the terminal's progress line, in the report and in results.json's history."""

from __future__ import annotations

__all__ = ["KIND_LABELS", "TEXTBOOK_KINDS", "kind_label"]

#: History kind -> what the terminal, the report and results.json call it.
KIND_LABELS: dict[str, str] = {
    "characterise": "map sample",
    "characterise-ports": "map from the compensation's ports",
    "verify": "check",
    "start": "textbook start",
    "dominant-pole": "dominant-pole step",
    "lead": "lead-resistor step",
    "adjust-cc": "Cc adjusted",
    "evaluate": "optimiser try",
    "report-map": "map sample for the report",
}

#: The kinds the textbook procedure writes, in its order.
TEXTBOOK_KINDS = ("start", "dominant-pole", "lead", "adjust-cc")


def kind_label(kind: str) -> str:
    """The words for the history kind ``kind``; the kind itself when it has none (a
    results.json from another version).

    Parameters
    ----------
    kind
        A history entry's kind (``"characterise"``, ``"verify"``, ...).
    """
    return KIND_LABELS.get(kind, kind)
