//! The report in a real browser: Debian's Chromium, driven by `tests/browser/check_report.mjs`
//! with the npm package `playwright-core` (both installed by `scripts/setup-test-deps.sh`; no
//! browser is ever downloaded). The script opens every page from disk, acts like a reader
//! (sorts, filters, switches to a phone width, takes screenshots) and prints what it saw as
//! JSON; the assertions are here.
//!
//! - The demo report, written by the real binary: no console errors, no request other than
//!   files of the report folder, images load and carry alt text, charts and tables are
//!   labelled, nothing sticks out sideways at 390 px, and the changeset table sorts, filters
//!   and shows flagged changesets only, checked against `summary.json`.
//! - A report written with `write_report` from hand-built data whose comments, mapper names,
//!   region name and captions hold markup: it shows as text and never runs.

use std::path::{Path, PathBuf};
use std::process::Command;

use serde_json::Value;

use hexvigil::report::{write_report, PageContext};
use hexvigil::summary::{
    BaselineCounts, ChangesetRow, Counts, FlaggedChangeset, Outlier, Placement, RegionReport,
    RegionSummary, Summary, TrendPoint, SCHEMA_VERSION,
};

fn manifest_dir() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// Runs the browser script over a report folder and returns its JSON.
fn check_report(dir: &Path, extra: &[&str]) -> Value {
    let script_dir = manifest_dir().join("tests/browser");
    assert!(
        script_dir.join("node_modules/playwright-core").is_dir()
            && Path::new("/usr/bin/chromium").exists(),
        "the browser tests need Chromium and tests/browser/node_modules: run \
         scripts/setup-test-deps.sh"
    );
    let out = Command::new("node")
        .arg(script_dir.join("check_report.mjs"))
        .arg(dir)
        .args(extra)
        .output()
        .unwrap_or_else(|e| panic!("node could not start ({e}): run scripts/setup-test-deps.sh"));
    assert!(
        out.status.success(),
        "check_report.mjs failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| {
        panic!(
            "check_report.mjs printed no JSON ({e}): {}",
            String::from_utf8_lossy(&out.stdout)
        )
    })
}

fn pages(result: &Value) -> &[Value] {
    result["pages"].as_array().map_or(&[], Vec::as_slice)
}

fn strings(v: &Value) -> Vec<String> {
    v.as_array()
        .map(|a| {
            a.iter()
                .map(|x| x.as_str().map_or_else(|| x.to_string(), str::to_owned))
                .collect()
        })
        .unwrap_or_default()
}

fn file_url(p: &Path) -> String {
    let p = p.canonicalize().unwrap_or_else(|_| p.to_owned());
    format!("file://{}", p.display())
}

/// What every page must show, whatever its data: loaded, quiet, offline, labelled, narrow.
fn assert_page_is_sound(page: &Value, report_dir: &Path) {
    let file = page["file"].as_str().unwrap_or("?");
    assert_eq!(page["status"], 200, "{file}: not loaded");
    assert_eq!(page["lang"], "en", "{file}");
    assert!(
        strings(&page["consoleErrors"]).is_empty(),
        "{file}: console errors {:#?}",
        page["consoleErrors"]
    );
    assert!(
        strings(&page["pageErrors"]).is_empty(),
        "{file}: script errors {:#?}",
        page["pageErrors"]
    );
    // Every request stays inside the report folder: no network, nothing else on disk.
    let root = file_url(report_dir);
    let requests = strings(&page["requests"]);
    assert!(!requests.is_empty(), "{file}: requests were not recorded");
    for r in &requests {
        assert!(
            r.starts_with(&format!("{root}/")),
            "{file}: request outside the report folder: {r}"
        );
    }
    assert_eq!(page["pwned"], false, "{file}: injected script ran");
    assert!(
        strings(&page["handlerElements"]).is_empty(),
        "{file}: elements with event handlers {:#?}",
        page["handlerElements"]
    );
    assert_eq!(page["iframes"], 0, "{file}");
    assert_eq!(page["javascriptLinks"], 0, "{file}");
    for img in page["images"].as_array().map_or(&[][..], Vec::as_slice) {
        assert_eq!(img["loaded"], true, "{file}: image did not load: {img}");
        let alt = img["alt"].as_str().unwrap_or("");
        assert!(alt.len() > 10, "{file}: image without alt text: {img}");
    }
    let svgs = page["svgs"].as_array().map_or(&[][..], Vec::as_slice);
    for svg in svgs {
        assert_eq!(svg["role"], "img", "{file}: {svg}");
        assert!(
            svg["label"]
                .as_str()
                .is_some_and(|l| l.contains("per week")),
            "{file}: chart without a text alternative: {svg}"
        );
    }
    for t in page["tables"].as_array().map_or(&[][..], Vec::as_slice) {
        let named = t["caption"].as_str().is_some_and(|c| !c.is_empty())
            || t["label"].as_str().is_some_and(|c| !c.is_empty());
        assert!(named, "{file}: table without caption or label: {t}");
        assert_eq!(t["headerCellsWithoutScope"], 0, "{file}: {t}");
        assert!(t["headerCells"].as_u64().unwrap_or(0) > 0, "{file}: {t}");
    }
    let phone = &page["phone"];
    assert_eq!(phone["clientWidth"], 390, "{file}: phone viewport");
    assert!(
        phone["scrollWidth"].as_u64() <= phone["clientWidth"].as_u64(),
        "{file}: wider than a 390 px phone: {phone}"
    );
}

