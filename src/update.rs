//! Following a replication server: the `update` command.
//!
//! One run reads the server's `state.txt` (diffs) and `state.yaml` (changeset metadata),
//! downloads every file after the sequence recorded in the database into a temporary folder
//! in the replication layout (`AAA/BBB/CCC.osc.gz` with `CCC.state.txt`; `AAA/BBB/CCC.osm.gz`
//! for changesets), checks each download (a complete gzip stream, an OSM document of the
//! expected kind, a state file naming its own sequence) and then ingests the folder with
//! [`crate::ingest::ingest_extended`], which writes the sequences reached into `meta` in the
//! same transaction. An interrupted run therefore leaves the database as it was, and the next
//! run starts again from the recorded sequence: nothing is ingested twice, nothing skipped.
//!
//! Networking: one blocking `ureq` agent (rustls), a user agent naming hexvigil and its
//! version, a timeout per request, and bounded retries with exponential backoff on 5xx, 429,
//! timeouts and connection errors; any other 4xx stops the run with the URL and status. A
//! sequence whose diff and state file both answer 404 while the server's state is past it is a
//! gap: reported, recorded as passed, not fatal.

use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::time::Duration;

use crate::ingest::clip::Clip;
use crate::ingest::replication::{read_state, State};
use crate::ingest::{self, IngestError, IngestExtras, IngestOptions, IngestSummary, InputKind};
use crate::progress::Progress;
use crate::store::{Store, StoreError};

/// The user agent sent with every request.
pub const USER_AGENT: &str = concat!(
    "hexvigil/",
    env!("CARGO_PKG_VERSION"),
    " (weekly OSM edit watch; replication follower)"
);

/// Largest accepted state file or changeset state (real ones are about 100 bytes).
const MAX_STATE_BYTES: u64 = 4096;

/// Largest accepted diff download (a planet day diff is well under this).
const MAX_DIFF_BYTES: u64 = 4 << 30;

/// Errors of an update; each names the URL or file concerned.
#[derive(Debug, thiserror::Error)]
pub enum UpdateError {
    /// The server answered with a client error (4xx other than a gap's 404, and 429).
    #[error("{url}: the server answered HTTP {status}")]
    Status { url: String, status: u16 },
    /// No usable answer after the retries (timeouts, refused connections, 5xx).
    #[error("{url}: {message} (after {attempts} attempt(s))")]
    Network {
        url: String,
        message: String,
        attempts: u32,
    },
    /// A download is damaged or not what its place in the layout says.
    #[error("{url}: {message}")]
    Verify { url: String, message: String },
    /// The options do not fit the database or the server.
    #[error("{0}")]
    Options(String),
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(transparent)]
    Ingest(#[from] IngestError),
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// Network settings.
#[derive(Debug, Clone, Copy)]
pub struct NetOptions {
    /// Longest time for one request, answer included.
    pub timeout: Duration,
    /// Retries after the first attempt (on 5xx, 429, timeouts and connection errors).
    pub retries: u32,
    /// Wait before the first retry; doubled for each further one.
    pub backoff: Duration,
}

impl Default for NetOptions {
    fn default() -> Self {
        Self {
            timeout: Duration::from_secs(60),
            retries: 4,
            backoff: Duration::from_secs(2),
        }
    }
}

/// What `update` does.
#[derive(Debug, Clone, Default)]
pub struct UpdateOptions {
    /// Base URL of a diff replication folder (minute, hour or day), holding `state.txt`.
    pub source: String,
    /// Base URL of a changeset replication folder, holding `state.yaml`.
    pub changesets_source: Option<String>,
    /// At most this many sequences per source in this run.
    pub max_files: Option<u64>,
    /// Stop before diffs whose state timestamp is later (Unix seconds).
    pub until: Option<i64>,
    /// First sequence to fetch when the database has none recorded for a source (default: the
    /// server's current one).
    pub from_sequence: Option<u64>,
    /// Keep only what lies in this area.
    pub clip: Option<Clip>,
    pub net: NetOptions,
}

/// What happened to one source.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SourceRun {
    pub url: String,
    /// The sequence recorded before the run, if any.
    pub before: Option<u64>,
    /// The sequence recorded after the run.
    pub after: Option<u64>,
    /// The server's current sequence.
    pub server: u64,
    /// Files downloaded and ingested.
    pub files: u64,
    /// Sequences the server does not have, as inclusive ranges.
    pub gaps: Vec<(u64, u64)>,
}

