//! `update` against a replication server on loopback: a tiny HTTP/1.1 server (std `TcpListener`
//! and a thread per connection) serves a replication tree built from the demo generator's daily
//! diffs (`AAA/BBB/CCC.osc.gz` with state files) and its changeset file (`000/000/001.osm.gz`
//! with `state.yaml`). Each test ends with the database of a plain local ingest of the same
//! files, or with a clear error and the database unchanged. All traffic is to 127.0.0.1; every
//! server counts its requests and the tests bound them.

use std::collections::{BTreeMap, HashMap};
use std::io::{BufRead, BufReader, Write};
use std::net::{TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Mutex, OnceLock};
use std::time::Duration;

use hexvigil::demo::{self, DemoOptions};
use hexvigil::ingest::{self, replication::SequenceRange, IngestOptions};
use hexvigil::progress::Progress;
use hexvigil::store::Store;
use hexvigil::update::{self, NetOptions, UpdateError, UpdateOptions};

/// How the server answers one path.
#[derive(Clone)]
enum Answer {
    Body(Vec<u8>),
    /// HTTP 500 this many more times, then the body.
    FailThen(u32, Vec<u8>),
    /// Waits this long before answering with the body.
    Slow(Duration, Vec<u8>),
    /// HTTP 403 always.
    Forbidden,
}

struct Server {
    addr: String,
    files: Arc<Mutex<HashMap<String, Answer>>>,
    requests: Arc<AtomicU64>,
    stop: Arc<AtomicBool>,
}

impl Server {
    fn start(files: HashMap<String, Answer>) -> Self {
        let listener = TcpListener::bind("127.0.0.1:0").unwrap();
        let addr = listener.local_addr().unwrap().to_string();
        let files = Arc::new(Mutex::new(files));
        let requests = Arc::new(AtomicU64::new(0));
        let stop = Arc::new(AtomicBool::new(false));
        let (f, r, s) = (files.clone(), requests.clone(), stop.clone());
        std::thread::spawn(move || {
            for conn in listener.incoming() {
                if s.load(Ordering::SeqCst) {
                    break;
                }
                let Ok(conn) = conn else { continue };
                let (f, r) = (f.clone(), r.clone());
                std::thread::spawn(move || serve(conn, &f, &r));
            }
        });
        Self {
            addr,
            files,
            requests,
            stop,
        }
    }

    fn url(&self, path: &str) -> String {
        format!("http://{}/{path}", self.addr)
    }

    fn set(&self, path: &str, a: Answer) {
        self.files.lock().unwrap().insert(path.to_owned(), a);
    }

    fn remove(&self, path: &str) {
        self.files.lock().unwrap().remove(path);
    }

    fn body(&self, path: &str) -> Vec<u8> {
        match &self.files.lock().unwrap()[path] {
            Answer::Body(b) | Answer::FailThen(_, b) | Answer::Slow(_, b) => b.clone(),
            Answer::Forbidden => Vec::new(),
        }
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        self.stop.store(true, Ordering::SeqCst);
        // Wakes the accept loop so it sees the flag.
        let _ = TcpStream::connect(&self.addr);
    }
}

fn serve(conn: TcpStream, files: &Mutex<HashMap<String, Answer>>, requests: &AtomicU64) {
    let mut reader = BufReader::new(conn.try_clone().unwrap());
    let mut first = String::new();
    if reader.read_line(&mut first).is_err() || first.is_empty() {
        return;
    }
    loop {
        let mut line = String::new();
        if reader.read_line(&mut line).is_err() || line.trim().is_empty() {
            break;
        }
    }
    requests.fetch_add(1, Ordering::SeqCst);
    let path = first
        .split_whitespace()
        .nth(1)
        .unwrap_or("/")
        .trim_start_matches('/')
        .to_owned();
    let answer = {
        let mut f = files.lock().unwrap();
        match f.get_mut(&path) {
            Some(Answer::FailThen(n, _)) if *n > 0 => {
                *n -= 1;
                Some((500, Vec::new(), Duration::ZERO))
            }
            Some(Answer::Forbidden) => Some((403, Vec::new(), Duration::ZERO)),
            Some(Answer::FailThen(_, body) | Answer::Body(body)) => {
                Some((200, body.clone(), Duration::ZERO))
            }
            Some(Answer::Slow(d, body)) => Some((200, body.clone(), *d)),
            None => None,
        }
    };
    let (status, body, wait) = answer.unwrap_or((404, b"not found".to_vec(), Duration::ZERO));
    std::thread::sleep(wait);
    let reason = match status {
        200 => "OK",
        403 => "Forbidden",
        404 => "Not Found",
        _ => "Internal Server Error",
    };
    let mut conn = conn;
    let _ = write!(
        conn,
        "HTTP/1.1 {status} {reason}\r\nContent-Length: {}\r\nConnection: close\r\n\r\n",
        body.len()
    );
    let _ = conn.write_all(&body);
    let _ = conn.flush();
}