fn numbers(values: &Value) -> Vec<f64> {
    strings(values)
        .iter()
        .map(|v| v.replace(',', "").parse::<f64>().unwrap_or(f64::NAN))
        .collect()
}

/// The changeset table sorts by a number column both ways, keeping every row.
fn assert_numeric_sort(sort: &Value) {
    let column = sort["column"].as_str().unwrap_or("?");
    let mut before = numbers(&sort["before"]);
    assert!(before.len() > 3, "{column}: too few rows to test sorting");
    assert!(before.iter().all(|v| v.is_finite()), "{column}: {before:?}");
    before.sort_by(f64::total_cmp);
    let clicks = sort["clicks"].as_array().map_or(&[][..], Vec::as_slice);
    assert_eq!(clicks.len(), 2);
    for (click, want) in clicks.iter().zip(["ascending", "descending"]) {
        assert_eq!(click["ariaSort"], want, "{column}");
        let got = numbers(&click["values"]);
        let ordered = got.windows(2).all(|w| {
            if want == "ascending" {
                w[0] <= w[1]
            } else {
                w[0] >= w[1]
            }
        });
        assert!(ordered, "{column} {want}: {got:?}");
        let mut same = got.clone();
        same.sort_by(f64::total_cmp);
        assert_eq!(same, before, "{column}: rows lost or changed by sorting");
    }
    // The column is not constant, so the two orders differ.
    assert_ne!(clicks[0]["values"], clicks[1]["values"], "{column}");
}

/// The table sorts by mapper name. Names of plain ASCII letters compare alike in the browser's
/// collation and in lowercase byte order, so those are checked; others keep their place.
fn assert_text_sort(sort: &Value) {
    let mut before = strings(&sort["before"]);
    before.sort();
    let plain = |v: &[String]| -> Vec<String> {
        v.iter()
            .filter(|n| !n.is_empty() && n.bytes().all(|b| b.is_ascii_alphabetic()))
            .map(|n| n.to_ascii_lowercase())
            .collect()
    };
    let clicks = sort["clicks"].as_array().map_or(&[][..], Vec::as_slice);
    assert_eq!(clicks.len(), 2);
    for (click, want) in clicks.iter().zip(["ascending", "descending"]) {
        assert_eq!(click["ariaSort"], want, "Mapper");
        let got = strings(&click["values"]);
        let names = plain(&got);
        assert!(names.len() >= 5, "too few plain names to check: {got:?}");
        let ordered = names.windows(2).all(|w| {
            if want == "ascending" {
                w[0] <= w[1]
            } else {
                w[0] >= w[1]
            }
        });
        assert!(ordered, "Mapper {want}: {names:?}");
        let mut same = got.clone();
        same.sort();
        assert_eq!(same, before, "Mapper: rows lost or changed by sorting");
    }
}

