#!/usr/bin/env bash
# Spark local mode: a cold `liftlag build` (check + panels) of one generated export on the Spark
# engine, to see how the build time grows with the export and what part is the fixed start-up.
#
#   flock /work/benchdata/bench.lock bench/run_spark_build.sh EXPORT_DIR [THREADS] [DRIVER_MEMORY]
#
# The export's liftlag.toml is copied with [engine] kind = "spark", master = "local[THREADS]"
# (default 2), spark.driver.memory = DRIVER_MEMORY (default: Spark's own, 1g; in local mode the
# driver's heap is where all the work runs) and a fresh workspace under /tmp. Prints the 1-minute load average before the run,
# the session start-up (the engine logs it apart: "Spark session (...) started in N s"), wall
# seconds, and the CPU seconds and peak RSS of every process of the build's tree: the Python
# driver (`liftlag`) and the JVM (`java`) apart, measured by bench/tree_usage.py (it reaps the JVM,
# which the driver never waits for, so /usr/bin/time would leave it out). Wall times taken under
# load are upper bounds. The figures also go to $RESULT_JSON when set.
#
# Environment: LIFTLAG (default: liftlag beside this repository's .venv python), PYTHON (the
# interpreter that runs tree_usage.py, default the .venv's), RESULT_JSON (optional).
set -euo pipefail
[[ $# -ge 1 && -f "$1/liftlag.toml" ]] || { echo "usage: $0 EXPORT_DIR [THREADS]" >&2; exit 2; }
export_dir=$(cd "$1" && pwd)
threads=${2:-2}
driver_memory=${3:-}
here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
liftlag=${LIFTLAG:-$here/../.venv/bin/liftlag}
work=$(mktemp -d /tmp/liftlag_spark_bench.XXXXXX)
trap 'rm -rf "$work"' EXIT
# The config without its [engine] and [workspace] sections (they come last in generated configs),
# paths made absolute against the export folder.
sed -e '/^\[engine\]/,$d' -e '/^\[workspace\]/,/^\[/{/^\[workspace\]/d;/^path/d}' \
    -e "s#^path = \"\\(.*\\)\"#path = \"$export_dir/\\1\"#" "$export_dir/liftlag.toml" > "$work/liftlag.toml"
cat >> "$work/liftlag.toml" <<TOML
[workspace]
path = "$work/ws"
[engine]
kind = "spark"
master = "local[$threads]"
threads = $threads
TOML
[[ -n "$driver_memory" ]] && printf '[engine.spark_conf]\n"spark.driver.memory" = "%s"\n' "$driver_memory" >> "$work/liftlag.toml"
echo "export $(basename "$export_dir"), load average before: $(cut -d' ' -f1 /proc/loadavg), $(nproc) cores, local[$threads], driver memory ${driver_memory:-1g (default)}"
python=${PYTHON:-$here/../.venv/bin/python}
"$python" "$here/tree_usage.py" ${RESULT_JSON:+--json "$RESULT_JSON"} -- "$liftlag" build -c "$work/liftlag.toml" \
    > "$work/build.log" 2>&1 || {
    kept=$(mktemp /tmp/liftlag_spark_build_failed.XXXXXX.log); cp "$work/build.log" "$kept"
    grep -h -m 5 "Spark session\|Error\|error:" "$work/build.log" | cut -c1-400; grep -h "^tree:" "$work/build.log"
    echo "build failed; its whole log: $kept"; exit 1; }
grep -h "Spark session\|^tree:" "$work/build.log" || true
