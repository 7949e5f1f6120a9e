"""Regressions from issue 10 (items 2, 3, 8, 9): each test feeds the exact input that went wrong
before and checks the behaviour the issue asks for."""

from __future__ import annotations

import pytest

from convert.case import parse_case
from convert.errors import InputError

CASE = """\
[source]
expression = "2*(1 + 1/(30*s))"

[target.digital]
fs = "10 Hz"

[criteria]
band = ["1 mHz", "1 Hz"]
max_gain_error_db = 1
"""


def _case_error(text: str) -> str:
    with pytest.raises(InputError) as info:
        parse_case(text, "job.toml")
    return str(info.value)


# ----------------------------------------------------------------------------- item 2: units of criteria
@pytest.mark.parametrize("key", ["max_step_deviation", "max_disturbance_deviation"])
def test_bare_number_above_one_in_a_percentage_criterion_is_refused(key):
    """Before: ``max_step_deviation = 5`` was read as 5 = 500 % of the step, a limit 100x looser
    than the 5 % meant, with no word. Now refused, naming the field and both readings."""
    msg = _case_error(CASE + f"{key} = 5\n")
    assert msg.startswith(f"job.toml:10: criteria.{key}:")
    assert "500 %" in msg and "5 %" in msg and "ambiguous" in msg


@pytest.mark.parametrize("key", ["max_step_deviation", "max_disturbance_deviation"])
def test_bare_one_in_a_percentage_criterion_is_refused(key):
    """A limit of 100 % of the step checks nothing, so a bare 1 is most likely "1 %": refused too."""
    msg = _case_error(CASE + f"{key} = 1\n")
    assert "100 %" in msg and "1 %" in msg


@pytest.mark.parametrize("written, expected", [('"5 %"', 0.05), ("0.05", 0.05), ('"0.5%"', 0.005)])
def test_percentage_criterion_takes_percent_or_a_fraction(written, expected):
    case = parse_case(CASE + f"max_step_deviation = {written}\n", "job.toml")
    assert case.criteria.max_step_deviation == pytest.approx(expected, rel=1e-15)


def test_bare_tolerance_in_a_case_names_both_readings():
    text = CASE.replace("[criteria]", "[target.circuit]\ntolerances = { R = 5 }\n\n[criteria]")
    msg = _case_error(text)
    assert "target.circuit.tolerances.R" in msg and "500 %" in msg and "5 %" in msg


def test_bare_tolerance_on_the_command_line_names_both_readings(run_cli):
    res = run_cli("circuit", "2(1+1/(3s))", "--tolerance", "R=5")
    assert res.code == 2 and "--tolerance: R:" in res.err and "500 %" in res.err and "5 %" in res.err


@pytest.mark.parametrize(
    "words, readings",
    [
        (("kc=2", "ti=10s", "b=50"), ("5000 %", "50 %")),
        (("kc=2", "ti=10s", "c=2"), ("200 %", "2 %")),
        (("ti=10s", "pb=0.5"), ("0.5 %", "50 %")),
    ],
)
def test_pid_percentage_keys_refuse_the_hidden_factor_of_100(run_cli, words, readings):
    """``b=50`` was a setpoint weight of 50 (meant 50 %); ``pb=0.5`` a band of 0.5 % (Kc = 200) where
    a fraction 0.5 (Kc = 2) may be meant: both refused with both readings."""
    res = run_cli("show", "--pid", *words)
    assert res.code == 2 and all(r in res.err for r in readings), res.err


@pytest.mark.parametrize(
    "words",
    [
        ("kc=2", "ti=10s", "b=0.5"),
        ("kc=2", "ti=10s", "b=50%"),
        ("kc=2", "b=1"),
        ("ti=10s", "pb=50"),
        ("ti=10s", "pb=0.5%"),
    ],
)
def test_pid_percentage_keys_written_plainly_stay_valid(run_cli, words):
    assert run_cli("show", "--pid", *words).code == 0