/// The demo's files and the replication tree built from them, made once.
struct Fixture {
    _dir: tempfile::TempDir,
    snapshot: PathBuf,
    changesets: PathBuf,
    /// `day/` (diffs, one per day as sequences 1..=n) and `cs/` (changesets as sequence 1).
    tree: PathBuf,
    days: u64,
}

fn fixture() -> &'static Fixture {
    static F: OnceLock<Fixture> = OnceLock::new();
    F.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let files = demo::generate(
            &dir.path().join("demo"),
            &DemoOptions {
                seed: 3,
                weeks: 2,
                ..DemoOptions::default()
            },
        )
        .unwrap();
        let tree = dir.path().join("tree");
        let day = tree.join("day");
        let mut diffs = files.diffs.clone();
        diffs.sort();
        for (i, d) in diffs.iter().enumerate() {
            let seq = i as u64 + 1;
            let rel = update::sequence_path(seq);
            let target = day.join(format!("{rel}.osc.gz"));
            std::fs::create_dir_all(target.parent().unwrap()).unwrap();
            std::fs::copy(d, &target).unwrap();
            // The day after the file's date, as a daily diff's state says.
            let date = d.file_name().unwrap().to_str().unwrap()[..10].to_owned();
            let ts = format!("{date}T23\\:59\\:59Z");
            std::fs::write(
                day.join(format!("{rel}.state.txt")),
                format!("#written by the test\nsequenceNumber={seq}\ntimestamp={ts}\n"),
            )
            .unwrap();
            if seq == diffs.len() as u64 {
                std::fs::write(
                    day.join("state.txt"),
                    format!("sequenceNumber={seq}\ntimestamp={ts}\n"),
                )
                .unwrap();
            }
        }
        let cs = tree.join("cs");
        std::fs::create_dir_all(cs.join("000/000")).unwrap();
        let mut gz = flate2::write::GzEncoder::new(
            std::fs::File::create(cs.join("000/000/001.osm.gz")).unwrap(),
            flate2::Compression::default(),
        );
        gz.write_all(&std::fs::read(&files.changesets).unwrap())
            .unwrap();
        gz.finish().unwrap();
        std::fs::write(
            cs.join("state.yaml"),
            "---\nlast_run: 2026-11-29 23:59:59.000000000 +00:00\nsequence: 1\n",
        )
        .unwrap();
        Fixture {
            snapshot: files.snapshot.clone(),
            changesets: files.changesets.clone(),
            tree,
            days: diffs.len() as u64,
            _dir: dir,
        }
    })
}

/// Every file of the tree, by URL path.
fn tree_files() -> HashMap<String, Answer> {
    let root = &fixture().tree;
    let mut out = HashMap::new();
    let mut stack = vec![root.clone()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                let rel = p
                    .strip_prefix(root)
                    .unwrap()
                    .to_string_lossy()
                    .replace('\\', "/");
                out.insert(rel, Answer::Body(std::fs::read(&p).unwrap()));
            }
        }
    }
    out
}

fn quiet() -> Progress {
    Progress::silent()
}

/// A database holding the snapshot and the changeset metadata, ingested locally.
fn base_db(dir: &Path, name: &str, with_changesets: bool) -> PathBuf {
    let f = fixture();
    let db = dir.join(name);
    let mut store = Store::open(&db).unwrap();
    let mut inputs = vec![f.snapshot.clone()];
    if with_changesets {
        inputs.push(f.changesets.clone());
    }
    ingest::ingest(&mut store, &inputs, &quiet()).unwrap();
    db
}

