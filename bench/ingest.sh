#!/usr/bin/env bash
# Ingest throughput against the floor: generates a synthetic gzip osmChange of ELEMENTS
# elements (default 5 million; examples/bench_osc.rs), then times on the same file
# (a) `gzip -dc FILE > /dev/null`, the decompression floor, and (b) `hexvigil ingest` into a new
# database, pinned to one core and on all cores, with the peak resident memory (GNU time).
# Also times the demo region's ingest. HEXVIGIL=path compares another build of the binary.
# Usage: bench/ingest.sh [ELEMENTS]
set -euo pipefail
cd "$(dirname "$0")/.."
n=${1:-5000000}
cargo build --release --bin hexvigil --example bench_osc --example bench_parse
bin=${HEXVIGIL:-target/release/hexvigil}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

target/release/examples/bench_osc "$work/week.osc.gz" "$n"
echo "file: $n elements, $(stat -c %s "$work/week.osc.gz") bytes gzip, $(gzip -dc "$work/week.osc.gz" | wc -c) bytes of XML"

timed() { # label, command...: prints "label | wall seconds | CPU seconds | peak MiB"
    local label=$1; shift
    sync # the previous run's dirty pages would otherwise be written back during this one
    /usr/bin/time -f "%e %U %S %M" -o "$work/t" "$@" > /dev/null 2> "$work/err" || { cat "$work/err"; exit 1; }
    read -r secs user sys kb < "$work/t"
    printf '| %s | %s s | %s s | %d MiB |\n' "$label" "$secs" "$(echo "$user + $sys" | bc)" $((kb / 1024))
}
echo "| run | wall time | CPU time | peak memory |"
echo "|---|---|---|---|"
timed "gzip -dc (floor)" gzip -dc "$work/week.osc.gz"
timed "hexvigil's decompression alone, 1 core" taskset -c 0 target/release/examples/bench_parse "$work/week.osc.gz" --decompress-only
timed "hexvigil's decompression + XML reader, no database, 1 core" taskset -c 0 target/release/examples/bench_parse "$work/week.osc.gz"
timed "hexvigil ingest, 1 core" taskset -c 0 "$bin" --quiet ingest --db "$work/one.db" "$work/week.osc.gz"
timed "hexvigil ingest, $(nproc) cores" "$bin" ingest --db "$work/all.db" "$work/week.osc.gz"
echo "summary line: $(tail -1 "$work/err")"

"$bin" --quiet demo --out "$work/demo" > /dev/null
mapfile -t demo_inputs < <(find "$work/demo/input" -name '*.osm' -o -name '*.osc' -o -name '*.osm.gz' -o -name '*.osc.gz' | sort)
timed "demo ingest (${#demo_inputs[@]} files), $(nproc) cores" "$bin" --quiet ingest --db "$work/demo.db" "${demo_inputs[@]}"
echo "machine: $(nproc) cores, $(free -g | awk '/Mem:/ {print $2}') GiB, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //')"
