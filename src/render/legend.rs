//! The page around the map: title and subtitle, the colour legend with its value breaks, the
//! outlier key, the scale bar and the attribution line.

use tiny_skia::{FillRule, Paint, PathBuilder, Pixmap, Rect, Stroke, Transform};

use super::draw::{outline_widths, paint};
use super::text::{Fonts, Style as TextStyle};
use super::{Colormap, HeatCell, Layout, Scale, Style, ATTRIBUTION};

/// Largest ratio a ratio scale runs to (and its reciprocal at the low end): beyond 16 times
/// (or a sixteenth of) the expectation the colour stays at the map's end, so one extreme cell
/// does not wash out the rest.
const MAX_RATIO: f64 = 16.0;
/// Narrow no-break space between thousands: "1 842".
const THOUSANDS: char = '\u{202F}';

/// The colour scale's top and the values marked on the legend.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct Ticks {
    /// Value at the top of the colour scale.
    pub max: f64,
    /// Marked values, ascending (from 0, or for a ratio scale from `1 / max`).
    pub values: Vec<f64>,
    /// Decimals to print.
    pub decimals: usize,
}

impl Ticks {
    /// Breaks for a scale: `value_max` when given (positive, finite), else the largest cell value
    /// rounded up (linear: to a whole number of steps; log: to 1, 2 or 5 times a power of ten;
    /// ratio: the largest ratio or reciprocal ratio, up to a power of two from 2 to 16).
    pub(super) fn new(scale: Scale, cells: &[HeatCell], value_max: Option<f64>) -> Self {
        if scale == Scale::Ratio {
            return Self::ratio(value_max, cells);
        }
        let fixed = value_max.filter(|m| m.is_finite() && *m > 0.0);
        let wanted = fixed.unwrap_or_else(|| {
            cells
                .iter()
                .map(|c| c.value)
                .filter(|v| v.is_finite() && *v > 0.0)
                .reduce(f64::max)
                .unwrap_or(1.0)
        });
        match scale {
            Scale::Log if wanted >= 1.0 => Self::log(fixed.unwrap_or_else(|| nice_ceil(wanted))),
            _ => {
                let step = nice_step(wanted);
                let max = fixed.unwrap_or_else(|| (wanted / step - 1e-9).ceil().max(1.0) * step);
                Self::linear(max, step)
            }
        }
    }

    fn linear(max: f64, step: f64) -> Self {
        let values = (0..=5)
            .map(|k| f64::from(k) * step)
            .filter(|v| *v <= max * (1.0 + 1e-9))
            .collect();
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "a small count of decimals for a step below 1"
        )]
        let decimals = if step >= 1.0 {
            0
        } else {
            (-step.log10() - 1e-9).ceil() as usize
        };
        Self {
            max,
            values,
            decimals,
        }
    }

    /// Powers of two from `1 / max` to `max`, at most seven of them.
    fn ratio(value_max: Option<f64>, cells: &[HeatCell]) -> Self {
        let wanted = value_max
            .filter(|m| m.is_finite() && *m > 1.0)
            .unwrap_or_else(|| {
                cells
                    .iter()
                    .map(|c| c.value)
                    .filter(|v| v.is_finite() && *v > 0.0)
                    .map(|v| v.max(1.0 / v))
                    .fold(2.0, f64::max)
            })
            .min(MAX_RATIO);
        let exp = wanted.log2().ceil().max(1.0);
        let max = exp.exp2();
        // Symmetric around 1 and including it: steps of one or more doublings.
        let step = (exp / 3.0).ceil().max(1.0);
        #[allow(
            clippy::cast_possible_truncation,
            reason = "exp is at most log2(MAX_RATIO), a small whole number"
        )]
        let k = (exp / step).floor() as i32;
        let values = (-k..=k).map(|i| (f64::from(i) * step).exp2()).collect();
        Self {
            max,
            values,
            decimals: 0,
        }
    }

    /// The printed form of a marked value: ratios below 1 as fractions ("1/4").
    pub(super) fn label(&self, scale: Scale, v: f64) -> String {
        if scale == Scale::Ratio && v < 1.0 && v > 0.0 {
            format!("1/{}", format_value(1.0 / v, 0))
        } else {
            format_value(v, self.decimals)
        }
    }

    /// Powers of ten up to `max`; when they give fewer than four breaks, 5× and then 2× powers.
    fn log(max: f64) -> Self {
        let powers: Vec<f64> = (0..16)
            .map(|k| 10f64.powi(k))
            .take_while(|p| *p <= max * (1.0 + 1e-9))
            .collect();
        let mut values = vec![0.0];
        values.extend(&powers);
        for mult in [5.0, 2.0] {
            if values.len() >= 4 {
                break;
            }
            values.extend(
                powers
                    .iter()
                    .map(|p| p * mult)
                    .filter(|v| *v <= max * (1.0 + 1e-9)),
            );
            values.sort_by(f64::total_cmp);
        }
        Self {
            max,
            values,
            decimals: 0,
        }
    }
}

