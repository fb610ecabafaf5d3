//! Reading OSM files into the state database.
//!
//! Inputs are plain, gzip or bzip2 (detected from the first bytes, not the name); the XML
//! reader ([`xml`]) streams them into an [`IngestTx`], so memory does not grow with the file.
//! One ingest command is one transaction: every input lands, or none does. A file whose content
//! hash is already recorded is skipped, so the same input ingested twice counts once; overlapping
//! diffs count once too, since edits are unique by element type, id and version.

pub mod xml;

use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};
use std::time::Instant;

use sha2::{Digest, Sha256};

use crate::model::{ElementType, Op};
use crate::progress::Progress;
use crate::store::{member_code, pack_refs, pack_tags, IngestTx, Prev, Store, StoreError};
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

/// What the file holds, from a look at its first bytes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum InputKind {
    /// `<osm>` with nodes, ways, relations.
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

/// Totals of one ingest.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct IngestSummary {
    pub files: u64,
    /// Files skipped because their content was ingested before.
    pub already_ingested: u64,
    pub elements: u64,
    /// Element versions from diffs that were new to the database.
    pub new_edits: u64,
    pub changesets: u64,
    pub skipped_elements: u64,
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
    let file = File::open(path).map_err(io_err(path))?;
    let size = file.metadata().map_err(io_err(path))?.len();
    let mut raw = BufReader::with_capacity(1 << 16, file);
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

/// Looks at the start of a (decompressed) file to tell its kind.
///
/// # Errors
/// When the file is unreadable, binary, PBF, or not OSM XML.
pub fn sniff(path: &Path) -> Result<InputKind, IngestError> {
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
    // A PBF file starts with a 4-byte length and a BlobHeader whose type string is "OSMHeader".
    if head.iter().take(32).position(|&b| b == b'O').is_some()
        && head.windows(9).take(32).any(|w| w == b"OSMHeader")
    {
        return Err(fmt("this is an OSM PBF file, which this version does not read yet; convert it to .osm or .osm.gz"));
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
        return Ok(InputKind::Change);
    }
    let first = |needle: &str| text.find(needle).unwrap_or(usize::MAX);
    let cs = first("<changeset");
    let el = first("<node").min(first("<way")).min(first("<relation"));
    if cs < el {
        Ok(InputKind::Changesets)
    } else {
        // Snapshots and anything else: the parser gives the precise error for a wrong root.
        Ok(InputKind::Snapshot)
    }
}

/// Expands folders into the OSM files they hold (recursively, sorted by path).
///
/// # Errors
/// When a folder cannot be listed or a path does not exist.
pub fn expand_inputs(inputs: &[PathBuf]) -> Result<Vec<PathBuf>, IngestError> {
    let mut out = Vec::new();
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
            out.extend(found);
        } else {
            out.push(p.clone());
        }
    }
    Ok(out)
}

