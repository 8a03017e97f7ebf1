"""One reading of SPICE numbers, one form of the compensation values, one label per
history kind.

References: the scale factors are those of the ngspice manual's table of scale factors
(T 1e12, G 1e9, Meg 1e6, K 1e3, mil 25.4e-6, M 1e-3, U 1e-6, N 1e-9, P 1e-12, F 1e-15,
case-insensitive, letters after them ignored), and ngspice itself (``ngspice -b``) reads
the same strings in a deck.
"""

from __future__ import annotations

import ast
import re
import subprocess
from pathlib import Path
from types import SimpleNamespace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from amploop.cli.terminal import values_line
from amploop.report.pages import values_text
from amploop.spec.resistor_values import megaohm_reading
from amploop.spice.expressions import evaluate, referenced_params
from amploop.spice.units import describe_values, parse_value, split_number
from amploop.strategy.kinds import KIND_LABELS, kind_label

# the ngspice manual's scale factors
MANUAL = {"t": 1e12, "g": 1e9, "meg": 1e6, "k": 1e3, "mil": 25.4e-6, "m": 1e-3, "u": 1e-6,
          "n": 1e-9, "p": 1e-12, "f": 1e-15, "": 1.0}
UNITS = ["", "F", "Ohm", "V", "Hz", "s"]


def mixed_case(draw, word: str) -> str:
    return "".join(c.upper() if draw(st.booleans()) else c for c in word)


@st.composite
def spice_numbers(draw):
    """(text, mantissa, suffix, unit) of a SPICE number with a scale suffix and a unit name."""
    whole = draw(st.integers(0, 9999))
    frac = draw(st.sampled_from(["", ".", ".5", ".25", ".125"]))
    mantissa = f"{whole}{frac}" if whole or frac in ("", ".") else frac
    exponent = draw(st.sampled_from(["", "e3", "E-12", "e+2", "e0"]))
    suffix = draw(st.sampled_from(sorted(MANUAL)))
    unit = draw(st.sampled_from(UNITS)) if suffix else ""
    return f"{mantissa}{exponent}{mixed_case(draw, suffix)}{unit}", mantissa + exponent, suffix, unit


@settings(max_examples=300, deadline=None)
@given(spice_numbers())
def test_every_reader_reads_a_number_the_same_way(case):
    text, mantissa, suffix, unit = case
    expected = float(mantissa) * MANUAL[suffix]
    assert split_number(f" {text} ")[0] == mantissa
    assert parse_value(text) == pytest.approx(expected, rel=1e-15)
    assert evaluate(text) == pytest.approx(expected, rel=1e-15)
    assert evaluate(f"{{{text}}}") == pytest.approx(expected, rel=1e-15)
    assert evaluate(f"{{2*{text}}}") == pytest.approx(2 * expected, rel=1e-15)
    assert referenced_params(f"{{2*{text}+c2}}") == {"c2"}  # the number is no name
    assert (megaohm_reading(text) is not None) == (suffix == "m" and unit in ("", "Ohm"))


def test_a_digit_inside_a_name_is_part_of_the_name():
    assert referenced_params("{2*c2 + r1e3 + x.5}") == {"c2", "r1e3", "x.5"}


def test_letters_after_a_number():
    """SPICE ignores what is no suffix ("3x" is 3); a job file refuses it as a typo."""
    assert evaluate("{3x}") == 3.0
    with pytest.raises(ValueError, match="unknown suffix 'x'"):
        parse_value("3x")
    assert parse_value("4.7MegOhm") == evaluate("4.7MegOhm") == 4.7e6
    assert megaohm_reading("-4.7mOhm") == "-4.7MegOhm"


NGSPICE_CASES = ["2.5meg", "1.5MEGohm", "2e-3k", "4mhz", ".5e2u", "7T", "2fs", "3Ms", "10kOhm",
                 "1.2pF", "33n", "4.7u", "2G", "1mil", "1e-12", "5", "3x"]


def ngspice_reads(values: list[str], braced: bool, deck: Path) -> list[float]:
    """What ngspice -b makes of each value as a DC source (in braces when ``braced``)."""
    lines = ["numbers"]
    for i, value in enumerate(values):
        lines.append(f"V{i} n{i} 0 dc {{{value}}}" if braced else f"V{i} n{i} 0 dc {value}")
    lines += [".control", "op", "print " + " ".join(f"v(n{i})" for i in range(len(values))),
              ".endc", ".end"]
    deck.write_text("\n".join(lines) + "\n")
    done = subprocess.run(["ngspice", "-b", str(deck)], text=True, capture_output=True,
                          timeout=60, check=False)  # exits 1: "no simulations run"
    read = dict(re.findall(r"v\(n(\d+)\) = (\S+)", done.stdout))
    assert len(read) == len(values), done.stdout + done.stderr
    return [float(read[str(i)]) for i in range(len(values))]


@pytest.mark.parametrize("braced", [False, True])
def test_ngspice_reads_the_numbers_as_we_do(braced, tmp_path):
    """ngspice 39 reads ``mil`` as milli inside braces (its expression parser knows no
    ``mil``), 25.4 µm outside: that one case is left out of the braced deck."""
    cases = [c for c in NGSPICE_CASES if not (braced and "mil" in c)]
    for text, simulated in zip(cases, ngspice_reads(cases, braced, tmp_path / "numbers.cir")):
        assert evaluate(text) == pytest.approx(simulated, rel=1e-6), text
        if not text.endswith("x"):
            assert parse_value(text) == pytest.approx(simulated, rel=1e-6), text


def test_the_terminal_the_report_and_the_results_write_values_alike():
    values = {"cc": 292.8e-15, "rc": 20e3}
    knob = SimpleNamespace(where="param", name="rc", size=None)
    job = SimpleNamespace(compensation={"cc": SimpleNamespace(where="param"), "rc": knob})
    expected = "Cc = 292.8 fF, Rc = 20 kΩ"
    assert values_line(job, values) == values_text(values, {}) \
        == describe_values(values) == expected
    device = SimpleNamespace(where="device", name="Mz", size="w")
    job = SimpleNamespace(compensation={"cc": knob, "rc": device})
    sized = {"cc": 292.8e-15, "rc": 2.1e-6}
    results = {"device": {"name": "Mz", "size": "w"}}
    assert values_line(job, sized) == values_text(sized, results) \
        == describe_values(sized, ("Mz", "w")) == "Cc = 292.8 fF, Mz w = 2.1 µm"
    assert describe_values({"cc": 1e-12, "rc": 3.0}, ("Mz", "m")) == "Cc = 1 pF, Mz m = 3"


def kinds_written() -> set[str]:
    """Every literal ``kind=`` the strategies pass to the evaluator."""
    kinds = set()
    for path in (Path(__file__).parents[1] / "amploop" / "strategy").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.keyword) and node.arg == "kind" \
                    and isinstance(node.value, ast.Constant):  # not the evaluator's kind=kind
                kinds.add(node.value.value)
    return kinds


def test_every_kind_the_strategies_write_has_one_label():
    written = kinds_written()
    assert {"characterise", "verify", "start", "evaluate", "report-map"} <= written
    assert written <= set(KIND_LABELS)
    assert len(set(KIND_LABELS.values())) == len(KIND_LABELS)  # no two kinds share words
    assert kind_label("characterise") == "map sample"
    assert kind_label("from-another-version") == "from-another-version"
