#!/usr/bin/env bash
# Foundation benchmark on one export directory: `liftlag check` then `liftlag build` from a cold
# workspace (the build reuses the fresh check and builds the panels), then the bare DuckDB job
# (bench/peers/bare_duckdb.py: orders, customer-week and gap tables straight from the Parquet) in
# the same sitting.
#
#   bench/run_foundation.sh EXPORT_DIR [LABEL]
#
# EXPORT_DIR holds a liftlag.toml (as written by bench/generate_export.py). The workspace named in
# the config is removed first, so the check starts cold (the OS file cache is not dropped). Each
# step runs under /usr/bin/time -v; the script prints wall and CPU seconds and peak RSS (MB) per
# step and in total, and appends one row to bench/results.md. LABEL (optional) goes into the notes.
#
# Environment: LIFTLAG (the command, default .venv/bin/liftlag of this clone or `liftlag` on PATH),
# PYTHON (to read the config and run the bare job, default the python beside LIFTLAG),
# BENCH_LOG_DIR (step logs, default EXPORT_DIR/../logs), RESULTS (default bench/results.md next to
# this script), BARE=0 to skip the bare job.
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
if [[ -n "${LIFTLAG:-}" ]]; then
  liftlag=$LIFTLAG
elif [[ -x "$here/../.venv/bin/liftlag" ]]; then
  liftlag=$here/../.venv/bin/liftlag
else
  liftlag=$(command -v liftlag || true)
fi
python=${PYTHON:-$(dirname "$liftlag")/python}
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

run_step check
run_step build

# The bare job: the same export's Parquet, three tables, no checks (what the targets compare with).
bare_wall="" bare_cpu="" bare_rss=""
if [[ "${BARE:-1}" != 0 && -d "$export_dir/transactions" ]]; then
  tv="$log_dir/$name-$stamp-bare.time" bare_db=$(mktemp -u /tmp/liftlag-bare-XXXXXX.duckdb)
  echo "== bare DuckDB job (bench/peers/bare_duckdb.py)"
  "$timer" -v -o "$tv" "$python" "$here/peers/bare_duckdb.py" "$export_dir" "$bare_db" --threads "${threads/default/2}" \
    >"$log_dir/$name-$stamp-bare.log" 2>&1
  rm -f -- "$bare_db" "$bare_db.wal"
  bare_wall=$(awk -F': ' '/Elapsed \(wall clock\)/ {n=split($2,p,":"); s=0; for(i=1;i<=n;i++) s=s*60+p[i]; printf "%.2f", s}' "$tv")
  bare_rss=$(awk -F': ' '/Maximum resident set size/ {printf "%.0f", $2/1024}' "$tv")
  bare_cpu=$(awk -F': ' '/(User|System) time \(seconds\)/ {s+=$2} END {printf "%.1f", s}' "$tv")
  printf '   wall %s s, cpu %s s, peak RSS %s MB\n' "$bare_wall" "$bare_cpu" "$bare_rss"
fi

# check then build from a cold workspace: the figure the targets are about.
total=$(awk -v a="${wall[check]:-0}" -v b="${wall[build]:-0}" 'BEGIN {printf "%.2f", a + b}')
peak=$(( ${rss[check]:-0} > ${rss[build]:-0} ? ${rss[check]:-0} : ${rss[build]:-0} ))
mem_gb=$(awk '/MemTotal/ {printf "%.0f", $2/1024/1024}' /proc/meminfo)
machine="$(nproc) cores / ${mem_gb} GB"
cell() {  # cell STEP: seconds, or the failure
  if [[ ${rc[$1]} -eq 0 ]]; then echo "${wall[$1]}"; else echo "failed (exit ${rc[$1]}) ${wall[$1]}"; fi
}
echo "== $name: lines $lines, memory_limit $memory_limit, threads $threads"
printf '   check %s s + build %s s = %s s, peak RSS %s MB\n' "$(cell check)" "$(cell build)" "$total" "$peak"
ratio=""
if [[ -n "$bare_wall" ]]; then
  ratio=$(awk -v t="$total" -v b="$bare_wall" 'BEGIN {if (b > 0) printf "%.1f", t / b}')
  echo "   bare job $bare_wall s (cpu $bare_cpu s, peak RSS $bare_rss MB): check + build is ${ratio}x"
fi

if [[ ! -f "$results" ]]; then
  cat >"$results" <<'EOF'
# Foundation benchmark results

Rows appended by `bench/run_foundation.sh` (cold workspace; see bench/README.md).

| date (UTC) | lines | memory_limit | check s | build s | total s | peak RSS MB | machine | notes |
|---|---|---|---|---|---|---|---|---|
EOF
fi
bare_note=${bare_wall:+, bare job $bare_wall s / cpu $bare_cpu s / $bare_rss MB (${ratio}x)}
notes="$name, threads $threads, cpu s check ${cpu[check]} / build ${cpu[build]}$bare_note, load before $load_before, commit $commit${label:+, $label}"
printf '| %s | %s | %s | %s | %s | %s | %s | %s | %s |\n' \
  "$(date -u '+%Y-%m-%d %H:%M')" "$lines" "$memory_limit" "$(cell check)" "$(cell build)" "$total" "$peak" \
  "$machine" "$notes" >>"$results"
echo "   row appended to $results"
[[ ${rc[check]} -eq 0 && ${rc[build]} -eq 0 ]]
