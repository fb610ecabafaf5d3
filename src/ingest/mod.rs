//! Reading OSM files into the state database.
//!
//! Inputs are OSM XML (plain, gzip or bzip2, detected from the first bytes, not the name) read
//! by the streaming reader in [`xml`], and PBF snapshots read by [`pbf`]; a replication folder
//! ([`replication`]) is one input whose diffs are read in sequence order. Parser threads read
//! the files in parallel into bounded queues of batches; one writer applies the batches to an
//! [`IngestTx`] and the node-location index in a fixed order (snapshots, changeset metadata,
//! diffs by path, which is sequence order in a replication folder), so the result does not
//! depend on scheduling and memory does not grow with the input.
//!
//! One ingest command is one transaction: every input lands, or none does, in the database and
//! in the node-location index alike (see [`crate::node_index`] for the order of the file switch
//! and the commit). A file whose content hash is already recorded is skipped, so the same input
//! ingested twice counts once; overlapping diffs count once too: readers of the edit log keep
//! one copy of each element type, id and version.
//!
//! The writer does no database work for most of a diff: an edit is appended to a block of the
//! edit log ([`crate::store::edit_log`]), a created version 1 replaces nothing and needs no
//! lookup, and untagged nodes go only to the node-location index. Earlier states are looked up
//! (with statements prepared once) for modifications and deletions, and `elements` rows are
//! written for ways, relations and tagged nodes. Parsers pack tags and refs on their own threads.

pub mod clip;
pub mod pbf;
pub mod replication;
pub mod xml;

use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::mpsc::{sync_channel, Receiver, SyncSender};
use std::sync::Mutex;
use std::time::Instant;

use rayon::prelude::*;
use sha2::{Digest, Sha256};

use foldhash::HashMap;

use crate::element_state::{ElementStateTx, RowRef};
use crate::model::{ElementType, Op};
use crate::node_index::{NodeEntry, NodeIndexTx};
use crate::progress::Progress;
use crate::store::edit_log::{BlockBuilder, EditRef, PrevRef};
use crate::store::{
    grid_square, member_code, member_decode, pack_refs_into, pack_tags_into, unpack_refs, IngestTx,
    Store, StoreError, Work,
};
use replication::{Replication, SequenceRange};
use xml::{OsmSink, RawChangeset, RawElement, ReadError, Root, SinkError};

/// Errors of an ingest; every variant names the file.
#[derive(Debug, thiserror::Error)]
pub enum IngestError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}:{line}:{column}: {message} (byte {offset} of the XML text)")]
    Parse {
        path: PathBuf,
        line: u64,
        column: u64,
        offset: u64,
        message: String,
    },
    #[error("{path}: {message}")]
    Format { path: PathBuf, message: String },
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// How the file is encoded, from a look at its first bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// OSM XML, plain or gzip or bzip2 compressed.
    Xml,
    /// OSM PBF (`.osm.pbf`).
    Pbf,
}

/// What the file holds, from a look at its first bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum InputKind {
    /// `<osm>` with nodes, ways, relations, or a PBF file.
    Snapshot,
    /// `<osm>` with changesets.
    Changesets,
    /// `<osmChange>`.
    Change,
}

impl InputKind {
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Snapshot => "snapshot",
            Self::Changesets => "changesets",
            Self::Change => "osmchange",
        }
    }
}

/// Choices for an ingest beyond its inputs.
#[derive(Debug, Clone, Copy, Default)]
pub struct IngestOptions {
    /// Only these sequence numbers of replication folders.
    pub sequences: Option<SequenceRange>,
}

/// Totals of one ingest.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct IngestSummary {
    /// Replication folders among the inputs: selected diffs, timestamps, gaps.
    pub replication: Vec<Replication>,
    pub files: u64,
    /// Files skipped because their content was ingested before.
    pub already_ingested: u64,
    pub elements: u64,
    /// Element versions from diffs recorded in the edit log (a version an overlapping file
    /// already delivered is recorded again and counted once when read).
    pub edits: u64,
    pub changesets: u64,
    pub skipped_elements: u64,
    /// Elements and changesets dropped as outside the clip area ([`IngestExtras::clip`]).
    pub clipped: u64,
    pub bytes: u64,
    pub elapsed_ms: u64,
}

/// Longest accepted decompressed size of one input, as a multiple of its compressed size plus a
/// floor, against decompression bombs. OSM XML compresses about 10-15 times with gzip and up to
/// about 25 times with bzip2 (common practice, no source), so 200 leaves ample room.
const MAX_EXPANSION: u64 = 200;
const EXPANSION_FLOOR: u64 = 64 << 20;

fn io_err(path: &Path) -> impl Fn(std::io::Error) -> IngestError + '_ {
    move |source| IngestError::Io {
        path: path.to_owned(),
        source,
    }
}

/// A reader that adds the bytes it reads to a shared counter (for the progress bar).
struct Counting<'a, R> {
    inner: R,
    count: Option<&'a AtomicU64>,
}

impl<R: Read> Read for Counting<'_, R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        if let Some(c) = self.count {
            c.fetch_add(n as u64, Ordering::Relaxed);
        }
        Ok(n)
    }
}

impl<R: std::io::Seek> std::io::Seek for Counting<'_, R> {
    fn seek(&mut self, pos: std::io::SeekFrom) -> std::io::Result<u64> {
        self.inner.seek(pos)
    }
}

/// A reader that refuses to produce more than `limit` bytes.
struct Capped<R> {
    inner: R,
    left: u64,
}

impl<R: Read> Read for Capped<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        self.left = self.left.checked_sub(n as u64).ok_or_else(|| {
            std::io::Error::new(
                std::io::ErrorKind::InvalidData,
                "decompressed size exceeds the limit (a decompression bomb?)",
            )
        })?;
        Ok(n)
    }
}

/// Opens a file and undoes its compression (gzip or bzip2, by magic bytes).
///
/// # Errors
/// When the file cannot be opened.
pub fn open_decompressed(path: &Path) -> Result<Box<dyn BufRead + Send>, IngestError> {
    open_counted(path, None)
}

