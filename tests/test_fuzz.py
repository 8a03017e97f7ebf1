"""Property-based tests (hypothesis) of the netlist reader and the job-file loader.

Robustness. Random text, random bytes and mutations of the real files in ``netlists/``
(lines deleted, duplicated, swapped; characters, unicode, NUL bytes and random bytes
decoded with ``errors="replace"`` inserted; truncation; very long lines; deeply nested
braces and parentheses; unbalanced quotes and braces; huge numbers) either read, or raise
the stage's own error with a message of one line (the README promises one line on stderr):
exactly ``NetlistError`` from the netlist reader and rewriter, exactly ``JobError`` from
``load_job``; never another exception. Job files that are valid TOML with random keys,
values and types in every table must also get an error that names the place (the key
path), and a TOML error names line and column. ``evaluate`` keeps its documented contract
(a float or ``ValueError``) and ``value_of`` turns that into a ``NetlistError``. What is
read must hang together (statement order, line numbers; a loaded job's corners unique,
values finite, parameter names SPICE names).

Round trip. Random but valid netlists (subckts with ports and ``params:``, nested ones,
R/C/L/M/X/G/E/V/I lines with values and ``name=value`` parameters, ``.param``, ``.model``
with and without parentheses, ``.lib`` sections, ``.include`` and ``.lib file section``
lines, ``.control`` blocks, every kind of comment, ``+`` continuations across comment and
blank lines, CRLF) are read, written back with ``render_file(top_level=False)`` with random
edits (``replace_param``, ``replace_element_value``, ``replace_instance_param``, also in
included files, which are then inlined), and read again. The expected statements come from
the generator's own record of what it wrote (tokens as the module docstring of
``amploop.spice.netlist`` says the dialect reads), not from the reader: every statement must
come back with its keyword, tokens, subckt and section, the edits applied, and
``split_logical_lines`` must keep every physical line (on any text). A ``+`` line must add
the same text whether or not comment and blank lines stand between it and its statement
(ngspice joins across them), and ``tokenize`` loses no character but separators.

The examples are derandomized (the same every run); ``AMPLOOP_FUZZ_SCALE=10`` runs ten
times as many, and ``AMPLOOP_FUZZ_RANDOM=1`` draws new ones each run.
"""

from __future__ import annotations

import contextlib
import copy
import datetime as dt
import math
import os
import random
import re
import shutil
import tempfile
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from amploop.errors import AmploopError, JobError, NetlistError
from amploop.spec.job import load_job
from amploop.spec.model import Job
from amploop.spice.expressions import evaluate
from amploop.spice.lexer import split_logical_lines, tokenize
from amploop.spice.netlist import Netlist, read_netlist, value_of
from amploop.spice.rewrite import (
    element_value,
    render_file,
    replace_element_value,
    replace_instance_param,
    replace_param,
)
from amploop.spice.source import read_source

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "netlists" / "demo"
PTM45 = REPO / "netlists" / "ptm45"
NETLIST_SOURCES = [DEMO / "two_stage.cir", DEMO / "models.lib", PTM45 / "two_stage_45.cir"]
JOB_SOURCES = [DEMO / "job.toml", DEMO / "job_triode.toml", PTM45 / "job.toml"]

SCALE = float(os.environ.get("AMPLOOP_FUZZ_SCALE", "1"))
RANDOM = bool(os.environ.get("AMPLOOP_FUZZ_RANDOM"))


def fuzz(examples: int):
    """Settings of one property: ``examples`` examples (times the scale), no deadline."""
    return settings(
        max_examples=max(1, int(examples * SCALE)),
        deadline=None,
        derandomize=not RANDOM,
        database=None,
        print_blob=False,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                               HealthCheck.large_base_example],
    )


# --- what an error must look like --------------------------------------------------------


def check_error(exc: BaseException, expected: type[AmploopError]) -> None:
    """Exactly ``expected`` (not another AmploopError), with a problem and a message of one
    line (the command line prints it as the one line on stderr the README promises)."""
    assert type(exc) is expected, f"expected {expected.__name__}, got {type(exc).__name__}: {exc}"
    assert exc.problem and exc.problem.strip(), f"empty problem in {exc!r}"
    assert str(exc).strip()
    assert len(str(exc).splitlines()) == 1, f"not one line: {str(exc)!r}"


def outcome(expected: type[AmploopError], function, *args, **kwargs):
    """``function(*args, **kwargs)``, or the ``expected`` error it raised (checked). Any other
    exception propagates and fails the test."""
    try:
        return function(*args, **kwargs)
    except AmploopError as exc:
        check_error(exc, expected)
        return exc


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


@contextlib.contextmanager
def fresh(base: Path, *, helpers: bool = False):
    """A new folder under ``base`` for one example (with copies of the example netlists
    that random include lines can find, if ``helpers``), removed afterwards."""
    path = Path(tempfile.mkdtemp(dir=base))
    try:
        if helpers:
            for source in NETLIST_SOURCES:
                shutil.copy(source, path / source.name)
            (path / "missing.lib").mkdir()  # a folder, not a file
        yield path
    finally:
        shutil.rmtree(path, ignore_errors=True)


# --- mutations of real files -------------------------------------------------------------

_SPICE_CHARS = list(" \t+-*/=(){}[]'\",;$.:_^<>?!~@#%&|\\0123456789aeklmnpstuxMKGTE")
_ODD_CHARS = list("µΩé中😀\u00a0\u2028\u2029\x85\x0b\x0c\x1c\ufeff\u200b\ufffd\x00\x7f\x1b\r")
_char = st.one_of(st.sampled_from(_SPICE_CHARS), st.sampled_from(_ODD_CHARS),
                  st.characters(exclude_categories=["Cs"]))  # any but surrogates

_NETLIST_SNIPPETS = [
    "{", "}", "'", '"', "(", ")", "=", " = ", "params:", "params: cc=1p", "+", "+ ", "*", ";",
    " $ ", "$", "//", ",", "\x00", "\t",
    ".subckt", ".subckt x a b", ".SUBCKT two_stage a b", ".ends", ".ends two_stage", ".param",
    ".param a=", ".param cc = {rc}", ".param rc={cc}", ".model", ".model m nmos (", ".model m)",
    ".lib", ".lib tt", ".lib ss", ".endl", ".endl tt", ".include", ".include missing.cir",
    ".include ~nosuchuser/x.cir", ".include ~/x.cir", '.include "', ".include two_stage.cir",
    ".include models.lib", ".inc .", ".inc /", ".inc ..", ".lib models.lib tt",
    ".lib models.lib nosuch", ".lib 'models.lib' TT", ".lib missing.lib tt", ".include a\x00b",
    ".include " + "d/" * 3000, ".include " + "n" * 300, ".control", ".endc", ".end",
    "9" * 400, "9" * 5000, "1e999999", "1e308meg", "-" * 300 + "1", "2^" + "-" * 300 + "1",
    "{" * 3000, "}" * 3000, "{" * 2000 + "cc" + "}" * 2000, "(" * 2000 + "1" + ")" * 2000,
    "'" * 3, '"' * 3, "{'}", "'{'", "µ", "Ω", "中文", "\ufeff", "Rc n1 nz", "Cc nz out",
    "Rc n1 nz {" + "(" * 1500 + "rc" + ")" * 1500 + "}", "X1 a b two_stage cc=1p",
]


_NETLIST_TROUBLE = [
    ".include ~nosuchuser/x.cir", ".include a\x00b.cir", ".lib " + "n" * 300 + " tt",
    ".include " + "d/" * 3000 + "x", ".inc '" + "q" * 256 + "'", ".lib models.lib tt",
    ".lib models.lib TT", ".include models.lib",
    "Rc n1 nz {" + "(" * 1500 + "rc" + ")" * 1500 + "}",
    "Cc nz out {" + "-" * 3000 + "cc}", ".param deep=" + "(" * 150 + "1" + ")" * 150, "+$ x",
    "+ $ x", "+$ x", ".subckt", ".ends", ".endl", ".lib tt", ".control", ".endc",
    ".include 'x\"y.cir'", ".lib x.lib", "+$sec",
    '.include x" y.cir', ".lib 'a b.lib' tt", ".include a'b\"c.cir",
]
_NETLIST_VALUES = [
    "{" + "(" * 1500 + "rc" + ")" * 1500 + "}", "{" + "-" * 3000 + "1}", "1e999", "9" * 5000,
    "{cc", "cc}", "'", "{'}", "", "{1/0}", "{sqrt(-1)}", "{log(0)}", "{exp(1000)}", "{2^9999}",
    "{0^-1}", "{pow(-8, 0.5)}", "{max()}", "{min(1,2,3)}", "{cc*rc}", "{nosuch}", "{1e308*10}",
    "{a ? b : c}", "{rc}", "{cc}",
]


def _lines_of(text: str) -> list[str]:
    return text.split("\n")


