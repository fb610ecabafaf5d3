#!/usr/bin/env python3
"""Writes the two PBF files in fuzz/regressions/ that reach, in any build, the osmpbf 0.3.8
panics the snapshot_pbf fuzz target found.

The fuzzer's own inputs only get that far in the fuzz build: miniz_oxide skips the zlib
Adler-32 check under `cfg(fuzzing)`, and an ordinary build refuses them as a corrupt deflate
stream. These are well-formed files (valid framing, zlib and protobuf) with one bad value each.
Encoding per the OSM PBF format (fileformat.proto, osmformat.proto). Standard library only.

    python3 scripts/fuzz_pbf_regressions.py
"""
import pathlib
import struct
import zlib

OUT = pathlib.Path(__file__).resolve().parent.parent / "fuzz" / "regressions"


def vi(n):
    out = b""
    while True:
        c, n = n & 0x7F, n >> 7
        if n:
            out += bytes([c | 0x80])
        else:
            return out + bytes([c])


def zz(n):
    return (n << 1) ^ (n >> 63)


def ld(field, data):
    return vi((field << 3) | 2) + vi(len(data)) + data


def num(field, n):
    return vi(field << 3) + vi(n & 0xFFFFFFFFFFFFFFFF)


def packed(field, xs):
    return ld(field, b"".join(vi(x & 0xFFFFFFFFFFFFFFFF) for x in xs))


def blob(kind, payload):
    body = num(2, len(payload)) + ld(3, zlib.compress(payload))
    header = ld(1, kind.encode()) + num(3, len(body))
    return struct.pack(">I", len(header)) + header + body


HEADER = blob("OSMHeader", ld(4, b"OsmSchema-V0.6"))
STRINGS = ld(1, ld(1, b"") + ld(1, b"outer"))

# A relation whose one member has type 18 (MemberType has 0, 1 and 2): osmpbf unwraps it.
RELATION = num(1, 7) + packed(8, [1]) + packed(9, [zz(5)]) + packed(10, [18])
# One dense node whose latitude (2^62) times the granularity (2e9) overflows i64.
DENSE = packed(1, [zz(1)]) + packed(8, [zz(1 << 62)]) + packed(9, [zz(0)])

FILES = {
    "pbf-relation-member-type-18-valid-zlib.pbf": HEADER
    + blob("OSMData", STRINGS + ld(2, ld(4, RELATION))),
    "pbf-dense-latitude-multiply-overflow-valid-zlib.pbf": HEADER
    + blob("OSMData", STRINGS + ld(2, ld(2, DENSE)) + num(17, 2_000_000_000)),
}

for name, data in FILES.items():
    (OUT / name).write_bytes(data)
    print(name, len(data), "bytes")