/// The outcome of an update.
#[derive(Debug, Clone)]
pub struct UpdateSummary {
    pub diffs: SourceRun,
    pub changesets: Option<SourceRun>,
    pub ingest: IngestSummary,
}

/// The `meta` key holding the last sequence taken from a source URL.
#[must_use]
pub fn meta_key(url: &str) -> String {
    format!("replication_sequence {}", base(url))
}

fn base(url: &str) -> &str {
    url.trim_end_matches('/')
}

/// `AAA/BBB/CCC` for a sequence number.
#[must_use]
pub fn sequence_path(seq: u64) -> String {
    format!(
        "{:03}/{:03}/{:03}",
        seq / 1_000_000,
        (seq / 1_000) % 1_000,
        seq % 1_000
    )
}

/// The HTTP side: one agent and the retry policy.
struct Net {
    agent: ureq::Agent,
    opts: NetOptions,
}

/// A fetch that found nothing.
enum Fetched {
    Done,
    NotFound,
}

impl Net {
    fn new(opts: NetOptions) -> Self {
        let agent = ureq::Agent::config_builder()
            .user_agent(USER_AGENT)
            .timeout_global(Some(opts.timeout))
            .http_status_as_error(false)
            .max_redirects(5)
            .build()
            .new_agent();
        Self { agent, opts }
    }

    /// Downloads `url` into `out` (at most `limit` bytes), retrying as documented. `Ok(NotFound)`
    /// on 404.
    fn fetch(&self, url: &str, out: &Path, limit: u64) -> Result<Fetched, UpdateError> {
        let mut attempt = 0u32;
        loop {
            attempt += 1;
            let failure = match self.try_fetch(url, out, limit) {
                Ok(f) => return Ok(f),
                Err(Attempt::Fatal(e)) => return Err(e),
                Err(Attempt::Retry(message)) => message,
            };
            if attempt > self.opts.retries {
                return Err(UpdateError::Network {
                    url: url.to_owned(),
                    message: failure,
                    attempts: attempt,
                });
            }
            let wait = self
                .opts
                .backoff
                .saturating_mul(1u32 << (attempt - 1).min(16));
            std::thread::sleep(wait);
        }
    }

    fn try_fetch(&self, url: &str, out: &Path, limit: u64) -> Result<Fetched, Attempt> {
        let mut resp = match self.agent.get(url).call() {
            Ok(r) => r,
            Err(e) => return Err(Attempt::Retry(e.to_string())),
        };
        let status = resp.status().as_u16();
        match status {
            200 => {}
            404 => return Ok(Fetched::NotFound),
            429 | 500..=599 => return Err(Attempt::Retry(format!("HTTP {status}"))),
            _ => {
                return Err(Attempt::Fatal(UpdateError::Status {
                    url: url.to_owned(),
                    status,
                }))
            }
        }
        let io = |source| {
            Attempt::Fatal(UpdateError::Io {
                path: out.to_owned(),
                source,
            })
        };
        let mut file = std::fs::File::create(out).map_err(io)?;
        let mut body = resp.body_mut().as_reader().take(limit + 1);
        let mut buf = vec![0u8; 1 << 16];
        let mut total = 0u64;
        loop {
            // A body cut short (fewer bytes than announced) or a stalled one is a network
            // failure: retried.
            let n = body
                .read(&mut buf)
                .map_err(|e| Attempt::Retry(format!("reading the answer: {e}")))?;
            if n == 0 {
                break;
            }
            total += n as u64;
            if total > limit {
                return Err(Attempt::Fatal(UpdateError::Verify {
                    url: url.to_owned(),
                    message: format!("the answer is larger than {limit} bytes"),
                }));
            }
            file.write_all(&buf[..n]).map_err(io)?;
        }
        file.sync_all().map_err(io)?;
        Ok(Fetched::Done)
    }
}

/// One attempt's failure: worth another try, or not.
enum Attempt {
    Retry(String),
    Fatal(UpdateError),
}

fn verify_err(url: &str, message: impl Into<String>) -> UpdateError {
    UpdateError::Verify {
        url: url.to_owned(),
        message: message.into(),
    }
}

/// Reads a changeset replication `state.yaml`: its `sequence:` line.
fn read_yaml_sequence(path: &Path, url: &str) -> Result<u64, UpdateError> {
    let text = std::fs::read_to_string(path).map_err(|source| UpdateError::Io {
        path: path.to_owned(),
        source,
    })?;
    for (n, line) in text.lines().enumerate() {
        if let Some(v) = line.trim().strip_prefix("sequence:") {
            return v
                .trim()
                .trim_matches(|c| c == '"' || c == '\'')
                .parse()
                .map_err(|_| {
                    verify_err(
                        url,
                        format!("line {}: '{}' is not a sequence number", n + 1, v.trim()),
                    )
                });
        }
    }
    Err(verify_err(url, "no 'sequence:' line"))
}

