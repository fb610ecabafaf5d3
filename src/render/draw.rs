//! Map drawing: the land/water backdrop, cell fills and outlines, all projected to pixels,
//! clipped to the map box and painted with tiny-skia.

use geo::BoundingRect as _;
use tiny_skia::{
    Color, FillRule, LineJoin, Mask, Paint, Path, PathBuilder, Pixmap, Rect, Stroke, Transform,
};

use super::{Colormap, HeatCell, Layout, MapFrame, RenderError, Scale, Style, MAX_SIDE};
use crate::land::Land;

/// Projected rings are clipped to the map box grown by this many pixels, so clip edges fall
/// outside the visible map and far-away vertices never reach the rasteriser. The tile writer
/// gives each tile the cells within this margin, so strokes continue across tile edges.
pub(super) const CLIP_PAD: f64 = 8.0;

/// A tiny-skia colour from 8-bit RGB and an opacity (clamped to 0..=1).
pub(super) fn color(rgb: [u8; 3], alpha: f32) -> Color {
    let [r, g, b] = rgb;
    let mut c = Color::from_rgba8(r, g, b, u8::MAX);
    c.set_alpha(alpha.clamp(0.0, 1.0));
    c
}

/// A paint of one solid colour, anti-aliased.
pub(super) fn paint(rgb: [u8; 3], alpha: f32) -> Paint<'static> {
    let mut p = Paint::default();
    p.set_color(color(rgb, alpha));
    p.anti_alias = true;
    p
}

/// An axis-aligned pixel box.
#[derive(Debug, Clone, Copy)]
struct Bounds {
    x0: f64,
    y0: f64,
    x1: f64,
    y1: f64,
}

/// Sutherland–Hodgman clipping of a closed ring to a box. The result may run along the box
/// edges; filled with either rule it covers exactly the ring's area inside the box.
fn clip_ring(ring: &[(f64, f64)], b: Bounds) -> Vec<(f64, f64)> {
    let mut out = ring.to_vec();
    for side in 0..4 {
        let input = std::mem::take(&mut out);
        let Some(&last) = input.last() else {
            return out;
        };
        let inside = |p: (f64, f64)| match side {
            0 => p.0 >= b.x0,
            1 => p.0 <= b.x1,
            2 => p.1 >= b.y0,
            _ => p.1 <= b.y1,
        };
        // Only called for an edge with one end on each side, so the divisor is never zero.
        let cross = |a: (f64, f64), c: (f64, f64)| {
            if side < 2 {
                let x = if side == 0 { b.x0 } else { b.x1 };
                let t = (x - a.0) / (c.0 - a.0);
                (x, a.1 + t * (c.1 - a.1))
            } else {
                let y = if side == 2 { b.y0 } else { b.y1 };
                let t = (y - a.1) / (c.1 - a.1);
                (a.0 + t * (c.0 - a.0), y)
            }
        };
        let mut prev = last;
        for &cur in &input {
            match (inside(prev), inside(cur)) {
                (true, true) => out.push(cur),
                (true, false) => out.push(cross(prev, cur)),
                (false, true) => {
                    out.push(cross(prev, cur));
                    out.push(cur);
                }
                (false, false) => {}
            }
            prev = cur;
        }
    }
    out
}

/// Appends an open polyline to a path builder (lines of fewer than 2 points are dropped).
fn push_line(pb: &mut PathBuilder, line: &[(f64, f64)]) {
    if line.len() < 2 {
        return;
    }
    #[allow(
        clippy::cast_possible_truncation,
        reason = "pixel coordinates, already clipped near the image"
    )]
    let pt = |p: (f64, f64)| (p.0 as f32, p.1 as f32);
    let mut points = line.iter().map(|&p| pt(p));
    if let Some((x, y)) = points.next() {
        pb.move_to(x, y);
    }
    for (x, y) in points {
        pb.line_to(x, y);
    }
}