# ----------------------------------------------------------------------------- item 3: expressions
@pytest.mark.parametrize(
    "text, column, readings",
    [
        ("1/30s", 5, ("(1/30)*s", "1/(30*s)")),
        ("2(1+1/30s)", 9, ("(1/30)*s", "1/(30*s)")),
        ("0.2/(40s+1)(8s+1)", 12, ("(0.2/(40s+1))*(8s+1)", "0.2/((40s+1)*(8s+1))")),
        ("2/s(s+1)", 4, ("(2/s)*(s+1)", "2/(s*(s+1))")),
    ],
)
def test_product_after_a_division_is_refused_with_both_readings(text, column, readings):
    """Before: ``2(1+1/30s)`` was read left to right as 2(1 + s/30), a PD, where a PI was meant.
    Now refused naming the column and writing each reading the way it has to be typed; each
    written reading parses, and the two differ (so the refusal is not about a harmless case)."""
    from convert.expr import parse_rational

    with pytest.raises(InputError) as info:
        parse_rational(text)
    msg = str(info.value)
    assert msg.startswith(f"expression column {column}:") and "ambiguous" in msg
    assert all(r in msg for r in readings), msg
    left, right = (parse_rational(r) for r in readings)
    assert (left.num, left.den) != (right.num, right.den)


@pytest.mark.parametrize(
    "text",
    [
        "2*(1 + 1/(30*s))",
        "1/(30s)",
        "(1/30)s",
        "0.2/((40s+1)(8s+1))",
        "0.02s/(0.5s+1)",
        "1/(s+1)*2s",
        "10s/(0.5s+1)",
        "2 + 0.1/s + 10s/(0.5s+1)",
    ],
)
def test_unambiguous_products_still_parse(text):
    from convert.expr import parse_rational

    parse_rational(text)


def test_bundled_examples_use_no_refused_form():
    """Every quoted expression in the docs, README, cases and CLI help parses without the
    ambiguity refusal (the docs must not teach the refused form)."""
    import re
    from pathlib import Path

    from convert.expr import parse_rational

    root = Path(__file__).resolve().parent.parent
    files = [*root.glob("docs/*.md"), root / "README.md", *root.glob("cases/**/*.toml"), *root.glob("convert/**/*.py")]
    quoted = re.compile(r'"([^"\n]*)"|`([^`\n]*)`')
    bad, seen = [], 0
    for path in files:
        for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
            if "refused" in line or "ambiguous" in line or "(1/30)" in line:
                continue  # the docs' own examples of the refusal
            for m in quoted.finditer(line):
                text = m.group(1) if m.group(1) is not None else m.group(2)
                if "/" not in text or not re.search(r"[sz]", text):
                    continue
                try:
                    parse_rational(text)
                    seen += 1
                except InputError as exc:
                    if "ambiguous" in str(exc):
                        bad.append(f"{path.name}:{n}: {text}")
    assert seen > 10 and not bad, bad


def test_report_prints_each_parsed_transfer_function_beside_its_canonical_form(run_cli, tmp_path):
    """The report (HTML, Markdown, terminal) shows the plant and the source as given and as read."""
    case = tmp_path / "job.toml"
    case.write_text(
        CASE.replace('expression = "2*(1 + 1/(30*s))"', 'expression = "2*(1 + 1/(30s))"')
        + 'max_step_deviation = "5 %"\n\n[plant]\nmodel = "0.2/((40s+1)(8s+1))"\ndead_time = "2 s"\n',
        encoding="utf-8",
    )
    res = run_cli("report", str(case), "--out", str(tmp_path / "rep"))
    assert res.code in (0, 1), res.err
    canonical_plant = "(0.000625) / (s^2 + 0.15*s + 0.003125)"
    canonical_source = "(2*s + 0.0666667) / (s)"
    for text in (
        res.out,
        _markdown_as_shown((tmp_path / "rep" / "report.md").read_text(encoding="utf-8")),
        (tmp_path / "rep" / "report.html").read_text(encoding="utf-8"),
    ):
        flat = " ".join(text.split())
        assert "Transfer functions as read" in flat
        assert "0.2/((40s+1)(8s+1))" in flat and canonical_plant in flat
        assert "2*(1 + 1/(30s))" in flat and canonical_source in flat


def _markdown_as_shown(md: str) -> str:
    """The text a Markdown viewer shows (report.md escapes '*' and other syntax in user text):
    rendered by markdown-it-py (a CommonMark renderer, reference library), tags removed."""
    import html
    import re

    from markdown_it import MarkdownIt

    return html.unescape(re.sub(r"<[^>]+>", " ", MarkdownIt("commonmark").enable("table").render(md)))


# ----------------------------------------------------------------------------- item 9: small things
NETLISTS = __import__("pathlib").Path(__file__).resolve().parent / "netlists"


