//! Report writers: files, escaping of hostile OSM text, safe and distinct folder names, and the
//! machine-readable files read back with their own parsers.
//!
//! Set `HEXVIGIL_SAMPLE_REPORT=DIR` to also write the sample report to DIR for viewing in a
//! browser.

use std::fs;
use std::path::Path;

use hexvigil::report::{
    assign_slugs, escape_html, slugify, write_report, PageContext, ReportError,
};
use hexvigil::summary::{
    BaselineCounts, ChangesetRow, Counts, FlaggedChangeset, Outlier, Placement, RegionReport,
    RegionSummary, Summary, TrendPoint, SCHEMA_VERSION,
};

const SCRIPT: &str = "<script>alert(1)</script>";
const ATTR: &str = "\"onmouseover=alert(2) x=\"";
const FORMULA: &str = "=HYPERLINK(\"http://example.invalid\",\"click\")";
const UNICODE_USER: &str = "Zoë 東京/ß";

fn ctx() -> PageContext<'static> {
    PageContext {
        generated_at: "2026-11-23 06:00 UTC",
        tool_version: "0.1.0",
        resolution: 8,
        baseline_weeks: 12,
        fdr: 0.05,
        flag_threshold: 0.8,
        changeset_url: "https://www.openstreetmap.org/changeset/",
        user_url: "https://www.openstreetmap.org/user/",
        tiles_viewer: None,
    }
}

/// A regular hexagon around a centre, clockwise when `clockwise`, closed.
fn hexagon(lon: f64, lat: f64, r: f64, clockwise: bool) -> Vec<(f64, f64)> {
    let mut ring: Vec<(f64, f64)> = (0..6)
        .map(|i| {
            let a = std::f64::consts::PI / 3.0 * f64::from(i);
            (lon + r * a.cos(), lat + r * 0.6 * a.sin())
        })
        .collect();
    if clockwise {
        ring.reverse();
    }
    ring.push(ring[0]);
    ring
}

fn changeset(id: i64, user: &str, score: f64, deletes: u64, comment: &str) -> ChangesetRow {
    ChangesetRow {
        id,
        user: user.to_owned(),
        uid: id % 9973,
        created_at: 1_795_340_000 + id % 500_000,
        account_age_days: ((id * 37) % 2400) as f64 + 0.25,
        creates: (id % 17) as u64,
        modifies: (id % 23) as u64,
        deletes,
        comment: comment.to_owned(),
        editor: "SomeEditor 2.1".to_owned(),
        score,
        reasons: if score >= 0.8 {
            vec![
                "many deletions for a new account".to_owned(),
                "no changeset comment".to_owned(),
            ]
        } else if score > 0.3 {
            vec!["large area for few edits".to_owned()]
        } else {
            Vec::new()
        },
        flagged: score >= 0.8,
    }
}

