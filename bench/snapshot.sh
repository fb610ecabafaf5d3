#!/usr/bin/env bash
# Snapshot ingest: writes a synthetic PBF of NODES nodes (default 10 million) and NODES/10 ways
# with libosmium (bench/make_pbf.py; pip install osmium), then times `hexvigil ingest` of it
# into a new database, with the peak resident memory (GNU time).
# Usage: bench/snapshot.sh [NODES]
set -euo pipefail
cd "$(dirname "$0")/.."
n=${1:-10000000}
cargo build --release --bin hexvigil
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
python3 bench/make_pbf.py "$work/country.osm.pbf" "$n"
echo "file: $n nodes, $((n / 10)) ways, $(stat -c %s "$work/country.osm.pbf") bytes"
/usr/bin/time -v -o "$work/time.txt" target/release/hexvigil ingest --db "$work/s.db" "$work/country.osm.pbf"
grep -E "Maximum resident set size|Elapsed \(wall clock\)" "$work/time.txt" | sed 's/^\s*//'
ls -l "$work" | grep -E "s\.db" | awk '{print $5, $9}'
echo "machine: $(nproc) cores, $(free -g | awk '/Mem:/ {print $2}') GiB, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //')"