/// Like [`open_decompressed`], adding the compressed bytes read to `count`.
fn open_counted<'a>(
    path: &Path,
    count: Option<&'a AtomicU64>,
) -> Result<Box<dyn BufRead + Send + 'a>, IngestError> {
    let file = File::open(path).map_err(io_err(path))?;
    let size = file.metadata().map_err(io_err(path))?.len();
    let mut raw = BufReader::with_capacity(1 << 16, Counting { inner: file, count });
    let head = raw.fill_buf().map_err(io_err(path))?;
    let limit = size.saturating_mul(MAX_EXPANSION).max(EXPANSION_FLOOR);
    Ok(if head.starts_with(&[0x1f, 0x8b]) {
        Box::new(BufReader::with_capacity(
            1 << 16,
            Capped {
                inner: flate2::bufread::MultiGzDecoder::new(raw),
                left: limit,
            },
        ))
    } else if head.starts_with(b"BZh") {
        Box::new(BufReader::with_capacity(
            1 << 16,
            Capped {
                inner: bzip2::bufread::MultiBzDecoder::new(raw),
                left: limit,
            },
        ))
    } else {
        Box::new(raw)
    })
}

/// Looks at the start of a (decompressed) file to tell its kind and format.
///
/// # Errors
/// When the file is unreadable, binary, or neither OSM XML nor PBF.
pub fn sniff(path: &Path) -> Result<(InputKind, Format), IngestError> {
    let mut r = open_decompressed(path)?;
    let mut head = Vec::with_capacity(1 << 16);
    (&mut r)
        .take(1 << 16)
        .read_to_end(&mut head)
        .map_err(|e| IngestError::Format {
            path: path.to_owned(),
            message: format!("damaged or truncated compressed data near the start: {e}"),
        })?;
    let fmt = |message: &str| IngestError::Format {
        path: path.to_owned(),
        message: message.to_owned(),
    };
    // Source: OSM wiki "PBF Format": a 4-byte big-endian header length, then a BlobHeader
    // message whose field 1 (tag byte 0x0A, length 9) is the type string "OSMHeader".
    if head.len() >= 15 && head[4] == 0x0A && head[5] == 9 && &head[6..15] == b"OSMHeader" {
        return Ok((InputKind::Snapshot, Format::Pbf));
    }
    let text = String::from_utf8_lossy(&head);
    let trimmed = text.trim_start_matches('\u{feff}').trim_start();
    if trimmed.is_empty() {
        return Err(fmt("empty file: expected OSM XML (<osm> or <osmChange>)"));
    }
    if !trimmed.starts_with('<') || head.iter().take(512).any(|&b| b == 0) {
        return Err(fmt("not an XML document (binary or unknown content); expected OSM XML, optionally gzip or bzip2 compressed"));
    }
    if text.contains("<osmChange") {
        return Ok((InputKind::Change, Format::Xml));
    }
    let first = |needle: &str| text.find(needle).unwrap_or(usize::MAX);
    let cs = first("<changeset");
    let el = first("<node").min(first("<way")).min(first("<relation"));
    if cs < el {
        Ok((InputKind::Changesets, Format::Xml))
    } else {
        // Snapshots and anything else: the parser gives the precise error for a wrong root.
        Ok((InputKind::Snapshot, Format::Xml))
    }
}

/// Expands folders into the OSM files they hold (recursively, sorted by path); diffs in the
/// replication layout (`AAA/BBB/CCC.osc.gz`) are grouped by replication folder and selected by
/// `sequences`.
///
/// # Errors
/// When a folder cannot be listed, a path does not exist, a state file is bad, or a sequence
/// range is given without any replication folder.
pub fn expand_inputs(
    inputs: &[PathBuf],
    sequences: Option<SequenceRange>,
) -> Result<(Vec<PathBuf>, Vec<Replication>), IngestError> {
    let mut out = Vec::new();
    let mut in_folders = Vec::new();
    for p in inputs {
        let meta = std::fs::metadata(p).map_err(io_err(p))?;
        if meta.is_dir() {
            let mut stack = vec![p.clone()];
            let mut found = Vec::new();
            while let Some(d) = stack.pop() {
                for entry in std::fs::read_dir(&d).map_err(io_err(&d))? {
                    let entry = entry.map_err(io_err(&d))?;
                    let path = entry.path();
                    if path.is_dir() {
                        stack.push(path);
                    } else if is_osm_name(&path) {
                        found.push(path);
                    }
                }
            }
            found.sort();
            in_folders.extend(found);
        } else {
            out.push(p.clone());
        }
    }
    let (reps, others) = replication::select(in_folders, sequences)?;
    if let (Some(r), true) = (sequences, reps.is_empty()) {
        return Err(IngestError::Format {
            path: inputs.first().cloned().unwrap_or_default(),
            message: format!(
                "--sequences {}-{} was given, but no input folder holds replication diffs (AAA/BBB/CCC.osc.gz)",
                r.first, r.last
            ),
        });
    }
    out.extend(others);
    out.extend(
        reps.iter()
            .flat_map(|r| r.files.iter().map(|f| f.1.clone())),
    );
    Ok((out, reps))
}

fn is_osm_name(p: &Path) -> bool {
    let n = p
        .file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    [
        ".osc", ".osc.gz", ".osc.bz2", ".osm", ".osm.gz", ".osm.bz2", ".osm.pbf",
    ]
    .iter()
    .any(|s| n.ends_with(s))
}

fn hash_file(path: &Path) -> Result<String, IngestError> {
    let mut f = BufReader::with_capacity(1 << 16, File::open(path).map_err(io_err(path))?);
    let mut h = Sha256::new();
    std::io::copy(&mut f, &mut h).map_err(io_err(path))?;
    Ok(h.finalize().iter().map(|b| format!("{b:02x}")).collect())
}

/// Turns a byte offset of the decompressed text into a 1-based line and column.
fn line_col(path: &Path, offset: u64) -> (u64, u64) {
    let Ok(r) = open_decompressed(path) else {
        return (0, 0);
    };
    let (mut line, mut col) = (1u64, 1u64);
    for b in r
        .bytes()
        .take(usize::try_from(offset).unwrap_or(usize::MAX))
    {
        match b {
            Ok(b'\n') => {
                line += 1;
                col = 1;
            }
            // Count characters, not UTF-8 continuation bytes.
            Ok(b) if b & 0xC0 != 0x80 => col += 1,
            Ok(_) => {}
            Err(_) => break,
        }
    }
    (line, col)
}

