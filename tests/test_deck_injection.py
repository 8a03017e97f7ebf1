"""No shell command reaches ngspice through a job value or through the netlist dialect.

Every payload here asks ngspice to ``shell touch`` a canary file. The runs go through
``amploop measure`` with real ngspice 39 and check that the canary never appears, that
the exit code is 2 and that the message is one line. That each dialect payload is live
(ngspice really runs it) is checked by the same run with ``--allow-control``, which must
create the canary: the reference is ngspice itself, not amploop's reading of it.

The rules (prefix matching of dot-commands, ``*#`` comment lines, the line breaks of
:meth:`str.splitlines`) were measured on ngspice 39 and are listed in
:mod:`amploop.spice.ngread`; hypothesis draws values and netlists from every separator and
every prefix variant.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from conftest import DEMO
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from amploop.cli import main
from amploop.spice.ngread import LINE_BREAKS

SEPARATORS = sorted(LINE_BREAKS) + ["\r\n"]
FEW = settings(max_examples=25, deadline=None, derandomize=True, database=None,
               suppress_health_check=[HealthCheck.function_scoped_fixture])


def one_corner_demo(folder: Path) -> Path:
    """The demo job (invented amplifier and models) cut to its first corner, in ``folder``:
    amp.cir, models.lib (a copy) and job.toml."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "amp.cir").write_text((DEMO / "two_stage.cir").read_text())
    (folder / "models.lib").write_text((DEMO / "models.lib").read_text())
    text = (DEMO / "job.toml").read_text().replace('"two_stage.cir"', '"amp.cir"')
    first = text.index("[[corners]]")
    text = text[: text.index("[[corners]]", first + 1)]
    (folder / "job.toml").write_text(text)
    return folder / "job.toml"


def demo_with_canary(tmp_path_factory) -> tuple[Path, Path, Path]:
    """A fresh folder with :func:`one_corner_demo` in it, and the canary a payload touches."""
    folder = tmp_path_factory.mktemp("job")
    return folder, one_corner_demo(folder), folder / "canary"


def assert_refused(code: int, err: list[str], canary: Path, words: str) -> None:
    """Nothing ran; exit 2 with one line that holds ``words``."""
    assert not canary.exists()
    assert code == 2 and len(err) == 1 and words in err[0], err


def run(job: Path, out: Path, capsys, *extra: str) -> tuple[int, list[str]]:
    capsys.readouterr()
    code = main(["measure", str(job), "--out", str(out), "--no-report", "--quiet", *extra])
    return code, capsys.readouterr().err.strip().splitlines()


# --- job values ---------------------------------------------------------------------------

# field -> (text in the demo job, the key's new value given the injected tail)
FIELDS = {
    "common_mode": ('common_mode = "0.9"', lambda tail: f"common_mode = {json.dumps('{0.9}' + tail)}"),
    "bias": ('ibias = { amps = "10u" }', lambda tail: f"ibias = {{ amps = {json.dumps('{10u}' + tail)} }}"),
    "feedback": ('feedback = "1p"', lambda tail: f"feedback = {json.dumps('{1p}' + tail)}"),
    "load": ('load = "{cl}"', lambda tail: f"load = {json.dumps('{cl}' + tail)}"),
    "job name": ('name = "demo_two_stage_sc_gain2"', lambda tail: f"name = {json.dumps('demo' + tail)}"),
    "corner name": ('name = "tt_27c_1v8"', lambda tail: f"name = {json.dumps('tt' + tail)}"),
}


def inject(job: Path, field: str, tail: str) -> None:
    old, new = FIELDS[field]
    text = job.read_text()
    assert old in text
    job.write_text(text.replace(old, new(tail), 1))


@FEW
@given(field=st.sampled_from(sorted(FIELDS)), sep=st.sampled_from(SEPARATORS))
def test_a_line_break_in_a_job_value_never_reaches_the_shell(tmp_path_factory, capsys, field, sep):
    folder, job, canary = demo_with_canary(tmp_path_factory)
    inject(job, field, f"{sep}.control{sep}shell touch {canary}{sep}.endc{sep}*")
    code, err = run(job, folder / "out", capsys)
    assert_refused(code, err, canary, "line break or control character")
    assert "job.toml" in err[0]


@pytest.mark.parametrize("field", sorted(FIELDS))
def test_each_job_value_is_refused_with_its_place(tmp_path, capsys, field):
    job = one_corner_demo(tmp_path)
    canary = tmp_path / "canary"
    inject(job, field, f"\u2028.control\u2028shell touch {canary}\u2028.endc\u2028*")
    code, err = run(job, tmp_path / "out", capsys)
    assert not canary.exists() and code == 2 and len(err) == 1
    place = {"common_mode": "[bias].common_mode", "bias": "[bias].ibias",
             "feedback": "[feedback].feedback", "load": "[feedback].load", "job name": ":name:",
             "corner name": "corner 'tt"}[field]
    assert place in err[0], err


# --- the netlist dialect --------------------------------------------------------------------

# name -> payload lines ({c}: the canary); every one ran `shell touch` in ngspice 39
DIALECT = {
    "controlx": ".controlx\nshell touch {c}\n.endc",
    "CONTROL / endcfoo": ".CONTROL\nshell touch {c}\n.endcfoo",
    "star-hash": "*# shell touch {c}",
    "indented star-hash": "   *# shell touch {c}",
    "semicolon-hash": ";# shell touch {c}",
    "dollar-hash": "$# shell touch {c}",
}

# where the payload goes: the root netlist, a file it includes, the models file (inside the
# tt section the corner reads), a file the models file includes, a file included by a file
# of [amplifier].includes
PLACES = ("netlist", "netlist include", "models", "models include", "job include include")


