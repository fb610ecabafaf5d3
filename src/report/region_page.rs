//! A region's page (`<slug>/index.html`): the week at a glance against a usual week, the
//! cautions, heat images, outlier cells, the changeset table, the weekly trend, data-quality
//! counts, a reading guide and the method.

use std::fmt::Write as _;

use chrono::Duration;
use h3o::Resolution;

use super::chart::{weekly_svg, Weekly};
use super::text::{
    encode_path_segment, encode_relative_path, escape_html, format_mean, format_probability,
    format_ratio, group_thousands,
};
use super::{page, PageContext};
use crate::model::IsoWeek;
use crate::summary::{ChangesetRow, Incident, Outlier, RegionReport, TrendPoint};

/// Mappers and changesets listed in an outlier row before the rest fold into "more".
const LIST_INLINE: usize = 5;

/// Plain-words names of the outlier kinds, with a one-line explanation for the reading guide.
const KINDS: [(&str, &str, &str); 5] = [
    (
        "deletion_burst",
        "Deletion burst",
        "far more deletions than this cell usually sees",
    ),
    (
        "newcomer_surge",
        "Newcomer surge",
        "far more edits than usual by accounts that are new to OpenStreetMap",
    ),
    (
        "offshore_fabrication",
        "Land features in water",
        "objects that belong on land (not buoys, reefs, platforms and the like) created in water",
    ),
    (
        "rename_spam",
        "Burst of renames",
        "far more name changes than usual, or names that look like advertising",
    ),
    (
        "score_hotspot",
        "Cluster of high scores",
        "many edits from changesets with high scores in one place",
    ),
];

/// The plain-words name of an outlier kind; unknown kinds are shown readably as they are.
pub(super) fn kind_label(kind: &str) -> String {
    KINDS.iter().find(|(k, _, _)| *k == kind).map_or_else(
        || {
            let words = kind.replace('_', " ");
            let mut chars = words.chars();
            chars
                .next()
                .map(|c| c.to_uppercase().chain(chars).collect())
                .unwrap_or_default()
        },
        |(_, label, _)| (*label).to_owned(),
    )
}

/// `Week 2026-W47 · Monday 16 November – Sunday 22 November 2026` (the dates when the week
/// parses).
pub(super) fn week_heading(week: &str) -> String {
    match IsoWeek::parse(week) {
        Some(w) => {
            let start = w.start();
            let end = start + Duration::days(6);
            format!(
                "Week {} · {} – {}",
                escape_html(week),
                start.format("%A %-d %B"),
                end.format("%A %-d %B %Y")
            )
        }
        None => format!("Week {}", escape_html(week)),
    }
}

/// How a week's count compares with the mean of the baseline weeks: a CSS class and text.
/// `usual` names the comparison in the text ("a usual week" on the region page, "usual" on the
/// front page's narrower cards).
pub(super) fn versus_usual(
    observed: u64,
    mean: f64,
    baseline_weeks: u32,
    usual: &str,
) -> (&'static str, String) {
    if baseline_weeks == 0 || !mean.is_finite() {
        return ("vs", "no earlier weeks to compare".to_owned());
    }
    if mean <= 0.0 {
        return if observed == 0 {
            ("vs", format!("same as {usual} (0)"))
        } else {
            ("vs notable", "usually none".to_owned())
        };
    }
    let r = observed as f64 / mean;
    let (class, change) = if (0.9..=1.1).contains(&r) {
        ("vs", "about the same as".to_owned())
    } else if r >= 2.0 {
        ("vs notable", format!("{r:.1}×").replace(".0×", "×"))
    } else if r > 1.0 {
        let class = if r >= 1.5 { "vs notable" } else { "vs" };
        (class, format!("+{:.0}% vs", (r - 1.0) * 100.0))
    } else {
        let class = if r <= 0.5 { "vs notable" } else { "vs" };
        (class, format!("−{:.0}% vs", (1.0 - r) * 100.0))
    };
    (class, format!("{change} {usual} (≈ {})", format_mean(mean)))
}

fn user_link(out: &mut String, ctx: &PageContext<'_>, user: &str, uid: Option<i64>) {
    if user.is_empty() {
        match uid {
            Some(uid) => {
                let _ = write!(out, "<span class=\"muted\">user {uid}</span>");
            }
            None => out.push_str("<span class=\"muted\">unknown</span>"),
        }
        return;
    }
    if ctx.user_url.is_empty() {
        out.push_str(&escape_html(user));
        return;
    }
    let href = format!("{}{}", ctx.user_url, encode_path_segment(user));
    let _ = write!(
        out,
        "<a href=\"{}\">{}</a>",
        escape_html(&href),
        escape_html(user)
    );
}

