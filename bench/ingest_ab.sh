#!/usr/bin/env bash
# Before and after: alternating runs of two hexvigil binaries ingesting the same demo input
# (`hexvigil demo --intensity INTENSITY --inputs-only`; default 6, about 1 million element
# changes), each pinned to one core into a new database; wall time, CPU time (user + system,
# steadier on a busy machine), peak memory, load average.
# Build the "before" binary from another worktree, e.g.
#   git worktree add /tmp/before COMMIT && (cd /tmp/before && cargo build --release)
# Usage: [CORE=N] bench/ingest_ab.sh BEFORE_BIN AFTER_BIN [INTENSITY] [ROUNDS]   (CORE: default 0)
set -euo pipefail
a=$(realpath "$1"); b=$(realpath "$2"); intensity=${3:-6}; rounds=${4:-3}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$b" --quiet demo --out "$work/d" --intensity "$intensity" --inputs-only
inputs=("$work/d/input/snapshot.osm" "$work/d/input/changesets.osm" "$work/d/input/diffs/"*.osc.gz)
echo "| round | binary | wall time | CPU time | peak memory | load avg |"
echo "|---|---|---|---|---|---|"
for r in $(seq "$rounds"); do
    for which in before after; do
        bin=$a; [ "$which" = after ] && bin=$b
        rm -rf "$work/db"; mkdir "$work/db"
        sync
        load=$(cut -d' ' -f1 /proc/loadavg)
        /usr/bin/time -f "%e %U %S %M" -o "$work/t" taskset -c "${CORE:-0}" "$bin" --quiet ingest --db "$work/db/s.db" "${inputs[@]}"
        read -r secs user sys kb < "$work/t"
        echo "| $r | $which | $secs s | $(awk -v u="$user" -v s="$sys" 'BEGIN {printf "%.1f", u + s}') s | $((kb / 1024)) MiB | $load |"
    done
done