/// The reference: the base database plus a plain local ingest of the replication folder
/// (optionally only some sequences).
fn reference_db(dir: &Path, sequences: Option<SequenceRange>, skip: Option<u64>) -> PathBuf {
    let f = fixture();
    let db = base_db(dir, "reference.db", true);
    let mut store = Store::open(&db).unwrap();
    let day = f.tree.join("day");
    let inputs: Vec<PathBuf> = match skip {
        None => vec![day],
        Some(s) => (1..=f.days)
            .filter(|&q| q != s)
            .map(|q| day.join(format!("{}.osc.gz", update::sequence_path(q))))
            .collect(),
    };
    ingest::ingest_with(&mut store, &inputs, &IngestOptions { sequences }, &quiet()).unwrap();
    db
}

/// Every row of the data tables, as sorted text (the `inputs` table names paths and times, and
/// `meta` the replication state, so both are left out and checked on their own).
fn dump(db: &Path) -> BTreeMap<String, Vec<String>> {
    let conn = rusqlite::Connection::open(db).unwrap();
    let mut out = BTreeMap::new();
    for table in ["changesets", "changeset_work", "grid_first", "skipped"] {
        let mut stmt = conn.prepare(&format!("SELECT * FROM {table}")).unwrap();
        let n = stmt.column_count();
        let mut rows: Vec<String> = stmt
            .query_map([], |r| {
                Ok((0..n)
                    .map(|i| format!("{:?}", r.get_ref(i).unwrap()))
                    .collect::<Vec<_>>()
                    .join("|"))
            })
            .unwrap()
            .map(Result::unwrap)
            .collect();
        rows.sort();
        out.insert(table.to_owned(), rows);
    }
    let store = Store::open(db).unwrap();
    let state = store.element_state().unwrap();
    out.insert(
        "element state".to_owned(),
        state.rows().map(|r| format!("{:?}", r.unwrap())).collect(),
    );
    // The edit log's blocks depend on how the files were grouped; its edits must not.
    let edits = store.edits(i64::MIN, i64::MAX).unwrap();
    out.insert(
        "edits".to_owned(),
        edits.iter().map(|e| format!("{e:?}")).collect(),
    );
    out
}

/// Node edits with a position in a database: (lat, lon).
fn node_positions(db: &Path) -> Vec<(i32, i32)> {
    Store::open(db)
        .unwrap()
        .edits(i64::MIN, i64::MAX)
        .unwrap()
        .into_iter()
        .filter(|e| e.etype == hexvigil::model::ElementType::Node)
        .filter_map(|e| e.pos)
        .collect()
}

fn recorded(db: &Path, url: &str) -> Option<u64> {
    Store::open(db)
        .unwrap()
        .meta(&update::meta_key(url))
        .unwrap()
        .map(|v| v.parse().unwrap())
}

fn options(server: &Server) -> UpdateOptions {
    UpdateOptions {
        source: server.url("day/"),
        from_sequence: Some(1),
        net: NetOptions {
            timeout: Duration::from_secs(5),
            retries: 2,
            backoff: Duration::from_millis(20),
        },
        ..UpdateOptions::default()
    }
}

fn run(db: &Path, opts: &UpdateOptions) -> Result<update::UpdateSummary, UpdateError> {
    let mut store = Store::open(db).unwrap();
    update::update(&mut store, opts, &quiet())
}

#[test]
fn a_clean_run_matches_a_local_ingest_and_a_second_run_adds_nothing() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let s = run(&db, &options(&server)).unwrap();
    assert_eq!(s.diffs.files, f.days);
    assert_eq!(s.diffs.after, Some(f.days));
    assert!(s.diffs.gaps.is_empty());
    assert!(s.ingest.edits > 100, "{:?}", s.ingest);
    let reference = reference_db(dir.path(), None, None);
    assert_eq!(dump(&db), dump(&reference));
    assert_eq!(recorded(&db, &server.url("day")), Some(f.days));
    // State, then a state file and a diff per sequence.
    assert_eq!(server.requests.load(Ordering::SeqCst), 1 + 2 * f.days);
    let again = run(&db, &options(&server)).unwrap();
    assert_eq!(again.diffs.files, 0);
    assert_eq!(again.ingest.files, 0);
    assert_eq!(dump(&db), dump(&reference));
    assert_eq!(server.requests.load(Ordering::SeqCst), 2 + 2 * f.days);
}

