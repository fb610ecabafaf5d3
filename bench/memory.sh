#!/usr/bin/env bash
# Peak memory and time of hexvigil's ingest and report at sizes past what compare.sh runs:
# does memory stay put as the input grows? For each scale, one ingest (snapshot, changeset
# dump, all diffs) into a new database, then the report, each on one core (taskset -c 0), with
# GNU time's wall time, CPU time and peak resident memory.
# Scale s up to 16 is the demo at intensity 6*s over its 14 weeks (as in compare.sh); past 16
# the intensity stays at 96 (the generator's bound is 100) and the weeks grow instead
# (32 = 28 weeks at intensity 96): twice the element changes, and a database twice as long, of
# which the report still reads its 13-week window.
# Usage: bench/memory.sh [SCALE...]   (default: 16 32)
# INPUTS=dir reuses inputs generated before (dir/xSCALE/input). HEXVIGIL=path runs another build.
set -euo pipefail
cd "$(dirname "$0")/.."
scales=("$@"); [ ${#scales[@]} -gt 0 ] || scales=(16 32)
. bench/common.sh
bench_setup

timed() { # label, command...: prints a row
    local label=$1; shift
    local load; load=$(cut -d' ' -f1 /proc/loadavg)
    sync
    /usr/bin/time -v -o "$work/t" "$@" > "$work/out" 2> "$work/err" || { cat "$work/err"; exit 1; }
    local secs mib cpu
    secs=$(awk -F': ' '/Elapsed \(wall clock\)/ {n=split($2,p,":"); s=0; for(i=1;i<=n;i++) s=s*60+p[i]; print s}' "$work/t")
    mib=$(( $(awk -F': ' '/Maximum resident/ {print $2}' "$work/t") / 1024 ))
    cpu=$(awk -F': ' '/User time|System time/ {s += $2} END {printf "%.1f", s}' "$work/t")
    printf '| %s | %s | %.2f s | %s s | %d MiB | %s |\n' "$scale" "$label" "$secs" "$cpu" "$mib" "$load"
}

echo
echo "| scale | run | wall time | CPU time | peak memory | load avg |"
echo "|---|---|---|---|---|---|"
for scale in "${scales[@]}"; do
    if [ "$scale" -le 16 ]; then
        intensity=$((6 * scale)); weeks=14
    else
        intensity=96; weeks=$((14 * scale / 16))
    fi
    d="$work/x$scale"
    if [ -n "${INPUTS:-}" ] && [ -d "$INPUTS/x$scale/input" ]; then
        mkdir -p "$d" && ln -s "$(realpath "$INPUTS/x$scale/input")" "$d/input"
    else
        "$bin" --quiet demo --out "$d" --intensity "$intensity" --weeks "$weeks" --inputs-only
    fi
    mapfile -t diffs < <(find "$d/input/diffs" -name '*.osc.gz' | sort)
    elements=$(gzip -dc "${diffs[@]}" | grep -c -E '<(node|way|relation)[ >]')
    echo "| $scale | input: intensity $intensity, $weeks weeks, ${#diffs[@]} diffs, $elements element changes | | | | |"
    timed "hexvigil ingest, 1 core" taskset -c 0 "$bin" --quiet ingest --db "$d/one.db" \
        "$d/input/snapshot.osm" "$d/input/changesets.osm" "${diffs[@]}"
    echo "| $scale | files: $(du -cb "$d"/one.db* | tail -1 | cut -f1) bytes (database, edit log, node index, element state) | | | | |"
    timed "hexvigil report, 1 core" taskset -c 0 "$bin" --quiet report --db "$d/one.db" --out "$d/rep" \
        --regions "$d/input/regions.geojson" --land "$d/input/land.geojson"
    rm -rf "$d"
done
