//! The XYZ tile pyramid of one measure: 256 px PNG tiles in Web Mercator under
//! `{z}/{x}/{y}.png` (transparent where there is no data; tiles with nothing drawn are not
//! written), `tiles.json` (TileJSON 3.0.0), an offline `viewer.html`, and optionally an MBTiles
//! 1.3 file.
//!
//! Every tile uses one colour scale, so tiles compare with each other and with the legend. The
//! plan (which cells touch which tile) is built first and refused above a tile-count cap before
//! anything is drawn; tiles are then drawn in parallel (rayon) in chunks and written in sorted
//! order, so the output does not depend on scheduling. Cells crossing the antimeridian are
//! split as the heat images split them ([`crate::render::cell_mercator_boxes`]), and latitudes
//! are clipped at the Web Mercator limit.

mod grid;
mod mbtiles;
mod tilejson;
mod viewer;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use h3o::CellIndex;
use rayon::prelude::*;

pub use grid::{index as tile_index, TileId, ZoomRange, MAX_ZOOM};
pub use tilejson::{TileJson, TILEJSON_VERSION};

use crate::land::Land;
use crate::measure::{heat_cells, Measure};
use crate::pipeline::{Analysis, ReportOptions};
use crate::progress::Progress;
use crate::render::{
    cell_mercator_boxes, encode_png, legend_breaks, mercator_lat, render_tile, Colormap, HeatCell,
    LegendBreaks, RenderError, Scale, Style, TileLayer, ATTRIBUTION, TILE_MARGIN_PX, TILE_SIZE,
};

/// Default cap on the number of tiles a pyramid may need.
pub const DEFAULT_MAX_TILES: u64 = 100_000;
/// Tiles drawn per parallel batch before they are written (bounds the PNGs held in memory).
const BATCH: usize = 512;

/// Errors writing a tile pyramid.
#[derive(Debug, thiserror::Error)]
pub enum TileError {
    /// The pyramid would need more tiles than allowed.
    #[error("the pyramid needs more than {max} tiles by zoom {zoom} (--max-tiles); choose a smaller --zoom range{hint}")]
    TooMany {
        /// The cap.
        max: u64,
        /// The zoom at which it was passed.
        zoom: u8,
        /// A suggested range, when a lower top zoom fits.
        hint: String,
    },
    /// `--base-url` is not an absolute URL.
    #[error(
        "--base-url {url:?}: TileJSON needs an absolute URL such as https://example.org/tiles"
    )]
    BaseUrl {
        /// What was given.
        url: String,
    },
    /// Creating a folder or writing a file failed.
    #[error("{path}: cannot write: {source}")]
    Io {
        /// The folder or file.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
    /// A tile could not be drawn.
    #[error("tile {tile}: {source}")]
    Render {
        /// The tile.
        tile: TileId,
        /// The renderer's error.
        source: RenderError,
    },
    /// A tile could not be encoded as PNG.
    #[error("tile {tile}: cannot encode PNG: {source}")]
    Png {
        /// The tile.
        tile: TileId,
        /// The encoder's error.
        source: image::ImageError,
    },
    /// Writing the MBTiles file failed.
    #[error("{path}: cannot write MBTiles: {source}")]
    MbTiles {
        /// The MBTiles file.
        path: PathBuf,
        /// The SQLite error.
        source: rusqlite::Error,
    },
    /// Serialising `tiles.json` failed.
    #[error("{path}: cannot write JSON: {source}")]
    Json {
        /// The file.
        path: PathBuf,
        /// The underlying error.
        source: serde_json::Error,
    },
}

/// Options of the `tiles` command beyond the report settings.
#[derive(Debug, Clone)]
pub struct TileOptions {
    /// Zoom levels to draw.
    pub zooms: ZoomRange,
    /// What the cells are coloured by.
    pub measure: Measure,
    /// Also write an MBTiles file here.
    pub mbtiles: Option<PathBuf>,
    /// Where the tiles will be served (absolute URL of the pyramid folder); default: the
    /// output folder as a `file://` URL.
    pub base_url: Option<String>,
    /// Refuse pyramids needing more tiles than this.
    pub max_tiles: u64,
}

impl Default for TileOptions {
    fn default() -> Self {
        Self {
            zooms: ZoomRange { min: 6, max: 14 },
            measure: Measure::Edits,
            mbtiles: None,
            base_url: None,
            max_tiles: DEFAULT_MAX_TILES,
        }
    }
}

