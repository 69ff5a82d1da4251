#!/usr/bin/env bash
# Long-run benchmark: `liftlag longrun` (every section toolkit.longrun.api.SECTIONS lists) on an
# export whose workspace is already built.
#
#   bench/run_longrun.sh EXPORT_DIR [extra liftlag longrun options, e.g. --through 2026Q4]
#
# Output tables in /tmp/longrun_bench_out; everything else as bench/run_analysis.sh says.
exec "$(dirname "${BASH_SOURCE[0]}")/run_analysis.sh" longrun "$@"