fn changeset_link(out: &mut String, ctx: &PageContext<'_>, id: i64) {
    if ctx.changeset_url.is_empty() {
        let _ = write!(out, "{id}");
        return;
    }
    let href = format!("{}{id}", ctx.changeset_url);
    let _ = write!(out, "<a href=\"{}\">{id}</a>", escape_html(&href));
}

/// Writes the first few items inline and folds the rest into a `<details>` element.
fn folded_list<T>(
    out: &mut String,
    items: &[T],
    noun: &str,
    mut item: impl FnMut(&mut String, &T),
) {
    if items.is_empty() {
        out.push_str("<span class=\"muted\">–</span>");
        return;
    }
    let (head, rest) = items.split_at(items.len().min(LIST_INLINE));
    out.push_str("<ul class=\"inline-list\">");
    for x in head {
        out.push_str("<li>");
        item(out, x);
        out.push_str("</li>");
    }
    out.push_str("</ul>");
    if !rest.is_empty() {
        let _ = write!(
            out,
            "<details class=\"more\"><summary>{} more {noun}</summary><ul class=\"inline-list\">",
            rest.len()
        );
        for x in rest {
            out.push_str("<li>");
            item(out, x);
            out.push_str("</li>");
        }
        out.push_str("</ul></details>");
    }
}

fn header(out: &mut String, r: &RegionReport) {
    let s = &r.summary;
    let _ = write!(
        out,
        "<header class=\"masthead\">\n<div class=\"wrap\">\n\
         <p class=\"crumb\"><a href=\"../index.html\">← All regions</a></p>\n\
         <h1>{name}</h1>\n<p class=\"week\">{week}</p>\n\
         <p class=\"lede\">A weekly look at OpenStreetMap editing in this region: where activity \
         differed from a usual week, and which changesets may deserve a second look by a \
         person.</p>\n\
         <nav class=\"toc\" aria-label=\"On this page\"><a href=\"#glance\">At a glance</a> \
         <a href=\"#before-you-act\">Before you act</a> <a href=\"#maps\">Maps</a> \
         <a href=\"#incidents-h\">Incidents</a> <a href=\"#cells\">Cells</a> <a href=\"#changesets-h\">Changesets</a> \
         <a href=\"#trend\">Trend</a> <a href=\"#how-to-read\">How to read this</a></nav>\n\
         </div>\n</header>\n",
        name = escape_html(&s.name),
        week = week_heading(&s.week),
    );
}

/// The weeks of the trend before the report week, oldest first.
fn history(r: &RegionReport) -> &[TrendPoint] {
    let at = r
        .trend
        .iter()
        .rposition(|p| p.week == r.summary.week)
        .unwrap_or(r.trend.len().saturating_sub(1));
    &r.trend[..at]
}

/// The mean of a trend measure over the weeks before the report week.
fn history_mean(r: &RegionReport, value: fn(&TrendPoint) -> u64) -> f64 {
    let h = history(r);
    if h.is_empty() {
        return f64::NAN;
    }
    #[allow(
        clippy::cast_precision_loss,
        reason = "counts and weeks are far below 2^52"
    )]
    let mean = h.iter().map(|p| value(p) as f64).sum::<f64>() / h.len() as f64;
    mean
}

