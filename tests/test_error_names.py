"""Issue 11 item 2: the computation names neutral settings in its errors; each front end names
them as its user wrote them (the command line's option, the case file's key). Common practice: an
error names the thing the way the reader gave it."""

from __future__ import annotations

import pytest

from convert.controller import from_expression
from convert.errors import InputError, UnrealizableError
from convert.digital import to_analog

ZERO_POLE_SOURCE = """
[case]
title = "firmware with a pole at z = 0"

[source.digital]
b = [0.5, 0.2]
a = [1.0, 0.0]
fs = "10 Hz"
method = "zoh"

[target.circuit]

[criteria]
band = ["0.01 Hz", "1 Hz"]
"""


def test_library_errors_name_settings_not_options():
    """From Python, the message names the setting in words and carries it in ``settings``."""
    with pytest.raises(InputError) as err:
        from_expression("(z - 0.5)/(z - 1)")
    assert "--" not in str(err.value) and "sample rate fs" in str(err.value)
    assert err.value.settings == ("sample rate fs",)
    digital = from_expression("1/z", fs_hz=10.0)
    with pytest.raises(UnrealizableError) as err:
        to_analog(digital, "zoh")
    assert "--" not in str(err.value)
    assert set(err.value.settings) == {"computation delay", "conversion method"}


def test_command_line_names_its_options(run_cli):
    """The same errors on the command line name the options that set them."""
    res = run_cli("show", "(z-0.5)/(z-1)")
    assert res.code == 2 and "sample rate fs (--fs)" in res.err
    res = run_cli("analog", "1/z", "--fs", "10Hz", "--method", "zoh")
    assert res.code == 2 and "conversion method (--method) backward-euler" in res.err
    assert "computation delay (--delay)" in res.err
    res = run_cli("compare", "(z-0.5)/(z-1)", "2/s")
    assert res.code == 2 and res.err.startswith("error: A:") and "(--fs)" in res.err


def test_case_file_names_its_keys(run_cli, tmp_path):
    """In a report, the same refusal names the case keys, never a command-line option (the line is
    capped at 400 characters, so its middle, which names the delay, may be left out)."""
    case = tmp_path / "zero_pole.toml"
    case.write_text(ZERO_POLE_SOURCE)
    res = run_cli("report", str(case), "--out", str(tmp_path / "out"))
    assert res.code == 2
    assert "conversion method (source.digital.method) backward-euler" in res.err
    assert "zero_pole.toml:5" in res.err and "--method" not in res.err and "--delay" not in res.err
