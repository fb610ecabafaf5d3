//! `viewer.html`: a self-contained page that shows the pyramid next to it over a plain
//! background (the land layer and main roads, when known, drawn faintly on a canvas), with the
//! legend, a scale bar, the cautions and the attribution. It opens from disk with no network:
//! inline style and script pinned by hash in a content security policy, tiles by relative path.

use std::fmt::Write as _;

use geo::{BoundingRect as _, Simplify as _};
use serde::Serialize;

use super::{Pyramid, TileId, TileJson};
use crate::render::{mercator_x, mercator_y, LegendBreaks, Rgb, ATTRIBUTION};
use crate::report::{csp_hash, escape_html};

/// The viewer's behaviour (pan, zoom, tiles, context), inlined.
const SCRIPT: &str = include_str!("viewer.js");
/// The viewer's layout, inlined after the style's colours.
const LAYOUT_CSS: &str = include_str!("viewer.css");
/// Most context vertices (land and roads) embedded; beyond it the rest is left out, so a
/// continent-sized land layer cannot bloat the page.
const MAX_CONTEXT_POINTS: usize = 200_000;

/// What the page shows.
pub(super) struct Viewer<'a> {
    pub pyramid: &'a Pyramid<'a>,
    pub tilejson: &'a TileJson,
    pub legend: &'a LegendBreaks,
    /// Tiles written, in sorted order.
    pub present: &'a [TileId],
}

#[derive(Serialize)]
struct Colours {
    plain: String,
    water: String,
    land: String,
    coast: String,
    road: String,
    road_opacity: f32,
}

#[derive(Serialize)]
struct Context {
    /// Polygons, each a list of rings, each a flat `[x, y, x, y, …]` in normalised Mercator.
    land: Vec<Vec<Vec<f64>>>,
    /// Polylines, each a flat `[x, y, …]` in normalised Mercator.
    roads: Vec<Vec<f64>>,
}

#[derive(Serialize)]
struct Data {
    minzoom: u8,
    maxzoom: u8,
    center: (f64, f64, u8),
    present: Vec<String>,
    colours: Colours,
    context: Context,
}

fn hex(c: Rgb) -> String {
    let [r, g, b] = c.0;
    format!("#{r:02x}{g:02x}{b:02x}")
}

fn hex_of(rgb: [u8; 3]) -> String {
    hex(Rgb(rgb))
}

/// Lon/lat points to a flat list of normalised Mercator coordinates (about 4 mm precision).
fn flat(points: impl Iterator<Item = (f64, f64)>) -> Vec<f64> {
    let round = |v: f64| (v * 1e9).round() / 1e9;
    points
        .flat_map(|(lon, lat)| [round(mercator_x(lon)), round(mercator_y(lat))])
        .collect()
}

/// Land and roads near the pyramid's bounds, simplified to half a pixel at the top zoom.
fn context(p: &Pyramid<'_>, bounds: [f64; 4]) -> Context {
    let [w, s, e, n] = bounds;
    let (pad_x, pad_y) = ((e - w).max(0.01), (n - s).max(0.01));
    let near = |r: geo::Rect<f64>| {
        r.max().x >= w - pad_x
            && r.min().x <= e + pad_x
            && r.max().y >= s - pad_y
            && r.min().y <= n + pad_y
    };
    let epsilon = 360.0 / (256.0 * f64::from(1u32 << p.zooms.max.min(24))) / 2.0;
    let mut budget = MAX_CONTEXT_POINTS;
    let mut land = Vec::new();
    for polygon in p.land.polygons() {
        if !polygon.bounding_rect().is_some_and(near) {
            continue;
        }
        let simple = polygon.simplify(epsilon);
        let rings: Vec<Vec<f64>> = std::iter::once(simple.exterior())
            .chain(simple.interiors())
            .map(|ring| flat(ring.coords().map(|c| (c.x, c.y))))
            .filter(|r| r.len() >= 6)
            .collect();
        let points: usize = rings.iter().map(|r| r.len() / 2).sum();
        if points > budget {
            break;
        }
        budget -= points;
        land.push(rings);
    }
    let mut roads = Vec::new();
    for line in p.roads {
        let ls = geo::LineString::from(line.clone());
        if !ls.bounding_rect().is_some_and(near) {
            continue;
        }
        let simple = ls.simplify(epsilon);
        let points = simple.0.len();
        if points > budget {
            break;
        }
        budget -= points;
        roads.push(flat(simple.coords().map(|c| (c.x, c.y))));
    }
    Context { land, roads }
}

/// The page's style sheet: the style's colours as custom properties, the fixed layout, and the
/// legend's gradient and break positions.
fn css(p: &Pyramid<'_>, legend: &LegendBreaks) -> String {
    let c = &p.style.colours;
    let mut out = format!(
        ":root {{ --paper: {}; --ink: {}; --ink-soft: {}; --ink-quiet: {}; --frame: {}; \
         --frame-soft: {}33; }}\n{LAYOUT_CSS}",
        hex(c.paper),
        hex(c.ink),
        hex(c.ink_soft),
        hex(c.ink_quiet),
        hex(c.frame),
        hex(c.frame),
    );
    let stops: Vec<String> = (0..=16)
        .map(|i| {
            let t = f64::from(i) / 16.0;
            format!("{} {:.2}%", hex_of(p.colormap.rgb(t)), t * 100.0)
        })
        .collect();
    let _ = writeln!(
        out,
        ".hv-bar {{ background: linear-gradient(to right, {}); }}",
        stops.join(", ")
    );
    for (i, (_, position, _)) in legend.breaks.iter().enumerate() {
        let _ = writeln!(out, ".hv-t{i} {{ left: {:.2}%; }}", position * 100.0);
    }
    out
}

