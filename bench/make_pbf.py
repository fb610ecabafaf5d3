#!/usr/bin/env python3
"""Writes a synthetic PBF snapshot for bench/snapshot.sh with libosmium (PyPI `osmium`):
NODES nodes sorted by id over a country-sized box (one in ten tagged), and one way per ten
nodes (eight refs each, tagged). Usage: make_pbf.py OUT.osm.pbf NODES"""
import sys

import osmium

out, n = sys.argv[1], int(sys.argv[2])
writer = osmium.SimpleWriter(out)
try:
    meta = dict(version=1, changeset=1, uid=1, user="bench_mapper", timestamp="2026-01-05T10:00:00Z")
    for i in range(1, n + 1):
        r = (i * 2654435761) % 4294967296
        loc = osmium.osm.Location(5.0 + (r % 6000000) * 1e-6, 45.0 + (r >> 8) % 5000000 * 1e-6)
        tags = {"amenity": "bench"} if i % 10 == 0 else {}
        writer.add_node(osmium.osm.mutable.Node(id=i, location=loc, tags=tags, **meta))
    for w in range(1, n // 10 + 1):
        refs = [min(n, (w - 1) * 10 + k + 1) for k in range(8)]
        writer.add_way(osmium.osm.mutable.Way(id=w, nodes=refs, tags={"building": "yes"}, **meta))
finally:
    writer.close()
