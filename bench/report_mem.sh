#!/usr/bin/env bash
# The report's peak memory and time at several sizes, before and after a change: for each
# scale, the demo inputs (INPUTS/xSCALE/input, from `hexvigil demo --out INPUTS/xSCALE
# --intensity $((6 * SCALE)) --inputs-only`; generated there when missing) ingested once by
# AFTER_BIN, then ROUNDS alternating `report` runs of both binaries pinned to one core (wall
# time, CPU time, peak resident memory, load average per run), the best of each, and a
# byte-for-byte comparison of the two report folders (`diff -r`, with --generated-at fixed).
# Usage: INPUTS=dir [ROUNDS=3] [CORE=0] [KEEP=dir] bench/report_mem.sh BEFORE_BIN AFTER_BIN [SCALE...]
# (scales default 1 4 16; KEEP keeps the databases there instead of a temporary folder).
set -euo pipefail
a=$(realpath "$1"); b=$(realpath "$2"); shift 2
scales=("$@"); [ ${#scales[@]} -gt 0 ] || scales=(1 4 16)
: "${INPUTS:?set INPUTS to the folder of the demo inputs}"
rounds=${ROUNDS:-3}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
dbs=${KEEP:-$work}
mkdir -p "$dbs"
echo "| scale | round | binary | wall time | CPU time | peak memory | load avg |"
echo "|---|---|---|---|---|---|---|"
for scale in "${scales[@]}"; do
    d=$INPUTS/x$scale/input
    [ -f "$d/regions.geojson" ] || "$b" --quiet demo --out "$INPUTS/x$scale" \
        --intensity $((6 * scale)) --inputs-only
    db=$dbs/x$scale.db
    if [ ! -f "$db" ]; then
        mapfile -t diffs < <(find "$d/diffs" -name '*.osc.gz' | sort)
        "$b" --quiet ingest --db "$db" "$d/snapshot.osm" "$d/changesets.osm" "${diffs[@]}"
    fi
    : > "$work/all"
    for r in $(seq "$rounds"); do
        for which in before after; do
            bin=$a; [ "$which" = after ] && bin=$b
            rm -rf "$work/$which"
            load=$(cut -d' ' -f1 /proc/loadavg)
            /usr/bin/time -f "%e %U %S %M" -o "$work/t" taskset -c "${CORE:-0}" "$bin" --quiet \
                report --db "$db" --out "$work/$which" --regions "$d/regions.geojson" \
                --land "$d/land.geojson" --generated-at fixed
            read -r secs user sys kb < "$work/t"
            cpu=$(awk -v u="$user" -v s="$sys" 'BEGIN {printf "%.2f", u + s}')
            echo "| $scale | $r | $which | $secs s | $cpu s | $((kb / 1024)) MiB | $load |"
            echo "$which $secs $cpu $kb" >> "$work/all"
        done
    done
    for which in before after; do
        awk -v w="$which" -v s="$scale" '$1 == w {
            if (!n || $2 < bw) bw = $2; if (!n || $3 < bc) bc = $3
            if (!n || $4 < lo) lo = $4; if ($4 > hi) hi = $4; n++ }
            END { printf "x%s %s: best wall %.2f s, best CPU %.2f s, peak memory %d to %d MiB (%d runs)\n",
                  s, w, bw, bc, lo / 1024, hi / 1024, n }' "$work/all"
    done
    if diff -r "$work/before" "$work/after" > /dev/null; then
        echo "x$scale: report folders identical ($(find "$work/after" -type f | wc -l) files)"
    else
        echo "x$scale: report folders DIFFER"
        exit 1
    fi
done
