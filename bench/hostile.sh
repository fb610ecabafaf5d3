#!/usr/bin/env bash
# Peak memory of `hexvigil ingest` on hostile input: the bombs and deep nesting of the bad-input
# corpus (fixtures/bad/), plus larger generated files: a million nested elements, and single XML
# tags (a tag value) of 60 MiB in gzip and 256 MiB plain. Prints a Markdown table: input, size
# on disk, exit code, wall time, peak resident memory (GNU time). HEXVIGIL=path uses another
# build of the binary.
# Usage: bench/hostile.sh
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --bin hexvigil
bin=${HEXVIGIL:-target/release/hexvigil}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

python3 - "$work" <<'PY'
import gzip, sys
w = sys.argv[1]
with open(f"{w}/million-deep.osc", "w") as f:
    f.write("<osmChange><create>" + "<x>" * 1_000_000 + "</x>" * 1_000_000 + "</create></osmChange>\n")
head = b'<osmChange><create><node id="1" version="1" lat="1" lon="1"><tag k="a" v="'
tail = b'"/></node></create></osmChange>\n'
with gzip.GzipFile(f"{w}/tag-60mib.osc.gz", "wb", mtime=0) as g:
    g.write(head)
    for _ in range(60):
        g.write(b"x" * (1 << 20))
    g.write(tail)
with open(f"{w}/tag-256mib.osc", "wb") as f:
    f.write(head)
    for _ in range(256):
        f.write(b"x" * (1 << 20))
    f.write(tail)
PY

echo "| input | on disk | exit | wall time | peak memory |"
echo "|---|---|---|---|---|"
for f in fixtures/bad/gzip-bomb.osc.gz fixtures/bad/bzip2-bomb.osm.bz2 fixtures/bad/deep-nesting.osc \
         fixtures/bad/relation-too-many-members.osc fixtures/bad/too-many-tags.osc \
         "$work/million-deep.osc" "$work/tag-60mib.osc.gz" "$work/tag-256mib.osc"; do
    rm -f "$work"/t.db*
    set +e
    /usr/bin/time -f "%e %M" -o "$work/t" "$bin" --quiet ingest --db "$work/t.db" "$f" > /dev/null 2>&1
    code=$?
    set -e
    read -r secs kb < <(tail -n 1 "$work/t") # GNU time first notes a non-zero exit
    printf '| %s | %s KiB | %d | %s s | %d MiB |\n' "$(basename "$f")" $(($(stat -c %s "$f") / 1024)) "$code" "$secs" $((kb / 1024))
done