/// Checks a download: a complete gzip stream holding an OSM document of the expected kind.
fn verify_osm(path: &Path, url: &str, kinds: &[InputKind]) -> Result<(), UpdateError> {
    let open = || {
        std::fs::File::open(path).map_err(|source| UpdateError::Io {
            path: path.to_owned(),
            source,
        })
    };
    let mut head = [0u8; 2];
    open()?
        .read_exact(&mut head)
        .map_err(|_| verify_err(url, "empty or truncated download (no gzip header)"))?;
    if head != [0x1f, 0x8b] {
        return Err(verify_err(url, "not gzip data"));
    }
    let mut gz = flate2::read::MultiGzDecoder::new(std::io::BufReader::new(open()?));
    std::io::copy(&mut gz, &mut std::io::sink())
        .map_err(|e| verify_err(url, format!("damaged or truncated gzip data: {e}")))?;
    let (kind, _) = ingest::sniff(path).map_err(|e| verify_err(url, e.to_string()))?;
    if !kinds.contains(&kind) {
        return Err(verify_err(
            url,
            format!("holds {} data, not the expected kind", kind.name()),
        ));
    }
    Ok(())
}

/// The sequences to fetch: after the recorded one (or from `from_sequence`, or the server's
/// own), at most `max_files`.
fn plan(
    url: &str,
    recorded: Option<u64>,
    server: u64,
    opts: &UpdateOptions,
) -> Result<std::ops::RangeInclusive<u64>, UpdateError> {
    let first = match recorded {
        Some(r) if r > server => {
            return Err(UpdateError::Options(format!(
                "{url}: the database has reached sequence {r}, but the server is at {server}; is this the same replication source?"
            )))
        }
        Some(r) => r + 1,
        None => opts.from_sequence.unwrap_or(server),
    };
    let last = match opts.max_files {
        Some(m) => server.min(first.saturating_add(m).saturating_sub(1)),
        None => server,
    };
    Ok(first..=last)
}

fn recorded(store: &Store, url: &str) -> Result<Option<u64>, UpdateError> {
    let key = meta_key(url);
    store
        .meta(&key)?
        .map(|v| {
            v.parse().map_err(|_| {
                UpdateError::Options(format!(
                    "{}: meta '{key}' holds '{v}', not a sequence number",
                    store.path().display()
                ))
            })
        })
        .transpose()
}

/// Adds `seq` to the gap list, merging with the previous range.
fn push_gap(gaps: &mut Vec<(u64, u64)>, seq: u64) {
    match gaps.last_mut() {
        Some((_, b)) if *b + 1 == seq => *b = seq,
        _ => gaps.push((seq, seq)),
    }
}

/// Downloads the diffs of one run into `dir`.
fn fetch_diffs(
    net: &Net,
    store: &Store,
    opts: &UpdateOptions,
    dir: &Path,
    progress: &Progress,
) -> Result<SourceRun, UpdateError> {
    let url = base(&opts.source).to_owned();
    let state_url = format!("{url}/state.txt");
    let state_file = dir.join("state.txt");
    if let Fetched::NotFound = net.fetch(&state_url, &state_file, MAX_STATE_BYTES)? {
        return Err(UpdateError::Status {
            url: state_url,
            status: 404,
        });
    }
    let server: State =
        read_state(&state_file).map_err(|e| verify_err(&state_url, e.to_string()))?;
    let before = recorded(store, &url)?;
    let range = plan(&url, before, server.sequence, opts)?;
    let mut run = SourceRun {
        url: url.clone(),
        before,
        after: before,
        server: server.sequence,
        files: 0,
        gaps: Vec::new(),
    };
    let bar = progress.steps(range.clone().count() as u64, "download");
    for seq in range {
        let rel = sequence_path(seq);
        let target = dir.join(format!("{rel}.osc.gz"));
        let state_path = dir.join(format!("{rel}.state.txt"));
        if let Some(parent) = target.parent() {
            std::fs::create_dir_all(parent).map_err(|source| UpdateError::Io {
                path: parent.to_owned(),
                source,
            })?;
        }
        let su = format!("{url}/{rel}.state.txt");
        let du = format!("{url}/{rel}.osc.gz");
        let has_state = matches!(net.fetch(&su, &state_path, MAX_STATE_BYTES)?, Fetched::Done);
        if has_state {
            let st = read_state(&state_path).map_err(|e| verify_err(&su, e.to_string()))?;
            if st.sequence != seq {
                return Err(verify_err(
                    &su,
                    format!("names sequence {}, not {seq}", st.sequence),
                ));
            }
            if opts.until.is_some_and(|u| st.timestamp > u) {
                std::fs::remove_file(&state_path).map_err(|source| UpdateError::Io {
                    path: state_path.clone(),
                    source,
                })?;
                progress.note(&format!(
                    "{url}: sequence {seq} is later than --until; stopping there"
                ));
                break;
            }
        }
        match net.fetch(&du, &target, MAX_DIFF_BYTES)? {
            Fetched::Done => {
                verify_osm(&target, &du, &[InputKind::Change])?;
                run.files += 1;
            }
            Fetched::NotFound if !has_state => push_gap(&mut run.gaps, seq),
            Fetched::NotFound => {
                return Err(UpdateError::Status {
                    url: du,
                    status: 404,
                })
            }
        }
        run.after = Some(seq);
        bar.inc(1);
    }
    bar.finish_and_clear();
    Ok(run)
}