/// The changeset table of a region page against the region's `summary.json` counts.
fn assert_table_works(page: &Value, counts: &Value) {
    let file = page["file"].as_str().unwrap_or("?");
    let t = &page["table"];
    assert_eq!(
        t["toolsShown"], true,
        "{file}: the filter tools stayed hidden"
    );
    let total = t["total"].as_u64().unwrap_or(0);
    assert_eq!(
        total,
        counts["changesets"].as_u64().unwrap_or(u64::MAX),
        "{file}"
    );
    let flagged = counts["flagged_changesets"].as_u64().unwrap_or(u64::MAX);
    assert_eq!(t["flagged"], flagged, "{file}");

    let sorts = t["sorts"].as_array().map_or(&[][..], Vec::as_slice);
    let by = |name: &str| {
        sorts
            .iter()
            .find(|s| s["column"] == name)
            .unwrap_or_else(|| panic!("{file}: no {name} column was sorted"))
    };
    assert_numeric_sort(by("Deleted"));
    assert_numeric_sort(by("Score"));
    assert_text_sort(by("Mapper"));

    let f = &t["filter"];
    let query = f["query"].as_str().unwrap_or("");
    assert!(!query.is_empty(), "{file}: no mapper to filter by");
    let visible = f["visible"].as_u64().unwrap_or(0);
    assert!(visible >= 1 && visible < total, "{file}: filter {f}");
    assert_eq!(f["visible"], f["expected"], "{file}: filter {f}");
    assert_eq!(f["allMatch"], true, "{file}: filter {f}");
    assert_eq!(
        f["status"],
        format!("Showing {visible} of {total} changesets"),
        "{file}"
    );
    assert_eq!(f["visibleAfterClearing"], total, "{file}");

    let only = &t["flaggedOnly"];
    assert_eq!(only["visible"], flagged, "{file}: flagged only {only}");
    assert_eq!(
        only["visibleFlagged"], flagged,
        "{file}: flagged only {only}"
    );
    assert_eq!(only["visibleAfterUnchecking"], total, "{file}");
}

fn assert_png_width(path: &Path, width: u32) {
    let img = image::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    assert_eq!(img.width(), width, "{}", path.display());
    assert!(img.height() > 600, "{}", path.display());
}

#[test]
fn demo_report_works_in_chromium() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let out = Command::new(env!("CARGO_BIN_EXE_hexvigil"))
        .args(["--quiet", "demo", "--out"])
        .arg(dir.path())
        .output()
        .unwrap_or_else(|e| panic!("{e}"));
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let report = dir.path().join("report");
    let summary: Value = serde_json::from_str(
        &std::fs::read_to_string(report.join("summary.json")).unwrap_or_default(),
    )
    .unwrap_or_else(|e| panic!("summary.json: {e}"));
    let shots = dir.path().join("shots");
    std::fs::create_dir_all(&shots).unwrap_or_else(|e| panic!("{e}"));
    let shots_arg = shots.display().to_string();
    let result = check_report(&report, &["--shots", &shots_arg]);

    let regions = summary["regions"].as_array().map_or(&[][..], Vec::as_slice);
    let pages = pages(&result);
    assert_eq!(
        pages.len(),
        regions.len() + 1,
        "index and one page a region"
    );
    for page in pages {
        assert_page_is_sound(page, &report);
    }
    // Front page: a card, a thumbnail and two sparklines per region.
    let index = &pages[0];
    assert_eq!(index["scriptElements"], 0);
    assert_eq!(
        index["images"].as_array().map(Vec::len),
        Some(regions.len())
    );
    assert_eq!(
        index["svgs"].as_array().map(Vec::len),
        Some(2 * regions.len())
    );
    for (page, region) in pages[1..].iter().zip(regions) {
        let name = region["name"].as_str().unwrap_or("?");
        assert_eq!(page["h1"], name);
        assert_eq!(page["scriptElements"], 1, "only the table script");
        // Three weekly charts, and the deletions chart says where this week lies.
        let svgs: Vec<String> = page["svgs"]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter_map(|s| s["label"].as_str().map(str::to_owned))
                    .collect()
            })
            .unwrap_or_default();
        assert_eq!(svgs.len(), 3, "{name}: {svgs:#?}");
        assert!(svgs[0].starts_with(&format!("Deletions per week in {name}")));
        assert!(svgs[1].starts_with(&format!("Edits by newcomers per week in {name}")));
        assert!(
            svgs[0].contains(&format!(
                "{} deletions, ",
                hexvigil::report::group_thousands(
                    region["counts"]["deletes"].as_u64().unwrap_or(0)
                )
            )),
            "{}",
            svgs[0]
        );
        // The deletion burst the demo injects into Quillhaven's town centre stands above the
        // usual range of the region's weekly deletions.
        if name == "Quillhaven" {
            assert!(svgs[0].contains("above the usual range"), "{}", svgs[0]);
        }
        assert_table_works(page, &region["counts"]);
    }
    assert!(regions.iter().any(|r| r["name"] == "Quillhaven"));

    for (name, width) in [
        ("index-desktop.png", 1280),
        ("index-phone.png", 390),
        ("region-desktop.png", 1280),
        ("region-phone.png", 390),
    ] {
        assert_png_width(&shots.join(name), width);
    }
}

// ---------------------------------------------------------------------------------------------
// Hostile text

