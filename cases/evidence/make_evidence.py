"""Regenerate the demo evidence of cases/evidence_temp_card.toml (invented data, seeded).

Run from the repository root: /work/venv/bin/python cases/evidence/make_evidence.py [OUT_DIR]
(OUT_DIR defaults to this folder; the tests regenerate into a scratch folder and compare).

* temp_card_sweep.csv — a bench sweep of the temperature card (cases/cards/temp_pi_card.cir)
  whose trim pot RV1 has drifted from 150 kΩ to 91 kΩ: ngspice AC analysis (independent
  simulator), 10 mHz to 20 Hz, 10 points per decade, with complex Gaussian noise of 0.5 %
  (1 σ: 0.043 dB and 0.29° per point), seed 13.
* temp_plant_log.csv — 20 minutes of the running loop at 10 Hz: the drifted card on the plant
  1.5/((8s+1)(1.5s+1)) with 0.3 s dead time (6th-order Padé in the generator), setpoint steps
  and a load step, measurement noise 0.02 (1 σ, seed 17); the loop by python-control
  forced_response (reference library), the logged output computed from the logged error by the
  card's hand-derived transfer function
  C(s) = (RV1·C1·s + 1) / (C1·s·(R1 + R7 + R7·R1·C3·s)), so the log is exactly what the card
  did with what it saw.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent.parent
sys.path.insert(0, str(ROOT))

DRIFTED = {"RV1": "91k"}
PARTS = {"R7": 10e3, "C3": 1e-6, "R1": 47e3, "RV1": 91e3, "C1": 100e-6}
SWEEP_NOISE = 0.005
LOG_NOISE = 0.02


def card_text() -> str:
    lines = []
    for line in (ROOT / "cases" / "cards" / "temp_pi_card.cir").read_text().splitlines():
        word = line.split()[0] if line.strip() else ""
        if word in DRIFTED:
            parts = line.split()
            parts[3] = DRIFTED[word]
            line = " ".join(parts)
        lines.append(line)
    return "\n".join(lines)


def make_sweep(out: Path = HERE) -> None:
    from tests.spice import ac_sweep
    from tests.test_mna_ngspice import spice_deck

    f, v = ac_sweep(spice_deck(card_text(), "VIN"), "out", 0.01, 20.0, 10)
    rng = np.random.default_rng(13)
    v = v * np.exp(SWEEP_NOISE * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    with open(out / "temp_card_sweep.csv", "w") as fh:
        fh.write("frequency (Hz),gain (dB),phase (deg)\n")
        for fi, vi in zip(f, v):
            fh.write(f"{fi:.8g},{20 * np.log10(abs(vi)):.5f},{np.degrees(np.angle(vi)):.4f}\n")


def make_log(out: Path = HERE) -> None:
    import control

    p = PARTS
    s = control.tf("s")
    card = (p["RV1"] * p["C1"] * s + 1) / (p["C1"] * s * (p["R1"] + p["R7"] + p["R7"] * p["R1"] * p["C3"] * s))
    num, den = control.pade(0.3, 6)
    plant = 1.5 / ((8 * s + 1) * (1.5 * s + 1)) * control.tf(num, den)
    t = np.arange(0, 1200, 0.1)
    sp = 20 + 5 * (t >= 60) - 3 * (t >= 600)
    load = -2.0 * (t >= 300)
    loop = control.feedback(card * plant, 1)
    to_y_from_load = control.feedback(plant, card)
    y = control.forced_response(loop, t, sp - 20).outputs + control.forced_response(to_y_from_load, t, load).outputs
    rng = np.random.default_rng(17)
    pv = 20 + y + LOG_NOISE * rng.standard_normal(t.size)
    e = sp - pv
    u = 40 + control.forced_response(card, t, e).outputs  # the output's operating point: 40 %
    with open(out / "temp_plant_log.csv", "w") as fh:
        fh.write("time (s),setpoint (degC),measurement (degC),output (%)\n")
        for row in zip(t, sp, pv, u):
            fh.write(f"{row[0]:.1f},{row[1]:.3f},{row[2]:.5f},{row[3]:.6f}\n")


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else HERE
    make_sweep(target)
    make_log(target)
    print("wrote", target / "temp_card_sweep.csv", "and", target / "temp_plant_log.csv")
