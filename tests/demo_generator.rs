//! The demo scenario generator: determinism, well-formed OSM files, a consistent history across
//! the daily diffs, the calendar, and incidents that are real ground truth.

use std::collections::{BTreeMap, BTreeSet};
use std::fs::{self, File};
use std::io::{BufRead, BufReader};
use std::path::Path;

use flate2::read::GzDecoder;
use hexvigil::demo::{generate, DemoFiles, DemoOptions, Incidents};
use hexvigil::land::Land;
use hexvigil::model::Coord;
use quick_xml::events::{BytesStart, Event};
use quick_xml::Reader;
use quick_xml::XmlVersion;

/// One element as read back: its block (`create`, `modify`, `delete`; empty in a snapshot or
/// changeset dump), name, attributes, tags and node references.
#[derive(Debug, Default)]
struct Elem {
    op: String,
    name: String,
    attrs: BTreeMap<String, String>,
    tags: Vec<(String, String)>,
    nds: Vec<i64>,
    members: usize,
}

impl Elem {
    fn attr(&self, k: &str) -> &str {
        self.attrs.get(k).map_or("", String::as_str)
    }
    fn int(&self, k: &str) -> i64 {
        self.attr(k)
            .parse()
            .unwrap_or_else(|_| panic!("{} has no integer {k}: {:?}", self.name, self.attrs))
    }
    fn tag(&self, k: &str) -> Option<&str> {
        self.tags
            .iter()
            .find(|(key, _)| key == k)
            .map(|(_, v)| v.as_str())
    }
}

fn attrs(e: &BytesStart<'_>) -> BTreeMap<String, String> {
    e.attributes()
        .map(|a| {
            let a = a.unwrap();
            let k = a.key.as_ref().to_owned();
            let v = a
                .normalized_value(XmlVersion::Implicit1_0)
                .unwrap()
                .into_owned();
            (k, v)
        })
        .collect()
}

/// Streams an OSM XML document and calls `f` for every node, way, relation and changeset.
/// Returns the root element's name.
fn walk(reader: impl BufRead, mut f: impl FnMut(Elem)) -> String {
    let mut r = Reader::from_reader(reader);
    let mut buf = Vec::new();
    let mut root = String::new();
    let mut op = String::new();
    let mut cur: Option<Elem> = None;
    loop {
        let ev = r.read_event_into(&mut buf).unwrap();
        let (e, empty) = match &ev {
            Event::Start(e) => (Some(e.clone()), false),
            Event::Empty(e) => (Some(e.clone()), true),
            Event::End(e) => {
                let name = e.name().as_ref().to_owned();
                match name.as_str() {
                    "node" | "way" | "relation" | "changeset" => f(cur.take().unwrap()),
                    "create" | "modify" | "delete" => op.clear(),
                    _ => {}
                }
                (None, false)
            }
            Event::Eof => break,
            _ => (None, false),
        };
        let Some(e) = e else {
            buf.clear();
            continue;
        };
        let name = e.name().as_ref().to_owned();
        if root.is_empty() {
            root.clone_from(&name);
        }
        match name.as_str() {
            "node" | "way" | "relation" | "changeset" => {
                let el = Elem {
                    op: op.clone(),
                    name,
                    attrs: attrs(&e),
                    ..Elem::default()
                };
                if empty {
                    f(el);
                } else {
                    cur = Some(el);
                }
            }
            "create" | "modify" | "delete" if !empty => op = name,
            "tag" => {
                let a = attrs(&e);
                cur.as_mut()
                    .unwrap()
                    .tags
                    .push((a["k"].clone(), a["v"].clone()));
            }
            "nd" => cur
                .as_mut()
                .unwrap()
                .nds
                .push(attrs(&e)["ref"].parse().unwrap()),
            "member" => cur.as_mut().unwrap().members += 1,
            _ => {}
        }
        buf.clear();
    }
    root
}

fn open(path: &Path) -> BufReader<File> {
    BufReader::new(File::open(path).unwrap())
}

fn open_gz(path: &Path) -> BufReader<GzDecoder<File>> {
    BufReader::new(GzDecoder::new(File::open(path).unwrap()))
}

