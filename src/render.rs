//! Heat images: a region's H3 cells coloured by a value (edits, deletions, scores) over a
//! water/land backdrop, with a title, a legend with units, a scale bar and the OpenStreetMap
//! attribution, drawn with tiny-skia in Web Mercator and saved as PNG.
//!
//! The Web Mercator helpers ([`mercator_x`], [`mercator_y`]) follow the slippy-map convention
//! (normalised 0..1, y growing southwards) so the tile writer can reuse them.
//!
//! Drawing rules worth knowing:
//! - cells whose value is 0, below 0 or NaN are not drawn;
//! - a cell crossing the antimeridian is unwrapped into one continuous ring and drawn twice, once on
//!   each side of the map (each copy clipped to the map), so it never smears across the map;
//! - a cell containing a pole has no finite Web Mercator shape and is skipped (at the resolutions
//!   hexvigil uses such cells lie wholly beyond the projection's latitude limit anyway);
//! - latitudes are clamped at ±[`MERCATOR_MAX_LAT`];
//! - the map keeps Web Mercator's aspect ratio: its height follows the extent, up to
//!   [`MAX_MAP_ASPECT`] times its width; a taller extent makes the map narrower instead.

mod colormaps;
mod curve;
mod draw;
mod legend;
mod style;
mod text;

use std::fmt;
use std::path::{Path, PathBuf};
use std::str::FromStr;

use tiny_skia::Pixmap;

pub use curve::{render_pr_curve, CurveSeries};
pub use style::{Cells, Colours, Maps, Outliers, Rgb, Roads, Style, StyleError, Text};

/// Largest image side in pixels the renderer accepts.
pub const MAX_SIDE: u32 = 8192;
/// Smallest image width in pixels: below it the legend, outlier key and scale bar collide.
pub const MIN_WIDTH: u32 = 480;
/// Largest map height as a multiple of the map width (very tall regions get a narrower map).
pub const MAX_MAP_ASPECT: f64 = 1.4;
/// Latitude limit of Web Mercator (degrees): the square world of the slippy-map convention.
pub const MERCATOR_MAX_LAT: f64 = 85.051_128_779_806_6;

/// Attribution line printed at the bottom right.
pub const ATTRIBUTION: &str = "© OpenStreetMap contributors";

/// A published colour map: three perceptually uniform, colour-blind-safe sequential maps and one
/// colour-blind-safe diverging map.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum Colormap {
    /// viridis (matplotlib's default map).
    #[default]
    Viridis,
    /// cividis (Nuñez, Anderton and Renslow 2018), tuned for colour vision deficiency.
    Cividis,
    /// magma (black through red to light yellow).
    Magma,
    /// Diverging: ColorBrewer's RdBu (Cynthia Brewer, colorbrewer2.org, marked colour-blind
    /// safe) reversed, so blue is low, near-white the middle and red high; matplotlib's
    /// `RdBu_r` table.
    RdBuR,
}

impl Colormap {
    /// The sequential colour maps (for counts and scores), in a stable order.
    pub const ALL: [Self; 3] = [Self::Viridis, Self::Cividis, Self::Magma];
    /// The diverging colour maps (for observed versus expected).
    pub const DIVERGING: [Self; 1] = [Self::RdBuR];