/// Smallest step of 1, 2, 2.5 or 5 times a power of ten that covers `max` in at most five steps
/// (2.5 only from 25 up, so counts keep whole-number breaks).
fn nice_step(max: f64) -> f64 {
    let base = 10f64.powf(max.log10().floor() - 2.0);
    for k in 0..6 {
        let decade = base * 10f64.powi(k);
        for mult in [1.0, 2.0, 2.5, 5.0] {
            let step = decade * mult;
            if mult == 2.5 && step < 25.0 {
                continue;
            }
            if max / step <= 5.0 + 1e-9 {
                return step;
            }
        }
    }
    max
}

/// Smallest 1, 2 or 5 times a power of ten at or above `v` (v ≥ 1).
fn nice_ceil(v: f64) -> f64 {
    let decade = 10f64.powf(v.log10().floor());
    [1.0, 2.0, 5.0, 10.0]
        .into_iter()
        .map(|m| m * decade)
        .find(|c| *c >= v * (1.0 - 1e-9))
        .unwrap_or(10.0 * decade)
}

/// A number with `decimals` decimals and thousands separated by a narrow space.
pub(super) fn format_value(v: f64, decimals: usize) -> String {
    let s = format!("{v:.decimals$}");
    let (int, frac) = s
        .split_once('.')
        .map_or((s.as_str(), None), |(i, f)| (i, Some(f)));
    let (sign, digits) = int.strip_prefix('-').map_or(("", int), |d| ("-", d));
    let mut out = String::from(sign);
    for (i, ch) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(THOUSANDS);
        }
        out.push(ch);
    }
    if let Some(f) = frac {
        out.push('.');
        out.push_str(f);
    }
    out
}

/// Largest 1, 2 or 5 times a power of ten at or below `metres`, as metres and a label.
fn scale_bar_length(metres: f64) -> Option<(f64, String)> {
    if !(metres.is_finite() && metres >= 1.0) {
        return None;
    }
    let decade = 10f64.powf(metres.log10().floor());
    let length = [5.0, 2.0, 1.0]
        .into_iter()
        .map(|m| m * decade)
        .find(|l| *l <= metres * (1.0 + 1e-9))?;
    let label = if length >= 1000.0 {
        format!("{} km", format_value(length / 1000.0, 0))
    } else {
        format!("{} m", format_value(length, 0))
    };
    Some((length, label))
}

/// Draws the page parts of one image.
pub(super) struct Page<'a> {
    pub layout: &'a Layout,
    pub fonts: &'a Fonts,
    pub style: &'a Style,
}

