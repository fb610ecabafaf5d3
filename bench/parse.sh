#!/usr/bin/env bash
# The XML reader alone: `examples/bench_parse` reads each file (decompression and hexvigil's
# streaming XML reader, the elements counted and discarded), then decompresses it alone; three
# runs of each. Prints a Markdown table: file, run, wall time, CPU time (user + system) and peak
# memory from GNU time. The osmChange files of bench/ingest.sh (examples/bench_osc.rs) are the
# usual input. BENCH_PARSE=path uses another build of the example.
# Usage: bench/parse.sh FILE...
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --example bench_parse
bin=${BENCH_PARSE:-target/release/examples/bench_parse}
out=$(mktemp)
trap 'rm -f "$out"' EXIT
echo "| file | run | wall | CPU | peak memory |"
echo "|---|---|---|---|---|"
for f in "$@"; do
    for mode in parse --decompress-only; do
        for i in 1 2 3; do
            if [ "$mode" = parse ]; then args=("$f"); else args=("$f" --decompress-only); fi
            /usr/bin/time -f "%e %U %S %M" -o "$out" "$bin" "${args[@]}" > /dev/null
            read -r wall user sys kb < "$out"
            printf '| %s | %s %d | %s s | %.2f s | %d MiB |\n' "$(basename "$f")" "$mode" "$i" \
                "$wall" "$(echo "$user + $sys" | bc)" $((kb / 1024))
        done
    done
done
