//! The report's inline SVG charts: a weekly chart of one count against its usual range (region
//! pages), and a small sparkline of the same (the front page's cards).
//!
//! The usual range is descriptive, for reading the chart: the mean of the weeks before the
//! report week ± 2 sample standard deviations, floored at zero. The outlier tests do not use it;
//! they work per cell with their own model (see the page's method note).

use std::fmt::Write as _;

use super::text::{escape_html, format_mean, group_thousands};

// Weekly chart drawing area in SVG user units. The chart scales to its box; the style sheet
// sets label sizes per screen width so they stay readable on a 390 px phone.
const WIDTH: f64 = 480.0;
const HEIGHT: f64 = 244.0;
const LEFT: f64 = 54.0;
const RIGHT: f64 = 12.0;
// Room above the plot for the legend row and, below it, the "report week" label.
const TOP: f64 = 48.0;
const BOTTOM: f64 = 30.0;
/// At most this many week labels on the x axis; the report week is always labelled.
const MAX_X_LABELS: usize = 7;

// Sparkline size in SVG user units (drawn at this size in CSS pixels).
const SPARK_W: f64 = 120.0;
const SPARK_H: f64 = 30.0;
const SPARK_PAD: f64 = 3.0;

/// The usual range of a weekly count over the weeks before the report week.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct UsualRange {
    /// Mean of the earlier weeks.
    pub mean: f64,
    /// `mean - 2 sd`, floored at 0.
    pub low: f64,
    /// `mean + 2 sd`.
    pub high: f64,
    /// Number of earlier weeks.
    pub weeks: usize,
}

impl UsualRange {
    /// Mean ± 2 sample standard deviations (divisor n − 1) of `history`; `None` with fewer than
    /// two weeks, where no spread can be estimated.
    #[must_use]
    pub fn of(history: &[u64]) -> Option<Self> {
        let n = history.len();
        if n < 2 {
            return None;
        }
        #[allow(
            clippy::cast_precision_loss,
            reason = "counts and week numbers are far below 2^52"
        )]
        let (mean, var) = {
            let mean = history.iter().map(|&v| v as f64).sum::<f64>() / n as f64;
            let ss = history
                .iter()
                .map(|&v| (v as f64 - mean).powi(2))
                .sum::<f64>();
            (mean, ss / (n - 1) as f64)
        };
        let sd = var.sqrt();
        Some(Self {
            mean,
            low: (mean - 2.0 * sd).max(0.0),
            high: mean + 2.0 * sd,
            weeks: n,
        })
    }

    /// Where a count lies: `"above"`, `"below"` or `"within"` the range.
    #[must_use]
    pub fn place(&self, value: u64) -> &'static str {
        #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
        let v = value as f64;
        if v > self.high {
            "above"
        } else if v < self.low {
            "below"
        } else {
            "within"
        }
    }

    /// `"12.0–30.5"` with [`format_mean`] on both ends.
    #[must_use]
    pub fn words(&self) -> String {
        format!("{}–{}", format_mean(self.low), format_mean(self.high))
    }
}

/// One count per week, oldest first, with the report week among them.
#[derive(Debug, Clone, Copy)]
pub(super) struct Weekly<'a> {
    /// Element id prefix, unique on the page (e.g. `chart-deletions`).
    pub id: &'a str,
    /// What is counted, in the plural, for titles and descriptions (e.g. `deletions`).
    pub noun: &'a str,
    /// CSS class of the series (`edits`, `deletes` or `newcomers`).
    pub class: &'a str,
    /// ISO week labels, parallel to `values`.
    pub weeks: &'a [&'a str],
    pub values: &'a [u64],
}

impl Weekly<'_> {
    /// Number of weeks drawn (the shorter of `weeks` and `values`).
    fn len(&self) -> usize {
        self.values.len().min(self.weeks.len())
    }

    /// Index of the report week: the last week labelled `report_week`, else the last week.
    fn highlight(&self, report_week: &str) -> Option<usize> {
        let n = self.len();
        if n == 0 {
            return None;
        }
        Some(
            self.weeks[..n]
                .iter()
                .rposition(|w| *w == report_week)
                .unwrap_or(n - 1),
        )
    }

    /// The usual range from the weeks before the highlighted one.
    fn range(&self, highlight: usize) -> Option<UsualRange> {
        UsualRange::of(&self.values[..highlight])
    }
}