def test_digital_json_writes_every_root_as_re_im(run_cli):
    """Before: a real root was a bare number (-1.0) beside {re, im} objects in the same list."""
    import json

    res = run_cli("digital", "(s+2)/(s^2+2s+100)", "--fs", "1kHz", "--method", "tustin", "--method", "zoh", "--json")
    data = json.loads(res.out)
    roots = [r for m in data for key in ("zeros_z", "poles_z") for r in m[key]]
    assert roots and all(isinstance(r, dict) and set(r) == {"re", "im"} for r in roots)
    res = run_cli("analog", "(0.2 - 0.18 z^-1)/(1 - z^-1)", "--fs", "100Hz", "--method", "tustin", "--json")
    data = json.loads(res.out)[0]
    assert all(isinstance(r, dict) and set(r) == {"re", "im"} for r in data["zeros_s"] + data["poles_s"])


def test_card_prints_zero_not_minus_zero(run_cli):
    """Before: ``loopshift card pi_card.cir`` printed ``den (descending s)   [1, -0]``."""
    import re

    res = run_cli("card", str(NETLISTS / "pi_card.cir"))
    assert res.code == 0
    assert "[1, 0]" in res.out and not re.search(r"(?<![\w.])-0(?![.\d])", res.out)


def test_card_without_setpoint_names_the_two_inputs(run_cli):
    """Before: "input source 'VIN' not found; voltage sources in the file: VSP, VPV" and nothing
    about the card having two inputs."""
    res = run_cli("card", str(NETLISTS / "sp_pv_card.cir"))
    assert res.code == 2
    assert "VSP (node sp)" in res.err and "VPV (node pv)" in res.err
    assert "--setpoint VSP --measurement VPV" in res.err
    res = run_cli("card", str(NETLISTS / "sp_pv_card.cir"), "--input", "VSP")
    assert res.code == 0 and "VPV held at zero" in " ".join(res.out.split())


def test_dangling_node_is_named_not_singular(run_cli, tmp_path):
    """A mistyped node (``C1 a ou 1u`` for ``out``) gave "the circuit equations are singular"."""
    text = (NETLISTS / "pi_card.cir").read_text(encoding="utf-8").replace("C1 a out 1u", "C1 a ou 1u")
    (tmp_path / "typo.cir").write_text(text, encoding="utf-8")
    res = run_cli("card", str(tmp_path / "typo.cir"))
    assert res.code == 2 and "singular" not in res.err
    assert "typo.cir:6: C1: node 'ou' is dangling" in res.err and "did you mean 'out'" in res.err


def test_capital_m_in_a_netlist_is_a_warning_before_the_results(run_cli, tmp_path):
    """Before: ``R2 n1 a 0.47M`` (0.47 milli-ohm in SPICE) was a note under the results."""
    text = (NETLISTS / "pi_card.cir").read_text(encoding="utf-8").replace("R2 n1 a 470k", "R2 n1 a 0.47M")
    (tmp_path / "milli.cir").write_text(text, encoding="utf-8")
    res = run_cli("card", str(tmp_path / "milli.cir"))
    first = res.out.lstrip().splitlines()[0]
    assert first.startswith("warning: milli.cir:5: R2: '0.47M' is read as milli")
    assert "read as milli" not in res.out.split("Notes", 1)[-1]