/// An element version as the writer receives it: its tags and refs packed as they are stored
/// ([`crate::store::pack_tags`], [`crate::store::pack_refs`]), on the parser's thread.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Element {
    pub etype: ElementType,
    pub id: i64,
    pub version: i64,
    /// Unix seconds; 0 when absent.
    pub timestamp: i64,
    pub changeset: i64,
    pub uid: i64,
    pub user: String,
    pub visible: bool,
    /// Latitude and longitude in 1e-7 degrees.
    pub pos: Option<(i32, i32)>,
    /// Packed tags.
    pub tags: String,
    /// Packed node refs of a way, or members of a relation ([`member_code`]); empty when it
    /// has none (a node's buffer is kept for the way a refill may make of it), see
    /// [`Element::refs`].
    pub refs: Vec<u8>,
}

impl Element {
    /// The position as a coordinate.
    #[must_use]
    pub fn coord(&self) -> Option<crate::model::Coord> {
        self.pos
            .and_then(|(a, b)| crate::model::Coord::from_e7(a.into(), b.into()))
    }

    /// The packed refs or members, `None` when there are none.
    #[must_use]
    pub fn refs(&self) -> Option<&[u8]> {
        (!self.refs.is_empty()).then_some(self.refs.as_slice())
    }

    /// Packs a read element; `None` when the reader could not tell its type.
    #[must_use]
    pub fn pack(el: &RawElement) -> Option<Self> {
        let mut e = Self {
            etype: el.etype?,
            id: 0,
            version: 0,
            timestamp: 0,
            changeset: 0,
            uid: 0,
            user: String::new(),
            visible: false,
            pos: None,
            tags: String::new(),
            refs: Vec::new(),
        };
        e.refill(el).then_some(e)
    }

    /// Makes this element the packed form of `el`, reusing its buffers; false (and unchanged)
    /// when `el` has no type.
    pub fn refill(&mut self, el: &RawElement) -> bool {
        let Some(etype) = el.etype else {
            return false;
        };
        self.etype = etype;
        self.id = el.id;
        self.version = el.version;
        self.timestamp = el.timestamp;
        self.changeset = el.changeset;
        self.uid = el.uid;
        self.user.clear();
        self.user.push_str(&el.user);
        self.visible = el.visible;
        self.pos = el.coord.map(|c| (c.lat_e7(), c.lon_e7()));
        pack_tags_into(&el.tags, &mut self.tags);
        // Packing nothing leaves the buffer empty (a node, a way without refs) but keeps its
        // room for the element packed into it next.
        match etype {
            ElementType::Node => self.refs.clear(),
            ElementType::Way => pack_refs_into(el.refs.iter().copied(), &mut self.refs),
            ElementType::Relation => pack_refs_into(
                el.members.iter().map(|&(t, id)| member_code(t, id)),
                &mut self.refs,
            ),
        }
        true
    }
}

/// One thing read from an input, owned so it can move from a parser thread to the writer.
#[derive(Debug, Clone)]
pub enum Item {
    Changeset(RawChangeset),
    /// An element version; the op is `None` in snapshots.
    Element(Option<Op>, Element),
    /// An odd but valid element was skipped, for this reason.
    Skipped(&'static str),
}

/// Items per batch handed from a parser to the writer.
const BATCH_ITEMS: usize = 4096;
/// Batches queued per input before its parser waits for the writer.
const QUEUED_BATCHES: usize = 4;

/// What a parser thread sends the writer about one input.
enum Msg {
    Batch {
        items: Vec<Item>,
        bytes: u64,
    },
    /// The input was read to its end; `bytes` not yet reported.
    Done {
        root: Option<Root>,
        bytes: u64,
        /// The input's first-node squares that need no database state ([`square_mark`]).
        squares: Vec<(i64, i64)>,
    },
    Failed(IngestError),
}

/// One input to read.
struct Input {
    kind: InputKind,
    format: Format,
    path: PathBuf,
    hash: String,
    size: u64,
}

/// Ingests files into the database as one transaction; see [`ingest_with`].
///
/// # Errors
/// The first bad file stops the ingest, which is then rolled back.
pub fn ingest(
    store: &mut Store,
    inputs: &[PathBuf],
    progress: &Progress,
) -> Result<IngestSummary, IngestError> {
    ingest_with(store, inputs, &IngestOptions::default(), progress)
}

/// What an ingest adds beyond reading its inputs, for `update`.
#[derive(Debug, Clone, Copy, Default)]
pub struct IngestExtras<'a> {
    /// `meta` values written in the ingest's transaction (the replication sequences reached).
    pub meta: &'a [(String, String)],
    /// Keep only what lies in this area (see [`clip`]).
    pub clip: Option<&'a clip::Clip>,
}

/// Ingests files into the database and the node-location index as one transaction; see
/// [`ingest_extended`].
///
/// # Errors
/// The first bad file stops the ingest, which is then rolled back.
pub fn ingest_with(
    store: &mut Store,
    inputs: &[PathBuf],
    options: &IngestOptions,
    progress: &Progress,
) -> Result<IngestSummary, IngestError> {
    ingest_extended(store, inputs, options, &IngestExtras::default(), progress)
}