/// A sentence about the report week against the usual range, for descriptions and labels.
fn report_week_words(noun: &str, value: u64, range: Option<&UsualRange>) -> String {
    match range {
        Some(r) => format!(
            "{} {noun}, {} the usual range of {} (mean {} ± 2 standard deviations of the {} \
             weeks before)",
            group_thousands(value),
            r.place(value),
            r.words(),
            format_mean(r.mean),
            r.weeks,
        ),
        None => format!(
            "{} {noun}; too few earlier weeks for a usual range",
            group_thousands(value)
        ),
    }
}

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

/// An axis value, short enough for the left margin at phone text size: in thousands (`5k`,
/// `10k`) on an axis reaching 10,000 or more, in millions on one reaching 10 million, else
/// whole (`8,000`). Ticks are multiples of the step, so the shortened values are exact.
fn tick_label(v: u64, axis_top: u64) -> String {
    if v == 0 {
        "0".to_owned()
    } else if axis_top >= 10_000_000 && v.is_multiple_of(1_000_000) {
        format!("{}M", group_thousands(v / 1_000_000))
    } else if axis_top >= 10_000 && v.is_multiple_of(1000) {
        format!("{}k", group_thousands(v / 1000))
    } else {
        group_thousands(v)
    }
}

/// The part of an ISO week label a reader scans for (`2026-W47` → `W47`).
fn short_week(week: &str) -> &str {
    week.rsplit_once('-').map_or(week, |(_, w)| w)
}