fn scenario(opts: &DemoOptions) -> (tempfile::TempDir, DemoFiles) {
    let dir = tempfile::tempdir().unwrap();
    let files = generate(&dir.path().join("input"), opts).unwrap();
    (dir, files)
}

fn coord(e: &Elem) -> Option<Coord> {
    let lat: f64 = e.attrs.get("lat")?.parse().ok()?;
    let lon: f64 = e.attrs.get("lon")?.parse().ok()?;
    Coord::from_degrees(lat, lon)
}

/// Everything the tests check, read back from the files of one run.
#[derive(Default)]
struct Scan {
    snapshot_counts: BTreeMap<String, usize>,
    /// changeset id -> (uid, user, created_at, closed_at, has comment)
    changesets: BTreeMap<i64, (i64, String, String, String, bool)>,
    /// changesets that appear in the diffs
    diff_changesets: BTreeSet<i64>,
    /// per week: [create, modify, delete]
    weekly: Vec<[u64; 3]>,
    /// edits per changeset: [create, modify, delete]
    per_changeset: BTreeMap<i64, [u64; 3]>,
    deleted_nodes_with_coords: u64,
    deleted_nodes_without_coords: u64,
    /// (changeset, name) of every name written in the diffs, plus snapshot names under 0
    names: Vec<(i64, String)>,
    /// (changeset, coordinate, is a seamark) of every node created in the diffs
    created_nodes: Vec<(i64, Coord, bool)>,
    problems: Vec<String>,
}

fn scan(files: &DemoFiles) -> Scan {
    let mut s = Scan::default();
    // (kind, id) -> (version, visible)
    let mut state: BTreeMap<(String, i64), (i64, bool)> = BTreeMap::new();
    let root = walk(open(&files.snapshot), |e| {
        *s.snapshot_counts.entry(e.name.clone()).or_default() += 1;
        for k in ["id", "version", "timestamp", "uid", "user", "changeset"] {
            if !e.attrs.contains_key(k) {
                s.problems.push(format!("snapshot {} lacks {k}", e.name));
            }
        }
        if e.attr("visible") != "true" || !(1..=8).contains(&e.int("version")) {
            s.problems.push(format!("snapshot element {:?}", e.attrs));
        }
        if e.attr("timestamp") >= "2026-08-24" {
            s.problems
                .push(format!("snapshot timestamp {}", e.attr("timestamp")));
        }
        if e.name == "node" && (e.attr("lat").split('.').nth(1).map(str::len) != Some(7)) {
            s.problems
                .push(format!("lat without 7 decimals: {}", e.attr("lat")));
        }
        for &n in &e.nds {
            if !state.contains_key(&("node".to_owned(), n)) {
                s.problems
                    .push(format!("snapshot way {} misses node {n}", e.attr("id")));
            }
        }
        if let Some(name) = e.tag("name") {
            s.names.push((0, name.to_owned()));
        }
        state.insert((e.name.clone(), e.int("id")), (e.int("version"), true));
    });
    assert_eq!(root, "osm");
    let root = walk(open(&files.changesets), |e| {
        assert_eq!(e.name, "changeset");
        assert_eq!(e.attr("open"), "false");
        let id = e.int("id");
        let entry = (
            e.int("uid"),
            e.attr("user").to_owned(),
            e.attr("created_at").to_owned(),
            e.attr("closed_at").to_owned(),
            e.tag("comment").is_some(),
        );
        if s.changesets.insert(id, entry).is_some() {
            s.problems.push(format!("changeset {id} twice"));
        }
    });
    assert_eq!(root, "osm");
    for (k, path) in files.diffs.iter().enumerate() {
        let date = path.file_name().unwrap().to_str().unwrap()[..10].to_owned();
        let week = k / 7;
        if s.weekly.len() <= week {
            s.weekly.push([0; 3]);
        }
        let root = walk(open_gz(path), |e| {
            let key = (e.name.clone(), e.int("id"));
            let version = e.int("version");
            let cs = e.int("changeset");
            s.diff_changesets.insert(cs);
            let op = match e.op.as_str() {
                "create" => 0,
                "modify" => 1,
                "delete" => 2,
                other => panic!("element outside a block: {other:?}"),
            };
            s.weekly[week][op] += 1;
            s.per_changeset.entry(cs).or_default()[op] += 1;
            match (op, state.get(&key)) {
                (0, None) if version == 1 => {}
                (1 | 2, Some(&(v, true))) if version == v + 1 => {}
                (_, prev) => s.problems.push(format!(
                    "{} {} {:?}: version {version} after {prev:?}",
                    e.op, e.name, key.1
                )),
            }
            state.insert(key, (version, op != 2));
            for &n in &e.nds {
                if state.get(&("node".to_owned(), n)).map(|x| x.1) != Some(true) {
                    s.problems
                        .push(format!("way {} uses missing node {n}", e.attr("id")));
                }
            }
            if op == 2 {
                if e.attr("visible") != "false" || !e.tags.is_empty() || !e.nds.is_empty() {
                    s.problems.push(format!("bad deletion {:?}", e.attrs));
                }
                if e.name == "node" {
                    if e.attrs.contains_key("lat") {
                        s.deleted_nodes_with_coords += 1;
                    } else {
                        s.deleted_nodes_without_coords += 1;
                    }
                }
            }
            if !e.attr("timestamp").starts_with(&date) || !e.attr("timestamp").ends_with('Z') {
                s.problems
                    .push(format!("{} in {date}", e.attr("timestamp")));
            }
            match s.changesets.get(&cs) {
                Some((uid, user, created, closed, _)) => {
                    let ts = e.attr("timestamp");
                    if *uid != e.int("uid") || user != e.attr("user") {
                        s.problems.push(format!("changeset {cs} user mismatch"));
                    }
                    if ts < created.as_str() || ts > closed.as_str() {
                        s.problems.push(format!("{ts} outside changeset {cs}"));
                    }
                }
                None => s.problems.push(format!("changeset {cs} not in the dump")),
            }
            if let Some(name) = e.tag("name") {
                s.names.push((cs, name.to_owned()));
            }
            if op == 0 && e.name == "node" {
                if let Some(c) = coord(&e) {
                    s.created_nodes
                        .push((cs, c, e.tag("seamark:type").is_some()));
                }
            }
        });
        assert_eq!(root, "osmChange");
    }
    s
}