fn glance(out: &mut String, r: &RegionReport, ctx: &PageContext<'_>) {
    let s = &r.summary;
    let c = &s.counts;
    let b = &s.baseline_counts;
    out.push_str(
        "<section id=\"glance\" aria-labelledby=\"glance-h\">\n<h2 id=\"glance-h\">This week at \
         a glance</h2>\n",
    );
    if c.edits == 0 {
        let _ = writeln!(
            out,
            "<p class=\"summary-line nothing\"><strong>Nothing happened here this week.</strong> \
             No edits were recorded in this region in week {}, so no cell was tested and no \
             changeset is listed.</p>",
            escape_html(&s.week),
        );
    }
    let _ = write!(
        out,
        "<p class=\"summary-line\">{edits} edits in {cs} changesets by {mappers} \
         mappers. <strong>{cells} {cell_word} stood out</strong> and <strong>{flagged} {cs_word} \
         {were} flagged</strong> for a closer look.</p>\n<dl class=\"figures\">\n",
        edits = group_thousands(c.edits),
        cs = group_thousands(c.changesets),
        mappers = group_thousands(c.mappers),
        cells = group_thousands(c.outlier_cells),
        cell_word = if c.outlier_cells == 1 {
            "cell"
        } else {
            "cells"
        },
        flagged = group_thousands(c.flagged_changesets),
        cs_word = if c.flagged_changesets == 1 {
            "changeset"
        } else {
            "changesets"
        },
        were = if c.flagged_changesets == 1 {
            "was"
        } else {
            "were"
        },
    );
    let compared = [
        ("Edits", c.edits, b.edits),
        ("Deletions", c.deletes, b.deletes),
        ("Newcomers", c.newcomers, b.newcomers),
        ("Changesets", c.changesets, b.changesets),
    ];
    for (label, value, usual) in compared {
        let (class, text) = versus_usual(value, usual, b.weeks, "a usual week");
        let _ = writeln!(
            out,
            "<div class=\"figure\"><dt>{label}</dt><dd class=\"value\">{}</dd>\
             <dd class=\"{class}\">{text}</dd></div>",
            group_thousands(value),
        );
    }
    let flagged_weeks = u32::try_from(history(r).len()).unwrap_or(u32::MAX);
    let (class, text) = versus_usual(
        c.flagged_changesets,
        history_mean(r, |p| p.flagged_changesets),
        flagged_weeks,
        "a usual week",
    );
    let _ = write!(
        out,
        "<div class=\"figure\"><dt>Flagged changesets</dt><dd class=\"value\">{}</dd>\
         <dd class=\"{class}\">{text}</dd></div>\n\
         <div class=\"figure\"><dt>Outlier cells</dt><dd class=\"value\">{}</dd>\
         <dd class=\"vs\">each cell against its own usual week ({} false discovery rate)\
         </dd></div>\n</dl>\n",
        group_thousands(c.flagged_changesets),
        group_thousands(c.outlier_cells),
        percent(ctx.fdr),
    );
    let _ = write!(
        out,
        "<p class=\"muted small\">“Usual week” is the mean of the previous {} weeks. Newcomers \
         are mappers with a young account. Flagged changesets score {:.2} or higher, in earlier \
         weeks too. The charts under <a href=\"#trend\">Week by week</a> show each week against \
         its usual range.</p>\n</section>\n",
        b.weeks, ctx.flag_threshold,
    );
}

/// A rate as a percentage with at most one decimal (`0.05` → `5%`).
fn percent(x: f64) -> String {
    let s = format!("{:.1}", x * 100.0);
    format!("{}%", s.trim_end_matches(".0"))
}

fn maps(out: &mut String, r: &RegionReport) {
    out.push_str("<section id=\"maps\" aria-labelledby=\"maps-h\">\n<h2 id=\"maps-h\">Maps</h2>\n");
    if r.images.is_empty() {
        out.push_str("<p class=\"muted\">No heat images were made for this region.</p>\n");
    }
    for (file, caption) in &r.images {
        let _ = writeln!(
            out,
            "<figure class=\"heat\"><img src=\"{src}\" alt=\"Heat map of {name}, week {week}: \
             {caption}\" loading=\"lazy\"><figcaption>{caption}</figcaption></figure>",
            src = escape_html(&encode_relative_path(file)),
            name = escape_html(&r.summary.name),
            week = escape_html(&r.summary.week),
            caption = escape_html(caption),
        );
    }
    out.push_str("</section>\n");
}

fn baseline_words(source: &str) -> String {
    match source {
        "own" => "own history".to_owned(),
        "neighbourhood" => "neighbours".to_owned(),
        other => escape_html(other),
    }
}

fn outlier_row(out: &mut String, o: &Outlier, ctx: &PageContext<'_>) {
    let _ = write!(
        out,
        "<tr><th scope=\"row\">{kind}<span class=\"sub\">{measure}</span></th>\
         <td data-label=\"Cell\"><code>{cell}</code><span class=\"sub nowrap\">{lat:.4}, {lon:.4}</span></td>\
         <td class=\"num\" data-label=\"Observed vs expected\"><strong>{observed}</strong> \
         <span class=\"muted\">vs</span> {expected}</td>\
         <td class=\"num inline\" data-label=\"Ratio\">{ratio}</td>\
         <td class=\"num inline\" data-label=\"p\">{p}</td><td class=\"num inline\" data-label=\"q\">{q}</td>\
         <td data-label=\"Baseline from\">{baseline}</td><td data-label=\"Changesets\">",
        kind = escape_html(&kind_label(&o.kind)),
        cell = escape_html(&o.cell),
        lat = o.lat,
        lon = o.lon,
        measure = escape_html(&o.measure),
        observed = group_thousands(o.observed),
        expected = format_mean(o.expected),
        ratio = format_ratio(o.observed as f64, o.expected),
        p = format_probability(o.p_value),
        q = format_probability(o.q_value),
        baseline = baseline_words(&o.baseline_source),
    );
    folded_list(out, &o.changesets, "changesets", |out, id| {
        changeset_link(out, ctx, *id);
    });
    out.push_str("</td><td data-label=\"Mappers\">");
    folded_list(out, &o.mappers, "mappers", |out, m| {
        user_link(out, ctx, m, None)
    });
    out.push_str("</td></tr>\n");
}