@pytest.mark.parametrize(
    "argv",
    [
        ["card", str(NETLISTS / "pi_card.cir")],
        ["digital", "(s+2)/(s+20)", "--fs", "1kHz", "--method", "all", "--json"],
        ["show", "2*(1+1/(30*s))", "--json"],
    ],
)
def test_closed_pipe_exits_0_quietly(argv):
    """``loopshift card pi_card.cir | head -1`` exited 1 (rich's broken-pipe exit) with nothing said.
    The reader's end is closed before the command writes, so every write meets a closed pipe."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    read, write = os.pipe()
    os.close(read)
    try:
        env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parent.parent)}
        done = subprocess.run(
            [sys.executable, "-m", "convert", *argv], stdout=write, stderr=subprocess.PIPE, env=env, timeout=120
        )
    finally:
        os.close(write)
    assert done.returncode == 0 and done.stderr == b""


def test_fit_columns_never_breaks_a_word():
    """At 80 columns the verdict table broke "disturbance-response" into "disturbance-r" / "esponse"."""
    from convert.cli.common import fit_columns

    header = ["form", "criterion", "measured", "limit", "result", "against the limit"]
    rows = [
        [
            "circuit pid-single-amp",
            "disturbance-response deviation",
            "0.686 % of peak",
            "10.0 % of peak",
            "pass",
            "7% of the limit used",
        ],
        ["circuit pid-single-amp", "max gain error", "0.483 dB", "1.00 dB", "pass", "48% of the limit used"],
    ]
    for width in (60, 80, 120):
        widths, head, cells = fit_columns(header, rows, width)
        assert sum(widths) + 2 * (len(widths) - 1) <= width
        for given, wrapped in zip([header, *rows], [head, *cells]):
            for text, out in zip(given, wrapped):
                assert " ".join(out.split()).replace("- ", "-") == text  # only whole words (or after a hyphen) moved


def test_report_terminal_tables_keep_words_whole_and_show_the_new_forms(tmp_path):
    """The terminal summary of ``report`` at 80 columns: every word of every table cell is printed
    whole (counted), and the new form's coefficients are printed."""
    import io
    import re

    from rich.console import Console

    from convert.case import load_case
    from convert.cli.main import main
    from convert.compare.evaluate import evaluate_case
    from convert.report.tables import all_tables, parsed_table

    case = tmp_path / "job.toml"
    case.write_text(
        CASE + 'max_step_deviation = "5 %"\nmax_disturbance_deviation = "5 %"\n\n[plant]\n'
        'model = "0.2/((40s+1)(8s+1))"\ndead_time = "2 s"\n',
        encoding="utf-8",
    )
    buffer = io.StringIO()
    console = Console(file=buffer, width=80, color_system=None, force_terminal=False, highlight=False)
    assert main(["report", str(case), "--out", str(tmp_path / "rep")], console=console) in (0, 1)
    out = buffer.getvalue()
    assert max(len(line) for line in out.splitlines()) <= 80
    results = evaluate_case(load_case(case))
    tables = [parsed_table(results), *all_tables(results)]
    pieces = {
        p
        for title, header, rows in tables
        for text in [title, *header, *(c for r in rows for c in r)]
        for p in re.findall(r"[^\s-]+-?", str(text))
    }
    block = out[out.index("Transfer functions as read") : out.index("New forms")]
    broken = {p for p in re.findall(r"[^\s-]+-?", block) if p not in pieces and p.strip("─") != ""}
    assert not broken, broken
    assert "New forms" in out and "b = [" in out and "a = [1, " in out


def test_controller_analog_with_complex_coefficients_raises_input_error():
    """Before: ``Controller.analog([1+2j, 1], [1, 1])`` raised a raw TypeError from numpy."""
    from convert.controller import Controller

    with pytest.raises(InputError, match="real numbers"):
        Controller.analog([1 + 2j, 1], [1, 1])
    with pytest.raises(InputError):
        Controller.analog([[1, 2], [3]], [1, 1])
    assert Controller.analog(__import__("numpy").array([1 + 0j, 2]), [1, 1]).num == (1.0, 2.0)


# ----------------------------------------------------------------------------- item 8: printed coefficients
def _printed(values, digits: int) -> list[float]:
    return [float(f"{v:.{digits}g}") for v in values]


def test_printed_pid_exact_input_reads_back_an_integrator(run_cli):
    """The exact input that failed: a Tustin PID printed to 6 digits read back as
    (s^2 + 20s − 2.02): a right-half-plane pole at 16 mHz instead of the integrator."""
    import json

    res = run_cli(
        "analog",
        "(21.8022 - 43.5644 z^-1 + 21.7622 z^-2)/(1 - 1.9802 z^-1 + 0.980198 z^-2)",
        "--fs",
        "1kHz",
        "--method",
        "tustin",
        "--json",
    )
    data = json.loads(res.out)[0]
    assert data["den"][-1] == 0.0 and all(p["re"] <= 0 for p in data["poles_s"])
    assert any("read as an integrator" in n and "right-half-plane" in n for n in data["notes"])
    # at six digits b sums to exactly 0: the integral gain is lost in the printout, and that is said
    assert any("integral gain" in n and "more digits" in n for n in data["notes"])


