"""The netlist reader/rewriter (amploop.spice.netlist) and the expression evaluator (amploop.spice.expressions).

Where the expected behaviour is ngspice's, the test asks ngspice itself (``ngspice -b`` on a
small deck in a tmp folder, with ``set num_threads=1`` in ``.spiceinit``) and compares what
ngspice printed with what amploop read or wrote. Other expected values are hand calculations
or follow from the documented contract of the function under test; each says which.
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from amploop.errors import NetlistError
from amploop.spice.expressions import evaluate
from amploop.spice.lexer import split_logical_lines, tokenize
from amploop.spice.netlist import read_netlist, value_of
from amploop.spice.rewrite import (
    ANALYSIS_COMMANDS,
    element_value,
    render_file,
    replace_element_value,
    replace_instance_param,
    replace_param,
)
from amploop.spice.source import lib_sections, read_source

# --- helpers ---------------------------------------------------------------------------


def write(folder: Path, name: str, text: str, *, newline: str = "\n") -> Path:
    """Write ``text`` (given with ``\\n``) to ``folder/name``, creating folders; return the path."""
    path = folder / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(text.replace("\n", newline).encode())
    return path


def statements_of(tmp_path: Path, text: str, name: str = "x.cir"):
    """The statements :func:`read_source` finds in ``text``."""
    return read_source(write(tmp_path, name, text)).statements


def only_statement(tmp_path: Path, text: str):
    """The one statement of a one-statement netlist text."""
    found = statements_of(tmp_path, text)
    assert len(found) == 1, found
    return found[0]


def assert_place(exc: pytest.ExceptionInfo, path: Path, line: int) -> None:
    """The error names the file and the line (``file:line:`` as NetlistError writes them)."""
    assert isinstance(exc.value, NetlistError)
    assert f"{path}:{line}:" in str(exc.value), str(exc.value)


_PRINTED = re.compile(r"^\s*(\S+)\s*=\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*$")


def run_ngspice(folder: Path, deck: str, name: str = "deck.cir") -> dict[str, float]:
    """Run ``ngspice -b`` on ``deck`` in ``folder``; the ``name = value`` lines it printed.

    The deck's ``.control`` block should ``print`` the values wanted. Fails the test (with
    ngspice's output) when ngspice reports an error or prints nothing.
    """
    assert shutil.which("ngspice"), "ngspice must be installed for these tests"
    folder.mkdir(parents=True, exist_ok=True)
    (folder / ".spiceinit").write_text("set num_threads=1\n")
    (folder / name).write_text(deck)
    done = subprocess.run(["ngspice", "-b", name], cwd=folder, capture_output=True, text=True,
                          timeout=120, check=False)
    output = done.stdout + done.stderr
    assert "error" not in output.lower(), output
    values = {}
    for line in done.stdout.splitlines():
        match = _PRINTED.match(line)
        if match:
            values[match.group(1).lower()] = float(match.group(2))
    assert values, output
    return values


def op_deck(body: str, *prints: str) -> str:
    """A deck: title, ``body``, and an ``op`` printing the given vectors."""
    return "\n".join([
        "* amploop test deck",
        body,
        ".control",
        "op",
        *[f"print {p}" for p in prints],
        ".endc",
        ".end",
        "",
    ])


def parallel(*resistances: float) -> float:
    """Resistors in parallel (hand calculation of the dividers)."""
    return 1 / sum(1 / r for r in resistances)


# --- split_logical_lines ---------------------------------------------------------------


SAMPLE = """* a title-like comment line
.param a=1 ; a comment
R1 in out
* a comment between a statement and its continuation

+ 2k $ more comment
+ m=2
.subckt amp in out params: cc=1p
C1 in out {cc}
.ends amp
""" + "   \n" + """  + continuation of .ends after a whitespace-only line
.control
echo hello ; not parsed
.endc
.end
"""


class TestSplitLogicalLines:
    def test_comment_and_blank_lines_have_no_text(self):
        """``*`` comment lines and blank lines are kept as lines with empty text."""
        lines = split_logical_lines("* comment\n\n   \n  * indented comment\nR1 a b 1k\n")
        assert [line.text for line in lines] == ["", "", "", "", "R1 a b 1k"]
        assert [line.number for line in lines] == [1, 2, 3, 4, 5]

    @pytest.mark.parametrize("text, expected", [
        ("R1 a b 1k ; semicolon", "R1 a b 1k"),
        ("R1 a b 1k;tight", "R1 a b 1k"),
        ("R1 a b 1k $ dollar space", "R1 a b 1k"),
        ("R1 a b 1k $dollar after a blank", "R1 a b 1k"),
        ("R1 a b 1k,$ dollar after a comma", "R1 a b 1k,"),
        ("R1 a b 1k // slashes", "R1 a b 1k"),
        ("R1 a b 1k//tight", "R1 a b 1k"),
        # not a comment: ngspice 39 answers "unknown parameter (x)" to "R2 a 0 1k$ x"
        # (seen running it), so it reads on past the "$" too
        ("R1 a b 1k$x", "R1 a b 1k$x"),
        (".param s='a;b' x={1}", ".param s='a;b' x={1}"),  # quoted text is not a comment
    ])
    def test_end_of_line_comments_are_removed(self, text, expected):
        """End-of-line comments: which forms are comments follows ngspice 39 (see the
        ngspice test below, which checks the same forms against ngspice itself)."""
        (line,) = split_logical_lines(text + "\n")
        assert line.text == expected
        assert line.raw == (text,)

    def test_line_holding_only_an_end_of_line_comment_is_a_comment(self):
        """``; ...`` / ``$ ...`` / ``// ...`` alone on a line leave no statement text."""
        lines = split_logical_lines("; one\n$ two\n  // three\n")
        assert [line.text for line in lines] == ["", "", ""]

    def test_continuation_lines_are_joined(self):
        """``+`` lines join the statement before them, their own comments removed."""
        (line,) = split_logical_lines("R1 in out\n+ 2k ; value\n+   m=2\n")
        assert line.text == "R1 in out 2k m=2"
        assert line.number == 1
        assert line.raw == ("R1 in out", "+ 2k ; value", "+   m=2")

    def test_continuation_joins_across_comment_and_blank_lines(self):
        """Comment and blank lines between a statement and its ``+`` line belong to the
        statement's raw text; the ``+`` text joins the statement (as ngspice stitches)."""
        lines = split_logical_lines("R1 in out\n* note\n\n; other\n+ 2k\nR2 out 0 1k\n")
        assert [line.text for line in lines] == ["R1 in out 2k", "R2 out 0 1k"]
        assert lines[0].raw == ("R1 in out", "* note", "", "; other", "+ 2k")
        assert lines[1].number == 6

    def test_comment_lines_not_followed_by_continuation_stay_separate(self):
        """Comment lines after a statement stay their own lines unless a ``+`` line follows."""
        lines = split_logical_lines("R1 a b 1k\n* just a comment\nR2 a b 1k\n")
        assert [line.raw for line in lines] == [("R1 a b 1k",), ("* just a comment",),
                                                 ("R2 a b 1k",)]

    @pytest.mark.parametrize("newline", ["\n", "\r\n"])
    def test_joining_raws_gives_the_file_back(self, newline):
        """Every physical line is in exactly one raw, in order (contract of the function)."""
        text = SAMPLE.replace("\n", newline)
        lines = split_logical_lines(text)
        raws = [raw for line in lines for raw in line.raw]
        assert "\n".join(raws) + "\n" == SAMPLE
        assert len(raws) == SAMPLE.count("\n")

    def test_file_without_final_newline_keeps_its_last_line(self):
        """The last line counts even without a line ending."""
        lines = split_logical_lines("R1 a b 1k\nR2 a b 2k")
        assert [line.text for line in lines] == ["R1 a b 1k", "R2 a b 2k"]

    def test_crlf_gives_the_same_statements_as_lf(self):
        """CRLF line endings: no stray carriage returns in text or raw."""
        lf = split_logical_lines(SAMPLE)
        crlf = split_logical_lines(SAMPLE.replace("\n", "\r\n"))
        assert crlf == lf
        assert not any("\r" in raw for line in crlf for raw in line.raw)

    def test_continuation_with_nothing_before_it_is_kept(self):
        """A ``+`` line at the start of a file has nothing to join; its raw is kept."""
        lines = split_logical_lines("* c\n+ 1k\nR1 a b 1k\n")
        assert [raw for line in lines for raw in line.raw] == ["* c", "+ 1k", "R1 a b 1k"]

    def test_reader_and_ngspice_agree_on_comments_and_continuations(self, tmp_path):
        """Resistor values as amploop reads them (element_value) give the divider voltage
        ngspice computes from the same lines: both strip the same comments and stitch the
        same continuations (reference: ngspice 39 run on the deck)."""
        body = "\n".join([
            "V1 in 0 dc 1",
            "R1 in a 1k",
            "R2 a 0 2k $comment right after a blank",
            "R3 a 0 3k;tight semicolon",
            "R4 a 0 4k // slashes",
            "R5 a 0 5k//tight slashes",
            "R6 a 0 6k,$ after a comma",
            "R7 a 0",
            "* a comment between the statement and its continuation",
            "",
            "+ 7k ; value on the continuation",
        ])
        folder = tmp_path / "deck"
        values = run_ngspice(folder, op_deck(body, "v(a)"))
        source = read_source(write(tmp_path, "read.cir", body))
        resistors = {s.keyword: evaluate(element_value(s)) for s in source.statements
                     if s.keyword.startswith("r")}
        assert resistors == {"r1": 1e3, "r2": 2e3, "r3": 3e3, "r4": 4e3, "r5": 5e3,
                             "r6": 6e3, "r7": 7e3}
        bottom = parallel(*(resistors[f"r{i}"] for i in range(2, 8)))
        assert values["v(a)"] == pytest.approx(bottom / (resistors["r1"] + bottom), rel=1e-6)


