"""Runs every analysis that exists on a built workspace (used by `liftlag demo`).

Each analysis package registers a runner here as it lands; the demo runs them in order.
"""

from __future__ import annotations

from pathlib import Path

def runners() -> list:
    """The analysis runners, in order: callables (settings, out_dir, console) -> facts for the manifest."""
    from .effects.api import run_campaigns
    from .timing.api import run_timing
    from .longrun.api import run_longrun

    return [run_campaigns, run_timing, run_longrun]


def run_all(settings, out: Path, console=None, timings: dict | None = None) -> list[str]:
    import time

    ran = []
    for runner in runners():
        started = time.perf_counter()
        runner(settings, out, console)
        if timings is not None:
            timings[runner.__name__] = round(time.perf_counter() - started, 2)
        ran.append(runner.__name__)
    return ran
