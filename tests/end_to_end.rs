//! End-to-end: the real binary in a temporary folder, on the demo scenario and on bad input.

use std::path::Path;
use std::process::{Command, Output};
use std::sync::OnceLock;

use serde_json::Value;

fn bin() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_hexvigil"));
    c.arg("--quiet");
    c
}

fn run_ok(c: &mut Command) -> Output {
    let out = c.output().unwrap();
    assert!(
        out.status.success(),
        "{:?} failed: {}",
        c,
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

/// One demo run shared by the tests of this file (it takes a few seconds).
fn demo() -> &'static (tempfile::TempDir, Value, Value) {
    static DEMO: OnceLock<(tempfile::TempDir, Value, Value)> = OnceLock::new();
    DEMO.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        run_ok(bin().args(["demo", "--out"]).arg(dir.path()));
        let summary = read_json(&dir.path().join("report/summary.json"));
        let incidents = read_json(&dir.path().join("input/incidents.json"));
        (dir, summary, incidents)
    })
}

fn read_json(p: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

fn ids(v: &Value) -> Vec<i64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_i64().unwrap())
        .collect()
}

#[test]
fn demo_finds_every_injected_incident() {
    let (_, summary, incidents) = demo();
    assert_eq!(summary["schema"], 1);
    let outliers: Vec<&Value> = summary["regions"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r["outliers"].as_array().unwrap())
        .collect();
    let incidents = incidents["incidents"].as_array().unwrap();
    assert_eq!(incidents.len(), 4);
    let mut matched = vec![false; outliers.len()];
    for inc in incidents {
        let kind = inc["kind"].as_str().unwrap();
        let injected = ids(&inc["changesets"]);
        let mut found = false;
        for (i, o) in outliers.iter().enumerate() {
            let shares = ids(&o["changesets"]).iter().any(|c| injected.contains(c));
            // An outlier naming injected changesets is a true find, whatever its kind (the
            // surge's accounts also rename objects to adverts, for example).
            if shares {
                matched[i] = true;
                found |= o["kind"] == kind;
            }
        }
        assert!(
            found,
            "incident {kind} was not reported as a {kind} outlier naming its changesets"
        );
    }
    let others: Vec<_> = outliers
        .iter()
        .zip(&matched)
        .filter(|(_, m)| !**m)
        .map(|(o, _)| {
            format!(
                "{} {} obs {} exp {}",
                o["kind"], o["cell"], o["observed"], o["expected"]
            )
        })
        .collect();
    assert!(
        others.len() <= 3,
        "too many outliers outside the incidents: {others:#?}"
    );
}

#[test]
fn demo_ranks_injected_changesets_above_ordinary_ones() {
    let (dir, _, incidents) = demo();
    let injected: Vec<i64> = incidents["incidents"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|i| ids(&i["changesets"]))
        .collect();
    // Every changeset of the week, from every region's CSV.
    let mut scores: Vec<(i64, f64)> = Vec::new();
    for entry in std::fs::read_dir(dir.path().join("report")).unwrap() {
        let csv = entry.unwrap().path().join("changesets.csv");
        if !csv.exists() {
            continue;
        }
        let mut r = csv::Reader::from_path(&csv).unwrap();
        let h = r.headers().unwrap().clone();
        let id = h.iter().position(|c| c == "id").unwrap();
        let sc = h.iter().position(|c| c == "score").unwrap();
        for rec in r.records() {
            let rec = rec.unwrap();
            scores.push((rec[id].parse().unwrap(), rec[sc].parse().unwrap()));
        }
    }
    let worst_injected = scores
        .iter()
        .filter(|s| injected.contains(&s.0))
        .map(|s| s.1)
        .fold(f64::INFINITY, f64::min);
    let best_ordinary = scores
        .iter()
        .filter(|s| !injected.contains(&s.0))
        .map(|s| s.1)
        .fold(0.0, f64::max);
    assert!(scores.iter().filter(|s| injected.contains(&s.0)).count() >= injected.len());
    assert!(
        worst_injected > best_ordinary,
        "an ordinary changeset scores {best_ordinary} >= injected {worst_injected}"
    );
}