# --- tokenize --------------------------------------------------------------------------


class TestTokenize:
    def test_blank_space_separates_tokens(self):
        """Spaces and tabs separate tokens; several in a row count once."""
        assert tokenize("R1  in\tout   1k") == ["R1", "in", "out", "1k"]

    def test_braces_with_spaces_stay_one_token(self):
        """``{...}`` is one token however it is spaced, nested parentheses included."""
        assert tokenize("C1 a b {2 * max(c1, c2) + 1p} m=2") == [
            "C1", "a", "b", "{2 * max(c1, c2) + 1p}", "m=2"]

    def test_quotes_and_parentheses_stay_one_token(self):
        """Quoted text and ``(...)`` groups stay whole."""
        assert tokenize(".param x = 'a + b'") == [".param", "x='a + b'"]
        assert tokenize('.include "my models/x.lib"') == [".include", '"my models/x.lib"']
        assert tokenize("V1 a 0 dc 0 sin(0 1 1k)") == ["V1", "a", "0", "dc", "0", "sin(0 1 1k)"]

    @pytest.mark.parametrize("text", [".param a = b", ".param a= b", ".param a =b",
                                      ".param a=b", ".param  a   =   b"])
    def test_spaced_assignments_join(self, text):
        """``a = b`` in any spacing becomes ``a=b``."""
        assert tokenize(text) == [".param", "a=b"]

    def test_several_assignments_with_braces(self):
        """Several assignments on one line, brace values with spaces."""
        assert tokenize(".param a = 1k b={a * 2} , c= {b + 1}") == [
            ".param", "a=1k", "b={a * 2}", "c={b + 1}"]

    def test_commas_separate_tokens(self):
        """A comma outside groups separates like a blank."""
        assert tokenize("x1 a,b,c sub") == ["x1", "a", "b", "c", "sub"]

    @pytest.mark.parametrize("text", [".model nch nmos (level=1 vto=0.5)",
                                      ".MODEL nch nmos(level=1 vto = 0.5)",
                                      ".model nch nmos ( level=1 vto=0.5 )"])
    def test_model_parameter_list_parentheses_become_blank(self, text):
        """Parentheses around a ``.model`` parameter list become blank space (docstring)."""
        assert tokenize(text)[1:] == ["nch", "nmos", "level=1", "vto=0.5"]

    def test_model_parentheses_inside_braces_are_kept(self):
        """Only the list's parentheses go; those in a brace expression stay."""
        assert tokenize(".model d d (is={1e-14*(1+t)} n=1)") == [
            ".model", "d", "d", "is={1e-14*(1+t)}", "n=1"]


# --- read_source: statements, blocks, errors -------------------------------------------


class TestReadSource:
    def test_statements_carry_file_line_index_and_tokens(self, tmp_path):
        """Statements know their file (absolute), 1-based first line and logical index."""
        path = write(tmp_path, "a.cir", "* title\nR1 a b\n+ 1k\n\n.PARAM X = 1\n")
        source = read_source(path)
        r1, param = source.statements
        assert r1.file == path.resolve() and param.file == path.resolve()
        assert (r1.line, r1.index, r1.tokens) == (2, 1, ("R1", "a", "b", "1k"))
        assert (param.line, param.index, param.tokens) == (5, 3, (".PARAM", "X=1"))
        assert param.keyword == ".param"  # case-insensitive names: keyword is lower case
        assert param.where == f"{path.resolve()}:5"
        assert source.lines[param.index].raw == (".PARAM X = 1",)

    def test_subckt_and_nesting_are_recorded(self, tmp_path):
        """Each statement names its innermost ``.subckt`` (lower case); headers name their own."""
        found = statements_of(tmp_path, """.SUBCKT Outer a b
R1 a b 1k
.subckt inner c
R2 c 0 1k
.ends inner
R3 a 0 1k
.ends Outer
R4 a 0 1k
""")
        assert [(s.tokens[0], s.subckt) for s in found] == [
            (".SUBCKT", "outer"), ("R1", "outer"), (".subckt", "inner"), ("R2", "inner"),
            (".ends", "inner"), ("R3", "outer"), (".ends", "outer"), ("R4", None)]

    def test_control_block_is_recorded_but_not_parsed(self, tmp_path):
        """``.control`` is a statement; lines up to ``.endc`` are not (their text is
        kept in the logical lines)."""
        path = write(tmp_path, "c.cir", """R1 a b 1k
.control
.subckt not_a_subckt x
let x = 1 ; whatever
.endc
R2 a b 1k
""")
        source = read_source(path)
        assert [s.tokens[0] for s in source.statements] == ["R1", ".control", "R2"]
        assert [s.line for s in source.statements] == [1, 2, 6]
        assert "let x = 1 ; whatever" in [raw for line in source.lines for raw in line.raw]

    def test_library_sections_are_recorded(self, tmp_path):
        """Statements between ``.lib name`` and ``.endl`` carry the section (lower case)."""
        found = statements_of(tmp_path, """.param outside=1
.LIB TT
.param inside=2
.endl TT
.lib ss
.param other=3
.endl
""")
        sections = {s.tokens[1]: s.section for s in found if s.keyword == ".param"}
        assert sections == {"outside=1": None, "inside=2": "tt", "other=3": "ss"}
        assert set(lib_sections(tmp_path / "x.cir")) == {"tt", "ss"}

    def test_included_file_is_read_past_end(self, tmp_path):
        """ngspice 39 ignores ``.end`` in an included file and reads on (checked against
        ngspice in TestRenderWithNgspice); read_source reads a file as included."""
        found = statements_of(tmp_path, "R1 a b 1k\n.end\nR2 a b 1k\n")
        assert [s.tokens[0] for s in found] == ["R1", ".end", "R2"]

    def test_netlist_file_is_read_up_to_end(self, tmp_path):
        """The netlist file itself is read up to its ``.end``: what follows is not parsed
        (render_file leaves it out too), even if it would be an error."""
        root = write(tmp_path, "amp.cir", ".subckt a x\n.ends\n.end\n.subckt never_closed y\n")
        netlist = read_netlist(root)
        assert list(netlist.subckts) == ["a"]
        assert [s.keyword for s in netlist.files[root.resolve()].statements] == [
            ".subckt", ".ends", ".end"]

    def test_text_can_be_given(self, tmp_path):
        """``text`` is parsed instead of reading the file (which need not exist)."""
        source = read_source(tmp_path / "nowhere.cir", "R1 a b 1k\n")
        assert source.statements[0].tokens == ("R1", "a", "b", "1k")

    def test_subckt_never_closed(self, tmp_path):
        """An unclosed ``.subckt`` is an error at its header line."""
        path = write(tmp_path, "open.cir", "* x\n.subckt amp a b\nR1 a b 1k\n")
        with pytest.raises(NetlistError, match="never closed") as exc:
            read_source(path)
        assert_place(exc, path.resolve(), 2)

    def test_inner_subckt_never_closed(self, tmp_path):
        """With nesting, the ``.subckt`` left open (here the outer one) is named, at its
        header line."""
        path = write(tmp_path, "open.cir", ".subckt outer a\n.subckt inner b\n.ends\n")
        with pytest.raises(NetlistError, match="outer") as exc:
            read_source(path)
        assert_place(exc, path.resolve(), 1)

    def test_ends_without_subckt(self, tmp_path):
        """``.ends`` with no open ``.subckt`` is an error at its line."""
        path = write(tmp_path, "ends.cir", "R1 a b 1k\n\n.ends\n")
        with pytest.raises(NetlistError, match=".ends without") as exc:
            read_source(path)
        assert_place(exc, path.resolve(), 3)

    def test_lib_section_never_closed(self, tmp_path):
        """A ``.lib name`` section without ``.endl`` is an error at the section's line."""
        path = write(tmp_path, "models.lib", ".lib tt\n.param a=1\n.endl\n\n.lib ss\n.param a=2\n")
        with pytest.raises(NetlistError, match="ss is never closed") as exc:
            read_source(path)
        assert_place(exc, path.resolve(), 5)

    def test_control_never_closed(self, tmp_path):
        """A ``.control`` block without ``.endc`` is an error at its line."""
        path = write(tmp_path, "c.cir", "R1 a b 1k\n.control\nrun\n")
        with pytest.raises(NetlistError, match="never closed") as exc:
            read_source(path)
        assert_place(exc, path.resolve(), 2)

    def test_errors_count_physical_lines_with_crlf(self, tmp_path):
        """Line numbers in errors are physical lines, also for CRLF files."""
        path = write(tmp_path, "crlf.cir", "* a\nR1 a b\n+ 1k\n.ends\n", newline="\r\n")
        with pytest.raises(NetlistError) as exc:
            read_source(path)
        assert_place(exc, path.resolve(), 4)


