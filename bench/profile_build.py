"""Where a cold `liftlag build` spends its time and memory: every step (reading each table, each
check rule, the accounting, the gates, writing, each panel, publishing) with wall and CPU seconds,
its rows, and the process's peak RSS when the step ended (a step that raises it is the one that
needed the memory).

    python bench/profile_build.py EXPORT_DIR/liftlag.toml [--reuse] [--top 12]

Runs `panels.build(force=True)` (the check included) in this process through the step watcher
of ``toolkit.steps``; with ``--reuse`` it runs `checks.run` first and then a build that reuses
that check (the `check` then `build` sequence). Wrap it in `flock /work/benchdata/bench.lock`
like every measurement. CPU seconds are less disturbed than wall seconds on a shared machine.
"""

from __future__ import annotations

import argparse
import resource
import time

from toolkit import checks, config, panels


def cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


class Recorder:
    """A step watcher that notes CPU seconds and the peak RSS at each step's end."""

    def __init__(self):
        self.rows = []
        self._cpu = 0.0

    def started(self, step) -> None:
        self._cpu = cpu()

    def finished(self, step) -> None:
        self.rows.append((step.name, step.seconds, cpu() - self._cpu, step.rows, peak_mb()))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("config")
    parser.add_argument("--reuse", action="store_true", help="check first, then a build that reuses it")
    parser.add_argument("--top", type=int, default=12, help="also list this many steps by CPU seconds")
    args = parser.parse_args()
    settings = config.load(args.config)
    recorder = Recorder()
    wall, c = time.perf_counter(), cpu()
    if args.reuse:
        checks.run(settings, watcher=recorder)
        result = panels.build(settings, watcher=recorder)
    else:
        result = panels.build(settings, force=True, watcher=recorder)
    total_wall, total_cpu = time.perf_counter() - wall, cpu() - c
    print(f"{'step':<44} {'wall s':>8} {'cpu s':>8} {'rows':>12} {'peak RSS MB':>12}")
    for name, seconds, used, rows, peak in recorder.rows:
        print(f"{name:<44} {seconds:8.2f} {used:8.2f} {'' if rows is None else f'{rows:,}':>12} {peak:12.0f}")
    print(f"{'total':<44} {total_wall:8.2f} {total_cpu:8.2f} {'':>12} {peak_mb():12.0f}")
    print(f"check reused: {result.check.reused_from is not None}")
    print(f"\ntop {args.top} steps by CPU seconds:")
    for name, seconds, used, _, _ in sorted(recorder.rows, key=lambda r: -r[2])[:args.top]:
        print(f"  {name:<42} {used:7.2f} s cpu ({used / total_cpu:5.1%})  {seconds:7.2f} s wall")


if __name__ == "__main__":
    main()
