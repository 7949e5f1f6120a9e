"""Shared fixtures: run the CLI in-process with a recording console."""

from __future__ import annotations

import io
from dataclasses import dataclass

import pytest


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
        console = Console(file=buffer, width=160, color_system=None, force_terminal=False, highlight=False)
        code = main(list(argv), console=console)
        captured = capsys.readouterr()
        return CliResult(code, buffer.getvalue() + captured.out, captured.err)

    return _run