#[test]
fn an_interrupted_run_resumes_where_it_stopped() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let opts = UpdateOptions {
        max_files: Some(f.days / 2),
        ..options(&server)
    };
    let first = run(&db, &opts).unwrap();
    assert_eq!(first.diffs.after, Some(f.days / 2));
    let half = reference_db(
        dir.path(),
        Some(SequenceRange {
            first: 1,
            last: f.days / 2,
        }),
        None,
    );
    assert_eq!(dump(&db), dump(&half));
    std::fs::remove_file(&half).unwrap();
    let mut runs = 1;
    while recorded(&db, &server.url("day")) != Some(f.days) {
        run(&db, &opts).unwrap();
        runs += 1;
        assert!(runs <= 3, "the update does not advance");
    }
    assert_eq!(dump(&db), dump(&reference_db(dir.path(), None, None)));
}

#[test]
fn server_errors_are_retried_and_client_errors_are_not() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let before = dump(&db);
    // Two 500s then the file: within two retries.
    let p = "day/000/000/002.osc.gz";
    server.set(p, Answer::FailThen(2, server.body(p)));
    let s = run(&db, &options(&server)).unwrap();
    assert_eq!(s.diffs.files, f.days);
    assert_eq!(dump(&db), dump(&reference_db(dir.path(), None, None)));
    // Always 500: a clear error after the bounded retries, and nothing ingested.
    let db2 = base_db(dir.path(), "second.db", true);
    server.set(p, Answer::FailThen(1000, server.body(p)));
    let err = run(&db2, &options(&server)).unwrap_err();
    let msg = err.to_string();
    assert!(
        msg.contains("002.osc.gz") && msg.contains("HTTP 500") && msg.contains("3 attempt"),
        "{msg}"
    );
    assert_eq!(dump(&db2), before);
    assert_eq!(recorded(&db2, &server.url("day")), None);
    // A state file the server refuses: no retry.
    server.remove("day/state.txt");
    let err = run(&db2, &options(&server)).unwrap_err();
    assert!(
        matches!(err, UpdateError::Status { status: 404, .. }),
        "{err}"
    );
    assert!(server.requests.load(Ordering::SeqCst) < 100);
}

#[test]
fn a_truncated_file_is_refused_and_the_database_is_unchanged() {
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let before = dump(&db);
    let p = "day/000/000/003.osc.gz";
    let full = server.body(p);
    server.set(p, Answer::Body(full[..full.len() / 2].to_vec()));
    let err = run(&db, &options(&server)).unwrap_err();
    let msg = err.to_string();
    assert!(
        msg.contains("003.osc.gz") && msg.contains("truncated"),
        "{msg}"
    );
    assert_eq!(dump(&db), before);
    assert_eq!(recorded(&db, &server.url("day")), None);
    // Mended on the server: the next run gets everything.
    server.set(p, Answer::Body(full));
    run(&db, &options(&server)).unwrap();
    assert_eq!(dump(&db), dump(&reference_db(dir.path(), None, None)));
}

#[test]
fn a_missing_sequence_is_reported_as_a_gap() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    server.remove("day/000/000/004.osc.gz");
    server.remove("day/000/000/004.state.txt");
    let db = base_db(dir.path(), "state.db", true);
    let s = run(&db, &options(&server)).unwrap();
    assert_eq!(s.diffs.gaps, vec![(4, 4)]);
    assert_eq!(s.diffs.files, f.days - 1);
    assert!(update::run_line("diffs", &s.diffs).contains("missing sequence(s) 4 "));
    assert_eq!(recorded(&db, &server.url("day")), Some(f.days));
    assert_eq!(dump(&db), dump(&reference_db(dir.path(), None, Some(4))));
}