/// Ingests files into the database and the node-location index as one transaction, with the
/// `meta` values and the clip area of `extras`.
///
/// Order: snapshots first, then changeset metadata, then diffs, each group by path (daily and
/// replication file names sort in time order), so each edit finds the state it replaced.
///
/// # Errors
/// The first bad file (in that order) stops the ingest, which is then rolled back.
pub fn ingest_extended(
    store: &mut Store,
    inputs: &[PathBuf],
    options: &IngestOptions,
    extras: &IngestExtras<'_>,
    progress: &Progress,
) -> Result<IngestSummary, IngestError> {
    let started = Instant::now();
    let (files, replication) = expand_inputs(inputs, options.sequences)?;
    for r in &replication {
        progress.note(&replication_note(r));
    }
    let mut classified = Vec::with_capacity(files.len());
    for f in files {
        let (kind, format) = sniff(&f)?;
        classified.push((kind, format, f));
    }
    classified.sort_by(|a, b| (a.0, &a.2).cmp(&(b.0, &b.2)));
    let hashed: Vec<Result<Input, IngestError>> = classified
        .into_par_iter()
        .map(|(kind, format, path)| {
            let size = std::fs::metadata(&path).map_err(io_err(&path))?.len();
            let hash = hash_file(&path)?;
            Ok(Input {
                kind,
                format,
                path,
                hash,
                size,
            })
        })
        .collect();
    let mut summary = IngestSummary {
        replication,
        ..IngestSummary::default()
    };
    let prefix = store.node_index_prefix();
    let state_prefix = store.element_state_prefix();
    let tx = store.begin()?;
    let committed = tx.node_generation()?;
    // The write lock is held: no other ingest writes index files now.
    crate::generations::remove_others(&prefix, committed).map_err(StoreError::from)?;
    let mut nodes = NodeIndexTx::begin(&prefix, committed).map_err(StoreError::from)?;
    let state_committed = tx.elements_generation()?;
    crate::generations::remove_others(&state_prefix, state_committed).map_err(StoreError::from)?;
    let mut state =
        ElementStateTx::begin(&state_prefix, state_committed).map_err(StoreError::from)?;
    let mut todo = Vec::new();
    let mut seen = std::collections::HashSet::new();
    for input in hashed {
        let input = input?;
        summary.bytes += input.size;
        if !seen.insert(input.hash.clone()) || tx.has_input(&input.hash)? {
            // Named one by one only when few; the summary line counts them all.
            summary.already_ingested += 1;
            if summary.already_ingested <= 3 {
                progress.note(&format!(
                    "{}: already ingested, skipped",
                    input.path.display()
                ));
            }
            continue;
        }
        todo.push(input);
    }
    let bar = progress.bytes(todo.iter().map(|i| i.size).sum(), "ingest");
    let now = chrono::Utc::now().timestamp();
    run_parsers(&todo, |i, rx, spares| {
        let input = &todo[i];
        let mut w = Writer {
            tx: &tx,
            state: &mut state,
            nodes: &mut nodes,
            elements: 0,
            changesets: 0,
            edits: 0,
            clipped: 0,
            clip: extras.clip,
            skipped: std::collections::BTreeMap::new(),
            log: BlockBuilder::default(),
            work: HashMap::default(),
            current: None,
            squares: Squares::default(),
            stored: crate::element_state::Row::default(),
        };
        let root = loop {
            match rx.recv() {
                Ok(Msg::Batch { items, bytes }) => {
                    for item in &items {
                        w.apply(item)?;
                    }
                    spares.give(items);
                    bar.inc(bytes);
                }
                Ok(Msg::Done {
                    root,
                    bytes,
                    squares,
                }) => {
                    // Under a clip area the writer marks what it keeps itself.
                    if extras.clip.is_none() {
                        tx.add_grid_first(&squares)?;
                    }
                    bar.inc(bytes);
                    break root;
                }
                Ok(Msg::Failed(e)) => return Err(e),
                Err(_) => {
                    return Err(IngestError::Format {
                        path: input.path.clone(),
                        message: "the reader stopped unexpectedly".to_owned(),
                    })
                }
            }
        };
        if root.is_some_and(|r| (r == Root::OsmChange) != (input.kind == InputKind::Change)) {
            return Err(IngestError::Format {
                path: input.path.clone(),
                message: "the root element does not match the file's content".to_owned(),
            });
        }
        w.finish()?;
        for (reason, n) in &w.skipped {
            tx.add_skipped(reason, *n)?;
            summary.skipped_elements += n;
        }
        tx.record_input(
            &input.hash,
            &input.path.display().to_string(),
            input.kind.name(),
            w.elements,
            w.changesets,
            now,
        )?;
        summary.files += 1;
        summary.elements += w.elements;
        summary.changesets += w.changesets;
        summary.edits += w.edits;
        summary.clipped += w.clipped;
        Ok(())
    })?;
    // The index file of the next generation is complete and in place before the database
    // names it; until the commit the database still names the previous one. The two files
    // are independent: each is merged on its own thread (a core each when there are two).
    let (prepared, prepared_state) = std::thread::scope(|scope| {
        let nodes = scope.spawn(move || nodes.prepare());
        let state = state.prepare();
        // A panic there is a bug, not bad input: it goes on as one here.
        let nodes = nodes
            .join()
            .unwrap_or_else(|p| std::panic::resume_unwind(p));
        (nodes, state)
    });
    let prepared = prepared.map_err(StoreError::from)?;
    let prepared_state = prepared_state.map_err(StoreError::from)?;
    if let Some(p) = &prepared {
        tx.set_node_generation(p.generation())?;
    }
    if let Some(p) = &prepared_state {
        tx.set_elements_generation(p.generation())?;
    }
    for (k, v) in extras.meta {
        tx.set_meta(k, v)?;
    }
    tx.commit()?;
    if let Some(p) = prepared {
        p.committed();
    }
    if let Some(p) = prepared_state {
        p.committed();
    }
    bar.finish();
    summary.elapsed_ms = u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX);
    Ok(summary)
}

/// The note shown for a replication folder: its span, times and gaps.
#[must_use]
pub fn replication_note(r: &Replication) -> String {
    let time = |t: Option<i64>| {
        t.and_then(|t| chrono::DateTime::from_timestamp(t, 0))
            .map(|t| t.format(" %Y-%m-%d %H:%M UTC").to_string())
            .unwrap_or_default()
    };
    let mut s = match r.span() {
        Some((a, b)) => format!(
            "replication folder {}: {} diff(s), sequences {a}{} to {b}{}",
            r.root.display(),
            r.files.len(),
            time(r.first_time),
            time(r.last_time)
        ),
        None => format!(
            "replication folder {}: no diff in the requested sequences",
            r.root.display()
        ),
    };
    if !r.gaps.is_empty() {
        let gaps: Vec<String> = r
            .gaps
            .iter()
            .map(|&(a, b)| {
                if a == b {
                    a.to_string()
                } else {
                    format!("{a}-{b}")
                }
            })
            .collect();
        s.push_str(&format!(
            "; missing sequence(s) {} (a gap: the rest is ingested)",
            gaps.join(", ")
        ));
    }
    s
}