/// Everything one pyramid shows and where it goes.
pub struct Pyramid<'a> {
    /// Cells and values (0, negative or NaN: not drawn).
    pub cells: &'a [HeatCell],
    /// Outlier cells, outlined.
    pub outlined: &'a [CellIndex],
    /// Colours and strokes.
    pub style: &'a Style,
    /// Colour map.
    pub colormap: Colormap,
    /// Value-to-colour scale.
    pub scale: Scale,
    /// Fixed top of the colour scale, if any.
    pub value_max: Option<f64>,
    /// Zoom levels.
    pub zooms: ZoomRange,
    /// Tile-count cap.
    pub max_tiles: u64,
    /// Tileset name (TileJSON `name`, MBTiles `name`, the viewer's title).
    pub name: &'a str,
    /// One or two sentences on what the tiles show.
    pub description: &'a str,
    /// Legend caption with units.
    pub legend_label: &'a str,
    /// Absolute URL of the pyramid folder for `tiles.json` (default: the folder's `file://` URL).
    pub base_url: Option<&'a str>,
    /// Also write an MBTiles file here.
    pub mbtiles: Option<&'a Path>,
    /// Land polygons the viewer draws under the tiles (may be empty).
    pub land: &'a Land,
    /// Road polylines the viewer draws under the tiles (may be empty).
    pub roads: &'a [Vec<(f64, f64)>],
}

/// What a pyramid run wrote.
#[derive(Debug, Clone, PartialEq)]
pub struct TileSummary {
    /// Tiles written.
    pub written: u64,
    /// Tiles near data that turned out blank and were skipped.
    pub blank: u64,
    /// Tiles written per zoom, low to high.
    pub per_zoom: Vec<(u8, u64)>,
    /// The `tiles.json` written.
    pub tilejson: TileJson,
    /// The colour scale's legend.
    pub legend: LegendBreaks,
}

/// Indices into the drawn and the outlined cell lists.
type CellRefs = (Vec<u32>, Vec<u32>);
/// Which cells touch each tile.
type Plan = BTreeMap<TileId, CellRefs>;
/// A drawn tile: its PNG, or `None` when nothing was drawn.
type Drawn = Result<(TileId, Option<Vec<u8>>), TileError>;

/// The tiles within [`TILE_MARGIN_PX`] of each cell, for every zoom.
///
/// # Errors
/// [`TileError::TooMany`] as soon as the count passes `max_tiles`, before anything is drawn.
fn plan(
    drawn: &[CellIndex],
    outlined: &[CellIndex],
    zooms: ZoomRange,
    max_tiles: u64,
) -> Result<Plan, TileError> {
    let boxes = |cells: &[CellIndex]| -> Vec<Vec<[f64; 4]>> {
        cells.iter().map(|&c| cell_mercator_boxes(c)).collect()
    };
    let (drawn_boxes, outlined_boxes) = (boxes(drawn), boxes(outlined));
    let mut plan = Plan::new();
    let too_many = |zoom: u8| TileError::TooMany {
        max: max_tiles,
        zoom,
        hint: if zoom > zooms.min {
            format!(" such as {}-{}", zooms.min, zoom - 1)
        } else {
            String::new()
        },
    };
    for z in zooms.levels() {
        let n = 1u64 << z;
        #[allow(clippy::cast_precision_loss, reason = "at most 2^24 tiles a side")]
        let margin = TILE_MARGIN_PX / f64::from(TILE_SIZE) / n as f64;
        for (list, all) in [(0usize, &drawn_boxes), (1, &outlined_boxes)] {
            for (i, cell_boxes) in all.iter().enumerate() {
                let i = u32::try_from(i).unwrap_or(u32::MAX);
                for b in cell_boxes {
                    let (x0, x1) = (tile_index(b[0] - margin, n), tile_index(b[2] + margin, n));
                    let (y0, y1) = (tile_index(b[1] - margin, n), tile_index(b[3] + margin, n));
                    let span = u64::from(x1 - x0 + 1) * u64::from(y1 - y0 + 1);
                    if span > max_tiles {
                        return Err(too_many(z));
                    }
                    for x in x0..=x1 {
                        for y in y0..=y1 {
                            let entry = plan.entry(TileId { z, x, y }).or_default();
                            let ids = if list == 0 {
                                &mut entry.0
                            } else {
                                &mut entry.1
                            };
                            if ids.last() != Some(&i) {
                                ids.push(i);
                            }
                        }
                    }
                    if plan.len() as u64 > max_tiles {
                        return Err(too_many(z));
                    }
                }
            }
        }
    }
    Ok(plan)
}

