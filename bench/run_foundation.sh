#!/usr/bin/env bash
# Foundation benchmark: a cold `liftlag build` (it checks the export and builds the panels in one
# pass over the files), then `liftlag check` alone, on one export directory.
#
#   bench/run_foundation.sh EXPORT_DIR [LABEL]
#
# EXPORT_DIR holds a liftlag.toml (as written by bench/generate_export.py). The workspace named in
# the config is removed first, so both steps start cold (the OS file cache is not dropped). Each
# step runs under /usr/bin/time -v; the script prints wall seconds and peak RSS (MB) per step and
# in total, and appends one row to bench/results.md. LABEL (optional) goes into the notes column.
#
# Environment: LIFTLAG (the command, default /work/venv/bin/liftlag or `liftlag` on PATH),
# PYTHON (to read the config, default /work/venv/bin/python), BENCH_LOG_DIR (step logs, default
# EXPORT_DIR/../logs), RESULTS (default bench/results.md next to this script).
set -uo pipefail

if [[ $# -lt 1 || ! -d "$1" ]]; then
  echo "usage: $0 EXPORT_DIR [LABEL]   (EXPORT_DIR must contain liftlag.toml)" >&2
  exit 2
fi
export_dir=$(cd "$1" && pwd)
label=${2:-}
config="$export_dir/liftlag.toml"
here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
results=${RESULTS:-$here/results.md}
python=${PYTHON:-/work/venv/bin/python}
if [[ -n "${LIFTLAG:-}" ]]; then
  liftlag=$LIFTLAG
elif [[ -x /work/venv/bin/liftlag ]]; then
  liftlag=/work/venv/bin/liftlag
else
  liftlag=$(command -v liftlag || true)
fi
timer=/usr/bin/time
[[ -f "$config" ]] || { echo "no liftlag.toml in $export_dir" >&2; exit 2; }
[[ -n "$liftlag" ]] || { echo "liftlag command not found (set LIFTLAG=...)" >&2; exit 2; }
[[ -x "$timer" ]] || { echo "$timer missing: apt-get update && apt-get install -y time" >&2; exit 2; }

# Workspace path and memory limit from the config; a relative workspace is taken relative to the
# config file's folder.
read -r workspace memory_limit threads < <("$python" - "$config" <<'EOF'
import sys, tomllib
from pathlib import Path
config = Path(sys.argv[1])
data = tomllib.loads(config.read_text())
ws = Path(data.get("workspace", {}).get("path", ".liftlag"))
ws = ws if ws.is_absolute() else config.parent / ws
engine = data.get("engine", {})
print(ws, engine.get("memory_limit", "none").replace(" ", ""), engine.get("threads", "default"))
EOF
)
lines=$("$python" -c 'import json,sys; print(json.load(open(sys.argv[1]))["lines"])' "$export_dir/generation.json" 2>/dev/null || echo "?")

log_dir=${BENCH_LOG_DIR:-$(dirname "$export_dir")/logs}
mkdir -p "$log_dir"
stamp=$(date -u +%Y%m%dT%H%M%SZ)
name=$(basename "$export_dir")

if [[ -e "$workspace" ]]; then
  case "$workspace" in
    "$export_dir"/*) rm -rf -- "$workspace" ;;
    *) echo "refusing to remove workspace outside the export dir: $workspace" >&2; exit 2 ;;
  esac
fi

# Run both steps on a frozen copy of toolkit/ and sql/, so edits to the tree during a long run
# cannot change the code half-way (the editable install yields to PYTHONPATH). BENCH_SNAPSHOT=0
# runs the tree as it is.
repo=$(cd "$here/.." && pwd)
commit=$(git -C "$repo" rev-parse --short HEAD 2>/dev/null || echo "?")
if [[ -n "$(git -C "$repo" status --porcelain -- toolkit sql 2>/dev/null)" ]]; then commit="$commit+uncommitted"; fi
if [[ "${BENCH_SNAPSHOT:-1}" != 0 ]]; then
  snapshot=$(mktemp -d /tmp/liftlag-bench-XXXXXX)
  trap 'rm -rf -- "$snapshot"' EXIT
  cp -r "$repo/toolkit" "$repo/sql" "$snapshot/"
  export PYTHONPATH="$snapshot${PYTHONPATH:+:$PYTHONPATH}"
  echo "== code snapshot of $repo ($commit) in $snapshot"
fi

# Other work on the machine slows the steps; its load is recorded in the notes.
load_before=$(cut -d' ' -f1 /proc/loadavg)

declare -A wall rss rc cpu
run_step() {  # run_step STEP: one liftlag subcommand under /usr/bin/time -v
  local step=$1 out="$log_dir/$name-$stamp-$1.log" tv="$log_dir/$name-$stamp-$1.time"
  echo "== liftlag $step -c $config  (log: $out)"
  "$timer" -v -o "$tv" "$liftlag" "$step" -c "$config" >"$out" 2>&1
  rc[$step]=$?
  # "Elapsed (wall clock) time (h:mm:ss or m:ss): 1:02.03" -> seconds
  wall[$step]=$(awk -F': ' '/Elapsed \(wall clock\)/ {n=split($2,p,":"); s=0; for(i=1;i<=n;i++) s=s*60+p[i]; printf "%.2f", s}' "$tv")
  rss[$step]=$(awk -F': ' '/Maximum resident set size/ {printf "%.0f", $2/1024}' "$tv")
  cpu[$step]=$(awk -F': ' '/(User|System) time \(seconds\)/ {s+=$2} END {printf "%.1f", s}' "$tv")
  printf '   exit %s, wall %s s, cpu %s s, peak RSS %s MB\n' "${rc[$step]}" "${wall[$step]:-?}" "${cpu[$step]:-?}" "${rss[$step]:-?}"
  if [[ ${rc[$step]} -ne 0 ]]; then
    echo "   last lines of the log:"; tail -n 15 "$out" | sed 's/^/   | /'
  fi
}

run_step build
run_step check

# `build` alone is check + panels from a cold workspace: that is the figure the targets are about.
total=${wall[build]:-0}
peak=${rss[build]:-0}
mem_gb=$(awk '/MemTotal/ {printf "%.0f", $2/1024/1024}' /proc/meminfo)
machine="$(nproc) cores / ${mem_gb} GB"
cell() {  # cell STEP: seconds, or the failure
  if [[ ${rc[$1]} -eq 0 ]]; then echo "${wall[$1]}"; else echo "failed (exit ${rc[$1]}) ${wall[$1]}"; fi
}
echo "== $name: lines $lines, memory_limit $memory_limit, threads $threads"
printf '   build (check + panels) %s s, peak RSS %s MB; check alone %s s\n' "$(cell build)" "$peak" "$(cell check)"

if [[ ! -f "$results" ]]; then
  cat >"$results" <<'EOF'
# Foundation benchmark results

Rows appended by `bench/run_foundation.sh` (cold workspace; see bench/README.md).

| date (UTC) | lines | memory_limit | check alone s | build s (check + panels) | total s | peak RSS MB (build) | machine | notes |
|---|---|---|---|---|---|---|---|---|
EOF
fi
notes="$name, threads $threads, cpu s build ${cpu[build]} / check ${cpu[check]}, load before $load_before, commit $commit${label:+, $label}"
printf '| %s | %s | %s | %s | %s | %s | %s | %s | %s |\n' \
  "$(date -u '+%Y-%m-%d %H:%M')" "$lines" "$memory_limit" "$(cell check)" "$(cell build)" "$total" "$peak" \
  "$machine" "$notes" >>"$results"
echo "   row appended to $results"
[[ ${rc[check]} -eq 0 && ${rc[build]} -eq 0 ]]
