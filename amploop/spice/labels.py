"""The words for the things amploop reports, in one table: the terminal, the report and
the results.json writers all take them from here, so that one thing has one name.

Figures keep their results.json key (``dc_loop_gain_db``); what people read beside a
figure is its label here. A line break in a label is where a narrow column heading
wraps (the terminal's table and the report's both wrap there).
"""

from __future__ import annotations

__all__ = ["COMMON_MODE", "COMMON_MODE_LABELS", "FIGURE_LABELS", "JOURNAL_KEY", "JOURNAL_KEYS", "PHASE_MARGIN_CORNER",
           "ROLE_LABELS", "UNITY_GAIN_CORNER", "WORST_PHASE_MARGIN_CORNER"]

#: The compensation roles as people read them: ``Cc = 292.8 fF, Rc = 20 kΩ``.
ROLE_LABELS = {"cc": "Cc", "rc": "Rc"}

#: Column headings of the per-corner tables, by the results.json key of the figure.
FIGURE_LABELS = {
    "dc_loop_gain_db": "DC loop gain\n(dB)",
    "unity_gain_hz": "unity-gain\nfrequency",
    "phase_margin_deg": "phase margin\n(°)",
    "gain_margin_db": "gain margin\n(dB)",
    "phase_crossover_hz": "phase\ncrossover",
    "overshoot_pct": "step overshoot\n(%)",
    "settling_time_s": "settling\ntime",
}

#: results.json: a fully-differential corner's table of its common-mode loop's figures
#: (the same keys as the differential loop's, which stay at the corner's top level).
COMMON_MODE = "common_mode"

#: Column headings of the common-mode loop's figures, by their key in that table.
COMMON_MODE_LABELS = {
    "dc_loop_gain_db": "CM DC loop\ngain (dB)",
    "unity_gain_hz": "CM unity-gain\nfrequency",
    "phase_margin_deg": "CM phase\nmargin (°)",
    "gain_margin_db": "CM gain\nmargin (dB)",
}

#: results.json: the journal key of an analysis (a corner's loop gain, a step check),
#: and, in a history entry, corner name -> journal key of that point's analysis.
JOURNAL_KEY, JOURNAL_KEYS = "journal_key", "journal_keys"

#: results.json ``worst``: the corner with the smallest phase margin (the report's
#: limiting corner), and the one with the smallest unity-gain frequency.
PHASE_MARGIN_CORNER, UNITY_GAIN_CORNER = "phase_margin_corner", "unity_gain_corner"
#: results.json history entry: the corner with the smallest phase margin at that point,
#: beside ``worst_phase_margin_deg``.
WORST_PHASE_MARGIN_CORNER = "worst_" + PHASE_MARGIN_CORNER