# --- read_netlist: subckts, parameters, includes ---------------------------------------


AMP = """* a test amplifier
.param vdd = 1.8  cbase=1p, gain={2 * 3}
.subckt TwoStage inp inn out vdd vss PARAMS: cc=1.5p rc = 2k
.param cinner = {cc * 2}
Cc n1 out {cc}
Rc n1 x {rc}
M1 d g s b nch w=2u l=0.5u
.subckt helper p q
Rh p q 1k
.ends helper
.ends TwoStage
.subckt noparams a b
R1 a b 1k
.ends
"""


class TestReadNetlist:
    def test_subckt_ports_and_params(self, tmp_path):
        """Ports in order, header parameters (``params:``, spaced ``=``) by lower-case name."""
        netlist = read_netlist(write(tmp_path, "amp.cir", AMP))
        amp = netlist.subckt("twostage")
        assert amp.name == "TwoStage"
        assert amp.ports == ("inp", "inn", "out", "vdd", "vss")
        assert amp.params == {"cc": "1.5p", "rc": "2k"}
        assert amp.port_index("OUT") == 2 and amp.port_index("nope") is None
        assert netlist.subckt("noparams").params == {}

    def test_subckt_params_without_params_keyword_and_glued(self, tmp_path):
        """``k=v`` right after the ports, and ``params:k=v`` glued (ngspice accepts both,
        see test_glued_params_default_as_ngspice_uses_it)."""
        netlist = read_netlist(write(tmp_path, "a.cir", """.subckt a x y cc=1p rc=2k
.ends
.subckt b x y params:rb=3k rc=4k
.ends
"""))
        assert netlist.subckt("a").ports == ("x", "y")
        assert netlist.subckt("a").params == {"cc": "1p", "rc": "2k"}
        assert netlist.subckt("b").ports == ("x", "y")
        assert netlist.subckt("b").params == {"rb": "3k", "rc": "4k"}

    def test_glued_params_default_as_ngspice_uses_it(self, tmp_path):
        """The default amploop reads from ``params:rb=3k`` is the one ngspice uses
        (reference: ngspice 39 on the same subckt, instance without rb)."""
        text = ".subckt div in out params:rb=3k\nR1 in out 1k\nR2 out 0 {rb}\n.ends\n"
        netlist = read_netlist(write(tmp_path, "div.cir", text))
        rb = evaluate(netlist.subckt("div").params["rb"])
        values = run_ngspice(tmp_path / "run", op_deck(text + "V1 in 0 dc 1\nX1 in a div",
                                                       "v(a)"))
        assert values["v(a)"] == pytest.approx(rb / (1e3 + rb), rel=1e-6)

    def test_elements_and_local_params(self, tmp_path):
        """Elements directly in the subckt (not a nested one's), found case-insensitively."""
        netlist = read_netlist(write(tmp_path, "amp.cir", AMP))
        amp = netlist.subckt("TWOSTAGE")
        assert [s.tokens[0] for s in amp.elements()] == ["Cc", "Rc", "M1"]
        assert amp.element("cc").tokens[0] == "Cc"
        assert amp.element("RC").line == 6
        assert amp.element("Rh") is None  # in the nested subckt
        assert {k: v[1] for k, v in amp.local_params().items()} == {"cinner": "{cc * 2}"}
        assert netlist.subckt("helper").element("rh").tokens == ("Rh", "p", "q", "1k")

    def test_unknown_subckt_suggests_a_name(self, tmp_path):
        """Asking for a missing subckt says which exist (did-you-mean) and names the file."""
        root = write(tmp_path, "amp.cir", AMP)
        netlist = read_netlist(root)
        with pytest.raises(NetlistError, match="did you mean 'TwoStage'") as exc:
            netlist.subckt("twostag")
        assert str(root.resolve()) in str(exc.value)

    def test_first_subckt_definition_wins(self, tmp_path):
        """Two definitions of one name: the first is used, as ngspice does (reference:
        ngspice 39 on the same two definitions)."""
        text = """.subckt dup in out
R1 in out 1k
R2 out 0 1k
.ends
.subckt DUP in out
R1 in out 1k
R2 out 0 3k
.ends
"""
        netlist = read_netlist(write(tmp_path, "dup.cir", text))
        r2 = evaluate(element_value(netlist.subckt("dup").element("r2")))
        values = run_ngspice(tmp_path / "run", op_deck(text + "V1 in 0 dc 1\nX1 in a dup",
                                                       "v(a)"))
        assert values["v(a)"] == pytest.approx(r2 / (1e3 + r2), rel=1e-6)
        assert r2 == 1e3

    def test_global_params(self, tmp_path):
        """Top-level ``.param``: several per line, spaces and commas, brace values; those
        inside a subckt are not global."""
        netlist = read_netlist(write(tmp_path, "amp.cir", AMP))
        exprs = {k: v[1] for k, v in netlist.global_params.items()}
        assert exprs == {"vdd": "1.8", "cbase": "1p", "gain": "{2 * 3}"}
        statement, _ = netlist.global_params["gain"]
        assert statement.line == 2

    def test_later_param_definition_wins_as_in_ngspice(self, tmp_path):
        """The last top-level ``.param`` of a name is the one in effect (reference: ngspice
        39 computes the divider from the later value)."""
        text = ".param rb=1k\n.param RB = 3k\nV1 in 0 dc 1\nR1 in a 1k\nR2 a 0 {rb}"
        netlist = read_netlist(write(tmp_path, "p.cir", text))
        statement, expr = netlist.global_params["rb"]
        assert (statement.line, expr) == (2, "3k")
        values = run_ngspice(tmp_path / "run", op_deck(text, "v(a)"))
        rb = evaluate(expr)
        assert values["v(a)"] == pytest.approx(rb / (1e3 + rb), rel=1e-6)

    def test_includes_are_followed_relative_to_the_including_file(self, tmp_path):
        """``.include`` / ``.inc`` (quoted, case-insensitive) are read relative to the file
        that holds them, recursively; the files read list the root first."""
        root = write(tmp_path, "design/amp.cir",
                     '.INCLUDE "../lib/first.inc"\n.inc ../lib/third.inc\n')
        write(tmp_path, "lib/first.inc", ".include sub/second.inc\n.param from_first=1\n")
        write(tmp_path, "lib/sub/second.inc", ".subckt deep a\n.ends\n.param from_second=2\n")
        write(tmp_path, "lib/third.inc", ".param from_third=3\n")
        netlist = read_netlist(root)
        assert list(netlist.files) == [root.resolve(), (tmp_path / "lib/first.inc").resolve(),
                                          (tmp_path / "lib/sub/second.inc").resolve(),
                                          (tmp_path / "lib/third.inc").resolve()]
        assert "deep" in netlist.subckts
        assert set(netlist.global_params) == {"from_first", "from_second", "from_third"}

    def test_include_resolution_matches_ngspice(self, tmp_path):
        """Relative include paths resolve against the including file, not the working
        folder, for ngspice too (reference: ngspice 39 run from another folder on the same
        files finds them and uses the value amploop found)."""
        root = write(tmp_path, "design/amp.cir", ".include ../lib/first.inc\nV1 in 0 dc 1\n"
                                                 "R1 in a 1k\nR2 a 0 {rdeep}\n")
        write(tmp_path, "lib/first.inc", ".include sub/second.inc\n")
        second = write(tmp_path, "lib/sub/second.inc", ".param rdeep=3k\n")
        statement, expr = read_netlist(root).global_params["rdeep"]
        assert statement.file == second.resolve()
        values = run_ngspice(tmp_path / "elsewhere", op_deck(f'.include "{root}"', "v(a)"))
        rdeep = evaluate(expr)
        assert values["v(a)"] == pytest.approx(rdeep / (1e3 + rdeep), rel=1e-6)

    def test_quoted_include_path_with_blanks(self, tmp_path):
        """A quoted path may hold blanks."""
        root = write(tmp_path, "amp.cir", '.include "my models/m.inc"\n')
        write(tmp_path, "my models/m.inc", ".param inside=1\n")
        assert "inside" in read_netlist(root).global_params

    def test_lib_file_section_reads_only_that_section(self, tmp_path):
        """``.lib file section``: only that section's statements take effect; sections may
        read sections of the same file (a common PDK layout)."""
        root = write(tmp_path, "amp.cir", ".lib models/corners.lib TT\n")
        write(tmp_path, "models/corners.lib", """* corners
.param outside=0
.lib tt
.param vth=0.4
.lib 'corners.lib' common
.endl tt
.lib ss
.param vth=0.5
.subckt only_ss a
.ends
.endl ss
.lib common
.param tox=4n
.subckt shared a
.ends
.endl common
""")
        netlist = read_netlist(root)
        exprs = {k: v[1] for k, v in netlist.global_params.items()}
        assert exprs == {"vth": "0.4", "tox": "4n"}
        assert set(netlist.subckts) == {"shared"}
        assert netlist.global_params["vth"][0].section == "tt"

    def test_lib_section_as_ngspice_reads_it(self, tmp_path):
        """The section amploop reads is the one ngspice uses (reference: ngspice 39)."""
        write(tmp_path, "m/sec.lib", ".lib low\n.param rsec=3k\n.endl\n.lib high\n"
                                     ".param rsec=1k\n.endl\n")
        body = ".lib m/sec.lib low\nV1 in 0 dc 1\nR1 in a 1k\nR2 a 0 {rsec}"
        root = write(tmp_path, "top.cir", body)
        rsec = evaluate(read_netlist(root).global_params["rsec"][1])
        values = run_ngspice(tmp_path, op_deck(body, "v(a)"), name="deck.cir")
        assert values["v(a)"] == pytest.approx(rsec / (1e3 + rsec), rel=1e-6)
        assert rsec == 3e3

    def test_include_cycle_terminates(self, tmp_path):
        """Files that include each other are each read once."""
        root = write(tmp_path, "a.cir", ".include b.inc\n.param a=1\n")
        write(tmp_path, "b.inc", ".include a.cir\n.param b=2\n")
        netlist = read_netlist(root)
        assert len(netlist.files) == 2
        assert set(netlist.global_params) == {"a", "b"}

    def test_missing_include_names_the_including_file_and_line(self, tmp_path):
        """A missing include file: error at the ``.include`` line of the including file."""
        root = write(tmp_path, "amp.cir", "* amp\n.include lib/a.inc\n")
        write(tmp_path, "lib/a.inc", "* a\n\n.inc gone.inc\n")
        with pytest.raises(NetlistError, match="gone.inc") as exc:
            read_netlist(root)
        assert_place(exc, (tmp_path / "lib/a.inc").resolve(), 3)

    def test_missing_lib_file(self, tmp_path):
        """``.lib file section`` with a missing file: error at the ``.lib`` line."""
        root = write(tmp_path, "amp.cir", "* amp\n\n.lib nofile.lib tt\n")
        with pytest.raises(NetlistError, match="nofile.lib") as exc:
            read_netlist(root)
        assert_place(exc, root.resolve(), 3)

    def test_include_of_a_folder_is_an_error_at_the_include(self, tmp_path):
        """An include naming a folder is reported like a missing file."""
        (tmp_path / "adir").mkdir()
        root = write(tmp_path, "amp.cir", ".include adir\n")
        with pytest.raises(NetlistError) as exc:
            read_netlist(root)
        assert_place(exc, root.resolve(), 1)

    def test_missing_lib_section_names_the_lib_line_and_suggests(self, tmp_path):
        """A section that the library does not define: error at the ``.lib`` line, with a
        did-you-mean."""
        root = write(tmp_path, "amp.cir", "* amp\n.lib models.lib typ\n")
        write(tmp_path, "models.lib", ".lib typical\n.endl\n.lib slow\n.endl\n")
        with pytest.raises(NetlistError, match="did you mean 'typical'") as exc:
            read_netlist(root)
        assert_place(exc, root.resolve(), 2)

    def test_error_inside_an_included_file_names_that_file(self, tmp_path):
        """Structural errors in an included file name that file and its line."""
        root = write(tmp_path, "amp.cir", ".include bad.inc\n")
        write(tmp_path, "bad.inc", "* bad\n.subckt broken a\n")
        with pytest.raises(NetlistError, match="never closed") as exc:
            read_netlist(root)
        assert_place(exc, (tmp_path / "bad.inc").resolve(), 2)

    def test_missing_netlist_file(self, tmp_path):
        """The netlist file itself missing: error naming it."""
        with pytest.raises(NetlistError, match="file not found") as exc:
            read_netlist(tmp_path / "none.cir")
        assert str((tmp_path / "none.cir").resolve()) in str(exc.value)

    def test_subckt_after_end_of_an_included_file_is_found(self, tmp_path):
        """An included file is read past its ``.end``, as ngspice reads it."""
        root = write(tmp_path, "amp.cir", ".include models.inc\n")
        write(tmp_path, "models.inc", "* vendor file\n.END\n.subckt later a\n.ends\n")
        assert "later" in read_netlist(root).subckts

    def test_crlf_netlist_reads_like_lf(self, tmp_path):
        """A CRLF netlist gives the same subckts and parameters as the LF one."""
        lf = read_netlist(write(tmp_path, "lf/amp.cir", AMP))
        crlf = read_netlist(write(tmp_path, "crlf/amp.cir", AMP, newline="\r\n"))
        assert crlf.subckt("twostage").params == lf.subckt("twostage").params
        assert crlf.subckt("twostage").ports == lf.subckt("twostage").ports
        assert ({k: v[1] for k, v in crlf.global_params.items()}
                == {k: v[1] for k, v in lf.global_params.items()})