def test_twelve_digit_printout_keeps_the_integral_gain(run_cli):
    """The same PID (kc = 2, ti = 5 s, td = 0.5 s, N = 10; tustin at 1 kHz) printed to 12 digits,
    as `loopshift digital` prints its difference equation: read literally, a pole at 16 nHz;
    read by the rule, an integrator with ki = kc/ti = 0.4 /s (the filter pole at 20 rad/s keeps
    the numerator's constant term at 20·0.4 = 8)."""
    import json

    res = run_cli(
        "analog",
        "(21.802180198 - 43.5643524752 z^-1 + 21.762180198 z^-2)/(1 - 1.9801980198 z^-1 + 0.980198019802 z^-2)",
        "--fs",
        "1kHz",
        "--method",
        "tustin",
        "--json",
    )
    data = json.loads(res.out)[0]
    assert data["den"][-1] == 0.0 and data["num"][-1] / data["den"][-2] == pytest.approx(0.4, rel=1e-5)
    assert len(data["notes"]) == 1 and "read as an integrator" in data["notes"][0]


@pytest.mark.parametrize("digits", [5, 6, 7, 8])
@pytest.mark.parametrize(
    "kc, ti, td, n, fs",
    [
        (2.0, 5.0, 0.5, 10.0, 1000.0),
        (0.8, 120.0, 10.0, 8.0, 10.0),
        (15.0, 0.02, 0.002, 5.0, 20000.0),
        (1.0, 30.0, 0.0, None, 100.0),
    ],
)
def test_printed_coefficients_keep_the_integrator(kc, ti, td, n, fs, digits):
    """PIDs of our own discretized by scipy.signal.cont2discrete (bilinear: an outside reference),
    printed to 5–8 significant digits as a tool prints them. The inverse always finds the
    integrator (no right-half-plane pole) and, where the printed digits carry the response to
    better than 10 %, its error against the PID over the whole band down to 1e-3/Ti stays within
    1.5x what the digits themselves lose mid-band (printed vs exact digital response from 0.1/Ti
    to fs/20; measured ratio at most 1.19). Where a note says a
    pole was moved, the literal reading (no rounding allowed) has no integrator."""
    import numpy as np
    from scipy.signal import cont2discrete

    from convert.controller import Controller
    from convert.digital import read_analog

    tf = td / n if td else 0.0
    if tf:  # ideal PID with filter: kc·(1 + 1/(ti s) + td s/(tf s + 1)), over ti·s·(tf s + 1)
        num = kc * np.polyadd(np.polymul([ti, 1.0], [tf, 1.0]), [ti * td, 0.0, 0.0])
        den = np.polymul([ti, 0.0], [tf, 1.0])
    else:
        num, den = kc * np.array([ti, 1.0]), np.array([ti, 0.0])
    bd, ad, _ = cont2discrete((num, den), 1.0 / fs, method="bilinear")
    exact_digital = Controller.from_b_a(np.ravel(bd), np.ravel(ad), 1.0 / fs)
    digital = Controller.from_b_a(_printed(np.ravel(bd), digits), _printed(np.ravel(ad), digits), 1.0 / fs)
    reading = read_analog(digital, "tustin")
    analog = reading.controller
    assert analog.integrator_count() == 1
    assert np.all(analog.poles().real <= 1e-12)
    pid = Controller.analog(num, den)
    f = np.geomspace(1e-3 / ti, fs / 20, 200)
    err = np.max(np.abs(analog.frequency_response(f) / pid.frequency_response(f) - 1))
    mid = np.geomspace(0.1 / ti, fs / 20, 200)
    lost = np.max(np.abs(digital.frequency_response(mid) / exact_digital.frequency_response(mid) - 1))
    if lost < 0.1:  # where the digits carry the response at all (six digits at fs/corner = 5000 do not)
        assert err <= 1.5 * lost + 1e-9, (err, lost)
    if reading.notes:
        literal = read_analog(digital, "tustin", den_radius=[0.0] * len(digital.den)).controller
        assert literal.integrator_count() == 0


def test_a_pole_outside_the_printed_rounding_is_kept():
    """A leaky integrator written with the digits that show the leak (a = [1, -0.999]: the
    pole 1e-3 from z = 1, rounding 5e-4) and a Python float 1e-9 from z = 1 (repr
    '0.999999999', rounding 5e-10) keep their poles: only what the digits cannot tell apart moves."""
    from convert.controller import Controller
    from convert.digital import read_analog

    for a in ([1.0, -0.999], [1.0, -(1.0 - 1e-9)]):
        reading = read_analog(Controller.from_b_a([0.5, -0.4], a, 0.01), "tustin")
        assert reading.controller.integrator_count() == 0 and reading.notes == ()