/// Runs parser threads over `inputs` while `consume` applies each input's batches in input
/// order on the calling thread. Threads claim inputs in order and each works on one input at a
/// time, so the input being consumed always has a thread, and a parser blocked on its full
/// queue only waits for the writer; queues are bounded, so memory is too.
///
/// Plain threads rather than rayon tasks: a parser spends its life blocked on its queue, which
/// would starve the rayon pool that decodes PBF blocks.
fn run_parsers(
    inputs: &[Input],
    mut consume: impl FnMut(usize, &Receiver<Msg>, &Spares) -> Result<(), IngestError>,
) -> Result<(), IngestError> {
    if inputs.is_empty() {
        return Ok(());
    }
    let mut senders = Vec::with_capacity(inputs.len());
    let mut receivers = Vec::with_capacity(inputs.len());
    for _ in inputs {
        let (s, r) = sync_channel::<Msg>(QUEUED_BATCHES);
        senders.push(Mutex::new(Some(s)));
        receivers.push(r);
    }
    let next = AtomicUsize::new(0);
    let stop = AtomicBool::new(false);
    let spares = Spares::default();
    let threads = std::thread::available_parallelism()
        .map_or(1, std::num::NonZeroUsize::get)
        .clamp(1, inputs.len());
    std::thread::scope(|scope| {
        for _ in 0..threads {
            scope.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::SeqCst);
                if i >= inputs.len() || stop.load(Ordering::SeqCst) {
                    break;
                }
                let sender = senders[i].lock().ok().and_then(|mut s| s.take());
                if let Some(sender) = sender {
                    parse_input(&inputs[i], &sender, &spares);
                }
            });
        }
        let mut result = Ok(());
        for (i, rx) in receivers.iter().enumerate() {
            result = consume(i, rx, &spares);
            if result.is_err() {
                break;
            }
        }
        // On failure: parsers see their queues closed and stop; no new input is started.
        stop.store(true, Ordering::SeqCst);
        drop(receivers);
        result
    })
}

/// Reads one input and sends its batches, then `Done` or `Failed`.
fn parse_input(input: &Input, sender: &SyncSender<Msg>, spares: &Spares) {
    let bytes = AtomicU64::new(0);
    let mut reported = 0u64;
    // Marked here, on the parser's thread, to spare the writer: most of an input's marks need
    // no database state.
    let mut squares = Squares::default();
    let mut send = |items: Vec<Item>| -> Result<(), SinkError> {
        for item in &items {
            if let Item::Element(op, el) = item {
                if let Some((p, since)) = square_mark(*op, el) {
                    squares.mark(p, since);
                }
            }
        }
        let now = bytes.load(Ordering::Relaxed);
        let msg = Msg::Batch {
            items,
            bytes: now.saturating_sub(reported),
        };
        reported = now;
        sender
            .send(msg)
            .map_err(|_| SinkError::from("the ingest stopped"))
    };
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| match input.format {
        Format::Xml => parse_xml(&input.path, &bytes, spares, &mut send),
        Format::Pbf => pbf::read_pbf(&input.path, &bytes, &mut send).map(|()| None),
    }))
    .unwrap_or_else(|_| {
        Err(IngestError::Format {
            path: input.path.clone(),
            message: "the reader failed on malformed data".to_owned(),
        })
    });
    let msg = match result {
        Ok(root) => Msg::Done {
            root,
            squares: squares.take(),
            bytes: input.size.saturating_sub(reported),
        },
        Err(e) => Msg::Failed(e),
    };
    // A closed queue means the writer stopped; nothing more to say.
    let _ = sender.send(msg);
}

/// Batches the writer has applied, handed back to the parsers, which refill their elements'
/// buffers instead of allocating new ones: allocating them on one thread and freeing them on
/// another cost about 4 % of an ingest (BENCHMARKS.md, "Lookups at scale").
#[derive(Default)]
struct Spares(Mutex<Vec<Vec<Item>>>);

/// Applied batches kept for reuse (a parser takes one per batch it fills). On one core the
/// writer applies a whole queue of batches at a time, so the pool holds a queue's worth: with
/// room for 2, the rest were dropped and their successors allocated afresh (growing buffers took
/// 3.8 % of a 4x ingest's samples, 2.8 % with this pool; BENCHMARKS.md, session 8).
const SPARE_BATCHES: usize = QUEUED_BATCHES + 2;

impl Spares {
    fn give(&self, items: Vec<Item>) {
        if let Ok(mut s) = self.0.lock() {
            if s.len() < SPARE_BATCHES {
                s.push(items);
            }
        }
    }

    fn take(&self) -> Vec<Item> {
        self.0
            .lock()
            .ok()
            .and_then(|mut s| s.pop())
            .unwrap_or_default()
    }
}

/// Collects the XML reader's output into batches.
struct BatchSink<'a> {
    items: Vec<Item>,
    /// Applied items whose elements the next ones are packed into.
    spare: Vec<Item>,
    spares: &'a Spares,
    send: &'a mut dyn FnMut(Vec<Item>) -> Result<(), SinkError>,
}

impl BatchSink<'_> {
    fn push(&mut self, item: Item) -> Result<(), SinkError> {
        self.items.push(item);
        if self.items.len() >= BATCH_ITEMS {
            let full = std::mem::replace(&mut self.items, Vec::with_capacity(BATCH_ITEMS));
            (self.send)(full)?;
            self.spare = self.spares.take();
        }
        Ok(())
    }
}

impl OsmSink for BatchSink<'_> {
    fn changeset(&mut self, cs: &RawChangeset) -> Result<(), SinkError> {
        self.push(Item::Changeset(cs.clone()))
    }

    fn element(&mut self, op: Option<Op>, el: &RawElement) -> Result<(), SinkError> {
        let packed = match self.spare.pop() {
            Some(Item::Element(_, mut e)) => e.refill(el).then_some(e),
            _ => Element::pack(el),
        };
        match packed {
            Some(p) => self.push(Item::Element(op, p)),
            None => Ok(()),
        }
    }

    fn skipped(&mut self, reason: &'static str) {
        self.items.push(Item::Skipped(reason));
    }
}