/// Splits a polyline into the runs of segments that come near a box (Liang-Barsky style
/// clipping of each segment), so a road far outside the view never reaches the rasteriser.
fn clip_line(line: &[(f64, f64)], b: Bounds) -> Vec<Vec<(f64, f64)>> {
    let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut current: Vec<(f64, f64)> = Vec::new();
    for w in line.windows(2) {
        let (a, c) = (w[0], w[1]);
        let (dx, dy) = (c.0 - a.0, c.1 - a.1);
        let (mut t0, mut t1) = (0.0f64, 1.0f64);
        let mut keep = true;
        for (p, q) in [
            (-dx, a.0 - b.x0),
            (dx, b.x1 - a.0),
            (-dy, a.1 - b.y0),
            (dy, b.y1 - a.1),
        ] {
            if p == 0.0 {
                if q < 0.0 {
                    keep = false;
                }
            } else {
                let r = q / p;
                if p < 0.0 {
                    t0 = t0.max(r);
                } else {
                    t1 = t1.min(r);
                }
            }
        }
        if !keep || t0 > t1 {
            if current.len() >= 2 {
                runs.push(std::mem::take(&mut current));
            }
            current.clear();
            continue;
        }
        let start = (a.0 + t0 * dx, a.1 + t0 * dy);
        let end = (a.0 + t1 * dx, a.1 + t1 * dy);
        if current.last() != Some(&start) {
            if current.len() >= 2 {
                runs.push(std::mem::take(&mut current));
            }
            current.clear();
            current.push(start);
        }
        current.push(end);
        if t1 < 1.0 {
            runs.push(std::mem::take(&mut current));
        }
    }
    if current.len() >= 2 {
        runs.push(current);
    }
    runs
}

/// Appends a closed ring to a path builder (rings of fewer than 3 points are dropped).
fn push_ring(pb: &mut PathBuilder, ring: &[(f64, f64)]) {
    if ring.len() < 3 {
        return;
    }
    #[allow(
        clippy::cast_possible_truncation,
        reason = "pixel coordinates, already clipped near the image"
    )]
    let pt = |p: (f64, f64)| (p.0 as f32, p.1 as f32);
    let mut points = ring.iter().map(|&p| pt(p));
    if let Some((x, y)) = points.next() {
        pb.move_to(x, y);
    }
    for (x, y) in points {
        pb.line_to(x, y);
    }
    pb.close();
}

/// The lon/lat rings to draw for a cell: its boundary unwrapped into one continuous ring (no
/// edge longer than 180° of longitude), plus a copy shifted by 360° when the ring reaches past
/// ±180°, so a cell on the antimeridian shows on both map edges. Empty for a cell around a pole,
/// whose boundary winds once around the globe and has no finite Mercator shape.
pub(super) fn cell_rings(cell: h3o::CellIndex) -> Vec<Vec<(f64, f64)>> {
    let boundary = cell.boundary();
    let mut ring: Vec<(f64, f64)> = Vec::with_capacity(boundary.len());
    for ll in boundary.iter() {
        let lon = match ring.last() {
            Some(&(prev, _)) => prev + wrap_delta(ll.lng() - prev),
            None => ll.lng(),
        };
        ring.push((lon, ll.lat()));
    }
    let (Some(&(first, _)), Some(&(last, _))) = (ring.first(), ring.last()) else {
        return Vec::new();
    };
    // Closing edge: after unwrapping, a ring around a pole ends 360° away from where it began.
    if (last + wrap_delta(first - last) - first).abs() > 180.0 {
        return Vec::new();
    }
    let min = ring.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
    let max = ring.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
    let shift = if min < -180.0 {
        Some(360.0)
    } else if max > 180.0 {
        Some(-360.0)
    } else {
        None
    };
    let copy = shift.map(|s| ring.iter().map(|&(x, y)| (x + s, y)).collect());
    std::iter::once(ring).chain(copy).collect()
}