    /// The lowercase name used on the command line and in style files.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Viridis => "viridis",
            Self::Cividis => "cividis",
            Self::Magma => "magma",
            Self::RdBuR => "rdbu_r",
        }
    }

    /// Whether the map diverges from a neutral middle.
    #[must_use]
    pub const fn is_diverging(self) -> bool {
        matches!(self, Self::RdBuR)
    }

    /// The published 256-entry table, channels in 0..=1, low to high.
    #[must_use]
    pub const fn table(self) -> &'static [[f64; 3]; 256] {
        match self {
            Self::Viridis => &colormaps::VIRIDIS,
            Self::Cividis => &colormaps::CIVIDIS,
            Self::Magma => &colormaps::MAGMA,
            Self::RdBuR => &colormaps::RDBU_R,
        }
    }

    /// The colour at position `t` in 0..=1 (clamped; NaN counts as 0), looked up as matplotlib
    /// does for a listed map (entry `floor(t * 256)`, the last entry for `t = 1`), channels
    /// rounded to 8 bits.
    #[must_use]
    pub fn rgb(self, t: f64) -> [u8; 3] {
        let t = if t.is_nan() { 0.0 } else { t.clamp(0.0, 1.0) };
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "t is clamped to 0..=1, so the index is 0..=256 before the min"
        )]
        let index = ((t * 256.0).floor() as usize).min(255);
        let [r, g, b] = self.table()[index];
        [unit_to_u8(r), unit_to_u8(g), unit_to_u8(b)]
    }
}

impl fmt::Display for Colormap {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Colormap {
    type Err = ParseNameError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let wanted = s.trim();
        Self::ALL
            .into_iter()
            .chain(Self::DIVERGING)
            .find(|c| c.name().eq_ignore_ascii_case(wanted))
            .ok_or_else(|| ParseNameError {
                kind: "colour map",
                given: s.to_owned(),
                expected: "viridis, cividis, magma, rdbu_r",
            })
    }
}

/// How values map onto the colour map.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum Scale {
    /// Proportional: 0 at the low end, the scale maximum at the high end.
    Linear,
    /// `ln(1 + v)`, for counts whose busiest cells are orders of magnitude above the rest.
    #[default]
    Log,
    /// A ratio on a logarithmic scale symmetric around 1 (for a diverging colour map): 1 at the
    /// middle, the scale maximum at the high end and its reciprocal at the low end.
    Ratio,
}

impl Scale {
    /// The lowercase name used on the command line.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Linear => "linear",
            Self::Log => "log",
            Self::Ratio => "ratio",
        }
    }

    /// Position of `value` on a colour scale running from 0 (ratio: `1 / max`) to `max`,
    /// clamped to 0..=1; 0 when `max` is not positive (ratio: not above 1), `value` is not
    /// positive, or either is NaN.
    #[must_use]
    pub fn position(self, value: f64, max: f64) -> f64 {
        if max.is_nan() || value.is_nan() || max <= 0.0 || value <= 0.0 {
            return 0.0;
        }
        let t = match self {
            Self::Linear => value / max,
            Self::Log => value.ln_1p() / max.ln_1p(),
            Self::Ratio if max > 1.0 => 0.5 + 0.5 * value.ln() / max.ln(),
            Self::Ratio => return 0.0,
        };
        if t.is_nan() {
            0.0
        } else {
            t.clamp(0.0, 1.0)
        }
    }
}

impl fmt::Display for Scale {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Scale {
    type Err = ParseNameError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let wanted = s.trim();
        [Self::Linear, Self::Log, Self::Ratio]
            .into_iter()
            .find(|c| c.name().eq_ignore_ascii_case(wanted))
            .ok_or_else(|| ParseNameError {
                kind: "scale",
                given: s.to_owned(),
                expected: "linear, log, ratio",
            })
    }
}

/// An unknown colour map or scale name.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("unknown {kind} {given:?}; expected one of: {expected}")]
pub struct ParseNameError {
    kind: &'static str,
    given: String,
    expected: &'static str,
}

/// One H3 cell and the value it is coloured by.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HeatCell {
    /// The cell.
    pub cell: h3o::CellIndex,
    /// Its value (e.g. edits in the week); 0, negative or NaN means "not drawn".
    pub value: f64,
}

