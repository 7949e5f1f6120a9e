"""Given targets: forms that exist (firmware b/a or sections, a PID block as configured, a card)
read from a case file and checked against the source like the forms the tool makes."""

from __future__ import annotations

import numpy as np
import pytest

from convert.case import parse_case
from convert.errors import InputError

HEAD = """\
[source]
expression = "2*(1 + 1/(3s))"

[criteria]
band = ["10 mHz", "5 Hz"]
max_gain_error_db = 0.5
max_phase_error_deg = 5
"""


def _case(body: str, head: str = HEAD):
    return parse_case(head + "\n" + body, "given.toml")


def _evaluate(case):
    from convert.compare.evaluate import evaluate_case

    return evaluate_case(case, draws=300)


def _row(realization, key):
    return next(r for r in realization.budget if r.key == key)


@pytest.mark.parametrize(
    "method,scipy_name", [("backward-euler", "backward_diff"), ("forward-euler", "euler"), ("tustin", "bilinear")]
)
def test_pid_block_law_matches_scipy_cont2discrete(method, scipy_name):
    """A PID block sampled term by term equals the whole PID law mapped by the same substitution,
    which is what scipy.signal.cont2discrete computes (reference library: 'backward_diff',
    'euler', 'bilinear')."""
    from scipy.signal import cont2discrete

    from convert.given import pid_block_b_a
    from convert.pid import pid_from_words

    pid = pid_from_words(["kc=1.5", "ti=4s", "td=0.8s", "n=8"])
    fs = 50.0
    b, a = pid_block_b_a(pid, fs, method)
    ctrl = pid.to_controller()
    num, den, _ = cont2discrete((ctrl.num, ctrl.den), 1 / fs, method=scipy_name)
    num = np.ravel(num) / den[0]
    den = np.asarray(den) / den[0]
    n = max(len(b), len(num))
    assert np.allclose(np.pad(b, (0, n - len(b))), np.pad(num, (0, n - len(num))), rtol=1e-12, atol=1e-12)
    assert np.allclose(np.pad(a, (0, len(den) - len(a))), den, rtol=1e-12, atol=1e-12)


def test_unfiltered_derivative_is_the_backward_difference():
    """kd·(1 − z⁻¹)/T for an unfiltered derivative (common practice in firmware PID blocks):
    u[n] = kp·e[n] + kd/T·(e[n] − e[n−1]) for a PD block, checked by hand."""
    from convert.given import pid_block_b_a
    from convert.pid import pid_from_words

    pid = pid_from_words(["kp=2", "kd=0.5s"], where="t")
    b, a = pid_block_b_a(pid, 100.0, "backward-euler")
    assert np.allclose(b, [2 + 50.0, -50.0]) and np.allclose(a, [1.0])


def test_sections_cascade_like_scipy_sos2tf():
    """Second-order sections cascaded into b/a (reference library: scipy.signal.sos2tf)."""
    from scipy.signal import sos2tf

    from convert.given import sos_to_b_a

    sos = [[0.2, 0.1, 0.0, 1.0, -0.5, 0.0], [1.0, -1.2, 0.4, 1.0, -1.1, 0.3]]
    b, a = sos_to_b_a(sos)
    rb, ra = sos2tf(np.array(sos))
    assert np.allclose(b, np.trim_zeros(rb, "b")) and np.allclose(a, np.trim_zeros(ra, "b"))


