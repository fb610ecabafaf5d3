#!/usr/bin/env bash
# Times the tile pyramid of the demo region: `hexvigil tiles --zoom 6-14` (measure edits, with an
# MBTiles file) on the demo's state database, three runs each, printing the tiles written and
# the whole run's wall time. A run also analyses the week, as a user's run does; a run at zoom 6
# alone (one or two tiles) measures that part, and the tile rate is computed over the rest:
# (tiles - tiles at zoom 6) / (time - time at zoom 6).
# Usage: scripts/bench-tiles.sh [ZOOMS...]   (default: 6-14 6-16)
set -euo pipefail
cd "$(dirname "$0")/.."
if [ "$#" -gt 0 ]; then ranges=("$@"); else ranges=(6-14 6-16); fi
cargo build --release --quiet
bin=target/release/hexvigil
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
"$bin" --quiet demo --out "$work/demo"
db="$work/demo/state.db"
in="$work/demo/input"
now() { date +%s.%N; }
t0=$(now)
"$bin" --quiet report --db "$db" --out "$work/report" --land "$in/land.geojson" \
    --regions "$in/regions.geojson" --generated-at bench
t1=$(now)
printf 'report alone (analysis + 10 heat images + pages): %.2f s\n' "$(echo "$t1 - $t0" | bc)"
# Best of three: the machine is shared, so the fastest run is the least disturbed one. CPU
# seconds (user + system, from /usr/bin/time) are printed too: they depend less on other load.
best() {
    local zooms="$1" fastest="" cpu=""
    for _ in 1 2 3; do
        rm -rf "$work/tiles" "$work/tiles.mbtiles"
        /usr/bin/time -f "%e %U %S" -o "$work/time" "$bin" --quiet tiles --db "$db" \
            --out "$work/tiles" --zoom "$zooms" --land "$in/land.geojson" \
            --regions "$in/regions.geojson" --mbtiles "$work/tiles.mbtiles"
        read -r wall user sys < "$work/time"
        if [ -z "$fastest" ] || [ "$(echo "$wall < $fastest" | bc)" -eq 1 ]; then
            fastest=$wall
            cpu=$(echo "$user + $sys" | bc)
        fi
    done
    echo "$(find "$work/tiles" -name '*.png' | wc -l) $fastest $cpu"
}
read -r base_n base_s base_cpu < <(best 6-6)
printf 'zoom 6-6: %d tiles in %.2f s wall, %.2f s CPU (the analysis of the week, mostly)\n' \
    "$base_n" "$base_s" "$base_cpu"
for zooms in "${ranges[@]}"; do
    read -r n s cpu < <(best "$zooms")
    printf 'zoom %s: %d tiles in %.2f s wall, %.2f s CPU; beyond zoom 6: %.0f tiles/s wall, %.2f ms CPU per tile\n' \
        "$zooms" "$n" "$s" "$cpu" "$(echo "($n - $base_n) / ($s - $base_s)" | bc -l)" \
        "$(echo "1000 * ($cpu - $base_cpu) / ($n - $base_n)" | bc -l)"
done
echo "machine: $(nproc) cores, $(uname -m); load average now: $(cut -d' ' -f1-3 /proc/loadavg)"