# --- rewriting statements --------------------------------------------------------------


class TestReplaceParam:
    def test_one_of_several_on_a_param_line(self, tmp_path):
        """Only the named parameter changes; names match case-insensitively."""
        s = only_statement(tmp_path, ".param a = 1 CC=1p b={a * 2}\n")
        assert replace_param(s, "cc", "2.5e-12") == ".param a=1 CC=2.5e-12 b={a * 2}"

    def test_subckt_header_default(self, tmp_path):
        """A ``.subckt`` header keeps its ports and ``params:``."""
        s = statements_of(tmp_path, ".subckt amp in out params: cc=1p rc=2k\n.ends\n")[0]
        assert replace_param(s, "rc", "5000.0") == ".subckt amp in out params: cc=1p rc=5000.0"

    def test_glued_params_keyword(self, tmp_path):
        """``params:cc=1p`` (glued) is rewritten in place."""
        s = statements_of(tmp_path, ".subckt amp in out params:cc=1p\n.ends\n")[0]
        assert replace_param(s, "CC", "3p") == ".subckt amp in out params:cc=3p"

    def test_does_not_match_the_keyword_or_a_longer_name(self, tmp_path):
        """``cc`` does not match ``cc2``; a missing name is an error at the statement."""
        path = write(tmp_path, "p.cir", "* p\n.param cc2=1p\n")
        s = read_source(path).statements[0]
        with pytest.raises(NetlistError, match="'cc' not set here") as exc:
            replace_param(s, "cc", "1")
        assert_place(exc, path.resolve(), 2)


