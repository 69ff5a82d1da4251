#!/usr/bin/env bash
# One analysis benchmark: `liftlag ANALYSIS` (timing, longrun, ...) on an export whose workspace is
# already built. bench/run_timing.sh and bench/run_longrun.sh call it.
#
#   bench/run_analysis.sh ANALYSIS EXPORT_DIR [extra options of liftlag ANALYSIS]
#
# EXPORT_DIR holds a liftlag.toml (as written by bench/generate_export.py) and a workspace built
# by `liftlag build`. The command runs under /usr/bin/time -v; the script prints the load before
# the run, wall seconds, CPU seconds and peak RSS (MB) of the `liftlag` process, and the last
# lines of its log. It runs on a frozen copy of toolkit/ and sql/ (BENCH_SNAPSHOT=0: the tree as
# it is); the commit shown gets "+uncommitted" when they had local changes. Output tables go to
# /tmp/ANALYSIS_bench_out (removed first; set OUT to change).
#
# When the analysis stops because the workspace needs a build, run
#   /work/venv/bin/liftlag build -c EXPORT_DIR/liftlag.toml
# and start again (the build is not timed here; bench/run_foundation.sh times it).
#
# Environment: LIFTLAG (the command, default /work/venv/bin/liftlag), OUT, BENCH_LOG_DIR (the
# log, default EXPORT_DIR/../logs).
set -uo pipefail

analysis=${1:-}
shift || true
if [[ -z "$analysis" || $# -lt 1 || ! -d "$1" ]]; then
  echo "usage: $0 ANALYSIS EXPORT_DIR [options of liftlag ANALYSIS]   (EXPORT_DIR must contain liftlag.toml)" >&2
  exit 2
fi
export_dir=$(cd "$1" && pwd)
shift
config="$export_dir/liftlag.toml"
liftlag=${LIFTLAG:-/work/venv/bin/liftlag}
out=${OUT:-/tmp/${analysis}_bench_out}
timer=/usr/bin/time
[[ -f "$config" ]] || { echo "no liftlag.toml in $export_dir" >&2; exit 2; }
[[ -x "$timer" ]] || { echo "$timer missing: apt-get update && apt-get install -y time" >&2; exit 2; }

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
commit=$(git -C "$here/.." rev-parse --short HEAD 2>/dev/null || echo "?")
if [[ -n "$(git -C "$here/.." status --porcelain -- toolkit sql 2>/dev/null)" ]]; then commit="$commit+uncommitted"; fi
lines=$(/work/venv/bin/python -c 'import json,sys; print(json.load(open(sys.argv[1]))["lines"])' \
        "$export_dir/generation.json" 2>/dev/null || echo "?")
log_dir=${BENCH_LOG_DIR:-$(dirname "$export_dir")/logs}
mkdir -p "$log_dir"
stamp=$(date -u +%Y%m%dT%H%M%SZ)
log="$log_dir/${analysis}_$(basename "$export_dir")_${stamp}.log"
case "$out" in /tmp/*) rm -rf -- "$out" ;; esac

# Run on a frozen copy of toolkit/ and sql/ (as bench/run_foundation.sh does), so edits to the
# tree during the run cannot change the code half-way. BENCH_SNAPSHOT=0 runs the tree as it is.
if [[ "${BENCH_SNAPSHOT:-1}" != 0 ]]; then
  snapshot=$(mktemp -d /tmp/liftlag-bench-XXXXXX)
  trap 'rm -rf -- "$snapshot"' EXIT
  cp -r "$here/../toolkit" "$here/../sql" "$snapshot/"
  export PYTHONPATH="$snapshot${PYTHONPATH:+:$PYTHONPATH}"
fi

echo "== date (UTC):  $(date -u '+%Y-%m-%d %H:%M:%S')"
echo "== export:      $export_dir ($lines order lines)"
echo "== analysis:    liftlag $analysis"
echo "== options:     ${*:-(none)}"
echo "== commit:      $commit"
echo "== loadavg:     $(cat /proc/loadavg)"
"$timer" -v "$liftlag" "$analysis" -c "$config" --out "$out" "$@" >"$log" 2>&1
rc=$?
wall=$(awk -F': ' '/Elapsed \(wall clock\)/ {n=split($2,a,":"); s=0; for(i=1;i<=n;i++) s=s*60+a[i]; printf "%.1f", s}' "$log")
user=$(awk -F': ' '/User time \(seconds\)/ {print $2}' "$log")
sys=$(awk -F': ' '/System time \(seconds\)/ {print $2}' "$log")
rss=$(awk -F': ' '/Maximum resident set size/ {printf "%.0f", $2/1024}' "$log")
echo "== exit:        $rc"
echo "== wall s:      $wall"
echo "== cpu s:       user $user + sys $sys"
echo "== peak RSS MB: $rss"
echo "== log:         $log"
echo "-- last lines of the log (before the time report):"
sed -n '/Command being timed/q;p' "$log" | tail -n 25
if grep -qi "needs a build\|liftlag build" "$log" && [[ $rc -ne 0 ]]; then
  echo "!! the workspace needs a build: /work/venv/bin/liftlag build -c $config" >&2
fi
exit "$rc"
