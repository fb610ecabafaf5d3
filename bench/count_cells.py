#!/usr/bin/env python3
"""The pipeline a practitioner would write instead of hexvigil's ingest + aggregation: read a
snapshot and osmChange files with pyosmium (the reference OSM library's Python bindings), keep
node locations in an osmium location index, place ways at the mean of their nodes, and count
creates/modifies/deletes per H3 cell (PyPI h3, the reference bindings) and ISO week.

Usage: bench/count_cells.py [--resolution 8] SNAPSHOT DIFF...   (prints a one-line summary)
Needs: pip install osmium h3
"""
import argparse
import collections
import datetime
import sys
import time

import h3
import osmium


class Counter(osmium.SimpleHandler):
    def __init__(self, index, resolution):
        super().__init__()
        self.index = index
        self.res = resolution
        self.counts = collections.Counter()
        self.elements = 0
        self.unplaced = 0

    def _count(self, obj, lat, lon):
        self.elements += 1
        if lat is None:
            self.unplaced += 1
            return
        if obj.deleted:
            op = "delete"
        elif obj.version == 1:
            op = "create"
        else:
            op = "modify"
        week = obj.timestamp.isocalendar()[:2] if obj.timestamp else (0, 0)
        self.counts[(h3.latlng_to_cell(lat, lon, self.res), week, op)] += 1

    def node(self, n):
        if n.location.valid():
            self.index.set(n.id, n.location)
            self._count(n, n.location.lat, n.location.lon)
        else:
            try:
                loc = self.index.get(n.id)
                self._count(n, loc.lat, loc.lon)
            except KeyError:
                self._count(n, None, None)

    def way(self, w):
        lat = lon = 0.0
        k = 0
        for nd in w.nodes:
            try:
                loc = self.index.get(nd.ref)
            except KeyError:
                continue
            lat += loc.lat
            lon += loc.lon
            k += 1
        self._count(w, lat / k if k else None, lon / k if k else None)

    def relation(self, r):
        self._count(r, None, None)


class Snapshot(osmium.SimpleHandler):
    def __init__(self, index):
        super().__init__()
        self.index = index

    def node(self, n):
        self.index.set(n.id, n.location)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--resolution", type=int, default=8)
    ap.add_argument("snapshot")
    ap.add_argument("diffs", nargs="+")
    a = ap.parse_args()
    t0 = time.perf_counter()
    index = osmium.index.create_map("flex_mem")
    Snapshot(index).apply_file(a.snapshot)
    c = Counter(index, a.resolution)
    for d in a.diffs:
        c.apply_file(d)
    dt = time.perf_counter() - t0
    print(
        f"python+osmium+h3: {len(a.diffs)} diffs, {c.elements} element changes, "
        f"{len(c.counts)} cell-week-op counts, {c.unplaced} unplaced, {dt:.2f} s, "
        f"{c.elements / dt:.0f} elements/s"
    )


if __name__ == "__main__":
    sys.exit(main())
