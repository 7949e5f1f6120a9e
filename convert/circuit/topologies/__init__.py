"""The catalog of op-amp stage topologies: one small definition per file, collected here in order.

Each topology file in this folder defines one :class:`~convert.circuit.topologies.model.Topology`
named ``TOPOLOGY``: its parts, its op-amp stages, its transfer function in terms of the parts
(coefficients vectorized over part arrays), its design equations (``fit`` and ``solve``) and what it
represents. :mod:`~convert.circuit.topologies.model` says what a topology is (the sign convention,
the two-input stages, the stage-by-stage circuit solution :func:`node_responses`);
:mod:`~convert.circuit.topologies.networks` holds the resistor/capacitor networks and stages the
circuits are drawn from; :mod:`~convert.circuit.topologies.shared` the design helpers several
topologies share.

Adding a topology is adding a file here (plus its test) and its module to :data:`CATALOG_ORDER`.
The search, netlist writer, schematic, op-amp model and card reader use these definitions; nothing
in this folder imports them.
"""

from __future__ import annotations

from convert.circuit.topologies import (
    difference_error,
    first_order_lag,
    integrator_rc,
    inverting_gain,
    lead_lag_rc,
    mfb_band_pass,
    mfb_low_pass,
    pd_limited,
    pi_rc_feedback,
    pid_parallel,
    pid_single_amp,
    pid_two_input,
    tow_thomas,
    unity_inverter,
)
from convert.circuit.topologies.model import (
    TargetShape,
    Topology,
    analyse_target,
    node_responses,
    output_node,
    polyval_jw,
)
from convert.circuit.topologies.networks import (
    GROUND,
    C,
    Junction,
    R,
    Parallel,
    Part,
    Series,
    Stage,
    impedance,
    is_open,
    network_parts,
)
from convert.circuit.topologies.shared import RSUM, pid_parameters_from_coefficients
from convert.errors import InputError

CATALOG_ORDER = (
    unity_inverter,
    inverting_gain,
    integrator_rc,
    first_order_lag,
    pi_rc_feedback,
    pd_limited,
    lead_lag_rc,
    mfb_low_pass,
    mfb_band_pass,
    pid_single_amp,
    pid_parallel,
    tow_thomas,
    pid_two_input,
    difference_error,
)
"""The topology modules in catalog order: by amplifiers, then parts (single-input stages first)."""

TOPOLOGIES: dict[str, Topology] = {m.TOPOLOGY.name: m.TOPOLOGY for m in CATALOG_ORDER}
"""Catalog name -> Topology, in :data:`CATALOG_ORDER`."""

# Order that --topology auto tries (two-input and error stages are never picked automatically).
AUTO_ORDER = (
    "inverting-gain",
    "integrator-rc",
    "first-order-lag",
    "pi-rc-feedback",
    "lead-lag-rc",
    "pid-single-amp",
    "pid-parallel",
)


def get_topology(name: str, *, key: str = "topology") -> Topology:
    """The catalog entry ``name``; an unknown name is an InputError listing the catalog."""
    if isinstance(name, str) and name.strip().lower() in TOPOLOGIES:
        return TOPOLOGIES[name.strip().lower()]
    raise InputError(f"unknown topology {name!r}; the catalog has {', '.join(TOPOLOGIES)}", key=key)


__all__ = [
    "AUTO_ORDER",
    "C",
    "CATALOG_ORDER",
    "GROUND",
    "Junction",
    "Parallel",
    "Part",
    "R",
    "RSUM",
    "Series",
    "Stage",
    "TOPOLOGIES",
    "TargetShape",
    "Topology",
    "analyse_target",
    "get_topology",
    "impedance",
    "is_open",
    "network_parts",
    "node_responses",
    "output_node",
    "pid_parameters_from_coefficients",
    "polyval_jw",
]