fn incidents(files: &DemoFiles) -> Incidents {
    serde_json::from_str(&fs::read_to_string(&files.incidents).unwrap()).unwrap()
}

fn all_files(files: &DemoFiles) -> Vec<&Path> {
    let mut v = vec![
        files.snapshot.as_path(),
        &files.changesets,
        &files.land,
        &files.regions,
        &files.incidents,
    ];
    v.extend(files.diffs.iter().map(|p| p.as_path()));
    v
}

#[test]
fn same_seed_gives_identical_files_and_another_seed_does_not() {
    let (_a, fa) = scenario(&DemoOptions::default());
    let (_b, fb) = scenario(&DemoOptions::default());
    let (pa, pb) = (all_files(&fa), all_files(&fb));
    assert_eq!(pa.len(), pb.len());
    for (x, y) in pa.iter().zip(&pb) {
        assert_eq!(x.file_name(), y.file_name());
        assert!(
            fs::read(x).unwrap() == fs::read(y).unwrap(),
            "{x:?} differs"
        );
    }
    let (_c, fc) = scenario(&DemoOptions {
        seed: 8,
        ..DemoOptions::default()
    });
    assert_ne!(
        fs::read(&fa.snapshot).unwrap(),
        fs::read(&fc.snapshot).unwrap()
    );
    assert_ne!(
        fs::read(&fa.diffs[0]).unwrap(),
        fs::read(&fc.diffs[0]).unwrap()
    );
    assert_ne!(
        fs::read(&fa.incidents).unwrap(),
        fs::read(&fc.incidents).unwrap()
    );
}

fn names(files: &DemoFiles) -> Vec<String> {
    files
        .diffs
        .iter()
        .map(|p| p.file_name().unwrap().to_str().unwrap().to_owned())
        .collect()
}