@st.composite
def mutated(draw, texts: list[str], snippets: list[str], foreign: list[str],
            trouble: list[str], values: list[str]) -> str:
    """One of ``texts`` with 1..6 random mutations (see the module docstring): ``snippets``
    are inserted into lines or as lines, ``foreign`` lines come from other files,
    ``trouble`` lines are known hard cases inserted more often, and ``values`` replace
    what follows the first ``=`` of a line."""
    lines = _lines_of(draw(st.sampled_from(texts)))
    for _ in range(draw(st.integers(1, 6))):
        if not lines:
            lines = [""]
        i = draw(st.integers(0, len(lines) - 1))
        j = draw(st.integers(0, len(lines) - 1))
        op = draw(st.sampled_from([
            "delete", "delete-run", "duplicate", "duplicate-many", "swap", "move", "chars",
            "snippet", "snippet-line", "foreign-line", "replace-char", "nul", "long-line",
            "nest", "quote", "huge-number", "unicode", "bytes", "continuation", "comment",
            "case", "truncate-line", "trouble", "value", "value",
        ]))
        line = lines[i]
        at = draw(st.integers(0, len(line)))
        if op == "delete":
            del lines[i]
        elif op == "delete-run":
            del lines[i:i + draw(st.integers(1, 20))]
        elif op == "duplicate":
            lines.insert(j, line)
        elif op == "duplicate-many":
            lines[i:i] = [line] * draw(st.integers(2, 200))
        elif op == "swap":
            lines[i], lines[j] = lines[j], lines[i]
        elif op == "move":
            lines.insert(j, lines.pop(i))
        elif op == "chars":
            added = "".join(draw(st.lists(_char, min_size=1, max_size=8)))
            lines[i] = line[:at] + added + line[at:]
        elif op == "snippet":
            lines[i] = line[:at] + draw(st.sampled_from(snippets)) + line[at:]
        elif op == "snippet-line":
            lines.insert(j, draw(st.sampled_from(snippets)))
        elif op == "foreign-line":
            lines.insert(j, draw(st.sampled_from(foreign)))
        elif op == "replace-char" and line:
            at = min(at, len(line) - 1)
            lines[i] = line[:at] + draw(_char) + line[at + 1:]
        elif op == "nul":
            lines[i] = line[:at] + "\x00" * draw(st.integers(1, 3)) + line[at:]
        elif op == "long-line":
            piece = draw(st.sampled_from(["x", " 1k", " a=1", "{", "(", ",", " ", "+",
                                          line or "y"]))
            most = max(2, 30000 // len(piece))
            lines[i] = line + piece * draw(st.integers(min(1000, most), most))
        elif op == "nest":
            depth = draw(st.integers(50, 3000))
            open_, close = draw(st.sampled_from([("{", "}"), ("(", ")"), ("'", "'"), ("[", "]")]))
            inner = draw(st.sampled_from(["", "cc", "1p", "a+b"]))
            balanced = draw(st.booleans())
            lines[i] = line[:at] + open_ * depth + inner + (close * depth if balanced else "") \
                + line[at:]
        elif op == "quote":
            lines[i] = line[:at] + draw(st.sampled_from(["'", '"', "{", "}", "(", ")"])) + line[at:]
        elif op == "huge-number":
            number = draw(st.sampled_from(["9" * 400, "9" * 5000, "1e999999", "1e308", "1e308t",
                                           "-1e999", "0x1p99", "1" + "0" * 4400, "1e-99999"]))
            lines[i] = re.sub(r"\d+(\.\d*)?([eE][-+]?\d+)?", number, line, count=1) \
                if re.search(r"\d", line) else line[:at] + number + line[at:]
        elif op == "unicode":
            lines[i] = line[:at] + draw(st.text(min_size=1, max_size=10)) + line[at:]
        elif op == "bytes":
            noise = draw(st.binary(min_size=1, max_size=40)).decode("utf-8", errors="replace")
            lines[i] = line[:at] + noise + line[at:]
        elif op == "continuation":
            lines[i] = draw(st.sampled_from(["+", "+ ", " +"])) + line
        elif op == "comment":
            lines[i] = draw(st.sampled_from(["*", "; ", "$ ", "// "])) + line
        elif op == "case":
            lines[i] = line.swapcase()
        elif op == "truncate-line":
            lines[i] = line[:at]
        elif op == "trouble":
            lines.insert(j, draw(st.sampled_from(trouble)))
        elif op == "value":
            with_value = [k for k, row in enumerate(lines) if "=" in row]
            if with_value:
                k = draw(st.sampled_from(with_value))
                key = lines[k].partition("=")[0]
                lines[k] = f"{key}= {draw(st.sampled_from(values))}"
    newline = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = newline.join(lines)
    if draw(st.integers(0, 9)) == 0:  # cut off, mostly late (early cuts all fail alike)
        text = text[: draw(st.integers(len(text) // 3, len(text)))]
    return text


def _read_all(paths: list[Path]) -> list[str]:
    return [p.read_text(encoding="utf-8") for p in paths]


NETLIST_TEXTS = _read_all(NETLIST_SOURCES)
FOREIGN_LINES = [line for text in NETLIST_TEXTS for line in text.split("\n") if line.strip()]


# --- a record of what a netlist says, for comparisons ---------------------------------------


def resolved(file: Path, name: str) -> str:
    """Where an include name points (quotes stripped, ``~`` expanded, relative to the
    including file), as the reader resolves it."""
    name = name.strip("'\"")
    try:
        path = Path(name).expanduser()
    except RuntimeError:  # ~user of an unknown user: left as written
        path = Path(name)
    if not path.is_absolute():
        path = file.parent / path
    try:
        return str(path.resolve())
    except (OSError, ValueError, RuntimeError):  # NUL byte, symlink loop: not a usable name
        return f"unusable {name!r}"


_INCLUDES = {".include", ".inc", ".incl"}


def is_include(tokens) -> bool:
    keyword = tokens[0].lower()
    return (keyword in _INCLUDES and len(tokens) >= 2) or (keyword == ".lib" and len(tokens) >= 3)


def summary(statement_tokens, file: Path, subckt, section):
    """(tokens, subckt, section) with an include's file name replaced by where it points
    (render_file writes includes with absolute paths)."""
    tokens = tuple(statement_tokens)
    if is_include(tokens):  # render_file writes the keyword, the file and a .lib's section
        reads = tokens[2:3] if tokens[0].lower() == ".lib" else ()
        tokens = (tokens[0], "->" + resolved(file, tokens[1]), *reads)
    return tokens, subckt, section


def summaries(source) -> list[tuple]:
    return [summary(s.tokens, s.file, s.subckt, s.section) for s in source.statements]


def check_source(source) -> None:
    """Facts every parsed file must satisfy, whatever its text."""
    for i, statement in enumerate(source.statements):
        assert statement.tokens and all(statement.tokens), statement
        assert 0 <= statement.index < len(source.lines)
        assert source.lines[statement.index].text, statement
        assert statement.line == source.lines[statement.index].number
        if i:
            assert statement.index > source.statements[i - 1].index
    numbers = [line.number for line in source.lines]
    assert numbers == sorted(numbers) and len(set(numbers)) == len(numbers)


# --- split_logical_lines and tokenize on anything -----------------------------------------

_netlist_words = st.one_of(
    st.sampled_from(["R1", "c2", "M1", "X1", ".subckt", ".ends", ".param", ".model", ".lib",
                     ".endl", ".include", ".control", ".endc", ".end", "params:", "a=1", "=",
                     "{", "}", "'", '"', "(", ")", "+", "*", ";", "$", "//", ",", "tt",
                     "{cc}", "1p", "nmos", "(level=1", "~nosuchuser/x", "a\x00b", "x" * 300]),
    st.text(alphabet=st.sampled_from(_SPICE_CHARS + _ODD_CHARS), max_size=8),
    st.text(max_size=4),
)
_netlist_line = st.tuples(
    st.sampled_from(["", "", " ", "\t", "+", "+ ", "*", "  *"]),
    st.lists(_netlist_words, max_size=8),
).map(lambda parts: parts[0] + " ".join(parts[1]))


@st.composite
def netlist_like_text(draw) -> str:
    """Text made of netlist-like lines (or plain random text), any line endings."""
    if draw(st.integers(0, 4)) == 0:
        return "".join(draw(st.lists(st.one_of(_char, st.sampled_from(["\n", "\r\n", "\r"])),
                                     max_size=300)))
    lines = draw(st.lists(_netlist_line, max_size=25))
    endings = draw(st.lists(st.sampled_from(["\n", "\n", "\r\n", "\r"]), min_size=len(lines),
                            max_size=len(lines)))
    text = "".join(line + end for line, end in zip(lines, endings, strict=True))
    if draw(st.integers(0, 4)) == 0:  # cut off anywhere
        text = text[: draw(st.integers(0, len(text)))]
    return text


def physical_lines(text: str) -> list[str]:
    """The physical lines of ``text``, as the docstring of split_logical_lines describes them:
    a last line needs no ending, and every line boundary of Python's ``str.splitlines``
    ends one (the table in the Python documentation of ``str.splitlines``: ``\\n``,
    ``\\r\\n``, ``\\r``, ``\\v``, ``\\f``, ``\\x1c``, ``\\x1d``, ``\\x1e``, ``\\x85``, U+2028,
    U+2029)."""
    lines = re.split(r"\r\n|[\n\r\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029]", text)
    if lines and lines[-1] == "":
        lines.pop()
    return lines


def check_split(text: str) -> None:
    """Every physical line is in exactly one raw, in order; numbers count physical lines."""
    logical = split_logical_lines(text)
    expected = physical_lines(text)
    assert [raw for line in logical for raw in line.raw] == expected
    position = 1
    for line in logical:
        assert line.number == position
        assert line.raw
        position += len(line.raw)
        assert line.text == line.text.strip()
        assert "\n" not in line.text and "\r" not in line.text


@fuzz(800)
@given(netlist_like_text())
def test_split_logical_lines_keeps_every_physical_line(text):
    check_split(text)
    for line in split_logical_lines(text):
        assert all(tokenize(line.text))


_continuation = st.tuples(
    st.sampled_from(["+", " +", "+ ", "\t+"]),
    st.lists(st.one_of(st.sampled_from(["$", " $", "$ ", ";", "//", "/", ",", "'", "{", "}", "*",
                                        " ", "x", "1k", "+"]), _char), max_size=8),
).map(lambda t: t[0] + "".join(t[1]))
_comment_lines = st.lists(st.sampled_from(["*", "* note", "", "   ", "; x", "$ x", "// x", "*+ x",
                                           "\t*"]), min_size=1, max_size=3)


@fuzz(400)
@given(head=st.lists(_netlist_words, max_size=5).map(lambda w: "R1 a b " + " ".join(w)),
       plus=_continuation, between=_comment_lines)
def test_a_continuation_reads_the_same_after_comment_lines(head, plus, between):
    """ngspice joins a ``+`` line across comment and blank lines; what the ``+`` line adds
    must not depend on whether such lines come between (e.g. ``+$ x``: not a comment
    either way, as ngspice 39 reads it)."""
    direct = split_logical_lines(f"{head}\n{plus}\n")
    across = split_logical_lines(f"{head}\n" + "\n".join(between) + f"\n{plus}\n")
    assert [line.text for line in across if line.text] == [line.text for line in direct
                                                           if line.text]


@fuzz(300)
@given(st.text(alphabet=st.one_of(_char, st.sampled_from(["=", "{", "}", "(", ")", "'", " "])),
               max_size=200))
def test_tokenize_loses_no_characters(text):
    """Tokens hold every character but the separators (blank, tab, comma) and, for a
    ``.model`` line, its parentheses: nothing is lost or made up."""
    tokens = tokenize(text)
    assert all(tokens)
    model = text.lstrip()[:6].lower() == ".model"
    drop = str.maketrans("", "", " \t,()" if model else " \t,")
    assert "".join(tokens).translate(drop) == text.translate(drop)


_plain_char = st.sampled_from(list("abcXY01.=-+*/;$ \t,!"))


@fuzz(300)
@given(st.text(alphabet=_plain_char, max_size=120),
       st.text(alphabet=_plain_char, max_size=60), st.text(alphabet=_plain_char, max_size=60),
       st.booleans())
def test_the_shortcuts_of_the_reader_give_what_its_general_routines_give(head, inner, tail,
                                                                         swap):
    """The reader's quick paths (a line without comment characters, a statement without
    groups, a ``.model`` card with one plain pair of parentheses) agree with the
    character-by-character routines they skip."""
    from amploop.spice.lexer import (
        SEPARATORS,
        grouped_tokens,
        strip_inline_comment,
        unwrap_model_parentheses,
        unwrap_outer_group,
    )

    assert [t for t in SEPARATORS.split(head) if t] == grouped_tokens(head)
    plain = head.translate(str.maketrans("", "", ";$/"))
    assert strip_inline_comment(plain) == plain
    card = f".model {head}{')' if swap else '('}{inner}{'(' if swap else ')'}{tail}"
    assert unwrap_model_parentheses(card) == unwrap_outer_group(card)


# --- the netlist reader on random and mutated input ----------------------------------------


def exercise_netlist(path: Path, base: Path, data) -> None:
    """Read ``path`` as the amplifier netlist and, when that works, use what was read the way
    amploop does (subckt lookup, values, edits, rendering): only NetlistError may come out."""
    source = outcome(NetlistError, read_source, path)
    if not isinstance(source, NetlistError):
        check_source(source)
        text = path.read_text(encoding="utf-8", errors="replace")
        again = read_source(path, text)
        assert summaries(again) == summaries(source)
        # write back whole (top_level=False) and read again: the same statements, less the
        # ``.end`` lines, which render_file comments out in a file that is not the top level
        netlist = Netlist(root=source.path, files={source.path: source})
        rendered = outcome(NetlistError, render_file, netlist, source.path, {},
                           top_level=False)
        if not isinstance(rendered, NetlistError):
            reread = outcome(NetlistError, read_source, base / "rendered.cir", rendered[0])
            expected = [s for s in summaries(source)
                        if not (s[0][0].lower() == ".end" and s[1] is None)]
            if not isinstance(reread, NetlistError):
                assert summaries(reread) == expected
    netlist = outcome(NetlistError, read_netlist, path)
    event(f"read_netlist: {type(netlist).__name__}")
    if isinstance(netlist, NetlistError):
        return
    for file in netlist.files.values():
        check_source(file)
    name = data.draw(st.sampled_from([*netlist.subckts, "two_stage", "nosuch", ""]), label="subckt")
    outcome(NetlistError, netlist.subckt, name)
    statements = [s for f in netlist.files.values() for s in f.statements]
    params = {k: v for k, (_, v) in netlist.global_params.items()}
    for sub in netlist.subckts.values():
        for statement in sub.elements():
            if statement.keyword[0] in "rcl":
                value = outcome(NetlistError, element_value, statement)
                if isinstance(value, str):
                    got = outcome(NetlistError, value_of, value, {**params, **sub.params},
                                  where=statement.where)
                    assert isinstance(got, (float, NetlistError))
                    if isinstance(got, float):
                        assert math.isfinite(got)
    edits = {}
    for statement in data.draw(st.lists(st.sampled_from(statements), max_size=4),
                               label="edited") if statements else []:
        how = data.draw(st.sampled_from(["param", "value", "instance"]), label="edit")
        new = data.draw(st.sampled_from(["1p", "{cc*2}", "'a b'", "2k"]), label="value")
        if how == "param":
            name = data.draw(st.sampled_from(["cc", "rc", "vto", "w"]), label="name")
            text = outcome(NetlistError, replace_param, statement, name, new)
        elif how == "value":
            text = outcome(NetlistError, replace_element_value, statement, new)
        else:
            text = outcome(NetlistError, replace_instance_param, statement, "w", new)
        if isinstance(text, str):
            edits[(statement.file, statement.index)] = text
    for top_level in (True, False):
        rendered = outcome(NetlistError, render_file, netlist, netlist.root, edits,
                           top_level=top_level)
        if isinstance(rendered, tuple):
            text, notes = rendered
            assert isinstance(text, str) and all(isinstance(n, str) for n in notes)


@fuzz(500)
@given(text=netlist_like_text(), data=st.data())
def test_random_netlist_text_reads_or_raises_netlist_error(folder, text, data):
    with fresh(folder, helpers=True) as base:
        path = base / "random.cir"
        path.write_text(text, encoding="utf-8", newline="")
        exercise_netlist(path, base, data)


@fuzz(200)
@given(noise=st.binary(max_size=400), data=st.data())
def test_random_bytes_read_or_raise_netlist_error(folder, noise, data):
    with fresh(folder, helpers=True) as base:
        path = base / "bytes.cir"
        path.write_bytes(noise)
        exercise_netlist(path, base, data)


@fuzz(700)
@given(text=mutated(NETLIST_TEXTS, _NETLIST_SNIPPETS, FOREIGN_LINES, _NETLIST_TROUBLE,
                    _NETLIST_VALUES), data=st.data())
def test_mutated_netlists_read_or_raise_netlist_error(folder, text, data):
    with fresh(folder, helpers=True) as base:
        path = base / "mutated.cir"
        path.write_text(text, encoding="utf-8", newline="")
        exercise_netlist(path, base, data)


_include_names = st.one_of(
    st.sampled_from(["a\x00b.cir", "~nosuchuser/x.cir", "~/x.cir", "~", "n" * 300,
                     "d/" * 3000 + "x", "models.lib", "'models.lib'", '"models.lib"',
                     "two_stage.cir", "include.cir", ".", "..", "/", "''", 'x"y.cir', "a'b\"c",
                     "missing.lib", "µ.cir", "a\x0cb", "{a b}", "sub/../models.lib", "'a;b'"]),
    st.text(max_size=30),
)


@fuzz(300)
@given(keyword=st.sampled_from([".include", ".inc", ".INCL", ".lib"]), name=_include_names,
       section=st.sampled_from(["", " tt", " TT", " nosuch", " $x", " 'tt'"]), data=st.data())
def test_any_include_line_reads_or_raises_netlist_error(folder, keyword, name, section, data):
    """An include line naming any file (a NUL byte, ~user, too long, quotes, a folder ...)."""
    text = (f"* an include line\n{keyword} {name}{section if keyword == '.lib' else ''}\n"
            ".subckt amp a b params: cc=1p\nR1 a b {cc}\n.ends\n")
    with fresh(folder, helpers=True) as base:
        path = base / "include.cir"
        path.write_text(text, encoding="utf-8", newline="")
        exercise_netlist(path, base, data)


@fuzz(100)
@given(st.sampled_from(NETLIST_SOURCES), st.integers(0, 3), st.binary(min_size=1, max_size=8))
def test_invalid_utf8_and_nul_bytes_in_netlists(folder, source, where, noise):
    """Bytes that are not UTF-8 (read with errors='replace') and NUL bytes in real files."""
    data = bytearray(source.read_bytes())
    at = len(data) * where // 3
    data[at:at] = noise + b"\x00\xff\xfe"
    with fresh(folder, helpers=True) as base:
        path = base / source.name
        path.write_bytes(bytes(data))
        for reader in (read_source, read_netlist):
            outcome(NetlistError, reader, path)


# --- expressions ---------------------------------------------------------------------------

_expression_atoms = st.one_of(
    st.sampled_from(["1", "0", "2p", "1.5k", "3meg", "1e-12", ".5", "1e999", "9" * 400, "cc",
                     "rc", "vdd", "pi", "e", "nosuch", "sqrt(", "exp(", "log(", "min(", "max(",
                     "pow(", "pwr(", "abs(", "log10(", "ln(", "(", ")", ",", "+", "-", "*", "/",
                     "^", "**", "{", "}", "'", " ", "?", ":", "==", "x(", "1e308", "0^-1"]),
    st.text(alphabet=st.sampled_from(list("0123456789.eE+-*/^(),{}' abcpkmgtu_")), max_size=6),
)
_expressions = st.one_of(
    st.lists(_expression_atoms, max_size=30).map("".join),
    st.tuples(st.integers(1, 3000), st.sampled_from(["(", "-", "+", "2^", "2**-", "sqrt(", "{"]),
              st.booleans()).map(
        lambda t: t[1] * t[0] + "1" + ({"(": ")", "sqrt(": ")", "{": "}"}.get(t[1], "") * t[0]
                                       if t[2] else "")),
    st.text(max_size=20),
)
_params = st.dictionaries(
    st.sampled_from(["cc", "rc", "vdd", "a", "b", "CC"]),
    _expressions, max_size=4,
)


@fuzz(800)
@given(_expressions, _params)
def test_evaluate_gives_a_finite_float_or_value_error(expression, params):
    """The documented contract of ``evaluate``: a finite float, or ValueError with a message
    (an unknown name, a syntax error, a loop, a result out of range, nesting too deep)."""
    try:
        value = evaluate(expression, params)
    except ValueError as exc:
        assert str(exc).strip()
    else:
        assert isinstance(value, float) and math.isfinite(value)
    got = outcome(NetlistError, value_of, expression, params, where="/x/y.cir:3")
    if isinstance(got, NetlistError):
        assert got.file == "/x/y.cir" and got.place == "3"


def test_evaluate_handles_deep_chains_of_parameters():
    """A chain of parameters each nested deeply: a value or ValueError, never RecursionError."""
    params = {f"p{i}": "(" * 40 + f"p{i + 1}" + ")" * 40 for i in range(60)}
    params["p60"] = "1"
    with pytest.raises(ValueError):
        evaluate("p0", params)
    assert evaluate("p58", params) == 1.0


# --- a generator of valid netlists, with a record of what it wrote --------------------------


@dataclass
class Written:
    """One generated statement: its expected tokens and context, and how it may be edited."""

    tokens: list[str]
    subckt: str | None
    section: str | None
    kind: str  # param subckt rcl device instance model include other ends endl lib control
    include: tuple[str, str | None] | None = None  # (file name, section) it reads


@dataclass
class Generated:
    """A generated file: its text and the statements it holds, in order."""

    name: str
    text: str
    statements: list[Written]
    subckts: dict[str, tuple[str, list[str], dict[str, str]]] = field(default_factory=dict)
    elements: dict[str, list[str]] = field(default_factory=dict)  # subckt -> element names
    local_params: dict[str, set[str]] = field(default_factory=dict)


_node = st.one_of(st.from_regex(r"[a-z][a-z0-9_]{0,4}", fullmatch=True),
                  st.sampled_from(["0", "vdd", "Out", "n#1", "in.p"]))
_number_value = st.builds(
    lambda mantissa, suffix: f"{mantissa}{suffix}",
    st.sampled_from(["1", "0", "1.5", ".5", "47", "3e-12", "2.2E3", "-1", "+2", "10"]),
    st.sampled_from(["", "", "p", "n", "u", "m", "k", "meg", "MEG", "g", "t", "f", "pF", "kOhm"]),
)
_value = st.one_of(
    _number_value,
    st.sampled_from(["{cc}", "{ 2*cc }", "{cc*1.5}", "'rc*2'", '"3p"', "{max(1p, cc)}",
                     "{a>=b?1p:2p}", "{(rc+1)*2}", "1k$x", "{a;b}", "'a;b'", "{x $ y}",
                     "{ a // b }"]),
)
# no line breaks of any kind (str.splitlines' set) and no NUL: inside a comment they would end
# it (a NUL is refused), so a generated valid netlist leaves them out
_NOT_IN_COMMENTS = "\r\n\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029\x00"
_COMMENT_CHARS = list("abc XYZ 019 '\"{}()[];$/*+=,.\t\\µΩé中😀\u00a0\u200b\x1b\x7f")


class Writer:
    """Draws valid statements and writes them with random formatting; keeps the record."""

    def __init__(self, draw, name: str, counter: list[int], *,
                 includes: list[tuple[str, str | None]]):
        self.draw = draw
        self.rng = random.Random(draw(st.integers(0, 2**32 - 1), label="formatting seed"))
        self.name = name
        self.counter = counter  # shared between files: every name is unique
        self.includes = includes
        self.lines: list[str] = []
        self.record: list[Written] = []
        self.subckts: dict[str, tuple[str, list[str], dict[str, str]]] = {}
        self.elements: dict[str, list[str]] = {}
        self.local_params: dict[str, set[str]] = {}

    def unique(self, strategy) -> str:
        self.counter[0] += 1
        return f"{self.draw(strategy)}{self.counter[0]}"

    # formatting: from a seeded PRNG (cheap; hypothesis draws the seed and the structure)

    def comment_text(self) -> str:
        rng = self.rng
        chars = []
        for _ in range(rng.randrange(16)):
            if rng.random() < 0.2:  # any code point but surrogates and line ends
                code = rng.randrange(0x110000)
                ch = chr(code) if not 0xD800 <= code <= 0xDFFF else "?"
                chars.append(ch if ch not in _NOT_IN_COMMENTS else " ")
            else:
                chars.append(rng.choice(_COMMENT_CHARS))
        return "".join(chars)

    def comment_line(self) -> str:
        kind = self.rng.choice(("*", "  *", "", "   ", "\t", "\u00a0", ";", "$ ", "//", "*+"))
        return kind + self.comment_text() if kind.strip() else kind

    def comment_lines(self, most: int) -> list[str]:
        return [self.comment_line() for _ in range(self.rng.randint(0, most))]

    def inline_comment(self) -> str:
        kind = self.rng.choice(("", "", "", "", " ;", ";", " $ ", "\t$", " $", " //", "//"))
        return kind + self.comment_text() if kind else ""

    def write(self, pieces: list[str]) -> None:
        rng = self.rng
        current = rng.choice(("", "", "", " ", "\t")) + pieces[0]
        for piece in pieces[1:]:
            how = rng.choice((" ", " ", " ", "\t", ", ", "   ", ",", "break"))
            if how == "break":
                self.lines.append(current + self.inline_comment())
                self.lines.extend(self.comment_lines(2))
                if rng.randrange(6) == 0:  # a continuation holding only a comment
                    marker = rng.choice(("+", "+ ;", "+;", "+ $ ", "+ //", "+//", "+\t$", "+,$ "))
                    self.lines.append(marker + (self.comment_text() if marker != "+" else ""))
                    self.lines.extend(self.comment_lines(1))
                current = rng.choice(("+", "+ ", "  +", "+\t", " + ")) + piece
            else:
                current += how + piece
        self.lines.append(current + self.inline_comment())
        if rng.randrange(4) == 0:
            self.lines.extend(self.comment_lines(2))

    def emit(self, pieces, tokens, subckt, section, kind, include=None) -> Written:
        self.write(pieces)
        written = Written(list(tokens), subckt, section, kind, include)
        self.record.append(written)
        return written

    def assignment(self, key: str, value: str) -> tuple[list[str], str]:
        form = self.rng.choice(("k=v", "k=v", "k = v", "k= v", "k =v"))
        pieces = {"k=v": [f"{key}={value}"], "k = v": [key, "=", value],
                  "k= v": [f"{key}=", value], "k =v": [key, f"={value}"]}[form]
        return pieces, f"{key}={value}"

    def param_name(self) -> str:
        return self.unique(st.sampled_from(["p", "cc", "Rc", "gain_", "x.", "_w", "A"]))

    # statements -----------------------------------------------------------------------

    def param_line(self, subckt, section) -> None:
        d = self.draw
        keyword = d(st.sampled_from([".param", ".PARAM", ".Param"]))
        pieces, tokens = [keyword], [keyword]
        for _ in range(d(st.integers(1, 3))):
            p, t = self.assignment(self.param_name(), d(_value))
            pieces += p
            tokens.append(t)
            if subckt:
                self.local_params.setdefault(subckt, set()).add(t.partition("=")[0].lower())
        self.emit(pieces, tokens, subckt, section, "param")

    def model_line(self, subckt, section) -> None:
        d = self.draw
        keyword = d(st.sampled_from([".model", ".MODEL"]))
        head = [keyword, self.unique(st.sampled_from(["nch", "pch", "M", "d"])),
                d(st.sampled_from(["nmos", "pmos", "d", "NMOS"]))]
        pieces, tokens = list(head), list(head)
        params_pieces = []
        for key in d(st.lists(st.sampled_from(["level", "vto", "kp", "lambda", "tox", "is"]),
                              max_size=5, unique=True)):
            p, t = self.assignment(key, d(_number_value))
            params_pieces += p
            tokens.append(t)
        wrap = d(st.sampled_from(["none", "separate", "attached"]))
        if wrap == "separate":
            params_pieces = ["(", *params_pieces, ")"]
        elif wrap == "attached" and params_pieces:
            params_pieces[0] = "(" + params_pieces[0]
            params_pieces[-1] = params_pieces[-1] + ")"
        self.emit(pieces + params_pieces, tokens, subckt, section, "model")

    def element_line(self, subckt, section, subckt_names: list[str]) -> None:
        d = self.draw
        letter = d(st.sampled_from("RCLMXGEVIrcmx"))
        name = self.unique(st.just(letter + d(st.from_regex(r"[a-z0-9_]{0,3}", fullmatch=True))))
        nodes = [d(_node), d(_node)]
        tokens: list[str]
        pieces: list[str]
        kind = "other"
        if letter in "RCLrcl":
            kind = "rcl"
            if d(st.booleans()):
                value_piece = [d(_value)]
                tokens = [name, *nodes, value_piece[0]]
            else:
                key = d(st.sampled_from({"r": ["r", "R", "resistance"], "c": ["c", "C"],
                                          "l": ["l", "L"]}[letter.lower()]))
                value_piece, token = self.assignment(key, d(_value))
                tokens = [name, *nodes, token]
            pieces = [name, *nodes, *value_piece]
        elif letter in "Mm":
            kind = "device"
            nodes += [d(_node), d(_node)]
            model = d(st.sampled_from(["nch", "pch", "nmos"]))
            pieces, tokens = [name, *nodes, model], [name, *nodes, model]
        elif letter in "Xx":
            kind = "instance"
            nodes = d(st.lists(_node, min_size=1, max_size=4))
            target = d(st.sampled_from(subckt_names)) if subckt_names else "amp"
            pieces, tokens = [name, *nodes, target], [name, *nodes, target]
        elif letter in "GE":
            form = d(st.sampled_from(["gain", "value", "pair"]))
            if form == "gain":
                rest = [d(_node), d(_node), d(_value)]
            elif form == "value":
                rest = [d(st.sampled_from(["value={v(a)*2}", "vol='v(a,b)*2'", "cur={1m*v(c)}"]))]
            else:
                rest = ["(c,d)", d(_value)]
            pieces, tokens = [name, *nodes, *rest], [name, *nodes, *rest]
        else:  # V, I
            rest = d(st.sampled_from([["dc", "1"], ["1.8"], ["{vdd}"], ["dc", "0", "ac", "1"],
                                      ["sin(0 1 1k)"], ["pulse(0 1 0 1n 1n 5n 10n)"]]))
            pieces, tokens = [name, *nodes, *rest], [name, *nodes, *rest]
        keys = ["w", "l", "m", "tc1", "ad", "Scale", "dtemp"]
        if kind == "rcl":  # a second value key would hold the value (element_value_index)
            keys = [k for k in keys if k not in ("l", "c", "r")]
        for key in d(st.lists(st.sampled_from(keys), max_size=3, unique_by=str.lower)):
            p, t = self.assignment(key, d(_value))
            pieces += p
            tokens.append(t)
        self.emit(pieces, tokens, subckt, section, kind)
        if subckt:
            self.elements.setdefault(subckt, []).append(name.lower())

    def other_line(self, subckt, section) -> None:
        d = self.draw
        tokens = d(st.sampled_from([[".options", "reltol=1e-4"], [".global", "vdd", "vss"],
                                    [".temp", "27"], [".op"], [".ac", "dec", "10", "1", "1g"],
                                    [".tran", "1n", "1u"], [".save", "all"],
                                    [".func", "f(x)", "{x*2}"],
                                    [".csparam", "a=1"], [".OPTIONS", "gmin=1e-12"]]))
        self.emit(list(tokens), tokens, subckt, section, "other")

    def control_block(self) -> None:
        d = self.draw
        self.emit([".control"], [".control"], None, None, "control")
        for line in d(st.lists(st.sampled_from(["run", "print v(out)", "set x = 1", "let a=1 ; c",
                                                "* a comment", "", "echo {", "wrdata x.txt v(a)"]),
                               max_size=4)):
            self.lines.append(line)
        self.lines.append(d(st.sampled_from([".endc", ".ENDC", "  .endc"])))

    def subckt_block(self, section, depth: int, subckt_names: list[str], parent=None) -> None:
        d = self.draw
        name = self.unique(st.sampled_from(["amp", "OTA", "x_", "two_stage"]))
        ports = d(st.lists(_node, max_size=5))
        keyword = d(st.sampled_from([".subckt", ".SUBCKT", ".Subckt"]))
        pieces, tokens = [keyword, name, *ports], [keyword, name, *ports]
        params: dict[str, str] = {}
        count = d(st.integers(0, 3))
        if count or d(st.booleans()):
            glued = count and d(st.booleans())
            for k in range(count):
                key = self.param_name()
                value = d(_value)
                p, t = self.assignment(key, value)
                if k == 0 and glued:
                    p[0] = "params:" + p[0]
                    t = "params:" + t
                elif k == 0:
                    pieces.append("params:")
                    tokens.append("params:")
                pieces += p
                tokens.append(t)
                params[key.lower()] = value
            if count == 0:
                pieces.append("params:")
                tokens.append("params:")
        lower = name.lower()
        self.emit(pieces, tokens, lower, section, "subckt")
        self.subckts[lower] = (name, ports, params)
        self.elements.setdefault(lower, [])
        for _ in range(d(st.integers(0, 6))):
            what = d(st.sampled_from(["element", "element", "element", "param", "model", "other",
                                      "nested"]))
            if what == "element":
                self.element_line(lower, section, subckt_names)
            elif what == "param":
                self.param_line(lower, section)
            elif what == "model":
                self.model_line(lower, section)
            elif what == "other":
                self.other_line(lower, section)
            elif depth < 2:
                self.subckt_block(section, depth + 1, subckt_names, parent=lower)
        end = [d(st.sampled_from([".ends", ".ENDS", ".Ends"]))]
        if d(st.booleans()):
            end.append(name)
        self.emit(end, end, lower, section, "ends")
        subckt_names.append(name)

    def lib_section(self, name: str, *, with_subckts: bool) -> None:
        d = self.draw
        header = [d(st.sampled_from([".lib", ".LIB"])), name]
        self.emit(header, header, None, None, "lib")
        section = name.lower()
        for _ in range(d(st.integers(0, 4))):
            what = d(st.sampled_from(["param", "model", "model",
                                      "subckt" if with_subckts else "param"]))
            if what == "param":
                self.param_line(None, section)
            elif what == "model":
                self.model_line(None, section)
            else:
                self.subckt_block(section, 0, [])
        end = [d(st.sampled_from([".endl", ".ENDL"]))]
        if d(st.booleans()):
            end.append(name)
        self.emit(end, end, None, section, "endl")

    def include_line(self) -> None:
        d = self.draw
        file, section = d(st.sampled_from(self.includes))
        quoted = d(st.sampled_from(["{}", '"{}"', "'{}'"])).format(file)
        if section is None:
            keyword = d(st.sampled_from([".include", ".inc", ".INCLUDE", ".incl"]))
            tokens = [keyword, quoted]
        else:
            keyword = d(st.sampled_from([".lib", ".LIB"]))
            tokens = [keyword, quoted, d(st.sampled_from([section, section.upper()]))]
        self.emit(list(tokens), tokens, None, None, "include", include=(file, section))

    def finish(self) -> Generated:
        rng = self.rng
        newline = rng.choice(("\n", "\r\n"))
        if rng.randrange(6) == 0:  # mixed line endings
            endings = [rng.choice(("\n", "\r\n", "\r")) for _ in self.lines]
        else:
            endings = [newline] * len(self.lines)
        text = "".join(line + end for line, end in zip(self.lines, endings, strict=True))
        if self.lines and rng.random() < 0.5:
            text = text[: -len(endings[-1])]  # no line ending after the last line
        return Generated(self.name, text, self.record, self.subckts, self.elements,
                         self.local_params)


@st.composite
def netlist_files(draw):
    """A root netlist, an included file and a library file with sections, all valid."""
    counter = [0]
    inc = Writer(draw, "inc.cir", counter, includes=[])
    names: list[str] = []
    for _ in range(draw(st.integers(0, 3))):
        what = draw(st.sampled_from(["param", "model", "subckt"]))
        if what == "param":
            inc.param_line(None, None)
        elif what == "model":
            inc.model_line(None, None)
        else:
            inc.subckt_block(None, 0, names)
    lib = Writer(draw, "lib.lib", counter, includes=[])
    sections = draw(st.lists(st.sampled_from(["tt", "ss", "ff", "Typ"]), max_size=3, unique=True))
    for name in sections:
        if draw(st.booleans()):
            lib.lines.append(lib.comment_line())
        lib.lib_section(name, with_subckts=False)
    includes = [("inc.cir", None)] + [("lib.lib", s.lower()) for s in sections]
    root = Writer(draw, "root.cir", counter, includes=includes)
    subckt_names: list[str] = []
    if draw(st.booleans()):
        root.lines.append("* " + root.comment_text())
    for _ in range(draw(st.integers(0, 7))):
        what = draw(st.sampled_from(["subckt", "subckt", "param", "model", "element", "include",
                                     "other", "section", "control"]))
        if what == "subckt":
            root.subckt_block(None, 0, subckt_names)
        elif what == "param":
            root.param_line(None, None)
        elif what == "model":
            root.model_line(None, None)
        elif what == "element":
            root.element_line(None, None, subckt_names)
        elif what == "include":
            root.include_line()
        elif what == "other":
            root.other_line(None, None)
        elif what == "section":
            root.lib_section(root.unique(st.sampled_from(["corner", "s"])), with_subckts=True)
        else:
            root.control_block()
    if draw(st.integers(0, 4)) == 0:
        root.emit([".end"], [".end"], None, None, "other")
    return root.finish(), inc.finish(), lib.finish()


def expected_summaries(generated: Generated, folder: Path) -> list[tuple]:
    file = folder / generated.name
    return [summary(w.tokens, file, w.subckt, w.section) for w in generated.statements]


# edits -----------------------------------------------------------------------------------

_new_value = st.one_of(_number_value, st.sampled_from(["{cc*2}", "'rc + 1'", "{ a }", "0"]))


_ASSIGNMENT = re.compile(r"^[A-Za-z_][\w.]*=(?!=)")  # name=value, not {a>=b?...}


def _assignment_keys(tokens: list[str]) -> list[tuple[int, str, str]]:
    """(index, prefix, key) of the generator's own ``key=value`` tokens after the first."""
    found = []
    for i, token in enumerate(tokens[1:], start=1):
        prefix = "params:" if token.lower().startswith("params:") else ""
        body = token[len(prefix):]
        if _ASSIGNMENT.match(body):
            found.append((i, prefix, body.partition("=")[0]))
    return found


def draw_edit(data, written: Written, statement, counter: list[int]):
    """A random edit of one statement: (new text, expected tokens) or None; and checks that an
    edit the statement cannot take raises NetlistError naming the file and line."""
    new = data.draw(_new_value, label="new value")
    tokens = list(written.tokens)
    if written.kind in ("param", "subckt", "model") and _assignment_keys(tokens):
        i, prefix, key = data.draw(st.sampled_from(_assignment_keys(tokens)), label="param")
        asked = data.draw(st.sampled_from([key, key.upper(), key.lower()]), label="case")
        text = replace_param(statement, asked, new)
        tokens[i] = f"{prefix}{key}={new}"
        return text, tokens
    if written.kind == "rcl":
        text = replace_element_value(statement, new)
        key = tokens[3].partition("=")[0]
        tokens[3] = f"{key}={new}" if _ASSIGNMENT.match(tokens[3]) else new
        return text, tokens
    if written.kind in ("device", "instance"):
        names = [key for _, _, key in _assignment_keys(tokens)]
        name = data.draw(st.sampled_from([*names, "w", "nf", "M"]), label="instance param")
        text = replace_instance_param(statement, name, new)
        for i, _, key in _assignment_keys(tokens):
            if key.lower() == name.lower():
                tokens[i] = f"{key}={new}"
                break
        else:
            tokens.append(f"{name}={new}")
        return text, tokens
    if written.kind in ("param", "subckt", "other", "ends"):
        counter[0] += 1
        with pytest.raises(NetlistError) as caught:
            replace_param(statement, f"never_set_{counter[0]}", new)
        check_error(caught.value, NetlistError)
        assert caught.value.file == str(statement.file)
        assert caught.value.place == str(statement.line)
    return None


def check_netlist_against_record(netlist, root: Generated, inc: Generated, lib: Generated,
                                 folder: Path) -> None:
    """Subckts (name, ports, params, direct elements, local params) and global params."""
    active = [root]
    included = {w.include for w in root.statements if w.include}
    if ("inc.cir", None) in included:
        active.append(inc)
    expected_subckts = {}
    expected_globals = {}
    for generated in active:
        expected_subckts.update({k: v for k, v in generated.subckts.items()
                                 if _subckt_section(generated, k) is None})
    for generated, section in [(root, None), (inc, None)] + [(lib, s) for f, s in included
                                                              if f == "lib.lib"]:
        if generated is inc and ("inc.cir", None) not in included:
            continue
        for w in generated.statements:
            if w.kind == "param" and w.subckt is None and w.section == section:
                for token in w.tokens[1:]:
                    key, _, expr = token.partition("=")
                    expected_globals[key.lower()] = expr
    assert {k: (v.name, list(v.ports), v.params) for k, v in netlist.subckts.items()} == \
        expected_subckts
    for key, sub in netlist.subckts.items():
        owner = root if key in root.subckts else inc
        assert [s.keyword for s in sub.elements()] == owner.elements.get(key, [])
        assert set(sub.local_params()) == owner.local_params.get(key, set())
    assert {k: v for k, (_, v) in netlist.global_params.items()} == expected_globals


def _subckt_section(generated: Generated, name: str) -> str | None:
    for w in generated.statements:
        if w.kind == "subckt" and w.subckt == name:
            return w.section
    return None


def write_generated(folder: Path, generated: Generated) -> Path:
    path = folder / generated.name
    path.write_bytes(generated.text.encode("utf-8"))
    return path


@fuzz(500)
@given(files=netlist_files(), data=st.data())
def test_valid_netlists_survive_read_edit_write_read(folder, files, data):
    with fresh(folder) as base:
        check_round_trip(base, files, data)


def check_round_trip(base: Path, files, data) -> None:
    """Read the generated files in ``base``, edit at random, write back, read again."""
    root, inc, lib = files
    paths = {g.name: write_generated(base, g) for g in files}
    for generated in files:
        check_split(generated.text)

    # first read: every statement as generated
    netlist = read_netlist(paths["root.cir"])
    assert summaries(netlist.files[paths["root.cir"]]) == expected_summaries(root, base)
    for generated in (inc, lib):
        path = paths[generated.name]
        if path in netlist.files:
            assert summaries(netlist.files[path]) == expected_summaries(generated, base)
        assert summaries(read_source(path)) == expected_summaries(generated, base)
        assert summaries(read_source(path, generated.text)) == expected_summaries(generated, base)
    check_netlist_against_record(netlist, root, inc, lib, base)

    # random edits, in the root and in the files it reads
    counter = [0]
    edits: dict[tuple[Path, int], str] = {}
    after: dict[str, list[Written]] = {}
    for generated in files:
        path = paths[generated.name]
        source = netlist.files.get(path) or read_source(path)
        changed = []
        for written, statement in zip(generated.statements, source.statements, strict=True):
            edit = draw_edit(data, written, statement, counter) \
                if data.draw(st.integers(0, 3), label="edit?") == 0 else None
            if edit is None:
                changed.append(written)
                continue
            text, tokens = edit
            assert tokenize(text) == tokens, (text, tokens)
            edits[(path, statement.index)] = text
            changed.append(replace(written, tokens=tokens))
        after[generated.name] = changed
    edited_files = {path for path, _ in edits}
    edited_sections = {(path, s.section) for path in edited_files
                       for s in netlist.files.get(path, read_source(path)).statements
                       if (path, s.index) in edits}

    # expected statements of the written-back root: edited included units are inlined
    expected: list[tuple] = []
    for written in after["root.cir"]:
        if written.kind == "include":
            file, section = written.include
            if (paths[file], section) in edited_sections:
                expected += _inlined(after[file], section, base)
                continue
        if written.tokens[0].lower() == ".end" and written.subckt is None:
            continue  # commented out: not the top level
        expected.append(summary(written.tokens, paths["root.cir"], written.subckt,
                                written.section))

    text, notes = render_file(netlist, paths["root.cir"], edits, top_level=False)
    assert notes == []
    check_split(text)
    out = base / "out"
    out.mkdir()
    written_back = out / "root.cir"
    written_back.write_text(text, encoding="utf-8")
    again = read_netlist(written_back)
    got = summaries(again.files[written_back])
    # include lines that were not inlined point to the same files (absolute now)
    assert got == expected
    # the edited included files are untouched on disk
    for generated in files:
        assert paths[generated.name].read_bytes() == generated.text.encode("utf-8")


def _inlined(written: list[Written], section: str | None, base: Path) -> list[tuple]:
    """The statements an inlined include brings into the root, in the root's context."""
    if section is None:
        return [summary(w.tokens, base / "inc.cir", w.subckt, w.section) for w in written
                if not (w.tokens[0].lower() == ".end" and w.subckt is None)]
    inside = [w for w in written if w.section == section and w.kind != "endl"]
    return [summary(w.tokens, base / "lib.lib", w.subckt, None) for w in inside]


# --- job files -----------------------------------------------------------------------------


def _files_named(job_text: str) -> list[str]:
    data = tomllib.loads(job_text)
    amp = data.get("amplifier", {})
    return [amp[k] for k in ("netlist", "models") if k in amp] + list(amp.get("includes", []))


JOB_TEXTS = {path: path.read_text(encoding="utf-8") for path in JOB_SOURCES}
_STAND_IN_MODELS = "* stand-in model file (no .lib sections)\n.model nmos nmos level=54\n" \
                   ".model pmos pmos level=54\n"


@pytest.fixture(scope="module")
def job_folders(tmp_path_factory) -> dict[Path, Path]:
    """Per source job: a folder three levels down (``../../../shared`` stays inside the tmp
    tree) holding copies of every file the job names and of the other example netlists."""
    base = tmp_path_factory.mktemp("jobs")
    folders = {}
    for i, (source, text) in enumerate(JOB_TEXTS.items()):
        folder = base / f"job{i}" / "a" / "b"
        folder.mkdir(parents=True)
        for other in [*DEMO.iterdir(), *PTM45.iterdir()]:
            if other.suffix != ".toml":
                shutil.copy(other, folder / other.name)
        for name in _files_named(text):
            original = (source.parent / name).resolve()
            target = (folder / name).resolve()
            target.parent.mkdir(parents=True, exist_ok=True)
            if original.is_file():
                shutil.copy(original, target)
            else:  # ../shared is not on this machine: the loader only reads its sections
                target.write_text(_STAND_IN_MODELS)
        folders[source] = folder
    return folders


def test_the_real_job_files_load_from_the_copies(job_folders):
    """The starting points of the mutations are valid (else the fuzzing tests little)."""
    for source, folder in job_folders.items():
        path = folder / "job.toml"
        path.write_text(JOB_TEXTS[source], encoding="utf-8")
        job = load_job(path)
        assert job.corners and job.amplifier.netlist.is_file()


def check_job(job: Job) -> None:
    """Facts every loaded job satisfies (README: values SI, paths absolute, corners unique)."""
    assert job.amplifier.netlist.is_absolute() and job.amplifier.netlist.is_file()
    assert job.corners
    assert len({c.name for c in job.corners}) == len(job.corners)
    for corner in job.corners:
        assert all(math.isfinite(v) for v in corner.params.values())
        assert math.isfinite(corner.temp) and corner.temp >= -273.15
    assert 0 < job.analysis.start_hz < job.analysis.stop_hz
    assert "cc" in job.compensation
    for corner in job.corners:  # parameter names become .param lines in the deck
        assert all(re.fullmatch(r"[A-Za-z_][\w.]*", name) for name in corner.params), corner


def load_or_error(path: Path, *, place_needed: bool):
    got = outcome(JobError, load_job, path)
    event("load_job: " + (f"JobError at {re.sub(r'[0-9]+', 'N', got.place or '-')[:30]}"
                          if isinstance(got, JobError) else "loaded"))
    if isinstance(got, JobError):
        assert got.file == str(path.resolve()), got
        if place_needed:
            assert got.place and got.place.strip(), f"no place in {got!r}"
    else:
        check_job(got)
    return got


_JOB_SNIPPETS = [
    "[amplifier]", "[[corners]]", "[bias]", "[compensation]", "[corner_grid]", "[params]",
    "[analysis]", "[target]", "[transient]", "[feedback]", "[[corners.params]]", "name = ",
    "= ", "=", '"', "'", "'''", '"""', "{", "}", "[", "]", ",", "#", ".", "\\", "\\u0000",
    "a = " + "[" * 3000, "a = " + "[" * 600 + "]" * 600, "a = " + "{b=" * 600 + "1" + "}" * 600,
    "x = " + "9" * 5000, "x = " + "9" * 400, "x = 1e999", "x = inf", "x = nan",
    "x = 1979-05-27T07:32:00Z", "x = 07:32:00", "x = 1979-05-27", "x = true", "x = 0x7fff",
    "points_per_decade = " + "9" * 400, "temp = 1e308", "temp = -1e308", 'min = "-1p"',
    'max = "9' + "9" * 400 + '"', 'cc = { param = "cc" }', 'rc = { device = "Mz" }',
    'load = "{' + "(" * 2000 + "cl" + ")" * 2000 + '}"', 'load = "{' + "-" * 3000 + '1}"',
    'input = "{' + "(" * 300 + "1p" + ")" * 300 + '}"', 'netlist = "a\\u0000b"',
    'netlist = "' + "d/" * 3000 + 'x"', 'models = "' + "m" * 300 + '"', 'models = "job.toml"',
    'models = "two_stage.cir"', 'models = "."', 'netlist = "~nosuchuser/x"', "\x00", "\ufeff",
    "lib = [" + ", ".join(f'"l{i}"' for i in range(50)) + "]",
]
_JOB_LINES = [line for text in JOB_TEXTS.values() for line in text.split("\n") if line.strip()]
_JOB_TROUBLE = [
    "a = " + "[" * 3000 + "]" * 3000, "x = " + "9" * 5000, "x = " + "1" + "0" * 400,
    '"" = 1', "[[corners]]", "[corner_grid]", "[amplifier]", 'name = "', "name =", "[",
]
_JOB_VALUES = [
    '"a\\u0000b"', '"' + "d/" * 3000 + 'x"', '"' + "n" * 300 + '"', '"~nosuchuser/x"', '"."',
    '"job.toml"', '"models.lib"', '"two_stage.cir"', "1" + "0" * 400, "-1" + "0" * 400,
    "9" * 5000, "[" * 3000, '"{' + "(" * 2000 + "cl" + ")" * 2000 + '}"',
    '"{' + "-" * 3000 + 'cl}"', '"{cl*-1}"', '"{1/0}"', '"{nosuch}"', "inf", "-inf", "nan",
    '"-1p"', "true", "1979-05-27", "07:32:00", "{}", "[]", '""', '" "', "0", "-1", "1e308",
    '"1e999"', '"tt"', '"TT"', '"xx"', "[1, 2]", '["tt", "ss"]', '{ param = "cc" }',
    '{ device = "Mz", size = "q" }', '{ volts = "1", amps = "1" }', "10001", "1",
]


@fuzz(700)
@given(source=st.sampled_from(JOB_SOURCES), data=st.data())
def test_mutated_job_files_load_or_raise_job_error(job_folders, source, data):
    text = data.draw(mutated([JOB_TEXTS[source]], _JOB_SNIPPETS, _JOB_LINES, _JOB_TROUBLE,
                             _JOB_VALUES), label="job text")
    path = job_folders[source] / "job.toml"
    path.write_text(text, encoding="utf-8", newline="")
    got = load_or_error(path, place_needed=False)
    if isinstance(got, JobError) and "TOML" in got.problem:
        assert got.place, f"a TOML error names line and column: {got}"


@fuzz(150)
@given(source=st.sampled_from(JOB_SOURCES), where=st.integers(0, 4),
       noise=st.binary(min_size=1, max_size=12))
def test_job_files_with_invalid_utf8_or_nul_bytes_raise_job_error(job_folders, source, where,
                                                                   noise):
    data = bytearray(JOB_TEXTS[source].encode())
    at = len(data) * where // 4
    data[at:at] = noise
    path = job_folders[source] / "job.toml"
    path.write_bytes(bytes(data))
    load_or_error(path, place_needed=False)


# structurally valid TOML with random keys, values and types ---------------------------------

_KNOWN_KEYS = [
    "name", "amplifier", "bias", "feedback", "compensation", "analysis", "corners",
    "corner_grid", "target", "params", "transient", "netlist", "subckt", "in_p", "in_n", "out",
    "models", "includes", "input_device", "second_stage_device", "common_mode", "vdd", "vss",
    "ibias", "volts", "amps", "kind", "input", "load", "dc_path", "cc", "rc", "param",
    "element", "device", "size", "min", "max", "start", "stop", "points_per_decade", "probe",
    "time_limit", "phase_margin", "tolerance", "gain_margin", "step", "band",
    "resistance_share", "lib", "temp", "cl", "Name", "CC", "",
]
_STRINGS = [
    "", " ", "0", "1", "-1", "2p", "-2p", "1e999", "1e308t", "10G", "1x", "p", "nan", "inf",
    "{vdd}", "{cl}", "{nosuch}", "{vdd", "vdd}", "'vdd*2'", "'", "{{vdd}}", "{-1}", "{cl*-1}",
    "{" * 600 + "1" + "}" * 600, "{" + "(" * 600 + "1" + ")" * 600 + "}", "{" + "-" * 3000 + "1}",
    "9" * 400, "9" * 5000, "tt", "ss", "ff", "TT", "nosuch", "resistive", "capacitive",
    "double-injection", "lc", "w", "l", "m", "W", "cc", "rc", "Cc1", "M1", "Mz", "two_stage",
    "two_stage.cir", "models.lib", "two_stage_45.cir", "two_stage_triode.cir", "job.toml", ".",
    "..", "/", "missing.cir", "~/x", "~nosuchuser/x", "a\x00b", "x" * 5000, "d/" * 3000, "µ",
    "inp", "inn", "out", "vdd", "ibias",
]
_scalar = st.one_of(
    st.sampled_from(_STRINGS),
    st.text(max_size=12),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.sampled_from([0, 1, -1, 2, 27, 10000, 10001, 2**63, -(2**63) - 1, 10**400, -(10**400)]),
    st.floats(),
    st.sampled_from([0.0, -0.0, 1e-300, 1e300, -1e300, 5e-324, math.inf, -math.inf, math.nan]),
    st.booleans(),
    st.datetimes(timezones=st.none() | st.just(dt.UTC)),
    st.dates(),
    st.times(),
)
_key = st.one_of(st.sampled_from(_KNOWN_KEYS), st.text(max_size=8))
_toml_value = st.recursive(
    _scalar,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(_key, inner, max_size=4),
    max_leaves=8,
)
# values known to be hard for a loader, drawn as often as all the others together
_TROUBLE_VALUES = [
    10**400, -(10**400), 2**63, 1e308, -1e308, math.inf, -math.inf, math.nan, "a\x00b",
    "d/" * 3000 + "x", "n" * 300, "~nosuchuser/x", "{" + "(" * 600 + "1" + ")" * 600 + "}",
    "{" + "-" * 3000 + "1}", "9" * 5000, "", " ", True, [], {}, "-1p", "1e999", "two_stage.cir",
    "models.lib", "job.toml", ".", [10**400], {"volts": 10**400}, {"param": "a\x00b"},
]
_FILE_NAMES = ["a\x00b", "d/" * 3000 + "x", "n" * 300, "~nosuchuser/x", "~", ".", "..", "/",
               "", " ", "models.lib", "job.toml", "two_stage.cir", "missing.cir", "a/../models.lib",
               "/dev/null", "//", "µ.cir", "x\ny"]
_new_toml_value = st.one_of(st.sampled_from(_TROUBLE_VALUES).map(copy.deepcopy), _toml_value)


def toml_string(text: str) -> str:
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def toml_value(value) -> str:
    """One TOML value on one line (tables inline)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, (dt.datetime, dt.date, dt.time)):
        return value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        pairs = (f"{toml_string(k)} = {toml_value(v)}" for k, v in value.items())
        return "{" + ", ".join(pairs) + "}"
    raise TypeError(value)


def toml_document(data: dict) -> str:
    """``data`` as TOML: plain keys first, then a ``[table]`` per table and ``[[corners]]``."""
    lines = []
    tables = []
    for key, value in data.items():
        if isinstance(value, dict):
            tables.append((key, value, False))
        elif key == "corners" and isinstance(value, list) and value and \
                all(isinstance(v, dict) for v in value):
            tables.append((key, value, True))
        else:
            lines.append(f"{toml_string(key)} = {toml_value(value)}")
    for key, value, array in tables:
        for entry in (value if array else [value]):
            lines.append(f"[[{toml_string(key)}]]" if array else f"[{toml_string(key)}]")
            lines.extend(f"{toml_string(k)} = {toml_value(v)}" for k, v in entry.items())
    return "\n".join(lines) + "\n"


def _places(data, path=()):
    """Every table and array in ``data`` with its path (the root first)."""
    yield path, data
    items = data.items() if isinstance(data, dict) else enumerate(data)
    for key, value in list(items):
        if isinstance(value, (dict, list)):
            yield from _places(value, (*path, key))


@st.composite
def structured_job(draw, source: Path) -> dict:
    """The job's TOML data with 1..4 random changes of keys, values and types anywhere."""
    data = tomllib.loads(JOB_TEXTS[source])
    for _ in range(draw(st.integers(1, 4))):
        # every table as likely as the next: the corners (many) count as one
        groups: dict[str, list] = {}
        for path, node in _places(data):
            groups.setdefault(str(path[:1]), []).append(node)
        node = draw(st.sampled_from(groups[draw(st.sampled_from(sorted(groups)))]))
        op = draw(st.sampled_from(["set", "set", "set", "add", "delete", "grid", "grid",
                                   "corner", "file"]))
        if op == "file" and isinstance(data.get("amplifier"), dict):
            key = draw(st.sampled_from(["netlist", "models", "includes"]))
            name = st.sampled_from(_FILE_NAMES)
            data["amplifier"][key] = draw(st.lists(name, max_size=3) if key == "includes" else name)
            continue
        if isinstance(node, list):
            if op == "delete" and node:
                del node[draw(st.integers(0, len(node) - 1))]
            elif node and op == "set":
                node[draw(st.integers(0, len(node) - 1))] = draw(_new_toml_value)
            else:
                node.append(draw(_toml_value))
            continue
        if op == "set" and node:
            node[draw(st.sampled_from(sorted(node)))] = draw(_new_toml_value)
        elif op == "add":
            node[draw(_key)] = draw(_new_toml_value)
        elif op == "delete" and node:
            del node[draw(st.sampled_from(sorted(node)))]
        elif op == "grid":
            # mostly near-valid, so that the grid is expanded and its corners checked
            near = st.sampled_from([1.8, "2p", 27, "1.71", 0, "1meg"])
            data["corner_grid"] = draw(st.fixed_dictionaries(
                {}, optional={
                    "lib": st.lists(st.one_of(st.sampled_from(["tt", "ss", "ff", "TT"]),
                                              st.sampled_from(["xx", ""]), _scalar),
                                    min_size=draw(st.integers(0, 1)), max_size=3),
                    "temp": st.lists(st.one_of(st.sampled_from([-40, 27, 125]),
                                               st.sampled_from([-300, 1e308]), _scalar),
                                     min_size=draw(st.integers(0, 1)), max_size=3),
                    "params": st.dictionaries(
                        st.sampled_from(["vdd", "cl", "x1", "1x", "", "a b", "é", "a\nb"]),
                        st.one_of(st.lists(near, min_size=1, max_size=3),
                                  st.lists(st.one_of(near, _scalar), max_size=3), _scalar),
                        max_size=3),
                }))
        else:
            corners = data.setdefault("corners", [])
            if isinstance(corners, list):
                corners.append(draw(st.fixed_dictionaries({}, optional={
                    "name": st.sampled_from(["tt_27c_1v8", "x", "", "typ"]) | _scalar,
                    "lib": st.sampled_from(["tt", "ss", "nosuch"]) | _scalar,
                    "temp": _scalar,
                    "params": st.dictionaries(st.sampled_from(["vdd", "cl", "bad name"]) | _key,
                                              _scalar, max_size=3) | _scalar,
                })))
    return data


def _comparable(value):
    """``value`` with NaN replaced (NaN != NaN) so documents can be compared."""
    if isinstance(value, float) and math.isnan(value):
        return "NaN"
    if isinstance(value, dict):
        return {k: _comparable(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_comparable(v) for v in value]
    return value


@fuzz(900)
@given(source=st.sampled_from(JOB_SOURCES), data=st.data())
def test_valid_toml_with_random_values_loads_or_names_the_place(job_folders, source, data):
    document = data.draw(structured_job(source), label="job data")
    text = toml_document(document)
    # the test's own TOML writer must write what it was given
    assert _comparable(tomllib.loads(text)) == _comparable(document)
    path = job_folders[source] / "job.toml"
    path.write_text(text, encoding="utf-8")
    load_or_error(path, place_needed=True)
