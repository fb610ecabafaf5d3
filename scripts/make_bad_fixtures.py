#!/usr/bin/env python3
"""Writes the bad-input corpus under fixtures/bad/ (run from anywhere; deterministic).

Each file gets one line in fixtures/bad/README.md and one row in fixtures/bad/expected.tsv:
the file, the expected exit code (0 = ingested, odd parts skipped and counted), and a piece of
text the one-line error (or, for 0, the skip reason) must contain.
"""
import bz2
import gzip
import io
import pathlib
import random

out = pathlib.Path(__file__).resolve().parent.parent / "fixtures" / "bad"
out.mkdir(parents=True, exist_ok=True)
for old in out.iterdir():
    old.unlink()

HEAD = '<?xml version="1.0" encoding="UTF-8"?>\n'
NODE = 'id="{id}" version="1" timestamp="2026-11-16T10:00:00Z" uid="9000001" user="kelmor" changeset="900000001"'
rows = []  # (name, exit, text, description)


def osc(body):
    return HEAD + '<osmChange version="0.6" generator="fixture">\n' + body + "</osmChange>\n"


def node(i, lat="45.2", lon="-33.6", tags=""):
    return f'<node {NODE.format(id=i)} lat="{lat}" lon="{lon}">{tags}</node>\n'


GOOD = osc("<create>\n" + node(1) + node(2) + "</create>\n")


def put(name, data, exit_code, text, desc):
    p = out / name
    p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
    rows.append((name, exit_code, text, desc))