/// Everything one heat image shows.
pub struct HeatMap<'a> {
    /// Headline, e.g. "Velloran Coast: edits, 2026-W48".
    pub title: &'a str,
    /// Second line, e.g. "H3 resolution 8 · 1 842 edits · outlier cells outlined".
    pub subtitle: &'a str,
    /// What the colours measure, with units, e.g. "edits per cell in the week".
    pub legend_label: &'a str,
    /// Cells and values.
    pub cells: &'a [HeatCell],
    /// Outlier cells, drawn with a strong outline.
    pub outlined: &'a [h3o::CellIndex],
    /// Land polygons; an empty layer gives a plain background.
    pub land: &'a crate::land::Land,
    /// Context lines (lon/lat polylines, e.g. main roads) drawn faintly under the cells when
    /// the style shows roads.
    pub roads: &'a [Vec<(f64, f64)>],
    /// Lon/lat area to show (usually the region's bounding box).
    pub extent: geo::Rect<f64>,
    /// Colours, strokes, fonts and sizes.
    pub style: &'a Style,
    /// Colour map for the cells (usually the style's sequential or diverging map).
    pub colormap: Colormap,
    /// Value-to-colour scale.
    pub scale: Scale,
    /// Top of the colour scale. `None`: the largest cell value rounded up to a round number
    /// (see [`HeatMap::scale_max`]). Give several images (or tiles) the same value so their
    /// colours compare.
    pub value_max: Option<f64>,
    /// Image width in pixels; the height follows from the extent and the margins.
    pub width: u32,
}

/// Errors drawing or saving an image.
#[derive(Debug, thiserror::Error)]
pub enum RenderError {
    /// The image would exceed [`MAX_SIDE`] on a side.
    #[error("a {width}×{height} px image exceeds the limit of {max} px a side")]
    TooLarge {
        /// Requested width.
        width: u64,
        /// Derived height.
        height: u64,
        /// The limit.
        max: u32,
    },
    /// The image is narrower than [`MIN_WIDTH`].
    #[error("an image {width} px wide is below the minimum of {min} px")]
    TooNarrow {
        /// Requested width.
        width: u32,
        /// The minimum.
        min: u32,
    },
    /// The extent is not a lon/lat area with some width and height inside Web Mercator.
    #[error("map extent {min_lon},{min_lat} – {max_lon},{max_lat} is not a usable lon/lat area")]
    Extent {
        /// West edge.
        min_lon: f64,
        /// South edge.
        min_lat: f64,
        /// East edge.
        max_lon: f64,
        /// North edge.
        max_lat: f64,
    },
    /// PNG encoding failed.
    #[error("{path}: cannot encode PNG: {source}")]
    Png {
        /// Destination file.
        path: PathBuf,
        /// Encoder error.
        source: image::ImageError,
    },
    /// Writing the file failed.
    #[error("{path}: cannot write image: {source}")]
    Io {
        /// Destination file.
        path: PathBuf,
        /// I/O error.
        source: std::io::Error,
    },
}

/// Normalised Web Mercator x of a longitude: 0 at 180° W, 1 at 180° E. Longitudes beyond ±180°
/// continue linearly past 0..1 (the renderer relies on this to unwrap antimeridian cells).
#[must_use]
pub fn mercator_x(lon: f64) -> f64 {
    (lon + 180.0) / 360.0
}

/// Normalised Web Mercator y of a latitude: 0 at the north limit, 1 at the south limit (y grows
/// southwards, as in the slippy-map convention). Latitudes are clamped to ±[`MERCATOR_MAX_LAT`].
#[must_use]
pub fn mercator_y(lat: f64) -> f64 {
    let phi = lat.clamp(-MERCATOR_MAX_LAT, MERCATOR_MAX_LAT).to_radians();
    // The clamp absorbs rounding at the limits (about 1e-17 outside 0..1).
    (0.5 - (phi.tan() + 1.0 / phi.cos()).ln() / (2.0 * std::f64::consts::PI)).clamp(0.0, 1.0)
}

/// Latitude of a normalised Web Mercator y (the inverse of [`mercator_y`] inside its range).
#[must_use]
pub fn mercator_lat(y: f64) -> f64 {
    (std::f64::consts::PI * (1.0 - 2.0 * y))
        .sinh()
        .atan()
        .to_degrees()
}

