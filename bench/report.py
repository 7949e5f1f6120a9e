"""The report of every demo case against its floor, and the report's peak memory at many draws.

1. For each demo case (cases/*.toml) the whole command ``loopshift report CASE --out DIR
   --force`` in a fresh process, interleaved by pairs with its floor: ``bench/floor.py``, a
   script that only imports numpy and matplotlib and draws and embeds the same figures (recorded
   once from the same report beforehand; the floor checks that it does not import loopshift and
   this script which of its PNGs are not byte for byte the report's). At the case's own draws: target
   ≤ 1.3× the floor; for a case with a Monte Carlo figure also at ``--draws 10000``: ≤ 1.6×
   (issue 15).
2. Peak resident memory of the circuit case's report (firmware_pid_to_opamp) at ``--draws
   100000`` (target ≤ 500 MB) and, not with --quick, ``--draws 1000000`` (≤ 1 GB), each as a
   ratio to its limit; the run is capped at 4 GB of address space so that it cannot take the
   shared machine's memory (a run that hits the cap is reported as at least the cap).

    python bench/report.py [--quick] [--json]
"""

from __future__ import annotations

import os
import pickle
import subprocess
import sys
import tempfile
from dataclasses import replace
from pathlib import Path

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from bench.common import (
    ROOT,
    Figure,
    figure_from_pairs,
    interleaved,
    loopshift,
    peak_rss,
    process,
    python,
    python_env,
    run_script,
)

CIRCUIT_CASE = "firmware_pid_to_opamp"
CAP_BYTES = 4 * 2**30

# Runs the report in-process, with no helper process (a figure drawn in a helper would escape the
# recording and be embedded by the floor as bytes, undrawn), and Figure.savefig wrapped: every figure saved is kept as
# matplotlib's pickle of the figure, the savefig arguments and the PNG bytes (argv: case out recording [draws]).
RECORDER = r"""
import io, pickle, sys
import matplotlib.figure as mf
orig = mf.Figure.savefig
figs = []
def savefig(self, fname, *a, **k):
    blob = pickle.dumps(self)
    out = orig(self, fname, *a, **k)
    if isinstance(fname, io.BytesIO):
        png = fname.getvalue()
    else:  # saved to a file (schemdraw): the same format, read back
        k = {"format": str(fname).rsplit(".", 1)[-1], **k}
        with open(fname, "rb") as fh:
            png = fh.read()
    figs.append((blob, a, k, png))
    return out
mf.Figure.savefig = savefig
from convert import sidework
from convert.cli.main import main
case, out, recording, *draws = sys.argv[1:]
with sidework.alone():  # every figure drawn in this process, where savefig is watched
    rc = main(["report", case, "--out", out, "--force"] + (["--draws", draws[0]] if draws else []))
with open(recording, "wb") as fh:
    pickle.dump(figs, fh)
sys.exit(0 if rc in (0, 1) else rc)
"""


def record(case: Path, draws: int | None, folder: Path) -> tuple[Path, list[str]]:
    """Record the figures of ``case``'s report; returns the floor's input and the report's figure names."""
    out = folder / "recorded"
    raw = folder / "raw.pickle"
    argv = python("-c", RECORDER, str(case), str(out), str(raw), *([str(draws)] if draws else []))
    proc = subprocess.run(argv, capture_output=True, text=True, env=python_env())
    if proc.returncode:
        raise RuntimeError(f"report of {case.name} failed ({proc.returncode}): {proc.stderr.strip()[-400:]}")
    figs = pickle.loads(raw.read_bytes())
    drawn = {png for *_, png in figs if png is not None}
    report_figures = {p.name: p.read_bytes() for p in sorted((out / "figures").glob("*.png"))}
    # figures the report has that matplotlib did not draw here (schematics from schemdraw) are embedded as they are
    others = [(name, png) for name, png in report_figures.items() if png not in drawn]
    recording = folder / "recording.pickle"
    with open(recording, "wb") as fh:
        pickle.dump(([(f"{i:02d}.png", blob, a, k) for i, (blob, a, k, _) in enumerate(figs)], others), fh)
    return recording, list(report_figures)


def unmatched(report_dir: Path, floor_dir: Path) -> list[str]:
    """The report's figures that the floor did not reproduce byte for byte."""
    drawn = {p.read_bytes() for p in (floor_dir / "figures").glob("*.png")}
    return [p.name for p in sorted((report_dir / "figures").glob("*.png")) if p.read_bytes() not in drawn]


def measure(quick: bool = False) -> list[Figure]:
    pairs = 1 if quick else 3
    out: list[Figure] = []
    with tempfile.TemporaryDirectory() as tmp:
        for case in sorted((ROOT / "cases").glob("*.toml")):
            for draws in (None, 10_000):
                folder = Path(tmp) / f"{case.stem}-{draws or 'own'}"
                folder.mkdir()
                recording, names = record(case, draws, folder)
                report = process(
                    loopshift(
                        "report",
                        str(case),
                        "--out",
                        str(folder / "report"),
                        "--force",
                        *(["--draws", str(draws)] if draws else []),
                    ),
                    ok_codes=(0, 1),
                )
                floor = process(python(str(ROOT / "bench" / "floor.py"), str(recording), str(folder / "floor")))
                p = interleaved(floor, report, pairs)
                differ = unmatched(folder / "report", folder / "floor")
                label = f"--draws {draws}" if draws else "own draws"
                out.append(
                    figure_from_pairs(
                        f"report vs its floor: {case.stem}, {label}",
                        p,
                        1.6 if draws else 1.3,
                        f"loopshift report ({len(names)} figures)",
                        "floor (imports + same figures)",
                    )
                )
                if differ:
                    out[-1] = replace(
                        out[-1],
                        notes=(
                            f"not byte-identical in the floor (drawn from the same figure object): {', '.join(differ)}",
                        ),
                    )
                if not any(n.startswith("montecarlo") for n in names):
                    break  # no Monte Carlo figure: the draws change nothing here
        case = ROOT / "cases" / f"{CIRCUIT_CASE}.toml"
        for draws, limit_mb in ((100_000, 500.0), *(() if quick else ((1_000_000, 1024.0),))):
            mb, code, last = peak_rss(
                loopshift(
                    "report", str(case), "--out", str(Path(tmp) / f"mem{draws}"), "--force", "--draws", str(draws)
                )
            )
            finished = code in (0, 1)
            ratio = mb / limit_mb if finished else max(mb, CAP_BYTES / 2**20) / limit_mb
            out.append(
                Figure(
                    f"report peak memory: {CIRCUIT_CASE}, --draws {draws}",
                    ratio,
                    1.0,
                    detail=(
                        f"peak resident {mb:.0f} MB as a ratio to the {limit_mb:.0f} MB limit"
                        if finished
                        else f"did not finish under the {CAP_BYTES / 2**30:.0f} GB address-space cap ({last[:120]}); "
                        f"shown as at least the cap over the {limit_mb:.0f} MB limit"
                    ),
                )
            )
    return out


if __name__ == "__main__":
    sys.exit(run_script(measure))