fn is_osm_name(p: &Path) -> bool {
    let n = p
        .file_name()
        .map(|n| n.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    [".osc", ".osc.gz", ".osc.bz2", ".osm", ".osm.gz", ".osm.bz2"]
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

/// Ingests files into the database as one transaction.
///
/// Order: snapshots first, then changeset metadata, then diffs, each group by path (daily and
/// replication file names sort in time order), so each edit finds the state it replaced.
///
/// # Errors
/// The first bad file stops the ingest, which is then rolled back.
pub fn ingest(
    store: &mut Store,
    inputs: &[PathBuf],
    progress: &Progress,
) -> Result<IngestSummary, IngestError> {
    let started = Instant::now();
    let files = expand_inputs(inputs)?;
    let mut classified = Vec::with_capacity(files.len());
    for f in files {
        let kind = sniff(&f)?;
        classified.push((kind, f));
    }
    classified.sort();
    let total_bytes: u64 = classified
        .iter()
        .filter_map(|(_, f)| std::fs::metadata(f).ok())
        .map(|m| m.len())
        .sum();
    let bar = progress.bytes(total_bytes, "ingest");
    let mut summary = IngestSummary::default();
    let tx = store.begin()?;
    let now = chrono::Utc::now().timestamp();
    for (kind, path) in &classified {
        let size = std::fs::metadata(path).map_err(io_err(path))?.len();
        summary.bytes += size;
        let hash = hash_file(path)?;
        if tx.has_input(&hash)? {
            summary.already_ingested += 1;
            bar.inc(size);
            progress.note(&format!("{}: already ingested, skipped", path.display()));
            continue;
        }
        let mut sink = StoreSink {
            tx: &tx,
            elements: 0,
            changesets: 0,
            new_edits: 0,
            skipped: std::collections::BTreeMap::new(),
        };
        let reader = open_decompressed(path)?;
        let root = xml::read_osm(reader, &mut sink).map_err(|e| match e {
            ReadError::Parse(p) => {
                let (line, column) = line_col(path, p.offset);
                IngestError::Parse {
                    path: path.clone(),
                    line,
                    column,
                    offset: p.offset,
                    message: p.message,
                }
            }
            ReadError::Sink(s) => match s.downcast::<StoreError>() {
                Ok(se) => IngestError::Store(*se),
                Err(other) => IngestError::Format {
                    path: path.clone(),
                    message: other.to_string(),
                },
            },
        });
        let root = match root {
            Ok(r) => r,
            // A decompression failure surfaces as an XML read error; say what it really is.
            Err(IngestError::Parse {
                message,
                line,
                column,
                offset,
                ..
            }) if message.contains("gzip")
                || message.contains("deflate")
                || message.contains("bzip")
                || message.contains("decompress")
                || message.contains("corrupt") =>
            {
                return Err(IngestError::Format {
                    path: path.clone(),
                    message: format!("damaged or truncated compressed data at line {line}, column {column} (byte {offset} of the text): {message}"),
                });
            }
            Err(e) => return Err(e),
        };
        if (root == Root::OsmChange) != (*kind == InputKind::Change) {
            return Err(IngestError::Format {
                path: path.clone(),
                message: "the root element does not match the file's content".to_owned(),
            });
        }
        for (reason, n) in &sink.skipped {
            tx.add_skipped(reason, *n)?;
            summary.skipped_elements += n;
        }
        tx.record_input(
            &hash,
            &path.display().to_string(),
            kind.name(),
            sink.elements,
            sink.changesets,
            now,
        )?;
        summary.files += 1;
        summary.elements += sink.elements;
        summary.changesets += sink.changesets;
        summary.new_edits += sink.new_edits;
        bar.inc(size);
    }
    tx.commit()?;
    bar.finish();
    summary.elapsed_ms = u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX);
    Ok(summary)
}

struct StoreSink<'a, 'b> {
    tx: &'a IngestTx<'b>,
    elements: u64,
    changesets: u64,
    new_edits: u64,
    skipped: std::collections::BTreeMap<&'static str, u64>,
}

fn refs_of(el: &RawElement) -> Option<Vec<u8>> {
    match el.etype? {
        ElementType::Node => None,
        ElementType::Way => (!el.refs.is_empty()).then(|| pack_refs(el.refs.iter().copied())),
        ElementType::Relation => (!el.members.is_empty())
            .then(|| pack_refs(el.members.iter().map(|&(t, id)| member_code(t, id)))),
    }
}

impl OsmSink for StoreSink<'_, '_> {
    fn changeset(&mut self, cs: &RawChangeset) -> Result<(), SinkError> {
        self.changesets += 1;
        self.tx.put_changeset(cs)?;
        Ok(())
    }

    fn element(&mut self, op: Option<Op>, el: &RawElement) -> Result<(), SinkError> {
        let Some(t) = el.etype else {
            return Ok(());
        };
        self.elements += 1;
        let stored = self.tx.element(t, el.id)?;
        let newer = stored.as_ref().is_none_or(|p| p.version < el.version);
        let pos = el.coord.map(|c| (c.lat_e7(), c.lon_e7()));
        let tags = pack_tags(&el.tags);
        let refs = refs_of(el);
        let deleted = op == Some(Op::Delete) || !el.visible;
        if let Some(op) = op {
            let prev: Option<&Prev> = stored.as_ref().filter(|p| p.version < el.version);
            if self.tx.put_edit(
                t,
                el.id,
                el.version,
                op,
                el.changeset,
                el.uid,
                &el.user,
                el.timestamp,
                pos,
                &tags,
                refs.as_deref(),
                prev,
            )? {
                self.new_edits += 1;
            }
        }
        if newer {
            if deleted {
                // Keep the last known position, tags and refs: they place the deletion and say
                // what was deleted.
                let keep = stored.as_ref();
                let keep_pos = pos.or_else(|| keep.and_then(|p| Some((p.lat_e7?, p.lon_e7?))));
                self.tx.put_element(
                    t,
                    el.id,
                    el.version,
                    el.timestamp,
                    false,
                    keep_pos,
                    keep.map_or("", |p| p.tags.as_str()),
                    keep.and_then(|p| p.refs.as_deref()),
                )?;
            } else {
                self.tx.put_element(
                    t,
                    el.id,
                    el.version,
                    el.timestamp,
                    true,
                    pos,
                    &tags,
                    refs.as_deref(),
                )?;
            }
        }
        Ok(())
    }

    fn skipped(&mut self, reason: &'static str) {
        *self.skipped.entry(reason).or_default() += 1;
    }
}