/// Where the map sits in the image and how lon/lat maps to pixels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MapFrame {
    /// Left edge of the map in pixels (whole pixels).
    pub left: f64,
    /// Top edge of the map in pixels (whole pixels).
    pub top: f64,
    /// Map width in pixels (whole pixels).
    pub width: f64,
    /// Map height in pixels (whole pixels).
    pub height: f64,
    /// Mercator x at the left edge.
    origin_x: f64,
    /// Mercator y at the top edge.
    origin_y: f64,
    /// Pixels per unit of normalised Mercator (the same in x and y).
    px_per_unit: f64,
}

impl MapFrame {
    /// Pixel position (x right, y down, pixel centres at `.5`) of a lon/lat point.
    #[must_use]
    pub fn to_pixel(&self, lon: f64, lat: f64) -> (f64, f64) {
        (
            self.left + (mercator_x(lon) - self.origin_x) * self.px_per_unit,
            self.top + (mercator_y(lat) - self.origin_y) * self.px_per_unit,
        )
    }

    /// Latitude at the vertical middle of the map.
    #[must_use]
    pub fn centre_lat(&self) -> f64 {
        mercator_lat(self.origin_y + 0.5 * self.height / self.px_per_unit)
    }

    /// Ground metres per pixel along the parallel at [`MapFrame::centre_lat`] (haversine).
    #[must_use]
    pub fn metres_per_px(&self) -> f64 {
        // Along a parallel, 1° of longitude spans px_per_unit / 360 pixels everywhere.
        let lat = self.centre_lat();
        let metres_per_degree = match (
            crate::model::Coord::from_degrees(lat, 0.0),
            crate::model::Coord::from_degrees(lat, 0.01),
        ) {
            (Some(a), Some(b)) => a.distance_m(b) * 100.0,
            _ => 0.0,
        };
        metres_per_degree / (self.px_per_unit / 360.0)
    }
}

/// The image size and the map's place in it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Layout {
    /// Image width in pixels.
    pub width: u32,
    /// Image height in pixels.
    pub height: u32,
    /// The map area.
    pub map: MapFrame,
    /// Type scale: 1.0 at 1200 px wide, never below `metrics::MIN_UNIT`.
    unit: f64,
}

/// Layout constants at 1200 px wide, scaled with the image width.
mod metrics {
    /// Side margin.
    pub const MARGIN: f64 = 40.0;
    /// Header height (title, subtitle) above the map.
    pub const HEADER: f64 = 118.0;
    /// Footer height (legend, scale bar, attribution) below the map.
    pub const FOOTER: f64 = 118.0;
    /// Width the type scale is designed for.
    pub const DESIGN_WIDTH: f64 = 1200.0;
    /// Smallest type scale: below it small labels stop being legible.
    pub const MIN_UNIT: f64 = 0.6;
}