fn incident_row(out: &mut String, i: &Incident, ctx: &PageContext<'_>) {
    let [w, s, e, n] = i.bbox;
    let _ = write!(
        out,
        "<tr><th scope=\"row\">{kind}</th>\
         <td data-label=\"Place\"><span class=\"nowrap\">{lat:.4}, {lon:.4}</span>\
         <span class=\"sub\">box {w:.4}, {s:.4} – {e:.4}, {n:.4}</span></td>\
         <td class=\"num\" data-label=\"Cells\">{cells}</td>\
         <td class=\"num\" data-label=\"Observed vs expected\"><strong>{observed}</strong> \
         <span class=\"muted\">vs</span> {expected}</td>\
         <td class=\"num inline\" data-label=\"q\">{q}</td><td data-label=\"Changesets\">",
        kind = escape_html(&kind_label(&i.kind)),
        lat = i.lat,
        lon = i.lon,
        cells = i.cells.len(),
        observed = group_thousands(i.observed),
        expected = format_mean(i.expected),
        q = format_probability(i.q_value),
    );
    folded_list(out, &i.changesets, "changesets", |out, id| {
        changeset_link(out, ctx, *id);
    });
    out.push_str("</td><td data-label=\"Mappers\">");
    folded_list(out, &i.mappers, "mappers", |out, m| {
        user_link(out, ctx, m, None)
    });
    out.push_str("</td></tr>\n");
}

fn incidents(out: &mut String, r: &RegionReport, ctx: &PageContext<'_>) {
    out.push_str(
        "<section id=\"incidents\" aria-labelledby=\"incidents-h\">\n<h2 id=\"incidents-h\">\
         Incidents</h2>\n",
    );
    if r.summary.incidents.is_empty() {
        out.push_str("<p>No incidents this week: no cell stood out.</p>\n</section>\n");
        return;
    }
    out.push_str(
        "<p class=\"muted\">Neighbouring cells of one kind that share changesets, \
         taken together; strongest evidence first. The box is west, south – east, north in \
         degrees.</p>\n<div class=\"table-scroll\" tabindex=\"0\" role=\"region\" \
         aria-labelledby=\"incidents-h\">\n<table class=\"data stack outliers\" id=\"incident-table\">\n\
         <caption class=\"sr-only\">Incidents, strongest evidence first</caption>\n<thead><tr><th scope=\"col\">What</th><th scope=\"col\">Place · box</th>\
         <th scope=\"col\" class=\"num\">Cells</th><th scope=\"col\" class=\"num\">Observed vs expected</th>\
         <th scope=\"col\" class=\"num\">q</th><th scope=\"col\">Changesets</th>\
         <th scope=\"col\">Mappers</th></tr></thead>\n<tbody>\n",
    );
    for i in &r.summary.incidents {
        incident_row(out, i, ctx);
    }
    out.push_str("</tbody>\n</table>\n</div>\n</section>\n");
}

