//! The land layer: which places are land and which are water, and how far a point in water is
//! from the nearest land. Read from GeoJSON polygons (`--land`), indexed with an R-tree of
//! polygon bounding boxes so a lookup touches only nearby polygons.

use std::path::{Path, PathBuf};

use geo::{Closest, ClosestPoint, Distance, Haversine, MultiPolygon, Point, Polygon};
use rstar::{RTree, AABB};

use crate::model::Coord;

/// Errors reading a land layer.
#[derive(Debug, thiserror::Error)]
pub enum LandError {
    #[error("{path}: cannot read land layer: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: not a GeoJSON land layer: {message}")]
    Format { path: PathBuf, message: String },
    #[error("the built-in world land layer is damaged: {0}")]
    Builtin(String),
}

/// The default world land layer: Natural Earth 1:10m land (public domain), from the npm package
/// world-atlas 2.0.2, made planar at the antimeridian and packed by `scripts/land/build_land.mjs`.
const WORLD_LAND: &[u8] = include_bytes!("../assets/land/ne-10m-land.bin.gz");

/// Decodes the packed land layer format written by `scripts/land/build_land.mjs`.
fn decode_packed(gz: &[u8]) -> Result<Vec<Polygon<f64>>, String> {
    use std::io::Read as _;
    let mut raw = Vec::new();
    flate2::read::GzDecoder::new(gz)
        .read_to_end(&mut raw)
        .map_err(|e| e.to_string())?;
    let body = raw
        .strip_prefix(b"HVLAND01")
        .ok_or("missing HVLAND01 header")?;
    let mut at = 0usize;
    let mut varint = || -> Result<u64, String> {
        let mut v = 0u64;
        for shift in (0..64).step_by(7) {
            let b = *body.get(at).ok_or("unexpected end of data")?;
            at += 1;
            v |= u64::from(b & 0x7f) << shift;
            if b & 0x80 == 0 {
                return Ok(v);
            }
        }
        Err("varint too long".to_owned())
    };
    let zigzag = |v: u64| -> i64 {
        #[allow(
            clippy::cast_possible_wrap,
            reason = "zigzag decoding is bit arithmetic"
        )]
        let x = (v >> 1) as i64 ^ -((v & 1) as i64);
        x
    };
    let n_poly = varint()?;
    let mut polygons = Vec::new();
    for _ in 0..n_poly {
        let n_rings = varint()?;
        let mut rings = Vec::new();
        for _ in 0..n_rings {
            let n = varint()?;
            let (mut x, mut y) = (0i64, 0i64);
            let mut coords = Vec::new();
            for _ in 0..n {
                x += zigzag(varint()?);
                y += zigzag(varint()?);
                #[allow(clippy::cast_precision_loss, reason = "micro-degrees fit f64 exactly")]
                coords.push(geo::Coord {
                    x: x as f64 / 1e6,
                    y: y as f64 / 1e6,
                });
            }
            rings.push(geo::LineString::new(coords));
        }
        let mut it = rings.into_iter();
        if let Some(outer) = it.next() {
            polygons.push(Polygon::new(outer, it.collect()));
        }
    }
    Ok(polygons)
}

/// Where a run's land layer comes from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum LandSource {
    /// The built-in world layer ([`Land::world`]).
    World,
    /// A GeoJSON file of land polygons.
    File(PathBuf),
    /// No land layer: plain map backdrop, offshore detection off.
    None,
}

impl std::str::FromStr for LandSource {
    type Err = std::convert::Infallible;
    /// `world`, `none`, or a path.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Ok(match s {
            "world" => Self::World,
            "none" => Self::None,
            path => Self::File(PathBuf::from(path)),
        })
    }
}

impl LandSource {
    /// Loads the layer.
    ///
    /// # Errors
    /// When the file cannot be read or is not a land layer.
    pub fn load(&self) -> Result<Land, LandError> {
        match self {
            Self::World => Land::world(),
            Self::File(p) => Land::from_geojson_file(p),
            Self::None => Ok(Land::empty()),
        }
    }
}

/// One polygon edge, in degrees.
type Edge = rstar::primitives::Line<[f64; 2]>;

/// Land polygons (lon/lat degrees) with an R-tree of their edges.
///
/// Point-in-land is an even-odd ray cast eastward that only visits the edges the ray's envelope
/// touches, and distance to land is a nearest-edge search, so both cost O(log n) plus the
/// crossings, however large a polygon is (a continent has tens of thousands of points; testing
/// it whole per edit was the slow part of offshore checks).
pub struct Land {
    polygons: Vec<Polygon<f64>>,
    edges: RTree<Edge>,
}

impl Land {
    /// A layer with no land at all (everything is water): used when no layer is given, in which
    /// case offshore detection is switched off by the caller.
    #[must_use]
    pub fn empty() -> Self {
        Self::from_polygons(Vec::new())
    }