/// A longitude difference brought into -180..=180.
fn wrap_delta(d: f64) -> f64 {
    if d > 180.0 {
        d - 360.0
    } else if d < -180.0 {
        d + 360.0
    } else {
        d
    }
}

/// The map area of the image, with its clip mask.
pub(super) struct MapCanvas<'p> {
    pixmap: &'p mut Pixmap,
    frame: MapFrame,
    unit: f64,
    mask: Mask,
    clip: Bounds,
    style: &'p Style,
}

impl<'p> MapCanvas<'p> {
    /// Prepares drawing into the map box of `layout`.
    pub(super) fn new(
        pixmap: &'p mut Pixmap,
        layout: &Layout,
        style: &'p Style,
    ) -> Result<Self, RenderError> {
        let frame = layout.map;
        let mut mask = Mask::new(pixmap.width(), pixmap.height()).ok_or(RenderError::TooLarge {
            width: u64::from(pixmap.width()),
            height: u64::from(pixmap.height()),
            max: MAX_SIDE,
        })?;
        if let Some(rect) = frame_rect(&frame) {
            mask.fill_path(
                &PathBuilder::from_rect(rect),
                FillRule::Winding,
                false,
                Transform::identity(),
            );
        }
        let clip = Bounds {
            x0: frame.left - CLIP_PAD,
            y0: frame.top - CLIP_PAD,
            x1: frame.left + frame.width + CLIP_PAD,
            y1: frame.top + frame.height + CLIP_PAD,
        };
        Ok(Self {
            pixmap,
            frame,
            unit: layout.unit,
            mask,
            clip,
            style,
        })
    }