def test_printed_rule_reads_digits_as_written():
    """'1.000000' carries six decimals, '1' and a float equal to a whole number are exact,
    and a float is taken at its shortest round-trip decimal form."""
    from convert.digital.printed import printed_radius

    assert printed_radius("1.000000") == pytest.approx(5e-7)
    assert printed_radius("-1.9802") == pytest.approx(5e-5)
    assert printed_radius("2.5e-3") == pytest.approx(5e-5)
    assert printed_radius("1") == 0 and printed_radius(1.0) == 0 and printed_radius(-2.0) == 0
    assert printed_radius(0.818182) == pytest.approx(5e-7)
    assert printed_radius(1 / 3) == pytest.approx(0.5e-16)


def test_printout_precision_is_shared_and_read_from_the_text():
    """A value written shorter than its neighbours (``1.5`` beside ``0.980198``) is known to the
    printout's digits, not to its own; an expression keeps its digits as typed
    ("1.000000 - 1.980200 z^-1" is ±5e-7 on each; the leading 1.000000 divides the others, so its
    rounding adds 5e-7·|a_k| to each made-monic coefficient)."""
    from convert.digital.printed import expression_den_radius, printed_radii

    assert printed_radii(["1.5", "0.980198"]) == pytest.approx([5e-6, 5e-7])
    assert printed_radii([1.0, -1.9802, 0.980198]) == pytest.approx([0.0, 5e-6, 5e-7])
    radius = expression_den_radius("1/(1.000000 - 1.980200 z^-1 + 0.980198 z^-2)", 1000.0)
    assert radius == pytest.approx([0.0, 5e-7 * (1 + 1.9802), 5e-7 * (1 + 0.980198)], rel=1e-6)


def test_case_file_firmware_with_printed_coefficients_has_an_integrating_source(tmp_path):
    """A case's [source.digital] with six-digit coefficients: the source is read with its
    integrator and the report's notes say so; the digits are taken as written ("0.9801980")."""
    from convert.case import load_case, source_controller

    text = (
        '[source.digital]\nb = [21.8022, -43.5644, 21.7622]\na = ["1", "-1.9802", "0.980198"]\nfs = "1 kHz"\n\n'
        '[target.digital]\nfs = "2 kHz"\n\n[criteria]\nband = ["10 mHz", "10 Hz"]\nmax_gain_error_db = 1\n'
    )
    (tmp_path / "fw.toml").write_text(text, encoding="utf-8")
    info = source_controller(load_case(tmp_path / "fw.toml"))
    assert info.controller.integrator_count() == 1
    assert any("read as an integrator" in n for n in info.notes)


def test_backward_difference_pid_reads_back_as_the_unfiltered_pid(run_cli):
    """u = kp·e + ki·T·Σe + kd·(e[n] − e[n−1])/T (the backward-difference PID, common practice):
    C(z) = kp + ki·T/(1 − z^-1) + (kd/T)(1 − z^-1), a pole at z = 0. Before: refused ("the pole at
    z = 0 maps to s = infinity"). Now: exactly kp + ki/s + kd·s, the missing filter stated."""
    import numpy as np

    from convert.controller import Controller
    from convert.digital import read_analog

    kp, ki, kd, t = 2.0, 0.5, 0.3, 0.01
    # over a common denominator (1 − z^-1), ascending powers of z^-1:
    # b = kp(1 − z^-1) + ki·T + (kd/T)(1 − z^-1)^2
    b = [kp + ki * t + kd / t, -kp - 2 * kd / t, kd / t]
    reading = read_analog(Controller.from_b_a(b, [1.0, -1.0], t), "backward-euler")
    np.testing.assert_allclose(reading.controller.num, [kd, kp, ki], rtol=1e-12)
    np.testing.assert_allclose(reading.controller.den, [1.0, 0.0], atol=1e-15)
    assert any("no filter" in n and "kd = 0.3 s" in n for n in reading.notes)
    res = run_cli("analog", "(32.005 - 62 z^-1 + 30 z^-2)/(1 - z^-1)", "--fs", "100Hz", "--method", "backward-euler")
    flat = " ".join(res.out.split())
    assert res.code == 0 and "(0.3*s^2 + 2*s + 0.5) / (s)" in flat and "lacks a derivative filter" in flat


