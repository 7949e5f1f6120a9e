"""The command line under bad input, at 80 columns, and as JSON.

The rule under test is the project's own (DESIGN.md §4, "common practice" for command-line
tools): every bad input gives exit code 2 and exactly one line on standard error that names the
option, field or file, never a traceback or an "internal error"; nothing the user had is
overwritten without --force. Each case below was found by trying the tool as a first-time user.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

PI = "2*(1+1/(0.3*s))"
ZPI = "(0.2-0.18z^-1)/(1-z^-1)"
PI_CARD = Path(__file__).parent / "netlists" / "pi_card.cir"
CASE = Path(__file__).parent.parent / "cases" / "pi_card_to_firmware.toml"


def _run(argv: list[str], width: int = 160):
    """Run ``main(argv)`` in-process; return (code, stdout text, stderr text)."""
    from rich.console import Console

    from convert.cli.main import main

    out, err = io.StringIO(), io.StringIO()
    console = Console(file=out, width=width, color_system=None, force_terminal=False, highlight=False)
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv, console=console)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture
def workdir(tmp_path, monkeypatch):
    """A scratch folder (the current directory) holding the awkward files the cases name."""
    monkeypatch.chdir(tmp_path)
    (tmp_path / "empty.cir").write_text("")
    (tmp_path / "empty.toml").write_text("")
    (tmp_path / "broken.toml").write_text('title = "x"\n[source\nexpression = "1/s"\n')
    (tmp_path / "latin1.cir").write_bytes(b"card\nR1 a b 1k \xb5\n")
    (tmp_path / "a folder").mkdir()
    (tmp_path / "taken.cir").write_text("keep me\n")
    (tmp_path / "card.cir").write_text(PI_CARD.read_text())
    return tmp_path


# (argv, fragment the one error line must contain)
BAD_INPUT = [
    # --- the controller, on every command that reads one
    (["show"], "give a controller"),
    (["show", "2*(1+"], "expression column 6"),
    (["show", "2*(1+1/(30*x))"], "unknown name 'x'"),
    (["show", "1/0"], "division by zero"),
    (["show", "s^1000"], "too large"),
    (["show", PI, "--pid", "kc=2"], "not both"),
    (["show", "--pid", "kc=nan"], "kc: expected a finite number"),
    (["show", "--pid", "kc=2", "ti=-30s"], "ti: must be positive"),
    (["show", "--pid", "kc=2", "ti=30kHz"], "ti: expected a time"),
    (["show", "--pid", "kc=2", "bogus=1"], "bogus: unknown key"),
    (["show", ZPI], "needs a sample rate"),
    # --- sample rates and frequencies: wrong unit, NaN, inf, zero, negative
    (["show", ZPI, "--fs", "2.2nF"], "--fs: expected a frequency in Hz"),
    (["show", ZPI, "--fs", "nan"], "--fs: expected a finite number"),
    (["show", ZPI, "--fs", "-1kHz"], "--fs"),
    (["digital", PI, "--fs", "inf"], "--fs: expected a finite number"),
    (["digital", PI, "--fs", "0"], "--fs: expected a positive value"),
    (["digital", PI], "required: --fs"),
    (["digital", PI, "--fs", "1kHz", "--method", "bogus"], "--method: unknown method 'bogus'"),
    (["digital", PI, "--fs", "1kHz", "--method", "tustin", "--prewarp", "600Hz"], "--prewarp: must be below fs/2"),
    (["digital", PI, "--fs", "1kHz", "--method", "zoh", "--prewarp", "10Hz"], "--prewarp: applies to tustin"),
    (["digital", PI, "--fs", "1kHz", "--method", "matched", "--match-at", "900Hz"], "--match-at: must be below"),
    (["digital", PI, "--fs", "1kHz", "--method", "zoh", "--keep-delay"], "--keep-delay: applies to matched"),
    (["digital", PI, "--fs", "1kHz", "--delay", "-1sample"], "--delay"),
    (["digital", PI, "--fs", "1kHz", "--delay", "1kHz"], "--delay: expected a time"),
    (["digital", PI, "--fs", "1kHz", "--band", "100Hz", "1Hz"], "--band: the band's low end"),
    (["digital", PI, "--fs", "1kHz", "--band", "1Hz"], "--band: expected 2 arguments"),
    (["digital", PI, "--fs", "1kHz", "--derivative-filter", "-3"], "--derivative-filter: expected a positive"),
    (["digital", PI, "--fs", "1kHz", "--agreement", "x", "3"], "--agreement: expected a plain number"),
    (["digital", ZPI, "--fs", "100Hz"], "already digital"),
    (["digital", "s", "--fs", "1kHz"], "improper"),
    (["analog", ZPI, "--fs", "100Hz"], "required: --method"),
    (["analog", ZPI, "--fs", "100Hz", "--method", "foh"], "--method: no inverse for method 'foh'"),
    (["analog", ZPI, "--fs", "100Hz", "--method", "tustin", "--prewarp", "60Hz"], "--prewarp: must be below fs/2"),
    (["analog", ZPI, "--fs", "100Hz", "--method", "zoh", "--prewarp", "10Hz"], "--prewarp: applies to"),
    (["analog", "1/(z+0.5)", "--fs", "100Hz", "--method", "zoh"], "negative real axis"),
    (["analog", "s+1", "--fs", "100Hz", "--method", "tustin"], "EXPR_IN_Z"),
    # --- circuit options
    (["circuit", PI, "--topology", "nope"], "--topology: unknown topology 'nope'"),
    (["circuit", PI, "--topology", "lead-lag-rc"], "--topology: lead-lag-rc realizes"),
    (["circuit", PI, "--resistors", "E7"], "--resistors: unknown E-series 'E7'"),
    (["circuit", PI, "--r-min", "1uF"], "--r-min: expected a resistance"),
    (["circuit", PI, "--r-min", "-1k"], "--r-min: expected a positive value"),
    (["circuit", PI, "--r-min", "10M"], "--r-min/--r-max"),
    (["circuit", PI, "--c-max", "0"], "--c-max: expected a positive value"),
    (["circuit", PI, "--band", "nan", "1Hz"], "--band: expected a finite number"),
    (["circuit", PI, "--tolerance", "R=x"], "--tolerance: R:"),
    (["circuit", PI, "--tolerance", "R=200%"], "--tolerance: R: a tolerance must be"),
    (["circuit", PI, "--draws", "-5"], "--draws: expected a whole number from 0"),
    (["circuit", PI, "--draws", "100000000000"], "--draws: expected a whole number from 0"),
    (["circuit", PI, "--draws", "x"], "--draws: invalid int value"),
    (["circuit", PI, "--seed", "-1", "--draws", "10"], "--seed: expected a whole number"),
    (["circuit", PI, "--top", "0", "--draws", "0"], "--top: expected a whole number from 1"),
    (["circuit", PI, "--distribution", "cauchy"], "--distribution: invalid choice"),
    (["circuit", PI, "--amplitude", "1V", "--draws", "0"], "needs both --amplitude and --rail"),
    (["circuit", PI, "--amplitude", "-1V", "--rail", "12V"], "--amplitude: expected a positive value"),
    (["circuit", PI, "--trim", "kp=4..1", "--draws", "0"], "--trim: a trim range"),
    (["circuit", PI, "--trim", "zz=1..4", "--draws", "0"], "--trim: pi-rc-feedback has no single resistor"),
    (["circuit", ZPI, "--fs", "100Hz", "--inverse-method", "foo"], "--inverse-method: no inverse for method"),
    # issue 14: a stable 1/(s^2+s+1) is now built as a cascade; an unstable one is still refused
    (["circuit", "1/(s^2-s+1)", "--draws", "0"], "no catalog topology"),
    # found by the fuzz test below: a pure differentiator divided by zero in the filter rule
    (["circuit", "s", "--draws", "0"], "target: a pure differentiator"),
    # --- circuit output files: exists, folder, missing folder, the same file twice, wrong type
    (["circuit", PI, "--netlist", "taken.cir", "--draws", "0"], "--netlist: taken.cir exists"),
    (["circuit", PI, "--netlist", "a folder", "--draws", "0"], "--netlist: 'a folder' is a folder"),
    (["circuit", PI, "--netlist", "a folder", "--force", "--draws", "0"], "--netlist: 'a folder' is a folder"),
    (["circuit", PI, "--bom", "no/such/folder/bom.csv", "--draws", "0"], "--bom: the folder 'no/such/folder' does not"),
    (
        ["circuit", PI, "--netlist", "x.cir", "--bom", "x.cir", "--draws", "0"],
        "--bom: 'x.cir' is also the file for --netlist",
    ),
    (["circuit", PI, "--schematic", "pi.pdf", "--draws", "0"], "--schematic: a schematic is written as .png or .svg"),
    # --- card: files and parts
    (["card"], "give a netlist file"),
    (["card", "missing.cir"], "missing.cir: no such file"),
    (["card", "a folder"], "a folder: expected a netlist, found a folder"),
    (["card", "empty.cir"], "empty.cir: the netlist has no elements"),
    (["card", "latin1.cir"], "latin1.cir: the file is not UTF-8 text"),
    (["card", "card.cir", "--input", "VX"], "input source 'VX' not found"),
    (["card", "card.cir", "--output", "nowhere"], "output node 'nowhere' not found"),
    (["card", "card.cir", "--setpoint", "VIN"], "give both --setpoint and --measurement"),
    (["card", "card.cir", "--part", "R1=1k"], "--part goes with --topology"),
    (["card", "card.cir", "--digits", "99"], "--digits: expected 1 to 17"),
    (["card", "--topology", "pi-rc-feedback", "--part", "R1=100k", "R2=470k"], "--part: C1:"),
    (
        ["card", "--topology", "pi-rc-feedback", "--part", "R1=100k", "R2=470k", "C1=1uH"],
        "--part: C1: expected a capacitance",
    ),
    (
        ["card", "--topology", "pi-rc-feedback", "--part", "R1=100k", "R2=470k", "C1=0"],
        "--part: C1: C1 must be a positive finite capacitance, found 0",
    ),
    (
        ["card", "--topology", "pi-rc-feedback", "--part", "R1=1meg", "R2=470k", "C1=1u"],
        "--part: R1: 'meg' is SPICE spelling",
    ),
    # --- report: case files and the report folder
    (["report"], "required: CASE"),
    (["report", "missing.toml"], "missing.toml: no such case file"),
    (["report", "a folder"], "found a folder"),
    (["report", "empty.toml"], "empty.toml:1: source"),
    (["report", "broken.toml"], "broken.toml:2: not valid TOML"),
    (["report", str(CASE), "--out", "a folder"], "--out: the report folder 'a folder' already exists"),
    (["report", str(CASE), "--out", "taken.cir", "--force"], "--out: 'taken.cir' exists and is not a folder"),
    (["report", str(CASE), "--out", "no/such/folder/report"], "--out: the folder 'no/such/folder' does not exist"),
    (["report", str(CASE), "--draws", "0"], "--draws: expected 200 to 1,000,000 draws"),
    # --- batch: the case list and the batch folder
    (["batch", "missing.toml"], "no such case file or folder: 'missing.toml'"),
    (["batch", str(CASE), "--workers", "0"], "--workers: expected 1 to 256 workers"),
    (["batch", str(CASE), "--out", "."], "--out: the folder '.' holds files that are not an earlier batch"),
    (["code", PI, "--fs", "1kHz", "--format", "q15", "--out", "fw"], "--input-range"),
    (["code", PI, "--fs", "1kHz", "--name", "9lives", "--out", "fw"], "identifier"),
    # --- usage
    ([], "give a command"),
    (["bogus"], "invalid choice: 'bogus'"),
    (["show", PI, "--jsn"], "unknown option --jsn (did you mean --json?)"),
    (["show", "2*s", "extra"], "unexpected word 'extra'"),
    (["digital", PI, "--fs"], "--fs: expected one argument"),
    # --- compare: each spec names A or B
    (["compare", PI], "give the form B"),
    (["compare", PI, "pid: kc=2 ti=-3s"], "B: ti:"),
    (["compare", PI, "empty.cir"], "empty.cir"),
    (["compare", "latin1.cir", PI], "latin1.cir"),
    (["compare", PI, "digital: b=1 a=0,1 fs=1kHz"], "B: a: a[0] must be non-zero"),
]


@pytest.mark.parametrize("argv, fragment", BAD_INPUT, ids=[" ".join(a)[:60] or "no-args" for a, _ in BAD_INPUT])
def test_bad_input_gives_one_line_and_exit_2(workdir, argv, fragment):
    """Bad input: exit 2, one line on stderr naming the option/field/file, no traceback (DESIGN.md §4)."""
    code, out, err = _run(argv)
    lines = [line for line in err.splitlines() if line.strip()]
    assert code == 2, (code, out[-400:], err)
    assert len(lines) == 1, err
    assert lines[0].startswith("error: "), lines[0]
    assert "internal error" not in lines[0] and "Traceback" not in err
    assert fragment in lines[0], lines[0]


def test_there_are_forty_cases_across_all_commands():
    """The table covers every command (a guard against the table shrinking unnoticed)."""
    from convert.cli.main import COMMANDS

    assert len(BAD_INPUT) >= 40
    seen = {argv[0] for argv, _ in BAD_INPUT if argv}
    assert set(COMMANDS) <= seen


def test_existing_outputs_are_not_touched(workdir):
    """A refused run leaves the file that was there unchanged (DESIGN.md §4: nothing overwritten without --force)."""
    before = (workdir / "taken.cir").read_text()
    code, _, _ = _run(["circuit", PI, "--netlist", "taken.cir", "--bom", "new.csv", "--draws", "0"])
    assert code == 2
    assert (workdir / "taken.cir").read_text() == before
    assert not (workdir / "new.csv").exists(), "nothing is written when one output is refused"
    code, _, _ = _run(["circuit", PI, "--netlist", "taken.cir", "--force", "--draws", "0"])
    assert code == 0
    assert (workdir / "taken.cir").read_text() != before
    assert not [p for p in os.listdir(workdir) if p.startswith(".loopshift-")], "temporary files are cleaned up"


def test_unreadable_files_are_one_line(workdir, monkeypatch):
    """A file the system refuses to read (permission) is one line naming it, for a netlist and a case file.

    Simulated by refusing the open call, because tests may run as root (who can read anything)."""
    import os

    real_open = os.open  # input files are read through convert.limits.read_input_text (os.open)

    def refusing_open(file, *args, **kwargs):
        if str(file).endswith(("card.cir", "locked.toml")):
            raise PermissionError(13, "Permission denied", str(file))
        return real_open(file, *args, **kwargs)

    monkeypatch.setattr(os, "open", refusing_open)
    (workdir / "locked.toml").write_bytes(b"")
    for argv, fragment in ((["card", "card.cir"], "card.cir"), (["report", "locked.toml"], "locked.toml")):
        code, _, err = _run(argv)
        lines = err.strip().splitlines()
        assert code == 2 and len(lines) == 1, err
        assert fragment in lines[0] and "ermission denied" in lines[0], lines[0]


def test_system_refusal_while_writing_is_one_line(workdir, monkeypatch):
    """An OSError while writing (disk full, permission) is one line with exit 2, not an internal error."""
    import convert.cli.common as common

    def full_disk(path, text):
        raise OSError(28, "No space left on device", path)

    monkeypatch.setattr(common, "_write_text", full_disk)
    code, _, err = _run(["circuit", PI, "--netlist", "new.cir", "--draws", "0"])
    assert code == 2, err
    assert err.strip() == "error: --netlist: cannot write 'new.cir' (No space left on device); nothing was written"


@pytest.mark.parametrize(
    "argv",
    [
        ["show", "-2*(1+1/(30*s))"],
        ["show", "-s/(s+1)"],
        ["show", "- 2/s"],
    ],
)
def test_expression_may_start_with_minus(argv):
    """A negated controller (direct action written as an expression) is a value, not an unknown option."""
    code, out, err = _run(argv + ["--json"])
    assert code == 0, err
    data = json.loads(out)
    assert data["gain"] < 0


def test_deprecated_filter_spelling_still_works():
    """`digital --filter N` (the earlier spelling) gives the same result as --derivative-filter N."""
    base = ["digital", "2*(1 + 1/(0.1*s) + 0.01*s)", "--fs", "1kHz", "--method", "tustin", "--json"]
    a = _run(base + ["--filter", "10"])
    b = _run(base + ["--derivative-filter", "10"])
    assert a[0] == b[0] == 0
    assert json.loads(a[1]) == json.loads(b[1])


# ------------------------------------------------------------------------------ 80 columns
WIDE_RUNS = [
    ["show", "--pid", "kc=2", "ti=30s", "td=5s", "n=10"],
    ["show", "--pid", "pb=50%", "reset=2/min", "td=0.1min", "form=series", "action=direct"],
    [
        "digital",
        "2*(1 + 1/(0.1*s) + 0.01*s)",
        "--fs",
        "100kHz",
        "--derivative-filter",
        "10",
        "--method",
        "all",
        "--prewarp",
        "12.5kHz",
        "--delay",
        "0.5sample",
    ],
    ["analog", ZPI, "--fs", "100Hz", "--method", "tustin"],
    ["circuit", "--pid", "kp=2", "ki=1/s", "kd=0.5s", "tf=0.05s", "b=0.5", "c=0", "--draws", "200"],
    ["circuit", "--catalog"],
    ["card", str(PI_CARD)],
]


@pytest.mark.parametrize("argv", WIDE_RUNS, ids=[" ".join(a)[:40] for a in WIDE_RUNS])
def test_output_reads_at_80_columns(argv):
    """At 80 columns no line is longer than 80, nothing is cut with an ellipsis, and no unit or
    single letter is left alone on a line (a squeezed column) — common practice for terminal tables."""
    code, out, err = _run(argv, width=80)
    assert code == 0, err
    lines = out.splitlines()
    assert max(len(line.rstrip()) for line in lines) <= 80
    assert "…" not in out
    run = {}  # cell position -> how many lines in a row hold a single letter there
    for line in lines:
        cells = [c.strip() for c in line.replace("│", "|").replace("┃", "|").split("|")]
        for cell in cells:
            assert cell not in ("Hz", "kHz", "mHz", "dB", "s", "min", "%"), f"a unit split from its number: {line!r}"
        letters = {i for i, c in enumerate(cells) if len(c) == 1 and c.isalpha()}
        run = {i: run.get(i, 0) + 1 for i in letters}
        assert max(run.values(), default=0) < 3, f"a column squeezed to one letter per line: {line!r}"


def test_digital_table_keeps_method_names_whole():
    """The digital survey names every method whole at 80 columns (it once printed "forward-e" / "uler")."""
    code, out, _ = _run(["digital", "(s+2)/(s+20)", "--fs", "1kHz", "--method", "all"], width=80)
    assert code == 0
    for name in ("zoh", "foh", "tustin", "matched", "impulse", "forward-euler", "backward-euler"):
        assert any(line.split() and line.split()[0] == name for line in out.splitlines()), name


# ------------------------------------------------------------------------------ JSON
JSON_RUNS = [
    ["show", "--pid", "kc=2", "ti=30s", "--json"],
    ["show", ZPI, "--fs", "100Hz", "--json"],
    ["digital", "(s+2)/(s-20)", "--fs", "1kHz", "--json"],
    ["analog", "1/(z-0.5)", "--fs", "100Hz", "--method", "zoh", "--json"],
    ["circuit", "--pid", "kp=2", "ki=1/s", "kd=0.5s", "tf=0.05s", "b=0.5", "c=0", "--draws", "200", "--json"],
    ["circuit", "--catalog", "--json"],
    ["card", str(PI_CARD), "--json"],
    ["card", "--topology", "pi-rc-feedback", "--part", "R1=100k", "R2=470k", "C1=1u", "--json"],
]


@pytest.mark.parametrize("argv", JSON_RUNS, ids=[" ".join(a)[:40] for a in JSON_RUNS])
def test_json_is_strict_and_alone_on_stdout(argv):
    """--json prints one strict JSON document (RFC 8259: no NaN or Infinity) and nothing else on stdout."""
    code, out, err = _run(argv, width=80)
    assert code == 0, err

    def refuse(name):
        raise ValueError(f"not JSON: {name}")

    json.loads(out, parse_constant=refuse)


def test_json_written_files_are_listed_not_printed(workdir):
    """With --json and an output file, stdout stays pure JSON and names the file it wrote."""
    code, out, err = _run(["circuit", PI, "--draws", "0", "--netlist", "pi.cir", "--json"])
    assert code == 0, err
    assert json.loads(out)["written"] == ["pi.cir"]
    assert (workdir / "pi.cir").exists()


# ------------------------------------------------------------------------------ entry points
def test_python_dash_m_and_version():
    """`python -m convert --help` and `loopshift --version` work in a fresh process."""
    from convert import __version__

    r = subprocess.run([sys.executable, "-m", "convert", "--help"], capture_output=True, text=True, timeout=60)
    assert r.returncode == 0 and "usage: loopshift" in r.stdout and r.stderr == ""
    r = subprocess.run([sys.executable, "-m", "convert", "--version"], capture_output=True, text=True, timeout=60)
    assert r.returncode == 0 and r.stdout.strip() == f"loopshift {__version__}"
    r = subprocess.run(
        [sys.executable, "-m", "convert", "show", "--fs", "-1kHz", "1/(z-1)"],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert r.returncode == 2 and r.stdout == "" and r.stderr.count("\n") == 1 and "--fs" in r.stderr


def test_every_option_has_help_with_an_example():
    """Every option of every command is explained, with an example (e.g. ...) — the project's help rule."""
    import argparse

    from convert.cli.main import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    missing = []
    for name, p in sub.choices.items():
        for action in p._actions:
            if not action.option_strings or action.help == argparse.SUPPRESS or "-h" in action.option_strings:
                continue
            if not action.help or "e.g." not in action.help:
                missing.append(f"{name} {action.option_strings[-1]}")
        assert "examples:" in (p.epilog or ""), name
    assert not missing, missing


