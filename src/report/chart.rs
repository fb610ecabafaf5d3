//! The weekly trend chart of a region page: edits and deletions per week as an inline SVG line
//! chart with the report week highlighted, axis labels and an accessible title and description.

use std::fmt::Write as _;

use super::text::{escape_html, group_thousands};
use crate::summary::TrendPoint;

// Drawing area in SVG user units. The chart scales to the page width (capped near 620 px); the
// style sheet sets label sizes per screen width so they stay readable on a 390 px phone.
const WIDTH: f64 = 480.0;
const HEIGHT: f64 = 250.0;
const LEFT: f64 = 54.0;
const RIGHT: f64 = 12.0;
const TOP: f64 = 34.0;
const BOTTOM: f64 = 30.0;
/// At most this many week labels on the x axis; the report week is always labelled.
const MAX_X_LABELS: usize = 7;

/// A round axis step (1, 2 or 5 × 10^k) giving about four intervals up to `max`.
fn nice_step(max: u64) -> u64 {
    let raw = (max.max(4) as f64 / 4.0).ceil();
    let mut magnitude = 1_u64;
    while (magnitude as f64) * 10.0 <= raw {
        magnitude = magnitude.saturating_mul(10);
    }
    [1, 2, 5, 10]
        .into_iter()
        .map(|m| m * magnitude)
        .find(|&s| s as f64 >= raw)
        .unwrap_or(magnitude * 10)
}

/// The part of an ISO week label a reader scans for (`2026-W47` → `W47`).
fn short_week(week: &str) -> &str {
    week.rsplit_once('-').map_or(week, |(_, w)| w)
}