impl Page<'_> {
    /// Pixels at the design size scaled to this image.
    #[allow(clippy::cast_possible_truncation, reason = "pixel sizes")]
    fn px(&self, design: f64) -> f32 {
        (design * self.layout.unit) as f32
    }

    fn margin(&self) -> f32 {
        self.px(super::metrics::MARGIN).round()
    }

    #[allow(clippy::cast_precision_loss, reason = "image widths are at most 8192")]
    fn page_width(&self) -> f32 {
        self.layout.width as f32
    }

    /// Top of the footer (the map's bottom edge).
    #[allow(clippy::cast_possible_truncation, reason = "pixel coordinates")]
    fn footer_top(&self) -> f32 {
        (self.layout.map.top + self.layout.map.height) as f32
    }

    fn regular(&self, size: f64, rgb: [u8; 3]) -> TextStyle<'_> {
        TextStyle {
            font: &self.fonts.regular,
            size: self.px(size),
            rgb,
        }
    }

    /// Title (bold, shrunk down to 75% and then cut with an ellipsis when too long) and
    /// subtitle.
    pub(super) fn header(&self, pixmap: &mut Pixmap, title: &str, subtitle: &str) {
        let left = self.margin();
        let room = self.page_width() - 2.0 * left;
        let mut style = TextStyle {
            font: &self.fonts.bold,
            size: self.px(self.style.text.title_size),
            rgb: self.style.colours.ink.0,
        };
        let natural = style.width(title);
        if natural > room {
            style.size *= (room / natural).max(0.75);
        }
        style.draw(pixmap, left, self.px(62.0), &style.fit(title, room));
        let sub = self.regular(self.style.text.subtitle_size, self.style.colours.ink_soft.0);
        sub.draw(pixmap, left, self.px(95.0), &sub.fit(subtitle, room));
    }

    /// The colour bar with its label, breaks and (when outliers are shown) the outline key.
    pub(super) fn colour_legend(
        &self,
        pixmap: &mut Pixmap,
        label: &str,
        colormap: Colormap,
        scale: Scale,
        ticks: &Ticks,
        outlier_key: bool,
    ) {
        let top = self.footer_top();
        let left = self.margin();
        let room = self.page_width() - 2.0 * left;
        let bar_w = self.px(420.0).min(room * 0.45).round();
        let bar_h = self.px(14.0).round().max(6.0);
        let bar_top = (top + self.px(52.0)).round();

        let (ink_soft, ink_quiet) = (
            self.style.colours.ink_soft.0,
            self.style.colours.ink_quiet.0,
        );
        let caption = self.regular(self.style.text.label_size, ink_soft);
        let text = match scale {
            Scale::Linear | Scale::Ratio => label.to_owned(),
            Scale::Log => format!("{label} (log scale)"),
        };
        caption.draw(
            pixmap,
            left,
            top + self.px(40.0),
            &caption.fit(&text, room * 0.62),
        );

        // One-pixel columns sampled at their centres: the bar shows the table itself, opaque.
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "bar width is a few hundred pixels"
        )]
        let columns = bar_w as u32;
        for i in 0..columns {
            let t = (f64::from(i) + 0.5) / f64::from(columns);
            #[allow(clippy::cast_precision_loss, reason = "small pixel offsets")]
            let x = left + i as f32;
            if let Some(r) = Rect::from_xywh(x, bar_top, 1.0, bar_h) {
                let mut p = paint(colormap.rgb(t), 1.0);
                p.anti_alias = false;
                pixmap.fill_rect(r, &p, Transform::identity(), None);
            }
        }
        if let Some(r) = Rect::from_xywh(left + 0.5, bar_top + 0.5, bar_w - 1.0, bar_h - 1.0) {
            stroke_path(
                pixmap,
                &PathBuilder::from_rect(r),
                &paint(ink_quiet, 0.6),
                1.0,
            );
        }

        let tick_style = self.regular(self.style.text.tick_size, ink_soft);
        let tick_len = self.px(5.0).max(3.0);
        let label_baseline = bar_top + bar_h + tick_len + self.px(17.0);
        let gap = self.px(8.0);
        let mut last_right = f32::NEG_INFINITY;
        for &v in &ticks.values {
            #[allow(clippy::cast_possible_truncation, reason = "pixel offsets")]
            let x = (left + (scale.position(v, ticks.max) as f32) * bar_w).round();
            let text = ticks.label(scale, v);
            let w = tick_style.width(&text);
            // Labels are centred on their tick, kept inside the bar's span, never overlapping.
            let lx = (x - w / 2.0).clamp(left - w / 2.0, left + bar_w - w / 2.0);
            if lx < last_right + gap {
                continue;
            }
            last_right = lx + w;
            if let Some(r) =
                Rect::from_xywh(x.min(left + bar_w - 1.0), bar_top + bar_h, 1.0, tick_len)
            {
                pixmap.fill_rect(r, &paint(ink_quiet, 1.0), Transform::identity(), None);
            }
            tick_style.draw(pixmap, lx, label_baseline, &text);
        }

        if outlier_key {
            self.outlier_key(
                pixmap,
                left + bar_w + self.px(44.0),
                bar_top + bar_h / 2.0,
                colormap,
            );
        }
    }

    /// A sample hexagon outlined as outliers are, and its label.
    fn outlier_key(&self, pixmap: &mut Pixmap, cx: f32, cy: f32, colormap: Colormap) {
        let r = self.px(13.0);
        let mut pb = PathBuilder::new();
        for k in 0..6u8 {
            let a = std::f32::consts::FRAC_PI_3 * f32::from(k) + std::f32::consts::FRAC_PI_6;
            let (x, y) = (cx + r * a.cos(), cy + r * a.sin());
            if k == 0 {
                pb.move_to(x, y);
            } else {
                pb.line_to(x, y);
            }
        }
        pb.close();
        let Some(hex) = pb.finish() else {
            return;
        };
        // A colour from the map's upper part: for a diverging map, clearly above the middle.
        let sample = if colormap.is_diverging() { 0.85 } else { 0.55 };
        pixmap.fill_path(
            &hex,
            &paint(colormap.rgb(sample), self.style.cells.opacity),
            FillRule::Winding,
            Transform::identity(),
            None,
        );
        let (halo, core) = outline_widths(self.style, self.layout.unit);
        #[allow(clippy::cast_possible_truncation, reason = "stroke widths")]
        let (halo, core) = (halo as f32, core as f32);
        let look = &self.style.outliers;
        stroke_path(pixmap, &hex, &paint(look.halo.0, 1.0), halo);
        stroke_path(pixmap, &hex, &paint(look.colour.0, 1.0), core);
        let style = self.regular(self.style.text.label_size, self.style.colours.ink_soft.0);
        style.draw(
            pixmap,
            cx + r + self.px(14.0),
            cy + self.px(6.0),
            "outlier cell",
        );
    }

    /// A two-part bar of a round length at the map's middle latitude, right-aligned under the
    /// map; when the map spans many degrees of latitude (Mercator scale varies) the label says
    /// where it holds.
    pub(super) fn scale_bar(&self, pixmap: &mut Pixmap) {
        let map = &self.layout.map;
        let metres_per_px = map.metres_per_px();
        let room = f64::from(self.page_width() - 2.0 * self.margin());
        let max_px = (room * 0.22).min(260.0 * self.layout.unit);
        let Some((metres, mut label)) = scale_bar_length(metres_per_px * max_px) else {
            return;
        };
        let top_lat = super::mercator_lat(map.origin_y);
        let bottom_lat = super::mercator_lat(map.origin_y + map.height / map.px_per_unit);
        if top_lat - bottom_lat > 4.0 {
            let lat = map.centre_lat();
            let hemisphere = if lat < 0.0 { 'S' } else { 'N' };
            label = format!("{label} at {:.0}° {hemisphere}", lat.abs());
        }
        #[allow(clippy::cast_possible_truncation, reason = "pixel lengths")]
        let length = (metres / metres_per_px).round() as f32;
        let right = self.page_width() - self.margin();
        let left = right - length;
        let top = self.footer_top();
        let bar_top = (top + self.px(52.0) + self.px(4.0)).round();
        let bar_h = self.px(7.0).round().max(4.0);
        let half = (length / 2.0).round();
        let ink_soft = self.style.colours.ink_soft.0;
        for (x, w, rgb) in [
            (left, half, ink_soft),
            (left + half, length - half, self.style.colours.paper.0),
        ] {
            if let Some(r) = Rect::from_xywh(x, bar_top, w, bar_h) {
                pixmap.fill_rect(r, &paint(rgb, 1.0), Transform::identity(), None);
            }
        }
        if let Some(r) = Rect::from_xywh(left + 0.5, bar_top + 0.5, length - 1.0, bar_h - 1.0) {
            stroke_path(
                pixmap,
                &PathBuilder::from_rect(r),
                &paint(ink_soft, 1.0),
                1.0,
            );
        }
        let style = self.regular(self.style.text.label_size, ink_soft);
        style.draw_right(pixmap, right, top + self.px(40.0), &label);
    }

    /// "© OpenStreetMap contributors" at the bottom right, on the row of the legend's breaks.
    pub(super) fn attribution(&self, pixmap: &mut Pixmap) {
        let style = self.regular(self.style.text.tick_size, self.style.colours.ink_quiet.0);
        let right = self.page_width() - self.margin();
        let baseline = self.footer_top() + self.px(52.0 + 14.0 + 5.0 + 17.0);
        style.draw_right(pixmap, right, baseline, ATTRIBUTION);
    }
}

