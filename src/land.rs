//! The land layer: which places are land and which are water, and how far a point in water is
//! from the nearest land. Read from GeoJSON polygons (`--land`), indexed with an R-tree of
//! polygon bounding boxes so a lookup touches only nearby polygons.

use std::path::{Path, PathBuf};

use geo::{
    BoundingRect, Closest, ClosestPoint, Contains, Distance, Haversine, MultiPolygon, Point,
    Polygon,
};
use rstar::{RTree, RTreeObject, AABB};

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
}

struct Indexed {
    index: usize,
    envelope: AABB<[f64; 2]>,
}

impl RTreeObject for Indexed {
    type Envelope = AABB<[f64; 2]>;
    fn envelope(&self) -> Self::Envelope {
        self.envelope
    }
}

/// Land polygons (lon/lat degrees) with a spatial index.
pub struct Land {
    polygons: Vec<Polygon<f64>>,
    tree: RTree<Indexed>,
}

impl Land {
    /// A layer with no land at all (everything is water): used when no layer is given, in which
    /// case offshore detection is switched off by the caller.
    #[must_use]
    pub fn empty() -> Self {
        Self::from_polygons(Vec::new())
    }

    /// Builds the layer from polygons.
    #[must_use]
    pub fn from_polygons(polygons: Vec<Polygon<f64>>) -> Self {
        let items = polygons
            .iter()
            .enumerate()
            .filter_map(|(index, p)| {
                let r = p.bounding_rect()?;
                Some(Indexed {
                    index,
                    envelope: AABB::from_corners([r.min().x, r.min().y], [r.max().x, r.max().y]),
                })
            })
            .collect();
        Self {
            polygons,
            tree: RTree::bulk_load(items),
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

    /// Whether a point is on land.
    #[must_use]
    pub fn is_land(&self, c: Coord) -> bool {
        let p = Point::new(c.lon(), c.lat());
        self.tree
            .locate_in_envelope_intersecting(AABB::from_point([c.lon(), c.lat()]))
            .any(|it| self.polygons[it.index].contains(&p))
    }

    /// Distance in metres from a point to the nearest land (0 on land); `None` when the layer is
    /// empty. Searches polygons whose boxes lie within `search_deg` degrees first, then all.
    #[must_use]
    pub fn distance_to_land_m(&self, c: Coord) -> Option<f64> {
        if self.polygons.is_empty() {
            return None;
        }
        if self.is_land(c) {
            return Some(0.0);
        }
        let p = Point::new(c.lon(), c.lat());
        let nearest = |poly: &Polygon<f64>| -> f64 {
            match poly.closest_point(&p) {
                Closest::Intersection(q) | Closest::SinglePoint(q) => Haversine.distance(p, q),
                Closest::Indeterminate => f64::INFINITY,
            }
        };
        // Boxes near the point first: a degree of latitude is ~111 km, so 0.5 degree covers any
        // offshore distance the detectors care about; fall back to a full scan beyond that.
        let near = AABB::from_corners(
            [c.lon() - 0.5, c.lat() - 0.5],
            [c.lon() + 0.5, c.lat() + 0.5],
        );
        let best = self
            .tree
            .locate_in_envelope_intersecting(near)
            .map(|it| nearest(&self.polygons[it.index]))
            .fold(f64::INFINITY, f64::min);
        if best.is_finite() {
            return Some(best);
        }
        Some(
            self.polygons
                .iter()
                .map(nearest)
                .fold(f64::INFINITY, f64::min),
        )
    }
}
