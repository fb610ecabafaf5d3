//! Regions: named polygons from a GeoJSON file (`name` property), each with its own report page.
//! Without a regions file, one region covers everything ingested.
//!
//! The assignment rule: a cell belongs to the **first region, in file order, whose polygon
//! contains the cell's centre or has it on its boundary**. So every cell goes to at most one
//! region: where regions overlap, the one listed first takes the cell; a centre lying exactly
//! on the edge two neighbouring regions share goes to the first of them (a strict "inside"
//! test would drop it from both); a cell whose centre is in no region is in no report.

use std::path::{Path, PathBuf};

use geo::{Intersects, MultiPolygon, Point};
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

/// The index of the region a cell belongs to: the first whose area holds the cell's centre,
/// inside or on its boundary (see the module documentation).
#[must_use]
pub fn region_of(regions: &[Region], cell: CellIndex) -> Option<usize> {
    let c = LatLng::from(cell);
    let p = Point::new(c.lng(), c.lat());
    regions
        .iter()
        .position(|r| r.area.as_ref().is_none_or(|a| a.intersects(&p)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use geo::{Contains, Coord, LineString, Polygon, Rect};
    use h3o::Resolution;

    fn fixture() -> Vec<Region> {
        let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/regions/regions.geojson");
        load(&path).unwrap_or_else(|e| panic!("{e}"))
    }

    fn rect(west: f64, south: f64, east: f64, north: f64) -> MultiPolygon<f64> {
        MultiPolygon(vec![Rect::new((west, south), (east, north)).to_polygon()])
    }

    /// Every resolution-8 cell whose centre falls in the box around the fixture regions.
    fn cells_around() -> Vec<CellIndex> {
        let mut cells: Vec<CellIndex> = Vec::new();
        for i in 0..=120 {
            for j in 0..=40 {
                let lon = -128.75 + 0.2 * f64::from(i) / 120.0;
                let lat = -12.43 + 0.05 * f64::from(j) / 40.0;
                if let Ok(ll) = LatLng::new(lat, lon) {
                    cells.push(ll.to_cell(Resolution::Eight));
                }
            }
        }
        cells.sort_unstable();
        cells.dedup();
        cells
    }

    #[test]
    fn fixture_has_two_overlapping_regions_and_an_empty_one() {
        let regions = fixture();
        let names: Vec<&str> = regions.iter().map(|r| r.name.as_str()).collect();
        assert_eq!(names, ["Brindlecove", "Ostermarra", "Quellingfen"]);
        let strip = Point::new(-128.705, -12.40);
        assert!(regions[..2]
            .iter()
            .all(|r| r.area.as_ref().is_some_and(|a| a.contains(&strip))));
    }

    #[test]
    fn each_cell_goes_to_the_first_region_holding_its_centre() {
        let regions = fixture();
        let (mut overlap, mut straddling) = (0, 0);
        let mut per_region = [0_usize; 3];
        let mut inside_any = 0;
        for cell in cells_around() {
            let c = LatLng::from(cell);
            let centre = Point::new(c.lng(), c.lat());
            let holding: Vec<usize> = (0..regions.len())
                .filter(|&i| {
                    regions[i]
                        .area
                        .as_ref()
                        .is_some_and(|a| a.intersects(&centre))
                })
                .collect();
            let got = region_of(&regions, cell);
            assert_eq!(got, holding.first().copied(), "cell {cell}");
            if holding.len() > 1 {
                overlap += 1;
                assert_eq!(got, Some(0), "overlap cell {cell} goes to the first region");
            }
            // A cell whose hexagon crosses a region's edge is a border cell: it still goes to
            // exactly one region, the one holding its centre.
            let hexagon = Polygon::new(
                LineString::from(
                    cell.boundary()
                        .iter()
                        .map(|ll| Coord {
                            x: ll.lng(),
                            y: ll.lat(),
                        })
                        .collect::<Vec<_>>(),
                ),
                Vec::new(),
            );
            let touched = regions
                .iter()
                .filter(|r| r.area.as_ref().is_some_and(|a| a.intersects(&hexagon)))
                .count();
            let whole = regions
                .iter()
                .any(|r| r.area.as_ref().is_some_and(|a| a.contains(&hexagon)));
            if touched > 0 && !whole {
                straddling += 1;
            }
            if let Some(i) = got {
                per_region[i] += 1;
                inside_any += 1;
            }
        }
        assert!(
            overlap >= 5,
            "the fixture's overlap holds cell centres ({overlap})"
        );
        assert!(straddling >= 20, "border cells were tested ({straddling})");
        assert!(per_region.iter().all(|&n| n > 0), "{per_region:?}");
        assert_eq!(per_region.iter().sum::<usize>(), inside_any);
    }

    #[test]
    fn a_centre_on_a_shared_edge_goes_to_the_first_region() {
        let cell = LatLng::new(-12.405, -128.69)
            .unwrap_or_else(|e| panic!("{e}"))
            .to_cell(Resolution::Eight);
        let c = LatLng::from(cell);
        let (x, y) = (c.lng(), c.lat());
        let west = Region {
            name: "West".to_owned(),
            area: Some(rect(x - 0.01, y - 0.01, x, y + 0.01)),
        };
        let east = Region {
            name: "East".to_owned(),
            area: Some(rect(x, y - 0.01, x + 0.01, y + 0.01)),
        };
        // The centre lies on the shared edge: strictly inside neither.
        let p = Point::new(x, y);
        for r in [&west, &east] {
            assert!(!r.area.as_ref().is_some_and(|a| a.contains(&p)));
        }
        assert_eq!(region_of(&[west.clone(), east.clone()], cell), Some(0));
        assert_eq!(region_of(&[east.clone(), west.clone()], cell), Some(0));
        assert_eq!(region_of(&[east], cell), Some(0));
        let far = Region {
            name: "Far".to_owned(),
            area: Some(rect(x + 1.0, y, x + 1.1, y + 0.1)),
        };
        assert_eq!(region_of(&[far, west], cell), Some(1));
        assert_eq!(region_of(&everything(), cell), Some(0));
    }
}