def test_given_tustin_coefficients_give_the_same_figures_as_the_made_target():
    """A given firmware holding exactly the Tustin coefficients the tool makes reports the same
    total error and loop figures as the made target (one pipeline: given forms enter where made
    ones do); its budget shows no discretization row. The coefficients are computed by
    scipy.signal.cont2discrete (reference library), not by the tool."""
    from scipy.signal import cont2discrete

    num, den, _ = cont2discrete(([2 * 3, 2], [3, 0]), 1 / 100, method="bilinear")
    b = ", ".join(repr(float(x)) for x in np.ravel(num) / den[0])
    a = ", ".join(repr(float(x)) for x in np.asarray(den) / den[0])
    case = _case(f"""
[target.digital]
fs = "100 Hz"
methods = ["tustin"]
delay = "1 sample"

[target.given.fw]
form = "digital"
b = [{b}]
a = [{a}]
fs = "100 Hz"
delay = "1 sample"

[plant]
model = "1/((2s+1)(0.5s+1))"
""")
    res = _evaluate(case)
    made, given = res.realizations
    assert given.name == "given fw"
    for key in ("max_gain_error_db", "max_phase_error_deg", "delta_phase_margin_deg", "delta_gain_margin_db"):
        assert getattr(_row(given, "total"), key) == pytest.approx(getattr(_row(made, "total"), key), abs=1e-9)
    assert not _row(given, "discretization").applicable
    assert not _row(given, "word_format").applicable
    assert _row(given, "hold_and_delay").applicable
    assert given.margins.phase_margin_deg == pytest.approx(made.margins.phase_margin_deg, abs=1e-9)


def test_given_float32_has_a_word_format_row_and_given_card_no_rounding_row():
    """The rows that apply to each given form: float32 coefficients get a word-format row; a
    given card has no rounding-to-series row; its tolerances row is the spread of its own
    parts. The card's parts equal the source's PI exactly (kp = R2/R1 = 2, ti = R2·C1 = 3 s), so
    without tolerances its total error is zero (closed form)."""
    case = _case("""
[target.given.fw]
form = "digital"
b = [2.00333333333, -1.99666666667]
a = [1, -1]
fs = "100 Hz"
word_format = "float32"

[target.given.card]
form = "circuit"
topology = "pi-rc-feedback"
parts = { R1 = "50k", R2 = "100k", C1 = "30 uF" }

[target.given.card_tol]
form = "circuit"
topology = "pi-rc-feedback"
parts = { R1 = "50k", R2 = "100k", C1 = "30 uF" }
tolerances = { R = "1 %", C = "5 %" }
""")
    res = _evaluate(case)
    fw, card, card_tol = res.realizations
    assert _row(fw, "word_format").applicable
    assert not _row(card, "series_rounding").applicable
    assert not _row(card, "tolerances").applicable
    assert _row(card, "total").max_gain_error_db < 1e-9
    assert _row(card, "total").max_phase_error_deg < 1e-7
    assert _row(card_tol, "tolerances").applicable
    # C at ±5 % moves Ti by ±5 %: at the lowest band frequency the gain is about kp/(ω·Ti),
    # so the p99 error approaches 20·log10(1/0.95) = 0.45 dB
    assert 0.3 < _row(card_tol, "total").max_gain_error_db < 20 * np.log10(1 / 0.95 * 1.01) + 0.01


def test_given_pid_block_total_is_the_block_against_the_source():
    """A PID block configured like the source PI (kc = 2, ti = 3 s) at 20 Hz, backward-euler:
    its total error equals the error of scipy's backward_diff discretization with the zero-order
    hold (e^{−jωT/2}·sinc) against the analog PI (reference library + closed-form hold)."""
    from scipy.signal import cont2discrete, freqz

    case = _case("""
[target.given.block]
form = "pid"
settings = { kc = 2, ti = "3 s" }
fs = "20 Hz"
method = "backward-euler"
""")
    res = _evaluate(case)
    (blk,) = res.realizations
    f = res.band_f_hz
    num, den, _ = cont2discrete(([6, 2], [3, 0]), 1 / 20, method="backward_diff")
    _, h = freqz(np.ravel(num), den, worN=f, fs=20)
    h = h * np.exp(-1j * np.pi * f / 20) * np.sinc(f / 20)
    ref = 2 * (1 + 1 / (3 * 2j * np.pi * f))
    gain = np.max(np.abs(20 * np.log10(np.abs(h / ref))))
    phase = np.max(np.abs(np.degrees(np.angle(h / ref))))
    assert _row(blk, "total").max_gain_error_db == pytest.approx(gain, rel=1e-6)
    assert _row(blk, "total").max_phase_error_deg == pytest.approx(phase, rel=1e-6)
    assert _row(blk, "discretization").applicable