fn outliers(out: &mut String, r: &RegionReport, ctx: &PageContext<'_>) {
    out.push_str(
        "<section id=\"cells\" aria-labelledby=\"cells-h\">\n<h2 id=\"cells-h\">Cells that stood \
         out</h2>\n",
    );
    if r.summary.outliers.is_empty() {
        let _ = write!(
            out,
            "<p>No cell stood out this week at a {} false discovery rate.</p>\n</section>\n",
            percent(ctx.fdr)
        );
        return;
    }
    out.push_str(
        "<p class=\"muted\">Strongest evidence first. “Observed vs expected” compares this week's \
         count with what a usual week in that cell looks like.</p>\n\
         <div class=\"table-scroll\" tabindex=\"0\" role=\"region\" aria-labelledby=\"cells-h\">\n\
         <table class=\"data stack outliers\" id=\"outlier-table\">\n\
         <caption class=\"sr-only\">Cells that stood out, strongest evidence first</caption>\n\
         <thead><tr>\
         <th scope=\"col\">What · measure</th><th scope=\"col\">Cell · lat, lon</th>\
         <th scope=\"col\" class=\"num\">Observed vs expected</th>\
         <th scope=\"col\" class=\"num\">Ratio</th><th scope=\"col\" class=\"num\">p</th>\
         <th scope=\"col\" class=\"num\">q</th><th scope=\"col\">Baseline from</th>\
         <th scope=\"col\">Changesets</th><th scope=\"col\">Mappers</th></tr></thead>\n<tbody>\n",
    );
    for o in &r.summary.outliers {
        outlier_row(out, o, ctx);
    }
    out.push_str("</tbody>\n</table>\n</div>\n</section>\n");
}

fn changeset_row(out: &mut String, row: &ChangesetRow, ctx: &PageContext<'_>) {
    let class = if row.flagged {
        " class=\"flagged\""
    } else {
        ""
    };
    let _ = write!(
        out,
        "<tr{class}><th scope=\"row\" class=\"id\" data-v=\"{}\">",
        row.id
    );
    changeset_link(out, ctx, row.id);
    if row.flagged {
        out.push_str(" <span class=\"badge\">flagged</span>");
    }
    out.push_str("</th><td data-label=\"Mapper\">");
    user_link(out, ctx, &row.user, Some(row.uid));
    let age = if row.account_age_days.is_finite() {
        format!("{:.0}", row.account_age_days.max(0.0))
    } else {
        "–".to_owned()
    };
    let _ =
        writeln!(
        out,
        "</td><td class=\"num inline\" data-label=\"Account age\" data-v=\"{age_v}\">{age}</td>\
         <td class=\"num inline\" data-label=\"Added\">{}</td>\
         <td class=\"num inline\" data-label=\"Changed\">{}</td>\
         <td class=\"num inline\" data-label=\"Deleted\">{}</td>\
         <td class=\"num inline\" data-label=\"Score\"><strong>{:.2}</strong></td>\
         <td class=\"reasons\">{}{}</td></tr>",
        group_thousands(row.creates),
        group_thousands(row.modifies),
        group_thousands(row.deletes),
        row.score,
        if row.reasons.is_empty() {
            String::new()
        } else {
            format!("<span class=\"why\">{}</span>", escape_html(&row.reasons.join("; ")))
        },
        if row.comment.is_empty() {
            "<span class=\"comment\">No comment</span>".to_owned()
        } else {
            format!("<span class=\"comment\">“{}”</span>", escape_html(&row.comment))
        },
        age_v = if row.account_age_days.is_finite() {
            format!("{:.3}", row.account_age_days)
        } else {
            String::new()
        },
    );
}

fn changesets(out: &mut String, r: &RegionReport, ctx: &PageContext<'_>) {
    let flagged = r.changesets.iter().filter(|c| c.flagged).count();
    let _ = write!(
        out,
        "<section aria-labelledby=\"changesets-h\">\n<h2 id=\"changesets-h\">Changesets this \
         week</h2>\n<p class=\"muted\">All {total} changesets with an edit in this region, highest \
         score first; {flagged} scored {threshold:.2} or higher and are marked \
         <span class=\"badge\">flagged</span>. The reasons say which signs raised the score.</p>\n\
         <div class=\"table-tools\" id=\"changeset-tools\" hidden>\
         <label>Filter <input type=\"search\" id=\"cs-filter\" placeholder=\"mapper, comment, \
         reason, id\" autocomplete=\"off\"></label>\
         <label class=\"check\"><input type=\"checkbox\" id=\"cs-flagged\"> Flagged only</label>\
         <span id=\"cs-status\" class=\"muted\" aria-live=\"polite\"></span></div>\n\
         <div class=\"table-scroll\" tabindex=\"0\" role=\"region\" aria-labelledby=\"changesets-h\">\n\
         <table class=\"data stack changesets\" id=\"changesets\">\n\
         <caption class=\"sr-only\">Changesets this week in {name}, highest score first</caption>\n\
         <thead><tr>\
         <th scope=\"col\" data-sort=\"num\">Changeset</th>\
         <th scope=\"col\" data-sort=\"text\">Mapper</th>\
         <th scope=\"col\" data-sort=\"num\" class=\"num\">Account age, days</th>\
         <th scope=\"col\" data-sort=\"num\" class=\"num\">Added</th>\
         <th scope=\"col\" data-sort=\"num\" class=\"num\">Changed</th>\
         <th scope=\"col\" data-sort=\"num\" class=\"num\">Deleted</th>\
         <th scope=\"col\" data-sort=\"num\" class=\"num\" aria-sort=\"descending\">Score</th>\
         <th scope=\"col\" data-sort=\"text\">Reasons · changeset comment</th></tr></thead>\n\
         <tbody>\n",
        total = group_thousands(r.changesets.len() as u64),
        flagged = group_thousands(flagged as u64),
        threshold = ctx.flag_threshold,
        name = escape_html(&r.summary.name),
    );
    for row in &r.changesets {
        changeset_row(out, row, ctx);
    }
    out.push_str("</tbody>\n</table>\n</div>\n");
    if r.changesets.is_empty() {
        out.push_str("<p class=\"muted\">No changesets this week.</p>\n");
    }
    out.push_str(
        "<p class=\"downloads\">Download: <a href=\"changesets.csv\">changesets.csv</a> · \
         <a href=\"outliers.geojson\">outliers.geojson</a> (cells as hexagons for any web map or \
         GIS) · <a href=\"../summary.json\">summary.json</a> (all regions). In the CSV, text that \
         begins with = + - or @ starts with an apostrophe so spreadsheets show it as text.</p>\n\
         </section>\n",
    );
}

