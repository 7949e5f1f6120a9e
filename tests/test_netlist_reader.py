"""The netlist reader: the documented SPICE subset and its errors (file:line: element: ...).

Format facts checked here are SPICE conventions that ngspice follows (first line is the title,
``*`` comment lines, ``+`` continuation, ``;``/``$`` inline comments in ngspice, ``meg`` mega and
``m``/``M`` milli, subcircuit flattening) — from memory of the ngspice manual; where a fact is
also checked against ngspice itself it is in tests/test_mna_ngspice.py.
"""

from __future__ import annotations

import pytest

from convert.circuit.netlist import GROUND, read_netlist, read_netlist_file
from convert.errors import InputError


def test_first_line_is_title_and_comments_and_continuations():
    """SPICE convention (from memory): line 1 is the title even if it looks like an element;
    '*' lines are comments; '+' continues; ';' and ' $' start inline comments."""
    text = (
        "R9 a b 1k\n"
        "* a comment line\n"
        "VIN in 0 AC 1 ; inline comment\n"
        "R1 in\n"
        "+ out 10k $ another comment\n"
        "R2 out 0 10k\n"
    )
    n = read_netlist(text, "c.cir")
    assert n.title == "R9 a b 1k"
    assert n.element("R9") is None
    r1 = n.element("r1")
    assert r1.nodes == ("in", "out") and r1.value == pytest.approx(1e4) and r1.line == 4
    assert any("title" in note for note in n.notes)


@pytest.mark.parametrize(
    "text, value",
    [
        ("1meg", 1e6),
        ("1MEG", 1e6),
        ("2.2n", 2.2e-9),
        ("4.7k", 4.7e3),
        ("10uF", 10e-6),
        ("1m", 1e-3),
        ("1M", 1e-3),
        ("3.3p", 3.3e-12),
        ("1e-9", 1e-9),
        ("47", 47.0),
    ],
)
def test_spice_suffixes(text, value):
    """SPICE rule (from memory of the ngspice manual): suffixes are case-insensitive, meg is mega,
    m and M are milli, letters after the suffix are ignored."""
    n = read_netlist(f"t\nVIN in 0\nR1 in out {text}\nR2 out 0 1k\n")
    assert n.element("R1").value == pytest.approx(value, rel=1e-12)


def test_capital_m_gets_a_warning():
    """Common practice: '1M' in a SPICE netlist is milli, a classic transcription slip; say so as a
    warning (printed before the results), not among the notes."""
    n = read_netlist("t\nVIN in 0\nR1 in out 1M\nR2 out 0 1k\n")
    assert any("milli" in w and "meg" in w for w in n.warnings)
    assert not any("milli" in note for note in n.notes)


def test_4k7_is_an_error_with_line():
    """Issue 5 / SPICE behaviour: '4k7' is not read as 4.7k by SPICE, so it is refused."""
    with pytest.raises(InputError, match=r"^card.cir:3: R1: .*4k7"):
        read_netlist("t\nVIN in 0\nR1 in out 4k7\n", "card.cir")


def test_params_braces_bare_names_and_arithmetic():
    """ngspice .param convention (from memory): {expression} in values, names case-insensitive."""
    text = (
        "t\n.param Rbase=10k k = 2 rtwo={rbase*K}\n.param half=rbase/2\n"
        "VIN in 0\nR1 in out rtwo\nR2 out 0 {(Rbase + half) * 2 - 1k^1}\nR3 out 0 half\n"
    )
    n = read_netlist(text)
    assert n.element("R1").value == pytest.approx(20e3)
    assert n.element("R2").value == pytest.approx(29e3)
    assert n.element("R3").value == pytest.approx(5e3)


def test_subckt_flattening_with_params_and_nesting():
    """SPICE subcircuit semantics (from memory): pins map to the caller's nodes, internal nodes and
    element names are local to each instance, 0 stays global, instance params override defaults."""
    text = """t
.subckt STAGE a b params: r=1k
R1 a m {r}
R2 m b {2*r}
C1 m 0 1n
.ends
.subckt TWO x y
X1 x mid STAGE r=3k
X2 mid y STAGE
.ends TWO
VIN in 0
XA in out TWO
R9 out 0 1k
"""
    n = read_netlist(text)
    names = {e.name for e in n.elements}
    assert {"XA.X1.R1", "XA.X1.R2", "XA.X2.R1", "XA.X1.C1"} <= names
    r1 = n.element("XA.X1.R1")
    assert r1.nodes == ("in", "xa.x1.m") and r1.value == pytest.approx(3e3)
    assert n.element("XA.X2.R2").value == pytest.approx(2e3)
    assert n.element("XA.X2.R2").nodes == ("xa.x2.m", "out")
    assert n.element("XA.X1.C1").nodes == ("xa.x1.m", GROUND)


def test_builtin_opamps_and_parameters():
    """Our own built-ins (docs/netlists.md): OPAMP pins inp inn out; OPAMP1P gbw (Hz) and a0."""
    n = read_netlist("t\nVIN in 0\nX1 in out out OPAMP\nX2 in o2 o2 opamp1p gbw=2meg\nR1 o2 out 1k\n")
    x1, x2 = n.element("X1"), n.element("X2")
    assert x1.kind == "OPAMP" and x1.nodes == ("in", "out", "out") and x1.param("gbw") is None
    assert x2.param("gbw") == pytest.approx(2e6) and x2.param("a0") == pytest.approx(1e5)