class TestElementValue:
    @pytest.mark.parametrize("line, value", [
        ("C1 a b 1.5p", "1.5p"),
        ("Cc a b {cc} m=2", "{cc}"),
        ("C1 a b c=2p m=2", "2p"),
        ("C1 a b C = 2p", "2p"),
        ("R1 a b r=1k", "1k"),
        ("R1 a b resistance=1k tc1=0.001", "1k"),
        ("R1 a b 10k m=2 tc1=0", "10k"),
        ("L1 a b 1u", "1u"),
        ("L1 a b l=1u", "1u"),
        ("C1 a b {c1 >= 1p ? 1p : 2p}", "{c1 >= 1p ? 1p : 2p}"),
    ])
    def test_value_forms(self, tmp_path, line, value):
        """Positional and keyword values, with other parameters after them."""
        assert element_value(only_statement(tmp_path, line + "\n")) == value

    @pytest.mark.parametrize("line, expected", [
        ("C1 a b 1.5p", "C1 a b 2e-12"),
        ("Cc a b {cc} m=2", "Cc a b 2e-12 m=2"),
        ("C1 a b c=2p m=2", "C1 a b c=2e-12 m=2"),
        ("C1 a b C = 2p", "C1 a b C=2e-12"),
        ("C1 a b m=2 c=1p", "C1 a b m=2 c=2e-12"),
        ("C1 a b\n+ 1p ; continued\n+ m=2", "C1 a b 2e-12 m=2"),
        ("C1 a b {c1 >= 1p ? 1p : 2p} m=3", "C1 a b 2e-12 m=3"),
    ])
    def test_replace_capacitor_value(self, tmp_path, line, expected):
        """Only the value token changes; the keyword form is kept."""
        assert replace_element_value(only_statement(tmp_path, line + "\n"), "2e-12") == expected

    @pytest.mark.parametrize("line, expected", [
        ("R1 a b 1k", "R1 a b 5000.0"),
        ("R1 a b r=1k m=2", "R1 a b r=5000.0 m=2"),
        ("R1 a b R = 1k", "R1 a b R=5000.0"),
        ("Rc a b {rc} tc1=0.001 m=2", "Rc a b 5000.0 tc1=0.001 m=2"),
    ])
    def test_replace_resistor_value(self, tmp_path, line, expected):
        """Resistors: positional and ``r=`` forms, other parameters kept."""
        assert replace_element_value(only_statement(tmp_path, line + "\n"), "5000.0") == expected

    def test_not_a_two_terminal_element(self, tmp_path):
        """A MOSFET has no value to set: error at its line."""
        path = write(tmp_path, "m.cir", "* m\nM1 d g s b nch w=1u\n")
        with pytest.raises(NetlistError, match="not a resistor or capacitor") as exc:
            element_value(read_source(path).statements[0])
        assert_place(exc, path.resolve(), 2)

    def test_element_without_value(self, tmp_path):
        """``C1 a b m=2`` has no value: error at its line."""
        path = write(tmp_path, "c.cir", "C1 a b m=2\n")
        with pytest.raises(NetlistError, match="no value") as exc:
            replace_element_value(read_source(path).statements[0], "1p")
        assert_place(exc, path.resolve(), 1)


class TestReplaceInstanceParam:
    def test_replaces_existing(self, tmp_path):
        """An existing ``name=`` is replaced in place, matched case-insensitively."""
        s = only_statement(tmp_path, "M1 d g s b nch W = 2u l=0.5u m=1\n")
        assert replace_instance_param(s, "w", "4e-06") == "M1 d g s b nch W=4e-06 l=0.5u m=1"

    def test_adds_when_absent(self, tmp_path):
        """A missing parameter is appended."""
        s = only_statement(tmp_path, "M1 d g s b nch w=2u\n")
        assert replace_instance_param(s, "m", "3") == "M1 d g s b nch w=2u m=3"

    def test_does_not_match_a_node_named_like_the_parameter(self, tmp_path):
        """A node called ``w`` is not the parameter ``w``."""
        s = only_statement(tmp_path, "X1 w out amp\n")
        assert replace_instance_param(s, "w", "1u") == "X1 w out amp w=1u"


# --- render_file -----------------------------------------------------------------------


USER = """* user netlist: a divider pretending to be an amplifier
.param rtop = 1k  rmid=2k
.include models/load.inc
.subckt div in out params: rbot=1k
R1 in mid {rtop}
Rm mid out r = {rmid} m=1
Rb out 0 {rbot}
Xload out loadsub
.ends div
.model dummy d (is=1e-14)
Vtest in 0 dc 5
Rjunk out 0 1
+ m=1
.op
.tran 1n 10n
.end
Rafter out 0 1
"""

LOAD = """* load, with a relative include of its own
.include deeper/value.inc
.subckt loadsub n
Rload n 0 {rload}
.ends loadsub
"""


def user_design(tmp_path: Path) -> Path:
    """USER and its includes under tmp_path/design; the netlist file's path."""
    root = write(tmp_path, "design/amp.cir", USER)
    write(tmp_path, "design/models/load.inc", LOAD)
    write(tmp_path, "design/models/deeper/value.inc", "* deep\n.param rload = 4k\n")
    return root


def param_edit(netlist, name: str, value: str) -> dict:
    """The edit setting the global ``.param`` ``name`` to ``value``."""
    statement, _ = netlist.global_params[name]
    return {(statement.file, statement.index): replace_param(statement, name, value)}