/// One weekly chart of the region page.
struct Chart {
    /// Element id prefix.
    id: &'static str,
    /// What is counted, for the chart's text alternative.
    noun: &'static str,
    /// CSS class of the line.
    class: &'static str,
    caption: &'static str,
    value: fn(&TrendPoint) -> u64,
}

/// The weekly charts, in the order shown.
const CHARTS: [Chart; 3] = [
    Chart {
        id: "chart-deletions",
        noun: "deletions",
        class: "deletes",
        caption: "Deletions per week",
        value: |p| p.deletes,
    },
    Chart {
        id: "chart-newcomers",
        noun: "edits by newcomers",
        class: "newcomers",
        caption: "Edits by newcomers per week",
        value: |p| p.newcomer_edits,
    },
    Chart {
        id: "chart-edits",
        noun: "edits",
        class: "edits",
        caption: "All edits per week",
        value: |p| p.edits,
    },
];

fn trend(out: &mut String, r: &RegionReport) {
    let weeks = history(r).len();
    let _ = write!(
        out,
        "<section id=\"trend\" aria-labelledby=\"trend-h\">\n<h2 id=\"trend-h\">Week by week</h2>\n\
         <p class=\"muted\">Each chart shows one count for the region over the last {n} weeks. \
         The shaded band is the usual range: the mean of the {weeks} weeks before the report week \
         plus or minus two standard deviations, drawn across the chart; the dashed line is the \
         mean. The shaded column is the report week. The band is a rough guide for the whole \
         region; the outlier tests above work cell by cell.</p>\n<div class=\"charts\">\n",
        n = r.trend.len(),
    );
    let labels: Vec<&str> = r.trend.iter().map(|p| p.week.as_str()).collect();
    for chart in &CHARTS {
        let values: Vec<u64> = r.trend.iter().map(chart.value).collect();
        let series = Weekly {
            id: chart.id,
            noun: chart.noun,
            class: chart.class,
            weeks: &labels,
            values: &values,
        };
        let _ = writeln!(
            out,
            "<figure class=\"chart\">\n<figcaption>{}</figcaption>\n{}\n</figure>",
            chart.caption,
            weekly_svg(&series, &r.summary.week, &r.summary.name),
        );
    }
    out.push_str("</div>\n");
    if !r.trend.is_empty() {
        out.push_str(
            "<details><summary>Show the numbers</summary>\n<table class=\"data compact\">\
             <caption class=\"sr-only\">Counts per week, oldest first</caption>\
             <thead><tr><th scope=\"col\">Week</th><th scope=\"col\" class=\"num\">Edits</th>\
             <th scope=\"col\" class=\"num\">Deletions</th>\
             <th scope=\"col\" class=\"num\">Edits by newcomers</th>\
             <th scope=\"col\" class=\"num\">Flagged changesets</th></tr></thead>\n<tbody>\n",
        );
        for p in &r.trend {
            let _ = writeln!(
                out,
                "<tr><th scope=\"row\">{}</th><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
                escape_html(&p.week),
                group_thousands(p.edits),
                group_thousands(p.deletes),
                group_thousands(p.newcomer_edits),
                group_thousands(p.flagged_changesets),
            );
        }
        out.push_str("</tbody></table>\n</details>\n");
    }
    out.push_str("</section>\n");
}