    /// The built-in world land layer (Natural Earth 1:10m land; about 400 000 points, quantised
    /// to about 0.004 degree, so coastlines are good to a few hundred metres).
    ///
    /// # Errors
    /// Only if the embedded data were damaged.
    pub fn world() -> Result<Self, LandError> {
        decode_packed(WORLD_LAND)
            .map(Self::from_polygons)
            .map_err(LandError::Builtin)
    }

    /// Builds the layer from polygons (exteriors and holes alike become indexed edges).
    #[must_use]
    pub fn from_polygons(polygons: Vec<Polygon<f64>>) -> Self {
        let mut edges = Vec::new();
        for p in &polygons {
            for ring in std::iter::once(p.exterior()).chain(p.interiors()) {
                edges.extend(
                    ring.lines()
                        .filter(|l| l.start != l.end)
                        .map(|l| Edge::new([l.start.x, l.start.y], [l.end.x, l.end.y])),
                );
            }
        }
        Self {
            polygons,
            edges: RTree::bulk_load(edges),
        }
    }

    /// Reads Polygon and MultiPolygon geometries from a GeoJSON FeatureCollection, Feature or
    /// bare geometry. Other geometry types are ignored.
    ///
    /// # Errors
    /// When the file cannot be read or is not GeoJSON with at least one polygon.
    pub fn from_geojson_file(path: &Path) -> Result<Self, LandError> {
        let text = std::fs::read_to_string(path).map_err(|source| LandError::Io {
            path: path.to_owned(),
            source,
        })?;
        Self::from_geojson_str(&text).map_err(|message| LandError::Format {
            path: path.to_owned(),
            message,
        })
    }

    /// As [`Land::from_geojson_file`], from text.
    ///
    /// # Errors
    /// A message saying what is wrong with the GeoJSON.
    pub fn from_geojson_str(text: &str) -> Result<Self, String> {
        let polygons = crate::geojson_io::polygons_from_geojson(text)?
            .into_iter()
            .map(|(_, mp)| mp)
            .flat_map(|mp: MultiPolygon<f64>| mp.0)
            .collect::<Vec<_>>();
        if polygons.is_empty() {
            return Err("no Polygon or MultiPolygon geometry found".to_owned());
        }
        Ok(Self::from_polygons(polygons))
    }

    /// Whether the layer has any land.
    #[must_use]
    pub fn is_empty(&self) -> bool {
        self.polygons.is_empty()
    }

    /// All polygons, for drawing.
    #[must_use]
    pub fn polygons(&self) -> &[Polygon<f64>] {
        &self.polygons
    }

    /// Whether a point is on land (even-odd rule over every ring, so holes are water).
    #[must_use]
    pub fn is_land(&self, c: Coord) -> bool {
        let (x, y) = (c.lon(), c.lat());
        let ray = AABB::from_corners([x, y], [f64::from(f32::MAX), y]);
        let mut inside = false;
        for e in self.edges.locate_in_envelope_intersecting(ray) {
            let (a, b) = (e.from, e.to);
            if (a[1] > y) != (b[1] > y) {
                let xi = a[0] + (y - a[1]) * (b[0] - a[0]) / (b[1] - a[1]);
                if xi > x {
                    inside = !inside;
                }
            }
        }
        inside
    }

    /// Distance in metres from a point to the nearest land (0 on land); `None` when the layer is
    /// empty. The candidates are the 16 edges nearest in degrees; the answer is the haversine
    /// distance to the closest point of the best of them (degrees shrink in longitude away from
    /// the equator, so the nearest in degrees is not always the nearest on the ground).
    #[must_use]
    pub fn distance_to_land_m(&self, c: Coord) -> Option<f64> {
        if self.edges.size() == 0 {
            return None;
        }
        if self.is_land(c) {
            return Some(0.0);
        }
        Some(self.water_distance_m(c))
    }

    /// Distance in metres from a point in water to the nearest land.
    fn water_distance_m(&self, c: Coord) -> f64 {
        let p = Point::new(c.lon(), c.lat());
        let best = self
            .edges
            .nearest_neighbor_iter([c.lon(), c.lat()])
            .take(16)
            .map(|e| {
                let line = geo::Line::new(
                    geo::Coord {
                        x: e.from[0],
                        y: e.from[1],
                    },
                    geo::Coord {
                        x: e.to[0],
                        y: e.to[1],
                    },
                );
                match line.closest_point(&p) {
                    Closest::Intersection(q) | Closest::SinglePoint(q) => Haversine.distance(p, q),
                    Closest::Indeterminate => f64::INFINITY,
                }
            })
            .fold(f64::INFINITY, f64::min);
        best
    }

    /// Whether no coastline edge comes near the box (so every point in it is on the same side).
    fn no_edge_near(&self, min: [f64; 2], max: [f64; 2]) -> bool {
        // The margin keeps rounding in the ray cast's crossing test from mattering.
        const MARGIN: f64 = 1e-9;
        let b = AABB::from_corners(
            [min[0] - MARGIN, min[1] - MARGIN],
            [max[0] + MARGIN, max[1] + MARGIN],
        );
        self.edges
            .locate_in_envelope_intersecting(b)
            .next()
            .is_none()
    }
}

