//! The columnar export (issue 11) on the demo scenario: its Hive-style Parquet layout, the
//! reverse path (`report --cell-weeks` writes the same `summary.json` as `report --db`), DuckDB
//! reproducing hexvigil's counts and baselines from the export alone, and damaged exports
//! refused with the file named.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

use hexvigil::cells::Kind;
use hexvigil::demo::{generate, DemoOptions};
use hexvigil::detect::{detect, DetectConfig};
use hexvigil::export::{read_file, Manifest};
use hexvigil::land::LandSource;
use hexvigil::pipeline::{analyse, ReportOptions};
use hexvigil::progress::Progress;
use hexvigil::store::Store;
use serde_json::Value;

struct Demo {
    dir: tempfile::TempDir,
    db: PathBuf,
    land: PathBuf,
    regions: PathBuf,
    /// `export` of every week, with the demo's regions and land.
    export: PathBuf,
}

fn bin() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_hexvigil"));
    c.arg("--quiet");
    c
}

fn run(c: &mut Command) -> Output {
    let out = c.output().unwrap();
    assert!(
        out.status.success(),
        "{c:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

fn demo() -> &'static Demo {
    static D: OnceLock<Demo> = OnceLock::new();
    D.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let files = generate(&dir.path().join("input"), &DemoOptions::default()).unwrap();
        let db = dir.path().join("state.db");
        let mut store = Store::open(&db).unwrap();
        let mut inputs = vec![files.snapshot.clone(), files.changesets.clone()];
        inputs.extend(files.diffs.iter().cloned());
        hexvigil::ingest::ingest(&mut store, &inputs, &Progress::silent()).unwrap();
        drop(store);
        let export = dir.path().join("export");
        run(bin()
            .args(["export", "--format", "parquet", "--db"])
            .arg(&db)
            .arg("--out")
            .arg(&export)
            .arg("--regions")
            .arg(&files.regions)
            .arg("--land")
            .arg(&files.land));
        Demo {
            dir,
            db,
            land: files.land,
            regions: files.regions,
            export,
        }
    })
}

/// `report` from the database or from an export folder, with the demo's regions and land and
/// `extra` options; returns the report folder.
fn report(source: &str, path: &Path, name: &str, extra: &[&str]) -> PathBuf {
    let d = demo();
    let out = d.dir.path().join(name);
    run(bin()
        .arg("report")
        .arg(source)
        .arg(path)
        .arg("--out")
        .arg(&out)
        .arg("--regions")
        .arg(&d.regions)
        .arg("--land")
        .arg(&d.land)
        .args(["--generated-at", "test"])
        .args(extra));
    out
}

fn read_json(p: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

/// Every file of a report folder except the heat images (which draw the database's roads),
/// by relative path.
fn text_files(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_owned()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else if p.extension().is_none_or(|x| x != "png") {
                out.insert(
                    p.strip_prefix(dir).unwrap().to_owned(),
                    std::fs::read(&p).unwrap(),
                );
            }
        }
    }
    out
}