def test_analysis_directives_are_ignored_with_a_note_and_end_stops():
    """Our decision (docs/netlists.md): .ac/.tran/.op are ignored with a note; text after .end is not read."""
    n = read_netlist("t\nVIN in out 0\nR1 out 0 1k\n.ac dec 10 1 1k\n.control\nrun\n.endc\n.end\nQ1 garbage\n")
    assert any(".ac ignored" in note for note in n.notes)
    assert any(".control" in note for note in n.notes)


def test_diodes_and_models():
    """SPICE .model NAME D(BV=...) convention (from memory): BV is the reverse breakdown voltage."""
    n = read_netlist("t\n.model DZ D(BV=5.1 IS=1e-14)\n.model DS D\nVIN in 0\nR1 in out 1k\nD1 out 0 DZ\nD2 0 out ds\n")
    d1, d2 = n.element("D1"), n.element("D2")
    assert d1.param("bv") == pytest.approx(5.1) and d2.param("bv") is None
    assert d1.param("vf") == pytest.approx(0.65)
    assert [e.name for e in n.linear_elements] == ["VIN", "R1"]


ERRORS = [
    ("unknown element", "t\nVIN in 0 AC 1\nQ1 a b c NPN\n", r"^c.cir:3: Q1: unknown element type 'Q'"),
    ("duplicate", "t\nVIN in 0\nR1 in out 1k\nr1 out 0 2k\n", r"^c.cir:4: r1: the name r1 is used twice"),
    ("directive", "t\nVIN in 0\nR1 in out 1k\n.foo 1\n", r"^c.cir:4: \.foo: unsupported directive"),
    ("include", "t\n.include x.lib\n", r"^c.cir:2: \.include: .* not supported"),
    ("unknown param", "t\nVIN in 0\nR1 in out {zz}\nR2 out 0 1k\n", r"^c.cir:3: .*unknown parameter 'zz'"),
    ("param loop", "t\n.param a={b*2}\n.param b={a}\nVIN in 0\nR1 in out {a}\n", r"^c.cir:\d: .*in terms of itself"),
    ("zero R", "t\nVIN in 0\nR1 in out 0\n", r"^c.cir:3: R1: expected a positive value in ohms"),
    ("opamp pins", "t\nVIN in 0\nX1 a b OPAMP\n", r"^c.cir:3: X1: OPAMP has 3 pins"),
    ("unknown subckt", "t\nVIN in 0\nX1 a b c FOO\n", r"^c.cir:3: X1: unknown subcircuit 'FOO'"),
    ("bad opamp param", "t\nVIN in 0\nX1 a b c OPAMP1P gain=3\n", r"^c.cir:3: X1: OPAMP1P has no parameter 'gain'"),
    ("lonely +", "t\n+ R1 a b 1k\n", r"^c.cir:2: a continuation line"),
    ("stray .ends", "t\n.ends\n", r"^c.cir:2: \.ends: .*without"),
    ("open subckt", "t\n.subckt A x y\nR1 x y 1k\n", r"^c.cir:2: \.subckt: .*not closed"),
    ("recursion", "t\n.subckt A x y\nX1 x y A\n.ends\nVIN in 0\nX1 in out A\n", r"^c.cir:3: X1: .*deeper"),
    ("missing model", "t\nVIN in 0\nR1 in out 1k\nD1 out 0 DX\n", r"^c.cir:4: D1: diode model 'DX' is not defined"),
    ("division by zero", "t\nVIN in 0\nR1 in out {1/0}\n", r"^c.cir:3: R1: division by zero"),
    ("unbalanced", "t\nVIN in 0\nR1 in out {1k*(2}\n", r"^c.cir:3: R1: in expression"),
    ("few fields", "t\nVIN in 0\nR1 in 1k\n", r"^c.cir:3: R1: expected R1 NODE NODE VALUE"),
    ("E form", "t\nVIN in 0\nE1 out 0 value={v(in)}\n", r"^c.cir:3: E1: expected E1 OUT\+ OUT- IN\+ IN-"),
    ("empty", "", r"^c.cir: the netlist has no elements"),
    ("V junk", "t\nVIN in 0 banana\n", r"^c.cir:2: VIN: expected DC value"),
]


@pytest.mark.parametrize("label, text, pattern", ERRORS, ids=[e[0] for e in ERRORS])
def test_errors_name_file_line_and_element(label, text, pattern):
    """Issue 5 item 6 / DESIGN.md §4: every error is one line 'file:line: element: what'."""
    with pytest.raises(InputError, match=pattern) as info:
        read_netlist(text, "c.cir")
    assert "\n" not in str(info.value)


def test_file_errors(tmp_path):
    """A missing or non-UTF-8 file is a one-line InputError naming the file (DESIGN.md §4)."""
    with pytest.raises(InputError, match="no such file"):
        read_netlist_file(str(tmp_path / "nope.cir"))
    bad = tmp_path / "bad.cir"
    bad.write_bytes(b"title\nR1 a b \xff\xfe\n")
    with pytest.raises(InputError, match="not UTF-8"):
        read_netlist_file(str(bad))
