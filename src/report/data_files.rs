//! The report's machine-readable files: `summary.json`, each region's `changesets.csv` and its
//! `outliers.geojson` (RFC 7946).

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::Path;

use chrono::DateTime;
use serde_json::{json, Map, Value};

use super::ReportError;
use crate::summary::{ChangesetRow, Outlier, Summary};

/// Header of `changesets.csv`.
const CSV_HEADER: [&str; 13] = [
    "id",
    "user",
    "uid",
    "created_at",
    "account_age_days",
    "creates",
    "modifies",
    "deletes",
    "score",
    "flagged",
    "reasons",
    "comment",
    "editor",
];

fn create(path: &Path) -> Result<BufWriter<File>, ReportError> {
    File::create(path)
        .map(BufWriter::new)
        .map_err(|source| ReportError::Io {
            path: path.to_owned(),
            source,
        })
}

fn finish(mut w: BufWriter<File>, path: &Path) -> Result<(), ReportError> {
    w.flush().map_err(|source| ReportError::Io {
        path: path.to_owned(),
        source,
    })
}

/// Writes a value as pretty-printed JSON with a final newline.
fn write_json(path: &Path, value: &impl serde::Serialize) -> Result<(), ReportError> {
    let mut w = create(path)?;
    serde_json::to_writer_pretty(&mut w, value).map_err(|source| ReportError::Json {
        path: path.to_owned(),
        source,
    })?;
    w.write_all(b"\n").map_err(|source| ReportError::Io {
        path: path.to_owned(),
        source,
    })?;
    finish(w, path)
}

/// Writes `summary.json`.
pub(super) fn write_summary(path: &Path, summary: &Summary) -> Result<(), ReportError> {
    write_json(path, summary)
}

/// Guards a text cell against spreadsheet formula injection: a cell starting with `=`, `+`,
/// `-`, `@`, a tab or a carriage return gets a leading apostrophe, so spreadsheet programs
/// show it as text instead of evaluating it.
// Source: OWASP "CSV Injection" guidance (common practice for spreadsheet safety).
fn guard_cell(s: &str) -> std::borrow::Cow<'_, str> {
    match s.chars().next() {
        Some('=' | '+' | '-' | '@' | '\t' | '\r') => format!("'{s}").into(),
        _ => s.into(),
    }
}

/// ISO 8601 UTC (`2026-11-18T09:30:00Z`); empty when outside chrono's range.
fn iso_utc(secs: i64) -> String {
    DateTime::from_timestamp(secs, 0)
        .map(|t| t.format("%Y-%m-%dT%H:%M:%SZ").to_string())
        .unwrap_or_default()
}

/// Writes `changesets.csv`: one row per changeset, in the order given. Account age is written
/// with two decimals and the score with four; text cells are guarded (see [`guard_cell`]).
pub(super) fn write_changesets_csv(path: &Path, rows: &[ChangesetRow]) -> Result<(), ReportError> {
    let csv_err = |source| ReportError::Csv {
        path: path.to_owned(),
        source,
    };
    let mut w = csv::Writer::from_writer(create(path)?);
    w.write_record(CSV_HEADER).map_err(csv_err)?;
    for r in rows {
        let record: [String; 13] = [
            r.id.to_string(),
            guard_cell(&r.user).into_owned(),
            r.uid.to_string(),
            iso_utc(r.created_at),
            format!("{:.2}", r.account_age_days),
            r.creates.to_string(),
            r.modifies.to_string(),
            r.deletes.to_string(),
            format!("{:.4}", r.score),
            r.flagged.to_string(),
            guard_cell(&r.reasons.join("; ")).into_owned(),
            guard_cell(&r.comment).into_owned(),
            guard_cell(&r.editor).into_owned(),
        ];
        w.write_record(&record).map_err(csv_err)?;
    }
    let inner = w.into_inner().map_err(|e| ReportError::Io {
        path: path.to_owned(),
        source: e.into_error(),
    })?;
    finish(inner, path)
}

