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


# ----------------------------------------------------------------------------- a helper forked early
def _square(x):
    return x * x


def _warm_nothing():
    pass


def test_standby_runs_a_task_sent_by_value():
    """A standby helper is forked before its task exists; the task reaches it by pickle and gives
    the value computed here, in another process when helpers are usable."""
    helper = sidework.standby(_warm_nothing)
    try:
        assert helper.start(_square, 7).result() == 49
        pid = helper.start(os.getpid).result()
        assert (pid != os.getpid()) == sidework.helpers_usable()
    finally:
        helper.close()


def test_standby_falls_back_here():
    """An argument that cannot be pickled, an error in the task, or a closed helper: computed
    here, and an error surfaces as without a helper."""
    helper = sidework.standby(_warm_nothing)
    try:
        assert helper.start(_square, np.float64(3.0)).result() == 9.0
        assert helper.start(lambda: 5).result() == 5  # a lambda cannot travel by pickle
        with pytest.raises(ZeroDivisionError):
            helper.start(divmod, 1, 0).result()
    finally:
        helper.close()
    assert helper.start(os.getpid).result() == os.getpid()


def test_standby_leaves_no_process_behind():
    """close() stops the helper even while it is still warming up (common practice: a command
    must not leave processes running after it exits)."""
    import multiprocessing
    import time

    helper = sidework.standby(_sleep_long)
    helper.close()
    deadline = time.monotonic() + 10
    while multiprocessing.active_children() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert multiprocessing.active_children() == []


def _sleep_long():
    import time

    time.sleep(30)


def test_alone_has_no_standby_helper():
    with sidework.alone():
        helper = sidework.standby(_warm_nothing)
        assert helper.start(os.getpid).result() == os.getpid()
        helper.close()


_PARENT = os.getpid()


def _killed_in_a_helper():
    import signal

    if os.getpid() != _PARENT:
        os.kill(os.getpid(), signal.SIGKILL)  # as the out-of-memory killer would
    return "computed here"


def test_a_helper_killed_mid_task_is_computed_here():
    """A helper killed without a word (SIGKILL, as by the out-of-memory killer) must not leave the
    caller waiting: the task runs here instead (the reviewer's report hung with no helper alive)."""
    assert sidework.start(_killed_in_a_helper).result() == "computed here"


def test_deferred_list_is_computed_once_on_first_read():
    """A Deferred is the list its getter gives, computed on the first read only (len, index,
    iteration, truth), then kept."""
    calls = []

    def get():
        calls.append(1)
        return [3, 4]

    d = sidework.Deferred(get)
    assert calls == []
    assert d and len(d) == 2 and d[0] == 3 and list(d) == [3, 4] and d == [3, 4]
    assert calls == [1]
    assert not sidework.Deferred(list)
