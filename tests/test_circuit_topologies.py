"""Topology catalog: design equations against lcapy's symbolic analysis of the same stage, the
stage-by-stage circuit solution against the hand-written transfer functions, and the API the
`card` command uses."""

from __future__ import annotations

import numpy as np
import pytest

from convert.circuit.topologies import TOPOLOGIES, get_topology, node_responses, output_node
from convert.controller import Controller, from_expression
from convert.errors import InputError, UnrealizableError

# lcapy netlists written by hand for the stage (op-amp: E element with gain Ad -> infinity).
LCAPY = {
    "pi-rc-feedback": ("R1 1 2\nR2 3 2\nC1 4 3\nE1 4 0 opamp 0 2 Ad", "2*(1+1/(0.3*s))"),
    "pd-limited": ("R1 1 2\nR3 1 3\nC1 3 2\nR2 4 2\nE1 4 0 opamp 0 2 Ad", "(0.5*s+1)/(0.05*s+1)"),
    "pid-single-amp": (
        "R1 1 2\nR3 1 3\nC1 3 2\nR2 5 2\nC2 4 5\nE1 4 0 opamp 0 2 Ad",
        "2*(1+1/(3*s))*(1+0.5*s)/(1+0.05*s)",
    ),
    "lead-lag-rc": ("R1 1 2\nC1 1 2\nR2 4 2\nC2 4 2\nE1 4 0 opamp 0 2 Ad", "0.5*(s+10)/(s+1)"),
    # multiple-feedback sections: node 3 is the middle node (a junction)
    "mfb-low-pass": ("R1 1 3\nC1 3 0\nR3 3 4\nR2 3 2\nC2 2 4\nE1 4 0 opamp 0 2 Ad", "2/((s+1)*(s+4))"),
    "mfb-band-pass": ("R1 1 3\nR2 3 0\nC1 3 2\nC2 3 4\nR3 2 4\nE1 4 0 opamp 0 2 Ad", "2*s/(s^2+2*s+4)"),
}


@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("name", sorted(LCAPY))
def test_design_equations_against_lcapy(name):
    """Source: lcapy symbolic nodal analysis (transfer from node 1 to the op-amp output, open-loop
    gain Ad -> oo), evaluated at the parts our design equations compute for a target: the result
    must be the target times the stage sign."""
    lcapy = pytest.importorskip("lcapy")
    import sympy

    text, expr = LCAPY[name]
    topo = get_topology(name)
    target = from_expression(expr)
    params = topo.fit(target)[0]
    free = {k: np.asarray(1e-6) for k in topo.free_parts}
    parts = {k: float(v) for k, v in topo.solve(params, free).items()}
    circuit = lcapy.Circuit(text)
    h = circuit.transfer(1, 0, 4, 0).limit("Ad", "oo")
    subs = {sympy.Symbol(k, positive=True): v for k, v in parts.items()}
    s = lcapy.s.sympy
    expr_s = h.sympy
    expr_s = expr_s.subs({sym: parts[str(sym)] for sym in expr_s.free_symbols if str(sym) in parts})
    num, den = sympy.fraction(sympy.together(expr_s))
    num_c = [float(c) for c in sympy.Poly(num, s).all_coeffs()]
    den_c = [float(c) for c in sympy.Poly(den, s).all_coeffs()]
    built = Controller.analog(num_c, den_c)
    f = np.logspace(-3, 3, 61)
    assert np.allclose(built.frequency_response(f), topo.sign * target.frequency_response(f), rtol=1e-9)
    assert subs  # parts were substituted by name


def test_stage_solution_matches_formulas():
    """Internal consistency: the stage-by-stage node solution (ideal op-amps) equals sign·F(s)
    from the hand-written coefficients for random part sets of every topology."""
    rng = np.random.default_rng(5)
    f = np.logspace(-2, 4, 40)
    for topo in TOPOLOGIES.values():
        parts = {
            p.name: (rng.uniform(1e3, 1e6, 4) if p.kind == "R" else rng.uniform(1e-9, 1e-5, 4)) for p in topo.parts
        }
        out = node_responses(topo, parts, f)[output_node(topo)]
        assert np.allclose(out, topo.sign * topo.response(parts, f), rtol=1e-10), topo.name