/// Downloads the changeset metadata files of one run into `dir`.
fn fetch_changesets(
    net: &Net,
    store: &Store,
    url: &str,
    opts: &UpdateOptions,
    dir: &Path,
    progress: &Progress,
) -> Result<SourceRun, UpdateError> {
    let url = base(url).to_owned();
    let state_url = format!("{url}/state.yaml");
    let state_file = dir.join("state.yaml");
    if let Fetched::NotFound = net.fetch(&state_url, &state_file, MAX_STATE_BYTES)? {
        return Err(UpdateError::Status {
            url: state_url,
            status: 404,
        });
    }
    let server = read_yaml_sequence(&state_file, &state_url)?;
    let before = recorded(store, &url)?;
    let range = plan(&url, before, server, opts)?;
    let mut run = SourceRun {
        url: url.clone(),
        before,
        after: before,
        server,
        files: 0,
        gaps: Vec::new(),
    };
    let bar = progress.steps(range.clone().count() as u64, "changesets");
    for seq in range {
        let rel = sequence_path(seq);
        let target = dir.join(format!("{rel}.osm.gz"));
        if let Some(parent) = target.parent() {
            std::fs::create_dir_all(parent).map_err(|source| UpdateError::Io {
                path: parent.to_owned(),
                source,
            })?;
        }
        let u = format!("{url}/{rel}.osm.gz");
        match net.fetch(&u, &target, MAX_DIFF_BYTES)? {
            Fetched::Done => {
                // A file of a quiet minute holds no changeset and sniffs as an empty snapshot.
                verify_osm(&target, &u, &[InputKind::Changesets, InputKind::Snapshot])?;
                run.files += 1;
            }
            Fetched::NotFound => push_gap(&mut run.gaps, seq),
        }
        run.after = Some(seq);
        bar.inc(1);
    }
    bar.finish_and_clear();
    Ok(run)
}

