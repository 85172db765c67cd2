"""Work run beside the caller: a computation in a forked process whose result is collected later.

The dossier's stages that use one core (LMI solves in cvxpy, the linear check in numpy) run in a
second process while the main process runs the simulations; while such a process computes, the
compiled kernel runs on one thread fewer (a fork-join loop waits for its slowest thread, so
sharing a core would slow it down more than the core is worth), so every core does one job.
The forked process runs the same code on the same inputs, so its result is exactly what the
caller would have computed itself; on a platform without ``fork`` (or with ``ROBUST_BESIDE=0``)
the work runs in the caller when its result is asked for.

Rules for work given to :class:`Beside`:

* it must not run the compiled kernel (:mod:`robust.engine`): the OpenMP runtime is not safe in a
  process forked after it started; the engine refuses such a call;
* a library with its own thread pool must run on one thread there (the LMI solver Clarabel is set
  to ``max_threads = 1`` for this reason: its pool, once started, does not survive a fork);
* it must not print or write files (the caller reports and writes), nor start processes of its own
  (the forked process is a daemon, which may have none);
* its result must pickle (numpy arrays and the project's dataclasses do).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from typing import Any

_RUNNING: set = set()  # the Beside objects whose forked process has not been collected or stopped


def busy() -> int:
    """How many forked processes are still computing; the kernel leaves them a core each
    (:func:`robust.engine.run_batch`), since a fork-join parallel loop is as slow as its slowest thread."""
    return sum(1 for w in list(_RUNNING) if w._computing())


def forking() -> bool:
    """True where work is run in a forked process: Linux, unless ``ROBUST_BESIDE=0``."""
    return sys.platform == "linux" and os.environ.get("ROBUST_BESIDE", "1") != "0"


def _child(conn, fn: Callable, args: tuple, kwargs: dict) -> None:
    """The forked process: compute, send ``(True, value)`` or ``(False, exception)``, exit."""
    try:
        out = (True, fn(*args, **kwargs))
    except BaseException as exc:  # noqa: BLE001 - every failure goes back to the caller
        out = (False, exc)
    try:
        conn.send(out)
    except Exception as exc:  # noqa: BLE001 - a value or an error that does not pickle
        conn.send((False, RuntimeError(f"the result of work run beside could not be sent back: {exc}")))
    finally:
        conn.close()


class Beside:
    """``fn(*args, **kwargs)`` started now in a forked process; :meth:`result` waits for its value.

    Use as a context manager (or call :meth:`close`) so that the process is stopped if the caller
    fails before asking for the result.  An exception raised by ``fn`` is raised again by
    :meth:`result`; a process that dies without a result (killed, out of memory) raises
    ``RuntimeError`` there rather than leaving the caller waiting.
    """

    def __init__(self, fn: Callable, *args: Any, **kwargs: Any) -> None:
        self._call = (fn, args, kwargs)
        self._process = None
        self._conn = None
        if forking():
            import multiprocessing

            ctx = multiprocessing.get_context("fork")
            receive, send = ctx.Pipe(duplex=False)
            try:
                # the arguments reach the forked process in its copy of this one's memory: nothing is pickled
                self._process = ctx.Process(target=_child, args=(send, fn, args, kwargs), daemon=True)
                self._process.start()
            except OSError:  # no process could be started: the caller computes it when asked
                self._process = None
                receive.close()
            else:
                self._conn = receive
                _RUNNING.add(self)
            finally:
                send.close()

    @property
    def forked(self) -> bool:
        """True while the work runs (or ran) in a forked process."""
        return self._process is not None

    def _computing(self) -> bool:
        return self._conn is not None and self._process.is_alive() and not self._conn.poll()

    def result(self, timeout: float | None = None):
        """The value of the work (computed here if it was not forked); with ``timeout`` (seconds) a forked
        work still running then is stopped and ``TimeoutError`` raised."""
        if self._process is None:
            fn, args, kwargs = self._call
            return fn(*args, **kwargs)
        if self._conn is None:
            raise RuntimeError("the result of this work was collected already, or the work was stopped")
        try:
            if not self._conn.poll(timeout):
                raise TimeoutError(f"work run beside did not finish within {timeout} s")
            try:
                ok, value = self._conn.recv()
            except EOFError:
                raise RuntimeError(
                    f"work run beside ended without a result (exit code {self._process.exitcode}; "
                    "killed or out of memory?)"
                ) from None
        finally:
            self.close()
        if ok:
            return value
        raise value

    def close(self) -> None:
        """Stop the forked process (if any); idempotent."""
        _RUNNING.discard(self)
        if self._conn is not None:
            self._conn.close()
            self._conn = None
        if self._process is not None:
            if self._process.is_alive():
                self._process.terminate()
            self._process.join()

    def __enter__(self) -> Beside:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
