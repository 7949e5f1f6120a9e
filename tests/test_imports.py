"""Start-up weight: importing the computation and `loopshift --help` stay light.

Each check runs a fresh interpreter (subprocess) and inspects ``sys.modules`` there, so what
other tests imported does not matter. No timing is asserted (see bench/startup.py).
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

HEAVY = ("matplotlib", "control", "scipy", "sympy", "schemdraw", "lcapy")


def _loaded_after(code: str) -> set[str]:
    script = textwrap.dedent(code) + textwrap.dedent(
        """
        import json, sys
        print("\\n@@MODULES@@" + json.dumps(sorted({m.split('.')[0] for m in sys.modules})))
        """
    )
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    marker = proc.stdout.rsplit("@@MODULES@@", 1)[1]
    return set(json.loads(marker))


def test_import_convert_is_light():
    """`import convert` loads neither matplotlib nor python-control (nor rich or numpy)."""
    loaded = _loaded_after("import convert")
    assert not loaded & {"matplotlib", "control", "rich", "numpy", "scipy"}


def test_core_modules_load_no_heavy_library():
    """The core (values, expressions, controller, PID) loads no heavy library and no rich:
    python-control only at Controller.to_control()/from_control()."""
    loaded = _loaded_after(
        """
        import convert.values, convert.expr, convert.controller, convert.pid
        from convert.pid import pid_from_words
        pid_from_words(["kc=2", "ti=30s", "td=5s", "n=10"]).to_controller().frequency_response([1.0])
        """
    )
    assert not loaded & set(HEAVY), loaded & set(HEAVY)
    assert "rich" not in loaded


def test_help_loads_neither_matplotlib_nor_control():
    """`python -m convert --help` (the same code as `loopshift --help`) loads neither
    matplotlib nor python-control, whatever sub-commands exist."""
    loaded = _loaded_after(
        """
        import runpy, sys, io, contextlib
        sys.argv = ["loopshift", "--help"]
        buffer = io.StringIO()
        try:
            with contextlib.redirect_stdout(buffer):
                runpy.run_module("convert", run_name="__main__")
        except SystemExit as exc:
            assert exc.code in (0, None), exc.code
        assert "usage:" in buffer.getvalue()
        """
    )
    assert "matplotlib" not in loaded
    assert "control" not in loaded


def test_show_loads_no_scipy_or_control():
    """`loopshift show --pid ...` needs numpy and rich only: no scipy, python-control or matplotlib."""
    loaded = _loaded_after(
        """
        import io
        from rich.console import Console
        from convert.cli.main import main
        code = main(["show", "--pid", "kc=2", "ti=30s", "td=5s", "n=10"], console=Console(file=io.StringIO()))
        assert code == 0
        """
    )
    assert not loaded & {"matplotlib", "control", "scipy"}, loaded & {"matplotlib", "control", "scipy"}


def test_computation_packages_load_no_plotting_terminal_or_control_library():
    """The computation (digital/, circuit/, compare/, case files) loads neither matplotlib nor rich
    nor python-control nor schemdraw at import (DESIGN: compute here, render in report/ and cli/)."""
    loaded = _loaded_after(
        """
        import convert.digital, convert.circuit.design, convert.circuit.tolerance, convert.circuit.netlist
        import convert.circuit.mna, convert.circuit.card, convert.circuit.netlist_out, convert.circuit.bom
        import convert.compare.evaluate, convert.compare.loop, convert.compare.budget, convert.case
        """
    )
    assert not loaded & {"matplotlib", "rich", "control", "schemdraw", "sympy", "lcapy"}