/// [`Land::is_land`] and [`Land::distance_to_land_m`] for many points, remembering for each
/// 0.01° square met whether no coastline edge comes near it and, if so, whether it is land: a
/// point in such a square has the answer of the square's centre (the even-odd count only
/// changes across an edge), so most points need no ray cast. Same answers as [`Land`].
pub struct LandLookup<'a> {
    land: &'a Land,
    /// Per square (row and column of 0.01° from 90° S, 180° W): `Some(is land)` when no edge
    /// comes near it, `None` when one does.
    squares: foldhash::HashMap<(i64, i64), Option<bool>>,
}

impl<'a> LandLookup<'a> {
    /// Side of a square, in 1e-7 degrees.
    const SQUARE_E7: i64 = 100_000;

    /// A lookup over `land` with nothing remembered yet.
    #[must_use]
    pub fn new(land: &'a Land) -> Self {
        Self {
            land,
            squares: foldhash::HashMap::default(),
        }
    }

    /// As [`Land::is_land`].
    pub fn is_land(&mut self, c: Coord) -> bool {
        let row = (i64::from(c.lat_e7()) + 900_000_000).div_euclid(Self::SQUARE_E7);
        let col = (i64::from(c.lon_e7()) + 1_800_000_000).div_euclid(Self::SQUARE_E7);
        let land = self.land;
        let known = *self.squares.entry((row, col)).or_insert_with(|| {
            #[allow(
                clippy::cast_precision_loss,
                reason = "square corners are small integers"
            )]
            let deg = |v: i64, base: i64| (v * Self::SQUARE_E7 - base) as f64 / 1e7;
            let min = [deg(col, 1_800_000_000), deg(row, 900_000_000)];
            let max = [deg(col + 1, 1_800_000_000), deg(row + 1, 900_000_000)];
            if !land.no_edge_near(min, max) {
                return None;
            }
            let centre = Coord::from_degrees((min[1] + max[1]) / 2.0, (min[0] + max[0]) / 2.0);
            centre.map(|m| land.is_land(m))
        });
        known.unwrap_or_else(|| land.is_land(c))
    }

    /// As [`Land::distance_to_land_m`].
    pub fn distance_to_land_m(&mut self, c: Coord) -> Option<f64> {
        if self.land.edges.size() == 0 {
            return None;
        }
        if self.is_land(c) {
            return Some(0.0);
        }
        Some(self.land.water_distance_m(c))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn world_layer_knows_some_places() {
        let w = Land::world().unwrap();
        assert!(w.polygons().len() > 4000);
        let at = |lat, lon| Coord::from_degrees(lat, lon).unwrap();
        // From memory, each checked with PyPI global-land-mask: inland points and open ocean,
        // with land on both sides of the antimeridian.
        assert!(w.is_land(at(48.0, 10.0)));
        assert!(w.is_land(at(-25.0, 135.0)));
        assert!(
            w.is_land(at(-17.8, 178.0)),
            "Fiji's main island, next to the antimeridian"
        );
        assert!(
            w.is_land(at(67.0, -179.0)),
            "far north-east Asia, east of the antimeridian"
        );
        assert!(
            w.is_land(at(68.0, 179.9)),
            "far north-east Asia, west of the antimeridian"
        );
        assert!(!w.is_land(at(45.2, -33.6)), "mid North Atlantic");
        assert!(!w.is_land(at(0.0, -150.0)));
        let d = w.distance_to_land_m(at(45.2, -33.6)).unwrap();
        assert!(d > 500_000.0, "{d}");
    }

    #[test]
    fn the_square_lookup_answers_as_the_layer_does() {
        use rand::{Rng, SeedableRng};
        // The world layer around a ragged coast with islands and lakes (the Baltic and the
        // lakes of Finland), points at random and on a fine grid that crosses square edges.
        let w = Land::world().unwrap();
        let mut look = LandLookup::new(&w);
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let mut points: Vec<Coord> = (0..20_000)
            .map(|_| {
                Coord::from_degrees(rng.gen_range(59.0..61.5), rng.gen_range(21.0..26.0)).unwrap()
            })
            .collect();
        for i in 0..200 {
            for j in 0..50 {
                let lat = 60.0 + f64::from(i) * 0.0025;
                let lon = 24.9 + f64::from(j) * 0.0025;
                points.push(Coord::from_degrees(lat, lon).unwrap());
            }
        }
        let (mut land, mut water) = (0, 0);
        for p in points {
            let want = w.is_land(p);
            assert_eq!(look.is_land(p), want, "{p:?}");
            assert_eq!(look.distance_to_land_m(p), w.distance_to_land_m(p), "{p:?}");
            if want {
                land += 1;
            } else {
                water += 1;
            }
        }
        assert!(land > 5_000 && water > 5_000, "{land} {water}");
        let uniform = look.squares.values().filter(|v| v.is_some()).count();
        assert!(
            uniform > look.squares.len() / 4,
            "{uniform} of {}",
            look.squares.len()
        );
    }
}
