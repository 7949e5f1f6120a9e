"""The public API: `convert.__all__`, its docstring examples and docs/python.md run as doctests.

The figures in the examples are checked by hand where they are stated: a Tustin PI has
b0 = Kp + Ki*T/2 and b1 = -Kp + Ki*T/2 (bilinear substitution s = 2/T (z-1)/(z+1), common
practice); the inverting PI stage R1, R2 + C1 has Kp = R2/R1 and Ki = 1/(R1*C1) (common practice).
"""

from __future__ import annotations

import doctest
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.mark.parametrize("module", ["convert", "convert.api", "convert.case", "convert.pipeline"])
def test_docstring_examples_run(module):
    result = doctest.testmod(importlib.import_module(module), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0, result


def test_python_page_runs(monkeypatch):
    """docs/python.md: the three jobs from Python, each example executed."""
    monkeypatch.chdir(ROOT)
    result = doctest.testfile(str(ROOT / "docs" / "python.md"), module_relative=False, optionflags=doctest.ELLIPSIS)
    assert result.attempted >= 8 and result.failed == 0, result


def test_every_public_name_resolves_and_is_documented():
    import convert

    for name in convert.__all__:
        value = getattr(convert, name)
        if callable(value):
            assert (value.__doc__ or "").strip(), f"{name} has no docstring"
    with pytest.raises(AttributeError):
        convert.no_such_name  # noqa: B018


def test_tustin_pi_coefficients_by_hand():
    """b0 = Kp + Ki*T/2, b1 = -Kp + Ki*T/2, a = [1, -1] (bilinear map, common practice)."""
    import convert

    kp, ki, t = 2.0, 2.0 / 30.0, 0.1
    fw = convert.discretize(convert.from_expression("2*(1 + 1/(30*s))"), 1 / t, "tustin")
    assert fw.controller.b == pytest.approx([kp + ki * t / 2, -kp + ki * t / 2], rel=1e-12)
    assert fw.controller.a == pytest.approx([1.0, -1.0], abs=1e-15)


def test_case_from_dict_gets_the_case_file_checks():
    """A dict case is validated like a TOML file: unknown keys refused, errors name the key."""
    import convert

    with pytest.raises(convert.InputError, match=r"^pump-7: criteria.maximum_gain_error: unknown key"):
        convert.case_from_dict(
            {
                "source": {"expression": "2/s"},
                "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
                "criteria": {"band": ["1 mHz", "0.1 Hz"], "maximum_gain_error": 1},
            },
            name="pump-7",
        )
    with pytest.raises(convert.InputError, match="expected a dict"):
        convert.case_from_dict("source = 1")


def test_case_from_dict_equals_the_same_case_from_toml(tmp_path):
    """The same content as TOML text and as a dict gives the same case (same verdict figures)."""
    import convert

    text = """
[source]
expression = "2*(1 + 1/(30*s))"
[target.digital]
fs = "10 Hz"
methods = ["tustin"]
[criteria]
band = ["1 mHz", "0.1 Hz"]
max_gain_error_db = 0.5
"""
    (tmp_path / "c.toml").write_text(text)
    from_file = convert.load_case(tmp_path / "c.toml")
    from_dict = convert.case_from_dict(
        {
            "source": {"expression": "2*(1 + 1/(30*s))"},
            "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
            "criteria": {"band": ["1 mHz", "0.1 Hz"], "max_gain_error_db": 0.5},
        },
        name="c",
        base_dir=tmp_path,
    )
    from dataclasses import replace

    assert replace(from_file.source, where="") == replace(from_dict.source, where="")  # where: file:line vs name
    assert replace(from_file.digital, where="") == replace(from_dict.digital, where="")
    assert from_file.criteria == from_dict.criteria
    a, b = convert.evaluate(from_file), convert.evaluate(from_dict)
    assert [j.value for j in a.verdict.judgements] == [j.value for j in b.verdict.judgements]