class TestRenderFile:
    def test_top_level_elements_and_analyses_are_left_out(self, tmp_path):
        """Top-level element lines (continuations too) and analysis commands become
        comments, with a note naming file and line; definitions stay; output stops at
        ``.end``."""
        root = user_design(tmp_path)
        netlist = read_netlist(root)
        text, notes = render_file(netlist, root.resolve(), {}, top_level=True)
        lines = text.split("\n")
        for kept in (".param rtop = 1k  rmid=2k", ".subckt div in out params: rbot=1k",
                     "Rb out 0 {rbot}", ".model dummy d (is=1e-14)", ".ends div"):
            assert kept in lines
        for left_out in ("Vtest in 0 dc 5", "Rjunk out 0 1", "+ m=1", ".op", ".tran 1n 10n"):
            assert left_out not in lines
            assert f"* amploop left out: {left_out}" in lines
        assert ".end" not in lines and not any("Rafter" in line for line in lines)
        assert lines[-1].startswith("* amploop: the rest of amp.cir follows .end")
        assert notes == [f"{root.resolve()}:{n}: {name} is outside the subckt; left out of the "
                         "testbench" for n, name in [(11, "Vtest"), (12, "Rjunk"),
                                                     (14, ".op"), (15, ".tran")]]

    def test_comments_and_layout_pass_through(self, tmp_path):
        """Lines that need no change are copied as written (comments, spacing)."""
        root = write(tmp_path, "a.cir", "* head\n.subckt a x\n  R1   x 0   1k ; keep\n"
                                        "* between\n.ends\n")
        text, notes = render_file(read_netlist(root), root.resolve(), {}, top_level=True)
        assert text == "* head\n.subckt a x\n  R1   x 0   1k ; keep\n* between\n.ends"
        assert notes == []

    def test_control_block_content_passes_through_unparsed(self, tmp_path):
        """A ``.control`` block is copied as written: its lines are not statements, so
        none is left out or rewritten (amplifier refuses such files unless allowed)."""
        root = write(tmp_path, "a.cir", ".control\nlet x = 1 ; c\nR1 a 0 1k\n.endc\n"
                                        "R2 a 0 1k\n")
        text, notes = render_file(read_netlist(root), root.resolve(), {}, top_level=True)
        assert text.split("\n") == [".control", "let x = 1 ; c", "R1 a 0 1k", ".endc",
                                    "* amploop left out: R2 a 0 1k"]
        assert len(notes) == 1

    def test_analysis_commands_inside_a_subckt_are_kept(self, tmp_path):
        """Only top-level lines are left out."""
        root = write(tmp_path, "a.cir", ".subckt a x\n.ic v(x)=0\nR1 x 0 1k\n.ends\n")
        text, _ = render_file(read_netlist(root), root.resolve(), {}, top_level=True)
        assert ".ic v(x)=0" in text.split("\n") and "R1 x 0 1k" in text.split("\n")

    def test_not_top_level_keeps_element_lines(self, tmp_path):
        """With ``top_level=False`` nothing is left out."""
        root = write(tmp_path, "a.cir", "R1 a 0 1k\n.op\n")
        text, notes = render_file(read_netlist(root), root.resolve(), {}, top_level=False)
        assert text == "R1 a 0 1k\n.op" and notes == []

    def test_analysis_command_list(self):
        """The commands the testbench supplies itself are among those left out."""
        assert {".ac", ".op", ".tran", ".dc", ".meas", ".end", ".print"} <= ANALYSIS_COMMANDS
        assert not {".param", ".model", ".subckt", ".include", ".lib"} & ANALYSIS_COMMANDS

    def test_edits_replace_their_statement(self, tmp_path):
        """An edit replaces the statement's raw lines (continuations included)."""
        root = write(tmp_path, "a.cir", ".subckt a x\nC1 x 0\n* mid\n+ 1p\nR1 x 0 1k\n.ends\n")
        netlist = read_netlist(root)
        c1 = netlist.subckt("a").element("c1")
        text, _ = render_file(netlist, root.resolve(),
                              {(c1.file, c1.index): replace_element_value(c1, "3e-12")},
                              top_level=True)
        assert text == ".subckt a x\nC1 x 0 3e-12\nR1 x 0 1k\n.ends"

    def test_includes_get_absolute_paths(self, tmp_path):
        """Includes of unedited files stay includes, with absolute quoted paths, keeping
        the command as written; ``.lib`` keeps its section."""
        root = write(tmp_path, "d/amp.cir", ".INC m/a.inc\n.include 'm/b.inc'\n"
                                            ".lib ../lib/x.lib TT\n")
        write(tmp_path, "d/m/a.inc", "* a\n")
        write(tmp_path, "d/m/b.inc", "* b\n")
        write(tmp_path, "lib/x.lib", ".lib tt\n.endl\n")
        text, _ = render_file(read_netlist(root), root.resolve(), {}, top_level=True)
        assert text.split("\n") == [
            f'.INC "{(tmp_path / "d/m/a.inc").resolve()}"',
            f'.include "{(tmp_path / "d/m/b.inc").resolve()}"',
            f'.lib "{(tmp_path / "lib/x.lib").resolve()}" TT',
        ]

    def test_edited_included_file_is_inlined(self, tmp_path):
        """A file holding an edit is inlined, its own includes made absolute; others are not."""
        root = user_design(tmp_path)
        netlist = read_netlist(root)
        load = (tmp_path / "design/models/load.inc").resolve()
        rload = netlist.subckt("loadsub").element("rload")
        text, _ = render_file(netlist, root.resolve(),
                              {(load, rload.index): replace_element_value(rload, "12000.0")},
                              top_level=True)
        lines = text.split("\n")
        assert f"* ---- begin {load} (inlined: amploop set values in it)" in lines
        assert "Rload n 0 12000.0" in lines
        deeper = (tmp_path / "design/models/deeper/value.inc").resolve()
        assert f'.include "{deeper}"' in lines
        assert not any(line.startswith(".include models/") for line in lines)

    def test_edit_two_levels_down_inlines_the_whole_chain(self, tmp_path):
        """An edit in a file reached through another include inlines both (otherwise
        ngspice would read the unedited file through the unedited middle one)."""
        root = user_design(tmp_path)
        netlist = read_netlist(root)
        text, _ = render_file(netlist, root.resolve(), param_edit(netlist, "rload", "9k"),
                              top_level=True)
        lines = text.split("\n")
        assert ".param rload=9k" in lines
        assert not any(line.startswith(".include") for line in lines)
        assert text.count("* ---- begin") == 2

    def test_edited_lib_section_is_inlined_alone(self, tmp_path):
        """An edit in a ``.lib`` section inlines that section's body only, without its
        ``.lib tt`` / ``.endl`` lines (ngspice 39 answers 'unimplemented control card' to
        them in a deck; test_edit_in_lib_section_reaches_ngspice runs the result)."""
        root = write(tmp_path, "amp.cir", ".lib corners.lib tt\n")
        lib = write(tmp_path, "corners.lib", ".lib tt\n.param r=1k\n.lib corners.lib common\n"
                                             ".endl tt\n.lib ss\n.param r=5k\n.endl\n"
                                             ".lib common\n.param other=1\n.endl\n")
        netlist = read_netlist(root)
        text, _ = render_file(netlist, root.resolve(), param_edit(netlist, "r", "2k"),
                              top_level=True)
        assert text.split("\n") == [
            f"* ---- begin {lib.resolve()} section tt (inlined: amploop set values in it)",
            ".param r=2k",
            f'.lib "{lib.resolve()}" common',
            f"* ---- end {lib.resolve()} section tt",
        ]

    def test_end_in_an_inlined_file_is_commented_out(self, tmp_path):
        """``.end`` of an inlined include becomes a comment; what follows it is kept."""
        root = write(tmp_path, "amp.cir", ".include m.inc\n")
        write(tmp_path, "m.inc", ".param a=1\n.end\n.param b=2\n")
        netlist = read_netlist(root)
        lines = render_file(netlist, root.resolve(), param_edit(netlist, "b", "3"),
                            top_level=True)[0].split("\n")
        assert ".end" not in lines
        assert "* amploop: ngspice ignores .end in an included file: .end" in lines
        assert ".param b=3" in lines and ".param a=1" in lines

    def test_rendered_crlf_file_has_no_carriage_returns(self, tmp_path):
        """A CRLF netlist renders with plain line breaks."""
        root = write(tmp_path, "a.cir", ".subckt a x\nR1 x 0 1k\n.ends\n", newline="\r\n")
        text, _ = render_file(read_netlist(root), root.resolve(), {}, top_level=True)
        assert text == ".subckt a x\nR1 x 0 1k\n.ends"


