#!/usr/bin/env python3
"""Writes tests/reference/mercator.csv: Web Mercator reference values for tests/render.rs.

Source: the `mercantile` package (Mapbox), which implements the slippy-map convention described on
the OSM wiki page "Slippy map tilenames". Columns:
  lon, lat       the input point (degrees)
  x, y           normalised Web Mercator position, 0..1, y growing southwards, computed from
                 mercantile.xy (metres) as x = (X + R*pi) / (2*R*pi), y = (R*pi - Y) / (2*R*pi);
                 latitudes beyond the Web Mercator limit are clamped to +-85.0511287798 first
  zoom, tile_x, tile_y   mercantile.tile at that zoom (the tile holding the point)

Usage: pip install mercantile && python3 scripts/mercator_reference.py > tests/reference/mercator.csv
"""

import math

import mercantile

LIMIT = 85.0511287798066
HALF = math.pi * 6378137.0

POINTS = [
    (0.0, 0.0, 1),
    (13.4050, 52.5200, 12),
    (-122.4194, 37.7749, 14),
    (151.2093, -33.8688, 10),
    (-179.95, -16.5, 8),
    (179.95, 65.0, 6),
    (-0.1276, 51.5072, 16),
    (25.0, 84.9, 5),
    (-70.0, -84.9, 5),
    (10.0, 89.5, 3),
    (-45.0, -89.9, 3),
]


def main() -> None:
    print("lon,lat,x,y,zoom,tile_x,tile_y")
    for lon, lat, zoom in POINTS:
        clamped = max(-LIMIT, min(LIMIT, lat))
        mx, my = mercantile.xy(lon, clamped)
        x = (mx + HALF) / (2 * HALF)
        y = (HALF - my) / (2 * HALF)
        tile = mercantile.tile(lon, clamped, zoom)
        print(f"{lon!r},{lat!r},{x:.12f},{y:.12f},{zoom},{tile.x},{tile.y}")


if __name__ == "__main__":
    main()
