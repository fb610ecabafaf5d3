//! The report's front page (`index.html`): the week, the cautions in brief, and one card per
//! region with its headline figures, counts of outlier cells and flagged changesets, a
//! thumbnail of its first heat image, and sparklines of its weekly edits and deletions.

use std::fmt::Write as _;

use super::chart::{sparkline_svg, Weekly};
use super::region_page::{versus_usual, week_heading};
use super::text::{encode_path_segment, encode_relative_path, escape_html, group_thousands};
use super::{page, PageContext};
use crate::summary::{RegionReport, Summary};

fn card(out: &mut String, r: &RegionReport, slug: &str) {
    let s = &r.summary;
    let c = &s.counts;
    let b = &s.baseline_counts;
    let href = format!("{}/index.html", encode_path_segment(slug));
    out.push_str("<article class=\"card\">\n");
    let _ = write!(
        out,
        "<h2><a href=\"{}\">{}</a></h2>\n<p class=\"pills\">\
         <span class=\"pill{}\">{} outlier {}</span> \
         <span class=\"pill{}\">{} flagged {}</span></p>\n",
        escape_html(&href),
        escape_html(&s.name),
        if c.outlier_cells > 0 {
            " attention"
        } else {
            ""
        },
        group_thousands(c.outlier_cells),
        if c.outlier_cells == 1 {
            "cell"
        } else {
            "cells"
        },
        if c.flagged_changesets > 0 {
            " attention"
        } else {
            ""
        },
        group_thousands(c.flagged_changesets),
        if c.flagged_changesets == 1 {
            "changeset"
        } else {
            "changesets"
        },
    );
    if let Some((file, caption)) = r.images.first() {
        let src = format!(
            "{}/{}",
            encode_path_segment(slug),
            encode_relative_path(file)
        );
        let _ = writeln!(
            out,
            "<img class=\"thumb\" src=\"{src}\" alt=\"Heat map of {name}: {caption}\" \
             loading=\"lazy\">",
            src = escape_html(&src),
            name = escape_html(&s.name),
            caption = escape_html(caption),
        );
    }
    out.push_str("<dl class=\"mini\">\n");
    for (label, value, usual) in [
        ("Edits", c.edits, b.edits),
        ("Deletions", c.deletes, b.deletes),
        ("Newcomers", c.newcomers, b.newcomers),
        ("Changesets", c.changesets, b.changesets),
    ] {
        let (class, text) = versus_usual(value, usual, b.weeks, "usual");
        let _ = writeln!(
            out,
            "<div><dt>{label}</dt><dd><span class=\"value\">{}</span> \
             <span class=\"{class}\">{text}</span></dd></div>",
            group_thousands(value),
        );
    }
    out.push_str("</dl>\n");
    if c.edits == 0 {
        out.push_str(
            "<p class=\"nothing\">Nothing happened here this week: no edits were recorded.</p>\n",
        );
    }
    sparklines(out, r);
    out.push_str("</article>\n");
}

/// Sparklines of the region's weekly edits and deletions, each against its usual range.
fn sparklines(out: &mut String, r: &RegionReport) {
    if r.trend.is_empty() {
        return;
    }
    let weeks: Vec<&str> = r.trend.iter().map(|p| p.week.as_str()).collect();
    let edits: Vec<u64> = r.trend.iter().map(|p| p.edits).collect();
    let deletes: Vec<u64> = r.trend.iter().map(|p| p.deletes).collect();
    let _ = write!(
        out,
        "<div class=\"sparks\"><p class=\"spark-head\">Last {} weeks; shaded: usual range</p>",
        r.trend.len()
    );
    for (label, noun, class, values) in [
        ("Edits", "edits", "edits", &edits),
        ("Deletions", "deletions", "deletes", &deletes),
    ] {
        let series = Weekly {
            id: class,
            noun,
            class,
            weeks: &weeks,
            values,
        };
        let _ = write!(
            out,
            "<div class=\"spark-row\"><span class=\"spark-label\" aria-hidden=\"true\">{label}\
             </span>{}</div>",
            sparkline_svg(
                &series,
                &r.summary.week,
                &format!("{label} per week in {}", r.summary.name)
            ),
        );
    }
    out.push_str("</div>\n");
}

/// Renders the front page; `slugs` are the region folders, parallel to `regions`.
pub(super) fn render(
    summary: &Summary,
    regions: &[RegionReport],
    slugs: &[String],
    ctx: &PageContext<'_>,
) -> String {
    let mut out = String::with_capacity(16 * 1024 + regions.len() * 2048);
    page::open(
        &mut out,
        &format!("hexvigil weekly report · week {}", summary.week),
        false,
    );
    let _ = write!(
        out,
        "<header class=\"masthead\">\n<div class=\"wrap\">\n<h1>Weekly OpenStreetMap activity \
         report</h1>\n<p class=\"week\">{week}</p>\n<p class=\"lede\">One card per region. \
         Each region's page shows where editing differed from a usual week and which changesets \
         may deserve a second look by a person.</p>\n</div>\n</header>\n<main class=\"wrap\">\n",
        week = week_heading(&summary.week),
    );
    page::cautions_brief(&mut out);
    if let Some(href) = ctx.tiles_viewer {
        let _ = writeln!(
            out,
            "<p class=\"tiles-link\"><a href=\"{}\">Explore this week's cells on a zoomable \
             map</a> (all regions, one measure; pan and zoom in the browser).</p>",
            escape_html(href),
        );
    }
    out.push_str("<section aria-label=\"Regions\" class=\"cards\">\n");
    for (r, slug) in regions.iter().zip(slugs) {
        card(&mut out, r, slug);
    }
    if regions.is_empty() {
        out.push_str("<p class=\"muted\">No regions in this report.</p>\n");
    }
    let _ = write!(
        out,
        "</section>\n<p class=\"method small\">Cells are H3 hexagons at resolution {res}; a usual \
         week is learned from the previous {weeks} weeks. Outlier cells are tested at a false \
         discovery rate of {fdr}; changesets scoring {threshold:.2} or higher are flagged. \
         Machine-readable: <a href=\"summary.json\">summary.json</a>.</p>\n</main>\n\
         <div class=\"wrap\">\n",
        res = ctx.resolution,
        weeks = ctx.baseline_weeks,
        fdr = ctx.fdr,
        threshold = ctx.flag_threshold,
    );
    page::footer(&mut out, ctx);
    out.push_str("</div>\n");
    page::close(&mut out, false);
    out
}