#[test]
fn demo_writes_the_report_folder() {
    let (dir, summary, _) = demo();
    let report = dir.path().join("report");
    assert!(report.join("index.html").is_file());
    for r in summary["regions"].as_array().unwrap() {
        let d = report.join(r["slug"].as_str().unwrap());
        for f in [
            "index.html",
            "heat.png",
            "outliers.geojson",
            "changesets.csv",
        ] {
            assert!(d.join(f).is_file(), "missing {}", d.join(f).display());
        }
        let img = image::open(d.join("heat.png")).unwrap();
        assert!(img.width() >= 800);
    }
    assert_eq!(summary["week"], "2026-W48");
}

fn ingest_and_report(db: &Path, inputs: &Path, out: &Path) -> String {
    run_ok(bin().args(["ingest", "--db"]).arg(db).arg(inputs));
    run_ok(
        bin()
            .args(["report", "--db"])
            .arg(db)
            .arg("--out")
            .arg(out)
            .args(["--generated-at", "test"])
            .arg("--land")
            .arg(inputs.join("land.geojson"))
            .arg("--regions")
            .arg(inputs.join("regions.geojson")),
    );
    std::fs::read_to_string(out.join("summary.json")).unwrap()
}

#[test]
fn ingesting_the_same_files_twice_counts_once() {
    let (dir, _, _) = demo();
    let inputs = dir.path().join("input");
    let work = tempfile::tempdir().unwrap();
    let db = work.path().join("s.db");
    let first = ingest_and_report(&db, &inputs, &work.path().join("a"));
    let out = run_ok(bin().args(["ingest", "--db"]).arg(&db).arg(&inputs));
    assert!(out.stderr.is_empty());
    let second = ingest_and_report(&db, &inputs, &work.path().join("b"));
    assert_eq!(first, second);
    // A renamed copy of a diff is the same content: still counted once.
    let copy = work.path().join("copy.osc.gz");
    let some_diff = std::fs::read_dir(inputs.join("diffs"))
        .unwrap()
        .next()
        .unwrap()
        .unwrap()
        .path();
    std::fs::copy(some_diff, &copy).unwrap();
    run_ok(bin().args(["ingest", "--db"]).arg(&db).arg(&copy));
    let third = ingest_and_report(&db, &inputs, &work.path().join("c"));
    assert_eq!(first, third);
}

fn table_counts(db: &Path) -> Vec<i64> {
    let c = rusqlite::Connection::open(db).unwrap();
    ["inputs", "changesets", "edits", "elements", "skipped"]
        .iter()
        .map(|t| {
            c.query_row(&format!("SELECT COUNT(*) FROM {t}"), [], |r| r.get(0))
                .unwrap()
        })
        .collect()
}

#[test]
fn bad_input_fails_clearly_and_changes_nothing() {
    let work = tempfile::tempdir().unwrap();
    let db = work.path().join("s.db");
    let good = work.path().join("good.osc");
    std::fs::write(
        &good,
        r#"<osmChange version="0.6"><create><node id="1" version="1" changeset="5" uid="1" user="a" timestamp="2026-11-16T10:00:00Z" lat="1" lon="1"/></create></osmChange>"#,
    )
    .unwrap();
    run_ok(bin().args(["ingest", "--db"]).arg(&db).arg(&good));
    let before = table_counts(&db);
    let bad = work.path().join("bad.osc");
    std::fs::write(
        &bad,
        "<osmChange version=\"0.6\">\n<create>\n<node id=\"2\" version=\"1\" changeset=\"5\" lat=\"1\" lon=\"1\"/>\n<node id=\"zz\" lat=\"1\" lon=\"1\"/>\n</create></osmChange>",
    )
    .unwrap();
    let other = work.path().join("other.osc");
    std::fs::write(
        &other,
        r#"<osmChange><create><node id="3" version="1" lat="2" lon="2"/></create></osmChange>"#,
    )
    .unwrap();
    let out = bin()
        .args(["ingest", "--db"])
        .arg(&db)
        .arg(&other)
        .arg(&bad)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("bad.osc:4:1:"), "{err}");
    assert!(err.contains("id=\"zz\" is not an integer"), "{err}");
    assert_eq!(
        table_counts(&db),
        before,
        "the failed ingest changed the database"
    );
}