fn region(name: &str, slug: &str, hostile: bool) -> RegionReport {
    let bad = |plain: &str, evil: &str| {
        if hostile {
            evil.to_owned()
        } else {
            plain.to_owned()
        }
    };
    let mut changesets = vec![
        changeset(170_001_234, &bad("harbourwalker", SCRIPT), 0.93, 212, ""),
        changeset(
            170_001_301,
            &bad("new_mapper_22", ATTR),
            0.86,
            48,
            &bad("cleanup", FORMULA),
        ),
        changeset(
            170_002_002,
            UNICODE_USER,
            0.81,
            30,
            "Aktualisierung der Wege",
        ),
        changeset(
            170_002_150,
            "lighthouse_keeper",
            0.42,
            2,
            "added benches near the pier",
        ),
    ];
    for i in 0..36 {
        let user = ["quaymapper", "Ana Ribeiro", "tideline", "field_notes"][i % 4];
        let comment = [
            "Survey of shop opening hours",
            "Added footpaths from local knowledge",
            "Fixed building outlines",
            "",
        ][i % 4];
        changesets.push(changeset(
            170_003_000 + i as i64 * 37,
            user,
            0.29 - i as f64 * 0.007,
            (i % 3) as u64,
            comment,
        ));
    }
    changesets[1].comment = bad("cleanup", FORMULA);
    let outliers = vec![
        Outlier {
            kind: "deletion_burst".to_owned(),
            cell: "881f1d4887fffff".to_owned(),
            lat: 54.3212,
            lon: 10.1345,
            observed: 290,
            expected: 6.4,
            p_value: 3.2e-12,
            q_value: 4.1e-10,
            measure: "deletions".to_owned(),
            baseline_source: "own".to_owned(),
            changesets: vec![170_001_234, 170_001_301, 170_002_002],
            mappers: vec![
                bad("harbourwalker", SCRIPT),
                bad("new_mapper_22", ATTR),
                UNICODE_USER.to_owned(),
            ],
        },
        Outlier {
            kind: "newcomer_surge".to_owned(),
            cell: "881f1d488ffffff".to_owned(),
            lat: 54.3301,
            lon: 10.1502,
            observed: 64,
            expected: 9.8,
            p_value: 0.000_41,
            q_value: 0.0062,
            measure: bad("edits by newcomers", SCRIPT),
            baseline_source: "neighbourhood".to_owned(),
            changesets: (0..9).map(|i| 170_003_000 + i * 37).collect(),
            mappers: vec!["quaymapper".to_owned(), "tideline".to_owned()],
        },
        Outlier {
            kind: "offshore_fabrication".to_owned(),
            cell: "881f1d4a1bfffff".to_owned(),
            lat: 54.3655,
            lon: 10.2011,
            observed: 11,
            expected: 0.0,
            p_value: 1.0e-7,
            q_value: 2.2e-6,
            measure: "objects created in water".to_owned(),
            baseline_source: "neighbourhood".to_owned(),
            changesets: vec![170_002_150],
            mappers: vec!["lighthouse_keeper".to_owned()],
        },
    ];
    let outlier_rings = vec![
        hexagon(10.1345, 54.3212, 0.004, true),
        hexagon(10.1502, 54.3301, 0.004, false),
        // Given open: the writer must close it.
        hexagon(10.2011, 54.3655, 0.004, true)[..6].to_vec(),
    ];
    let flagged_changesets = changesets
        .iter()
        .filter(|c| c.flagged)
        .map(|c| FlaggedChangeset {
            id: c.id,
            user: c.user.clone(),
            uid: c.uid,
            score: c.score,
            reasons: c.reasons.clone(),
        })
        .collect::<Vec<_>>();
    let trend = (35..=47)
        .map(|w| TrendPoint {
            week: format!("2026-W{w:02}"),
            edits: if w == 47 { 1840 } else { 700 + (w * 53 % 190) },
            deletes: if w == 47 { 520 } else { 60 + (w * 31 % 45) },
            newcomer_edits: if w == 47 { 160 } else { 20 + w % 9 },
            flagged_changesets: if w == 47 { 3 } else { w % 2 },
        })
        .collect();
    RegionReport {
        summary: RegionSummary {
            name: name.to_owned(),
            slug: slug.to_owned(),
            week: "2026-W47".to_owned(),
            counts: Counts {
                edits: 1840,
                creates: 810,
                modifies: 510,
                deletes: 520,
                changesets: changesets.len() as u64,
                mappers: 23,
                newcomers: 7,
                flagged_changesets: flagged_changesets.len() as u64,
                outlier_cells: outliers.len() as u64,
            },
            baseline_counts: BaselineCounts {
                weeks: 12,
                edits: 795.5,
                deletes: 81.25,
                newcomers: 2.5,
                changesets: 38.0,
            },
            placement: Placement {
                own_coordinates: 1210,
                node_index: 601,
                changeset_bbox: 27,
                unplaced: 2,
            },
            incidents: hexvigil::detect::incidents(&outliers),
            outliers,
            flagged_changesets,
        },
        changesets,
        trend,
        outlier_rings,
        skipped: vec![
            ("node without coordinates".to_owned(), 3),
            (bad("way with no nodes", SCRIPT), 1),
        ],
        images: vec![
            (
                "heat.png".to_owned(),
                "All edits per cell, week 2026-W47".to_owned(),
            ),
            (
                "heat-deletions.png".to_owned(),
                bad("Deletions per cell", ATTR),
            ),
        ],
    }
}

