#!/usr/bin/env bash
# Timing benchmark: `liftlag timing` on an export whose workspace is already built.
#
#   bench/run_timing.sh EXPORT_DIR [extra liftlag timing options, e.g. --no-cox]
#
# Output tables in /tmp/timing_bench_out; everything else as bench/run_analysis.sh says.
exec "$(dirname "${BASH_SOURCE[0]}")/run_analysis.sh" timing "$@"