impl Layout {
    /// Computes the layout of an image `width` pixels wide showing `extent`.
    ///
    /// # Errors
    /// [`RenderError::TooNarrow`], [`RenderError::TooLarge`] or [`RenderError::Extent`].
    pub fn new(extent: geo::Rect<f64>, width: u32) -> Result<Self, RenderError> {
        if width > MAX_SIDE {
            return Err(RenderError::TooLarge {
                width: u64::from(width),
                height: 0,
                max: MAX_SIDE,
            });
        }
        if width < MIN_WIDTH {
            return Err(RenderError::TooNarrow {
                width,
                min: MIN_WIDTH,
            });
        }
        let (min, max) = (extent.min(), extent.max());
        let bad_extent = RenderError::Extent {
            min_lon: min.x,
            min_lat: min.y,
            max_lon: max.x,
            max_lat: max.y,
        };
        let lon_ok = |v: f64| (-180.0..=180.0).contains(&v);
        let lat_ok = |v: f64| (-90.0..=90.0).contains(&v);
        if !(lon_ok(min.x) && lon_ok(max.x) && lat_ok(min.y) && lat_ok(max.y)) {
            return Err(bad_extent);
        }
        let (x0, x1) = (mercator_x(min.x), mercator_x(max.x));
        let (y0, y1) = (mercator_y(max.y), mercator_y(min.y));
        let (dx, dy) = (x1 - x0, y1 - y0);
        // A span below a millimetre at the equator is no area to draw.
        if dx <= 1e-10 || dy <= 1e-10 {
            return Err(bad_extent);
        }

        let unit = (f64::from(width) / metrics::DESIGN_WIDTH).max(metrics::MIN_UNIT);
        let margin = (metrics::MARGIN * unit).round();
        let available = f64::from(width) - 2.0 * margin;
        let mut map_w = available;
        let mut map_h = map_w * dy / dx;
        if map_h > MAX_MAP_ASPECT * available {
            map_h = MAX_MAP_ASPECT * available;
            map_w = map_h * dx / dy;
        }
        let (map_w, map_h) = (map_w.round().max(1.0), map_h.round().max(1.0));
        let header = (metrics::HEADER * unit).round();
        let footer = (metrics::FOOTER * unit).round();
        let height = header + map_h + footer;
        if height > f64::from(MAX_SIDE) {
            #[allow(
                clippy::cast_possible_truncation,
                clippy::cast_sign_loss,
                reason = "a positive finite number reported in an error"
            )]
            let height = height as u64;
            return Err(RenderError::TooLarge {
                width: u64::from(width),
                height,
                max: MAX_SIDE,
            });
        }
        // The map may be narrower than the page when the extent is tall: centre it, and centre
        // the extent inside the rounded map box.
        let left = ((f64::from(width) - map_w) / 2.0).round();
        let px_per_unit = (map_w / dx).min(map_h / dy);
        let origin_x = (x0 + x1) / 2.0 - map_w / 2.0 / px_per_unit;
        let origin_y = (y0 + y1) / 2.0 - map_h / 2.0 / px_per_unit;
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "height is at most MAX_SIDE, checked above"
        )]
        let height = height as u32;
        Ok(Self {
            width,
            height,
            map: MapFrame {
                left,
                top: header,
                width: map_w,
                height: map_h,
                origin_x,
                origin_y,
                px_per_unit,
            },
            unit,
        })
    }
}

/// Draws a heat image.
///
/// # Errors
/// [`RenderError::TooNarrow`], [`RenderError::TooLarge`] or [`RenderError::Extent`] for sizes
/// and areas the renderer refuses.
pub fn render_heat(map: &HeatMap<'_>) -> Result<Pixmap, RenderError> {
    let layout = Layout::new(map.extent, map.width)?;
    let fonts = text::Fonts::of(map.style);
    let mut pixmap = Pixmap::new(layout.width, layout.height).ok_or(RenderError::TooLarge {
        width: u64::from(layout.width),
        height: u64::from(layout.height),
        max: MAX_SIDE,
    })?;
    pixmap.fill(draw::color(map.style.colours.paper.0, 1.0));

    let ticks = legend::Ticks::new(map.scale, map.cells, map.value_max);
    let mut canvas = draw::MapCanvas::new(&mut pixmap, &layout, map.style)?;
    canvas.backdrop(map.land);
    canvas.roads(map.roads);
    canvas.cells(map.cells, map.colormap, map.scale, ticks.max);
    canvas.outlines(map.outlined);
    canvas.frame();

    let page = legend::Page {
        layout: &layout,
        fonts: &fonts,
        style: map.style,
    };
    page.header(&mut pixmap, map.title, map.subtitle);
    page.colour_legend(
        &mut pixmap,
        map.legend_label,
        map.colormap,
        map.scale,
        &ticks,
        !map.outlined.is_empty(),
    );
    page.scale_bar(&mut pixmap);
    page.attribution(&mut pixmap);
    Ok(pixmap)
}