/// Twice the signed area of a ring by the shoelace formula; positive when counter-clockwise
/// in a plane with x = longitude east and y = latitude north.
fn ring_signed_area2(ring: &[(f64, f64)]) -> f64 {
    ring.iter()
        .zip(ring.iter().cycle().skip(1))
        .map(|(a, b)| a.0 * b.1 - b.0 * a.1)
        .sum()
}

/// Clips a ring (unwrapped longitudes, open) to the half-plane `x <= at` when `keep_west`,
/// else `x >= at` (Sutherland-Hodgman against one edge).
fn clip_ring(ring: &[(f64, f64)], at: f64, keep_west: bool) -> Vec<(f64, f64)> {
    let inside = |p: (f64, f64)| if keep_west { p.0 <= at } else { p.0 >= at };
    let mut out = Vec::with_capacity(ring.len() + 2);
    for (i, &cur) in ring.iter().enumerate() {
        let prev = ring[(i + ring.len() - 1) % ring.len()];
        if inside(cur) != inside(prev) {
            let t = (at - prev.0) / (cur.0 - prev.0);
            out.push((at, prev.1 + t * (cur.1 - prev.1)));
        }
        if inside(cur) {
            out.push(cur);
        }
    }
    out
}

/// Closes an open ring and returns it as GeoJSON positions.
fn positions(ring: &[(f64, f64)]) -> Value {
    let mut v: Vec<Value> = ring.iter().map(|&(x, y)| json!([x, y])).collect();
    if let Some(&(x, y)) = ring.first() {
        v.push(json!([x, y]));
    }
    Value::Array(v)
}

/// The RFC 7946 geometry of one outlier cell boundary, or `None` when the ring is unusable
/// (fewer than three distinct positions or non-finite numbers).
///
/// The exterior ring is made counter-clockwise (§3.1.6) and closed (§3.1.6). A cell that
/// crosses the antimeridian is cut there into a MultiPolygon (§3.1.9).
fn cell_geometry(ring: &[(f64, f64)]) -> Option<Value> {
    if ring.iter().any(|p| !p.0.is_finite() || !p.1.is_finite()) {
        return None;
    }
    // Open the ring, then unwrap longitudes so consecutive positions never jump by more than
    // half the globe.
    let mut open: Vec<(f64, f64)> = ring.to_vec();
    while open.len() > 1 && open.first() == open.last() {
        open.pop();
    }
    if open.len() < 3 {
        return None;
    }
    for i in 1..open.len() {
        let prev = open[i - 1].0;
        let mut x = open[i].0;
        while x - prev > 180.0 {
            x -= 360.0;
        }
        while prev - x > 180.0 {
            x += 360.0;
        }
        open[i].0 = x;
    }
    let area2 = ring_signed_area2(&open);
    if area2 == 0.0 || !area2.is_finite() {
        return None;
    }
    if area2 < 0.0 {
        open.reverse();
    }
    let (min_x, max_x) = open
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), p| {
            (lo.min(p.0), hi.max(p.0))
        });
    let shift = |r: Vec<(f64, f64)>, by: f64| -> Vec<(f64, f64)> {
        r.into_iter().map(|(x, y)| (x + by, y)).collect()
    };
    let cut = if max_x > 180.0 {
        Some(180.0)
    } else if min_x < -180.0 {
        Some(-180.0)
    } else {
        None
    };
    Some(match cut {
        None => json!({ "type": "Polygon", "coordinates": [positions(&open)] }),
        Some(at) => {
            // Clipping a counter-clockwise ring by a half-plane keeps it counter-clockwise.
            let west = clip_ring(&open, at, true);
            let east = clip_ring(&open, at, false);
            let (west, east) = if at > 0.0 {
                (west, shift(east, -360.0))
            } else {
                (shift(west, 360.0), east)
            };
            let parts: Vec<Value> = [west, east]
                .iter()
                .filter(|p| p.len() >= 3)
                .map(|p| json!([positions(p)]))
                .collect();
            json!({ "type": "MultiPolygon", "coordinates": parts })
        }
    })
}

