"""Fuzz the netlist reader and the analysis: random text and mutated valid netlists never raise
anything but the package's one-line InputError (property test with hypothesis).

Default run: 50 examples per property; set LOOPSHIFT_FUZZ_EXAMPLES=5000 for a long run.
"""

from __future__ import annotations

import os
import pathlib

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from convert.circuit.card import analyze_card
from convert.circuit.netlist import read_netlist
from convert.errors import InputError, LoopshiftError

EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))
HERE = pathlib.Path(__file__).parent / "netlists"
SEEDS = [p.read_text() for p in sorted(HERE.glob("*.cir"))]
FUZZ = settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=[HealthCheck.too_slow])

TOKENS = [
    "R1",
    "C1",
    "L1",
    "VIN",
    "E1",
    "G1",
    "D1",
    "X1",
    "X2",
    "in",
    "out",
    "0",
    "n1",
    "n2",
    "10k",
    "1meg",
    "4k7",
    "{a*2}",
    "{",
    "}",
    "(",
    ")",
    "=",
    "OPAMP",
    "OPAMP1P",
    "gbw=1meg",
    ".param a=1k",
    ".subckt S a b",
    ".ends",
    ".model DZ D(BV=5)",
    ".end",
    ".ac dec 1 1 10",
    "+",
    ";",
    "$",
    "*",
    "AC 1",
    "DC",
    "-1",
    "0.0",
    "1e308",
    "1e-308",
    "nan",
    "inf",
    "µ",
    "\t",
    ".control",
    ".endc",
    "params:",
    "a0=0",
]


def _one_line(exc: Exception) -> None:
    assert isinstance(exc, InputError) or isinstance(exc, LoopshiftError), type(exc)
    assert "\n" not in str(exc)


@FUZZ
@given(st.text(max_size=400))
def test_random_text_reader(text):
    """Any text: the reader returns a Netlist or raises InputError (never another exception)."""
    try:
        read_netlist(text, "fuzz.cir")
    except InputError as exc:
        _one_line(exc)


@FUZZ
@given(st.lists(st.lists(st.sampled_from(TOKENS), min_size=1, max_size=7), min_size=1, max_size=12))
def test_random_token_lines_through_the_analysis(lines):
    """Lines of plausible tokens: reading and analysing raise only InputError (or, for a numerical
    failure of the exact fit, the package's other one-line error)."""
    text = "title\n" + "\n".join(" ".join(words) for words in lines) + "\n"
    try:
        analyze_card(read_netlist(text, "fuzz.cir"), with_sensitivities=False)
    except LoopshiftError as exc:
        _one_line(exc)


@FUZZ
@given(st.sampled_from(range(len(SEEDS))), st.data())
def test_mutated_valid_netlists(index, data):
    """A valid card with lines deleted, duplicated, swapped or a token replaced: only InputError
    (or the package's one-line error) comes out of reading plus analysis."""
    lines = SEEDS[index].splitlines()
    for _ in range(data.draw(st.integers(1, 4))):
        if len(lines) < 2:
            break
        i = data.draw(st.integers(1, len(lines) - 1))
        action = data.draw(st.sampled_from(["delete", "duplicate", "swap", "token", "truncate"]))
        if action == "delete":
            del lines[i]
        elif action == "duplicate":
            lines.insert(i, lines[i])
        elif action == "swap":
            j = data.draw(st.integers(1, len(lines) - 1))
            lines[i], lines[j] = lines[j], lines[i]
        elif action == "truncate":
            lines[i] = lines[i][: data.draw(st.integers(0, max(0, len(lines[i]) - 1)))]
        else:
            words = lines[i].split() or [""]
            k = data.draw(st.integers(0, len(words) - 1))
            words[k] = data.draw(st.sampled_from(TOKENS) | st.text(max_size=6))
            lines[i] = " ".join(words)
    try:
        read_and_analyze("\n".join(lines) + "\n")
    except LoopshiftError as exc:
        _one_line(exc)


def read_and_analyze(text: str) -> None:
    """Read a netlist and analyse it as a card (two inputs when it has VSP and VPV)."""
    nl = read_netlist(text, "fuzz.cir")
    if "VSP" in text and "VPV" in text:
        analyze_card(nl, setpoint="VSP", measurement="VPV", with_sensitivities=False)
    else:
        analyze_card(nl, with_sensitivities=False)
