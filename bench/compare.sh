#!/usr/bin/env bash
# Side by side on the same files: the demo region generated at several sizes
# (`hexvigil demo --intensity`), then for each size
#   (a) the floor: `gzip -dc` over all diffs,
#   (b) bench/count_cells.py (pyosmium + h3: snapshot into a location index, cells per diff),
#   (c) hexvigil ingest (snapshot, changesets, all diffs), the report after it, and both,
#       and the ingest of the diffs alone into a database that holds the snapshot and the
#       changesets already (the floor's own files: the weekly run),
# each pinned to one core (taskset -c 0), hexvigil also on all cores; wall time, element
# changes per second, CPU time (user + system: steadier than wall time on a busy machine), peak
# resident memory (GNU time), ratios of wall times to (a) and (b), load average.
# Usage: bench/compare.sh [SCALE...]   (default: 1 4 16; scale 1 = intensity 6, ~1 M changes)
# RUNS=N runs each timing N times and keeps the fastest (a busy machine slows single runs);
# the floor runs at least 5 times. Each (c) row is divided by a floor taken just before it
# (the fastest of 3 runs, shown in a comment above the row): this host's speed drifts between
# rows minutes apart, and a ratio to a floor taken under other load would carry the drift.
# Needs: pip install osmium h3. HEXVIGIL=path compares another build of the binary.
# INPUTS=dir reuses inputs generated before (dir/xSCALE/input, from `hexvigil demo --out
# dir/xSCALE --intensity 6*SCALE --inputs-only`; the generator is deterministic).
set -euo pipefail
cd "$(dirname "$0")/.."
scales=("$@"); [ ${#scales[@]} -gt 0 ] || scales=(1 4 16)
. bench/common.sh
bench_setup

runs=${RUNS:-1}
timed() { # label, command...: runs it $RUNS times; sets secs, mib, cpu of the fastest; prints a row
    local label=$1; shift
    local load; load=$(cut -d' ' -f1 /proc/loadavg)
    local i s
    secs=
    for ((i = 0; i < runs; i++)); do
        if [ -n "${prep:-}" ]; then eval "$prep"; fi  # untimed set-up before each run
        sync
        /usr/bin/time -v -o "$work/t" "$@" > "$work/out" 2> "$work/err" || { cat "$work/err"; exit 1; }
        s=$(awk -F': ' '/Elapsed \(wall clock\)/ {n=split($2,p,":"); s=0; for(i=1;i<=n;i++) s=s*60+p[i]; print s}' "$work/t")
        if [ -z "$secs" ] || awk -v a="$s" -v b="$secs" 'BEGIN {exit !(a < b)}'; then
            secs=$s
            mib=$(( $(awk -F': ' '/Maximum resident/ {print $2}' "$work/t") / 1024 ))
            cpu=$(awk -F': ' '/User time|System time/ {s += $2} END {printf "%.1f", s}' "$work/t")
        fi
    done
    printf '| %s | %s | %.2f s | %s s | %s | %d MiB | %s | %s | %s |\n' "$scale" "$label" "$secs" "$cpu" \
        "$(awk -v n="$elements" -v s="$secs" 'BEGIN {printf "%.0f", n / s}')" "$mib" \
        "$(awk -v s="$secs" -v f="${floor:-0}" 'BEGIN {if (f > 0) printf "%.1f", s / f; else print "1"}')" \
        "$(awk -v s="$secs" -v p="${py:-0}" 'BEGIN {if (p > 0) printf "%.2f", s / p; else print "-"}')" "$load"
}

refloor() { # sets floor to the fastest of 3 runs of (a) now, for the row that follows
    local i s
    floor=
    for ((i = 0; i < 3; i++)); do
        sync
        /usr/bin/time -f %e -o "$work/f" taskset -c 0 gzip -dc "${diffs[@]}" > /dev/null
        s=$(cat "$work/f")
        if [ -z "$floor" ] || awk -v a="$s" -v b="$floor" 'BEGIN {exit !(a < b)}'; then floor=$s; fi
    done
    echo "<!-- floor just before the next row: $floor s (fastest of 3) -->"
}

sum_row() { # label, seconds, seconds, floor, floor: a row for two runs one after the other
    echo "| $scale | (c) hexvigil $1 | $(awk -v a="$2" -v b="$3" 'BEGIN {printf "%.2f s", a + b}') | | | | $(awk -v a="$2" -v b="$3" -v f="$4" -v g="$5" 'BEGIN {printf "%.1f", (a + b) / ((f + g) / 2)}') | $(awk -v a="$2" -v b="$3" -v p="$py" 'BEGIN {printf "%.2f", (a + b) / p}') | |"
}

echo
echo "| scale | run | wall time | CPU time | element changes/s | peak memory | × (a) | × (b) | load avg |"
echo "|---|---|---|---|---|---|---|---|---|"
for scale in "${scales[@]}"; do
    bench_inputs "$scale"
    echo "| $scale | input: intensity $((6 * scale)), ${#diffs[@]} diffs, $elements element changes, $(du -cb "${diffs[@]}" | tail -1 | cut -f1) bytes gzip | | | | | | | |"
    floor=; py=
    # The floor is cheap and every ratio divides by it: at least 5 runs, the fastest kept (on a
    # busy host a slow floor would flatter the ratios).
    runs_given=$runs; runs=$((runs > 5 ? runs : 5))
    timed "(a) gzip -dc, all diffs, 1 core (fastest of $runs)" taskset -c 0 gzip -dc "${diffs[@]}"; floor=$secs
    runs=$runs_given
    timed "(b) count_cells.py (pyosmium + h3), 1 core" taskset -c 0 python3 bench/count_cells.py "$d/input/snapshot.osm" "${diffs[@]}"; py=$secs
    echo "<!-- (b) said: $(cat "$work/out") -->"
    inputs=("$d/input/snapshot.osm" "$d/input/changesets.osm" "${diffs[@]}")
    areas=(--regions "$d/input/regions.geojson" --land "$d/input/land.geojson")
    # Each ingest run starts from no database (a second run of the same files would do nothing).
    refloor
    timed "(c) hexvigil ingest, 1 core" sh -c 'rm -f "$1" "$1"-wal "$1"-shm "$1".nodes.* "$1".elements.* "$1".edits; shift; exec taskset -c 0 "$@"' \
        - "$d/one.db" "$bin" --quiet ingest --db "$d/one.db" "${inputs[@]}"
    ingest1=$secs; floor1=$floor
    # The diffs alone, into a copy of a database made from the snapshot and changesets.
    "$bin" --quiet ingest --db "$d/base.db" "$d/input/snapshot.osm" "$d/input/changesets.osm"
    prep='rm -f "$d"/diffs.db*; for f in "$d"/base.db*; do cp "$f" "$d/diffs.db${f#"$d"/base.db}"; done'
    refloor
    timed "(c) hexvigil ingest of the diffs alone (snapshot and changesets in before), 1 core" \
        taskset -c 0 "$bin" --quiet ingest --db "$d/diffs.db" "${diffs[@]}"
    prep=
    rm -f "$d"/base.db* "$d"/diffs.db*
    refloor
    timed "(c) hexvigil report (after the ingest), 1 core" taskset -c 0 "$bin" --quiet report --db "$d/one.db" --out "$d/rep1" "${areas[@]}"
    sum_row "ingest + report, 1 core" "$ingest1" "$secs" "$floor1" "$floor"
    refloor
    timed "(c) hexvigil ingest, $(nproc) cores" sh -c 'rm -f "$1" "$1"-wal "$1"-shm "$1".nodes.* "$1".elements.* "$1".edits; shift; exec "$@"' \
        - "$d/all.db" "$bin" --quiet ingest --db "$d/all.db" "${inputs[@]}"
    ingest2=$secs; floor2=$floor
    refloor
    timed "(c) hexvigil report (after the ingest), $(nproc) cores" "$bin" --quiet report --db "$d/all.db" --out "$d/rep2" "${areas[@]}"
    sum_row "ingest + report, $(nproc) cores" "$ingest2" "$secs" "$floor2" "$floor"
    rm -rf "$d"
done