/// Runs one update: downloads, checks and ingests in one transaction with the sequences
/// reached. On any error the database is unchanged.
///
/// # Errors
/// See [`UpdateError`].
pub fn update(
    store: &mut Store,
    opts: &UpdateOptions,
    progress: &Progress,
) -> Result<UpdateSummary, UpdateError> {
    let net = Net::new(opts.net);
    let parent = store
        .path()
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .map_or_else(|| PathBuf::from("."), Path::to_owned);
    // Beside the database, so a large download does not fill a small /tmp; removed on drop.
    let tmp = tempfile::Builder::new()
        .prefix(".hexvigil-update-")
        .tempdir_in(&parent)
        .map_err(|source| UpdateError::Io {
            path: parent.clone(),
            source,
        })?;
    let diff_dir = tmp.path().join("diffs");
    let cs_dir = tmp.path().join("changesets");
    for d in [&diff_dir, &cs_dir] {
        std::fs::create_dir_all(d).map_err(|source| UpdateError::Io {
            path: d.clone(),
            source,
        })?;
    }
    let diffs = fetch_diffs(&net, store, opts, &diff_dir, progress)?;
    let changesets = match &opts.changesets_source {
        Some(u) => Some(fetch_changesets(&net, store, u, opts, &cs_dir, progress)?),
        None => None,
    };
    for run in std::iter::once(&diffs).chain(&changesets) {
        if !run.gaps.is_empty() {
            progress.note(&format!("{}: {}", run.url, gap_words(&run.gaps)));
        }
    }
    // The state files at the top are not inputs.
    for f in [diff_dir.join("state.txt"), cs_dir.join("state.yaml")] {
        if f.exists() {
            std::fs::remove_file(&f).map_err(|source| UpdateError::Io { path: f, source })?;
        }
    }
    let mut meta = Vec::new();
    let mut inputs = Vec::new();
    for (run, dir) in [(Some(&diffs), &diff_dir), (changesets.as_ref(), &cs_dir)] {
        if let Some(run) = run {
            if let Some(after) = run.after.filter(|a| Some(*a) != run.before) {
                meta.push((meta_key(&run.url), after.to_string()));
            }
            if run.files > 0 {
                inputs.push(dir.clone());
            }
        }
    }
    let ingest = if meta.is_empty() {
        IngestSummary::default()
    } else {
        ingest::ingest_extended(
            store,
            &inputs,
            &IngestOptions::default(),
            &IngestExtras {
                meta: &meta,
                clip: opts.clip.as_ref(),
            },
            progress,
        )?
    };
    Ok(UpdateSummary {
        diffs,
        changesets,
        ingest,
    })
}

/// "missing sequence(s) 4-5, 9 on the server (gaps; the rest is ingested)".
#[must_use]
pub fn gap_words(gaps: &[(u64, u64)]) -> String {
    let list: Vec<String> = gaps
        .iter()
        .map(|&(a, b)| {
            if a == b {
                a.to_string()
            } else {
                format!("{a}-{b}")
            }
        })
        .collect();
    format!(
        "missing sequence(s) {} on the server (gaps; the rest is ingested)",
        list.join(", ")
    )
}

/// One line about a source's run.
#[must_use]
pub fn run_line(kind: &str, r: &SourceRun) -> String {
    let from = r
        .before
        .map_or_else(|| "none".to_owned(), |b| b.to_string());
    let to = r.after.map_or_else(|| "none".to_owned(), |a| a.to_string());
    let mut s = format!(
        "{kind} {}: sequence {from} -> {to} (server at {}), {} file(s) downloaded",
        r.url, r.server, r.files
    );
    if !r.gaps.is_empty() {
        s.push_str("; ");
        s.push_str(&gap_words(&r.gaps));
    }
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sequence_paths_and_keys() {
        assert_eq!(sequence_path(4_123_456), "004/123/456");
        assert_eq!(sequence_path(7), "000/000/007");
        assert_eq!(
            meta_key("http://h/minute/"),
            "replication_sequence http://h/minute"
        );
    }

    #[test]
    fn plans_start_and_stop() {
        let opts = UpdateOptions {
            max_files: Some(3),
            ..UpdateOptions::default()
        };
        assert_eq!(plan("u", Some(10), 20, &opts).unwrap(), 11..=13);
        assert_eq!(plan("u", Some(19), 20, &opts).unwrap(), 20..=20);
        assert!(plan("u", Some(20), 20, &opts).unwrap().is_empty());
        assert!(plan("u", Some(21), 20, &opts).is_err());
        assert_eq!(plan("u", None, 20, &opts).unwrap(), 20..=20);
        let from = UpdateOptions {
            from_sequence: Some(1),
            ..UpdateOptions::default()
        };
        assert_eq!(plan("u", None, 20, &from).unwrap(), 1..=20);
    }

    #[test]
    fn gaps_merge() {
        let mut g = Vec::new();
        for s in [3, 4, 5, 9] {
            push_gap(&mut g, s);
        }
        assert_eq!(g, vec![(3, 5), (9, 9)]);
        assert!(gap_words(&g).contains("3-5, 9"));
    }

    #[test]
    fn changeset_state_yaml() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("state.yaml");
        // Source: the changeset replication state file layout (a `last_run` and a `sequence`).
        std::fs::write(
            &p,
            "---\nlast_run: 2026-11-29 23:59:01.000000000 +00:00\nsequence: 6123456\n",
        )
        .unwrap();
        assert_eq!(read_yaml_sequence(&p, "u").unwrap(), 6_123_456);
        std::fs::write(&p, "---\nsequence: x\n").unwrap();
        assert!(read_yaml_sequence(&p, "u")
            .unwrap_err()
            .to_string()
            .contains("line 2"));
    }
}
