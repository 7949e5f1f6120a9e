"""The benchmark suite: ``python -m bench [--quick] [--json] [--only NAME] [--write-docs]``.

Runs every benchmark module listed in ``SUITE`` (each has ``measure(quick=False) -> [Figure]``),
prints one table of figures — each a ratio to a reference measured in the same run, with its
target and whether it meets it — and exits 1 when a figure misses its target. ``--json`` prints
a list of ``{name, ratio, target, meets, ...}``; ``--write-docs`` also rewrites the figures table
in docs/performance.md and the growth tables bench/scaling.py measures. Never part of the
test suite: timings are not assertions.
"""

from __future__ import annotations

import argparse
import importlib
import json
import platform
import sys
import time

from bench.common import ROOT, Figure, print_figures

# module name -> what it measures (in the order the table lists them)
SUITE = {
    "startup": "start-up of the command",
    "digital": "analog -> digital survey and command",
    "batch": "many cases on one and two workers",
    "loop_sim": "the sampled-loop simulation with a clamp",
    "netlist": "a 40-node card and its sensitivity table",
    "netlist_large": "a 500-node ladder netlist",
    "firmware": "the bit-true model and every structure x word format",
    "evidence": "plant-log replay, its memory, a sweep fit",
    "cascade": "cascade design and its Monte Carlo",
    "circuit": "the tolerance engine and the part search",
    "report": "the report of every demo case against its floor; its memory",
}

DOCS_BEGIN = "<!-- figures: begin (written by python -m bench --write-docs) -->"
DOCS_END = "<!-- figures: end -->"


def run(names, quick: bool) -> list[Figure]:
    figures: list[Figure] = []
    for name in names:
        start = time.perf_counter()
        try:
            got = importlib.import_module(f"bench.{name}").measure(quick=quick)
        except Exception as exc:  # one broken benchmark never hides the others' figures
            got = [
                Figure(
                    f"{name}: did not run",
                    float("nan"),
                    1.0,
                    detail=f"{type(exc).__name__}: {str(exc).strip().splitlines()[-1][:200] if str(exc) else ''}",
                )
            ]
        print(f"# {name}: {SUITE[name]} ({time.perf_counter() - start:.0f} s)", file=sys.stderr)
        figures += got
    return figures


def docs_table(figures: list[Figure], quick: bool) -> str:
    lines = [
        DOCS_BEGIN,
        "",
        f"Measured {time.strftime('%Y-%m-%d')} with `python -m bench{' --quick' if quick else ''}` on "
        f"{platform.machine()}, Python {platform.python_version()}, "
        f"{__import__('os').cpu_count()} cores.",
        "",
        "| figure | ratio | spread | target | meets | what was timed |",
        "|---|---|---|---|---|---|",
    ]
    for f in figures:
        target = f"≥ {f.target:g}" if f.at_least else f"≤ {f.target:g}"
        spread = f"{f.spread[0]:.2f}–{f.spread[1]:.2f}" if f.spread else ""
        lines.append(f"| {f.name} | {f.ratio:.3f} | {spread} | {target} | {'yes' if f.meets else 'NO'} | {f.detail} |")
    lines += ["", DOCS_END]
    return "\n".join(lines)


def replace_between(text: str, begin: str, end: str, block: str, path) -> str:
    if begin not in text or end not in text:
        raise SystemExit(f"{path}: the markers are missing; add {begin!r} and {end!r}")
    head, rest = text.split(begin, 1)
    return head + block + rest.split(end, 1)[1]


def write_docs(figures: list[Figure], quick: bool) -> None:
    """Rewrite the figures table and, measured now by bench/scaling.py, the growth tables."""
    from bench import scaling

    path = ROOT / "docs" / "performance.md"
    text = replace_between(path.read_text(encoding="utf-8"), DOCS_BEGIN, DOCS_END, docs_table(figures, quick), path)
    text = replace_between(
        text, scaling.DOCS_BEGIN, scaling.DOCS_END, scaling.markdown(scaling.measure_points(quick), quick), path
    )
    path.write_text(text, encoding="utf-8")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m bench", description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--quick", action="store_true", help="fewer repeats: a rough look, not the figures")
    parser.add_argument("--json", action="store_true", help="print the figures as a JSON list")
    parser.add_argument("--only", action="append", choices=sorted(SUITE), help="run this module only (repeatable)")
    parser.add_argument(
        "--write-docs",
        action="store_true",
        help="rewrite the figures table in docs/performance.md and the growth tables (bench/scaling.py)",
    )
    args = parser.parse_args(argv)
    figures = run(args.only or list(SUITE), args.quick)
    if args.json:
        print(json.dumps([f.as_dict() for f in figures], indent=2))
    else:
        print_figures(figures)
    if args.write_docs:
        write_docs(figures, args.quick)
    return 0 if all(f.meets for f in figures) else 1


if __name__ == "__main__":
    sys.exit(main())
