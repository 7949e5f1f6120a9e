"""Issue 9 items 3 and 4: hostile and extreme inputs give one line and exit 2, never an internal
error, a hang or gigabytes; the limits are named with how to change them; file text is printed
as written. Each test is named after the defect it pins and uses the exact input of the probe
(common practice: a regression test per bug, named after it).
"""

from __future__ import annotations

import os
import stat

import pytest

from convert.errors import MAX_ERROR_CHARS


def _one_line_error(result, *fragments):
    lines = [line for line in result.err.splitlines() if line.strip()]
    assert result.code == 2, (result.code, result.out[-300:], result.err[-600:])
    assert len(lines) == 1, result.err[-2000:]
    assert lines[0].startswith("error: ") and "internal error" not in lines[0], lines[0]
    assert "Traceback" not in result.err
    for fragment in fragments:
        assert fragment in lines[0], lines[0]
    return lines[0]


@pytest.fixture
def here(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    return tmp_path


# ----------------------------------------------------------------------------- expressions
def test_200_nested_parentheses_is_refused_naming_the_nesting_limit(run_cli):
    """Was RecursionError (exit 3)."""
    line = _one_line_error(run_cli("show", "(" * 200 + "s" + ")" * 200), "nested more than 100 deep")
    assert len(line) < MAX_ERROR_CHARS + 10


def test_99_nested_parentheses_still_read(run_cli):
    """The limit is not lower than it says: 99 levels read as s (hand check: C(s) = s)."""
    result = run_cli("show", "(" * 99 + "s+1" + ")" * 99, "--json")
    assert result.code == 0, result.err


def test_1000_unary_minus_signs_are_refused(run_cli):
    """Was RecursionError (exit 3)."""
    _one_line_error(run_cli("show", "1" + "-" * 1000 + "s"), "nested more than 100 deep")


def test_a_million_character_unknown_option_is_echoed_as_a_short_excerpt(run_cli):
    line = _one_line_error(run_cli("show", "-" * 1_000_000 + "s"), "unknown option")
    assert len(line) < 300
    line = _one_line_error(run_cli("show", "1/s", "--fs", "1kHz", "x" * 1_000_000), "unexpected word")
    assert len(line) < 300


def test_5000_digit_exponent_is_refused(run_cli):
    """Was ValueError from int() (Python's 4,300-digit limit), exit 3."""
    _one_line_error(run_cli("show", "1e" + "9" * 5000 + "*s"), "out of range")
    _one_line_error(run_cli("show", "s^1" + "0" * 5000), "too large")


def test_fs_1e999999999_is_refused(run_cli):
    """Was decimal.Overflow (exit 3); docs/values.md promises a refusal."""
    _one_line_error(run_cli("digital", "1/(s+1)", "--fs", "1e999999999"), "--fs", "out of range")


def test_fs_with_a_5000_digit_exponent_is_refused(run_cli):
    _one_line_error(run_cli("digital", "1/(s+1)", "--fs", "1e" + "9" * 5000), "--fs")


def test_fs_1e_300_hz_is_refused_naming_fs(run_cli):
    """Was 'numerator: coefficients must be finite numbers, found [nan]' (naming no option). At
    1e-300 Hz the sampled form is now finite (the matrix exponential no longer overflows to NaN)
    and the rate is refused for lying beyond a double's precision from the corners; at 1e300 Hz
    the matched form is not finite. Both say the rate is too far from the corners."""
    _one_line_error(run_cli("digital", "1/(s+1)", "--fs", "1e-300Hz"), "--fs", "too far from the controller's corners")
    _one_line_error(run_cli("digital", "1/(s+1)", "--fs", "1e300Hz"), "--fs", "not a finite number")


def test_s_plus_1_to_the_64_repeated_1000_times_is_refused_at_once(run_cli):
    """Was a hang: the degree is bounded while the expression is read (100), before the work."""
    line = _one_line_error(run_cli("show", "*".join(["(s+1)^64"] * 1000)), "degree", "100")
    assert "8,999 characters" in line  # the input is quoted as a short excerpt with its length


def test_a_power_above_the_degree_limit_is_refused_before_it_is_computed(run_cli):
    _one_line_error(run_cli("show", "(s^2+s+1)^60"), "degree 120")


def test_sum_of_first_order_terms_with_long_constants_is_quick_and_exact():
    """Cancellation used Euclid over the rationals: 30 terms with 20-digit constants took 30 s. Now
    a modular test proves them coprime. Checked against the partial-fraction identity: the
    sum of 1/(s + a_k) has denominator prod(s + a_k), so the reduced denominator has degree n."""
    from convert.expr import parse_rational

    n = 30
    text = "+".join(f"1/(s+1.{k}3456789123456789)" for k in range(1, n + 1))
    parsed = parse_rational(text)
    assert len(parsed.den) - 1 == n and len(parsed.num) - 1 == n - 1 and parsed.cancelled is None


def test_common_factor_is_still_cancelled_exactly():
    """The integer remainder sequence finds a real common factor: (s+1)(s+2)/((s+1)(s+3))."""
    from fractions import Fraction

    from convert.expr import parse_rational

    parsed = parse_rational("(s+1)*(s+2)/((s+1)*(s+3))")
    assert parsed.num == (Fraction(1), Fraction(2)) and parsed.den == (Fraction(1), Fraction(3))
    assert parsed.cancelled == (Fraction(1), Fraction(1))


def test_an_expression_of_a_million_characters_is_refused_with_a_short_excerpt(run_cli):
    """Errors echoed a 10 MB input back in one line."""
    line = _one_line_error(run_cli("show", "s+" * 500_000 + "1"), "1,000,001 characters", "10,000")
    assert len(line) < 300


def test_a_value_of_a_million_characters_is_echoed_as_a_short_excerpt(run_cli):
    line = _one_line_error(run_cli("digital", "1/(s+1)", "--fs", "1" * 1_000_000 + "Hz"), "--fs")
    assert len(line) < 300


# ----------------------------------------------------------------------------- netlists
def _card(tmp, name: str, lines: list[str]) -> str:
    path = tmp / name
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return str(path)


def test_reversed_1000_long_param_chain_is_read(run_cli, here):
    """Was RecursionError. p0 = p1 = ... = p1000 = 1k: an RC low-pass of 1k and 1 uF, pole at
    1000 rad/s (hand calculation: 1/(RC))."""
    n = 1000
    path = _card(
        here,
        "chain.cir",
        ["chain"]
        + [f".param p{i}={{p{i + 1}*1}}" for i in range(n)]
        + [f".param p{n}=1k", "VIN in 0 AC 1", "R1 in out {p0}", "C1 out 0 1u", ".end"],
    )
    result = run_cli("card", path, "--json", "--no-sensitivity")
    assert result.code == 0, result.err
    import json

    data = json.loads(result.out)
    den = data["controller"]["den"] if "controller" in data else None
    assert den is None or den == pytest.approx([1, 1000])
    assert "1000" in result.out


def test_param_nested_200_deep_and_chained_powers_are_refused(run_cli, here):
    nested = _card(
        here,
        "nest.cir",
        ["nest", ".param a={" + "(" * 200 + "1" + ")" * 200 + "}", "VIN in 0 AC 1", "R1 in out {a}", "C1 out 0 1u"],
    )
    _one_line_error(run_cli("card", nested), "nest.cir:2", "nested more than 100 deep")
    powers = _card(
        here,
        "pow.cir",
        ["pow", ".param a={" + "^".join(["1"] * 2000) + "}", "VIN in 0 AC 1", "R1 in out {a}", "C1 out 0 1u"],
    )
    _one_line_error(run_cli("card", powers), "pow.cir:2", "nested more than 100 deep")


def test_param_cycle_is_still_refused(run_cli, here):
    path = _card(here, "cyc.cir", ["cyc", ".param a={b} b={c} c={a}", "VIN in 0 AC 1", "R1 in out {a}", "C1 out 0 1u"])
    _one_line_error(run_cli("card", path), "defined in terms of itself")


@pytest.mark.parametrize("title", ["[/old]", "[rev 2]", "Card [bold]7[/bold] [link=x]y[/link]"])
def test_netlist_title_is_printed_literally(run_cli, here, title):
    """`[/old]` was a MarkupError (exit 3) and `[rev 2]` vanished: rich read file text as markup."""
    path = _card(here, "t.cir", [title, "VIN in 0 AC 1", "R1 in out 1k", "C1 out 0 1u"])
    result = run_cli("card", path, "--no-sensitivity")
    assert result.code == 0, result.err
    assert title in result.out


def test_netlist_title_is_printed_literally_by_the_real_console(here):
    """The same through the console the command line makes (not the test fixture's)."""
    import subprocess
    import sys

    path = _card(here, "t.cir", ["[/old] [rev 2]", "VIN in 0 AC 1", "R1 in out 1k", "C1 out 0 1u"])
    env = dict(os.environ, PYTHONPATH=os.path.dirname(os.path.dirname(os.path.abspath(__file__))), COLUMNS="120")
    proc = subprocess.run(
        [sys.executable, "-m", "convert", "card", path, "--no-sensitivity"],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert proc.returncode == 0, proc.stderr
    assert "[/old] [rev 2]" in proc.stdout


# ----------------------------------------------------------------------------- input files
def test_card_dev_zero_is_refused_without_reading_it(run_cli):
    """`card /dev/zero` read 21 GB."""
    _one_line_error(run_cli("card", "/dev/zero"), "/dev/zero", "regular file", "character device")


def test_report_dev_null_is_refused(run_cli):
    _one_line_error(run_cli("report", "/dev/null"), "/dev/null", "regular file")


def test_fifo_input_is_refused_without_blocking(run_cli, here):
    os.mkfifo(here / "pipe.cir")
    _one_line_error(run_cli("card", str(here / "pipe.cir")), "named pipe")


def test_input_file_over_the_limit_names_the_limit_and_the_variable(run_cli, here, monkeypatch):
    big = here / "big.cir"
    big.write_text("big\n" + "* comment\n" * 500_000)  # 5 MB of comments
    _one_line_error(run_cli("card", str(big)), "4,194,304 bytes", "LOOPSHIFT_MAX_INPUT_MB")
    monkeypatch.setenv("LOOPSHIFT_MAX_INPUT_MB", "8")
    result = run_cli("card", str(big))  # now read: it has no elements, which is the next error
    _one_line_error(result, "no elements")


def test_toml_value_nested_100000_deep_is_refused(run_cli, here):
    """Was RecursionError inside tomllib (exit 3)."""
    (here / "deep.toml").write_text("[case]\ntitle = " + "[" * 100_000 + "]" * 100_000 + "\n")
    _one_line_error(run_cli("report", "deep.toml"), "deep.toml", "nested too deeply")


# ----------------------------------------------------------------------------- --debug
@pytest.mark.parametrize("where", ["before", "after"])
def test_debug_flag_shows_the_traceback_of_an_internal_error(run_cli, monkeypatch, where):
    import convert.cli.show as show

    def boom(args, console):
        raise RuntimeError("simulated bug")

    monkeypatch.setattr(show, "run", boom)
    plain = run_cli("show", "1/s")
    assert plain.code == 3 and "Traceback" not in plain.err and "--debug" in plain.err
    argv = ["--debug", "show", "1/s"] if where == "before" else ["show", "1/s", "--debug"]
    debug = run_cli(*argv)
    assert debug.code == 3 and "Traceback" in debug.err and "simulated bug" in debug.err


def test_stat_helper_names_file_kinds(here):
    from convert.limits import file_kind

    (here / "f").write_text("x")
    os.mkfifo(here / "p")
    assert file_kind(here / "f") is None and file_kind(here / "absent") is None
    assert file_kind(here / "p") == "a named pipe (FIFO)" and file_kind("/dev/null") == "a character device"
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


# ----------------------------------------------------------------------------- case-list lengths
_BASE_CASE = os.path.join(
    os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "cases", "slow_firmware_fails.toml"
)


def _case_with(fs: str, methods: str) -> str:
    import re

    with open(_BASE_CASE, encoding="utf-8") as fh:
        text = fh.read()
    text = re.sub(r"(?m)^fs = .*$", f"fs = {fs}", text, count=1)
    return re.sub(r"(?m)^methods = .*$", f"methods = {methods}", text, count=1)


def _toml_list(items) -> str:
    return "[" + ", ".join(f'"{i}"' for i in items) + "]"


@pytest.mark.parametrize(
    "fs, methods, fragments",
    [
        # an fs list of 1,000 entries ran for minutes
        (
            _toml_list(f"{100 + i} Hz" for i in range(1000)),
            '["tustin"]',
            ("target.digital.fs", "1,000 sample rates", "32"),
        ),
        # a methods list of 1,000 entries
        (
            '"1 Hz"',
            _toml_list(["tustin", "zoh"] * 500),
            ("target.digital.methods", "1,000 methods", "each at most once"),
        ),
        # duplicate methods doubled the work silently
        ('"1 Hz"', '["tustin", "zoh", "tustin"]', ("target.digital.methods", "'tustin' is given twice")),
        # the same rate written two ways
        ('["1 Hz", "1000 mHz"]', '["tustin"]', ("target.digital.fs", "'1000 mHz' is given twice", "'1 Hz'")),
        # rates x methods
        (
            _toml_list(f"{i} Hz" for i in range(1, 11)),
            _toml_list(["tustin", "zoh", "foh", "matched", "impulse", "backward-euler", "forward-euler"]),
            ("10 sample rates x 7 methods = 70 realizations", "64", "loopshift batch"),
        ),
    ],
)
def test_case_lists_are_bounded_and_repeats_refused(run_cli, here, fs, methods, fragments):
    (here / "c.toml").write_text(_case_with(fs, methods), encoding="utf-8")
    _one_line_error(run_cli("report", "c.toml", "--out", "r"), "c.toml:", *fragments)
    assert not (here / "r").exists()


def test_case_within_the_list_bounds_is_read():
    from convert.case import parse_case

    case = parse_case(
        _case_with(_toml_list(f"{i} Hz" for i in range(1, 9)), '["tustin", "zoh", "foh", "matched"]'), "c.toml"
    )
    assert len(case.digital.fs_hz) * len(case.digital.methods) == 32


def test_digital_source_with_1000_coefficients_is_refused(run_cli, here):
    text = (
        "[source.digital]\nb = [" + ", ".join(["0.001"] * 1000) + ']\na = [1, -0.5]\nfs = "1 kHz"\n[target.circuit]\n'
    )
    (here / "d.toml").write_text(text, encoding="utf-8")
    _one_line_error(run_cli("report", "d.toml", "--out", "r"), "source.digital.b", "1,000 coefficients", "101")


def test_part_value_1e_320_is_refused(run_cli, here):
    """Found by the fuzz campaign: a subnormal part value (1e-320) reached the nodal analysis,
    where R*C underflowed to 0 (ZeroDivisionError, exit 3)."""
    path = _card(here, "tiny.cir", ["tiny", "VIN in 0 AC 1", "R1 in out 1e-320", "C1 out 0 1u"])
    _one_line_error(run_cli("card", path), "tiny.cir:3", "R1", "too small", "2.2e-308")
    _one_line_error(run_cli("digital", "1/(s+1)", "--fs", "1e-320"), "--fs", "too small")


def test_case_naming_dev_zero_as_its_netlist_is_refused_as_a_device(run_cli, here):
    (here / "zc.toml").write_text('[source]\nnetlist = "/dev/zero"\n[target.digital]\nfs = "1 kHz"\n')
    _one_line_error(run_cli("report", "zc.toml", "--out", "r"), "zc.toml:2", "character device", "regular file")


@pytest.mark.parametrize("digits, fragment", [(5000, "integer of thousands of digits"), (400, "integer of 400 digits")])
def test_toml_integer_of_many_digits_is_refused(run_cli, here, digits, fragment):
    """Found while probing case files: `kc = 111…1` (5,000 digits) was a ValueError inside tomllib
    and 400 digits an OverflowError converting to float (both exit 3)."""
    (here / "big.toml").write_text(
        f'[source.pid]\nkc = {"1" * digits}\nti = "30 s"\n[target.digital]\nfs = "1 kHz"\n'
        '[criteria]\nband = ["1 mHz", "1 Hz"]\nmax_gain_error_db = 1\n'
    )
    _one_line_error(run_cli("report", "big.toml", "--out", "r"), "big.toml", fragment)


@pytest.mark.parametrize("option", ["--log", "--sweep"])
def test_evidence_csv_from_a_device_or_fifo_is_refused(run_cli, here, option):
    """An evidence CSV of /dev/zero has no line end: reading its header would never return."""
    _one_line_error(run_cli("compare", "1/s", option, "/dev/zero"), "/dev/zero", "regular file")
    os.mkfifo(here / "pipe.csv")
    _one_line_error(run_cli("compare", "1/s", option, "pipe.csv"), "named pipe")