impl HeatMap<'_> {
    /// Top of the colour scale: [`HeatMap::value_max`] when it is positive and finite, else the
    /// largest positive cell value rounded up (linear: to a whole number of 1, 2, 2.5 or 5 × 10ⁿ
    /// steps; log: to 1, 2 or 5 × 10ⁿ), or 1 when no cell has a positive value. A cell's colour
    /// is `colormap.rgb(scale.position(value, scale_max))`.
    #[must_use]
    pub fn scale_max(&self) -> f64 {
        legend::Ticks::new(self.scale, self.cells, self.value_max).max
    }
}

/// Writes a pixmap as PNG: RGB when every pixel is opaque, RGBA otherwise.
///
/// # Errors
/// [`RenderError::Png`] when encoding fails, [`RenderError::Io`] when writing fails.
pub fn save_png(pixmap: &Pixmap, path: &Path) -> Result<(), RenderError> {
    let encoded = encode_png(pixmap).map_err(|source| RenderError::Png {
        path: path.to_owned(),
        source,
    })?;
    std::fs::write(path, encoded).map_err(|source| RenderError::Io {
        path: path.to_owned(),
        source,
    })
}

/// Encodes a pixmap as PNG bytes: RGB when every pixel is opaque, RGBA otherwise (colours
/// un-premultiplied).
///
/// # Errors
/// When the encoder fails.
pub fn encode_png(pixmap: &Pixmap) -> Result<Vec<u8>, image::ImageError> {
    use image::ImageEncoder as _;

    let opaque = pixmap.pixels().iter().all(|p| p.alpha() == u8::MAX);
    let channels = if opaque { 3 } else { 4 };
    let mut raw = Vec::with_capacity(pixmap.pixels().len() * channels);
    for p in pixmap.pixels() {
        let c = p.demultiply();
        raw.extend_from_slice(&[c.red(), c.green(), c.blue()]);
        if !opaque {
            raw.push(c.alpha());
        }
    }
    let colour = if opaque {
        image::ExtendedColorType::Rgb8
    } else {
        image::ExtendedColorType::Rgba8
    };
    let mut encoded = Vec::new();
    image::codecs::png::PngEncoder::new(&mut encoded).write_image(
        &raw,
        pixmap.width(),
        pixmap.height(),
        colour,
    )?;
    Ok(encoded)
}

/// Side of an XYZ tile in pixels.
pub const TILE_SIZE: u32 = 256;
/// Type scale used for strokes on tiles (the thinnest the heat images use).
const TILE_UNIT: f64 = metrics::MIN_UNIT;
/// Margin around a tile, in tile pixels, within which cells still touch it: strokes and
/// anti-aliasing reach this far past a cell's edge.
pub const TILE_MARGIN_PX: f64 = draw::CLIP_PAD;

/// What every tile of a pyramid draws: one colour scale for all tiles, so they compare.
pub struct TileLayer<'a> {
    /// Colours, strokes and opacity.
    pub style: &'a Style,
    /// Colour map for the cells.
    pub colormap: Colormap,
    /// Value-to-colour scale.
    pub scale: Scale,
    /// Top of the colour scale (from [`legend_breaks`] over all cells).
    pub max: f64,
}