fn share(part: u64, total: u64) -> String {
    if total == 0 {
        "–".to_owned()
    } else {
        format!("{:.1}%", part as f64 * 100.0 / total as f64)
    }
}

fn data_quality(out: &mut String, r: &RegionReport) {
    let p = &r.summary.placement;
    let total = p
        .own_coordinates
        .saturating_add(p.node_index)
        .saturating_add(p.changeset_bbox)
        .saturating_add(p.unplaced);
    out.push_str(
        "<section id=\"quality\" aria-labelledby=\"quality-h\">\n<h2 id=\"quality-h\">How edits \
         were placed</h2>\n<div class=\"two-col\">\n<table class=\"data compact\">\
         <caption>Where each edit of the week was put on the map</caption>\
         <thead><tr><th scope=\"col\">Position from</th><th scope=\"col\" class=\"num\">Edits</th>\
         <th scope=\"col\" class=\"num\">Share</th></tr></thead>\n<tbody>\n",
    );
    for (label, n) in [
        ("The element's own coordinates", p.own_coordinates),
        ("Known positions of its nodes", p.node_index),
        ("Centre of the changeset's area (rough)", p.changeset_bbox),
        ("Not placed (counted, not mapped)", p.unplaced),
    ] {
        let _ = writeln!(
            out,
            "<tr><th scope=\"row\">{label}</th><td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
            group_thousands(n),
            share(n, total),
        );
    }
    out.push_str(
        "</tbody></table>\n<table class=\"data compact\"><caption>Elements skipped while reading \
         (unusual but valid input)</caption><thead><tr><th scope=\"col\">Reason</th>\
         <th scope=\"col\" class=\"num\">Count</th></tr></thead>\n<tbody>\n",
    );
    if r.skipped.is_empty() {
        out.push_str("<tr><td colspan=\"2\" class=\"muted\">Nothing was skipped.</td></tr>\n");
    }
    for (reason, n) in &r.skipped {
        let _ = writeln!(
            out,
            "<tr><th scope=\"row\">{}</th><td class=\"num\">{}</td></tr>",
            escape_html(reason),
            group_thousands(*n)
        );
    }
    out.push_str("</tbody></table>\n</div>\n</section>\n");
}

fn reading_guide(out: &mut String, ctx: &PageContext<'_>) {
    let cell_size = Resolution::try_from(ctx.resolution).map_or_else(
        |_| String::new(),
        |res| {
            format!(
                " at H3 resolution {}, each about {} km² with edges about {}",
                ctx.resolution,
                format_area(res.area_km2()),
                format_length(res.edge_length_m()),
            )
        },
    );
    let _ = write!(
        out,
        "<section id=\"how-to-read\" aria-labelledby=\"read-h\">\n<h2 id=\"read-h\">How to read \
         this</h2>\n<dl class=\"guide\">\n\
         <dt>Cell</dt><dd>The region is divided into hexagons of equal size{cell_size}. Every \
         edit is counted in the hexagon where it lies.</dd>\n\
         <dt>Observed and expected</dt><dd>Observed is this week's count in a cell. Expected is \
         what a usual week there looks like, learned from the cell's previous {baseline_weeks} \
         weeks and, where a cell has little history, from its neighbours.</dd>\n\
         <dt>p value</dt><dd>How surprising the observed count would be in a usual week: the \
         chance of seeing at least that many. Smaller means more unusual; 3.2e-12 means \
         0.0000000000032.</dd>\n\
         <dt>q value</dt><dd>The p value adjusted for testing many cells at once. A cell is \
         listed when its q value is at most {fdr} and its count is clearly above expected, so \
         only about {fdr_pct} of listed cells are expected to be chance.</dd>\n\
         <dt>Score and flag</dt><dd>Each changeset gets a score from 0 to 1 from a fixed list of \
         signs about the changeset, the account and the edits. The reasons column names the \
         signs that counted. A score of {threshold:.2} or higher is flagged: a request for a \
         person to look, not a finding about the mapper.</dd>\n\
         <dt>Kinds of outlier</dt><dd><ul>",
        baseline_weeks = ctx.baseline_weeks,
        fdr = ctx.fdr,
        fdr_pct = percent(ctx.fdr),
        threshold = ctx.flag_threshold,
    );
    for (_, label, meaning) in KINDS {
        let _ = write!(out, "<li><strong>{label}</strong>: {meaning}.</li>");
    }
    out.push_str("</ul></dd>\n</dl>\n");
    let _ = write!(
        out,
        "<p class=\"method small\"><strong>Method.</strong> Cells are H3 cells at resolution \
         {res}; weeks are ISO 8601 weeks in UTC. For each cell and measure, a Gamma–Poisson \
         (empirical Bayes) model of the previous {weeks} weeks, shrunk toward the cell's \
         neighbourhood (H3 grid disk) and parent cell, gives a negative-binomial predictive \
         distribution for the report week; p is its upper tail P(X ≥ observed). Cells are \
         tested per kind with the Benjamini–Hochberg procedure at a false discovery rate of \
         {fdr}, together with a minimum effect size. Changesets are scored with a documented \
         log-odds scorecard of changeset metadata, mapper history and edit content, and flagged \
         at a score of {threshold:.2} or higher.</p>\n</section>\n",
        res = ctx.resolution,
        weeks = ctx.baseline_weeks,
        fdr = ctx.fdr,
        threshold = ctx.flag_threshold,
    );
}

