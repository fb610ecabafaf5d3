#!/usr/bin/env bash
# Where a run's memory peaks: runs COMMAND and, every quarter second until it ends, prints the
# seconds since its start, its resident memory and its peak so far (KiB, from
# /proc/PID/status) and the files beside DB (the edit log, the element state's and node index's
# runs and next generations), so a peak can be matched to the spill or merge under way.
# Usage: bench/rss_timeline.sh DB COMMAND...   e.g.
#   bench/rss_timeline.sh /tmp/x.db taskset -c 0 target/release/hexvigil --quiet ingest --db /tmp/x.db FILES...
# (taskset execs the binary, so the process sampled is hexvigil itself.)
set -euo pipefail
db=$1
shift
"$@" &
pid=$!
t0=$(date +%s.%N)
while kill -0 "$pid" 2> /dev/null; do
    mem=$(awk '/VmRSS/ {r = $2} /VmHWM/ {h = $2} END {print r, h}' "/proc/$pid/status" 2> /dev/null || true)
    files=$(find "$(dirname "$db")" -maxdepth 1 -name "$(basename "$db").*" -printf '%f ' 2> /dev/null | sed "s/$(basename "$db")//g")
    printf '%s %s %s\n' "$(awk -v a="$(date +%s.%N)" -v b="$t0" 'BEGIN {printf "%.2f", a - b}')" "$mem" "$files"
    sleep 0.25
done
wait "$pid"
