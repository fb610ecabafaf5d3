// Builds hexvigil's default world land layer, assets/land/ne-10m-land.bin.gz, from Natural Earth
// 1:10m land (public domain) as carried by the npm package world-atlas 2.0.2 (TopoJSON, quantised
// to 0.0036 x 0.0017 degrees). Run: cd scripts/land && npm ci && node build_land.mjs
//
// Steps: decode the TopoJSON; make every ring planar in longitude/latitude (rings that cross the
// antimeridian are unwrapped, cut at +-180 and the pieces shifted back; the ring around the South
// Pole is closed along the pole); then write the compact binary the Rust side reads:
//   "HVLAND01", varint polygon count, then per polygon: varint ring count, per ring: varint point
//   count and the points as zigzag varint deltas of (lon, lat) in 1e-6 degrees; the whole gzipped.
import fs from "node:fs";
import zlib from "node:zlib";
import { feature } from "topojson-client";
import polygonClipping from "polygon-clipping";

const topo = JSON.parse(fs.readFileSync("node_modules/world-atlas/land-10m.json", "utf8"));
const land = feature(topo, topo.objects.land);
const geoms = land.type === "FeatureCollection" ? land.features.map((f) => f.geometry) : [land.geometry];

function unwrap(ring) {
  const out = [[ring[0][0], ring[0][1]]];
  let shift = 0;
  for (let i = 1; i < ring.length; i++) {
    const d = ring[i][0] - ring[i - 1][0];
    if (d > 180) shift -= 360;
    else if (d < -180) shift += 360;
    out.push([ring[i][0] + shift, ring[i][1]]);
  }
  return out;
}

const polygons = [];
let crossing = 0;
for (const g of geoms) {
  const ps = g.type === "Polygon" ? [g.coordinates] : g.coordinates;
  for (const p of ps) {
    const crosses = p.some((r) => r.some((pt, i) => i > 0 && Math.abs(pt[0] - r[i - 1][0]) > 180));
    if (!crosses) {
      polygons.push(p);
      continue;
    }
    crossing++;
    let rings = p.map(unwrap);
    const outer = rings[0];
    const span = outer[outer.length - 1][0] - outer[0][0];
    if (Math.abs(span) > 180) {
      // A ring around a pole: close it through the pole on the side it encloses.
      const pole = outer.reduce((s, q) => s + q[1], 0) / outer.length < 0 ? -90 : 90;
      const last = outer[outer.length - 1];
      outer.push([last[0], pole], [outer[0][0], pole], [outer[0][0], outer[0][1]]);
    }
    // Cut into the [-540, 540] windows and shift each piece back into [-180, 180].
    for (const k of [-1, 0, 1]) {
      const lo = -180 + 360 * k;
      const box = [[[lo, -90], [lo + 360, -90], [lo + 360, 90], [lo, 90], [lo, -90]]];
      const pieces = polygonClipping.intersection(rings, box);
      for (const piece of pieces) {
        polygons.push(piece.map((r) => r.map(([x, y]) => [x - 360 * k, y])));
      }
    }
  }
}

const bytes = [];
const varint = (n) => {
  while (n >= 0x80) {
    bytes.push((n & 0x7f) | 0x80);
    n = Math.floor(n / 128);
  }
  bytes.push(n);
};
const zigzag = (n) => (n >= 0 ? 2 * n : -2 * n - 1);
for (const c of "HVLAND01") bytes.push(c.charCodeAt(0));
varint(polygons.length);
let points = 0;
for (const p of polygons) {
  varint(p.length);
  for (const r of p) {
    varint(r.length);
    let px = 0, py = 0;
    for (const [x, y] of r) {
      const ix = Math.round(Math.max(-180, Math.min(180, x)) * 1e6);
      const iy = Math.round(Math.max(-90, Math.min(90, y)) * 1e6);
      varint(zigzag(ix - px));
      varint(zigzag(iy - py));
      px = ix; py = iy;
      points++;
    }
  }
}
const out = new URL("../../assets/land/ne-10m-land.bin.gz", import.meta.url);
fs.writeFileSync(out, zlib.gzipSync(Buffer.from(bytes), { level: 9, mtime: 0 }));
console.log(`polygons ${polygons.length}, points ${points}, antimeridian/polar polygons fixed ${crossing}, ${fs.statSync(out).size} bytes`);
