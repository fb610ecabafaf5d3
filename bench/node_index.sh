#!/usr/bin/env bash
# Node-location index benchmark: builds an index of NODES nodes (default 50 million) as a
# snapshot ingest does, merges a week-sized update (UPDATES random nodes, with a lookup each)
# into a second generation, then times random lookups. Prints the figures and the peak
# resident memory of the whole run (GNU time). Needs about 2.5 GB of free disk in $TMPDIR.
# Usage: bench/node_index.sh [NODES] [UPDATES] [LOOKUPS]
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --example bench_node_index
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
/usr/bin/time -v -o "$work/time.txt" target/release/examples/bench_node_index "$work" "${1:-50000000}" "${2:-1000000}" "${3:-2000000}"
grep -E "Maximum resident set size|Elapsed \(wall clock\)" "$work/time.txt" | sed 's/^\s*//'
echo "machine: $(nproc) cores, $(free -g | awk '/Mem:/ {print $2}') GiB, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //')"
