#!/usr/bin/env bash
# Times the Parquet export of the demo region and the way back: `hexvigil export` of every week
# (14 weeks, H3 resolution 8, the demo's regions and land), `report --db` and
# `report --cell-weeks` of the last week, and the DuckDB baseline script over the export, best
# of three runs each (wall and CPU seconds), and prints the export's size per table.
# Usage: scripts/bench-export.sh   (the DuckDB line needs scripts/setup-test-deps.sh)
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
bin=target/release/hexvigil
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
"$bin" --quiet demo --out "$work/demo"
db="$work/demo/state.db"
in="$work/demo/input"
place=(--land "$in/land.geojson" --regions "$in/regions.geojson")
# Best of three: the machine is shared, so the fastest run is the least disturbed one.
best() {
    local label="$1" fastest="" cpu=""
    shift
    for _ in 1 2 3; do
        /usr/bin/time -f "%e %U %S" -o "$work/time" "$@" > /dev/null
        read -r wall user sys < "$work/time"
        if [ -z "$fastest" ] || [ "$(echo "$wall < $fastest" | bc)" -eq 1 ]; then
            fastest=$wall
            cpu=$(echo "$user + $sys" | bc)
        fi
    done
    printf '%s: %.2f s wall, %.2f s CPU\n' "$label" "$fastest" "$cpu"
}
best "export, 14 weeks" "$bin" --quiet export --db "$db" --out "$work/export" "${place[@]}"
best "report --db, last week" "$bin" --quiet report --db "$db" --out "$work/r1" "${place[@]}" \
    --generated-at bench
best "report --cell-weeks, last week" "$bin" --quiet report --cell-weeks "$work/export" \
    --out "$work/r2" "${place[@]}" --generated-at bench
if python3 -c "import duckdb" 2>/dev/null; then
    best "DuckDB baseline.sql, last week" python3 scripts/duckdb/run_baseline.py "$work/export"
fi
echo "database: $(du -sh "$db" | cut -f1)"
for t in cell_weeks cell_week_changesets changesets cell_neighbours; do
    printf '%s: %s files, %s bytes\n' "$t" "$(find "$work/export/$t" -name '*.parquet' | wc -l)" \
        "$(find "$work/export/$t" -name '*.parquet' -printf '%s\n' | paste -sd+ | bc)"
done
grep -A5 '"rows"' "$work/export/export.json"
echo "machine: $(nproc) cores, $(uname -m); load average now: $(cut -d' ' -f1-3 /proc/loadavg)"
