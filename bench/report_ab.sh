#!/usr/bin/env bash
# Before and after: alternating runs of two hexvigil binaries making the report of the same
# database (the demo, `hexvigil demo --intensity INTENSITY --inputs-only`, default 24, about
# 3.9 million edits in the report's 13 weeks, ingested once by AFTER_BIN), each pinned to one
# core; wall time, CPU time (user + system), peak memory, load average per run, then the best
# of each, and a byte-for-byte comparison of the two report folders (`diff -r`; the "generated
# at" line is fixed with --generated-at).
# Build the "before" binary from another worktree, e.g.
#   git worktree add /tmp/before COMMIT && (cd /tmp/before && cargo build --release)
# Usage: [CORE=N] bench/report_ab.sh BEFORE_BIN AFTER_BIN [INTENSITY] [ROUNDS]   (CORE: default 0)
set -euo pipefail
a=$(realpath "$1"); b=$(realpath "$2"); intensity=${3:-24}; rounds=${4:-5}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$b" --quiet demo --out "$work/d" --intensity "$intensity" --inputs-only
d=$work/d/input
"$b" --quiet ingest --db "$work/s.db" "$d/snapshot.osm" "$d/changesets.osm" "$d/diffs/"*.osc.gz
echo "| round | binary | wall time | CPU time | peak memory | load avg |"
echo "|---|---|---|---|---|---|"
for r in $(seq "$rounds"); do
    for which in before after; do
        bin=$a; [ "$which" = after ] && bin=$b
        rm -rf "$work/$which"
        load=$(cut -d' ' -f1 /proc/loadavg)
        /usr/bin/time -f "%e %U %S %M" -o "$work/t" taskset -c "${CORE:-0}" "$bin" --quiet report \
            --db "$work/s.db" --out "$work/$which" --regions "$d/regions.geojson" \
            --land "$d/land.geojson" --generated-at fixed
        read -r secs user sys kb < "$work/t"
        cpu=$(awk -v u="$user" -v s="$sys" 'BEGIN {printf "%.2f", u + s}')
        echo "| $r | $which | $secs s | $cpu s | $((kb / 1024)) MiB | $load |"
        echo "$which $secs $cpu $kb" >> "$work/all"
    done
done
for which in before after; do
    awk -v w="$which" '$1 == w {
        if (!n || $2 < bw) bw = $2; if (!n || $3 < bc) bc = $3
        if (!n || $4 < lo) lo = $4; if ($4 > hi) hi = $4; n++ }
        END { printf "%s: best wall %.2f s, best CPU %.2f s, peak memory %d to %d MiB (%d runs)\n",
              w, bw, bc, lo / 1024, hi / 1024, n }' "$work/all"
done
if diff -r "$work/before" "$work/after" > /dev/null; then
    echo "report folders identical ($(find "$work/after" -type f | wc -l) files)"
else
    echo "report folders DIFFER"
    exit 1
fi