    /// Projects lon/lat rings, clips them and builds one path (None when nothing is left).
    fn path<'r>(&self, rings: impl IntoIterator<Item = &'r [(f64, f64)]>) -> Option<Path> {
        let mut pb = PathBuilder::new();
        for ring in rings {
            let projected: Vec<(f64, f64)> = ring
                .iter()
                .map(|&(lon, lat)| self.frame.to_pixel(lon, lat))
                .collect();
            push_ring(&mut pb, &clip_ring(&projected, self.clip));
        }
        pb.finish()
    }

    fn fill(&mut self, path: &Path, paint: &Paint<'_>, rule: FillRule) {
        self.pixmap
            .fill_path(path, paint, rule, Transform::identity(), Some(&self.mask));
    }

    fn stroke(&mut self, path: &Path, paint: &Paint<'_>, width: f64) {
        #[allow(
            clippy::cast_possible_truncation,
            reason = "stroke widths of a few pixels"
        )]
        let stroke = Stroke {
            width: width as f32,
            line_join: LineJoin::Round,
            ..Stroke::default()
        };
        self.pixmap.stroke_path(
            path,
            paint,
            &stroke,
            Transform::identity(),
            Some(&self.mask),
        );
    }

    /// Water and land, or the plain background when the land layer is empty.
    pub(super) fn backdrop(&mut self, land: &Land) {
        let Some(rect) = frame_rect(&self.frame) else {
            return;
        };
        let colours = &self.style.colours;
        let base = if land.is_empty() {
            colours.plain.0
        } else {
            colours.water.0
        };
        self.pixmap
            .fill_rect(rect, &paint(base, 1.0), Transform::identity(), None);
        if land.is_empty() {
            return;
        }
        // Only polygons whose box meets the view; the view box is found by inverting the
        // projection at the map corners.
        let (west, north) = self.lon_lat_at(self.clip.x0, self.clip.y0);
        let (east, south) = self.lon_lat_at(self.clip.x1, self.clip.y1);
        let land_paint = paint(colours.land.0, 1.0);
        let coast_paint = paint(colours.coast.0, 1.0);
        let coast_width = (0.9 * self.unit).max(0.6);
        for polygon in land.polygons() {
            let Some(r) = polygon.bounding_rect() else {
                continue;
            };
            if r.max().x < west || r.min().x > east || r.max().y < south || r.min().y > north {
                continue;
            }
            let rings: Vec<Vec<(f64, f64)>> = std::iter::once(polygon.exterior())
                .chain(polygon.interiors())
                .map(|ls| ls.coords().map(|c| (c.x, c.y)).collect())
                .collect();
            if let Some(path) = self.path(rings.iter().map(Vec::as_slice)) {
                self.fill(&path, &land_paint, FillRule::EvenOdd);
                self.stroke(&path, &coast_paint, coast_width);
            }
        }
    }

    /// Lon/lat of a pixel (inverse projection; latitudes within the Mercator limit).
    fn lon_lat_at(&self, x: f64, y: f64) -> (f64, f64) {
        let f = &self.frame;
        let mx = f.origin_x + (x - f.left) / f.px_per_unit;
        let my = f.origin_y + (y - f.top) / f.px_per_unit;
        (mx * 360.0 - 180.0, super::mercator_lat(my))
    }

    /// Context lines (roads): thin, faint, under the cells.
    pub(super) fn roads(&mut self, roads: &[Vec<(f64, f64)>]) {
        let style = &self.style.roads;
        if !style.show || roads.is_empty() {
            return;
        }
        let mut pb = PathBuilder::new();
        for line in roads {
            let projected: Vec<(f64, f64)> = line
                .iter()
                .map(|&(lon, lat)| self.frame.to_pixel(lon, lat))
                .collect();
            for run in clip_line(&projected, self.clip) {
                push_line(&mut pb, &run);
            }
        }
        if let Some(path) = pb.finish() {
            let width = (style.width * self.unit).max(0.5);
            self.stroke(&path, &paint(style.colour.0, style.opacity), width);
        }
    }

    /// Cell fills at the style's opacity with a thin darker outline.
    pub(super) fn cells(&mut self, cells: &[HeatCell], colormap: Colormap, scale: Scale, max: f64) {
        let look = self.style.cells.clone();
        let thin = look.outline_width * self.unit;
        for c in cells {
            if c.value.is_nan() || c.value <= 0.0 {
                continue;
            }
            let rgb = colormap.rgb(scale.position(c.value, max));
            let rings = cell_rings(c.cell);
            let Some(path) = self.path(rings.iter().map(Vec::as_slice)) else {
                continue;
            };
            self.fill(&path, &paint(rgb, look.opacity), FillRule::Winding);
            let b = path.bounds();
            if thin > 0.0 && f64::from(b.width().min(b.height())) >= look.min_outlined_px {
                self.stroke(
                    &path,
                    &paint(darken(rgb, look.outline_darken), 0.9),
                    thin.max(0.5),
                );
            }
        }
    }

    /// Outlier outlines: a halo under a core stroke, on top of every fill.
    pub(super) fn outlines(&mut self, outlined: &[h3o::CellIndex]) {
        let paths: Vec<Path> = outlined
            .iter()
            .filter_map(|&cell| {
                let rings = cell_rings(cell);
                self.path(rings.iter().map(Vec::as_slice))
            })
            .collect();
        // All halos first, so a core is never covered by a neighbour's halo.
        let (halo, core) = outline_widths(self.style, self.unit);
        let look = &self.style.outliers;
        let (halo_rgb, core_rgb) = (look.halo.0, look.colour.0);
        for path in &paths {
            self.stroke(path, &paint(halo_rgb, 1.0), halo);
        }
        for path in &paths {
            self.stroke(path, &paint(core_rgb, 1.0), core);
        }
    }

    /// A thin frame around the map.
    pub(super) fn frame(&mut self) {
        let f = self.frame;
        #[allow(clippy::cast_possible_truncation, reason = "pixel coordinates")]
        let rect = Rect::from_ltrb(
            (f.left + 0.5) as f32,
            (f.top + 0.5) as f32,
            (f.left + f.width - 0.5) as f32,
            (f.top + f.height - 0.5) as f32,
        );
        if let Some(rect) = rect {
            let path = PathBuilder::from_rect(rect);
            let stroke = Stroke {
                width: 1.0,
                ..Stroke::default()
            };
            self.pixmap.stroke_path(
                &path,
                &paint(self.style.colours.frame.0, 1.0),
                &stroke,
                Transform::identity(),
                None,
            );
        }
    }
}