class TestRenderWithNgspice:
    """Rendered netlists run by ngspice from another folder: the values ngspice uses are
    the rewritten ones (expected voltages: hand calculation of the resistive dividers)."""

    @staticmethod
    def deck(rendered: str, instance: str) -> str:
        """The rendered netlist with a 1 V source on ``top`` and the instance line."""
        return op_deck(rendered + "\nV1 top 0 dc 1\n" + instance, "v(out)")

    def test_unedited_render_keeps_the_netlist_values(self, tmp_path):
        """No edits: ngspice sees the netlist's own values; the top-level ``Vtest`` and
        ``Rjunk`` (1 ohm on ``out``) are left out, or v(out) would be far off."""
        root = user_design(tmp_path)
        text, _ = render_file(read_netlist(root), root.resolve(), {}, top_level=True)
        values = run_ngspice(tmp_path / "tb", self.deck(text, "X1 top out div"))
        bottom = parallel(1e3, 4e3)  # rbot || rload
        assert values["v(out)"] == pytest.approx(bottom / (1e3 + 2e3 + bottom), rel=1e-6)

    def test_edits_reach_ngspice(self, tmp_path):
        """A global ``.param``, an element value (``r =`` form with ``m=1`` after it), a
        value in a file two includes down, and a subckt default overridden on the
        instance: ngspice computes the divider from the new values."""
        root = user_design(tmp_path)
        netlist = read_netlist(root)
        param, _ = netlist.global_params["rtop"]
        rm = netlist.subckt("div").element("rm")
        rload, _ = netlist.global_params["rload"]
        edits = {
            (param.file, param.index): replace_param(param, "rtop", "3000.0"),
            (rm.file, rm.index): replace_element_value(rm, "4000.0"),
            (rload.file, rload.index): replace_param(rload, "rload", "12000.0"),
        }
        text, _ = render_file(netlist, root.resolve(), edits, top_level=True)
        assert "Rm mid out r=4000.0 m=1" in text.split("\n")
        values = run_ngspice(tmp_path / "tb", self.deck(text, "X1 top out div rbot=6k"))
        bottom = parallel(6e3, 12e3)
        assert values["v(out)"] == pytest.approx(bottom / (3e3 + 4e3 + bottom), rel=1e-6)

    def test_edit_in_lib_section_reaches_ngspice(self, tmp_path):
        """A ``.param`` in the selected ``.lib`` section and an element in a file included
        after the ``.end`` of another included file: ngspice uses both new values (and the
        reader followed the include past that ``.end``, as ngspice does)."""
        root = write(tmp_path, "design/root.cir", ".lib lib/corners.lib typ\n"
                                                  ".include lib/level1.inc\n")
        write(tmp_path, "design/lib/corners.lib", ".lib typ\n.param rsec=1k\n.endl typ\n"
                                                  ".lib slow\n.param rsec=5k\n.endl slow\n")
        write(tmp_path, "design/lib/level1.inc", "* vendor style\n.end\n.include sub/level2.inc\n")
        write(tmp_path, "design/lib/sub/level2.inc",
              ".subckt div top out\nR1 top out {rsec}\nR2 out 0 1k\n.ends\n")
        netlist = read_netlist(root)
        rsec, expr = netlist.global_params["rsec"]
        assert expr == "1k"
        r2 = netlist.subckt("div").element("r2")
        edits = {(rsec.file, rsec.index): replace_param(rsec, "rsec", "3000.0"),
                 (r2.file, r2.index): replace_element_value(r2, "1500.0")}
        text, _ = render_file(netlist, root.resolve(), edits, top_level=True)
        values = run_ngspice(tmp_path / "tb", self.deck(text, "X1 top out div"))
        assert values["v(out)"] == pytest.approx(1.5e3 / (3e3 + 1.5e3), rel=1e-6)

    def test_end_in_included_file_is_ignored_by_ngspice(self, tmp_path):
        """The fact the reader relies on: ngspice 39 reads an included file past its
        ``.end`` (R3 after it is in the circuit: 1k || 1k || 1k below 1k gives 0.25)."""
        write(tmp_path, "inc/withend.inc", "R2 a 0 1k\n.end\nR3 a 0 1k\n")
        body = "V1 in 0 dc 1\nR1 in a 1k\n.include inc/withend.inc\nR4 a 0 1k"
        values = run_ngspice(tmp_path, op_deck(body, "v(a)"))
        assert values["v(a)"] == pytest.approx(0.25, rel=1e-6)
        root = write(tmp_path, "read.cir", body)
        resistors = [s for f in read_netlist(root).files.values() for s in f.statements
                     if s.keyword.startswith("r")]
        assert sorted(s.keyword for s in resistors) == ["r1", "r2", "r3", "r4"]

    def test_capacitor_keyword_value_reaches_ngspice(self, tmp_path):
        """``c=`` form followed by ``m=2``: the rewritten capacitance is multiplied by m in
        ngspice (capacitive divider at 1 kHz: |v(c)| = 2·C1 / (2·C1 + C2), hand
        calculation with ngspice's parallel-multiplier meaning of m)."""
        root = write(tmp_path, "cap.cir", ".subckt cdiv in out\nC1 in out c=1p m=2\n"
                                          "C2 out 0 2p\n.ends\n")
        netlist = read_netlist(root)
        c1 = netlist.subckt("cdiv").element("c1")
        text, _ = render_file(netlist, root.resolve(),
                              {(c1.file, c1.index): replace_element_value(c1, "3e-12")},
                              top_level=True)
        deck = "\n".join(["* cap", text, "V1 in 0 dc 0 ac 1", "X1 in c cdiv", ".control",
                          "ac lin 1 1k 1k", "print vm(c)", ".endc", ".end", ""])
        values = run_ngspice(tmp_path / "tb", deck)
        assert values["vm(c)"] == pytest.approx(6e-12 / (6e-12 + 2e-12), rel=1e-6)


# --- evaluate --------------------------------------------------------------------------