/// Markup a mapper could put in a changeset comment, a user name, a region file or a tag; each
/// would set `window.__pwned` or the page title if it ran.
const COMMENT_SCRIPT: &str = "<script>document.title='pwned';window.__pwned=1</script>";
const USER_IMG: &str = "<img src=x onerror=\"window.__pwned=2\">";
const USER_QUOTES: &str = "\"'><svg onload=window.__pwned=3>";
const REGION_NAME: &str = "Marrowfen \"><script>window.__pwned=4</script>";
const COMMENT_TABLE_BREAK: &str =
    "</td></tr></table><a href=\"javascript:window.__pwned=5\">click</a>";
const COMMENT_STYLE: &str = "<style>body{display:none}</style>' onmouseover='window.__pwned=6";
const REASON_MARKUP: &str = "<b onmouseover=window.__pwned=7>bold</b> reason";
const SKIPPED_IFRAME: &str = "</caption><iframe src=\"javascript:window.__pwned=8\"></iframe>";
const CAPTION_QUOTES: &str = "heat' onerror='window.__pwned=9";
const MEASURE_MARKUP: &str = "deletions<details open ontoggle=window.__pwned=10>";

/// Plain mapper names (ASCII letters only, invented) for the sort check.
const PLAIN_USERS: [&str; 8] = [
    "Ardwenna",
    "bexmarrow",
    "Corvath",
    "dorravelle",
    "Elsquith",
    "fallowmark",
    "Gorrinel",
    "hestaval",
];

fn ctx() -> PageContext<'static> {
    PageContext {
        generated_at: "2026-11-23 06:00 UTC",
        tool_version: "0.1.0",
        resolution: 8,
        baseline_weeks: 12,
        fdr: 0.05,
        flag_threshold: 0.5,
        changeset_url: "https://www.openstreetmap.org/changeset/",
        user_url: "https://www.openstreetmap.org/user/",
        tiles_viewer: None,
    }
}

fn row(id: i64, user: &str, score: f64, deletes: u64, comment: &str) -> ChangesetRow {
    let flagged = score >= 0.5;
    ChangesetRow {
        id,
        user: user.to_owned(),
        uid: id % 1000,
        created_at: 1_795_340_000 + id % 100_000,
        account_age_days: (id % 700) as f64,
        creates: (id % 13) as u64,
        modifies: (id % 7) as u64,
        deletes,
        comment: comment.to_owned(),
        editor: "SomeEditor 2.1".to_owned(),
        score,
        reasons: if flagged {
            vec![REASON_MARKUP.to_owned(), "no changeset comment".to_owned()]
        } else {
            Vec::new()
        },
        flagged,
    }
}

fn hostile_region() -> RegionReport {
    let mut changesets = vec![
        row(880_001, USER_IMG, 0.91, 140, COMMENT_SCRIPT),
        row(880_002, USER_QUOTES, 0.77, 60, COMMENT_TABLE_BREAK),
        row(880_003, "Corvath", 0.62, 31, COMMENT_STYLE),
    ];
    for (i, user) in PLAIN_USERS.iter().cycle().take(24).enumerate() {
        changesets.push(row(
            880_100 + i as i64,
            user,
            0.3 - i as f64 * 0.01,
            (i % 5) as u64,
            "Surveyed benches along the quay",
        ));
    }
    let flagged_changesets: Vec<FlaggedChangeset> = changesets
        .iter()
        .filter(|c| c.flagged)
        .map(|c| FlaggedChangeset {
            id: c.id,
            user: c.user.clone(),
            uid: c.uid,
            score: c.score,
            reasons: c.reasons.clone(),
        })
        .collect();
    let outliers = vec![Outlier {
        kind: "deletion_burst".to_owned(),
        cell: "881f1d4887fffff".to_owned(),
        lat: 54.3212,
        lon: 10.1345,
        observed: 231,
        expected: 6.4,
        p_value: 3.2e-12,
        q_value: 4.1e-10,
        measure: MEASURE_MARKUP.to_owned(),
        baseline_source: "own".to_owned(),
        changesets: vec![880_001, 880_002, 880_003],
        mappers: vec![
            USER_IMG.to_owned(),
            USER_QUOTES.to_owned(),
            "Corvath".to_owned(),
        ],
    }];
    let ring: Vec<(f64, f64)> = (0..=6)
        .map(|i| {
            let a = std::f64::consts::PI / 3.0 * f64::from(i % 6);
            (10.1345 + 0.004 * a.cos(), 54.3212 + 0.0024 * a.sin())
        })
        .collect();
    let trend: Vec<TrendPoint> = (35..=47)
        .map(|w| TrendPoint {
            week: format!("2026-W{w}"),
            edits: if w == 47 { 900 } else { 600 + (w * 37 % 90) },
            deletes: if w == 47 { 240 } else { 40 + (w * 13 % 25) },
            newcomer_edits: if w == 47 { 30 } else { 5 + w % 4 },
            flagged_changesets: if w == 47 { 3 } else { w % 2 },
        })
        .collect();
    RegionReport {
        summary: RegionSummary {
            name: REGION_NAME.to_owned(),
            slug: String::new(),
            week: "2026-W47".to_owned(),
            counts: Counts {
                edits: 900,
                creates: 500,
                modifies: 160,
                deletes: 240,
                changesets: changesets.len() as u64,
                mappers: 11,
                newcomers: 2,
                flagged_changesets: flagged_changesets.len() as u64,
                outlier_cells: 1,
            },
            baseline_counts: BaselineCounts {
                weeks: 12,
                edits: 640.0,
                deletes: 52.0,
                newcomers: 1.0,
                changesets: 25.0,
            },
            placement: Placement {
                own_coordinates: 800,
                node_index: 95,
                changeset_bbox: 5,
                unplaced: 0,
            },
            incidents: hexvigil::detect::incidents(&outliers),
            outliers,
            flagged_changesets,
        },
        changesets,
        trend,
        outlier_rings: vec![ring],
        skipped: vec![(SKIPPED_IFRAME.to_owned(), 2)],
        images: vec![("heat.png".to_owned(), CAPTION_QUOTES.to_owned())],
    }
}