/// Regions with hostile names and two names that slugify alike. Slugs are given as
/// [`assign_slugs`] makes them, so `summary.json` must round-trip exactly.
fn sample() -> (Summary, Vec<RegionReport>) {
    let names = [
        "Harbour Town",
        "../../etc",
        SCRIPT,
        "Old Town",
        "old-town",
        "Tiles",
        "São Miguel 東京",
    ];
    let slugs = assign_slugs(&names);
    let regions: Vec<RegionReport> = names
        .iter()
        .zip(&slugs)
        .enumerate()
        .map(|(i, (name, slug))| region(name, slug, i != 0))
        .collect();
    let summary = Summary {
        schema: SCHEMA_VERSION,
        generator: "hexvigil 0.1.0".to_owned(),
        week: "2026-W47".to_owned(),
        resolution: 8,
        baseline_weeks: 12,
        regions: regions.iter().map(|r| r.summary.clone()).collect(),
    };
    (summary, regions)
}

/// A small placeholder heat image, so pages show a picture as they will in use.
fn write_placeholder_png(path: &Path) {
    let img = image::RgbImage::from_fn(480, 360, |x, y| {
        let d = ((x as f64 - 300.0).powi(2) + (y as f64 - 150.0).powi(2)).sqrt();
        let t = (1.0 - d / 320.0).clamp(0.0, 1.0);
        image::Rgb([
            (68.0 + 185.0 * t * t) as u8,
            (1.0 + 200.0 * t) as u8,
            (84.0 + 60.0 * (1.0 - t)) as u8,
        ])
    });
    img.save(path).expect("placeholder image");
}

fn write_sample(out: &Path) -> (Summary, Vec<RegionReport>) {
    let (summary, regions) = sample();
    for r in &regions {
        let dir = out.join(&r.summary.slug);
        fs::create_dir_all(&dir).expect("region dir");
        for (file, _) in &r.images {
            write_placeholder_png(&dir.join(file));
        }
    }
    write_report(out, &summary, &regions, &ctx()).expect("report written");
    if let Some(dir) = std::env::var_os("HEXVIGIL_SAMPLE_REPORT") {
        let dir = Path::new(&dir);
        for r in &regions {
            let d = dir.join(&r.summary.slug);
            fs::create_dir_all(&d).expect("sample dir");
            for (file, _) in &r.images {
                write_placeholder_png(&d.join(file));
            }
        }
        write_report(dir, &summary, &regions, &ctx()).expect("sample written");
    }
    (summary, regions)
}

fn html_files(out: &Path, regions: &[RegionReport]) -> Vec<(String, String)> {
    let mut files = vec![("index.html".to_owned(), read(&out.join("index.html")))];
    for r in regions {
        let p = out.join(&r.summary.slug).join("index.html");
        files.push((p.display().to_string(), read(&p)));
    }
    files
}

fn read(p: &Path) -> String {
    fs::read_to_string(p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

/// The front page links a tile viewer only when one is named, with the address escaped.
#[test]
fn the_front_page_links_a_tile_viewer_when_given() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (summary, regions) = write_sample(tmp.path());
    assert!(!read(&tmp.path().join("index.html")).contains("tiles-link"));
    let viewer = "tiles/viewer.html?a=1&b=\"2\"";
    let with = PageContext {
        tiles_viewer: Some(viewer),
        ..ctx()
    };
    write_report(tmp.path(), &summary, &regions, &with).expect("report written");
    let html = read(&tmp.path().join("index.html"));
    let hrefs: Vec<&str> = attribute_values(&html, "href")
        .into_iter()
        .map(|(_, h)| h)
        .collect();
    assert!(
        hrefs.contains(&"tiles/viewer.html?a=1&amp;b=&quot;2&quot;"),
        "{hrefs:?}"
    );
}

/// Without link prefixes (the demo's fictional data), ids and names are plain text.
#[test]
fn empty_link_prefixes_give_plain_text() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (summary, regions) = write_sample(tmp.path());
    let plain = PageContext {
        changeset_url: "",
        user_url: "",
        ..ctx()
    };
    write_report(tmp.path(), &summary, &regions, &plain).expect("report written");
    for (name, html) in html_files(tmp.path(), &regions) {
        assert!(!html.contains("openstreetmap.org/changeset"), "{name}");
        assert!(!html.contains("openstreetmap.org/user"), "{name}");
        assert!(!html.contains("href=\"170001234\""), "{name}");
    }
    let page = read(&tmp.path().join(&regions[0].summary.slug).join("index.html"));
    assert!(page.contains("170001234"), "the id is still shown");
}

