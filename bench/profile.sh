#!/usr/bin/env bash
# Where ingest time goes: `perf record` of `hexvigil ingest` pinned to the last core over the demo generated
# at INTENSITY (default 6, about 1 million element changes), then the hottest functions and the
# share of each part (SQLite, XML parsing, node-location index, decompression, allocation,
# kernel). Needs perf (Debian: linux-perf). HEXVIGIL=path profiles another build.
# Usage: bench/profile.sh [INTENSITY]
set -euo pipefail
cd "$(dirname "$0")/.."
intensity=${1:-6}
cargo build --release --bin hexvigil
bin=$(realpath "${HEXVIGIL:-target/release/hexvigil}")
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$bin" --quiet demo --out "$work/d" --intensity "$intensity" --inputs-only
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
perf record -q -o "$work/perf.data" -- taskset -c "$(( $(nproc) - 1 ))" "$bin" --quiet ingest --db "$work/p.db" \
    "$work/d/input/snapshot.osm" "$work/d/input/changesets.osm" "$work/d/input/diffs/"*.osc.gz
perf report -i "$work/perf.data" --no-children --stdio --sort dso,sym 2>/dev/null \
    | grep -E '^\s+[0-9.]+%' > "$work/syms"
echo "hottest functions (self time):"
head -20 "$work/syms"
echo "by part:"
awk '{p=$1; sub("%","",p); s=$0; c="other";
  if (s ~ /\[k\]/) c="kernel (file I/O, page faults)";
  else if (s ~ /rusqlite/) c="SQLite (bundled C, rusqlite) and other library code";
  else if (s ~ /hexvigil::|quick_xml|memchr|core::str|miniz|inflate/) {
    if (s ~ /quick_xml|ingest::xml|memchr|core::str/) c="XML parsing";
    else if (s ~ /miniz|inflate/) c="gzip decompression";
    else if (s ~ /node_index/) c="node-location index";
    else c="hexvigil, other"; }
  else if (s ~ /libc/ && s ~ /malloc|free|memmove|memcpy|realloc|memset/) c="allocation and copies (libc)";
  else if (s ~ /hexvigil +\[\.\]/ || s ~ /libc/) c="SQLite (bundled C, rusqlite) and other library code";
  t[c]+=p} END {for (c in t) printf "%5.1f%%  %s\n", t[c], c}' "$work/syms" | sort -rn
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