fn parse_xml(
    path: &Path,
    bytes: &AtomicU64,
    spares: &Spares,
    send: &mut dyn FnMut(Vec<Item>) -> Result<(), SinkError>,
) -> Result<Option<Root>, IngestError> {
    let reader = open_counted(path, Some(bytes))?;
    let mut sink = BatchSink {
        items: Vec::with_capacity(BATCH_ITEMS),
        spare: spares.take(),
        spares,
        send,
    };
    let root = xml::read_osm(reader, &mut sink).map_err(|e| match e {
        ReadError::Parse(p) => {
            let (line, column) = line_col(path, p.offset);
            let m = &p.message;
            // A decompression failure surfaces as an XML read error; say what it really is.
            if m.contains("gzip")
                || m.contains("deflate")
                || m.contains("bzip")
                || m.contains("decompress")
                || m.contains("corrupt")
            {
                IngestError::Format {
                    path: path.to_owned(),
                    message: format!("damaged or truncated compressed data at line {line}, column {column} (byte {} of the text): {m}", p.offset),
                }
            } else {
                IngestError::Parse {
                    path: path.to_owned(),
                    line,
                    column,
                    offset: p.offset,
                    message: p.message,
                }
            }
        }
        ReadError::Sink(s) => IngestError::Format {
            path: path.to_owned(),
            message: s.to_string(),
        },
    })?;
    let rest = std::mem::take(&mut sink.items);
    (sink.send)(rest).map_err(|e| IngestError::Format {
        path: path.to_owned(),
        message: e.to_string(),
    })?;
    Ok(Some(root))
}

/// The one writer: applies items to the database transaction and the node-location index.
struct Writer<'a, 'b> {
    tx: &'a IngestTx<'b>,
    /// The element state: ways, relations and tagged nodes.
    state: &'a mut ElementStateTx,
    nodes: &'a mut NodeIndexTx,
    elements: u64,
    changesets: u64,
    edits: u64,
    clipped: u64,
    clip: Option<&'a clip::Clip>,
    skipped: std::collections::BTreeMap<&'static str, u64>,
    /// The edit log's block being filled.
    log: BlockBuilder,
    /// Per changeset: this input's edits.
    work: HashMap<i64, Work>,
    /// The changeset of the last edit and its work, not yet in `work`.
    current: Option<(i64, Work)>,
    squares: Squares,
    /// The buffers of the last element state looked up, reused.
    stored: crate::element_state::Row,
}

/// The state an edit replaces, as stored before it (borrowed from the element state's row, or
/// from the node-location index's entry).
struct Prev<'a> {
    version: i64,
    /// Unknown for untagged nodes, which only the node-location index holds.
    ts: Option<i64>,
    tags: &'a str,
    pos: Option<(i32, i32)>,
    refs: Option<&'a [u8]>,
}

/// First-node times of `grid_first` squares found in one input, in tiles of 64 × 64 squares
/// allocated when first touched: marking a square is an array write, without hashing (a
/// hash map here was a tenth of an ingest's time on scattered creations).
struct Squares {
    /// Row-major tiles of the world's 18 000 × 36 000 squares; `i64::MAX` is unmarked.
    tiles: Vec<Option<Box<[i64; TILE * TILE]>>>,
    allocated: usize,
}

/// The first-node mark an element makes without any database state: a snapshot node since its
/// creation when it is a version 1, else since before the data; a created node since its
/// creation. (A node first met in a modification is marked by the writer, which knows.)
fn square_mark(op: Option<Op>, el: &Element) -> Option<((i32, i32), i64)> {
    let p = el.pos.filter(|_| el.etype == ElementType::Node)?;
    match op {
        None if el.version == 1 => Some((p, el.timestamp)),
        None => Some((p, i64::MIN)),
        Some(Op::Create) => Some((p, el.timestamp)),
        Some(_) => None,
    }
}

/// Squares per tile side.
const TILE: usize = 64;
/// Squares per world row and column ([`grid_square`]: 0.01° from 90° S and 180° W).
const SQUARE_ROWS: usize = 18_001;
const SQUARE_COLS: usize = 36_001;
const TILE_COLS: usize = SQUARE_COLS.div_ceil(TILE);
/// Tiles held before they are written out (4 096 tiles are 128 MiB).
const MAX_TILES: usize = 4_096;

impl Default for Squares {
    fn default() -> Self {
        let mut tiles = Vec::new();
        tiles.resize_with(SQUARE_ROWS.div_ceil(TILE) * TILE_COLS, || None);
        Self {
            tiles,
            allocated: 0,
        }
    }
}

impl Squares {
    fn mark(&mut self, (lat, lon): (i32, i32), t: i64) {
        let sq = grid_square(lat, lon);
        let (Ok(row), Ok(col)) = (usize::try_from(sq >> 16), usize::try_from(sq & 0xFFFF)) else {
            return;
        };
        let Some(slot) = self.tiles.get_mut((row / TILE) * TILE_COLS + col / TILE) else {
            return;
        };
        let tile = slot.get_or_insert_with(|| {
            self.allocated += 1;
            Box::new([i64::MAX; TILE * TILE])
        });
        let v = &mut tile[(row % TILE) * TILE + col % TILE];
        *v = (*v).min(t);
    }

    fn is_large(&self) -> bool {
        self.allocated >= MAX_TILES
    }

    /// The marked squares and their times; the tiles are emptied.
    fn take(&mut self) -> Vec<(i64, i64)> {
        let mut out = Vec::new();
        for (i, slot) in self.tiles.iter_mut().enumerate() {
            if let Some(tile) = slot.take() {
                let (tr, tc) = (i / TILE_COLS, i % TILE_COLS);
                for (j, &v) in tile.iter().enumerate() {
                    if v != i64::MAX {
                        let row = (tr * TILE + j / TILE) as i64;
                        let col = (tc * TILE + j % TILE) as i64;
                        out.push((row * 65_536 + col, v));
                    }
                }
            }
        }
        self.allocated = 0;
        out
    }
}