/// Removes the zoom folders (`0` to `MAX_ZOOM`) a previous run left in `out`, so no stale tile
/// survives next to the new ones. Nothing else in the folder is touched.
fn clear_old_levels(out: &Path) -> Result<(), TileError> {
    for z in 0..=MAX_ZOOM {
        let dir = out.join(z.to_string());
        if dir.is_dir() {
            std::fs::remove_dir_all(&dir).map_err(|source| TileError::Io { path: dir, source })?;
        }
    }
    Ok(())
}

/// Draws and writes a pyramid: the tiles, `tiles.json`, `viewer.html` and, when asked, the
/// MBTiles file.
///
/// # Errors
/// [`TileError`] when the pyramid is too large, a URL is not absolute, or writing fails.
pub fn write_pyramid(
    p: &Pyramid<'_>,
    out: &Path,
    progress: &Progress,
) -> Result<TileSummary, TileError> {
    if let Some(url) = p.base_url {
        if !["http://", "https://", "file://"]
            .iter()
            .any(|s| url.to_ascii_lowercase().starts_with(s))
        {
            return Err(TileError::BaseUrl {
                url: url.to_owned(),
            });
        }
    }
    let drawn: Vec<HeatCell> = p
        .cells
        .iter()
        .copied()
        .filter(|c| c.value.is_finite() && c.value > 0.0)
        .collect();
    let drawn_ids: Vec<CellIndex> = drawn.iter().map(|c| c.cell).collect();
    let legend = legend_breaks(p.scale, &drawn, p.value_max);
    let plan = plan(&drawn_ids, p.outlined, p.zooms, p.max_tiles)?;

    let io = |path: &Path| {
        let path = path.to_owned();
        move |source| TileError::Io { path, source }
    };
    std::fs::create_dir_all(out).map_err(io(out))?;
    clear_old_levels(out)?;
    let mut mb = p.mbtiles.map(mbtiles::MbTiles::create).transpose()?;

    let layer = TileLayer {
        style: p.style,
        colormap: p.colormap,
        scale: p.scale,
        max: legend.max,
    };
    let bar = progress.steps(plan.len() as u64, "tiles");
    let jobs: Vec<(&TileId, &CellRefs)> = plan.iter().collect();
    let mut written: BTreeMap<u8, u64> = BTreeMap::new();
    let mut present: Vec<TileId> = Vec::new();
    let mut blank = 0u64;
    for batch in jobs.chunks(BATCH) {
        let rendered: Vec<Drawn> = batch
            .par_iter()
            .map(|&(&tile, (ci, oi))| {
                let cells: Vec<HeatCell> = ci
                    .iter()
                    .filter_map(|&i| drawn.get(i as usize).copied())
                    .collect();
                let outlined: Vec<CellIndex> = oi
                    .iter()
                    .filter_map(|&i| p.outlined.get(i as usize).copied())
                    .collect();
                let pix = render_tile((tile.z, tile.x, tile.y), &cells, &outlined, &layer)
                    .map_err(|source| TileError::Render { tile, source })?;
                let png = pix
                    .map(|pix| encode_png(&pix))
                    .transpose()
                    .map_err(|source| TileError::Png { tile, source })?;
                Ok((tile, png))
            })
            .collect();
        for r in rendered {
            let (tile, png) = r?;
            let Some(png) = png else {
                blank += 1;
                continue;
            };
            let path = out.join(tile.path());
            if let Some(dir) = path.parent() {
                std::fs::create_dir_all(dir).map_err(io(dir))?;
            }
            std::fs::write(&path, &png).map_err(io(&path))?;
            if let Some(mb) = &mut mb {
                mb.put(tile, &png)?;
            }
            *written.entry(tile.z).or_default() += 1;
            present.push(tile);
        }
        bar.inc(batch.len() as u64);
    }
    bar.finish_and_clear();

    let (bounds, center) = view(&drawn_ids, p.outlined, p.cells, p.zooms);
    let legend_text = format!(
        "{}{}: {}{}",
        p.legend_label,
        if p.scale == Scale::Log {
            " (log scale)"
        } else {
            ""
        },
        legend
            .breaks
            .iter()
            .map(|b| b.2.clone())
            .collect::<Vec<_>>()
            .join(", "),
        if p.outlined.is_empty() {
            ""
        } else {
            "; outlier cells outlined"
        }
    );
    let base = match p.base_url {
        Some(u) => u.trim_end_matches('/').to_owned(),
        None => file_url(out)?,
    };
    let tilejson = TileJson {
        tilejson: TILEJSON_VERSION.to_owned(),
        tiles: vec![format!("{base}/{{z}}/{{x}}/{{y}}.png")],
        name: p.name.to_owned(),
        description: p.description.to_owned(),
        version: "1.0.0".to_owned(),
        attribution: ATTRIBUTION.to_owned(),
        legend: legend_text,
        scheme: "xyz".to_owned(),
        bounds,
        center,
        minzoom: p.zooms.min,
        maxzoom: p.zooms.max,
    };
    let json_path = out.join("tiles.json");
    let json = serde_json::to_string_pretty(&tilejson).map_err(|source| TileError::Json {
        path: json_path.clone(),
        source,
    })?;
    std::fs::write(&json_path, json + "\n").map_err(io(&json_path))?;

    let page = viewer::page(&viewer::Viewer {
        pyramid: p,
        tilejson: &tilejson,
        legend: &legend,
        present: &present,
    });
    let viewer_path = out.join("viewer.html");
    std::fs::write(&viewer_path, page).map_err(io(&viewer_path))?;

    if let Some(mb) = mb {
        let b = &tilejson.bounds;
        let c = &tilejson.center;
        mb.finish(&[
            ("name", tilejson.name.clone()),
            ("format", "png".to_owned()),
            ("bounds", format!("{},{},{},{}", b[0], b[1], b[2], b[3])),
            ("center", format!("{},{},{}", c.0, c.1, c.2)),
            ("minzoom", p.zooms.min.to_string()),
            ("maxzoom", p.zooms.max.to_string()),
            ("attribution", tilejson.attribution.clone()),
            ("description", tilejson.description.clone()),
            ("type", "overlay".to_owned()),
            ("version", "1".to_owned()),
        ])?;
    }
    Ok(TileSummary {
        written: written.values().sum(),
        blank,
        per_zoom: p
            .zooms
            .levels()
            .map(|z| (z, written.get(&z).copied().unwrap_or(0)))
            .collect(),
        tilejson,
        legend,
    })
}

