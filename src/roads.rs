//! Main roads from the snapshot as faint context on heat images: visible ways tagged
//! `highway=motorway`, `trunk`, `primary`, `secondary` or `tertiary` (and their `_link` roads),
//! read from the `elements` table and placed with the node-location index (the same table).
//!
//! Kept cheap: one scan of the ways whose tags mention `highway`, one primary-key lookup per
//! node, and a cap on the nodes read so a country-sized database cannot stall a report.

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
    let conn = store.conn();
    let mut ways = conn
        .prepare(
            "SELECT tags, refs FROM elements \
             WHERE etype = 1 AND visible = 1 AND instr(tags, ?1) > 0 ORDER BY eid",
        )
        .map_err(|e| store.map_err(e))?;
    let mut node = conn
        .prepare_cached("SELECT lat_e7, lon_e7 FROM elements WHERE etype = 0 AND eid = ?1")
        .map_err(|e| store.map_err(e))?;
    let (min, max) = (extent.min(), extent.max());
    let inside =
        |(lon, lat): (f64, f64)| (min.x..=max.x).contains(&lon) && (min.y..=max.y).contains(&lat);
    let mut rows = ways
        .query(["highway\u{1F}"])
        .map_err(|e| store.map_err(e))?;
    let mut out = MainRoads::default();
    let mut nodes_read = 0usize;
    while let Some(row) = rows.next().map_err(|e| store.map_err(e))? {
        let tags: String = row.get(0).map_err(|e| store.map_err(e))?;
        if !packed_tag(&tags, "highway").is_some_and(|h| MAIN_ROAD_CLASSES.contains(&h)) {
            continue;
        }
        let refs: Option<Vec<u8>> = row.get(1).map_err(|e| store.map_err(e))?;
        let refs: Vec<i64> = refs
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
            let pos: Option<(Option<i32>, Option<i32>)> = node
                .query_row([id], |r| Ok((r.get(0)?, r.get(1)?)))
                .map(Some)
                .or_else(|e| match e {
                    rusqlite::Error::QueryReturnedNoRows => Ok(None),
                    e => Err(store.map_err(e)),
                })?;
            match pos {
                Some((Some(lat), Some(lon))) => {
                    let p = (f64::from(lon) * 1e-7, f64::from(lat) * 1e-7);
                    if let Some(run) = runs.last_mut() {
                        run.push(p);
                    }
                }
                _ => runs.push(Vec::new()),
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
    use crate::model::ElementType;
    use crate::store::{pack_refs, pack_tags};

    fn tags(kv: &[(&str, &str)]) -> String {
        pack_tags(
            &kv.iter()
                .map(|(k, v)| ((*k).to_owned(), (*v).to_owned()))
                .collect::<Vec<_>>(),
        )
    }

    #[test]
    fn reads_main_roads_only_and_splits_at_unknown_nodes() {
        let dir = tempfile::tempdir().unwrap();
        let mut store = Store::open(&dir.path().join("s.db")).unwrap();
        let tx = store.begin().unwrap();
        for (id, lat, lon) in [
            (1, 10.0, 20.0),
            (2, 10.1, 20.1),
            (3, 10.2, 20.2),
            (5, 10.3, 20.3),
        ] {
            let pos = Some(((lat * 1e7) as i32, (lon * 1e7) as i32));
            tx.put_element(ElementType::Node, id, 1, 0, true, pos, "", None)
                .unwrap();
        }
        let road = |id: i64, hw: &str, refs: &[i64]| {
            tx.put_element(
                ElementType::Way,
                id,
                1,
                0,
                true,
                None,
                &tags(&[("highway", hw), ("name", "Quay Road")]),
                Some(&pack_refs(refs.iter().copied())),
            )
            .unwrap();
        };
        road(10, "secondary", &[1, 2, 3, 4, 5, 1]); // node 4 unknown: two runs
        road(11, "footway", &[1, 2]); // not a main road
        road(12, "tertiary_link", &[2, 3]);
        tx.commit().unwrap();
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