class TestEvaluate:
    NUMBERS = (
        ("1", 1.0), ("1.5", 1.5), (".5", 0.5), ("5.", 5.0), ("1e3", 1e3), ("2.5E-3", 2.5e-3),
        ("1t", 1e12), ("1g", 1e9), ("1meg", 1e6), ("1MEG", 1e6), ("1Meg", 1e6), ("1k", 1e3),
        ("1K", 1e3), ("1m", 1e-3), ("1M", 1e-3), ("1u", 1e-6), ("1n", 1e-9), ("1p", 1e-12),
        ("1f", 1e-15), ("1F", 1e-15), ("1mil", 25.4e-6), ("1.5pF", 1.5e-12),
        ("10kohm", 1e4), ("2megohm", 2e6), ("10V", 10.0), ("3ms", 3e-3),
    )

    @pytest.mark.parametrize("text, value", NUMBERS)
    def test_numbers_and_suffixes(self, text, value):
        """SPICE scale factors t g meg k mil m u n p f, case-insensitive (M is milli), unit
        letters after them ignored (hand values; test_plain_numbers_agree_with_ngspice
        runs the same table through ngspice)."""
        assert evaluate(text) == pytest.approx(value, rel=1e-12)

    def test_plain_numbers_agree_with_ngspice(self, tmp_path):
        """ngspice 39 reads each number of the table as the value listed (reference:
        ngspice, the numbers as written in a source's ``dc`` value)."""
        body = "\n".join(f"V{i} n{i} 0 dc {text}" for i, (text, _) in enumerate(self.NUMBERS))
        nodes = [f"v(n{i})" for i in range(len(self.NUMBERS))]
        values = run_ngspice(tmp_path, op_deck(body, *[" ".join(nodes[i:i + 8])
                                                     for i in range(0, len(nodes), 8)]))
        assert [values[node] for node in nodes] == pytest.approx(
            [value for _, value in self.NUMBERS], rel=2e-6)

    @pytest.mark.parametrize("text, value", [
        ("2+3*4", 14.0), ("(2+3)*4", 20.0), ("10/4/5", 0.5), ("3-2-1", 0.0),
        ("2*-3", -6.0), ("--2", 2.0), ("2- -2", 4.0), ("-3^2+10", 1.0), ("2^-1", 0.5),
        ("2*3^2", 18.0), ("2^3*2", 16.0), ("2**3", 8.0),
    ])
    def test_precedence(self, text, value):
        """Usual precedence: power above sign above * / above + - (hand calculation;
        ngspice agrees, see test_agrees_with_ngspice)."""
        assert evaluate(text) == pytest.approx(value, rel=1e-12)

    def test_power_groups_from_the_left_on_the_magnitude(self):
        """ngspice 39 groups ``^`` from the left and powers the magnitude of the base
        (checked against ngspice in test_agrees_with_ngspice)."""
        assert evaluate("2^3^2") == 64.0
        assert evaluate("(-2)^3") == 8.0
        assert evaluate("(-4)^0.5") == 2.0
        assert evaluate("pwr(-2, 3)") == 8.0
        assert evaluate("pow(-2, 3)") == -8.0

    @pytest.mark.parametrize("text, value", [
        ("sqrt(16)", 4.0), ("exp(1)", math.e), ("log(10)", math.log(10)),
        ("ln(10)", math.log(10)), ("log10(1000)", 3.0), ("abs(-3)", 3.0),
        ("min(3, 4)", 3.0), ("max(1,2)", 2.0), ("max(1, 5, 2)", 5.0), ("pow(2, 10)", 1024.0),
        ("pwr(2,3)", 8.0), ("SQRT(4)", 2.0), ("sqrt(2*8)+1", 5.0),
    ])
    def test_functions(self, text, value):
        """Functions (case-insensitive names); log is the natural logarithm as in ngspice
        (see test_agrees_with_ngspice); values by hand."""
        assert evaluate(text) == pytest.approx(value, rel=1e-12)

    @pytest.mark.parametrize("text", ["{2*cc}", "'2*cc'", '"2*cc"', "  { 2 * CC }  "])
    def test_braces_and_quotes(self, text):
        """Expressions in braces or quotes; parameters case-insensitive."""
        assert evaluate(text, {"cc": "1.5p"}) == pytest.approx(3e-12, rel=1e-12)

    def test_parameters_refer_to_others(self):
        """Parameters are looked up recursively, case-insensitively on both sides."""
        params = {"Cbase": "1p", "cc": "{2*cbase}", "CT": "cc + CBASE"}
        assert evaluate("ct", params) == pytest.approx(3e-12, rel=1e-12)
        assert evaluate("cc*2", params) == pytest.approx(4e-12, rel=1e-12)

    def test_parameter_overrides_constant(self):
        """A parameter named like a constant is the parameter."""
        assert evaluate("e*2", {"e": "3"}) == 6.0

    def test_long_chain_is_not_a_loop(self):
        """A chain of 30 definitions evaluates."""
        params = {f"p{i}": f"p{i - 1}+1" for i in range(1, 31)}
        params["p0"] = "0"
        assert evaluate("p30", params) == 30.0

    @pytest.mark.parametrize("text, params, message", [
        ("cx", {}, "unknown parameter 'cx'"),
        ("2*cx", {"cc": "1p"}, "unknown parameter"),
        ("foo(1)", {}, "unknown function 'foo'"),
        ("a", {"a": "a"}, "loop: a -> a"),
        ("a", {"a": "b*2", "B": "c+1", "c": "{a}"}, "loop: a -> b -> c -> a"),
        ("1 +", {}, "ends too early"),
        ("(1+2", {}, "ends too early"),
        ("max(1, 2", {}, "ends too early"),
        ("2 3", {}, "unexpected '3'"),
        ("1 ? 2 : 3", {}, "cannot read"),
        ("", {}, "ends too early"),
        ("1/0", {}, "division by zero"),
        ("1/(a-1)", {"a": "1"}, "division by zero"),
        ("sqrt(-1)", {}, "undefined"),
        ("log(0)", {}, "undefined"),
        ("pow(2)", {}, "argument"),
        ("sqrt(1, 2)", {}, "argument"),
        ("10^1000", {}, "out of range"),
        ("exp(1000)", {}, "out of range"),
        ("1e308*10", {}, "not a finite number"),
    ])
    def test_errors_are_value_errors(self, text, params, message):
        """Unknown names, loops, syntax and math errors raise ValueError with a reason."""
        with pytest.raises(ValueError, match=re.escape(message)):
            evaluate(text, params)

    def test_loop_in_parameters_is_quick(self):
        """A loop where each level doubles the work is still found at once."""
        params = {"a": "b+b", "b": "a+a"}
        with pytest.raises(ValueError, match="loop"):
            evaluate("a", params)

    def test_value_of_reports_file_and_line(self, tmp_path):
        """value_of turns evaluation errors into NetlistError at the given place."""
        with pytest.raises(NetlistError, match="cannot evaluate 'cx'") as exc:
            value_of("cx", {}, where=f"{tmp_path / 'a.cir'}:7")
        assert f"{tmp_path / 'a.cir'}:7:" in str(exc.value)
        assert value_of("{2*a}", {"a": "1k"}, where="x:1") == 2e3

    NGSPICE_EXPRESSIONS = (
        "2+3*4", "(2+3)*4", "10/4/5", "3-2-1", "2^3^2", "2**3**2", "2^2^3", "4^0.5^2",
        "-2^2", "-2**2", "-3^2+10", "2^-1", "(-2)^3", "(-4)^0.5", "(-2)**3", "2*-3", "--2",
        "2- -2", "2*3^2", "2^3*2", "sqrt(16)+1", "pwr(-2,3)", "pow(-2,3)", "pow(2,0.5)",
        "log(10)", "ln(10)", "log10(1000)", "exp(1)", "abs(-3)", "max(1,2)", "min(3,4)",
        "1meg/1k", "1MEG/1k", "2.5u*1e6", "1f*1e15", "1F*1e15", "1p*1e12", "1n*1e9",
        "1m*1e3", "1M*1e3", "1k/1e3", "1g/1e9", "1t/1e12", "10V", "2megohm/1e6", ".5", "5.",
        "1.5e-3*1e3", "b*2", "A+B",
    )

    def test_agrees_with_ngspice(self, tmp_path):
        """Each expression gives the value ngspice 39 computes for it in a source's
        ``dc {...}`` (reference: ngspice, 7 significant digits printed)."""
        params = {"a": "2", "b": "{a*3}"}
        lines = [".param a=2 b={a*3}"]
        for i, text in enumerate(self.NGSPICE_EXPRESSIONS):
            lines.append(f"V{i} n{i} 0 dc {{{text}}}")
        nodes = [f"v(n{i})" for i in range(len(self.NGSPICE_EXPRESSIONS))]
        prints = [" ".join(nodes[i:i + 8]) for i in range(0, len(nodes), 8)]
        values = run_ngspice(tmp_path, op_deck("\n".join(lines), *prints))
        ours = {f"v(n{i})": evaluate(text, params)
                for i, text in enumerate(self.NGSPICE_EXPRESSIONS)}
        theirs = {node: values[node] for node in nodes}
        mismatched = {self.NGSPICE_EXPRESSIONS[int(node[3:-1])]: (ours[node], theirs[node])
                      for node in nodes
                      if not math.isclose(ours[node], theirs[node], rel_tol=2e-6, abs_tol=1e-12)}
        assert mismatched == {}


# --- small helpers ---------------------------------------------------------------------


