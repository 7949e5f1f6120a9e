"""Start-up weight: importing the computation and `loopshift --help` stay light.

Each check runs a fresh interpreter (subprocess) and inspects ``sys.modules`` there, so what
other tests imported does not matter. No timing is asserted (see bench/startup.py).
"""

from __future__ import annotations

import json
import re
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


# ------------------------------------------------------------------ layers (issue 11 item 2)
#: Front ends: the command line and the report writers (drawing, files). Everything else in the
#: package computes.
FRONT_ENDS = ("convert.cli", "convert.report", "convert.__main__")
#: What a computational module never loads when it is imported: drawing and terminal libraries, the
#: front ends, and the heavy libraries that are imported inside the function that needs them.
NEVER_AT_IMPORT = ("matplotlib", "rich", "schemdraw", "convert.cli", "convert.report") + (
    "control",
    "scipy",
    "sympy",
    "mpmath",
    "lcapy",
)


def _package_dir():
    import pathlib

    import convert

    return pathlib.Path(convert.__file__).parent


def computational_modules() -> list[str]:
    """Every module of the package outside the front ends, found by walking the folder (a new
    module is covered without being listed)."""
    root = _package_dir()
    names = []
    for path in sorted(root.rglob("*.py")):
        parts = ("convert",) + path.relative_to(root).with_suffix("").parts
        if parts[-1] == "__init__":
            parts = parts[:-1]
        name = ".".join(parts)
        if any(name == f or name.startswith(f + ".") for f in FRONT_ENDS):
            continue
        names.append(name)
    return names


def test_the_walk_finds_the_computation_and_leaves_out_the_front_ends():
    """The module list the layer checks use is the package's own folder: it holds the core, each
    computational sub-package, and no front-end module."""
    names = computational_modules()
    for expected in ("convert", "convert.values", "convert.expr", "convert.controller", "convert.pid"):
        assert expected in names
    for package in ("convert.digital", "convert.circuit", "convert.compare", "convert.evidence"):
        assert sum(n.startswith(package + ".") for n in names) >= 3, package
    assert "convert.circuit.schematic" in names and "convert.circuit.topologies.model" in names
    assert not [n for n in names if n.startswith(("convert.cli", "convert.report"))]


def test_every_computational_module_loads_no_drawing_terminal_front_end_or_heavy_library():
    """Issue 11 item 2 (layers): importing any computational module (the package walked, so a new
    module is covered) loads none of matplotlib, rich, schemdraw, convert.cli, convert.report, nor
    the heavy libraries imported inside functions (scipy, python-control, sympy, mpmath, lcapy).

    One fresh interpreter imports the modules one after another and, after each, looks for any
    forbidden module in ``sys.modules``: the first module that brings one in is named (a module
    imported later cannot hide it, since the check fails at the first)."""
    names = computational_modules()
    code = f"""
    import importlib, json, sys
    forbidden = {NEVER_AT_IMPORT!r}
    def loaded():
        return sorted(m for m in sys.modules if any(m == f or m.startswith(f + ".") for f in forbidden))
    assert not loaded(), loaded()
    bad = {{}}
    for name in {names!r}:
        importlib.import_module(name)
        now = loaded()
        if now:
            bad[name] = sorted({{m.split(".")[0] if not m.startswith("convert.") else ".".join(m.split(".")[:2]) for m in now}})
            break
    print("@@BAD@@" + json.dumps(bad))
    """
    proc = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    bad = json.loads(proc.stdout.rsplit("@@BAD@@", 1)[1])
    assert bad == {}, f"importing {bad} (a computational module) loaded a front end or heavy library"


def test_the_layer_check_can_fail():
    """Negative control: the same check sees a front end loaded (convert.report.schematic brings in
    convert.report), so a passing layer test is not a check that cannot fail."""
    code = """
    import sys
    import convert.report.schematic
    print("@@MODULES@@" + ",".join(sorted(m for m in sys.modules if m.startswith("convert.report"))))
    """
    proc = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "convert.report" in proc.stdout.rsplit("@@MODULES@@", 1)[1].split(",")


#: Calls that write files: ``open(..., "w"/"a"/"x"...)``, ``Path.write_text``/``write_bytes``,
#: ``savefig``, ``os.replace``/``rename``, ``shutil`` copies and ``tempfile`` files.
_WRITING_ATTRIBUTES = {"write_text", "write_bytes", "savefig", "mkstemp", "NamedTemporaryFile", "TemporaryDirectory"}


def _writes(tree) -> list[tuple[int, str]]:
    import ast

    found = []
    for node in ast.walk(tree):
        if not isinstance(node, ast.Call):
            continue
        func = node.func
        name = func.attr if isinstance(func, ast.Attribute) else func.id if isinstance(func, ast.Name) else ""
        if name in _WRITING_ATTRIBUTES:
            found.append((node.lineno, name))
        elif name == "open" and isinstance(func, ast.Attribute) and getattr(func.value, "id", "") == "os":
            flags = {n.attr for a in node.args[1:2] for n in ast.walk(a) if isinstance(n, ast.Attribute)}
            if flags & {"O_WRONLY", "O_RDWR", "O_CREAT", "O_APPEND", "O_TRUNC"}:
                found.append((node.lineno, "os.open(writing)"))
        elif name == "open":
            mode = (
                node.args[1] if len(node.args) > 1 else next((k.value for k in node.keywords if k.arg == "mode"), None)
            )
            if mode is None:
                continue  # read mode
            if not (isinstance(mode, ast.Constant) and isinstance(mode.value, str)):
                found.append((node.lineno, "open(mode computed)"))
            elif set(mode.value) & set("wax+"):
                found.append((node.lineno, f"open(..., {mode.value!r})"))
    return found


