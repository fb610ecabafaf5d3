//! Clipping an ingest to an area, so a city's database does not keep the planet's diffs.
//!
//! The rule is deliberately simple (documented in README.md, "Following a replication server"):
//! - a node with a position is kept when the position lies in the area; a node without one (a
//!   deletion) is kept when the database or the node-location index already knows it;
//! - a way is kept when one of its nodes has a known position in the area (positions from the
//!   node-location index, including nodes of the same ingest read before it), or when the
//!   database already holds the way;
//! - a relation is kept when the database already holds it, when one of its member nodes has a
//!   known position in the area, or when one of its member ways is in the database;
//! - changeset metadata is kept when its bounding box meets the area's bounding box.
//!
//! Elements dropped this way are counted, not stored. An element that moves out of the area
//! keeps being followed, since the database knows it.

use std::path::Path;
use std::str::FromStr;

use geo::{BoundingRect, Contains, MultiPolygon, Point, Rect};

use crate::model::Coord;

/// The area an ingest keeps: a bounding box or (multi)polygons from GeoJSON.
#[derive(Debug, Clone)]
pub struct Clip {
    /// Polygons in longitude, latitude; `None` for a plain bounding box.
    polygons: Option<MultiPolygon<f64>>,
    /// The bounding box (of the polygons, or the box itself).
    rect: Rect<f64>,
}

impl Clip {
    /// A box from its corners in degrees.
    ///
    /// # Errors
    /// When a corner is out of range or the box is empty.
    pub fn bbox(min_lon: f64, min_lat: f64, max_lon: f64, max_lat: f64) -> Result<Self, String> {
        let ok_lon = |v: f64| (-180.0..=180.0).contains(&v);
        let ok_lat = |v: f64| (-90.0..=90.0).contains(&v);
        if !(ok_lon(min_lon) && ok_lon(max_lon) && ok_lat(min_lat) && ok_lat(max_lat)) {
            return Err("a bounding box corner is outside -180..180 / -90..90".to_owned());
        }
        if min_lon >= max_lon || min_lat >= max_lat {
            return Err("a bounding box needs min_lon < max_lon and min_lat < max_lat".to_owned());
        }
        Ok(Self {
            polygons: None,
            rect: Rect::new((min_lon, min_lat), (max_lon, max_lat)),
        })
    }

    /// Every polygon of a GeoJSON file (FeatureCollection, Feature or geometry).
    ///
    /// # Errors
    /// A message naming the file when it is unreadable, not GeoJSON or holds no polygon.
    pub fn from_geojson(path: &Path) -> Result<Self, String> {
        let text = std::fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
        let polys = crate::geojson_io::polygons_from_geojson(&text)
            .map_err(|e| format!("{}: {e}", path.display()))?;
        let all: MultiPolygon<f64> = polys.into_iter().flat_map(|(_, mp)| mp.0).collect();
        let rect = all
            .bounding_rect()
            .ok_or_else(|| format!("{}: no polygon to clip to", path.display()))?;
        Ok(Self {
            polygons: Some(all),
            rect,
        })
    }

    /// Whether a position lies in the area (edges count as inside for a box).
    #[must_use]
    pub fn contains(&self, c: Coord) -> bool {
        let (lon, lat) = (c.lon(), c.lat());
        let (min, max) = (self.rect.min(), self.rect.max());
        if lon < min.x || lon > max.x || lat < min.y || lat > max.y {
            return false;
        }
        self.polygons
            .as_ref()
            .is_none_or(|p| p.contains(&Point::new(lon, lat)))
    }

    /// Whether a box (min and max corners) meets the area's bounding box.
    #[must_use]
    pub fn meets_box(&self, lo: Coord, hi: Coord) -> bool {
        let (min, max) = (self.rect.min(), self.rect.max());
        lo.lon() <= max.x && hi.lon() >= min.x && lo.lat() <= max.y && hi.lat() >= min.y
    }
}

impl FromStr for Clip {
    type Err = String;

    /// `min_lon,min_lat,max_lon,max_lat` in degrees.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let v: Vec<f64> = s
            .split(',')
            .map(|p| p.trim().parse::<f64>())
            .collect::<Result<_, _>>()
            .map_err(|_| format!("'{s}' is not min_lon,min_lat,max_lon,max_lat in degrees"))?;
        match v[..] {
            [a, b, c, d] => Self::bbox(a, b, c, d),
            _ => Err(format!(
                "'{s}' is not min_lon,min_lat,max_lon,max_lat (four numbers)"
            )),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn c(lat: f64, lon: f64) -> Coord {
        Coord::from_degrees(lat, lon).unwrap()
    }

    #[test]
    fn boxes_parse_and_contain() {
        let clip: Clip = "10,50,11,51".parse().unwrap();
        assert!(clip.contains(c(50.5, 10.5)));
        assert!(!clip.contains(c(51.5, 10.5)));
        assert!(!clip.contains(c(50.5, 9.9)));
        assert!(clip.meets_box(c(50.9, 10.9), c(52.0, 12.0)));
        assert!(!clip.meets_box(c(52.0, 10.0), c(53.0, 11.0)));
        assert!("11,50,10,51".parse::<Clip>().is_err());
        assert!("10,50,11".parse::<Clip>().is_err());
        assert!("10,50,11,x".parse::<Clip>().is_err());
    }

    #[test]
    fn polygons_contain_by_shape_not_box() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("area.geojson");
        // A triangle: its bounding box holds (0.9, 0.1) but the triangle does not.
        std::fs::write(
            &p,
            r#"{"type":"Polygon","coordinates":[[[0,0],[1,0],[0,1],[0,0]]]}"#,
        )
        .unwrap();
        let clip = Clip::from_geojson(&p).unwrap();
        assert!(clip.contains(c(0.1, 0.1)));
        assert!(!clip.contains(c(0.9, 0.9)));
        std::fs::write(&p, r#"{"type":"Point","coordinates":[0,0]}"#).unwrap();
        assert!(Clip::from_geojson(&p).unwrap_err().contains("no polygon"));
    }
}