fn stroke_path(pixmap: &mut Pixmap, path: &tiny_skia::Path, paint: &Paint<'_>, width: f32) {
    let stroke = Stroke {
        width,
        ..Stroke::default()
    };
    pixmap.stroke_path(path, paint, &stroke, Transform::identity(), None);
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn linear_breaks_are_round() {
        let t = Ticks::linear(150.0, nice_step(137.0));
        assert_eq!(t.values, vec![0.0, 50.0, 100.0, 150.0]);
        assert_eq!(nice_step(101.0), 25.0);
        assert_eq!(nice_step(1.0), 0.2);
        assert_eq!(Ticks::linear(1.0, 0.2).decimals, 1);
    }

    #[test]
    fn log_breaks_are_powers_of_ten() {
        assert_eq!(nice_ceil(1842.0), 2000.0);
        assert_eq!(
            Ticks::log(2000.0).values,
            vec![0.0, 1.0, 10.0, 100.0, 1000.0]
        );
        assert_eq!(Ticks::log(10.0).values, vec![0.0, 1.0, 5.0, 10.0]);
        assert_eq!(Ticks::log(5.0).values, vec![0.0, 1.0, 2.0, 5.0]);
    }

    #[test]
    fn ratio_breaks_are_powers_of_two() {
        let cells = |v: f64| {
            vec![HeatCell {
                cell: h3o::CellIndex::try_from(0x08a1_fb46_622d_7fff_u64).unwrap(),
                value: v,
            }]
        };
        let t = Ticks::new(Scale::Ratio, &cells(5.0), None);
        assert_eq!(t.max, 8.0);
        assert_eq!(t.values, vec![0.125, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0]);
        assert_eq!(t.label(Scale::Ratio, 0.25), "1/4");
        assert_eq!(t.label(Scale::Ratio, 4.0), "4");
        // A cell far below expectation sets the range too.
        let t = Ticks::new(Scale::Ratio, &cells(1.0 / 12.0), None);
        assert_eq!(t.max, 16.0);
        assert_eq!(t.values, vec![0.0625, 0.25, 1.0, 4.0, 16.0]);
        assert_eq!(Ticks::new(Scale::Ratio, &[], None).max, 2.0);
        assert_eq!(Ticks::new(Scale::Ratio, &cells(1e6), None).max, 16.0);
    }

    #[test]
    fn numbers_and_distances_read_well() {
        assert_eq!(format_value(1842.0, 0), "1\u{202F}842");
        assert_eq!(format_value(-1_234_567.0, 0), "-1\u{202F}234\u{202F}567");
        assert_eq!(format_value(0.25, 2), "0.25");
        assert_eq!(scale_bar_length(1234.0), Some((1000.0, "1 km".to_owned())));
        assert_eq!(scale_bar_length(640.0), Some((500.0, "500 m".to_owned())));
        assert_eq!(scale_bar_length(0.5), None);
    }
}
