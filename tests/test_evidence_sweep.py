"""Bench sweep evidence: the CSV reader, the check against a model, and the fit of the card as it
is, against sweeps made by ngspice (independent simulator) of the card with parts changed."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from convert.errors import InputError
from convert.evidence.sweep import read_sweep
from tests.spice import ac_sweep, require_ngspice

CARD = Path(__file__).parent / "netlists" / "filtered_pi_card.cir"
NOISE = 0.01  # stated noise: 1 % complex Gaussian on each point (0.087 dB, 0.57 deg, 1 σ)


def _write(
    path: Path, f, v, header="frequency (Hz),gain (dB),phase (deg)", gain="db", phase="deg", fscale=1.0, extra=None
):
    rows = [header]
    for i, (fi, vi) in enumerate(zip(f, v)):
        g = 20 * np.log10(abs(vi)) if gain == "db" else abs(vi)
        p = np.degrees(np.angle(vi)) if phase == "deg" else np.angle(vi)
        row = f"{fi / fscale:.12g},{g:.12g},{p:.12g}"
        if extra is not None:
            row += "," + ",".join(f"{x:.12g}" for x in extra[i])
        rows.append(row)
    path.write_text("\n".join(rows) + "\n")
    return path


def _spice(changes: dict, seed: int = 3, noise: float = NOISE):
    """ngspice AC analysis of the card with ``changes`` applied; stated complex noise added."""
    from tests.test_mna_ngspice import spice_deck

    require_ngspice()
    lines = []
    for line in CARD.read_text().splitlines():
        word = line.split()[0] if line.strip() else ""
        if word in changes:
            parts = line.split()
            parts[3] = changes[word]
            line = " ".join(parts)
        lines.append(line)
    f, v = ac_sweep(spice_deck("\n".join(lines), "VIN"), "out", 0.01, 100, 10)
    rng = np.random.default_rng(seed)
    return f, v * np.exp(noise * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))


# ----------------------------------------------------------------------------- the reader
def test_units_in_the_header_are_honoured(tmp_path):
    """kHz, V/V and rad read as the same sweep as Hz, dB and deg (unit factors: BIPM SI brochure;
    dB = 20·log10 of a ratio, common practice)."""
    f = np.logspace(0, 3, 7)
    v = (1 + 2j * np.pi * f / 50) ** -1 * 3
    a = read_sweep(_write(tmp_path / "a.csv", f, v))
    b = read_sweep(
        _write(
            tmp_path / "b.csv",
            f,
            v,
            header="Frequency [kHz],Magnitude (V/V),Phase (rad)",
            gain="v",
            phase="rad",
            fscale=1e3,
        )
    )
    assert np.allclose(a.f_hz, f) and np.allclose(b.f_hz, f)
    assert np.allclose(a.response, v, rtol=1e-9) and np.allclose(b.response, v, rtol=1e-9)


def test_other_headers_are_mapped_and_units_given(tmp_path):
    f = np.logspace(0, 2, 5)
    v = np.full(f.size, 2.0 + 0j)
    p = _write(tmp_path / "m.csv", f, v, header="F,Amp,Ang", gain="v")
    s = read_sweep(p, columns={"frequency": "F", "gain": "Amp", "phase": "Ang"}, units={"gain": "V/V"})
    assert np.allclose(s.response, 2.0)


def test_decimal_commas_refused_or_read_when_said(tmp_path):
    p = tmp_path / "dc.csv"
    p.write_text("frequency (Hz);gain (dB);phase (deg)\n1,5;2,0;-10\n10;1,5;-20\n100;1,0;-30\n")
    with pytest.raises(InputError) as err:
        read_sweep(p)
    assert (
        err.value.where == "dc.csv:2"
        and "'frequency (Hz)'" in err.value.message
        and "decimal comma" in err.value.message
    )
    s = read_sweep(p, decimal=",")
    assert np.allclose(s.f_hz, [1.5, 10, 100])


@pytest.mark.parametrize(
    "text,where,words",
    [
        ("frequency (Hz),phase (deg)\n1,2\n", "x.csv:1", "no gain column"),
        (
            "frequency (Hz),gain (dB),phase (deg)\n1,2,3\n10,NaN,3\n100,2,3\n",
            "x.csv:3",
            "'gain (dB)': expected a finite",
        ),
        ("frequency (Hz),gain (dB),phase (deg)\n1,2,3\n10,,3\n100,2,3\n", "x.csv:3", "an empty cell"),
        (
            "frequency (Hz),gain (dB),phase (deg)\n1,2,3\n10,2,3\n5,2,3\n",
            "x.csv:4",
            "must rise row by row; 5 follows 10",
        ),
        ("frequency (Hz),gain (dB),phase (deg)\n1,2,3\n10,2\n", "x.csv:3", "'phase (deg)': the row has 2 fields"),
        (
            "frequency (Hz),gain (V/V),phase (deg)\n1,2,3\n10,-2,3\n100,1,1\n",
            "x.csv:3",
            "a gain ratio must be positive",
        ),
        ("frequency (s),gain (dB),phase (deg)\n1,2,3\n", "x.csv:1", "unit 's' is not a unit of frequency"),
        ("", "x.csv:1", "the file is empty"),
    ],
)
def test_bad_sweep_files_name_file_row_and_column(tmp_path, text, where, words):
    p = tmp_path / "x.csv"
    p.write_text(text)
    with pytest.raises(InputError) as err:
        read_sweep(p)
    assert err.value.where == where
    assert words in err.value.message


def test_cli_sweep_errors_are_one_line_exit_2(run_cli, tmp_path):
    p = tmp_path / "bad.csv"
    p.write_text("frequency (Hz),gain (dB),phase (deg)\n1,2,3\n10,2,3\n10,2,3\n")
    res = run_cli("compare", "2*(1+1/(3s))", "--sweep", str(p))
    assert res.code == 2
    lines = [x for x in res.err.splitlines() if x.strip()]
    assert len(lines) == 1 and "bad.csv:4" in lines[0] and "frequency (Hz)" in lines[0]
    res = run_cli("compare", "2*(1+1/(3s))", "--sweep", str(tmp_path / "none.csv"))
    assert res.code == 2 and "no such file" in res.err
    res = run_cli("compare", "2*(1+1/(3s))", "--fit")
    assert res.code == 2 and "--fit: needs a measurement" in res.err


def test_noise_from_repeats_and_from_coherence(tmp_path):
    """Repeats: the standard error of their mean. Coherence γ² with n averages: the random error
    sqrt(1 − γ²)/(|γ|·sqrt(2n)) of gain (neper) and phase (rad) — Bendat & Piersol, Random Data,
    from memory."""
    f = np.array([1.0, 10.0, 100.0])
    p = tmp_path / "r.csv"
    p.write_text(
        "frequency (Hz),gain 1 (dB),gain 2 (dB),phase 1 (deg),phase 2 (deg)\n1,0,0.2,0,2\n10,0,0.2,0,2\n100,0,0.2,0,2\n"
    )
    s = read_sweep(p)
    assert s.repeats == 2
    assert np.allclose(s.noise_db, np.std([0, 0.2], ddof=1) / np.sqrt(2))
    assert np.allclose(s.noise_deg, np.std([0, 2], ddof=1) / np.sqrt(2))
    q = _write(
        tmp_path / "c.csv",
        f,
        np.ones(3),
        header="frequency (Hz),gain (dB),phase (deg),coherence",
        extra=[[0.99], [0.9], [0.5]],
    )
    s = read_sweep(q, averages=8)
    gamma2 = np.array([0.99, 0.9, 0.5])
    eps = np.sqrt(1 - gamma2) / (np.sqrt(gamma2) * 4)
    assert np.allclose(s.noise_db, eps * 20 / np.log(10)) and np.allclose(s.noise_deg, np.degrees(eps))


# ----------------------------------------------------------------------------- against ngspice
def test_unchanged_card_passes_and_changed_card_is_flagged(run_cli, tmp_path):
    """ngspice AC sweeps (reference simulator) with 1 % stated noise: the card as drawn agrees
    with its netlist within 1 dB / 5 deg (|error| + 2σ); with R7 10k -> 14k and RV1 100k -> 80k it does not
    (the change moves the gain by more than 2 dB), exit 1."""
    f, v = _spice({})
    ok = run_cli(
        "compare",
        str(CARD),
        "--sweep",
        str(_write(tmp_path / "ok.csv", f, v)),
        "--max-gain-error",
        "1",
        "--max-phase-error",
        "5",
        "--json",
    )
    assert ok.code == 0, ok.out[-800:]
    f, v = _spice({"R7": "14k", "RV1": "80k"})
    bad = run_cli(
        "compare",
        str(CARD),
        "--sweep",
        str(_write(tmp_path / "bad.csv", f, v)),
        "--max-gain-error",
        "1",
        "--max-phase-error",
        "5",
        "--json",
    )
    assert bad.code == 1
    data = json.loads(bad.out)
    assert data["check"]["figures"]["max_gain_error_db"] > 2


def test_fit_recovers_changed_parts_within_their_intervals(run_cli, tmp_path):
    """R7 10k -> 14k and RV1 100k -> 80k in ngspice (reference simulator), 1 % noise: the fit
    of R7 and RV1 recovers both within their 95 % intervals, and marks them changed."""
    f, v = _spice({"R7": "14k", "RV1": "80k"})
    res = run_cli(
        "compare", str(CARD), "--sweep", str(_write(tmp_path / "s.csv", f, v)), "--fit", "R7", "RV1", "--json"
    )
    data = json.loads(res.out)
    values = {x["name"]: x for x in data["fit"]["values"]}
    for name, true in (("R7", 14e3), ("RV1", 80e3)):
        x = values[name]
        assert x["ci95_fraction"] is not None and x["ci95_fraction"] < 0.05
        assert abs(np.log(x["fitted"] / true)) <= np.log1p(x["ci95_fraction"]), x
        assert x["significant"]
    assert data["fit"]["chi2_dof"] < 1 + 3 * np.sqrt(2 / data["fit"]["dof"])


def test_single_drifted_part_is_ranked_first_and_explains(run_cli, tmp_path):
    """Only the pot RV1 drifted (100k -> 61k) in ngspice: fitting all five parts cannot tell
    them apart (the response fixes combinations only) — the fit says so — and the single-change
    ranking puts RV1 first, as the one change that explains the measurement to its noise."""
    f, v = _spice({"RV1": "61k"}, seed=5)
    res = run_cli("compare", str(CARD), "--sweep", str(_write(tmp_path / "s.csv", f, v)), "--fit")
    assert res.code == 1
    assert "cannot be told apart" in res.out
    import re

    m = re.search(r"RV1: 100 kΩ -> ([\d.]+) kΩ, χ²/dof [\d.]+  explains the measurement", res.out)
    assert m and abs(float(m.group(1)) / 61 - 1) < 0.03, res.out
    first = [line for line in res.out.splitlines() if "χ²/dof" in line and "->" in line][0]
    assert first.strip().startswith("RV1")


def test_fit_does_not_depend_on_sweep_density(tmp_path):
    """The fitted value and its interval come from the data: a sweep at twice the density gives
    the same value within the (narrower) interval of either (a figure independent of a grid
    the user did not choose; ngspice reference)."""
    from convert.evidence.sweep import sweep_evidence
    from convert.given import read_spec
    from tests.test_mna_ngspice import spice_deck

    require_ngspice()
    text = CARD.read_text().replace("RV1 n1 m 100k", "RV1 n1 m 70k")
    out = []
    for ppd, seed in ((10, 1), (20, 2)):
        f, v = ac_sweep(spice_deck(text, "VIN"), "out", 0.01, 100, ppd)
        rng = np.random.default_rng(seed)
        v = v * np.exp(NOISE * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
        sw = read_sweep(_write(tmp_path / f"d{ppd}.csv", f, v))
        ev = sweep_evidence(read_spec(str(CARD), "A"), sw, fit=True, fit_names=("RV1",))
        out.append(ev.fit.values[0])
    a, b = out
    assert abs(np.log(a.fitted / 70e3)) <= np.log1p(a.ci95_fraction)
    assert abs(np.log(b.fitted / 70e3)) <= np.log1p(b.ci95_fraction)
    assert abs(np.log(a.fitted / b.fitted)) <= np.log1p(a.ci95_fraction) + np.log1p(b.ci95_fraction)


def test_pid_parameters_fit_from_a_sweep_of_a_pid_block(tmp_path):
    """A PID block (kc 1.5, ti 4 s, td 0.8 s, n 8, backward-euler at 50 Hz) swept with its
    hold; the response computed by scipy.signal.freqz (reference library) with the ZOH factor,
    ki set 20 % high: the fit of the configured block recovers ki within its interval."""
    from scipy.signal import freqz

    from convert.evidence.sweep import sweep_evidence
    from convert.given import pid_block_b_a, read_spec
    from convert.pid import pid_from_words

    true = pid_from_words(["kp=1.5", "ki=0.45/s", "kd=1.2s", "tf=0.1s"])
    b, a = pid_block_b_a(true, 50.0, "backward-euler")
    f = np.logspace(-2, np.log10(20), 40)
    _, h = freqz(b, a, worN=f, fs=50.0)
    h = h * np.exp(-1j * np.pi * f / 50) * np.sinc(f / 50)
    rng = np.random.default_rng(7)
    h = h * np.exp(0.005 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    sw = read_sweep(_write(tmp_path / "pid.csv", f, h))
    spec = read_spec("pid: kp=1.5 ki=0.375/s kd=1.2s tf=0.1s fs=50Hz", "A")
    ev = sweep_evidence(spec, sw, fit=True)
    got = {v.name: v for v in ev.fit.values}
    for name, value in (("kp", 1.5), ("ki", 0.45), ("kd", 1.2), ("tf", 0.1)):
        assert got[name].determined
        assert abs(np.log(got[name].fitted / value)) <= np.log1p(got[name].ci95_fraction), got[name]
    assert got["ki"].significant and not got["kp"].significant


def test_pot_wiper_position_is_fitted(run_cli, tmp_path):
    """A gain pot (RV2A/RV2B, 100 kΩ track) turned from mid-travel to 30 % in ngspice (reference
    simulator), 1 % noise: the fit reads the wiper position RV2 within its 95 % interval."""
    from tests.test_mna_ngspice import spice_deck

    require_ngspice()
    card = Path(__file__).parent / "netlists" / "pot_trimmed_pi_card.cir"
    text = card.read_text().replace("RV2A in w 50k", "RV2A in w 30k").replace("RV2B w 0 50k", "RV2B w 0 70k")
    f, v = ac_sweep(spice_deck(text, "VIN"), "out", 0.01, 100, 10)
    rng = np.random.default_rng(21)
    v = v * np.exp(NOISE * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    res = run_cli("compare", str(card), "--sweep", str(_write(tmp_path / "pot.csv", f, v)), "--fit", "RV2", "--json")
    data = json.loads(res.out)
    (x,) = data["fit"]["values"]
    assert x["kind"] == "position" and x["drawn"] == pytest.approx(0.5)
    assert abs(x["fitted"] - 0.3) <= x["ci95_fraction"] * x["fitted"], x
    text_out = run_cli("compare", str(card), "--sweep", str(tmp_path / "pot.csv"), "--fit", "RV2").out
    assert "RV2 measures as 30" in text_out and "% of travel" in text_out
