"""Work on a second core: run a pure function in a forked helper process while this one goes on.

:func:`start` hands ``fn(*args, **kwargs)`` to a one-process :class:`concurrent.futures.ProcessPoolExecutor`
whose process is forked at once (Linux), so the helper inherits the function and its arguments
as they are in memory — closures, controllers, results — and only the return value travels
back (pickled). :meth:`Pending.result` returns it. The helper runs the same code on the same
numbers, so what it returns is what this process would have computed: the figures, files and
verdict do not depend on whether a helper was used.

Where a helper cannot be used (no ``fork`` start method, one core, already inside a helper, or
inside :func:`alone`), or when the helper fails in any way (an exception, a killed process, a
result that cannot be pickled), the function runs here instead when its result is asked for, so
an error surfaces exactly as it would without helpers. A task must therefore be pure: what it
changes in its arguments is lost when it runs in a helper.

``loopshift batch`` runs its cases inside :func:`alone`: its workers already keep the cores busy.
"""

from __future__ import annotations

import contextlib
import contextvars
import itertools
import os
import sys
import time
from collections.abc import Callable, Iterator, Sequence
from typing import Any

_ALONE: contextvars.ContextVar[bool] = contextvars.ContextVar("loopshift_sidework_alone", default=False)
_TASKS: dict[int, tuple[Callable, tuple, dict]] = {}
_KEYS = itertools.count()
_IN_HELPER = False


@contextlib.contextmanager
def alone() -> Iterator[None]:
    """Within this block every :func:`start` runs its function in this process (no helper)."""
    token = _ALONE.set(True)
    try:
        yield
    finally:
        _ALONE.reset(token)


def helpers_usable() -> bool:
    """True when :func:`start` would use a helper process here."""
    if _ALONE.get() or _IN_HELPER or (os.cpu_count() or 1) < 2:
        return False
    import multiprocessing

    return "fork" in multiprocessing.get_all_start_methods()


def _run(key: int) -> tuple[str, Any]:
    """In the helper: run the task left in memory under ``key`` by the fork."""
    global _IN_HELPER
    _IN_HELPER = True  # a helper starts no helpers of its own
    fn, args, kwargs = _TASKS.pop(key)
    try:
        return "ok", fn(*args, **kwargs)
    except BaseException:  # the caller runs it again here, so the error surfaces as without a helper
        return "failed", None


class Pending:
    """The result of a task started by :func:`start` or :meth:`Standby.start` (computed here if
    the helper did not). ``owns_pool``: the helper is this task's alone and stops with it."""

    def __init__(self, fn: Callable, args: tuple, kwargs: dict, pool=None, future=None, owns_pool: bool = True):
        self._task = (fn, args, kwargs)
        self._pool, self._future = pool, future
        self._owns_pool = owns_pool

    def discard(self) -> None:
        """Give up the task (its helper is stopped; a later :meth:`result` would compute it here)."""
        if self._future is not None:
            _stop(self._pool)
            self._future = self._pool = None

    def _wait(self) -> tuple[str, Any]:
        """The helper's (status, value); "failed" when its process is gone without an answer (the
        pool's own watch can miss a helper killed mid-transfer, e.g. by the out-of-memory killer)."""
        from concurrent.futures import TimeoutError as FutureTimeout

        gone_since = None
        while True:
            try:
                return self._future.result(timeout=0.5)
            except FutureTimeout:
                procs = list((getattr(self._pool, "_processes", None) or {}).values())
                if any(p.is_alive() for p in procs):
                    gone_since = None
                    continue
                now = time.monotonic()
                gone_since = gone_since or now
                if now - gone_since > 2.0:  # no helper for a while and still no answer: it is not coming
                    return "failed", None

    def result(self) -> Any:
        if self._future is not None:
            status, value = "failed", None
            try:
                status, value = self._wait()
            except Exception:  # the helper died or its result could not be pickled
                status, value = "failed", None
            finally:
                if status != "ok":
                    _stop(self._pool)  # a helper that failed may have left the pool unable to shut down
                elif self._owns_pool:
                    self._pool.shutdown(wait=True)
                self._future = self._pool = None
            if status == "ok":
                self._task = None
                return value
        if self._task is None:
            raise RuntimeError("the result of this task was already taken")
        fn, args, kwargs = self._task
        self._task = None
        return fn(*args, **kwargs)


