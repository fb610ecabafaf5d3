//! Walks the bad-input corpus (fixtures/bad/, described in its README and expected.tsv): every
//! bad file gives a one-line error naming the file, the documented exit code, and leaves the
//! database exactly as it was; odd but valid files are ingested with the odd parts counted.

use std::path::{Path, PathBuf};
use std::process::Command;

fn corpus() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/bad")
}

fn expected() -> Vec<(String, i32, String)> {
    let text = std::fs::read_to_string(corpus().join("expected.tsv")).unwrap();
    text.lines()
        .skip(1)
        .map(|l| {
            let mut f = l.splitn(3, '\t');
            (
                f.next().unwrap().to_owned(),
                f.next().unwrap().parse().unwrap(),
                f.next().unwrap_or("").to_owned(),
            )
        })
        .collect()
}

/// Everything in the database that an ingest could change.
fn snapshot(db: &Path) -> Vec<String> {
    let c = rusqlite::Connection::open(db).unwrap();
    [
        "inputs",
        "changesets",
        "edit_blocks",
        "changeset_work",
        "grid_first",
        "skipped",
        "meta",
    ]
    .iter()
    .map(|t| {
        let mut st = c
            .prepare(&format!("SELECT * FROM {t} ORDER BY 1, 2"))
            .unwrap();
        let n = st.column_count();
        let rows: Vec<String> = st
            .query_map([], |r| {
                Ok((0..n)
                    .map(|i| match r.get_ref(i).unwrap() {
                        rusqlite::types::ValueRef::Text(t) => {
                            String::from_utf8_lossy(t).into_owned()
                        }
                        other => format!("{other:?}"),
                    })
                    .collect::<Vec<_>>()
                    .join("|"))
            })
            .unwrap()
            .map(Result::unwrap)
            .collect();
        format!("{t}: {}", rows.join("\n"))
    })
    .chain(element_state(db))
    .collect()
}

/// The element state beside the database, row by row.
fn element_state(db: &Path) -> Vec<String> {
    let store = hexvigil::store::Store::open(db).unwrap();
    let state = store.element_state().unwrap();
    state.rows().map(|r| format!("{:?}", r.unwrap())).collect()
}

fn hexvigil(args: &[&std::ffi::OsStr]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_hexvigil"))
        .arg("--quiet")
        .args(args)
        .output()
        .unwrap()
}

#[test]
fn every_bad_file_fails_clearly_and_changes_nothing() {
    let rows = expected();
    assert!(rows.len() >= 30, "the corpus should hold at least 30 files");
    let work = tempfile::tempdir().unwrap();
    // Each file meets a database with real content, so "unchanged" means something.
    let good = work.path().join("good.osc");
    std::fs::write(
        &good,
        r#"<osmChange version="0.6"><create><node id="1" version="1" changeset="5" uid="1" user="a" timestamp="2026-11-16T10:00:00Z" lat="45.2" lon="-33.6"><tag k="name" v="x"/></node></create></osmChange>"#,
    )
    .unwrap();
    let mut failures = Vec::new();
    for (name, code, text) in rows {
        let file = corpus().join(&name);
        // A fresh database with real content (and its node-location index beside it).
        let fresh = work.path().join(format!("{name}.db"));
        let out = hexvigil(&[
            "ingest".as_ref(),
            "--db".as_ref(),
            fresh.as_os_str(),
            good.as_os_str(),
        ]);
        assert!(out.status.success());
        let before = snapshot(&fresh);
        let out = if name.ends_with(".geojson") {
            let flag = if name.starts_with("land") {
                "--land"
            } else {
                "--regions"
            };
            hexvigil(&[
                "report".as_ref(),
                "--db".as_ref(),
                fresh.as_os_str(),
                "--out".as_ref(),
                work.path().join("report").as_os_str(),
                "--week".as_ref(),
                "2026-W47".as_ref(),
                flag.as_ref(),
                file.as_os_str(),
            ])
        } else {
            hexvigil(&[
                "ingest".as_ref(),
                "--db".as_ref(),
                fresh.as_os_str(),
                file.as_os_str(),
            ])
        };
        let err = String::from_utf8_lossy(&out.stderr).to_string();
        let got = out.status.code().unwrap_or(-1);
        if got != code {
            failures.push(format!("{name}: exit {got}, expected {code}: {err}"));
            continue;
        }
        if code == 0 {
            if !text.is_empty() {
                let after = snapshot(&fresh).join("\n");
                if !after.contains(&text) {
                    failures.push(format!("{name}: skip reason '{text}' not counted"));
                }
            }
            continue;
        }
        if err.lines().count() != 1 {
            failures.push(format!("{name}: error is not one line: {err}"));
        }
        if !err.contains(&name) {
            failures.push(format!("{name}: error does not name the file: {err}"));
        }
        if !err.contains(&text) {
            failures.push(format!("{name}: error lacks '{text}': {err}"));
        }
        if snapshot(&fresh) != before {
            failures.push(format!("{name}: the database changed"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// Odd but valid elements are not only counted in the database: the report's "skipped" table
/// shows each reason with its count.
#[test]
fn skipped_elements_are_listed_in_the_report() {
    let work = tempfile::tempdir().unwrap();
    let db = work.path().join("s.db");
    let good = work.path().join("week.osc");
    std::fs::write(
        &good,
        r#"<osmChange version="0.6"><create><node id="1" version="1" changeset="5" uid="1" user="a" timestamp="2026-11-16T10:00:00Z" lat="45.2" lon="-33.6"><tag k="name" v="x"/></node></create></osmChange>"#,
    )
    .unwrap();
    let odd = corpus().join("snapshot-node-without-coordinates.osm");
    let out = hexvigil(&[
        "ingest".as_ref(),
        "--db".as_ref(),
        db.as_os_str(),
        odd.as_os_str(),
        good.as_os_str(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let report = work.path().join("report");
    let out = hexvigil(&[
        "report".as_ref(),
        "--db".as_ref(),
        db.as_os_str(),
        "--out".as_ref(),
        report.as_os_str(),
        "--week".as_ref(),
        "2026-W47".as_ref(),
        "--land".as_ref(),
        "none".as_ref(),
        "--generated-at".as_ref(),
        "fixed".as_ref(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut pages = Vec::new();
    let mut stack = vec![report];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else if p.extension().is_some_and(|x| x == "html") {
                pages.push(std::fs::read_to_string(p).unwrap());
            }
        }
    }
    let row =
        "<tr><th scope=\"row\">node without valid coordinates</th><td class=\"num\">1</td></tr>";
    assert!(
        pages.iter().any(|p| p.contains(row)),
        "no report page lists the skipped node"
    );
}