#[test]
fn writes_every_file() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    assert!(tmp.path().join("index.html").is_file());
    assert!(tmp.path().join("summary.json").is_file());
    for r in &regions {
        for f in ["index.html", "changesets.csv", "outliers.geojson"] {
            assert!(
                tmp.path().join(&r.summary.slug).join(f).is_file(),
                "{} {f}",
                r.summary.slug
            );
        }
    }
}

#[test]
fn hostile_text_never_appears_unescaped() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    for (name, html) in html_files(tmp.path(), &regions) {
        assert!(!html.contains(SCRIPT), "{name}: raw script tag");
        assert!(
            !html.contains("\"onmouseover="),
            "{name}: attribute breakout"
        );
        assert!(!html.contains("<script>alert"), "{name}");
        if !name.contains("harbour-town") {
            assert!(
                html.contains(&escape_html(SCRIPT)),
                "{name}: escaped text is shown"
            );
        }
        // Only the page's own script: one on region pages, none on the front page.
        let scripts = html.matches("<script").count();
        let expected = usize::from(name != "index.html");
        assert_eq!(scripts, expected, "{name}: script elements");
        assert!(
            html.starts_with("<!DOCTYPE html>\n<html lang=\"en\">"),
            "{name}"
        );
    }
    // Unicode mapper names are shown as they are and linked percent-encoded.
    let page = read(&tmp.path().join(&regions[1].summary.slug).join("index.html"));
    assert!(page.contains(">Zoë 東京/ß</a>"));
    assert!(
        page.contains("https://www.openstreetmap.org/user/Zo%C3%AB%20%E6%9D%B1%E4%BA%AC%2F%C3%9F")
    );
}

#[test]
fn slugs_are_safe_and_distinct() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    let written: Summary =
        serde_json::from_str(&read(&tmp.path().join("summary.json"))).expect("summary.json");
    let slugs: Vec<&str> = written.regions.iter().map(|r| r.slug.as_str()).collect();
    assert_eq!(
        slugs,
        [
            "harbour-town",
            "etc",
            "script-alert-1-script",
            "old-town",
            "old-town-2",
            "tiles-2",
            "s-o-miguel"
        ]
    );
    for (slug, r) in slugs.iter().zip(&regions) {
        assert!(!slug.is_empty() && slug.len() <= 64);
        assert!(slug
            .bytes()
            .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-'));
        assert!(!slug.starts_with('-') && !slug.ends_with('-'));
        assert!(
            tmp.path().join(slug).join("index.html").is_file(),
            "{}",
            r.summary.name
        );
    }
    let mut unique = slugs.clone();
    unique.sort_unstable();
    unique.dedup();
    assert_eq!(unique.len(), slugs.len());
    // Nothing escaped the report folder.
    assert!(!tmp
        .path()
        .parent()
        .expect("parent")
        .join("etc")
        .join("changesets.csv")
        .exists());

    for bad in ["", ".", "..", "/", "\\..\\", "東京", "--"] {
        assert_eq!(slugify(bad), "region", "{bad:?}");
    }
    assert_eq!(slugify(&"Long name ".repeat(20)).len(), 64);
    assert_eq!(assign_slugs(&["a", "A", "a!"]), ["a", "a-2", "a-3"]);
    // Unsafe slugs handed to the writer are made safe and distinct.
    let (mut summary, mut regions) = sample();
    summary.regions.truncate(2);
    regions.truncate(2);
    regions[0].summary.slug = "../x".to_owned();
    regions[1].summary.slug = "X".to_owned();
    let tmp2 = tempfile::tempdir().expect("tempdir");
    write_report(tmp2.path(), &summary, &regions, &ctx()).expect("written");
    let written: Summary =
        serde_json::from_str(&read(&tmp2.path().join("summary.json"))).expect("summary.json");
    assert_eq!(written.regions[0].slug, "x");
    assert_eq!(written.regions[1].slug, "x-2");
}

#[test]
fn summary_json_round_trips() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (summary, _) = write_sample(tmp.path());
    let text = read(&tmp.path().join("summary.json"));
    let back: Summary = serde_json::from_str(&text).expect("summary.json parses");
    assert_eq!(back, summary);
    // Deterministic: a second run writes the same bytes everywhere.
    let tmp2 = tempfile::tempdir().expect("tempdir");
    write_sample(tmp2.path());
    for f in [
        "summary.json",
        "index.html",
        "etc/index.html",
        "etc/changesets.csv",
        "etc/outliers.geojson",
    ] {
        assert_eq!(read(&tmp.path().join(f)), read(&tmp2.path().join(f)), "{f}");
    }
}