def _offenders(check) -> dict:
    """Computational module name -> what ``check`` (a function of a syntax tree) found in it."""
    import ast

    root = _package_dir()
    offenders = {}
    for name in computational_modules():
        rel = name.split(".")[1:]
        path = root.joinpath(*rel).with_suffix(".py") if rel else root / "__init__.py"
        if not path.exists():
            path = root.joinpath(*rel, "__init__.py")
        found = check(ast.parse(path.read_text(encoding="utf-8")))
        if found:
            offenders[name] = found
    return offenders


def test_computational_modules_write_no_files():
    """Issue 11 item 2: the computation never writes files (the report writers and the CLI do).
    Read from each computational module's syntax tree: no ``open`` in a writing mode, no
    ``write_text``/``write_bytes``/``savefig`` and no temporary files."""

    assert _offenders(_writes) == {}


def test_the_write_check_can_fail():
    """Negative control: the syntax check finds each writing call it is meant to find, and passes
    reading calls."""
    import ast

    text = textwrap.dedent(
        """
        open(p, "w"); open(p, mode="ab"); open(p, "r+"); open(p, m)
        p.write_text("x"); p.write_bytes(b"x"); fig.savefig(buf); os.open(p, os.O_WRONLY | os.O_CREAT)
        open(p); open(p, "rb"); p.read_text(); os.open(p, os.O_RDONLY | os.O_NONBLOCK)
        """
    )
    kinds = [k for _, k in _writes(ast.parse(text))]
    assert kinds == [
        "open(..., 'w')",
        "open(..., 'ab')",
        "open(..., 'r+')",
        "open(mode computed)",
        "write_text",
        "write_bytes",
        "savefig",
        "os.open(writing)",
    ]


_OPTION = re.compile(r"(?<![\w-])--[a-z]")
#: a whole command line such as ``loopshift code --pid-block`` names a command, not the front end's option
_COMMAND_LINE = re.compile(r"loopshift [a-z]+(?: [^\s,;)]+)* --[a-z][a-z-]*")
_NAMING_PARAMETERS = {"where", "key", "option", "spelling", "label", "field"}


def _strings(node) -> list[str]:
    import ast

    return [n.value for n in ast.walk(node) if isinstance(n, ast.Constant) and isinstance(n.value, str)]


def _option_names(tree) -> list[tuple[int, str]]:
    """Command-line option names (``--fs``) in what a module raises: the arguments of calls to
    ``...Error(...)``/``ctx.error(...)``, and the defaults of parameters that name a place."""
    import ast

    found = []
    for node in ast.walk(tree):
        texts: list[str] = []
        if isinstance(node, ast.Call):
            func = node.func
            name = func.attr if isinstance(func, ast.Attribute) else getattr(func, "id", "")
            if name.endswith("Error") or name == "error":
                texts = [t for a in [*node.args, *(k.value for k in node.keywords)] for t in _strings(a)]
        elif isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            args = node.args
            positional = args.posonlyargs + args.args
            pairs = list(zip(positional[len(positional) - len(args.defaults) :], args.defaults))
            pairs += [(a, d) for a, d in zip(args.kwonlyargs, args.kw_defaults) if d is not None]
            texts = [t for a, d in pairs if a.arg in _NAMING_PARAMETERS for t in _strings(d)]
        for text in texts:
            if _OPTION.search(_COMMAND_LINE.sub("", text)):
                found.append((node.lineno, text.strip()[:80]))
    return found


def test_computational_errors_name_no_command_line_option():
    """Issue 11 item 2: errors raised by the computation carry neutral keys and settings
    (``fs``, "conversion method"); each front end names them as its user wrote them (CLI option,
    case key). Read from the syntax tree of every computational module: no ``--option`` in the
    arguments of an error, nor in the default of a ``where``/``key``/``option`` parameter."""

    assert _offenders(_option_names) == {}


def test_the_option_check_can_fail():
    """Negative control: an option in an error's message, key or where, or in a naming parameter's
    default, is found; a whole command line and a neutral name are not."""
    import ast

    text = textwrap.dedent(
        """
        raise InputError("give it with --fs (Hz)", key="fs")
        raise InputError(f"bad {x}", key="--trim")
        e = ctx.error("k", "see --band")
        def f(words, where="--pid"): pass
        raise InputError("run loopshift code --pid-block", key="fs")
        raise InputError("x-- y and a--b", where="tolerance")
        def g(words, where="pid"): pass
        """
    )
    assert sorted(line for line, _ in _option_names(ast.parse(text))) == [2, 3, 4, 5]


def test_demo_computations_load_no_scipy():
    """The computation of every demo case without measured evidence (discretizations, loop
    checks, budgets, Monte Carlo) runs on numpy alone: the small-matrix exponential, balancing
    and zeros are convert.digital.smallmatrix / statespace, so scipy (0.2 s of import for
    scipy.linalg alone) is not loaded. The evidence case fits a sweep with scipy.optimize."""
    import pathlib

    cases = sorted(
        p for p in (pathlib.Path(__file__).parent.parent / "cases").glob("*.toml") if "evidence" not in p.name
    )
    assert len(cases) >= 5
    loaded = _loaded_after(
        f"""
        from convert.case import load_case
        from convert.compare.evaluate import evaluate_case
        for path in {[str(p) for p in cases]!r}:
            evaluate_case(load_case(path))
        """
    )
    assert "scipy" not in loaded
