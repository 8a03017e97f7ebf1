"""The tune progress line says what it shows: the point just simulated, and the running
answer (the point so far that meets the target with the most worst-corner bandwidth),
which at the end is the answer tune gives."""

from __future__ import annotations

import io
import json
import re

from conftest import DEMO

from amploop.cli import main
from amploop.cli.terminal import TUNE_PROGRESS_KEY
from amploop.report.pages import values_text


class Terminal(io.StringIO):
    """stderr as a terminal: the progress line is shown only there."""

    def isatty(self) -> bool:
        return True


_CONTROL = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")  # ECMA-48 control sequences (CSI)


def screen_lines(written: str) -> list[str]:
    """What a terminal shows in turn of ``written``: its control sequences (cursor,
    erase, colour) taken out, each line or redraw of a line (after a carriage return) one
    item, a redraw of the same text once."""
    lines: list[str] = []
    for part in re.split(r"[\r\n]", _CONTROL.sub("", written)):
        if part.strip() and (not lines or part.strip() != lines[-1]):
            lines.append(part.strip())
    return lines


def test_the_progress_line_ends_on_the_answer_not_on_the_largest_margin_seen(
        tmp_path, capsys, monkeypatch):
    """Before, it ended on "best worst-corner PM 74.97°", the largest worst-corner margin
    of any point, while the answer was 65.10°."""
    terminal = Terminal()
    monkeypatch.setattr("sys.stderr", terminal)
    monkeypatch.setenv("COLUMNS", "200")  # wide enough for the whole line
    # the sampled maps, whose samples have more margin than the answer (the port map's
    # one reference point has less)
    monkeypatch.setattr("amploop.strategy.mapping.port_form", lambda *args: None)
    out = tmp_path / "out"
    assert main(["tune", str(DEMO / "job.toml"), "--out", str(out), "--no-report"]) == 0
    printed = capsys.readouterr().out
    results = json.loads((out / "results.json").read_text())
    # the chosen values in the same words on the terminal, in results.json and the report
    shown = values_text(results["values"], results)
    assert f" at {shown}\n" in printed.splitlines(keepends=True)[0]
    assert f" at {shown}" in results["message"]
    answer = results["worst"]["phase_margin_deg"]
    largest = max(h["worst_phase_margin_deg"] for h in results["history"])
    assert largest > answer + 1  # the demo's samples have more margin than the answer
    shown = screen_lines(terminal.getvalue())
    assert shown[0] == TUNE_PROGRESS_KEY.strip()  # what the line shows, said once
    assert shown.count(shown[0]) == 1
    lines = [line for line in shown if line.startswith("best ≥ ")]
    assert all(line.endswith(" AC") for line in lines)  # not cut at 200 columns
    assert len(lines) == len(results["history"])  # one per simulated point
    target = results["target"]["phase_margin_deg"]
    assert lines[-1].startswith(f"best ≥ {target:g}°: {answer:.2f}° at ")
    assert f"{largest:.2f}" not in lines[-1].split("|")[0]
    for line, entry in zip(lines, results["history"]):
        assert f"| step {entry['step']} {entry['label']}: " \
            f"{entry['worst_phase_margin_deg']:.2f}° at " in line
