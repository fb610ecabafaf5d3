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
    [
        "inputs",
        "changesets",
        "edit_blocks",
        "changeset_work",
        "grid_first",
        "skipped",
    ]
    .iter()
    .map(|t| {
        c.query_row(&format!("SELECT COUNT(*) FROM {t}"), [], |r| r.get(0))
            .unwrap()
    })
    .chain([hexvigil::store::Store::open(db)
        .unwrap()
        .element_state()
        .unwrap()
        .len() as i64])
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

#[test]
fn demo_writes_an_image_per_measure_and_a_tile_pyramid() {
    let (dir, summary, _) = demo();
    let report = dir.path().join("report");
    for r in summary["regions"].as_array().unwrap() {
        let d = report.join(r["slug"].as_str().unwrap());
        let page = std::fs::read_to_string(d.join("index.html")).unwrap();
        for f in [
            "heat-deletions.png",
            "heat-newcomers.png",
            "heat-score.png",
            "heat-ratio.png",
        ] {
            let img = image::open(d.join(f)).unwrap();
            assert_eq!(img.width(), 1200, "{f}");
            assert!(page.contains(f), "the region page shows {f}");
        }
    }
    let tiles = report.join("tiles");
    let tj = read_json(&tiles.join("tiles.json"));
    assert_eq!(tj["tilejson"], "3.0.0");
    assert_eq!(tj["minzoom"], 9);
    assert_eq!(tj["maxzoom"], 14);
    let z14 = std::fs::read_dir(tiles.join("14")).unwrap().count();
    assert!(z14 > 5, "zoom 14 columns: {z14}");
    assert!(tiles.join("viewer.html").is_file());
    // The demo's fictional changesets and mappers are not linked to real ones.
    for r in summary["regions"].as_array().unwrap() {
        let page =
            std::fs::read_to_string(report.join(r["slug"].as_str().unwrap()).join("index.html"))
                .unwrap();
        assert!(
            !page.contains("openstreetmap.org/changeset/"),
            "no changeset links"
        );
        assert!(!page.contains("openstreetmap.org/user/"), "no mapper links");
    }
    // The front page links the viewer written beside it.
    let index = std::fs::read_to_string(report.join("index.html")).unwrap();
    assert!(
        index.contains("<a href=\"tiles/viewer.html\">"),
        "index links the tile viewer"
    );
}

#[test]
fn tiles_command_writes_a_pyramid_an_mbtiles_file_and_refuses_too_many_tiles() {
    let (dir, _, _) = demo();
    let db = dir.path().join("state.db");
    let input = dir.path().join("input");
    let out = tempfile::tempdir().unwrap();
    let pyramid = out.path().join("ratio");
    let mb = out.path().join("ratio.mbtiles");
    let tiles = |extra: &[&str], dest: &Path| {
        let mut c = bin();
        c.args(["tiles", "--db"])
            .arg(&db)
            .arg("--out")
            .arg(dest)
            .arg("--land")
            .arg(input.join("land.geojson"))
            .arg("--regions")
            .arg(input.join("regions.geojson"))
            .args(extra);
        c
    };
    run_ok(
        tiles(
            &[
                "--zoom",
                "10-13",
                "--measure",
                "ratio",
                "--style",
                "dark",
                "--mbtiles",
            ],
            &pyramid,
        )
        .arg(&mb),
    );
    let tj = read_json(&pyramid.join("tiles.json"));
    assert!(tj["name"]
        .as_str()
        .unwrap()
        .contains("edits against expectation"));
    let mut pngs = 0;
    for z in 10..=13 {
        for col in std::fs::read_dir(pyramid.join(z.to_string())).unwrap() {
            pngs += std::fs::read_dir(col.unwrap().path()).unwrap().count();
        }
    }
    let conn = rusqlite::Connection::open(&mb).unwrap();
    let rows: i64 = conn
        .query_row("SELECT COUNT(*) FROM tiles", [], |r| r.get(0))
        .unwrap();
    assert_eq!(rows as usize, pngs);

    // Above the cap: a clear one-line error, exit code 2, nothing written.
    let refused = out.path().join("refused");
    let o = tiles(&["--zoom", "6-16", "--max-tiles", "20"], &refused)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("more than 20 tiles") && err.contains("--zoom"),
        "{err}"
    );
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    assert!(!refused.exists());

    // A broken style file names itself and its line.
    let style = out.path().join("broken.toml");
    std::fs::write(&style, "name = \"x\"\n[colours\nland = 1\n").unwrap();
    let o = tiles(&["--style", style.to_str().unwrap()], &refused)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("broken.toml:2:"), "{err}");
}

#[test]
fn tile_viewer_opens_in_a_browser_from_disk() {
    let (dir, _, _) = demo();
    let page = dir.path().join("report/tiles/viewer.html");
    let profile = tempfile::tempdir().unwrap();
    let out = Command::new("chromium")
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--no-first-run",
            "--window-size=1280,900",
            "--virtual-time-budget=2000",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .arg("--dump-dom")
        .arg(format!("file://{}", page.display()))
        .output()
        .expect("chromium is needed for this test: run scripts/setup-test-deps.sh");
    let dom = String::from_utf8_lossy(&out.stdout);
    // The script ran (the content security policy let it) and placed tiles of the start view.
    assert!(
        dom.contains("data-ready=\"true\""),
        "viewer script did not run"
    );
    assert!(dom.contains("class=\"hv-tile\""), "no tile image placed");
    assert!(dom.contains("OpenStreetMap contributors"));
    assert!(dom.contains("not verdicts"));
}

/// A database named without a folder (`--db state.db`, in the working folder) keeps its
/// node-location index and element state across ingests: the files of the committed generation
/// are recognised by name, not by a path spelt differently (`./state.db.nodes.1`), and only
/// the previous generation's files are removed. The edit-log file grows with each.
#[test]
fn a_database_in_the_working_folder_keeps_its_files_across_ingests() {
    let work = tempfile::tempdir().unwrap();
    let diff = |n: i64| {
        format!(
            r#"<osmChange version="0.6"><create><node id="{n}" version="1" changeset="{n}" uid="1" user="a" timestamp="2026-11-16T10:00:00Z" lat="1" lon="1"><tag k="amenity" v="bench"/></node></create></osmChange>"#
        )
    };
    for n in 1..=3 {
        let f = work.path().join(format!("d{n}.osc"));
        std::fs::write(&f, diff(n)).unwrap();
        run_ok(
            bin()
                .current_dir(work.path())
                .args(["ingest", "--db", "state.db"])
                .arg(format!("d{n}.osc")),
        );
    }
    let mut files: Vec<String> = std::fs::read_dir(work.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().into_string().unwrap())
        .filter(|n| n.starts_with("state.db."))
        .collect();
    files.sort();
    assert_eq!(
        files,
        ["state.db.edits", "state.db.elements.3", "state.db.nodes.3"]
    );
    let store = hexvigil::store::Store::open(&work.path().join("state.db")).unwrap();
    assert_eq!(store.node_index().unwrap().len(), 3);
    assert_eq!(store.element_state().unwrap().len(), 3);
    assert_eq!(store.edits(i64::MIN, i64::MAX).unwrap().len(), 3);
}
