"""The helper process of convert.sidework: the same value as computing here, and every failure
falls back to computing here (common practice: a second core must not change a result)."""

from __future__ import annotations

import os

import numpy as np
import pytest

from convert import sidework


def _closure_sum(n):
    data = np.arange(n, dtype=float)
    return lambda: float(np.sum(np.sin(data)))  # a closure: reaches the helper by the fork, not by pickle


def _pid():
    return os.getpid()


def test_value_is_the_one_computed_here():
    fn = _closure_sum(10_000)
    assert sidework.start(fn).result() == fn()


def test_a_helper_process_runs_the_task_when_usable():
    pending = sidework.start(_pid)
    if sidework.helpers_usable():
        assert pending.result() != os.getpid()
    else:
        assert pending.result() == os.getpid()


def test_alone_computes_here():
    with sidework.alone():
        assert not sidework.helpers_usable()
        assert sidework.start(_pid).result() == os.getpid()


def test_an_error_surfaces_as_without_a_helper():
    def broken():
        raise ValueError("the task's own message")

    with pytest.raises(ValueError, match="the task's own message"):
        sidework.start(broken).result()


def test_an_unpicklable_result_is_computed_here():
    def gives_a_lambda():
        return lambda: 3

    assert sidework.start(gives_a_lambda).result()() == 3


def test_discard_then_result_computes_here():
    pending = sidework.start(_pid)
    pending.discard()
    assert pending.result() == os.getpid()
