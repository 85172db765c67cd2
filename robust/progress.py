"""Progress reporting: stage lines and progress bars on standard error.

Computational modules never print: they receive a progress object (or
``None``) and call it.  The command line makes one :class:`Progress` per run;
tests and library users may pass any ``callable(str)`` or ``None``.  The
helpers :func:`say` and :func:`bar` accept all three.
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Callable, Iterator
from typing import TextIO


class Progress:
    """Stage lines (``robust: ...``) and, on a terminal, tqdm bars with percentage and ETA.

    Parameters
    ----------
    enabled
        False for ``--quiet``: nothing is written.
    stream
        Where to write (standard error by default).
    """

    def __init__(self, *, enabled: bool = True, stream: TextIO | None = None) -> None:
        self.enabled = enabled
        self.stream = stream if stream is not None else sys.stderr
        self.stage = "starting"
        self._bar = None
        try:
            self.tty = bool(self.stream.isatty())
        except (AttributeError, ValueError):
            self.tty = False

    def __call__(self, message: str) -> None:
        self.stage = message
        if not self.enabled:
            return
        if self._bar is not None:  # a bar is showing: the message becomes its note
            self._bar.set_postfix_str(message[:60], refresh=False)
            return
        print(f"robust: {message}", file=self.stream, flush=True)

    @contextlib.contextmanager
    def bar(self, total: int | None, description: str, unit: str = "step") -> Iterator[Callable[[int], None]]:
        """A progress bar (only on a terminal and when enabled); yields ``advance(n)``."""
        self.stage = description
        if not (self.enabled and self.tty):
            self(description)
            yield lambda _n=1: None
            return
        from tqdm import tqdm

        with tqdm(
            total=total,
            desc=f"robust: {description}",
            unit=unit,
            file=self.stream,
            leave=False,
            dynamic_ncols=True,
            mininterval=0.5,
        ) as t:
            self._bar = t
            try:
                yield t.update
            finally:
                self._bar = None


def say(progress: Callable[[str], None] | None, message: str) -> None:
    """Report a stage through any progress object (``None`` is silent)."""
    if progress is not None:
        progress(message)


@contextlib.contextmanager
def bar(
    progress: Callable[[str], None] | None, total: int | None, description: str, unit: str = "step"
) -> Iterator[Callable[[int], None]]:
    """A bar through a :class:`Progress`; a plain callable gets one stage line; ``None`` nothing."""
    if isinstance(progress, Progress):
        with progress.bar(total, description, unit) as advance:
            yield advance
        return
    say(progress, description)
    yield lambda _n=1: None