def place_payload(job: Path, place: str, payload: str) -> None:
    folder = job.parent
    text = job.read_text()
    if place == "netlist":
        with open(folder / "amp.cir", "a", newline="") as f:
            f.write("\n" + payload + "\n")
    elif place == "netlist include":
        (folder / "extra.inc").write_text("* included\n" + payload + "\n", newline="")
        with open(folder / "amp.cir", "a") as f:
            f.write('\n.include "extra.inc"\n')
    elif place in ("models", "models include"):
        models = (folder / "models.lib").read_text()
        inner = payload
        if place == "models include":
            (folder / "deep.inc").write_text("* included by the models\n" + payload + "\n",
                                             newline="")
            inner = '.include "deep.inc"'
        (folder / "models.lib").write_text(models.replace(".lib tt\n", f".lib tt\n{inner}\n", 1),
                                           newline="")
    else:
        (folder / "outer.inc").write_text('* job include\n.include "inner.inc"\n')
        (folder / "inner.inc").write_text("* inner\n" + payload + "\n", newline="")
        job.write_text(text.replace('models = "', 'includes = ["outer.inc"]\nmodels = "', 1))


@pytest.mark.parametrize("name", sorted(DIALECT))
def test_each_dialect_payload_is_live_and_refused(tmp_path, capsys, name):
    for place in ("netlist include", "models"):
        folder = tmp_path / place.replace(" ", "_")
        job = one_corner_demo(folder)
        canary = folder / "canary"
        place_payload(job, place, DIALECT[name].format(c=canary))
        assert_refused(*run(job, folder / "out", capsys), canary, "--allow-control")
        _, err = run(job, folder / "out-allowed", capsys, "--allow-control")
        assert canary.exists(), f"{name} in {place}: ngspice did not run it ({err})"


@FEW
@given(name=st.sampled_from(sorted(DIALECT)), place=st.sampled_from(PLACES))
def test_no_dialect_payload_anywhere_reaches_the_shell(tmp_path_factory, capsys, name, place):
    folder, job, canary = demo_with_canary(tmp_path_factory)
    place_payload(job, place, DIALECT[name].format(c=canary))
    assert_refused(*run(job, folder / "out", capsys), canary, "--allow-control")


@FEW
@given(sep=st.sampled_from(SEPARATORS), place=st.sampled_from(PLACES))
def test_a_line_break_inside_a_comment_line_never_hides_a_control_block(tmp_path_factory,
                                                                         capsys, sep, place):
    folder, job, canary = demo_with_canary(tmp_path_factory)
    place_payload(job, place, f"* a note{sep}.control\nshell touch {canary}\n.endc")
    assert_refused(*run(job, folder / "out", capsys), canary, ".control block")


def test_a_form_feed_in_a_comment_line_opens_a_control_block_for_ngspice(tmp_path, capsys):
    """The reference for the test above: allowed, the block runs (the shared library gets
    the deck split by :meth:`str.splitlines`)."""
    job = one_corner_demo(tmp_path)
    canary = tmp_path / "canary"
    place_payload(job, "netlist", f"* a note\f.control\nshell touch {canary}\n.endc")
    run(job, tmp_path / "out", capsys, "--allow-control")
    assert canary.exists()


def test_a_nul_after_control_is_refused(tmp_path, capsys):
    job = one_corner_demo(tmp_path)
    canary = tmp_path / "canary"
    place_payload(job, "netlist include", f".control\0junk\nshell touch {canary}\n.endc")
    code, err = run(job, tmp_path / "out", capsys)
    assert not canary.exists() and code == 2 and len(err) == 1
    assert "NUL" in err[0] and "extra.inc:2" in err[0], err


@pytest.mark.parametrize("keyword, section", [(".incfoo", ""), (".incl", ""),
                                              (".library", " sec")])
def test_an_include_spelled_as_ngspice_reads_it_is_checked(tmp_path, capsys, keyword, section):
    job = one_corner_demo(tmp_path)
    canary = tmp_path / "canary"
    body = f".control\nshell touch {canary}\n.endc\n"
    hidden = tmp_path / "hidden.lib"
    hidden.write_text(f".lib sec\n{body}.endl sec\n" if section else body)
    with open(tmp_path / "amp.cir", "a") as f:
        f.write(f'\n{keyword} "{hidden}"{section}\n')
    code, err = run(job, tmp_path / "out", capsys)
    assert not canary.exists() and code == 2 and len(err) == 1
    assert "hidden.lib" in err[0] and ".control block" in err[0], err
    run(job, tmp_path / "out-allowed", capsys, "--allow-control")
    assert canary.exists()  # ngspice read the file


def test_a_title_that_makes_the_deck_a_script_is_refused(tmp_path, capsys):
    job = one_corner_demo(tmp_path)
    canary = tmp_path / "canary"
    amp = tmp_path / "amp.cir"
    amp.write_text(amp.read_text().replace(
        ".ends two_stage", f".titlex *ng_script\nshell touch {canary}\n.ends two_stage"))
    code, err = run(job, tmp_path / "out", capsys)
    assert not canary.exists() and code == 2 and len(err) == 1
    assert "ng_script" in err[0] and "amp.cir" in err[0], err


@pytest.mark.parametrize("field", ["job name", "corner name"])
@pytest.mark.parametrize("tail", ["nul\u0000byte", "bell\u0007\u001b[2J"])
def test_a_control_character_in_a_name_is_refused(tmp_path, capsys, field, tail):
    job = one_corner_demo(tmp_path)
    inject(job, field, tail)
    assert_refused(*run(job, tmp_path / "out", capsys), tmp_path / "canary",
                   "line break or control character")