gz_good = gzip.compress(GOOD.encode(), mtime=0)
put("truncated.osc.gz", gz_good[: len(gz_good) // 2], 2, "compressed data", "gzip stream cut in half")
bz_good = bz2.compress((HEAD + '<osm version="0.6">\n' + node(1) * 1 + "</osm>\n").encode())
put("truncated.osm.bz2", bz_good[: len(bz_good) - 12], 2, "compressed data", "bzip2 stream missing its end")
put("truncated.osc", GOOD[: GOOD.index("lat=") + 7], 2, "truncated", "XML cut inside an attribute")
put("unclosed.osc", HEAD + "<osmChange>\n<create>\n" + node(1), 2, "truncated", "elements never closed at the end of the file")
put("wrong-root.osc", HEAD + "<html><body>not osm</body></html>\n", 2, "expected root element", "an HTML page saved with an .osc name")
put("missing-id.osc", osc('<create><node version="1" lat="1" lon="1"/></create>\n'), 2, "without an id", "node without an id attribute")
put("non-numeric-id.osc", osc('<create><node id="abc" version="1" lat="1" lon="1"/></create>\n'), 2, 'id="abc" is not an integer', "id that is not a number")
put("lat-out-of-range.osc", osc("<create>\n" + node(3, lat="91.5") + "</create>\n"), 2, "out of range", "latitude beyond 90")
put("lon-out-of-range.osm", HEAD + '<osm version="0.6">\n' + node(4, lon="-181") + "</osm>\n", 2, "out of range", "longitude beyond -180 in a snapshot")
put("nan-coordinate.osc", osc("<create>\n" + node(5, lat="NaN") + "</create>\n"), 2, "out of range", "NaN latitude")
put("huge-attribute.osc", osc("<create>\n" + node(6, tags=f'<tag k="name" v="{"x" * 5000}"/>') + "</create>\n"), 2, "at most 1024", "a 5000-byte tag value")
put("too-many-tags.osc", osc("<create>\n" + node(7, tags="".join(f'<tag k="k{i}" v="v"/>' for i in range(5001))) + "</create>\n"), 2, "more than 5000 tags", "5001 tags on one node")
put("way-too-many-nodes.osc", osc('<create><way id="8" version="1" changeset="1">' + "".join(f'<nd ref="{i}"/>' for i in range(2001)) + "</way></create>\n"), 2, "more than 2000 nodes", "a way with 2001 node references")
put("relation-too-many-members.osc", osc('<create><relation id="9" version="1" changeset="1">' + "".join(f'<member type="node" ref="{i}" role=""/>' for i in range(32001)) + "</relation></create>\n"), 2, "more than 32000 members", "a relation with 32001 members")
put("member-bad-type.osc", osc('<create><relation id="10" version="1" changeset="1"><member type="area" ref="1" role=""/></relation></create>\n'), 2, "not node, way or relation", "relation member of an unknown type")
put("duplicate-ids.osc", osc("<create>\n" + node(11) + node(11) + "</create>\n"), 0, "", "the same node version twice: counted once")
put("element-wrong-block.osc", HEAD + "<osmChange>\n" + node(12) + "</osmChange>\n", 2, "outside a <create>", "a node directly under osmChange, outside any block")
put("changeset-never-described.osc", osc("<modify>\n" + node(13).replace("900000001", "999999999") + "</modify>\n"), 0, "", "an edit whose changeset has no metadata: kept, placed by its own coordinates")
put("binary.osc", bytes(random.Random(7).randrange(256) for _ in range(4096)), 2, "not an XML document", "random bytes with an .osc name")
put("empty.osc", b"", 2, "empty file", "an empty file")
put("whitespace-only.osm", b"   \n\n\t  \n", 2, "empty file", "only whitespace")
bomb = io.BytesIO()
with gzip.GzipFile(fileobj=bomb, mode="wb", mtime=0) as g:
    g.write(b"<osmChange><create>")
    chunk = b" " * (1 << 20)
    for _ in range(200):
        g.write(chunk)
put("gzip-bomb.osc.gz", bomb.getvalue(), 2, "decompressed size exceeds the limit", "200 MiB of spaces in a 200 KiB gzip")
put("hostile-text.osc", osc("<create>\n" + node(14, tags='<tag k="name" v="&lt;script&gt;alert(1)&lt;/script&gt; &quot;onmouseover=x"/>') + "</create>\n"), 0, "", "markup and quotes in a name: ingested as text, escaped in the report")
put("mismatched-end.osc", HEAD + '<osmChange><create><node id="1" lat="1" lon="1"></way></create></osmChange>\n', 2, "malformed XML", "an end tag that does not match its start tag")
put("bad-timestamp.osc", osc('<create><node id="15" version="1" timestamp="last tuesday" lat="1" lon="1"/></create>\n'), 2, "not an ISO 8601 UTC time", "a timestamp that is not a time")
put("tag-without-value.osc", osc('<create><node id="16" version="1" lat="1" lon="1"><tag k="name"/></node></create>\n'), 2, "without both k and v", "a tag with a key and no value")
put("changeset-bad-bbox.osm", HEAD + '<osm version="0.6"><changeset id="1" created_at="2026-11-16T10:00:00Z" min_lat="100" min_lon="0" max_lat="101" max_lon="1"/></osm>\n', 2, "bounding box out of range", "a changeset whose box lies beyond the poles")
put("changeset-missing-id.osm", HEAD + '<osm version="0.6"><changeset created_at="2026-11-16T10:00:00Z"/></osm>\n', 2, "without an id", "changeset metadata without an id")
put("truncated-changesets.osm.gz", gzip.compress((HEAD + '<osm version="0.6">' + '<changeset id="1" created_at="2026-11-16T10:00:00Z"><tag k="comment" v="x"/></changeset>' * 50 + "</osm>").encode(), mtime=0)[:60], 2, "compressed data", "a changeset dump cut short")
put("snapshot-node-without-coordinates.osm", HEAD + '<osm version="0.6">\n<node id="17" version="1"/>\n' + node(18) + "</osm>\n", 0, "node without valid coordinates", "odd but valid: a node without coordinates is skipped and counted")
put("invalid-xml-character.osc", HEAD + '<osmChange><create><node id="19" lat="1" lon="1"><tag k="name" v="a\x01b"/></node></create></osmChange>\n', 2, "", "a control character XML does not allow")
put("utf16.osc", GOOD.replace('encoding="UTF-8"', 'encoding="UTF-16"').encode("utf-16"), 2, "", "the document in UTF-16 (OSM files are UTF-8)")
put("long-user-name.osc", osc("<create>\n" + node(20).replace('user="kelmor"', f'user="{"u" * 100000}"') + "</create>\n"), 2, "user is 100000 bytes long", "a 100 000-byte user name")
put("long-tag-key.osc", osc("<create>\n" + node(21, tags=f'<tag k="{"k" * 3000}" v="x"/>') + "</create>\n"), 2, "tag key is 3000 bytes long", "a 3000-byte tag key")
put("id-beyond-64-bits.osc", osc("<create>\n" + node("99999999999999999999999") + "</create>\n"), 2, "is not an integer", "an id too large for 64 bits")
put("unknown-block.osc", osc("<upsert>\n" + node(22) + "</upsert>\n"), 2, "outside a <create>", "a node in a block osmChange does not have")
put("way-in-snapshot-changesets.osm", HEAD + '<osm version="0.6"><changeset id="2" created_at="2026-11-16T10:00:00Z"/><way id="3" version="1"><nd ref="1"/></way></osm>\n', 0, "", "a changeset dump with a way among the changesets: the way is read as snapshot data")
put("duplicate-changesets.osm", HEAD + '<osm version="0.6">\n' + '<changeset id="900000001" created_at="2026-11-16T10:00:00Z" uid="9000001" user="kelmor"><tag k="comment" v="x"/></changeset>\n' * 2 + "</osm>\n", 0, "", "the same changeset twice in a dump: stored once")
put("deep-nesting.osc", osc("<create>\n" + "<x>" * 100000 + "</x>" * 100000 + "\n</create>\n"), 0, "", "100 000 nested unknown elements inside a block: ignored, memory stays small")
bz_bomb = bz2.compress(b"<osm>" + b" " * (300 << 20), 9)
put("bzip2-bomb.osm.bz2", bz_bomb, 2, "decompressed size exceeds the limit", "300 MiB of spaces in a 300-byte bzip2")
pbf = (out.parent / "ingest" / "small.osm.pbf").read_bytes()
put("truncated.osm.pbf", pbf[: len(pbf) * 2 // 3], 2, "PBF blob 2 (following the blob at byte 76)", "a PBF snapshot cut in its third blob")
put("pbf-huge-blob-header.osm.pbf", (0x7FFFFFFF).to_bytes(4, "big") + pbf[4:], 2, "blob header is too big: 2147483647 bytes", "a PBF whose first blob header claims 2 GiB")
head_len = int.from_bytes(pbf[:4], "big")
header = pbf[4 : 4 + head_len]
cut = header.index(b"\x18")  # BlobHeader field 3, datasize (varint)
size = 2_000_000_000
varint = bytearray()
while True:
    varint.append((size & 0x7F) | (0x80 if size > 0x7F else 0))
    size >>= 7
    if not size:
        break
header = header[:cut] + b"\x18" + bytes(varint)
put("pbf-huge-blob-size.osm.pbf", len(header).to_bytes(4, "big") + header + pbf[4 + head_len :], 2, "PBF blob 0", "a PBF whose first blob claims 2 GB of data")
put("regions-invalid-polygon.geojson", '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"name":"Broken"},"geometry":{"type":"Polygon","coordinates":[[[0,0],[1,1]]]}}]}', 2, "at least 4 are needed", "a regions file whose polygon has two positions")
put("regions-not-geojson.geojson", "this is not json", 2, "invalid GeoJSON", "a regions file that is not GeoJSON")
put("land-no-polygons.geojson", '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},"geometry":{"type":"Point","coordinates":[0,0]}}]}', 2, "no Polygon", "a land layer with only a point")

with open(out / "expected.tsv", "w") as f:
    f.write("file\texit\ttext\n")
    for name, code, text, _ in rows:
        f.write(f"{name}\t{code}\t{text}\n")
with open(out / "README.md", "w") as f:
    f.write("# Bad-input corpus\n\nWritten by `scripts/make_bad_fixtures.py`; `expected.tsv` says what each must do "
            "(exit 2: a one-line error naming the file and position, database unchanged; exit 0: ingested, odd parts "
            "skipped and counted).\n\n")
    for name, code, _, desc in rows:
        f.write(f"- `{name}`: {desc}.\n")
print(f"{len(rows)} files in {out}")
