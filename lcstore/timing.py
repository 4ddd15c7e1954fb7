"""Stage times of one request, sent back in a ``Server-Timing`` header.

``Server-Timing`` is the W3C Server Timing header (a list of
``name;dur=milliseconds`` entries; browsers' developer tools and HTTP clients
show it). A view opens a record with :func:`recording`; the code it calls marks
the end of each stage with :func:`mark`, a no-op when no record is open; and
:func:`header` gives each stage's duration since the mark before it, plus the
total. The marks live in a context variable, so they belong to the request's
own thread and need no argument passed down.
"""

from __future__ import annotations

import contextlib
import time
from collections.abc import Iterator
from contextvars import ContextVar

__all__ = ["header", "mark", "recording"]

Marks = list[tuple[str, float]]

_MARKS: ContextVar[Marks | None] = ContextVar("lcstore_timing_marks", default=None)


@contextlib.contextmanager
def recording() -> Iterator[Marks]:
    """Record the marks made inside the block; yields the list ``[(stage, perf_counter)]``."""
    marks: Marks = [("", time.perf_counter())]
    token = _MARKS.set(marks)
    try:
        yield marks
    finally:
        _MARKS.reset(token)


def mark(stage: str) -> None:
    """The stage ``stage`` (a token: letters, digits, ``-``) ends now."""
    marks = _MARKS.get()
    if marks is not None:
        marks.append((stage, time.perf_counter()))


def header(marks: Marks) -> str:
    """The ``Server-Timing`` value: each stage's milliseconds, then ``total``."""
    parts = [
        f"{stage};dur={(t - before) * 1000:.1f}"
        for (_, before), (stage, t) in zip(marks, marks[1:], strict=False)
    ]
    parts.append(f"total;dur={(marks[-1][1] - marks[0][1]) * 1000:.1f}")
    return ", ".join(parts)