/// Changesets gathered before they are written, bounding the writer's memory on a huge input.
const MAX_PENDING: usize = 1 << 20;

impl Writer<'_, '_> {
    fn apply(&mut self, item: &Item) -> Result<(), IngestError> {
        match item {
            Item::Changeset(cs) => {
                if let Some(c) = self.clip {
                    if !cs.bbox.is_some_and(|(lo, hi)| c.meets_box(lo, hi)) {
                        self.clipped += 1;
                        return Ok(());
                    }
                }
                self.changesets += 1;
                self.tx.put_changeset(cs)?;
            }
            Item::Element(op, el) => {
                if let Some(c) = self.clip {
                    if !self.in_clip(c, el)? {
                        self.clipped += 1;
                        return Ok(());
                    }
                }
                self.element(*op, el)?;
                if self.squares.is_large() {
                    self.tx.add_grid_first(&self.squares.take())?;
                }
            }
            Item::Skipped(reason) => *self.skipped.entry(*reason).or_default() += 1,
        }
        Ok(())
    }

    /// Whether an element belongs to the clip area, by the rule in [`clip`].
    fn in_clip(&self, c: &clip::Clip, el: &Element) -> Result<bool, StoreError> {
        let t = el.etype;
        let node_inside = |id: i64| -> Result<bool, StoreError> {
            Ok(self.nodes.get(id)?.is_some_and(|e| c.contains(e.coord)))
        };
        let refs = el.refs().map(unpack_refs);
        Ok(match t {
            ElementType::Node => match el.coord() {
                Some(p) => c.contains(p),
                None => self.nodes.get(el.id)?.is_some() || self.state.contains(t, el.id)?,
            },
            ElementType::Way => {
                if self.state.contains(t, el.id)? {
                    return Ok(true);
                }
                for r in refs.into_iter().flatten() {
                    if node_inside(r)? {
                        return Ok(true);
                    }
                }
                false
            }
            ElementType::Relation => {
                if self.state.contains(t, el.id)? {
                    return Ok(true);
                }
                for (mt, id) in refs.into_iter().flatten().filter_map(member_decode) {
                    let inside = match mt {
                        ElementType::Node => node_inside(id)?,
                        ElementType::Way => self.state.contains(mt, id)?,
                        ElementType::Relation => false,
                    };
                    if inside {
                        return Ok(true);
                    }
                }
                false
            }
        })
    }

    fn stage(
        &mut self,
        id: i64,
        pos: Option<(i32, i32)>,
        version: i64,
        has_row: bool,
    ) -> Result<(), StoreError> {
        if let Some(c) = pos.and_then(|(a, b)| crate::model::Coord::from_e7(a.into(), b.into())) {
            self.nodes
                .stage(id, NodeEntry::new(c, version).with_row(has_row))?;
        }
        Ok(())
    }

    /// Moves the current changeset's work into `work`.
    fn bank_work(&mut self) {
        if let Some((cs, w)) = self.current.take() {
            self.work.entry(cs).and_modify(|m| m.merge(w)).or_insert(w);
        }
    }

    /// Writes what this input gathered beyond its elements: the last block of the edit log,
    /// the changesets' work and the first-node squares.
    fn finish(&mut self) -> Result<(), StoreError> {
        self.tx.put_edit_block(self.log.take())?;
        self.bank_work();
        self.tx.add_changeset_work(&self.work)?;
        self.work.clear();
        self.tx.add_grid_first(&self.squares.take())?;
        Ok(())
    }

    /// Applies one element version. Node positions go to the node-location index; `elements`
    /// keeps ways, relations and nodes that carry (or carried) tags.
    fn element(&mut self, op: Option<Op>, el: &Element) -> Result<(), StoreError> {
        let mut stored = std::mem::take(&mut self.stored);
        let applied = self.element_with(op, el, &mut stored);
        self.stored = stored;
        applied
    }