/// Renders one weekly chart: the count as a line with dots, the usual range as a shaded band
/// with a dashed mean, the report week's column shaded and its dot larger. A short sentence
/// stands in when there is nothing to draw.
#[must_use]
#[allow(
    clippy::cast_precision_loss,
    clippy::cast_possible_truncation,
    clippy::cast_sign_loss,
    reason = "counts far below 2^52; the axis top is a small positive whole number"
)]
pub(super) fn weekly_svg(series: &Weekly<'_>, report_week: &str, region_name: &str) -> String {
    let Some(highlight) = series.highlight(report_week) else {
        return "<p class=\"muted\">No weekly history is available yet.</p>".to_owned();
    };
    let n = series.len();
    let (weeks, values) = (&series.weeks[..n], &series.values[..n]);
    let range = series.range(highlight);
    let max_value = values.iter().copied().max().unwrap_or(0);
    let max = range.map_or(max_value, |r| max_value.max(r.high.ceil() as u64));
    let step = nice_step(max);
    let y_top = step * max.div_ceil(step).max(1);
    let plot_w = WIDTH - LEFT - RIGHT;
    let plot_h = HEIGHT - TOP - BOTTOM;
    let slot = plot_w / n as f64;
    let x = |i: usize| LEFT + slot * (i as f64 + 0.5);
    let yf = |v: f64| TOP + plot_h * (1.0 - v / y_top as f64);
    let y = |v: u64| yf(v as f64);
    let id = escape_html(series.id);
    let noun = escape_html(series.noun);

    let mut s = String::with_capacity(4096 + n * 160);
    let _ = write!(
        s,
        "<svg class=\"trend\" viewBox=\"0 0 {WIDTH} {HEIGHT}\" role=\"img\" \
         aria-labelledby=\"{id}-title {id}-desc\" xmlns=\"http://www.w3.org/2000/svg\">\
         <title id=\"{id}-title\">{Noun} per week in {name}</title>\
         <desc id=\"{id}-desc\">{n} weeks from {first} to {last}. In the report week {hw}: \
         {words}.</desc>",
        Noun = capitalised(&noun),
        name = escape_html(region_name),
        first = escape_html(weeks[0]),
        last = escape_html(weeks[n - 1]),
        hw = escape_html(weeks[highlight]),
        words = escape_html(&report_week_words(
            series.noun,
            values[highlight],
            range.as_ref()
        )),
    );
    // Report week column, drawn first so everything passes over it; its label leans inward so
    // it never runs off the chart.
    let (label_x, anchor) = if x(highlight) > LEFT + plot_w * 0.75 {
        (x(highlight) + slot / 2.0, "end")
    } else if x(highlight) < LEFT + plot_w * 0.25 {
        (x(highlight) - slot / 2.0, "start")
    } else {
        (x(highlight), "middle")
    };
    let _ = write!(
        s,
        "<rect class=\"week-col\" x=\"{:.1}\" y=\"{TOP}\" width=\"{:.1}\" height=\"{plot_h}\"/>\
         <text class=\"band-label\" x=\"{label_x:.1}\" y=\"{:.1}\" text-anchor=\"{anchor}\">\
         report week</text>",
        x(highlight) - slot / 2.0,
        slot,
        TOP - 5.0,
    );
    // The usual range and its mean across the whole plot.
    if let Some(r) = range {
        let _ = write!(
            s,
            "<rect class=\"usual\" x=\"{LEFT}\" y=\"{:.1}\" width=\"{plot_w:.1}\" \
             height=\"{:.1}\"/><line class=\"usual-mean\" x1=\"{LEFT}\" x2=\"{:.1}\" \
             y1=\"{ym:.1}\" y2=\"{ym:.1}\"/>",
            yf(r.high),
            (yf(r.low) - yf(r.high)).max(0.5),
            WIDTH - RIGHT,
            ym = yf(r.mean),
        );
    }
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
            tick_label(v, y_top),
            yv = y(v),
        );
        v += step;
    }
    // Week labels: evenly thinned, the report week always shown.
    let every = n.div_ceil(MAX_X_LABELS).max(1);
    for (i, w) in weeks.iter().enumerate() {
        let near_highlight = i != highlight && i.abs_diff(highlight) < every;
        if i == highlight || ((n - 1 - i).is_multiple_of(every) && !near_highlight) {
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
                escape_html(short_week(w)),
            );
        }
    }
    // The series.
    let class = escape_html(series.class);
    let path: Vec<String> = values
        .iter()
        .enumerate()
        .map(|(i, &v)| format!("{:.1},{:.1}", x(i), y(v)))
        .collect();
    let _ = write!(
        s,
        "<polyline class=\"series {class}\" points=\"{}\"/>",
        path.join(" ")
    );
    for (i, &v) in values.iter().enumerate() {
        let r = if i == highlight { 5.0 } else { 2.5 };
        let _ = write!(
            s,
            "<circle class=\"dot {class}\" cx=\"{:.1}\" cy=\"{:.1}\" r=\"{r}\"/>",
            x(i),
            y(v),
        );
    }
    // The report week's value next to its dot, on the side with room.
    let value_y = (y(values[highlight]) - 10.0).max(TOP + 16.0);
    let _ = write!(
        s,
        "<text class=\"value-label\" x=\"{:.1}\" y=\"{value_y:.1}\" text-anchor=\"end\">{}</text>",
        x(highlight) - 8.0,
        group_thousands(values[highlight]),
    );
    // Legend, top left.
    let _ = write!(
        s,
        "<line class=\"series {class}\" x1=\"{LEFT}\" x2=\"{:.1}\" y1=\"12\" y2=\"12\"/>\
         <text class=\"legend\" x=\"{:.1}\" y=\"17\">{noun}</text>",
        LEFT + 20.0,
        LEFT + 26.0,
    );
    // The band's key sits at the right, clear of a long series name even at phone text size.
    if range.is_some() {
        let _ = write!(
            s,
            "<rect class=\"usual\" x=\"{:.1}\" y=\"6\" width=\"20\" height=\"12\"/>\
             <text class=\"legend\" x=\"{:.1}\" y=\"17\" text-anchor=\"end\">usual range</text>",
            WIDTH - RIGHT - 128.0,
            WIDTH - RIGHT,
        );
    }
    s.push_str("</svg>");
    s
}