#[test]
fn daily_files_cover_the_calendar_and_replace_older_runs() {
    let dir = tempfile::tempdir().unwrap();
    let files = generate(dir.path(), &DemoOptions::default()).unwrap();
    let n = names(&files);
    assert_eq!(n.len(), 98);
    assert_eq!(n[0], "2026-08-24.osc.gz");
    assert_eq!(n[97], "2026-11-29.osc.gz");
    let mut day = chrono::NaiveDate::from_ymd_opt(2026, 8, 24).unwrap();
    for name in &n {
        assert_eq!(*name, format!("{}.osc.gz", day.format("%Y-%m-%d")));
        day = day.succ_opt().unwrap();
    }
    let files = generate(
        dir.path(),
        &DemoOptions {
            weeks: 3,
            ..DemoOptions::default()
        },
    )
    .unwrap();
    let n = names(&files);
    assert_eq!(n.len(), 21);
    assert_eq!(n[0], "2026-11-09.osc.gz");
    assert_eq!(n[20], "2026-11-29.osc.gz");
    // The 14-week run's older days are gone.
    assert_eq!(fs::read_dir(dir.path().join("diffs")).unwrap().count(), 21);
    assert!(generate(
        dir.path(),
        &DemoOptions {
            weeks: 0,
            ..DemoOptions::default()
        }
    )
    .is_err());
    let bad = DemoOptions {
        intensity: f64::NAN,
        ..DemoOptions::default()
    };
    assert!(generate(dir.path(), &bad).is_err());
}

#[test]
fn files_are_well_formed_with_a_consistent_history() {
    let (_d, files) = scenario(&DemoOptions::default());
    let s = scan(&files);
    assert!(
        s.problems.is_empty(),
        "{} problems, first: {:?}",
        s.problems.len(),
        &s.problems[..s.problems.len().min(10)]
    );

    let c = &s.snapshot_counts;
    assert!(
        c["node"] > 15_000 && c["way"] > 3_000 && c["relation"] >= 3,
        "{c:?}"
    );
    let total_snapshot: usize = c.values().sum();
    assert!(
        (20_000..100_000).contains(&total_snapshot),
        "{total_snapshot}"
    );

    // Volume and mix of ordinary mapping: everything but the report week's incidents and the
    // earlier weeks' (reverted) vandalism.
    let truth = incidents(&files);
    let injected: BTreeSet<i64> = truth
        .incidents
        .iter()
        .flat_map(|i| i.changesets.clone())
        .chain(
            truth
                .earlier
                .iter()
                .filter(|e| e.vandalism)
                .flat_map(|e| e.changesets.clone()),
        )
        .collect();
    let total: u64 = s.weekly.iter().flatten().sum();
    let mut ordinary = [0u64; 3];
    for (cs, ops) in &s.per_changeset {
        if !injected.contains(cs) {
            for k in 0..3 {
                ordinary[k] += ops[k];
            }
        }
    }
    let ordinary_total: u64 = ordinary.iter().sum();
    let delete_share = ordinary[2] as f64 / ordinary_total as f64;
    eprintln!("weekly [create, modify, delete]: {:?}", s.weekly);
    eprintln!("total {total}, ordinary {ordinary:?}, delete share {delete_share:.3}");
    assert!((150_000..=250_000).contains(&total), "{total}");
    assert!((0.03..=0.05).contains(&delete_share), "{delete_share}");
    let weekly_totals: Vec<u64> = s.weekly.iter().map(|w| w.iter().sum()).collect();
    let mean = total as f64 / weekly_totals.len() as f64;
    for w in &weekly_totals[..weekly_totals.len() - 1] {
        assert!((*w as f64 - mean).abs() < 0.2 * mean, "{weekly_totals:?}");
    }
    let ordinary_cs: Vec<_> = s
        .per_changeset
        .iter()
        .filter(|(cs, _)| !injected.contains(cs))
        .collect();
    assert!(ordinary_cs
        .iter()
        .all(|(_, ops)| (1..=150).contains(&ops.iter().sum::<u64>())));
    let commented = ordinary_cs
        .iter()
        .filter(|(cs, _)| s.changesets[cs].4)
        .count();
    let share = commented as f64 / ordinary_cs.len() as f64;
    assert!((0.8..=0.92).contains(&share), "comments on {share}");

    // Mappers: the dump holds more history than the diffs.
    let mappers: BTreeSet<i64> = s.changesets.values().map(|c| c.0).collect();
    eprintln!(
        "{} changesets in the dump, {} in the diffs, {} mappers",
        s.changesets.len(),
        s.diff_changesets.len(),
        mappers.len()
    );
    assert!((250..=400).contains(&mappers.len()), "{}", mappers.len());
    assert!(s.changesets.len() > s.diff_changesets.len() + 1000);
    assert!(s.changesets.keys().all(|&id| id >= 900_000_001));

    // Roughly 30% of deleted nodes come without coordinates.
    let (with, without) = (s.deleted_nodes_with_coords, s.deleted_nodes_without_coords);
    let share = without as f64 / (with + without) as f64;
    assert!(
        (0.25..=0.35).contains(&share),
        "{with} with, {without} without"
    );

    // No ordinary name carries a web address or phone number.
    for (cs, name) in &s.names {
        if !injected.contains(cs) {
            let lower = name.to_lowercase();
            assert!(
                !lower.contains("www.") && !lower.contains("http") && !lower.contains("555"),
                "changeset {cs}: {name}"
            );
        }
    }

    // Ordinary nodes created in water are seamarks; only the fabrication builds in the sea.
    let land = Land::from_geojson_file(&files.land).unwrap();
    let offshore: BTreeSet<i64> = truth
        .incidents
        .iter()
        .filter(|i| i.kind == "offshore_fabrication")
        .flat_map(|i| i.changesets.clone())
        .collect();
    for (cs, c, seamark) in &s.created_nodes {
        if !land.is_land(*c) && !offshore.contains(cs) {
            assert!(
                seamark,
                "changeset {cs} created a non-seamark node in water at {c:?}"
            );
        }
    }
}