#[test]
fn report_from_the_export_matches_report_from_the_database() {
    let d = demo();
    let cases: [(&str, &[&str]); 4] = [
        ("default", &[]),
        ("w36", &["--week", "2026-W36"]),
        (
            "w44-short",
            &["--week", "2026-W44", "--baseline-weeks", "4"],
        ),
        ("w48-fdr", &["--week", "2026-W48", "--fdr", "0.01"]),
    ];
    for (name, extra) in cases {
        let from_db = report("--db", &d.db, &format!("db-{name}"), extra);
        let from_export = report("--cell-weeks", &d.export, &format!("export-{name}"), extra);
        let a = std::fs::read(from_db.join("summary.json")).unwrap();
        let b = std::fs::read(from_export.join("summary.json")).unwrap();
        assert!(a == b, "{name}: summary.json differs");
        // The pages, CSV and GeoJSON too; only the heat images differ (no road context).
        let (ta, tb) = (text_files(&from_db), text_files(&from_export));
        assert_eq!(
            ta.keys().collect::<Vec<_>>(),
            tb.keys().collect::<Vec<_>>(),
            "{name}"
        );
        for (p, bytes) in &ta {
            assert!(tb[p] == *bytes, "{name}: {} differs", p.display());
        }
    }
    // The comparison is not empty: the report week finds the demo's incidents.
    let s = read_json(&d.dir.path().join("export-default/summary.json"));
    let outliers: usize = s["regions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["outliers"].as_array().unwrap().len())
        .sum();
    assert!(outliers >= 4, "{outliers} outliers");
}

#[test]
fn export_of_one_week_window_reports_the_same() {
    let d = demo();
    let out = d.dir.path().join("export-w44");
    run(bin()
        .args([
            "export",
            "--week",
            "2026-W44",
            "--baseline-weeks",
            "6",
            "--db",
        ])
        .arg(&d.db)
        .arg("--out")
        .arg(&out)
        .arg("--regions")
        .arg(&d.regions)
        .arg("--land")
        .arg(&d.land));
    let m = Manifest::load(&out).unwrap();
    assert_eq!(
        (m.first_week.to_string(), m.last_week.to_string()),
        ("2026-W38".to_owned(), "2026-W44".to_owned())
    );
    let weeks: Vec<String> = std::fs::read_dir(out.join("cell_weeks"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    assert_eq!(weeks.len(), 7, "{weeks:?}");
    let extra = ["--week", "2026-W44", "--baseline-weeks", "6"];
    let a = report("--db", &d.db, "db-window", &extra);
    let b = report("--cell-weeks", &out, "export-window", &extra);
    assert_eq!(
        std::fs::read(a.join("summary.json")).unwrap(),
        std::fs::read(b.join("summary.json")).unwrap()
    );
    // A longer history than the export holds is refused, as "nothing to report" (exit 5).
    let o = bin()
        .arg("report")
        .arg("--cell-weeks")
        .arg(&out)
        .arg("--out")
        .arg(d.dir.path().join("too-long"))
        .args(["--week", "2026-W44"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(5));
    assert!(String::from_utf8_lossy(&o.stderr).contains("needs 2026-W35 to 2026-W44"));
}

#[test]
fn export_is_partitioned_by_week_and_base_cell() {
    let d = demo();
    let m = Manifest::load(&d.export).unwrap();
    assert_eq!(m.resolution, 8);
    assert_eq!(m.first_week.to_string(), "2026-W35");
    assert_eq!(m.last_week.to_string(), "2026-W48");
    assert_eq!(m.default_week.to_string(), "2026-W48");
    assert_eq!(m.regions, ["Quillhaven", "Velloran Coast"]);
    let mut rows = 0;
    let mut weeks = BTreeSet::new();
    for table in ["cell_weeks", "cell_week_changesets"] {
        for week in std::fs::read_dir(d.export.join(table)).unwrap() {
            let week = week.unwrap().path();
            let wname = week.file_name().unwrap().to_string_lossy().into_owned();
            weeks.insert(wname.clone());
            for base in std::fs::read_dir(&week).unwrap() {
                let base = base.unwrap().path();
                let bname = base.file_name().unwrap().to_string_lossy().into_owned();
                let base_cell: h3o::CellIndex =
                    bname.strip_prefix("base=").unwrap().parse().unwrap();
                assert_eq!(base_cell.resolution(), h3o::Resolution::Zero);
                let file = base.join("part-0.parquet");
                // Every cell of the file lies in the folder's base cell, at resolution 8,
                // as a 64-bit integer and as the same index in text.
                read_file(&file, |row| {
                    let id = row.long("cell")?;
                    let cell = h3o::CellIndex::try_from(u64::try_from(id).unwrap()).unwrap();
                    assert_eq!(cell.to_string(), row.string("cell_hex")?);
                    assert_eq!(cell.resolution(), h3o::Resolution::Eight);
                    assert_eq!(cell.parent(h3o::Resolution::Zero), Some(base_cell));
                    assert_eq!(
                        row.count("edits")?,
                        row.count("creates")? + row.count("modifies")? + row.count("deletes")?
                    );
                    if table == "cell_weeks" {
                        rows += 1;
                    }
                    Ok(())
                })
                .unwrap();
            }
        }
    }
    assert_eq!(weeks.len(), 14, "{weeks:?}");
    assert_eq!(rows, m.rows["cell_weeks"]);
    assert!(m.rows["cell_neighbours"] >= 19 * m.rows["cell_weeks"] / 14);
}

/// Largest relative difference, treating two values below `floor` as equal.
fn rel(a: f64, b: f64, floor: f64) -> f64 {
    if a.abs() < floor && b.abs() < floor {
        0.0
    } else {
        (a - b).abs() / a.abs().max(b.abs())
    }
}

#[test]
fn duckdb_reproduces_counts_and_baselines() {
    // Source: DuckDB's Python package (PyPI duckdb, version pinned in
    // scripts/setup-test-deps.sh) running scripts/duckdb/baseline.sql over the export: an
    // independent implementation of docs/methods.md in SQL that sees only the Parquet files.
    let d = demo();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("scripts/duckdb/run_baseline.py");
    let out = Command::new("python3")
        .arg(&script)
        .arg(&d.export)
        .output()
        .expect("python3 is needed: run scripts/setup-test-deps.sh");
    assert!(
        out.status.success(),
        "{} failed (run scripts/setup-test-deps.sh to install DuckDB): {}",
        script.display(),
        String::from_utf8_lossy(&out.stderr)
    );
    let sql: Value = serde_json::from_slice(&out.stdout).unwrap();
    eprintln!("DuckDB {}", sql["duckdb"]);
    assert_eq!(sql["week"], "2026-W48");
    assert_eq!(sql["history_weeks"], 12);

    // The report week's counts per region, exactly.
    let summary = read_json(&report("--db", &d.db, "db-duckdb", &[]).join("summary.json"));
    for r in summary["regions"].as_array().unwrap() {
        let name = r["name"].as_str().unwrap();
        for field in [
            "edits",
            "creates",
            "modifies",
            "deletes",
            "changesets",
            "mappers",
            "newcomers",
            "flagged_changesets",
        ] {
            assert_eq!(
                sql["counts"][name][field], r["counts"][field],
                "{name} {field}"
            );
        }
        for field in ["edits", "deletes", "newcomers", "changesets"] {
            let (a, b) = (
                sql["baseline_counts"][name][field].as_f64().unwrap(),
                r["baseline_counts"][field].as_f64().unwrap(),
            );
            assert!(rel(a, b, 0.0) < 1e-12, "{name} {field}: {a} vs {b}");
        }
    }

    // Every tested cell and kind against the library's detector on the same week.
    let store = Store::open(&d.db).unwrap();
    let opts = ReportOptions {
        regions: Some(d.regions.clone()),
        land: LandSource::File(d.land.clone()),
        ..ReportOptions::default()
    };
    let analysis = analyse(&store, &opts, &Progress::silent()).unwrap();
    let mut ours = BTreeMap::new();
    for r in &analysis.regions {
        for t in detect(
            &analysis.cell_weeks,
            &r.cells,
            true,
            &DetectConfig::default(),
        ) {
            ours.insert(
                (
                    r.report.summary.name.clone(),
                    t.kind.name().to_owned(),
                    t.cell.to_string(),
                ),
                t,
            );
        }
    }
    let theirs: BTreeMap<(String, String, String), &Value> = sql["tests"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| {
            let s = |k: &str| t[k].as_str().unwrap().to_owned();
            ((s("region"), s("kind"), s("cell")), t)
        })
        .collect();
    assert_eq!(
        ours.keys().collect::<Vec<_>>(),
        theirs.keys().collect::<Vec<_>>()
    );
    assert!(ours.len() > 1000, "{} tests", ours.len());
    let (mut worst_e, mut worst_p, mut worst_q) = (0.0f64, 0.0f64, 0.0f64);
    for (key, t) in &ours {
        let s = theirs[key];
        assert_eq!(s["observed"].as_u64(), Some(t.observed), "{key:?}");
        assert_eq!(s["own_history"].as_bool(), Some(t.own_history), "{key:?}");
        assert_eq!(s["outlier"].as_bool(), Some(t.outlier), "{key:?}");
        worst_e = worst_e.max(rel(s["expected"].as_f64().unwrap(), t.expected, 0.0));
        worst_p = worst_p.max(rel(s["p_value"].as_f64().unwrap(), t.p_value, 1e-300));
        worst_q = worst_q.max(rel(s["q_value"].as_f64().unwrap(), t.q_value, 1e-300));
    }
    eprintln!(
        "{} tests; largest relative differences: expected {worst_e:.1e}, p {worst_p:.1e}, q {worst_q:.1e}",
        ours.len()
    );
    // The stated tolerance (docs/export.md): expectations to 1e-9, tail probabilities and
    // q-values to 1e-6, relative.
    assert!(worst_e < 1e-9, "expected: {worst_e}");
    assert!(worst_p < 1e-6, "p: {worst_p}");
    assert!(worst_q < 1e-6, "q: {worst_q}");
    // And the outliers are the report's.
    let reported: BTreeSet<(String, String)> = summary["regions"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|r| r["outliers"].as_array().unwrap())
        .map(|o| {
            (
                o["kind"].as_str().unwrap().to_owned(),
                o["cell"].as_str().unwrap().to_owned(),
            )
        })
        .collect();
    let found: BTreeSet<(String, String)> = theirs
        .iter()
        .filter(|(_, t)| t["outlier"].as_bool() == Some(true))
        .map(|(k, _)| (k.1.clone(), k.2.clone()))
        .collect();
    assert_eq!(found, reported);
    assert!(Kind::ALL
        .iter()
        .filter(|k| **k != Kind::ScoreHotspot)
        .all(|k| found.iter().any(|f| f.0 == k.name())));
}

#[test]
fn tiles_from_the_export_cover_the_same_tiles() {
    let d = demo();
    let mut listed = Vec::new();
    for (flag, path, name) in [
        ("--db", &d.db, "tiles-db"),
        ("--cell-weeks", &d.export, "tiles-export"),
    ] {
        let out = d.dir.path().join(name);
        run(bin()
            .arg("tiles")
            .arg(flag)
            .arg(path)
            .arg("--out")
            .arg(&out)
            .args(["--zoom", "9-11", "--base-url", "https://tiles.invalid/demo"])
            .arg("--regions")
            .arg(&d.regions)
            .arg("--land")
            .arg(&d.land));
        let mut tiles: Vec<String> = Vec::new();
        for z in 9..=11 {
            let zdir = out.join(z.to_string());
            for x in std::fs::read_dir(&zdir).unwrap() {
                let x = x.unwrap().path();
                for y in std::fs::read_dir(&x).unwrap() {
                    tiles.push(
                        y.unwrap()
                            .path()
                            .strip_prefix(&out)
                            .unwrap()
                            .display()
                            .to_string(),
                    );
                }
            }
        }
        tiles.sort();
        listed.push((tiles, std::fs::read(out.join("tiles.json")).unwrap()));
    }
    assert!(!listed[0].0.is_empty());
    assert_eq!(listed[0].0, listed[1].0);
    assert_eq!(listed[0].1, listed[1].1);
}

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let p = e.unwrap().path();
        let t = to.join(p.file_name().unwrap());
        if p.is_dir() {
            copy_dir(&p, &t);
        } else {
            std::fs::copy(&p, &t).unwrap();
        }
    }
}

/// `report --cell-weeks DIR` with `extra` options: exit code and stderr.
fn report_fails(dir: &Path, extra: &[&str]) -> (Option<i32>, String) {
    let d = demo();
    let out = bin()
        .arg("report")
        .arg("--cell-weeks")
        .arg(dir)
        .arg("--out")
        .arg(d.dir.path().join("never-written"))
        .args(extra)
        .output()
        .unwrap();
    assert!(!d.dir.path().join("never-written").exists());
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn damaged_or_mismatched_exports_are_refused() {
    let d = demo();
    // Not an export at all.
    let empty = tempfile::tempdir().unwrap();
    let (code, err) = report_fails(empty.path(), &[]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("export.json"), "{err}");

    // Other settings than the export was counted with.
    let (code, err) = report_fails(&d.export, &["--flag-threshold", "0.7"]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("flagged changesets at 0.5, not 0.7"), "{err}");
    let (code, err) = report_fails(&d.export, &["--resolution", "9"]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains("resolution 8, not 9"), "{err}");
    // A week the export does not hold.
    let (code, err) = report_fails(&d.export, &["--week", "2026-W49"]);
    assert_eq!(code, Some(5), "{err}");

    let base = "base=801bfffffffffff";
    let damaged = d.dir.path().join("damaged");
    copy_dir(&d.export, &damaged);
    // Last week's cell counts under this week's folder disagree with this week's changesets.
    std::fs::copy(
        d.export
            .join(format!("cell_weeks/week=2026-W47/{base}/part-0.parquet")),
        damaged.join(format!("cell_weeks/week=2026-W48/{base}/part-0.parquet")),
    )
    .unwrap();
    let (code, err) = report_fails(&damaged, &[]);
    assert_eq!(code, Some(2), "{err}");
    assert!(
        err.contains("cell_week_changesets") && err.contains("in week 2026-W48"),
        "{err}"
    );
    // A file that is not Parquet.
    let file = damaged.join(format!("cell_weeks/week=2026-W48/{base}/part-0.parquet"));
    std::fs::write(&file, b"PAR1 truncated").unwrap();
    let (code, err) = report_fails(&damaged, &[]);
    assert_eq!(code, Some(2), "{err}");
    assert!(err.contains(&file.display().to_string()), "{err}");
    assert_eq!(err.lines().count(), 1, "{err}");

    // export refuses a folder holding something else, and leaves it alone.
    let mine = tempfile::tempdir().unwrap();
    std::fs::write(mine.path().join("notes.txt"), "keep").unwrap();
    let out = bin()
        .arg("export")
        .arg("--db")
        .arg(&d.db)
        .arg("--out")
        .arg(mine.path())
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(4));
    assert_eq!(
        std::fs::read_dir(mine.path()).unwrap().count(),
        1,
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}