/// A word with its first letter upper-cased.
fn capitalised(s: &str) -> String {
    let mut chars = s.chars();
    chars
        .next()
        .map(|c| c.to_uppercase().chain(chars).collect())
        .unwrap_or_default()
}

/// Renders a sparkline of a weekly count for the front page: the usual-range band, the line,
/// and a dot on the report week, scaled between the lowest and highest value shown. `label` names the count and the region for screen readers
/// (e.g. `Deletions per week in Northbank`); a sentence about the report week is appended.
#[must_use]
#[allow(
    clippy::cast_precision_loss,
    reason = "counts and week numbers are far below 2^52"
)]
pub(super) fn sparkline_svg(series: &Weekly<'_>, report_week: &str, label: &str) -> String {
    let Some(highlight) = series.highlight(report_week) else {
        return String::new();
    };
    let n = series.len();
    let values = &series.values[..n];
    let range = series.range(highlight);
    // Scaled from the lowest to the highest of the values and the band, as sparklines are, so
    // the week-to-week shape shows even for large counts.
    let max_value = values.iter().copied().max().unwrap_or(0) as f64;
    let min_value = values.iter().copied().min().unwrap_or(0) as f64;
    let bottom = range.map_or(min_value, |r| min_value.min(r.low));
    let top = range
        .map_or(max_value, |r| max_value.max(r.high))
        .max(bottom + 1.0);
    let x = |i: usize| {
        if n == 1 {
            SPARK_W / 2.0
        } else {
            SPARK_PAD + (SPARK_W - 2.0 * SPARK_PAD) * i as f64 / (n - 1) as f64
        }
    };
    let yf = |v: f64| SPARK_PAD + (SPARK_H - 2.0 * SPARK_PAD) * (top - v) / (top - bottom);
    let mut s = String::with_capacity(1024);
    let _ = write!(
        s,
        "<svg class=\"spark\" viewBox=\"0 0 {SPARK_W} {SPARK_H}\" width=\"{SPARK_W}\" \
         height=\"{SPARK_H}\" role=\"img\" aria-label=\"{label}, {first} to {last}. In the \
         report week: {words}.\" xmlns=\"http://www.w3.org/2000/svg\">",
        label = escape_html(label),
        first = escape_html(series.weeks[0]),
        last = escape_html(series.weeks[n - 1]),
        words = escape_html(&report_week_words(
            series.noun,
            values[highlight],
            range.as_ref()
        )),
    );
    if let Some(r) = range {
        let _ = write!(
            s,
            "<rect class=\"usual\" x=\"0\" y=\"{:.1}\" width=\"{SPARK_W}\" height=\"{:.1}\"/>",
            yf(r.high),
            (yf(r.low) - yf(r.high)).max(0.5),
        );
    }
    let class = escape_html(series.class);
    let path: Vec<String> = values
        .iter()
        .enumerate()
        .map(|(i, &v)| format!("{:.1},{:.1}", x(i), yf(v as f64)))
        .collect();
    let _ = write!(
        s,
        "<polyline class=\"series {class}\" points=\"{}\"/>\
         <circle class=\"dot {class}\" cx=\"{:.1}\" cy=\"{:.1}\" r=\"2.8\"/></svg>",
        path.join(" "),
        x(highlight),
        yf(values[highlight] as f64),
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    fn weeks(n: u32) -> Vec<String> {
        (1..=n).map(|w| format!("2026-W{w:02}")).collect()
    }

    #[test]
    fn steps_are_round() {
        assert_eq!(nice_step(0), 1);
        assert_eq!(nice_step(9), 5);
        assert_eq!(nice_step(1234), 500);
        assert_eq!(nice_step(40), 10);
    }

    #[test]
    fn tick_labels_are_short() {
        assert_eq!(tick_label(0, 800), "0");
        assert_eq!(tick_label(8000, 8000), "8,000");
        assert_eq!(tick_label(5000, 10_000), "5k");
        assert_eq!(tick_label(0, 10_000), "0");
        assert_eq!(tick_label(250_000, 500_000), "250k");
        assert_eq!(tick_label(20_000_000, 20_000_000), "20M");
        assert_eq!(tick_label(12_500, 25_000), "12,500");
    }

    #[test]
    fn usual_range_is_mean_plus_minus_two_sample_sd() {
        // Source: Wikipedia, "Standard deviation", the eight values 2 4 4 4 5 5 7 9: mean 5,
        // population sd 2, sample sd sqrt(32 / 7) = 2.138.
        let r = UsualRange::of(&[2, 4, 4, 4, 5, 5, 7, 9]).expect("eight weeks");
        let sd = (32.0_f64 / 7.0).sqrt();
        assert!((r.mean - 5.0).abs() < 1e-12);
        assert!((r.high - (5.0 + 2.0 * sd)).abs() < 1e-12);
        assert!((r.low - (5.0 - 2.0 * sd)).abs() < 1e-12);
        assert_eq!(r.weeks, 8);
        assert_eq!(r.place(10), "above");
        assert_eq!(r.place(5), "within");
        assert_eq!(r.place(0), "below");
        // Floored at zero; no spread from a single week.
        assert_eq!(UsualRange::of(&[0, 10]).map(|r| r.low), Some(0.0));
        assert_eq!(UsualRange::of(&[7]), None);
        assert_eq!(UsualRange::of(&[]), None);
    }

    #[test]
    fn weekly_chart_labels_the_report_week_and_its_range() {
        let w = weeks(13);
        let labels: Vec<&str> = w.iter().map(String::as_str).collect();
        let mut values = vec![10, 12, 9, 11, 10, 12, 8, 10, 11, 9, 10, 12];
        values.push(60);
        let svg = weekly_svg(
            &Weekly {
                id: "chart-deletions",
                noun: "deletions",
                class: "deletes",
                weeks: &labels,
                values: &values,
            },
            "2026-W13",
            "Test <b>",
        );
        assert!(svg.contains(">W13</text>"));
        assert!(svg.contains("Test &lt;b&gt;"));
        assert!(!svg.contains("<b>"));
        assert!(svg.contains("aria-labelledby=\"chart-deletions-title chart-deletions-desc\""));
        assert!(
            svg.contains("60 deletions, above the usual range of"),
            "{svg}"
        );
        assert!(svg.contains("class=\"usual\""));
        // The line has one vertex per week.
        let line = svg
            .split("<polyline class=\"series deletes\" points=\"")
            .nth(1)
            .and_then(|t| t.split('"').next())
            .unwrap_or_default();
        assert_eq!(line.split(' ').count(), 13);
    }

    #[test]
    fn charts_without_history_say_so() {
        let labels = ["2026-W01"];
        let one = Weekly {
            id: "c",
            noun: "edits",
            class: "edits",
            weeks: &labels,
            values: &[4],
        };
        let svg = weekly_svg(&one, "2026-W01", "R");
        assert!(svg.contains("too few earlier weeks for a usual range"));
        assert!(!svg.contains("class=\"usual\""));
        let none = Weekly {
            weeks: &[],
            values: &[],
            ..one
        };
        assert!(weekly_svg(&none, "2026-W01", "R").contains("No weekly history"));
        assert_eq!(sparkline_svg(&none, "2026-W01", "R"), "");
    }

    #[test]
    fn sparkline_has_a_label_and_a_dot_on_the_report_week() {
        let w = weeks(5);
        let labels: Vec<&str> = w.iter().map(String::as_str).collect();
        let svg = sparkline_svg(
            &Weekly {
                id: "s",
                noun: "edits",
                class: "edits",
                weeks: &labels,
                values: &[3, 4, 3, 4, 20],
            },
            "2026-W05",
            "Edits per week in \"Quay\"",
        );
        assert!(svg.contains(
            "aria-label=\"Edits per week in &quot;Quay&quot;, 2026-W01 to 2026-W05. In the \
             report week: 20 edits, above the usual range"
        ));
        // Report week last: its dot sits at the right end.
        assert!(svg.contains(&format!("cx=\"{:.1}\"", SPARK_W - SPARK_PAD)));
    }
}
