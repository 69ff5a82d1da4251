"""Time each step of `liftlag build` on one export: the check, then every panel (CPU and wall).

    python bench/profile_panels.py /work/benchdata/lines_1m/liftlag.toml [--sql FILE ...]

--sql times alternative versions of a panel's SQL (the file's stem names the panel it replaces)
against the current one, on the same staged data. CPU seconds are less disturbed than wall
seconds when the machine is shared.
"""

from __future__ import annotations

import argparse
import resource
import time
from pathlib import Path

from toolkit import checks, config, panels
from toolkit.contract import INPUT_TABLES
from toolkit.engine import connect, quote_ident as q


def cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("config")
    parser.add_argument("--sql", nargs="*", default=[])
    args = parser.parse_args()
    settings = config.load(args.config)
    con = connect(settings)
    w, c = time.perf_counter(), cpu()
    checks.validate(con, settings)
    print(f"{'check':<28} wall {time.perf_counter() - w:7.2f}  cpu {cpu() - c:7.2f}")
    for name in INPUT_TABLES:
        con.execute(f"CREATE OR REPLACE TEMP VIEW {q(name)} AS SELECT * FROM {q('accepted_' + name)}")
    for key, value in panels.parameters(settings).items():
        con.execute(f"SET VARIABLE {key} = ?", [value])
    alternatives = {Path(p).stem: Path(p).read_text() for p in args.sql}
    for name in panels.PANEL_ORDER:
        versions = [("", panels.panel_sql(name))] + ([(" (alt)", alternatives[name])] if name in alternatives else [])
        for label, sql in versions:
            w, c = time.perf_counter(), cpu()
            con.execute(f"CREATE OR REPLACE TEMP TABLE {q(name)} AS {sql}")
            print(f"{name + label:<28} wall {time.perf_counter() - w:7.2f}  cpu {cpu() - c:7.2f}")
    con.close()


if __name__ == "__main__":
    main()