#[test]
fn hostile_text_shows_as_text_and_never_runs() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let report: PathBuf = dir.path().join("report");
    let region = hostile_region();
    let summary = Summary {
        schema: SCHEMA_VERSION,
        generator: "hexvigil 0.1.0".to_owned(),
        week: "2026-W47".to_owned(),
        resolution: 8,
        baseline_weeks: 12,
        regions: vec![region.summary.clone()],
    };
    // The slug write_report will choose, so the heat image can be put in place first.
    let slug = hexvigil::report::assign_slugs(&[REGION_NAME])
        .pop()
        .unwrap_or_default();
    std::fs::create_dir_all(report.join(&slug)).unwrap_or_else(|e| panic!("{e}"));
    image::RgbImage::from_fn(320, 240, |x, y| {
        image::Rgb([(x % 256) as u8, (y % 256) as u8, 90])
    })
    .save(report.join(&slug).join("heat.png"))
    .unwrap_or_else(|e| panic!("{e}"));
    write_report(&report, &summary, &[region], &ctx()).unwrap_or_else(|e| panic!("{e}"));

    let result = check_report(&report, &["--text"]);
    let pages = pages(&result);
    assert_eq!(pages.len(), 2);
    for page in pages {
        assert_page_is_sound(page, &report);
    }
    let (index, page) = (&pages[0], &pages[1]);
    assert_eq!(index["title"], "hexvigil weekly report · week 2026-W47");
    assert_eq!(index["scriptElements"], 0);
    assert!(index["text"]
        .as_str()
        .is_some_and(|t| t.contains(REGION_NAME)));

    // The title and heading hold the region name as text; nothing changed the title.
    assert_eq!(
        page["title"],
        format!("{REGION_NAME} · week 2026-W47 · hexvigil")
    );
    assert_eq!(page["h1"], REGION_NAME);
    assert_eq!(page["scriptElements"], 1, "only the table script");
    // The page itself and its one heat image; `<img src=x>` fetched nothing.
    let requests = strings(&page["requests"]);
    assert_eq!(requests.len(), 2, "{requests:#?}");
    assert!(requests[1].ends_with(&format!("/{slug}/heat.png")));
    let text = page["text"].as_str().unwrap_or("");
    for payload in [
        COMMENT_SCRIPT,
        USER_IMG,
        USER_QUOTES,
        REGION_NAME,
        COMMENT_TABLE_BREAK,
        COMMENT_STYLE,
        REASON_MARKUP,
        SKIPPED_IFRAME,
        CAPTION_QUOTES,
        MEASURE_MARKUP,
    ] {
        assert!(text.contains(payload), "not shown as text: {payload}");
    }
    // The image caption stayed inside its alt text.
    assert!(page["images"][0]["alt"]
        .as_str()
        .is_some_and(|a| a.ends_with(CAPTION_QUOTES)));
    // Markup in the comments did not break the table: every row is still there and sorts.
    let counts = serde_json::to_value(&summary.regions[0].counts).unwrap_or(Value::Null);
    assert_table_works(page, &counts);
}