/// Writes `outliers.geojson`: a FeatureCollection with one feature per outlier, in the order
/// given. Each feature's properties are the [`Outlier`]'s fields; its geometry is the cell
/// boundary from the parallel `rings` list (`null` when a ring is missing or unusable, which
/// RFC 7946 §3.2 allows).
pub(super) fn write_outliers_geojson(
    path: &Path,
    outliers: &[Outlier],
    rings: &[Vec<(f64, f64)>],
) -> Result<(), ReportError> {
    let features = outliers
        .iter()
        .enumerate()
        .map(|(i, o)| {
            let properties = serde_json::to_value(o).map_err(|source| ReportError::Json {
                path: path.to_owned(),
                source,
            })?;
            let geometry = rings
                .get(i)
                .and_then(|r| cell_geometry(r))
                .unwrap_or(Value::Null);
            let mut f = Map::new();
            f.insert("type".into(), "Feature".into());
            f.insert("id".into(), o.cell.clone().into());
            f.insert("geometry".into(), geometry);
            f.insert("properties".into(), properties);
            Ok(Value::Object(f))
        })
        .collect::<Result<Vec<_>, ReportError>>()?;
    write_json(
        path,
        &json!({ "type": "FeatureCollection", "features": features }),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn guards_formula_cells() {
        assert_eq!(guard_cell("=1+1"), "'=1+1");
        assert_eq!(guard_cell("@SUM(A1)"), "'@SUM(A1)");
        assert_eq!(guard_cell("-2"), "'-2");
        assert_eq!(guard_cell("plain"), "plain");
        assert_eq!(guard_cell(""), "");
    }

    #[test]
    fn clockwise_rings_are_reversed_and_closed() {
        let cw = [(0.0, 0.0), (0.0, 1.0), (1.0, 1.0), (1.0, 0.0), (0.0, 0.0)];
        let g = cell_geometry(&cw);
        let Some(Value::Array(rings)) = g.as_ref().map(|g| g["coordinates"].clone()) else {
            panic!("no polygon: {g:?}");
        };
        let ring: Vec<(f64, f64)> = rings[0]
            .as_array()
            .into_iter()
            .flatten()
            .filter_map(|p| Some((p[0].as_f64()?, p[1].as_f64()?)))
            .collect();
        assert_eq!(ring.first(), ring.last());
        assert!(ring_signed_area2(&ring) > 0.0);
    }

    #[test]
    fn antimeridian_cells_are_split() {
        let ring = [(179.9, 0.0), (-179.9, 0.0), (-179.9, 0.1), (179.9, 0.1)];
        let g = cell_geometry(&ring);
        let g = g
            .as_ref()
            .map(|g| (g["type"].clone(), g["coordinates"].clone()));
        let Some((Value::String(kind), Value::Array(parts))) = g else {
            panic!("no geometry");
        };
        assert_eq!(kind, "MultiPolygon");
        assert_eq!(parts.len(), 2);
        for part in &parts {
            let ring: Vec<(f64, f64)> = part[0]
                .as_array()
                .into_iter()
                .flatten()
                .filter_map(|p| Some((p[0].as_f64()?, p[1].as_f64()?)))
                .collect();
            assert!(ring.iter().all(|p| p.0.abs() <= 180.0));
            assert!(ring_signed_area2(&ring) > 0.0);
        }
    }

    #[test]
    fn degenerate_rings_have_no_geometry() {
        assert!(cell_geometry(&[(0.0, 0.0), (1.0, 1.0), (0.0, 0.0)]).is_none());
        assert!(cell_geometry(&[(0.0, 0.0), (f64::NAN, 1.0), (1.0, 0.0)]).is_none());
    }
}
