"""What a tuning run leaves in its out folder at the end: the compensated netlist (copies
of the changed files with the tuned values in, and their diff) and, per corner, the
loop-gain CSV and the deck to rerun by hand at the final values."""

from __future__ import annotations

import difflib
from pathlib import Path

from amploop.bench.amplifier import Amplifier
from amploop.corners.measure import CornerWork, corner_files
from amploop.corners.outputs import OutFolder
from amploop.corners.portable_decks import copy_includes
from amploop.strategy.common import Outcome

__all__ = ["compensated_netlist", "remove_compensated", "write_final_files"]


def compensated_netlist(amplifier: Amplifier, values: dict[str, float],
                        folder: OutFolder | None) -> dict:
    """Write copies of the changed files of ``amplifier``'s netlist with ``values`` (SI, by
    role) in, into ``folder``/compensated (none when ``folder`` is None: the diff then names
    ``compensated/<file>``); return ``{"path", "files", "diff"}``."""
    changed = amplifier.compensated_files(values)
    written = []
    diffs = []
    for path, text in changed.items():
        target = Path("compensated", path.name)
        if folder is not None:
            target = folder.write_text(f"compensated/{path.name}", text)
            written.append(str(target))
        original = path.read_text(encoding="utf-8", errors="replace").splitlines(keepends=True)
        diffs.extend(difflib.unified_diff(original, text.splitlines(keepends=True),
                                          fromfile=str(path), tofile=str(target)))
    if folder is None:
        return {"path": None, "files": [], "diff": "".join(diffs)}
    root_copy = folder.path / "compensated" / amplifier.netlist.root.name
    return {
        "path": str(root_copy) if str(root_copy) in written else (written[0] if written else None),
        "files": written,
        "diff": "".join(diffs),
    }


def remove_compensated(folder: OutFolder, amplifier: Amplifier) -> None:
    """Remove the copies of ``amplifier``'s netlist files an earlier run wrote into
    ``folder``/compensated: a run that did not meet its target writes none, and an old copy
    would read as this run's answer."""
    for path in amplifier.netlist.files:
        stale = folder.path / "compensated" / path.name
        if stale.is_file():
            stale.unlink()


def write_final_files(folder: OutFolder, amplifier: Amplifier, outcome: Outcome) -> list[str]:
    """Per-corner loop-gain CSVs and rerunnable decks of ``amplifier`` at the final values
    of ``outcome``, into ``folder``; returns the files written, relative to the folder."""
    from amploop.bench.testbench import build_testbench

    stems = corner_files(amplifier.job.corners)
    written = []
    includes = None
    for corner_result in outcome.final.corners:
        name = corner_result.corner.name
        bench = build_testbench(amplifier, corner_result.corner, outcome.values)
        includes = includes or copy_includes(folder.path, bench.deck)
        work = CornerWork.for_corner(bench, folder.path, stems[name], includes)
        work.write_files(corner_result.loop_gain)
        written += work.files(corner_result)
    return written
