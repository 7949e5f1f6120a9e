"""Bill of materials: CSV with reference, value, series, tolerance, role.

:func:`bom_rows` writes values with SI prefixes (``49.9 kΩ``, ``1.5 µF``) for the terminal and the
report; :func:`bom_csv` writes the same rows as ASCII only (``49.9 kohm``, ``1.5 uF``; roles
spelt ``R1*C1``, ``s^2``), a header, then a units row (tolerance in ``%``; each value carries its
own unit), because spreadsheets and purchasing systems mangle other characters. Series is the
IEC 60063 series the value was taken from (empty for op-amps and potentiometers). Quantities,
ratings and dielectrics are in the buy list (:mod:`convert.circuit.buylist`).
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Mapping

from convert.values import format_value
from convert.circuit.netlist_out import INVERTER_PARTS
from convert.circuit.tolerance import DEFAULT_TOLERANCES, tolerance_of
from convert.circuit.buylist import ascii_text

COLUMNS = ("reference", "value", "series", "tolerance", "role")


def bom_rows(design, tolerances: Mapping[str, float] | None = None, trims=()) -> list[dict]:
    """Rows for a :class:`~convert.circuit.design.CircuitDesign` (rounded parts, the inverter if
    the design needs one, op-amps, and any trimmer potentiometers from :mod:`convert.circuit.trim`)."""
    tolerances = dict(DEFAULT_TOLERANCES if tolerances is None else tolerances)
    topo = design.topology
    opts = design.options
    trimmed = {t.part: t for t in trims}
    rows = []
    for p in topo.parts:
        value = design.rounded[p.name]
        if (p.kind == "R" and math.isinf(value)) or (p.kind == "C" and value == 0):
            continue
        tol = f"{tolerance_of(p, tolerances) * 100:g}%"
        if p.name in trimmed:
            t = trimmed[p.name]
            rows.append(
                {
                    "reference": f"{p.name}A",
                    "value": format_value(t.fixed_ohm, "ohm", 4),
                    "series": opts.resistors,
                    "tolerance": tol,
                    "role": f"{p.role}; fixed part of the trim",
                }
            )
            rows.append(
                {
                    "reference": f"{p.name}B",
                    "value": format_value(t.pot_ohm, "ohm", 4),
                    "series": "",
                    "tolerance": "",
                    "role": f"trimmer potentiometer (rheostat) setting {t.parameter}",
                }
            )
            continue
        rows.append(
            {
                "reference": p.name,
                "value": format_value(value, p.unit_kind, 4),
                "series": opts.series_for(p.kind),
                "tolerance": tol,
                "role": p.role,
            }
        )
    if design.needs_inverter:
        for name, value in INVERTER_PARTS.items():
            rows.append(
                {
                    "reference": name,
                    "value": format_value(value, "ohm", 4),
                    "series": opts.resistors,
                    "tolerance": f"{tolerances.get('R', 0) * 100:g}%",
                    "role": "unity inverter resistor",
                }
            )
    for st in topo.stages:
        rows.append(
            {"reference": st.amp, "value": "op-amp", "series": "", "tolerance": "", "role": f"amplifier: {st.role}"}
        )
    if design.needs_inverter:
        rows.append({"reference": "UINV", "value": "op-amp", "series": "", "tolerance": "", "role": "unity inverter"})
    return rows


UNITS = {"reference": "", "value": "as written (ohm, F)", "series": "", "tolerance": "%", "role": ""}


def bom_csv(rows: list[dict]) -> str:
    """``rows`` (from :func:`bom_rows`) as an ASCII-only CSV: header, units row, one row per part."""
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=COLUMNS, lineterminator="\n")
    writer.writeheader()
    writer.writerow(UNITS)
    for row in rows:
        out = {k: ascii_text(str(row.get(k, ""))) for k in COLUMNS}
        out["tolerance"] = out["tolerance"].rstrip("%").strip()
        writer.writerow(out)
    text = buf.getvalue()
    text.encode("ascii")  # raises on any non-ASCII character: a defect, not an input error
    return text