/// An outlier key hexagon (SVG attributes, which the content security policy allows).
fn outlier_key(p: &Pyramid<'_>) -> String {
    let o = &p.style.outliers;
    let sample = if p.colormap.is_diverging() {
        0.85
    } else {
        0.55
    };
    format!(
        "<svg width=\"26\" height=\"26\" viewBox=\"-13 -13 26 26\" aria-hidden=\"true\">\
         <polygon points=\"{pts}\" fill=\"{fill}\" fill-opacity=\"{op}\" stroke=\"{halo}\" \
         stroke-width=\"5\"/><polygon points=\"{pts}\" fill=\"none\" stroke=\"{core}\" \
         stroke-width=\"2.2\"/></svg>",
        pts = "9.5,0 4.75,8.23 -4.75,8.23 -9.5,0 -4.75,-8.23 4.75,-8.23",
        fill = hex_of(p.colormap.rgb(sample)),
        op = p.style.cells.opacity,
        halo = hex(o.halo),
        core = hex(o.colour),
    )
}

/// The whole page.
pub(super) fn page(v: &Viewer<'_>) -> String {
    let p = v.pyramid;
    let style = p.style;
    let data = Data {
        minzoom: v.tilejson.minzoom,
        maxzoom: v.tilejson.maxzoom,
        center: v.tilejson.center,
        present: v.present.iter().map(ToString::to_string).collect(),
        colours: Colours {
            plain: hex(style.colours.plain),
            water: hex(style.colours.water),
            land: hex(style.colours.land),
            coast: hex(style.colours.coast),
            road: hex(style.roads.colour),
            road_opacity: style.roads.opacity,
        },
        context: {
            let mut c = context(p, v.tilejson.bounds);
            if !style.roads.show {
                c.roads.clear();
            }
            c
        },
    };
    // JSON inside <script>: only "</" could end the element early; "<\/" reads the same.
    let json = serde_json::to_string(&data)
        .unwrap_or_else(|_| "{}".to_owned())
        .replace("</", "<\\/");
    let css = css(p, v.legend);
    let caption = match p.scale {
        crate::render::Scale::Log => format!("{} (log scale)", p.legend_label),
        _ => p.legend_label.to_owned(),
    };
    let mut ticks = String::new();
    for (i, (_, _, label)) in v.legend.breaks.iter().enumerate() {
        let _ = write!(
            ticks,
            "<span class=\"hv-t{i}\">{}</span>",
            escape_html(label)
        );
    }
    let key = if p.outlined.is_empty() {
        String::new()
    } else {
        format!(
            "<p class=\"hv-key\">{}<span>outlier cell</span></p>",
            outlier_key(p)
        )
    };
    let empty_note = if v.present.is_empty() {
        "<p class=\"hv-caution\"><strong>No cell has a value for this measure in this week: \
         the pyramid is empty.</strong></p>"
    } else {
        ""
    };
    let mut out = String::new();
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; \
         img-src 'self' data:; style-src {style_hash}; script-src {script_hash}; \
         base-uri 'none'; form-action 'none'\">\n\
         <meta name=\"referrer\" content=\"no-referrer\">\n\
         <title>{title}</title>\n<style>{css}</style>\n</head>\n<body>\n\
         <header class=\"hv-head\"><h1>{title}</h1><p>{description}</p></header>\n\
         <main class=\"hv-stage\">\n\
         <div id=\"hv-map\" class=\"hv-map\" tabindex=\"0\" role=\"application\" \
         aria-label=\"Heat tiles: drag or use the arrow keys to pan, the wheel or + and - to zoom\">\
         <canvas id=\"hv-context\"></canvas><div id=\"hv-tiles\" class=\"hv-tiles\"></div></div>\n\
         <div class=\"hv-card hv-controls\"><button id=\"hv-zoom-in\" type=\"button\" \
         title=\"Zoom in\" aria-label=\"Zoom in\">+</button><button id=\"hv-zoom-out\" \
         type=\"button\" title=\"Zoom out\" aria-label=\"Zoom out\">&#8722;</button>\
         <button id=\"hv-home\" type=\"button\" title=\"Back to the whole area\" \
         aria-label=\"Back to the whole area\">&#8962;</button></div>\n\
         <section class=\"hv-card hv-legend\" aria-label=\"Legend\">\
         <p class=\"hv-caption\">{caption}</p><div class=\"hv-bar\"></div>\
         <div class=\"hv-ticks\">{ticks}</div>{key}{empty_note}\
         <p class=\"hv-caution\">Outlined cells are statistical prompts for a human reviewer, \
         not verdicts. Look at the edits yourself, assume good faith and talk to the mapper \
         first; follow your local community's and the OpenStreetMap Foundation's guidelines \
         on reverts and disputes.</p></section>\n\
         <div class=\"hv-card hv-foot\"><span class=\"hv-scale\"><span id=\"hv-scale-bar\">\
         </span><span id=\"hv-scale-label\"></span></span><span id=\"hv-status\"></span>\
         <span>Map data {attribution}</span></div>\n\
         </main>\n\
         <script type=\"application/json\" id=\"hv-data\">{json}</script>\n\
         <script>{SCRIPT}</script>\n</body>\n</html>\n",
        style_hash = csp_hash(&css),
        script_hash = csp_hash(SCRIPT),
        title = escape_html(p.name),
        description = escape_html(p.description),
        caption = escape_html(&caption),
        attribution = escape_html(ATTRIBUTION),
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::render::Colormap;

    #[test]
    fn colours_print_as_css_hex() {
        assert_eq!(hex(Rgb([0x0a, 0xff, 0x10])), "#0aff10");
        assert_eq!(hex_of(Colormap::Viridis.rgb(0.0)), "#440154");
    }
}