#[test]
fn changesets_csv_parses_and_guards_formulas() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    let r = &regions[1];
    let mut reader =
        csv::Reader::from_path(tmp.path().join(&r.summary.slug).join("changesets.csv"))
            .expect("csv");
    let header: Vec<String> = reader
        .headers()
        .expect("header")
        .iter()
        .map(str::to_owned)
        .collect();
    assert_eq!(
        header,
        [
            "id",
            "user",
            "uid",
            "created_at",
            "account_age_days",
            "creates",
            "modifies",
            "deletes",
            "score",
            "flagged",
            "reasons",
            "comment",
            "editor"
        ]
    );
    let rows: Vec<csv::StringRecord> = reader.records().collect::<Result<_, _>>().expect("rows");
    assert_eq!(rows.len(), r.changesets.len());
    for (row, cs) in rows.iter().zip(&r.changesets) {
        assert_eq!(row[0].parse::<i64>().expect("id"), cs.id);
        assert_eq!(row[9] == *"true", cs.flagged);
        let t = &row[3];
        assert!(
            t.len() == 20 && t.ends_with('Z') && &t[10..11] == "T",
            "ISO 8601 UTC: {t}"
        );
    }
    // Source: OWASP "CSV Injection" (common practice): formula-like cells get an apostrophe.
    assert_eq!(&rows[1][11], format!("'{FORMULA}"));
    assert_eq!(&rows[0][1], SCRIPT, "plain text is kept verbatim in CSV");
    assert_eq!(
        &rows[0][10],
        "many deletions for a new account; no changeset comment"
    );
    assert_eq!(&rows[0][3], "2026-11-22T09:53:54Z");
}

fn ring_of(v: &serde_json::Value) -> Vec<(f64, f64)> {
    v.as_array()
        .expect("ring array")
        .iter()
        .map(|p| (p[0].as_f64().expect("lon"), p[1].as_f64().expect("lat")))
        .collect()
}

/// Twice the signed area (shoelace); positive for counter-clockwise in lon/lat.
fn shoelace2(ring: &[(f64, f64)]) -> f64 {
    ring.windows(2)
        .map(|w| w[0].0 * w[1].1 - w[1].0 * w[0].1)
        .sum()
}

#[test]
fn outliers_geojson_is_rfc7946() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    let r = &regions[0];
    let text = read(&tmp.path().join(&r.summary.slug).join("outliers.geojson"));
    let gj: serde_json::Value = serde_json::from_str(&text).expect("geojson parses");
    assert_eq!(gj["type"], "FeatureCollection");
    let features = gj["features"].as_array().expect("features");
    assert_eq!(features.len(), r.summary.outliers.len());
    for (f, o) in features.iter().zip(&r.summary.outliers) {
        assert_eq!(f["type"], "Feature");
        assert_eq!(f["properties"]["kind"], o.kind.as_str());
        assert_eq!(f["properties"]["cell"], o.cell.as_str());
        assert_eq!(f["properties"]["observed"], o.observed);
        assert_eq!(
            f["properties"]["changesets"].as_array().map(Vec::len),
            Some(o.changesets.len())
        );
        assert_eq!(f["geometry"]["type"], "Polygon");
        let exterior = ring_of(&f["geometry"]["coordinates"][0]);
        assert!(exterior.len() >= 4);
        assert_eq!(exterior.first(), exterior.last(), "closed ring");
        // RFC 7946 §3.1.6: exterior rings are counter-clockwise.
        assert!(shoelace2(&exterior) > 0.0, "counter-clockwise");
    }
    // The geojson crate reads it too.
    text.parse::<geojson::GeoJson>()
        .expect("geojson crate parses it");
}

/// Values of one attribute (`src="…"`) across a page, with the text before each.
fn attribute_values<'a>(html: &'a str, attr: &str) -> Vec<(&'a str, &'a str)> {
    let needle = format!(" {attr}=\"");
    html.match_indices(&needle)
        .map(|(at, _)| {
            let start = at + needle.len();
            let end = html[start..].find('"').map_or(html.len(), |e| start + e);
            (&html[..at], &html[start..end])
        })
        .collect()
}

