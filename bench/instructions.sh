#!/usr/bin/env bash
# Instructions the ingest executes per element change, counted exactly by callgrind: does the
# work per element stay the same as the input grows? Wall times on a shared host vary too much
# to tell, and `perf stat` may have no counters in a virtual machine. For each scale, one ingest
# of all files (snapshot, changeset dump, all diffs) into a new database, on one core, under
# `valgrind --tool=callgrind` (user space only, all threads, no cache simulation: about 40
# times slower than a plain run, so 16x takes about 20 minutes).
# Usage: bench/instructions.sh [SCALE...]   (default: 1 4 16; scale 1 = intensity 6)
# Needs: valgrind (apt-get install valgrind). INPUTS=dir reuses inputs generated before
# (dir/xSCALE/input). HEXVIGIL=path runs another build.
set -euo pipefail
cd "$(dirname "$0")/.."
scales=("$@"); [ ${#scales[@]} -gt 0 ] || scales=(1 4 16)
. bench/common.sh
bench_setup
echo "valgrind: $(valgrind --version)"

echo
echo "| scale | element changes | instructions | per element change | × first scale |"
echo "|---|---|---|---|---|"
first=
for scale in "${scales[@]}"; do
    bench_inputs "$scale"
    taskset -c 0 valgrind --tool=callgrind --callgrind-out-file="$work/cg.out" \
        --dump-instr=no --collect-jumps=no \
        "$bin" --quiet ingest --db "$d/state.db" "$d/input/snapshot.osm" \
        "$d/input/changesets.osm" "${diffs[@]}" 2> "$work/cg.log" \
        || { cat "$work/cg.log"; exit 1; }
    count=$(grep -o 'Collected : [0-9]*' "$work/cg.log" | grep -o '[0-9]*$')
    [ -n "$first" ] || first=$count
    printf '| %s | %s | %s | %.0f | %.2f |\n' "$scale" "$elements" "$count" \
        "$(awk -v c="$count" -v n="$elements" 'BEGIN {print c / n}')" \
        "$(awk -v c="$count" -v f="$first" 'BEGIN {print c / f}')"
    rm -rf "$d"
done
