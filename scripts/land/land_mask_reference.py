#!/usr/bin/env python3
"""Reference points for checking hexvigil's default land layer against an independent land/sea
mask (PyPI global-land-mask, derived from GLOBE elevation data).

10,000 points uniform on the sphere (fixed seed), kept only when they are farther than 5 km from
a coast by the reference mask: the centre and 16 points on a 5 km circle around it all have the
same class. Writes tests/reference/land_points.csv (lat, lon, is_land).
Run: pip install global-land-mask numpy && python3 scripts/land/land_mask_reference.py
"""
import csv
import math
import pathlib

import numpy as np
from global_land_mask import globe

rng = np.random.default_rng(20261201)
out = pathlib.Path(__file__).resolve().parents[2] / "tests" / "reference" / "land_points.csv"
R = 6371.0088
rows = []
while len(rows) < 10_000:
    z = rng.uniform(-1, 1)
    lon = rng.uniform(-180, 180)
    lat = math.degrees(math.asin(z))
    # Stay off the polar caps, where ice shelves make land and sea a matter of definition.
    if abs(lat) > 85:
        continue
    centre = bool(globe.is_land(lat, lon))
    same = True
    for k in range(16):
        b = 2 * math.pi * k / 16
        d = 5.0 / R
        la1, lo1 = math.radians(lat), math.radians(lon)
        la2 = math.asin(math.sin(la1) * math.cos(d) + math.cos(la1) * math.sin(d) * math.cos(b))
        lo2 = lo1 + math.atan2(math.sin(b) * math.sin(d) * math.cos(la1), math.cos(d) - math.sin(la1) * math.sin(la2))
        lo2d = (math.degrees(lo2) + 540) % 360 - 180
        if bool(globe.is_land(math.degrees(la2), lo2d)) != centre:
            same = False
            break
    if same:
        rows.append((round(lat, 6), round(lon, 6), int(centre)))
with open(out, "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["lat", "lon", "is_land"])
    w.writerows(rows)
print(f"wrote {len(rows)} points, {sum(r[2] for r in rows)} on land, to {out}")
