//! Regions from `fixtures/regions/regions.geojson` through the real binary: two overlapping
//! regions and one with no edits. Every edit of the week is counted in exactly one region (the
//! first holding its cell's centre), and the empty region still gets a page that says nothing
//! happened there.

use std::fmt::Write as _;
use std::path::Path;
use std::process::Command;

use serde_json::Value;

/// Where the test puts edits: (lon, lat, label). Brindlecove only, the strip where Brindlecove
/// and Ostermarra overlap, and Ostermarra only. Nothing goes to Quellingfen.
const SPOTS: [(f64, f64, &str); 3] = [
    (-128.73, -12.405, "brindlecove"),
    (-128.705, -12.405, "overlap"),
    (-128.68, -12.405, "ostermarra"),
];

/// Report week and the weeks before it (ISO 2026: W20 starts Monday 11 May).
const REPORT_WEEK: &str = "2026-W20";

fn bin() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_hexvigil"));
    c.arg("--quiet");
    c
}

fn run_ok(c: &mut Command) {
    let out = c.output().unwrap_or_else(|e| panic!("{c:?}: {e}"));
    assert!(
        out.status.success(),
        "{c:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// An osmChange file: six weeks of new benches at each spot (more in the last week), spread
/// a little around the spot so they fall in one or two cells.
fn write_osc(path: &Path) -> [u64; 3] {
    let mut xml = String::from("<osmChange version=\"0.6\">\n<create>\n");
    let mut in_report_week = [0_u64; 3];
    let mut id = 1_000_i64;
    // 2026-04-06 is the Monday of W15.
    for week in 0..6_u32 {
        for (s, (lon, lat, _)) in SPOTS.iter().enumerate() {
            let n = if week == 5 { 6 + 2 * s } else { 3 + s };
            for k in 0..n {
                id += 1;
                let day = 6 + week * 7 + (k as u32 % 5);
                let (month, day) = if day > 30 { (5, day - 30) } else { (4, day) };
                let dlon = (k as f64 - n as f64 / 2.0) * 0.000_05;
                let _ = writeln!(
                    xml,
                    "<node id=\"{id}\" version=\"1\" changeset=\"{}\" uid=\"{}\" user=\"mapper{}\" \
                     timestamp=\"2026-{month:02}-{day:02}T10:00:00Z\" lat=\"{lat}\" lon=\"{}\">\
                     <tag k=\"amenity\" v=\"bench\"/></node>",
                    500 + week * 10 + s as u32,
                    40 + s,
                    40 + s,
                    lon + dlon,
                );
                if week == 5 {
                    in_report_week[s] += 1;
                }
            }
        }
    }
    xml.push_str("</create>\n</osmChange>\n");
    std::fs::write(path, xml).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    in_report_week
}

fn region<'a>(summary: &'a Value, name: &str) -> &'a Value {
    summary["regions"]
        .as_array()
        .and_then(|r| r.iter().find(|r| r["name"] == name))
        .unwrap_or_else(|| panic!("no region {name} in summary.json"))
}

fn edits(r: &Value) -> u64 {
    r["counts"]["edits"].as_u64().unwrap_or(u64::MAX)
}

#[test]
fn overlapping_and_empty_regions() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let osc = dir.path().join("benches.osc");
    let [b_only, overlap, o_only] = write_osc(&osc);
    let db = dir.path().join("state.db");
    run_ok(bin().args(["ingest", "--db"]).arg(&db).arg(&osc));
    let out = dir.path().join("report");
    let regions = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/regions/regions.geojson");
    run_ok(
        bin()
            .args(["report", "--db"])
            .arg(&db)
            .arg("--out")
            .arg(&out)
            .arg("--regions")
            .arg(&regions)
            .args(["--land", "none", "--resolution", "9", "--week", REPORT_WEEK])
            .args(["--generated-at", "test"]),
    );
    let text = std::fs::read_to_string(out.join("summary.json")).unwrap_or_default();
    let summary: Value = serde_json::from_str(&text).unwrap_or_else(|e| panic!("{e}"));
    let names: Vec<&str> = summary["regions"]
        .as_array()
        .map(|r| r.iter().filter_map(|r| r["name"].as_str()).collect())
        .unwrap_or_default();
    assert_eq!(names, ["Brindlecove", "Ostermarra", "Quellingfen"]);

    // The overlap strip is listed under Brindlecove, the first region in the file; every edit
    // is counted once.
    assert_eq!(edits(region(&summary, "Brindlecove")), b_only + overlap);
    assert_eq!(edits(region(&summary, "Ostermarra")), o_only);
    assert_eq!(edits(region(&summary, "Quellingfen")), 0);

    // The empty region has its folder, its page and a card on the front page, all saying so.
    let empty = region(&summary, "Quellingfen");
    let slug = empty["slug"].as_str().unwrap_or_default();
    assert_eq!(slug, "quellingfen");
    let page = std::fs::read_to_string(out.join(slug).join("index.html")).unwrap_or_default();
    assert!(
        page.contains("Nothing happened here this week."),
        "empty page"
    );
    assert!(page.contains("No incidents this week"));
    assert!(page.contains("No cell stood out this week"));
    assert!(page.contains("No changesets this week."));
    assert!(page.contains("Before you act on anything below"));
    for f in ["changesets.csv", "outliers.geojson", "heat.png"] {
        assert!(out.join(slug).join(f).is_file(), "{f}");
    }
    let busy = std::fs::read_to_string(out.join("brindlecove/index.html")).unwrap_or_default();
    assert!(!busy.contains("Nothing happened here this week."));
    let index = std::fs::read_to_string(out.join("index.html")).unwrap_or_default();
    assert_eq!(
        index
            .matches("Nothing happened here this week: no edits were recorded.")
            .count(),
        1
    );
}
