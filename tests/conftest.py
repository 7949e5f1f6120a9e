"""Shared fixtures: run the CLI in-process with a recording console; hypothesis profiles."""

from __future__ import annotations

import io
import os
from dataclasses import dataclass

import pytest
from hypothesis import HealthCheck, settings

# The default run is reproducible (the same examples every time, so CI cannot flake on a lucky
# draw); LOOPSHIFT_HYPOTHESIS_PROFILE=explore draws fresh examples, for the big opt-in fuzz runs
# together with LOOPSHIFT_FUZZ_EXAMPLES=N.
settings.register_profile("default", derandomize=True, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("explore", derandomize=False, deadline=None, suppress_health_check=[HealthCheck.too_slow])
settings.load_profile(os.environ.get("LOOPSHIFT_HYPOTHESIS_PROFILE", "default"))


@dataclass
class CliResult:
    code: int
    out: str
    err: str


@pytest.fixture
def run_cli(capsys):
    """Call ``run_cli("show", "2*(1+1/(30*s))")`` -> CliResult(code, out, err)."""
    from rich.console import Console

    from convert.cli.main import main

    def _run(*argv: str) -> CliResult:
        buffer = io.StringIO()
        # markup off, as the real console (convert.cli.main._make_console)
        console = Console(
            file=buffer, width=160, color_system=None, force_terminal=False, highlight=False, markup=False
        )
        code = main(list(argv), console=console)
        captured = capsys.readouterr()
        return CliResult(code, buffer.getvalue() + captured.out, captured.err)

    return _run