/// Area in km² with two significant digits (`0.74`, `5.2`, `36`, `250`).
fn format_area(km2: f64) -> String {
    if km2 >= 10.0 {
        group_thousands(km2.round() as u64)
    } else if km2 >= 1.0 {
        format!("{km2:.1}")
    } else if km2 >= 0.01 {
        format!("{km2:.2}")
    } else {
        format!("{km2:.1e}")
    }
}

/// A length in metres or kilometres (`460 m`, `1.4 km`, `22 km`).
fn format_length(m: f64) -> String {
    if m >= 10_000.0 {
        format!("{} km", group_thousands((m / 1000.0).round() as u64))
    } else if m >= 1000.0 {
        format!("{:.1} km", m / 1000.0)
    } else {
        format!("{:.0} m", m)
    }
}

/// Renders the whole region page.
pub(super) fn render(r: &RegionReport, ctx: &PageContext<'_>) -> String {
    let mut out = String::with_capacity(64 * 1024 + r.changesets.len() * 600);
    let title = format!("{} · week {} · hexvigil", r.summary.name, r.summary.week);
    page::open(&mut out, &title, true);
    header(&mut out, r);
    out.push_str("<main class=\"wrap\">\n");
    glance(&mut out, r, ctx);
    page::cautions_full(&mut out);
    maps(&mut out, r);
    incidents(&mut out, r, ctx);
    outliers(&mut out, r, ctx);
    changesets(&mut out, r, ctx);
    trend(&mut out, r);
    data_quality(&mut out, r);
    reading_guide(&mut out, ctx);
    out.push_str("<p class=\"crumb\"><a href=\"../index.html\">← All regions</a></p>\n</main>\n");
    out.push_str("<div class=\"wrap\">\n");
    page::footer(&mut out, ctx);
    out.push_str("</div>\n");
    page::close(&mut out, true);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kinds_in_plain_words() {
        assert_eq!(kind_label("deletion_burst"), "Deletion burst");
        assert_eq!(kind_label("odd_new_kind"), "Odd new kind");
        assert_eq!(kind_label(""), "");
    }

    #[test]
    fn comparisons_read_naturally() {
        assert_eq!(
            versus_usual(100, 98.0, 12, "a usual week").1,
            "about the same as a usual week (≈ 98.0)"
        );
        assert_eq!(
            versus_usual(300, 100.0, 12, "a usual week").1,
            "3× a usual week (≈ 100)"
        );
        assert_eq!(
            versus_usual(150, 100.0, 12, "a usual week").1,
            "+50% vs a usual week (≈ 100)"
        );
        assert_eq!(
            versus_usual(50, 100.0, 12, "a usual week").1,
            "−50% vs a usual week (≈ 100)"
        );
        assert_eq!(versus_usual(5, 0.0, 12, "a usual week").1, "usually none");
        assert_eq!(
            versus_usual(5, 3.0, 0, "usual").1,
            "no earlier weeks to compare"
        );
    }

    #[test]
    fn week_heading_has_dates() {
        assert_eq!(
            week_heading("2026-W47"),
            "Week 2026-W47 · Monday 16 November – Sunday 22 November 2026"
        );
        assert_eq!(week_heading("<x>"), "Week &lt;x&gt;");
    }
}