    /// [`Writer::element`] with `stored` to look the element state up into.
    fn element_with(
        &mut self,
        op: Option<Op>,
        el: &Element,
        stored_row: &mut crate::element_state::Row,
    ) -> Result<(), StoreError> {
        let t = el.etype;
        self.elements += 1;
        let pos = el.pos;
        let deleted = op == Some(Op::Delete) || !el.visible;
        let is_node = t == ElementType::Node;
        if is_node && op.is_none() {
            // The parser marked its square, unless a clip area decides what is kept.
            if self.clip.is_some() {
                if let Some((p, since)) = square_mark(op, el) {
                    self.squares.mark(p, since);
                }
            }
            if el.tags.is_empty() {
                // An untagged snapshot node: only its position matters. The index keeps the
                // highest version, so no lookup is needed; this is most of a snapshot.
                return self.stage(el.id, pos, el.version, false);
            }
        }
        // A created version 1 replaces nothing: the lookups of earlier state are skipped (most
        // of a diff). Should the element be stored already (an overlapping file), that state
        // is as new or newer: the element row is kept, the index keeps the highest version,
        // and readers of the edit log count the repeated version once.
        let fresh = op == Some(Op::Create) && el.version == 1 && !deleted;
        // In a diff, the state a node version replaces may be known only to the index (an
        // untagged node); it is the newer of the two. The index also says whether the node
        // has a row at all, which spares the lookup for most nodes (they never carry tags).
        let indexed = if is_node && op.is_some() && !fresh {
            self.nodes.get(el.id)?
        } else {
            None
        };
        let stored = if fresh
            || indexed.is_some_and(|i| !i.has_row)
            || !self.state.get_into(t, el.id, stored_row)?
        {
            None
        } else {
            let r = &*stored_row;
            Some(Prev {
                version: r.version,
                ts: Some(r.ts),
                tags: &r.tags,
                pos: r.pos,
                refs: r.refs.as_deref(),
            })
        };
        let from_index = |i: NodeEntry| Prev {
            version: i64::from(i.version),
            ts: None,
            tags: "",
            pos: Some((i.coord.lat_e7(), i.coord.lon_e7())),
            refs: None,
        };
        let has_row = stored.is_some();
        let prev: Option<Prev> = match (stored, indexed) {
            (Some(s), Some(i)) if i64::from(i.version) > s.version => Some(from_index(i)),
            (Some(s), _) => Some(s),
            (None, i) => i.map(from_index),
        };
        if is_node && op.is_some() {
            if let Some(p) = pos {
                // A created node marks its square from its creation (on the parser's thread,
                // see [`square_mark`], unless clipping); a node first met in an edit existed
                // before the data.
                if op == Some(Op::Create) {
                    if self.clip.is_some() {
                        self.squares.mark(p, el.timestamp);
                    }
                } else if prev.is_none() {
                    self.squares.mark(p, i64::MIN);
                }
            }
        }
        let newer = prev.as_ref().is_none_or(|p| p.version < el.version);
        let (tags, refs) = (&el.tags, el.refs());
        if let Some(op) = op {
            let replaced = prev.as_ref().filter(|p| p.version < el.version);
            self.log.push(&EditRef {
                etype: t,
                eid: el.id,
                version: el.version,
                op,
                changeset: el.changeset,
                uid: el.uid,
                user: &el.user,
                ts: el.timestamp,
                pos,
                tags,
                refs,
                prev: replaced.map(|p| PrevRef {
                    version: p.version,
                    ts: p.ts,
                    tags: p.tags,
                    pos: p.pos,
                }),
            });
            self.edits += 1;
            // Consecutive edits mostly share a changeset: its work is kept aside until another
            // one comes.
            match &mut self.current {
                Some((cs, w)) if *cs == el.changeset => w.add(el.timestamp, op == Op::Delete),
                _ => {
                    self.bank_work();
                    let mut w = Work {
                        uid: el.uid,
                        first_ts: el.timestamp,
                        edits: 0,
                        deletes: 0,
                    };
                    w.add(el.timestamp, op == Op::Delete);
                    self.current = Some((el.changeset, w));
                }
            }
            if self.log.is_full() {
                self.tx.put_edit_block(self.log.take())?;
            }
            if self.work.len() >= MAX_PENDING {
                self.tx.add_changeset_work(&self.work)?;
                self.work.clear();
            }
        }
        // A snapshot node goes on to the index even when not newer: the index keeps the highest
        // version anyway.
        let snapshot_node = is_node && op.is_none();
        if !newer && !snapshot_node {
            return Ok(());
        }
        // Keep the last known position, tags and refs of a deleted element: they place the
        // deletion and say what was deleted.
        let keep = prev.as_ref().filter(|_| deleted);
        let keep_pos = pos.or_else(|| keep.and_then(|p| p.pos));
        if is_node {
            let writes_row = newer && (has_row || !(deleted || el.tags.is_empty()));
            self.stage(el.id, keep_pos, el.version, has_row || writes_row)?;
            if !writes_row {
                return Ok(());
            }
        }
        let row = if deleted {
            RowRef {
                version: el.version,
                ts: el.timestamp,
                visible: false,
                pos: keep_pos,
                tags: keep.map_or("", |p| p.tags),
                refs: keep.and_then(|p| p.refs),
            }
        } else {
            RowRef {
                version: el.version,
                ts: el.timestamp,
                visible: true,
                pos,
                tags,
                refs,
            }
        };
        Ok(self.state.put(!fresh, t, el.id, &row)?)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_refilled_element_equals_a_freshly_packed_one() {
        // Each kind of element refilled over each other kind (parsers reuse the elements of
        // applied batches in any order): nothing of the earlier one may remain.
        let c = crate::model::Coord::from_e7(452_000_000, -336_000_000);
        let tag = |k: &str, v: &str| (k.to_owned(), v.to_owned());
        let raws = [
            RawElement {
                etype: Some(ElementType::Node),
                id: 7,
                version: 3,
                timestamp: 1000,
                changeset: 11,
                uid: 5,
                user: "Quill Keeper".to_owned(),
                visible: true,
                coord: c,
                tags: vec![tag("amenity", "bench"), tag("backrest", "yes")],
                ..RawElement::default()
            },
            RawElement {
                etype: Some(ElementType::Way),
                id: 8,
                version: 1,
                changeset: 12,
                user: "A".to_owned(),
                visible: true,
                refs: vec![1, 2, 3, 1],
                tags: vec![tag("building", "yes")],
                ..RawElement::default()
            },
            RawElement {
                etype: Some(ElementType::Relation),
                id: 9,
                version: 2,
                members: vec![(ElementType::Way, 8), (ElementType::Node, 7)],
                ..RawElement::default()
            },
            RawElement {
                etype: Some(ElementType::Way),
                id: 10,
                visible: false,
                ..RawElement::default()
            },
            RawElement {
                etype: Some(ElementType::Node),
                id: 12,
                coord: c,
                ..RawElement::default()
            },
        ];
        for a in &raws {
            for b in &raws {
                let mut e = Element::pack(a).unwrap();
                assert!(e.refill(b));
                assert_eq!(Some(e), Element::pack(b), "{a:?} refilled with {b:?}");
            }
        }
        let untyped = RawElement::default();
        let mut e = Element::pack(&raws[0]).unwrap();
        assert!(!e.refill(&untyped), "no type: refused");
        assert_eq!(Some(e), Element::pack(&raws[0]), "and left as it was");
        assert_eq!(Element::pack(&untyped), None);
    }

    #[test]
    fn squares_keep_the_earliest_time_of_each_square() {
        let mut sq = Squares::default();
        // Corners of the world and two marks in one square; Source for the corners: the
        // valid range of OSM coordinates, ±90° and ±180° (OSM wiki "Node").
        let points = [
            ((-900_000_000, -1_800_000_000), 5),
            ((900_000_000, 1_800_000_000), 6),
            ((452_000_000, -336_000_000), 9),
            ((452_000_500, -335_999_500), 7),
            ((452_000_000, -336_000_000), 8),
        ];
        for (p, t) in points {
            sq.mark(p, t);
        }
        let mut got = sq.take();
        got.sort_unstable();
        let mut want = vec![
            (grid_square(-900_000_000, -1_800_000_000), 5),
            (grid_square(900_000_000, 1_800_000_000), 6),
            (grid_square(452_000_000, -336_000_000), 7),
        ];
        want.sort_unstable();
        assert_eq!(got, want);
        assert!(sq.take().is_empty(), "taking empties the tiles");
    }
}
