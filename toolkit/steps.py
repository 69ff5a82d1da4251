"""Timings of the steps of one `check` or `build`: name, seconds and rows (where known).

``checks.validate`` and ``panels.build`` time each long step (reading a table, each check rule,
each panel, writing the results) with :meth:`Timings.step`; the records go into the workspace's
``manifest.json`` and the build record (``meta.build`` in ``panels.duckdb``). A *watcher* (the
terminal's progress display, ``toolkit.console``) is told when each step starts and ends.
"""

from __future__ import annotations

import time
from contextlib import contextmanager
from dataclasses import dataclass, field


@dataclass
class Step:
    """One timed step. ``rows``: the rows it read, found or wrote (None when not counted)."""

    name: str
    seconds: float = 0.0
    rows: int | None = None
    _started: float = field(default=0.0, repr=False, compare=False)

    def record(self) -> dict:
        return {"step": self.name, "seconds": self.seconds, "rows": self.rows}


class Timings:
    """The steps of one command, in the order they ran.

    Parameters
    ----------
    watcher : object, optional
        With ``started(step)`` and ``finished(step)`` methods (each may be absent).
    """

    def __init__(self, watcher=None):
        self.steps: list[Step] = []
        self.watcher = watcher

    def _tell(self, event: str, step: Step) -> None:
        call = getattr(self.watcher, event, None)
        if call is not None:
            call(step)

    @contextmanager
    def step(self, name: str, rows: int | None = None):
        """Time the block as step ``name``; the block may set ``step.rows``."""
        current = self.begin(name, rows)
        try:
            yield current
        finally:
            self.end(current)

    def begin(self, name: str, rows: int | None = None) -> Step:
        """Start step ``name`` (``end`` it when done; a step not ended is not recorded)."""
        current = Step(name, rows=rows)
        current._started = time.perf_counter()
        self._tell("started", current)
        return current

    def end(self, current: Step, rows: int | None = None) -> Step:
        current.seconds = round(time.perf_counter() - current._started, 3)
        if rows is not None:
            current.rows = rows
        self.steps.append(current)
        self._tell("finished", current)
        return current

    def records(self) -> list[dict]:
        return [s.record() for s in self.steps]

    def seconds(self) -> float:
        return round(sum(s.seconds for s in self.steps), 3)


class TextWatcher:
    """A watcher that passes each step's name, as it starts, to a callable taking one text
    (the older ``progress`` callbacks)."""

    def __init__(self, say, prefix: str = ""):
        self.say, self.prefix = say, prefix

    def started(self, step: Step) -> None:
        self.say(f"{self.prefix}{step.name}")