/// Bounds (west, south, east, north) of the drawn and outlined cells (all cells when none is
/// drawn), rounded outwards to 1e-6 degrees, and the default view: their centre at the deepest
/// zoom where they fit in about 900 × 600 pixels.
fn view(
    drawn: &[CellIndex],
    outlined: &[CellIndex],
    all: &[HeatCell],
    zooms: ZoomRange,
) -> ([f64; 4], (f64, f64, u8)) {
    let mut boxes: Vec<[f64; 4]> = drawn
        .iter()
        .chain(outlined)
        .flat_map(|&c| cell_mercator_boxes(c))
        .collect();
    if boxes.is_empty() {
        boxes = all
            .iter()
            .flat_map(|c| cell_mercator_boxes(c.cell))
            .collect();
    }
    let union = boxes.iter().fold(
        [
            f64::INFINITY,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NEG_INFINITY,
        ],
        |a, b| {
            [
                a[0].min(b[0]),
                a[1].min(b[1]),
                a[2].max(b[2]),
                a[3].max(b[3]),
            ]
        },
    );
    let [x0, y0, x1, y1] = if union[0].is_finite() {
        union
    } else {
        [0.0, 0.0, 1.0, 1.0]
    };
    let lon = |x: f64| (x * 360.0 - 180.0).clamp(-180.0, 180.0);
    let down = |v: f64| (v * 1e6).floor() / 1e6;
    let up = |v: f64| (v * 1e6).ceil() / 1e6;
    let bounds = [
        down(lon(x0)),
        down(mercator_lat(y1)),
        up(lon(x1)),
        up(mercator_lat(y0)),
    ];
    let (cx, cy) = ((x0 + x1) / 2.0, (y0 + y1) / 2.0);
    let zoom = zooms
        .levels()
        .rev()
        .find(|&z| {
            let px = f64::from(TILE_SIZE) * f64::from(1u32 << z);
            (x1 - x0) * px <= 900.0 && (y1 - y0) * px <= 600.0
        })
        .unwrap_or(zooms.min);
    let round = |v: f64| (v * 1e6).round() / 1e6;
    (bounds, (round(lon(cx)), round(mercator_lat(cy)), zoom))
}

/// The `file://` URL of a folder (absolute, percent-encoded), for a local `tiles.json`.
fn file_url(dir: &Path) -> Result<String, TileError> {
    let abs = dir.canonicalize().map_err(|source| TileError::Io {
        path: dir.to_owned(),
        source,
    })?;
    let mut url = String::from("file://");
    for byte in abs.to_string_lossy().bytes() {
        if byte.is_ascii_alphanumeric() || b"/-._~".contains(&byte) {
            url.push(char::from(byte));
        } else {
            url.push_str(&format!("%{byte:02X}"));
        }
    }
    Ok(url.trim_end_matches('/').to_owned())
}