#[test]
fn incidents_are_ground_truth() {
    let (_d, files) = scenario(&DemoOptions::default());
    let s = scan(&files);
    let truth = incidents(&files);
    let kinds: Vec<&str> = truth.incidents.iter().map(|i| i.kind.as_str()).collect();
    assert_eq!(
        kinds,
        [
            "deletion_burst",
            "offshore_fabrication",
            "newcomer_surge",
            "rename_spam"
        ]
    );
    let land = Land::from_geojson_file(&files.land).unwrap();
    // First changeset time per uid.
    let mut first: BTreeMap<i64, &str> = BTreeMap::new();
    for (uid, _, created, _, _) in s.changesets.values() {
        let e = first.entry(*uid).or_insert(created);
        if created.as_str() < *e {
            *e = created;
        }
    }
    for i in &truth.incidents {
        eprintln!(
            "{} at {:.5}, {:.5}: {:?}",
            i.kind, i.lat, i.lon, i.changesets
        );
        assert!(!i.changesets.is_empty() && !i.description.is_empty());
        let mut edits = [0u64; 3];
        for cs in &i.changesets {
            assert!(s.changesets.contains_key(cs), "{cs} not in changesets.osm");
            assert!(s.diff_changesets.contains(cs), "{cs} not in the diffs");
            assert!(
                s.changesets[cs].2.as_str() >= "2026-11-23",
                "{cs} before the last week"
            );
            for (sum, n) in edits.iter_mut().zip(s.per_changeset[cs]) {
                *sum += n;
            }
        }
        let c = Coord::from_degrees(i.lat, i.lon).unwrap();
        let uids: BTreeSet<i64> = i.changesets.iter().map(|cs| s.changesets[cs].0).collect();
        match i.kind.as_str() {
            "offshore_fabrication" => {
                assert!(!land.is_land(c));
                assert!(land.distance_to_land_m(c).unwrap() > 2_000.0);
                assert!(edits[0] > 80 && edits[1] == 0 && edits[2] == 0, "{edits:?}");
            }
            kind => {
                assert!(land.is_land(c), "{kind} in water");
                match kind {
                    "deletion_burst" => {
                        assert!((300..=400).contains(&edits[2]), "{edits:?}");
                        assert!((2..=3).contains(&i.changesets.len()));
                        assert_eq!(uids.len(), 1);
                        // An account about a year or two old, not a newcomer.
                        let uid = uids.iter().next().unwrap();
                        assert!(first[uid] < "2025-09-01", "{}", first[uid]);
                    }
                    "newcomer_surge" => {
                        assert!((10..=14).contains(&uids.len()));
                        for cs in &i.changesets {
                            let (uid, _, created, _, comment) = &s.changesets[cs];
                            assert_eq!(first[uid], created.as_str(), "not a first changeset");
                            assert!(!comment);
                        }
                    }
                    "rename_spam" => {
                        assert!((25..=35).contains(&edits[1]) && edits[0] == 0, "{edits:?}");
                        assert!((1..=2).contains(&uids.len()));
                    }
                    other => panic!("unknown kind {other}"),
                }
            }
        }
    }
    // The adverts and the spam text are really there.
    let spam: BTreeSet<i64> = truth.incidents[3].changesets.iter().copied().collect();
    let ads = s
        .names
        .iter()
        .filter(|(cs, n)| spam.contains(cs) && n.contains(".example"))
        .count();
    assert!(ads >= 25, "{ads}");
}