/// Renders the chart, or a short sentence when there is no trend to draw.
///
/// `report_week` picks the highlighted point; when no point carries it, the last one is taken.
#[must_use]
pub fn trend_svg(points: &[TrendPoint], report_week: &str, region_name: &str) -> String {
    let Some(last) = points.last() else {
        return "<p class=\"muted\">No weekly history is available yet.</p>".to_owned();
    };
    let highlight = points
        .iter()
        .rposition(|p| p.week == report_week)
        .unwrap_or(points.len() - 1);
    let max = points
        .iter()
        .map(|p| p.edits.max(p.deletes))
        .max()
        .unwrap_or(0);
    let step = nice_step(max);
    let y_top = step * max.div_ceil(step).max(1);
    let plot_w = WIDTH - LEFT - RIGHT;
    let plot_h = HEIGHT - TOP - BOTTOM;
    let slot = plot_w / points.len() as f64;
    let x = |i: usize| LEFT + slot * (i as f64 + 0.5);
    let y = |v: u64| TOP + plot_h * (1.0 - v as f64 / y_top as f64);

    let hp = &points[highlight];
    let mut s = String::with_capacity(4096 + points.len() * 160);
    let _ = write!(
        s,
        "<svg class=\"trend\" viewBox=\"0 0 {WIDTH} {HEIGHT}\" role=\"img\" \
         aria-labelledby=\"trend-title trend-desc\" xmlns=\"http://www.w3.org/2000/svg\">\
         <title id=\"trend-title\">Edits and deletions per week in {name}</title>\
         <desc id=\"trend-desc\">{n} weeks from {first} to {lastw}. In the report week {hw} there \
         were {he} edits, of which {hd} deletions.</desc>",
        name = escape_html(region_name),
        n = points.len(),
        first = escape_html(&points[0].week),
        lastw = escape_html(&last.week),
        hw = escape_html(&hp.week),
        he = group_thousands(hp.edits),
        hd = group_thousands(hp.deletes),
    );
    // Report week band, drawn first so lines pass over it; its label leans inward so it never
    // runs off the chart.
    let (label_x, anchor) = if x(highlight) > LEFT + plot_w * 0.75 {
        (x(highlight) + slot / 2.0, "end")
    } else if x(highlight) < LEFT + plot_w * 0.25 {
        (x(highlight) - slot / 2.0, "start")
    } else {
        (x(highlight), "middle")
    };
    let _ = write!(
        s,
        "<rect class=\"band\" x=\"{:.1}\" y=\"{TOP}\" width=\"{:.1}\" height=\"{plot_h}\"/>\
         <text class=\"band-label\" x=\"{label_x:.1}\" y=\"{:.1}\" text-anchor=\"{anchor}\">\
         report week</text>",
        x(highlight) - slot / 2.0,
        slot,
        TOP - 5.0,
    );
    // Horizontal grid with value labels.
    let mut v = 0;
    while v <= y_top {
        let _ = write!(
            s,
            "<line class=\"grid\" x1=\"{LEFT}\" x2=\"{:.1}\" y1=\"{yv:.1}\" y2=\"{yv:.1}\"/>\
             <text class=\"tick\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"end\">{}</text>",
            WIDTH - RIGHT,
            LEFT - 6.0,
            y(v) + 4.0,
            group_thousands(v),
            yv = y(v),
        );
        v += step;
    }
    // Week labels: evenly thinned, the report week always shown.
    let every = points.len().div_ceil(MAX_X_LABELS).max(1);
    for (i, p) in points.iter().enumerate() {
        let near_highlight = i != highlight && i.abs_diff(highlight) < every;
        if i == highlight || ((points.len() - 1 - i) % every == 0 && !near_highlight) {
            let class = if i == highlight {
                "tick strong"
            } else {
                "tick"
            };
            let _ = write!(
                s,
                "<text class=\"{class}\" x=\"{:.1}\" y=\"{:.1}\" text-anchor=\"middle\">{}</text>",
                x(i),
                HEIGHT - BOTTOM + 18.0,
                escape_html(short_week(&p.week)),
            );
        }
    }
    // The two series: a line with dots each, told apart by dash pattern as well as colour.
    for (class, value) in [
        (
            "edits",
            (|p: &TrendPoint| p.edits) as fn(&TrendPoint) -> u64,
        ),
        ("deletes", |p: &TrendPoint| p.deletes),
    ] {
        let path: Vec<String> = points
            .iter()
            .enumerate()
            .map(|(i, p)| format!("{:.1},{:.1}", x(i), y(value(p))))
            .collect();
        let _ = write!(
            s,
            "<polyline class=\"series {class}\" points=\"{}\"/>",
            path.join(" ")
        );
        for (i, p) in points.iter().enumerate() {
            let r = if i == highlight { 4.5 } else { 2.5 };
            let _ = write!(
                s,
                "<circle class=\"dot {class}\" cx=\"{:.1}\" cy=\"{:.1}\" r=\"{r}\"/>",
                x(i),
                y(value(p)),
            );
        }
    }
    // Legend, top left.
    let _ = write!(
        s,
        "<line class=\"series edits\" x1=\"{LEFT}\" x2=\"{:.1}\" y1=\"12\" y2=\"12\"/>\
         <text class=\"legend\" x=\"{:.1}\" y=\"16\">Edits</text>\
         <line class=\"series deletes\" x1=\"{:.1}\" x2=\"{:.1}\" y1=\"12\" y2=\"12\"/>\
         <text class=\"legend\" x=\"{:.1}\" y=\"16\">Deletions</text></svg>",
        LEFT + 22.0,
        LEFT + 28.0,
        LEFT + 92.0,
        LEFT + 114.0,
        LEFT + 120.0,
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn steps_are_round() {
        assert_eq!(nice_step(0), 1);
        assert_eq!(nice_step(9), 5);
        assert_eq!(nice_step(1234), 500);
        assert_eq!(nice_step(40), 10);
    }

    #[test]
    fn report_week_is_labelled() {
        let pts: Vec<TrendPoint> = (1..=13)
            .map(|w| TrendPoint {
                week: format!("2026-W{w:02}"),
                edits: w * 10,
                deletes: w,
                newcomer_edits: 0,
            })
            .collect();
        let svg = trend_svg(&pts, "2026-W13", "Test <b>");
        assert!(svg.contains(">W13</text>"));
        assert!(svg.contains("Test &lt;b&gt;"));
        assert!(!svg.contains("<b>"));
    }
}