/// Draws the `tiles` command's pyramid from an analysis: every region's cells coloured by the
/// measure, every outlier outlined, the land layer and main roads as context in the viewer.
///
/// # Errors
/// See [`write_pyramid`].
pub fn write_tiles(
    analysis: &Analysis,
    report: &ReportOptions,
    opts: &TileOptions,
    out: &Path,
    progress: &Progress,
) -> Result<TileSummary, TileError> {
    let mut cells: Vec<CellIndex> = analysis
        .regions
        .iter()
        .flat_map(|r| r.cells.iter().copied())
        .collect();
    cells.sort_unstable();
    cells.dedup();
    let values = heat_cells(analysis, &cells, opts.measure, &report.detect);
    let mut outlined: Vec<CellIndex> = analysis
        .summary
        .regions
        .iter()
        .flat_map(|r| r.outliers.iter().filter_map(|o| o.cell.parse().ok()))
        .collect();
    outlined.sort_unstable();
    outlined.dedup();
    let names: Vec<&str> = analysis
        .summary
        .regions
        .iter()
        .map(|r| r.name.as_str())
        .collect();
    let measure = opts.measure;
    let name = format!(
        "{}: {}, {}",
        names.join(", "),
        measure.title(),
        analysis.summary.week
    );
    let description = format!(
        "hexvigil heat tiles: {} (H3 resolution {}, ISO week {}); outlier cells outlined. \
         Outliers are statistical prompts for a human reviewer, not verdicts.",
        measure.legend(),
        analysis.summary.resolution,
        analysis.summary.week
    );
    let pyramid = Pyramid {
        cells: &values,
        outlined: &outlined,
        style: &report.style,
        colormap: measure.colormap(&report.style),
        scale: measure.scale(),
        value_max: measure.value_max(),
        zooms: opts.zooms,
        max_tiles: opts.max_tiles,
        name: &name,
        description: &description,
        legend_label: measure.legend(),
        base_url: opts.base_url.as_deref(),
        mbtiles: opts.mbtiles.as_deref(),
        land: &analysis.land,
        roads: &analysis.roads,
    };
    write_pyramid(&pyramid, out, progress)
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    fn cell(lat: f64, lon: f64, res: h3o::Resolution) -> CellIndex {
        h3o::LatLng::new(lat, lon).unwrap().to_cell(res)
    }

    #[test]
    fn plan_covers_each_cell_and_stops_at_the_cap() {
        let c = cell(45.2, -33.6, h3o::Resolution::Eight);
        let zooms = ZoomRange { min: 6, max: 14 };
        let plan = plan(&[c], &[], zooms, 1000).unwrap();
        for z in zooms.levels() {
            let centre = h3o::LatLng::from(c);
            let home = TileId::containing(centre.lng(), centre.lat(), z).unwrap();
            assert!(plan.contains_key(&home), "zoom {z}: {home} planned");
            assert!(
                plan.keys().filter(|t| t.z == z).count() <= 9,
                "zoom {z}: a cell touches few tiles"
            );
        }
        let e = plan_err(&[c], ZoomRange { min: 6, max: 20 }, 50);
        assert!(e.contains("more than 50 tiles"), "{e}");
        assert!(e.contains("6-"), "{e}");
    }

    fn plan_err(cells: &[CellIndex], zooms: ZoomRange, max: u64) -> String {
        plan(cells, &[], zooms, max).unwrap_err().to_string()
    }

    #[test]
    fn antimeridian_cell_is_planned_at_both_edges() {
        let c = cell(-16.5, 179.99, h3o::Resolution::Five);
        let plan = plan(&[c], &[], ZoomRange { min: 4, max: 4 }, 100).unwrap();
        let xs: Vec<u32> = plan.keys().map(|t| t.x).collect();
        assert!(xs.contains(&0) && xs.contains(&15), "{xs:?}");
        assert!(
            xs.iter().all(|&x| x == 0 || x == 15),
            "nothing in between: {xs:?}"
        );
    }

    #[test]
    fn file_urls_are_absolute_and_encoded() {
        let dir = tempfile::tempdir().unwrap();
        let odd = dir.path().join("a b#c");
        std::fs::create_dir(&odd).unwrap();
        let url = file_url(&odd).unwrap();
        assert!(url.starts_with("file:///"), "{url}");
        assert!(url.ends_with("/a%20b%23c"), "{url}");
    }
}
