#!/usr/bin/env python3
"""Writes Web Mercator reference values for the tests.

  python3 scripts/mercator_reference.py > tests/reference/mercator.csv          (tests/render.rs)
  python3 scripts/mercator_reference.py tiles > tests/reference/tiles.csv       (tests/tiles.rs)

Source: the `mercantile` package (Mapbox), which implements the slippy-map convention described on
the OSM wiki page "Slippy map tilenames". Columns:
  lon, lat       the input point (degrees)
  x, y           normalised Web Mercator position, 0..1, y growing southwards, computed from
                 mercantile.xy (metres) as x = (X + R*pi) / (2*R*pi), y = (R*pi - Y) / (2*R*pi);
                 latitudes beyond the Web Mercator limit are clamped to +-85.0511287798 first
  zoom, tile_x, tile_y   mercantile.tile at that zoom (the tile holding the point)

tiles.csv columns, for a grid of points and zooms:
  lon, lat, zoom         the input point (degrees) and zoom
  x, y                   mercantile.tile(lon, lat, zoom): the XYZ tile holding the point
  west, south, east, north   mercantile.bounds(x, y, zoom): that tile's edges in degrees
  tms_y                  the row as MBTiles stores it: 2^zoom - 1 - y (MBTiles 1.3, "Tiles")
  ul_lon, ul_lat         mercantile.ul(x, y, zoom): the tile's north-west corner
Latitudes beyond the Web Mercator limit are clamped to +-85.0511287798 first, as mercantile
expects.

Usage: pip install mercantile && python3 scripts/mercator_reference.py [tiles] > FILE
"""

import sys

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


TILE_POINTS = [
    (0.0, 0.0),
    (-33.6931, 45.1967),
    (-33.5291, 45.2704),
    (13.4050, 52.5200),
    (-122.4194, 37.7749),
    (151.2093, -33.8688),
    (179.9999, -16.5),
    (-179.9999, -16.5),
    (25.0, 84.9),
    (-70.0, -84.9),
    (10.0, 89.5),
    (-0.0001, 0.0001),
]
TILE_ZOOMS = [0, 1, 5, 6, 9, 12, 14, 18, 22]


def tiles() -> None:
    print("lon,lat,zoom,x,y,west,south,east,north,tms_y,ul_lon,ul_lat")
    for lon, lat in TILE_POINTS:
        clamped = max(-LIMIT, min(LIMIT, lat))
        for zoom in TILE_ZOOMS:
            t = mercantile.tile(lon, clamped, zoom)
            b = mercantile.bounds(t)
            ul = mercantile.ul(t)
            tms_y = (2**zoom - 1) - t.y
            print(
                f"{lon!r},{lat!r},{zoom},{t.x},{t.y},{b.west:.12f},{b.south:.12f},"
                f"{b.east:.12f},{b.north:.12f},{tms_y},{ul.lng:.12f},{ul.lat:.12f}"
            )


def main() -> None:
    if sys.argv[1:] == ["tiles"]:
        tiles()
        return
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