#[test]
fn a_slow_server_hits_the_timeout_and_a_later_run_completes() {
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let before = dump(&db);
    let p = "day/000/000/002.osc.gz";
    let body = server.body(p);
    server.set(p, Answer::Slow(Duration::from_secs(3), body.clone()));
    let opts = UpdateOptions {
        net: NetOptions {
            timeout: Duration::from_millis(500),
            retries: 1,
            backoff: Duration::from_millis(20),
        },
        ..options(&server)
    };
    let err = run(&db, &opts).unwrap_err();
    let msg = err.to_string();
    assert!(
        matches!(err, UpdateError::Network { attempts: 2, .. }) && msg.contains("002.osc.gz"),
        "{msg}"
    );
    assert!(
        msg.to_lowercase().contains("timeout") || msg.to_lowercase().contains("timed out"),
        "{msg}"
    );
    assert_eq!(dump(&db), before);
    server.set(p, Answer::Body(body));
    run(&db, &opts).unwrap();
    assert_eq!(dump(&db), dump(&reference_db(dir.path(), None, None)));
}

#[test]
fn a_clip_box_keeps_only_what_lies_inside() {
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let reference = reference_db(dir.path(), None, None);
    // The western half of the edited area of the reference.
    let reference_nodes = node_positions(&reference);
    let lats = reference_nodes.iter().map(|p| i64::from(p.0));
    let lons = reference_nodes.iter().map(|p| i64::from(p.1));
    let (min_lat, max_lat) = (lats.clone().min().unwrap(), lats.max().unwrap());
    let (min_lon, max_lon) = (lons.clone().min().unwrap(), lons.max().unwrap());
    let mid_lon = (min_lon + max_lon) / 2;
    let e7 = |v: i64| v as f64 / 1e7;
    let clip = format!(
        "{},{},{},{}",
        e7(min_lon) - 0.01,
        e7(min_lat) - 0.01,
        e7(mid_lon),
        e7(max_lat) + 0.01
    );
    let opts = UpdateOptions {
        clip: Some(clip.parse().unwrap()),
        ..options(&server)
    };
    let s = run(&db, &opts).unwrap();
    assert!(s.ingest.clipped > 0);
    let kept_nodes = node_positions(&db);
    let (kept, all) = (kept_nodes.len(), reference_nodes.len());
    assert!(kept > 0 && kept < all, "{kept} of {all}");
    let outside = kept_nodes
        .iter()
        .filter(|p| i64::from(p.1) > mid_lon)
        .count();
    assert_eq!(outside, 0);
}

#[test]
fn the_command_line_follows_diffs_and_changesets() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", false);
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_hexvigil"))
        .args(["update", "--db"])
        .arg(&db)
        .args([
            "--source",
            &server.url("day"),
            "--changesets-source",
            &server.url("cs"),
        ])
        .args([
            "--from-sequence",
            "1",
            "--timeout-secs",
            "5",
            "--retries",
            "1",
        ])
        .arg("--report-out")
        .arg(dir.path().join("report"))
        .args(["--land", "none", "--generated-at", "test"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(out.status.success(), "{err}");
    assert!(
        err.contains(&format!("sequence none -> {}", f.days)),
        "{err}"
    );
    assert_eq!(recorded(&db, &server.url("cs")), Some(1));
    assert!(dir.path().join("report/index.html").is_file(), "{err}");
    assert_eq!(dump(&db), dump(&reference_db(dir.path(), None, None)));
    // A 4xx stops at once with the URL and status, exit code 2.
    server.set("day/state.txt", Answer::Forbidden);
    let before = server.requests.load(Ordering::SeqCst);
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_hexvigil"))
        .args(["update", "--quiet", "--db"])
        .arg(&db)
        .args(["--source", &server.url("day"), "--retries", "3"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("state.txt: the server answered HTTP 403"),
        "{err}"
    );
    assert_eq!(server.requests.load(Ordering::SeqCst), before + 1);
}

#[test]
fn until_stops_before_later_diffs() {
    let dir = tempfile::tempdir().unwrap();
    let server = Server::start(tree_files());
    let db = base_db(dir.path(), "state.db", true);
    let state = String::from_utf8(server.body("day/000/000/003.state.txt")).unwrap();
    let ts = state
        .lines()
        .find_map(|l| l.strip_prefix("timestamp="))
        .unwrap()
        .replace('\\', "");
    let opts = UpdateOptions {
        until: hexvigil::ingest::xml::parse_timestamp(&ts),
        ..options(&server)
    };
    let s = run(&db, &opts).unwrap();
    assert_eq!((s.diffs.files, s.diffs.after), (3, Some(3)));
    let three = SequenceRange { first: 1, last: 3 };
    assert_eq!(
        dump(&db),
        dump(&reference_db(dir.path(), Some(three), None))
    );
}
