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
* it must not print or write files (the caller reports and writes);
* its result must pickle (numpy arrays and the project's dataclasses do).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable
from typing import Any

_TASKS: dict[int, tuple[Callable, tuple, dict]] = {}  # read by the forked process (set just before the fork)
_NEXT = [0]
_RUNNING: set = set()  # the Beside objects whose forked process has not been collected or stopped


def busy() -> int:
    """How many forked processes are still computing; the kernel leaves them a core each
    (:func:`robust.engine.run_batch`), since a fork-join parallel loop is as slow as its slowest thread."""
    return sum(1 for w in list(_RUNNING) if w._pending is not None and not w._pending.ready())


def _run(token: int):
    fn, args, kwargs = _TASKS[token]
    return fn(*args, **kwargs)


def forking() -> bool:
    """True where work is run in a forked process: Linux, unless ``ROBUST_BESIDE=0``."""
    return sys.platform == "linux" and os.environ.get("ROBUST_BESIDE", "1") != "0"


class Beside:
    """``fn(*args, **kwargs)`` started now in a forked process; :meth:`result` waits for its value.

    Use as a context manager (or call :meth:`close`) so that the process is stopped if the caller
    fails before asking for the result.  An exception raised by ``fn`` is raised again by
    :meth:`result`.
    """

    def __init__(self, fn: Callable, *args: Any, **kwargs: Any) -> None:
        self._call = (fn, args, kwargs)
        self._pool = None
        self._pending = None
        if forking():
            import multiprocessing

            token = _NEXT[0]
            _NEXT[0] += 1
            _TASKS[token] = self._call
            try:
                self._pool = multiprocessing.get_context("fork").Pool(1)
                self._pending = self._pool.apply_async(_run, (token,))
                _RUNNING.add(self)
            except OSError:  # no process could be started: the caller computes it when asked
                self.close()
            finally:
                _TASKS.pop(token, None)

    @property
    def forked(self) -> bool:
        """True while the work runs (or ran) in a forked process."""
        return self._pending is not None

    def result(self, timeout: float | None = None):
        """The value of the work (computed here if it was not forked); with ``timeout`` (seconds) a forked
        work still running then is stopped and ``TimeoutError`` raised."""
        if self._pending is None:
            fn, args, kwargs = self._call
            return fn(*args, **kwargs)
        import multiprocessing

        try:
            return self._pending.get(timeout)
        except multiprocessing.TimeoutError:
            raise TimeoutError(f"work run beside did not finish within {timeout} s") from None
        finally:
            self.close()

    def close(self) -> None:
        """Stop the forked process (if any); idempotent."""
        _RUNNING.discard(self)
        if self._pool is not None:
            self._pool.terminate()
            self._pool.join()
            self._pool = None

    def __enter__(self) -> Beside:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