def test_fit_solve_round_trip_for_every_auto_topology():
    """The parts from the design equations give back the design quantities (parameters())."""
    cases = {
        "inverting-gain": "3",
        "integrator-rc": "1/(0.1*s)",
        "first-order-lag": "2/(0.01*s+1)",
        "pi-rc-feedback": "2*(1+1/(0.3*s))",
        "lead-lag-rc": "(0.5*s+1)/(0.05*s+1)",
        "pid-single-amp": "2*(1+1/(3*s))*(1+0.5*s)/(1+0.05*s)",
        "pid-parallel": "(s^2+0.2*s+1)/(s*(0.01*s+1))",
        "pd-limited": "(0.5*s+1)/(0.05*s+1)",
        "difference-error": "4.7",
    }
    for name, expr in cases.items():
        topo = get_topology(name)
        target = from_expression(expr)
        params = topo.fit(target)[0]
        free = {k: np.asarray(1e-6 if topo.part(k).kind == "C" else 1e4) for k in topo.free_parts}
        parts = {k: float(v) for k, v in topo.solve(params, free).items()}
        got = topo.parameters({k: np.asarray(v) for k, v in parts.items()})
        for k, v in params.items():
            assert np.isclose(float(got[k]), v, rtol=1e-12), (name, k)
        assert np.allclose(
            topo.controller_from_parts(parts).frequency_response([0.1, 1, 10]),
            abs(1) * target.frequency_response([0.1, 1, 10]),
            rtol=1e-9,
        ), name


def test_card_api():
    """The `card` command's entry: controller_from_parts returns +C(s); the sign is stated."""
    topo = get_topology("pi-rc-feedback")
    c = topo.controller_from_parts({"R1": "10k", "R2": 47e3, "C1": "1u"})
    assert topo.inverting and topo.sign == -1
    assert np.allclose(c.num, [47e3 * 1e-6 / (10e3 * 1e-6), 1 / (10e3 * 1e-6)])
    assert topo.stage_controller_from_parts({"R1": 10e3, "R2": 47e3, "C1": 1e-6}).num[0] < 0
    assert {"name", "description", "parts", "inverting"} <= set(vars(topo))


@pytest.mark.parametrize(
    "parts, match",
    [
        ({"R1": 0, "R2": 1e3, "C1": 1e-6}, "positive finite"),
        ({"R1": -5, "R2": 1e3, "C1": 1e-6}, "positive finite"),
        ({"R1": 1e3, "C1": 1e-6}, "needs a value for R2"),
        ({"R1": 1e3, "R2": 1e3, "C1": 1e-6, "R9": 1}, "no part 'R9'"),
    ],
)
def test_bad_parts(parts, match):
    with pytest.raises(InputError, match=match):
        get_topology("pi-rc-feedback").controller_from_parts(parts)


def test_unknown_topology_and_unrealizable_target():
    with pytest.raises(InputError, match="unknown topology"):
        get_topology("pid-magic")
    with pytest.raises(UnrealizableError, match="complex zeros"):
        get_topology("pid-single-amp").fit(from_expression("(s^2+0.2*s+1)/(s*(0.01*s+1))"))
    with pytest.raises(UnrealizableError, match="zero .* below the pole"):
        get_topology("pd-limited").fit(from_expression("(0.05*s+1)/(0.5*s+1)"))


def test_two_input_paths_reproduce_setpoint_weights():
    """Source: the 2-DOF PID structure u = kp(b r - y) + ki/s (r - y) + kd s/(tf s+1)(c r - y)
    as convert.pid.PidSettings defines it: both paths of the designed stage equal its
    to_controller() and setpoint_controller() exactly (before rounding)."""
    from convert.pid import PidSettings

    s = PidSettings(kp=2, ki=1, kd=0.5, tf=0.05, b=0.4, c=0.0)
    topo = get_topology("pid-two-input")
    params = topo.fit(s.to_controller(), settings=s)[0]
    parts = topo.solve(params, {"C1": np.asarray(1e-6), "C3": np.asarray(1e-6)})
    paths = topo.paths_from_parts({k: float(v) for k, v in parts.items() if np.isfinite(v) and v > 0})
    f = np.logspace(-2, 2, 30)
    assert np.allclose(paths["measurement"].frequency_response(f), s.to_controller().frequency_response(f))
    assert np.allclose(paths["setpoint"].frequency_response(f), s.setpoint_controller().frequency_response(f))