def start(fn: Callable, /, *args, **kwargs) -> Pending:
    """Start ``fn(*args, **kwargs)`` in a forked helper process (see the module docstring);
    ``.result()`` of the returned :class:`Pending` gives its value."""
    if not helpers_usable():
        return Pending(fn, args, kwargs)
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    key = next(_KEYS)
    _TASKS[key] = (fn, args, kwargs)
    for stream in (sys.stdout, sys.stderr):  # nothing buffered here is written twice by the helper
        with contextlib.suppress(Exception):
            stream.flush()
    try:
        pool = ProcessPoolExecutor(max_workers=1, mp_context=multiprocessing.get_context("fork"))
        future = pool.submit(_run, key)  # forks now: the helper holds the task
    except Exception:
        return Pending(fn, args, kwargs)
    finally:
        _TASKS.pop(key, None)
    return Pending(fn, args, kwargs, pool, future)


def _stop(pool) -> None:
    """Stop ``pool``'s processes now, whatever they are doing, and shut it down."""
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        with contextlib.suppress(Exception):
            proc.terminate()
    with contextlib.suppress(Exception):
        pool.shutdown(wait=True, cancel_futures=True)


def _warm(fn: Callable) -> None:
    fn()


def _call(fn: Callable, args: tuple) -> tuple[str, Any]:
    """In a standby helper: run ``fn(*args)`` (both sent by pickle)."""
    try:
        return "ok", fn(*args)
    except BaseException:  # the caller runs it again here, so the error surfaces as without a helper
        return "failed", None


class Standby:
    """A helper process forked now and warmed up while this process goes on (see :func:`standby`)."""

    def __init__(self, warm: Callable[[], None]):
        self._pool = None
        if not helpers_usable():
            return
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        for stream in (sys.stdout, sys.stderr):  # nothing buffered here is written twice by the helper
            with contextlib.suppress(Exception):
                stream.flush()
        try:
            pool = ProcessPoolExecutor(max_workers=1, mp_context=multiprocessing.get_context("fork"))
            pool.submit(_warm, warm)  # forks now
        except Exception:
            return
        self._pool = pool

    def start(self, fn: Callable, /, *args) -> Pending:
        """Send ``fn(*args)`` to the helper; ``fn`` must be a module-level function and ``args``
        picklable (they travel by pickle: the helper was forked before they existed). Without a
        helper, or if sending fails, ``.result()`` computes it here."""
        if self._pool is None:
            return Pending(fn, args, {})
        try:
            future = self._pool.submit(_call, fn, args)
        except Exception:
            return Pending(fn, args, {})
        return Pending(fn, args, {}, self._pool, future, owns_pool=False)

    def close(self) -> None:
        """Stop the helper (at once: whatever it still does is not wanted)."""
        if self._pool is not None:
            _stop(self._pool)
            self._pool = None


def standby(warm: Callable[[], None]) -> Standby:
    """Fork a helper process now that runs ``warm()`` (e.g. imports a library) while this process
    goes on, and later takes tasks by value (:meth:`Standby.start`); a task's arguments must be
    picklable, unlike :func:`start`'s. Where no helper can run, tasks run here. Call
    :meth:`Standby.close` when done; the helper never outlives its use."""
    return Standby(warm)


class Deferred(Sequence):
    """A list computed when it is first read: ``Deferred(get)`` calls ``get()`` (e.g. a
    :meth:`Pending.result`) on the first ``len``, index, iteration or truth test, and is that
    list from then on. Lets a caller go on with what does not need it (the report draws its
    figures while a helper finishes the sample-rate advice)."""

    def __init__(self, get: Callable[[], list]):
        self._get: Callable[[], list] | None = get
        self._value: list = []

    def _list(self) -> list:
        if self._get is not None:
            get, self._get = self._get, None
            self._value = list(get())
        return self._value

    def __getitem__(self, i):
        return self._list()[i]

    def __len__(self) -> int:
        return len(self._list())

    def __eq__(self, other) -> bool:
        return self._list() == list(other) if isinstance(other, Sequence) else NotImplemented

    __hash__ = None  # a list: not hashable

    def __repr__(self) -> str:
        return repr(self._list()) if self._get is None else "Deferred(not read yet)"
