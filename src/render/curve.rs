//! The precision-recall chart of `hexvigil evaluate`: one stepped curve per scorer (drawn the way
//! scikit-learn's display draws it: precision held until the next recall), its operating point
//! at the flag threshold, axes from 0 to 1, and a legend, in the report's fonts and colours.

use tiny_skia::{PathBuilder, Pixmap, Rect, Stroke, Transform};

use super::draw::{color, paint};
use super::text::{Fonts, Style};
use super::{Colormap, RenderError, MAX_SIDE};

const WIDTH: u32 = 900;
const HEIGHT: u32 = 790;
const LEFT: f32 = 90.0;
const RIGHT: f32 = 40.0;
const TOP: f32 = 150.0;
const BOTTOM: f32 = 200.0;
const INK_RGB: [u8; 3] = [0x1E, 0x23, 0x28];
const INK_SOFT_RGB: [u8; 3] = [0x4A, 0x50, 0x57];
const GRID_RGB: [u8; 3] = [0xDD, 0xDB, 0xD6];

/// One curve of the chart.
pub struct CurveSeries<'a> {
    /// Legend text.
    pub label: &'a str,
    /// (recall, precision) in the order of rising threshold (recall falling).
    pub points: &'a [(f64, f64)],
    /// (recall, precision) at the flag threshold, marked with a dot.
    pub operating_point: Option<(f64, f64)>,
}

/// Draws the chart. Series colours come from viridis, spread over its darker three quarters so
/// every line stands out on the light paper.
///
/// # Errors
/// [`RenderError::Font`] if the embedded font is broken; [`RenderError::TooLarge`] if the
/// pixmap cannot be allocated.
#[allow(
    clippy::cast_possible_truncation,
    reason = "chart coordinates are small"
)]
pub fn render_pr_curve(
    title: &str,
    subtitle: &str,
    series: &[CurveSeries<'_>],
) -> Result<Pixmap, RenderError> {
    let map_style = super::Style::default();
    let fonts = Fonts::of(&map_style);
    let mut pixmap = Pixmap::new(WIDTH, HEIGHT).ok_or(RenderError::TooLarge {
        width: u64::from(WIDTH),
        height: u64::from(HEIGHT),
        max: MAX_SIDE,
    })?;
    pixmap.fill(color(map_style.colours.paper.0, 1.0));
    let (w, h) = (WIDTH as f32, HEIGHT as f32);
    let plot_w = w - LEFT - RIGHT;
    let plot_h = h - TOP - BOTTOM;
    let px = |recall: f64, precision: f64| {
        (
            LEFT + plot_w * recall.clamp(0.0, 1.0) as f32,
            TOP + plot_h * (1.0 - precision.clamp(0.0, 1.0) as f32),
        )
    };
    let bold = Style {
        font: &fonts.bold,
        size: 30.0,
        rgb: INK_RGB,
    };
    bold.draw(&mut pixmap, LEFT - 50.0, 52.0, &bold.fit(title, w - LEFT));
    let soft = Style {
        font: &fonts.regular,
        size: 18.0,
        rgb: INK_SOFT_RGB,
    };
    soft.draw(
        &mut pixmap,
        LEFT - 50.0,
        84.0,
        &soft.fit(subtitle, w - LEFT),
    );

    // Grid, ticks and axis labels.
    let grid = paint(GRID_RGB, 1.0);
    let thin = Stroke {
        width: 1.0,
        ..Stroke::default()
    };
    for k in 0..=5u8 {
        let v = f64::from(k) / 5.0;
        let mut pb = PathBuilder::new();
        let (x, _) = px(v, 0.0);
        pb.move_to(x, TOP);
        pb.line_to(x, TOP + plot_h);
        let (_, y) = px(0.0, v);
        pb.move_to(LEFT, y);
        pb.line_to(LEFT + plot_w, y);
        if let Some(path) = pb.finish() {
            pixmap.stroke_path(&path, &grid, &thin, Transform::identity(), None);
        }
        let label = format!("{v:.1}");
        let width = soft.width(&label);
        soft.draw(&mut pixmap, x - width / 2.0, TOP + plot_h + 26.0, &label);
        soft.draw_right(&mut pixmap, LEFT - 10.0, y + 6.0, &label);
    }
    let axis = Style {
        font: &fonts.regular,
        size: 20.0,
        rgb: INK_RGB,
    };
    let recall_label = "recall: share of the labelled vandalism that is flagged";
    axis.draw(
        &mut pixmap,
        LEFT + (plot_w - axis.width(recall_label)) / 2.0,
        TOP + plot_h + 56.0,
        recall_label,
    );
    axis.draw(
        &mut pixmap,
        LEFT - 50.0,
        TOP - 18.0,
        "precision: share of flags that are labelled vandalism",
    );
    if let Some(frame) = Rect::from_xywh(LEFT, TOP, plot_w, plot_h) {
        let path = PathBuilder::from_rect(frame);
        pixmap.stroke_path(
            &path,
            &paint(INK_SOFT_RGB, 1.0),
            &thin,
            Transform::identity(),
            None,
        );
    }

    // Curves, legend.
    let n = series.len().max(1);
    let line = Stroke {
        width: 3.0,
        ..Stroke::default()
    };
    for (i, s) in series.iter().enumerate() {
        #[allow(clippy::cast_precision_loss, reason = "a handful of series")]
        let t = if n == 1 {
            0.0
        } else {
            0.75 * i as f64 / (n - 1) as f64
        };
        let rgb = Colormap::Viridis.rgb(t);
        let mut pb = PathBuilder::new();
        let mut prev: Option<(f64, f64)> = None;
        for &(r, p) in s.points {
            match prev {
                None => {
                    let (x, y) = px(r, p);
                    pb.move_to(x, y);
                }
                Some((_, pp)) => {
                    let (x, y) = px(r, pp);
                    pb.line_to(x, y);
                    let (x, y) = px(r, p);
                    pb.line_to(x, y);
                }
            }
            prev = Some((r, p));
        }
        if let Some(path) = pb.finish() {
            pixmap.stroke_path(&path, &paint(rgb, 1.0), &line, Transform::identity(), None);
        }
        if let Some((r, p)) = s.operating_point {
            let (x, y) = px(r, p);
            if let Some(dot) = PathBuilder::from_circle(x, y, 7.0) {
                pixmap.fill_path(
                    &dot,
                    &paint(rgb, 1.0),
                    tiny_skia::FillRule::Winding,
                    Transform::identity(),
                    None,
                );
            }
        }
        let row = TOP + plot_h + 92.0 + 30.0 * i as f32;
        let mut pb = PathBuilder::new();
        pb.move_to(LEFT, row - 7.0);
        pb.line_to(LEFT + 40.0, row - 7.0);
        if let Some(path) = pb.finish() {
            pixmap.stroke_path(&path, &paint(rgb, 1.0), &line, Transform::identity(), None);
        }
        soft.draw(
            &mut pixmap,
            LEFT + 52.0,
            row,
            &soft.fit(s.label, plot_w - 52.0),
        );
    }
    Ok(pixmap)
}