def test_case_with_a_two_input_netlist_names_the_inputs_in_case_keys(tmp_path):
    """The same hint from a case file, in the case's own keys (not the command-line options)."""
    import shutil

    from convert.case import load_case, source_controller

    shutil.copy(NETLISTS / "sp_pv_card.cir", tmp_path / "card.cir")
    (tmp_path / "two.toml").write_text(
        CASE.replace('expression = "2*(1 + 1/(30*s))"', 'netlist = "card.cir"'), encoding="utf-8"
    )
    with pytest.raises(InputError) as info:
        source_controller(load_case(tmp_path / "two.toml"))
    msg = str(info.value)
    assert msg.startswith("two.toml:2: source.netlist.input:") and 'setpoint = "VSP", measurement = "VPV"' in msg


@pytest.mark.parametrize(
    "argv",
    [
        ["show", "2*(1 + 1/(30*s) + 5*s/(0.5*s+1))"],
        ["show", "--pid", "pb=50%", "reset=2/min", "td=0.1min", "form=series"],
        ["card", str(NETLISTS / "sp_pv_card.cir"), "--setpoint", "VSP", "--measurement", "VPV"],
        ["digital", "2*(1 + 1/(0.1*s) + 0.01*s)", "--fs", "1kHz", "--derivative-filter", "10", "--method", "all"],
        ["circuit", "2*(1+1/(3s) + 0.5s/(0.05s+1))", "--draws", "200"],
        ["analog", "(0.2 - 0.18 z^-1)/(1 - z^-1)", "--fs", "100Hz", "--method", "tustin"],
    ],
    ids=lambda a: a[0],
)
def test_no_command_breaks_a_word_at_80_columns(argv):
    """Every word a command prints in an 80-column terminal is a whole word of the same output
    printed 400 columns wide (a break is allowed only after a hyphen)."""
    import io
    import re

    from rich.console import Console

    from convert.cli.main import main

    def run(width: int) -> str:
        buffer = io.StringIO()
        console = Console(file=buffer, width=width, color_system=None, force_terminal=False, highlight=False)
        assert main(list(argv), console=console) == 0
        return buffer.getvalue()

    piece = re.compile(r"[^\s-]+-?")
    wide = set(piece.findall(run(400)))
    broken = {t for t in piece.findall(run(80)) if t not in wide and re.search(r"\w", t)}
    assert not broken, broken


def test_closed_pipe_keeps_the_verdict_exit_code_of_report(tmp_path):
    """``loopshift report failing.toml | head -1`` under pipefail must not turn a FAIL into 0: the
    output stops quietly and the exit code is still the verdict's (1)."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    case = tmp_path / "tight.toml"
    case.write_text(CASE.replace("max_gain_error_db = 1", "max_gain_error_db = 0.000001"), encoding="utf-8")
    read, write = os.pipe()
    os.close(read)
    try:
        env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parent.parent)}
        done = subprocess.run(
            [sys.executable, "-m", "convert", "report", str(case), "--out", str(tmp_path / "r")],
            stdout=write,
            stderr=subprocess.PIPE,
            env=env,
            timeout=300,
        )
    finally:
        os.close(write)
    assert done.returncode == 1 and done.stderr == b""
    assert (tmp_path / "r" / "report.html").is_file()


def test_backward_difference_pid_under_tustin_points_to_its_reading():
    """Read by tustin, the z = 0 pole of a backward-difference PID becomes a filter pole at fs/pi;
    the note says what it most likely is and what backward-euler reads."""
    from convert.controller import Controller
    from convert.digital import read_analog

    kp, ki, kd, t = 2.0, 0.5, 0.3, 0.01
    digital = Controller.from_b_a([kp + ki * t + kd / t, -kp - 2 * kd / t, kd / t], [1.0, -1.0], t)
    reading = read_analog(digital, "tustin")
    assert min(abs(p) for p in reading.controller.poles() if abs(p) > 0) == pytest.approx(2 / t, rel=1e-12)
    assert any("backward-difference" in n and "kp = 2, ki = 0.5 /s, kd = 0.3 s" in n for n in reading.notes)