#[test]
fn pages_load_nothing_from_the_network() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    let allowed = [
        "https://www.openstreetmap.org/changeset/",
        "https://www.openstreetmap.org/user/",
        "https://www.openstreetmap.org/copyright",
    ];
    for (name, html) in html_files(tmp.path(), &regions) {
        for (_, src) in attribute_values(&html, "src") {
            assert!(
                !src.contains(':') && !src.starts_with("//"),
                "{name}: src={src}"
            );
        }
        for (before, href) in attribute_values(&html, "href") {
            if href.contains(':') || href.starts_with("//") {
                assert!(
                    allowed.iter().any(|a| href.starts_with(a)),
                    "{name}: href={href}"
                );
                let tag = &before[before.rfind('<').expect("tag start")..];
                assert_eq!(tag, "<a", "{name}: only links may point outside: {href}");
            }
        }
        for block in ["<style>", "<script>"] {
            if let Some(start) = html.find(block) {
                let body = &html[start..];
                let body = &body[..body.find("</").unwrap_or(body.len())];
                assert!(!body.contains("http"), "{name}: URL inside {block}");
            }
        }
        for banned in [
            "<link",
            "@import",
            "url(",
            "<script src",
            "<iframe",
            "@font-face",
        ] {
            assert!(!html.contains(banned), "{name}: {banned}");
        }
    }
}

#[test]
fn region_page_has_cautions_before_the_lists() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (_, regions) = write_sample(tmp.path());
    let page = read(&tmp.path().join("harbour-town").join("index.html"));
    let cautions = page.find("not a verdict").expect("cautions present");
    for phrase in [
        "statistical prompt for a human reviewer",
        "proof that anyone acted in bad faith",
        "Look at the edits yourself",
        "Assume good faith and talk to the mapper first",
        "OpenStreetMap Foundation",
        "never a reason to treat someone badly",
    ] {
        assert!(page.contains(phrase), "{phrase}");
    }
    let outlier_table = page.find("id=\"outlier-table\"").expect("outlier table");
    let changeset_table = page.find("id=\"changesets\"").expect("changeset table");
    assert!(cautions < outlier_table && cautions < changeset_table);
    assert!(page.contains(
        "Map data © <a href=\"https://www.openstreetmap.org/copyright\">OpenStreetMap \
         contributors</a>, available under the Open Database License (ODbL)."
    ));
    assert!(page.contains("Generated by hexvigil 0.1.0 on 2026-11-23 06:00 UTC."));
    assert!(page.contains("<a href=\"../index.html\">"));
    assert!(page.contains("<th scope=\"row\">Deletion burst<span"));
    assert!(page.contains(">3.2e-12<"));
    assert!(page
        .contains("<a href=\"https://www.openstreetmap.org/changeset/170001234\">170001234</a>"));
    for chart in ["chart-deletions", "chart-newcomers", "chart-edits"] {
        assert!(page.contains(&format!("aria-labelledby=\"{chart}-title {chart}-desc\"")));
    }
    // Deletions in the report week (520) against weeks of 60-104.
    assert!(page.contains("520 deletions, above the usual range of"));
    // Flagged changesets: 3 this week against a mean of 6 / 12 = 0.5 in the weeks before.
    assert!(page.contains("<dd class=\"vs notable\">6× a usual week (≈ 0.5)</dd>"));
    // The filter tools are hidden until the script shows them.
    assert!(page.contains("id=\"changeset-tools\" hidden"));
    assert_eq!(page.matches("<tr class=\"flagged\">").count(), 3);

    let index = read(&tmp.path().join("index.html"));
    assert!(index.contains("not verdicts or proof of bad faith"));
    for r in &regions {
        assert!(index.contains(&format!("<a href=\"{}/index.html\">", r.summary.slug)));
    }
}

#[test]
fn mismatched_regions_are_refused() {
    let tmp = tempfile::tempdir().expect("tempdir");
    let (summary, regions) = sample();
    let err = write_report(tmp.path(), &summary, &regions[..1], &ctx()).expect_err("mismatch");
    assert!(
        matches!(
            err,
            ReportError::RegionCount {
                summary: 7,
                pages: 1,
                ..
            }
        ),
        "{err}"
    );
}