@pytest.mark.parametrize(
    "body,key,words",
    [
        ('[target.given.x]\nb = [1]\na = [1]\nfs = "1 kHz"\n', "target.given.x", "missing form"),
        (
            '[target.given.x]\nform = "digital"\nb = [1]\na = [1]\nfs = "1 kHz"\nword_format = "int7"\n',
            "target.given.x.word_format",
            "q15",
        ),
        (
            '[target.given.x]\nform = "digital"\nsos = [[1, 0, 0, 1, 0]]\nfs = "1 kHz"\n',
            "target.given.x.sos",
            "six numbers",
        ),
        ('[target.given.x]\nform = "digital"\nb = [1]\na = [1]\n', "target.given.x", "missing fs"),
        (
            '[target.given.x]\nform = "digital"\nb = [1]\na = [1]\nfs = "1 kHz"\nmethod = "zoh"\n',
            "target.given.x.method",
            "unknown key",
        ),
        (
            '[target.given.x]\nform = "pid"\nsettings = { kc = 1, td = "1 s" }\nfs = "1 kHz"\nmethod = "tustin"\n',
            "target.given.x.method",
            "backward-euler",
        ),
        ('[target.given.x]\nform = "circuit"\nnetlist = "nowhere.cir"\n', "target.given.x.netlist", "no such netlist"),
        ('[target.given.x]\nform = "circuit"\ntopology = "pi-rc-feedback"\n', "target.given.x", "missing parts"),
        (
            '[target.given.x]\nform = "pid"\nsettings = { kc = 1, tii = 3 }\nfs = "1 kHz"\n',
            "target.given.x.settings.tii",
            "unknown key",
        ),
    ],
)
def test_given_errors_name_line_and_key(body, key, words):
    """Every bad given form is one InputError naming the file:line and the key (house rule)."""
    with pytest.raises(InputError) as err:
        _case(body)
    assert err.value.key == key
    assert words in err.value.message
    assert err.value.where.startswith("given.toml:")
    line = int(err.value.where.split(":")[1])
    assert line > HEAD.count("\n")  # points into the given table, not the top of the file


def test_fixed_point_word_format_is_stored_and_refused_at_evaluation():
    """A Q15 firmware is read and kept as written; this version cannot evaluate fixed-point
    coefficients, so the evaluation refuses it (never a PASS on a stand-in)."""
    from convert.errors import UnrealizableError

    case = _case(
        '[target.given.q]\nform = "digital"\nb = [0.5, -0.4]\na = [1, -1]\nfs = "100 Hz"\n'
        'word_format = "Q15"\nstructure = "transposed-2"\n'
    )
    assert case.given[0].data["word_format"] == "q15"
    assert case.given[0].data["structure"] == "transposed-2"
    with pytest.raises(UnrealizableError, match="q15"):
        _evaluate(case)


def test_report_cli_runs_a_given_only_case(run_cli, tmp_path):
    """A case with only given targets runs through `loopshift report` (exit 0 when they pass)."""
    path = tmp_path / "g.toml"
    path.write_text(
        HEAD + '\n[target.given.card]\nform = "circuit"\ntopology = "pi-rc-feedback"\n'
        'parts = { R1 = "50k", R2 = "100k", C1 = "30 uF" }\n'
    )
    res = run_cli("report", str(path), "--out", str(tmp_path / "rep"))
    assert res.code == 0, res.err
    assert "given card" in (tmp_path / "rep" / "report.md").read_text()
