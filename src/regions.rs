//! Regions: named polygons from a GeoJSON file (`name` property), each with its own report page.
//! A cell belongs to the first region containing its centre. Without a regions file, one region
//! covers everything ingested.

use std::path::{Path, PathBuf};

use geo::{Contains, MultiPolygon, Point};
use h3o::{CellIndex, LatLng};

/// A named area.
#[derive(Debug, Clone)]
pub struct Region {
    pub name: String,
    /// `None` for the catch-all region.
    pub area: Option<MultiPolygon<f64>>,
}

/// Errors reading a regions file.
#[derive(Debug, thiserror::Error)]
pub enum RegionError {
    #[error("{path}: cannot read regions file: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: not a usable regions file: {message}")]
    Format { path: PathBuf, message: String },
}

/// The region used when no file is given.
#[must_use]
pub fn everything() -> Vec<Region> {
    vec![Region {
        name: "All data".to_owned(),
        area: None,
    }]
}

/// Reads regions from GeoJSON: every Polygon/MultiPolygon feature, named by its `name`
/// property (or "Region N").
///
/// # Errors
/// When the file is unreadable, not GeoJSON, or has no polygon.
pub fn load(path: &Path) -> Result<Vec<Region>, RegionError> {
    let text = std::fs::read_to_string(path).map_err(|source| RegionError::Io {
        path: path.to_owned(),
        source,
    })?;
    let fmt = |message: String| RegionError::Format {
        path: path.to_owned(),
        message,
    };
    let polys = crate::geojson_io::polygons_from_geojson(&text).map_err(fmt)?;
    if polys.is_empty() {
        return Err(fmt("no Polygon or MultiPolygon feature found".to_owned()));
    }
    Ok(polys
        .into_iter()
        .enumerate()
        .map(|(i, (name, mp))| Region {
            name: name
                .filter(|n| !n.trim().is_empty())
                .unwrap_or_else(|| format!("Region {}", i + 1)),
            area: Some(mp),
        })
        .collect())
}

/// The index of the region a cell belongs to (by its centre), if any.
#[must_use]
pub fn region_of(regions: &[Region], cell: CellIndex) -> Option<usize> {
    let c = LatLng::from(cell);
    let p = Point::new(c.lng(), c.lat());
    regions
        .iter()
        .position(|r| r.area.as_ref().is_none_or(|a| a.contains(&p)))
}
