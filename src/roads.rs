//! Main roads from the snapshot as faint context on heat images: visible ways tagged
//! `highway=motorway`, `trunk`, `primary`, `secondary` or `tertiary` (and their `_link` roads),
//! read from the element state and placed with the node-location index.
//!
//! Kept cheap: one sequential scan of the stored ways, one index lookup per node of a main
//! road, and a cap on the nodes read so a country-sized database cannot stall a report.

use crate::model::ElementType;
use crate::store::{packed_tag, unpack_refs, Store, StoreError};

/// The `highway` values drawn.
pub const MAIN_ROAD_CLASSES: [&str; 10] = [
    "motorway",
    "motorway_link",
    "trunk",
    "trunk_link",
    "primary",
    "primary_link",
    "secondary",
    "secondary_link",
    "tertiary",
    "tertiary_link",
];

/// Most node positions read for road context; ways beyond it are left out (and the result says
/// so).
pub const MAX_ROAD_NODES: usize = 2_000_000;

/// Main roads as lon/lat polylines.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct MainRoads {
    /// One polyline per run of placed nodes of a way, in way id order.
    pub lines: Vec<Vec<(f64, f64)>>,
    /// Whether [`MAX_ROAD_NODES`] was reached and some roads were left out.
    pub truncated: bool,
}

/// The main roads with at least one node inside `extent` (lon/lat). A way's nodes without a
/// known position split it into separate polylines.
///
/// # Errors
/// On SQLite failure.
pub fn main_roads(store: &Store, extent: geo::Rect<f64>) -> Result<MainRoads, StoreError> {
    let ways = store.element_state()?;
    let nodes = store.node_index()?;
    let (min, max) = (extent.min(), extent.max());
    let inside =
        |(lon, lat): (f64, f64)| (min.x..=max.x).contains(&lon) && (min.y..=max.y).contains(&lat);
    let mut out = MainRoads::default();
    let mut nodes_read = 0usize;
    for row in ways.rows_of(ElementType::Way) {
        let (_, way) = row?;
        if !way.visible
            || !packed_tag(&way.tags, "highway").is_some_and(|h| MAIN_ROAD_CLASSES.contains(&h))
        {
            continue;
        }
        let refs: Vec<i64> = way
            .refs
            .as_deref()
            .map(|r| unpack_refs(r).collect())
            .unwrap_or_default();
        if nodes_read + refs.len() > MAX_ROAD_NODES {
            out.truncated = true;
            break;
        }
        nodes_read += refs.len();
        let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
        for id in refs {
            match nodes.get(id)? {
                Some(n) => {
                    let p = (n.coord.lon(), n.coord.lat());
                    if let Some(run) = runs.last_mut() {
                        run.push(p);
                    }
                }
                None => runs.push(Vec::new()),
            }
        }
        let near = runs.iter().flatten().any(|&p| inside(p));
        if near {
            out.lines.extend(runs.into_iter().filter(|r| r.len() >= 2));
        }
    }
    Ok(out)
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "test set-up")]
mod tests {
    use super::*;

    #[test]
    fn reads_main_roads_only_and_splits_at_unknown_nodes() {
        let dir = tempfile::tempdir().unwrap();
        let mut store = Store::open(&dir.path().join("s.db")).unwrap();
        let way = |id: i64, hw: &str, refs: &[i64]| {
            let nds: String = refs.iter().map(|r| format!(r#"<nd ref="{r}"/>"#)).collect();
            format!(
                r#"<way id="{id}" version="1">{nds}<tag k="highway" v="{hw}"/><tag k="name" v="Quay Road"/></way>"#
            )
        };
        let snapshot = format!(
            r#"<osm version="0.6"><node id="1" version="1" lat="10.0" lon="20.0"/><node id="2" version="1" lat="10.1" lon="20.1"/><node id="3" version="1" lat="10.2" lon="20.2"/><node id="5" version="1" lat="10.3" lon="20.3"/>{}{}{}</osm>"#,
            // Node 4 is unknown: the first road splits into two runs.
            way(10, "secondary", &[1, 2, 3, 4, 5, 1]),
            way(11, "footway", &[1, 2]),
            way(12, "tertiary_link", &[2, 3]),
        );
        let file = dir.path().join("s.osm");
        std::fs::write(&file, snapshot).unwrap();
        crate::ingest::ingest(&mut store, &[file], &crate::progress::Progress::silent()).unwrap();
        let extent = geo::Rect::new((19.0, 9.0), (21.0, 11.0));
        let r = main_roads(&store, extent).unwrap();
        assert!(!r.truncated);
        assert_eq!(r.lines.len(), 3, "{:?}", r.lines);
        assert_eq!(r.lines[0].len(), 3);
        assert!((r.lines[0][1].0 - 20.1).abs() < 1e-6 && (r.lines[0][1].1 - 10.1).abs() < 1e-6);
        assert_eq!(r.lines[1].len(), 2);
        // Nothing near a far-away extent.
        let far = geo::Rect::new((-50.0, -50.0), (-49.0, -49.0));
        assert!(main_roads(&store, far).unwrap().lines.is_empty());
    }
}