/// Draws one 256 px XYZ tile (`z`, `x`, `y` in the slippy-map convention) of `cells`, with the
/// `outlined` cells' outlines, on a transparent background. `cells` need only hold those near
/// the tile (the others are clipped away). Returns `None` when no pixel was drawn, so empty
/// tiles are never written.
///
/// # Errors
/// [`RenderError::TooLarge`] for a zoom beyond 30 or a tile outside the zoom's grid.
pub fn render_tile(
    (z, x, y): (u8, u32, u32),
    cells: &[HeatCell],
    outlined: &[h3o::CellIndex],
    layer: &TileLayer<'_>,
) -> Result<Option<Pixmap>, RenderError> {
    let n = 1u64 << z.min(30);
    if z > 30 || u64::from(x) >= n || u64::from(y) >= n {
        return Err(RenderError::TooLarge {
            width: u64::from(x),
            height: u64::from(y),
            max: u32::try_from(n).unwrap_or(u32::MAX),
        });
    }
    let size = f64::from(TILE_SIZE);
    #[allow(clippy::cast_precision_loss, reason = "n is at most 2^30")]
    let n = n as f64;
    let layout = Layout {
        width: TILE_SIZE,
        height: TILE_SIZE,
        map: MapFrame {
            left: 0.0,
            top: 0.0,
            width: size,
            height: size,
            origin_x: f64::from(x) / n,
            origin_y: f64::from(y) / n,
            px_per_unit: size * n,
        },
        unit: TILE_UNIT,
    };
    let mut pixmap = Pixmap::new(TILE_SIZE, TILE_SIZE).ok_or(RenderError::TooLarge {
        width: u64::from(TILE_SIZE),
        height: u64::from(TILE_SIZE),
        max: MAX_SIDE,
    })?;
    let mut canvas = draw::MapCanvas::new(&mut pixmap, &layout, layer.style)?;
    canvas.cells(cells, layer.colormap, layer.scale, layer.max);
    canvas.outlines(outlined);
    let drawn = pixmap.pixels().iter().any(|p| p.alpha() > 0);
    Ok(drawn.then_some(pixmap))
}

/// The normalised Web Mercator boxes (`[x0, y0, x1, y1]`, 0..1, y southwards) a cell covers,
/// by the same rule the renderer draws it: one box, or two for a cell crossing the antimeridian
/// (one at each edge of the world, each cut at 0 or 1); none for a cell around a pole.
/// Latitudes are clamped at ±[`MERCATOR_MAX_LAT`].
#[must_use]
pub fn cell_mercator_boxes(cell: h3o::CellIndex) -> Vec<[f64; 4]> {
    draw::cell_rings(cell)
        .iter()
        .filter_map(|ring| {
            let mut b = [
                f64::INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::NEG_INFINITY,
            ];
            for &(lon, lat) in ring {
                let (x, y) = (mercator_x(lon), mercator_y(lat));
                b = [b[0].min(x), b[1].min(y), b[2].max(x), b[3].max(y)];
            }
            let clipped = [b[0].max(0.0), b[1], b[2].min(1.0), b[3]];
            (clipped[0] < clipped[2]).then_some(clipped)
        })
        .collect()
}

/// A colour scale's legend: the top of the scale and its marked values.
#[derive(Debug, Clone, PartialEq)]
pub struct LegendBreaks {
    /// Top of the colour scale (the value drawn in the colour map's last entry).
    pub max: f64,
    /// Marked values: value, position on the bar (0..=1) and printed label.
    pub breaks: Vec<(f64, f64, String)>,
}

/// The legend of a colour scale over `cells`, exactly as a heat image draws it (see
/// [`HeatMap::scale_max`] for how the top is chosen).
#[must_use]
pub fn legend_breaks(scale: Scale, cells: &[HeatCell], value_max: Option<f64>) -> LegendBreaks {
    let ticks = legend::Ticks::new(scale, cells, value_max);
    let breaks = ticks
        .values
        .iter()
        .map(|&v| (v, scale.position(v, ticks.max), ticks.label(scale, v)))
        .collect();
    LegendBreaks {
        max: ticks.max,
        breaks,
    }
}

/// A colour channel in 0..=1 as 8 bits (rounded, clamped).
fn unit_to_u8(c: f64) -> u8 {
    #[allow(
        clippy::cast_possible_truncation,
        clippy::cast_sign_loss,
        reason = "clamped to 0..=255 first"
    )]
    let v = (c * 255.0).round().clamp(0.0, 255.0) as u8;
    v
}