/// Edits in the diffs made by changesets that are not injected incidents.
fn ordinary_edits(files: &DemoFiles) -> (u64, u64) {
    let injected: BTreeSet<i64> = incidents(files)
        .incidents
        .iter()
        .flat_map(|i| i.changesets.clone())
        .collect();
    let (mut ordinary, mut injected_edits) = (0, 0);
    for path in &files.diffs {
        walk(open_gz(path), |e| {
            if injected.contains(&e.int("changeset")) {
                injected_edits += 1;
            } else {
                ordinary += 1;
            }
        });
    }
    (ordinary, injected_edits)
}

#[test]
fn intensity_scales_ordinary_mapping_only() {
    let run = |intensity: f64| {
        let (_d, files) = scenario(&DemoOptions {
            weeks: 2,
            intensity,
            ..DemoOptions::default()
        });
        ordinary_edits(&files)
    };
    let (none, injected) = run(0.0);
    assert_eq!(none, 0);
    assert!(injected > 500, "{injected}");
    let (one, _) = run(1.0);
    let (two, _) = run(2.0);
    let ratio = two as f64 / one as f64;
    assert!((1.7..=2.3).contains(&ratio), "{one} at 1.0, {two} at 2.0");
}

#[test]
fn earlier_vandalism_is_reverted_within_days_naming_its_changesets() {
    let (_d, files) = scenario(&DemoOptions::default());
    let s = scan(&files);
    let truth = incidents(&files);
    // Comments by changeset id, straight from the changeset dump.
    let mut comments: BTreeMap<i64, String> = BTreeMap::new();
    walk(open(&files.changesets), |e| {
        if let Some(c) = e.tag("comment") {
            comments.insert(e.int("id"), c.to_owned());
        }
    });
    let time = |cs: &i64| {
        chrono::DateTime::parse_from_rfc3339(&s.changesets[cs].2)
            .unwrap()
            .timestamp()
    };
    let report_monday = chrono::DateTime::parse_from_rfc3339("2026-11-23T00:00:00Z")
        .unwrap()
        .timestamp();
    let vandalism: Vec<_> = truth.earlier.iter().filter(|e| e.vandalism).collect();
    let mistakes: Vec<_> = truth.earlier.iter().filter(|e| !e.vandalism).collect();
    assert!(vandalism.len() >= 12, "{}", vandalism.len());
    assert!(mistakes.len() >= 10, "{}", mistakes.len());
    let mut styles = BTreeSet::new();
    for e in &truth.earlier {
        let revert = e.reverted_by;
        assert_eq!(comments.get(&revert), Some(&e.revert_comment));
        assert!(
            time(&revert) < report_monday,
            "revert {revert} in the report week"
        );
        for cs in &e.changesets {
            assert!(s.diff_changesets.contains(cs), "{cs} has no edits");
            let gap = time(&revert) - time(cs);
            assert!(
                (0..5 * 86_400).contains(&gap),
                "{cs} reverted after {gap} s"
            );
            if e.vandalism {
                assert!(
                    e.revert_comment.contains(&cs.to_string()),
                    "{}",
                    e.revert_comment
                );
            }
        }
        let reverter = s.changesets[&revert].0;
        let author = s.changesets[&e.changesets[0]].0;
        // Vandalism is reverted by someone else; a mistake by its own author.
        assert_eq!(reverter == author, !e.vandalism, "{e:?}");
        styles.insert(
            e.revert_comment
                .split_whitespace()
                .next()
                .unwrap()
                .to_owned(),
        );
    }
    assert!(
        styles.len() >= 5,
        "comments in several languages: {styles:?}"
    );
}