def test_same_option_same_metavar_across_commands():
    """Options spelled alike mean alike and read alike in the usage lines (--band LOW HIGH everywhere)."""
    import argparse

    from convert.cli.main import build_parser

    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    seen: dict[str, set] = {}
    for p in sub.choices.values():
        for action in p._actions:
            for s in action.option_strings:
                seen.setdefault(s, set()).add(str(action.metavar))
    mixed = {k: v for k, v in seen.items() if len(v) > 1}
    assert not mixed, mixed


# ------------------------------------------------------------------------------ fuzz
def _fuzz_examples() -> int:
    return int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "40"))


WORDS = [
    "show",
    "digital",
    "analog",
    "circuit",
    "card",
    "report",
    "--fs",
    "--method",
    "--pid",
    "--json",
    "--band",
    "--delay",
    "--prewarp",
    "--match-at",
    "--keep-delay",
    "--derivative-filter",
    "--agreement",
    "--digits",
    "--topology",
    "--part",
    "--tolerance",
    "--draws",
    "--seed",
    "--netlist",
    "--bom",
    "--force",
    "--out",
    "--catalog",
    "--input",
    "--output",
    "--top",
    "--trim",
    "--rail",
    "--amplitude",
    "--opamp-gbw",
    "--r-min",
    "--c-max",
    "--resistors",
    "--inverse-method",
    "-h",
    "--version",
    "1kHz",
    "100Hz",
    "-1kHz",
    "0",
    "nan",
    "inf",
    "2.2nF",
    "10",
    "-3",
    "1e400",
    "x",
    "",
    " ",
    PI,
    ZPI,
    "(s+2)/(s+20)",
    "1/(s-1)",
    "s",
    "-s",
    "1/0",
    "(s+1)^0.5",
    "z",
    "2*(1+",
    "kc=2",
    "ti=30s",
    "td=5s",
    "n=10",
    "kc=nan",
    "ti=-1",
    "action=direct",
    "bogus=1",
    "tustin",
    "zoh",
    "matched",
    "all",
    "foh",
    "pi-rc-feedback",
    "nope",
    "R1=100k",
    "R2=470k",
    "C1=1u",
    "C1=0",
    "R=1%",
    "R=x",
    "kp=1..4",
    "E24",
    "E7",
    "missing.cir",
    "out.cir",
    "a folder",
    "empty.toml",
    "1sample",
]


def test_random_argv_never_crashes(tmp_path, monkeypatch):
    """Random word lists: exit code 0, 1 or 2 and never an internal error or a traceback (fuzz,
    hypothesis; LOOPSHIFT_FUZZ_EXAMPLES=N for a longer run). Circuit runs get --draws 0 so that the
    Monte Carlo does not dominate the run time."""
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st

    monkeypatch.chdir(tmp_path)
    (tmp_path / "a folder").mkdir()
    (tmp_path / "empty.toml").write_text("")

    commands = st.sampled_from(["show", "digital", "analog", "circuit", "card", "report"])
    words = st.lists(st.sampled_from(WORDS), min_size=0, max_size=8)

    @settings(
        max_examples=_fuzz_examples(),
        deadline=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
    )
    @given(st.one_of(words, st.tuples(commands, words).map(lambda t: [t[0], *t[1]])))
    def check(argv):
        if "circuit" in argv:
            argv = argv + ["--draws", "0"]
        code, out, err = _run(argv)
        assert code in (0, 1, 2), (argv, code, err)
        assert "internal error" not in err and "Traceback" not in err, (argv, err)
        if code == 2:
            assert len([line for line in err.splitlines() if line.strip()]) == 1, (argv, err)

    check()