/// Halo and core stroke widths of an outlier outline at a type scale.
pub(super) fn outline_widths(style: &Style, unit: f64) -> (f64, f64) {
    (
        style.outliers.halo_width * unit,
        style.outliers.width * unit,
    )
}

/// The map box as a tiny-skia rectangle.
fn frame_rect(f: &MapFrame) -> Option<Rect> {
    #[allow(clippy::cast_possible_truncation, reason = "pixel coordinates")]
    Rect::from_xywh(f.left as f32, f.top as f32, f.width as f32, f.height as f32)
}

/// A darker shade (each channel times `factor`, clamped to 0..=1), for thin cell outlines.
fn darken(rgb: [u8; 3], factor: f64) -> [u8; 3] {
    let factor = factor.clamp(0.0, 1.0);
    rgb.map(|c| {
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "0..=255 scaled down stays in range"
        )]
        let v = (f64::from(c) * factor).round() as u8;
        v
    })
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn clip_keeps_inside_and_cuts_outside() {
        let b = Bounds {
            x0: 0.0,
            y0: 0.0,
            x1: 10.0,
            y1: 10.0,
        };
        let inside = [(1.0, 1.0), (9.0, 1.0), (5.0, 9.0)];
        assert_eq!(clip_ring(&inside, b), inside.to_vec());
        let outside = [(20.0, 20.0), (30.0, 20.0), (25.0, 30.0)];
        assert!(clip_ring(&outside, b).is_empty());
        let across = [(-10.0, 5.0), (5.0, 5.0), (5.0, 6.0), (-10.0, 6.0)];
        let clipped = clip_ring(&across, b);
        assert!(clipped.iter().all(|p| p.0 >= 0.0 && p.0 <= 10.0));
        assert!(clipped.contains(&(0.0, 5.0)));
    }

    #[test]
    fn lines_are_cut_to_the_box() {
        let b = Bounds {
            x0: 0.0,
            y0: 0.0,
            x1: 10.0,
            y1: 10.0,
        };
        // In, out and back in: two runs, each ending on the box edge.
        let line = [(5.0, 5.0), (15.0, 5.0), (15.0, 8.0), (5.0, 8.0)];
        let runs = clip_line(&line, b);
        assert_eq!(
            runs,
            vec![vec![(5.0, 5.0), (10.0, 5.0)], vec![(10.0, 8.0), (5.0, 8.0)]]
        );
        assert!(clip_line(&[(20.0, 20.0), (30.0, 30.0)], b).is_empty());
        // Crossing the box entirely: one run from edge to edge.
        assert_eq!(
            clip_line(&[(-5.0, 5.0), (15.0, 5.0)], b),
            vec![vec![(0.0, 5.0), (10.0, 5.0)]]
        );
    }

    #[test]
    fn antimeridian_cell_is_drawn_on_both_sides() {
        let cell = h3o::LatLng::new(-16.5, 179.999)
            .unwrap()
            .to_cell(h3o::Resolution::Five);
        let rings = cell_rings(cell);
        assert_eq!(rings.len(), 2, "one ring per side of the map");
        for ring in &rings {
            let min = ring.iter().map(|p| p.0).fold(f64::INFINITY, f64::min);
            let max = ring.iter().map(|p| p.0).fold(f64::NEG_INFINITY, f64::max);
            assert!(
                max - min < 1.0,
                "a res-5 cell spans well under 1° of longitude"
            );
        }
    }

    #[test]
    fn polar_cell_is_skipped() {
        let cell = h3o::LatLng::new(90.0, 0.0)
            .unwrap()
            .to_cell(h3o::Resolution::Two);
        assert!(cell_rings(cell).is_empty());
    }
}