def test_every_file_in_the_folder_is_in_the_catalog():
    """Adding a topology is adding a file: every topology file in convert/circuit/topologies/
    defines one TOPOLOGY, and the registry lists each exactly once (common practice: a plugin
    folder and its registry must not drift apart)."""
    import importlib
    import pkgutil

    import convert.circuit.topologies as pkg

    helpers = {"model", "networks", "shared"}
    files = sorted(m.name for m in pkgutil.iter_modules(pkg.__path__) if m.name not in helpers)
    registered = sorted(m.__name__.rsplit(".", 1)[1] for m in pkg.CATALOG_ORDER)
    assert files == registered
    for name in files:
        topo = importlib.import_module(f"convert.circuit.topologies.{name}").TOPOLOGY
        assert TOPOLOGIES[topo.name] is topo
        assert topo.name.replace("-", "_") == name  # the file is named after the topology


@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize(
    "expr", ["(s^2+2*s+100)/(s^2+20*s+100)", "(0.5*s^2+30*s+400)/(s^2+4*s+400)", "-300/(s^2+6*s+900)"]
)
def test_biquad_design_equations_against_lcapy(expr):
    """Source: lcapy symbolic nodal analysis of the Tow–Thomas biquad with feed-forward (netlist written
    by hand here from the circuit in Tow 1968 / Thomas 1971 with Sedra & Smith's feed-forward paths;
    op-amps as E elements with gain Ad -> oo), at the parts our design equations give for targets of our
    own (a notch: negative s term via R7; a general biquad: positive s term via R6; a low-pass of
    negative gain). The result must be the stage sign times the target (times the target's sign)."""
    lcapy = pytest.importorskip("lcapy")
    import sympy

    topo = get_topology("tow-thomas")
    target = from_expression(expr)
    params = topo.fit(target)[0]
    parts = {k: float(v) for k, v in topo.solve(params, {"C1": np.asarray(1e-6)}).items()}
    # node 1 input, 4 output (U3); U1 integrator: inverting node 5, output 6; U2 inverter: 7 -> 8; U3: node 2
    elements = [
        ("R3", 4, 5),
        ("R8", 1, 5),
        ("C2", 6, 5),
        ("R4", 6, 7),
        ("R7", 1, 7),
        ("R5", 8, 7),
        ("R2", 8, 2),
        ("R6", 1, 2),
        ("C3", 1, 2),
        ("R1", 4, 2),
        ("C1", 4, 2),
    ]
    lines = [
        f"{name} {a} {b} {parts[name]!r}"
        for name, a, b in elements
        if not (parts[name] == float("inf") or parts[name] == 0.0)
    ]
    lines += ["E1 6 0 opamp 0 5 Ad", "E2 8 0 opamp 0 7 Ad", "E3 4 0 opamp 0 2 Ad"]
    h = lcapy.Circuit("\n".join(lines)).transfer(1, 0, 4, 0).limit("Ad", "oo")
    s = lcapy.s.sympy
    num, den = sympy.fraction(sympy.together(h.sympy))
    built = Controller.analog(
        [float(c) for c in sympy.Poly(num, s).all_coeffs()], [float(c) for c in sympy.Poly(den, s).all_coeffs()]
    )
    f = np.logspace(-1, 3, 81)
    sign = -1 if expr.startswith("-") else 1
    assert np.allclose(built.frequency_response(f), topo.sign * sign * target.frequency_response(f), rtol=1e-9)


def test_the_catalog_imports_none_of_its_users():
    """Layering (issue 11 item 4): the search, netlist writer, schematic, op-amp model, card reader and
    cascade use the topology definitions, never the reverse; read from each file's import statements."""
    import ast
    import pathlib

    import convert.circuit.topologies as pkg

    users = {
        "convert.circuit.design",
        "convert.circuit.netlist_out",
        "convert.circuit.schematic",
        "convert.circuit.opamp",
        "convert.circuit.card",
        "convert.circuit.cascade",
        "convert.circuit.tolerance",
        "convert.circuit.bom",
        "convert.circuit.buylist",
        "convert.circuit.trim",
        "convert.cli",
        "convert.report",
    }
    for path in pathlib.Path(pkg.__file__).parent.glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            names = (
                [a.name for a in node.names]
                if isinstance(node, ast.Import)
                else [node.module or ""]
                if isinstance(node, ast.ImportFrom)
                else []
            )
            for name in names:
                assert not any(name == u or name.startswith(u + ".") for u in users), (path.name, name)
