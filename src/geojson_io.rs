//! Reading polygons (land layers, region files) from GeoJSON and writing RFC 7946 features.

use geo::{Coord as GeoCoord, LineString, MultiPolygon, Polygon};
use geojson::{GeoJson, Geometry, Value};

fn ring(positions: &[Vec<f64>]) -> Result<LineString<f64>, String> {
    let mut coords = Vec::with_capacity(positions.len());
    for p in positions {
        let (x, y) = match p.as_slice() {
            [x, y, ..] => (*x, *y),
            _ => return Err("a position has fewer than two numbers".to_owned()),
        };
        if !x.is_finite() || !y.is_finite() || x.abs() > 180.0 || y.abs() > 90.0 {
            return Err(format!(
                "position [{x}, {y}] is not a valid longitude/latitude"
            ));
        }
        coords.push(GeoCoord { x, y });
    }
    if coords.len() < 4 {
        return Err(format!(
            "a ring has {} positions; at least 4 are needed",
            coords.len()
        ));
    }
    Ok(LineString::new(coords))
}

fn polygon(rings: &[Vec<Vec<f64>>]) -> Result<Polygon<f64>, String> {
    let mut it = rings.iter();
    let outer = ring(it.next().ok_or("a polygon has no rings")?)?;
    let holes = it.map(|r| ring(r)).collect::<Result<Vec<_>, _>>()?;
    Ok(Polygon::new(outer, holes))
}

fn geometry(g: &Geometry) -> Result<Option<MultiPolygon<f64>>, String> {
    match &g.value {
        Value::Polygon(rings) => Ok(Some(MultiPolygon(vec![polygon(rings)?]))),
        Value::MultiPolygon(polys) => Ok(Some(MultiPolygon(
            polys.iter().map(|p| polygon(p)).collect::<Result<_, _>>()?,
        ))),
        Value::GeometryCollection(gs) => {
            let mut all = Vec::new();
            for g in gs {
                if let Some(mp) = geometry(g)? {
                    all.extend(mp.0);
                }
            }
            Ok((!all.is_empty()).then_some(MultiPolygon(all)))
        }
        _ => Ok(None),
    }
}

/// A named (or unnamed) polygonal geometry read from GeoJSON.
pub type NamedPolygon = (Option<String>, MultiPolygon<f64>);

/// Every polygonal geometry in a GeoJSON text, with the feature's `name` property when present.
/// Features with other geometry types are skipped.
///
/// # Errors
/// A message when the text is not GeoJSON or a polygon is malformed (the message names the
/// feature's position in the collection).
pub fn polygons_from_geojson(text: &str) -> Result<Vec<NamedPolygon>, String> {
    let gj: GeoJson = text.parse().map_err(|e| format!("invalid GeoJSON: {e}"))?;
    let mut out = Vec::new();
    match gj {
        GeoJson::FeatureCollection(fc) => {
            for (i, f) in fc.features.iter().enumerate() {
                let name = f
                    .property("name")
                    .and_then(|v| v.as_str())
                    .map(str::to_owned);
                if let Some(g) = &f.geometry {
                    if let Some(mp) = geometry(g).map_err(|e| format!("feature {i}: {e}"))? {
                        out.push((name, mp));
                    }
                }
            }
        }
        GeoJson::Feature(f) => {
            let name = f
                .property("name")
                .and_then(|v| v.as_str())
                .map(str::to_owned);
            if let Some(g) = &f.geometry {
                if let Some(mp) = geometry(g)? {
                    out.push((name, mp));
                }
            }
        }
        GeoJson::Geometry(g) => {
            if let Some(mp) = geometry(&g)? {
                out.push((None, mp));
            }
        }
    }
    Ok(out)
}
