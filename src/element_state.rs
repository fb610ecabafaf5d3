//! The element state: the latest stored version of every way, relation and tagged node (its
//! tags, refs or members, position and visibility), in a sorted file next to the state database.
//!
//! An ingest reads the state an edit replaces (for the edit log's "before" side) and writes the
//! new one. Kept as SQLite rows, this cost a B-tree search, a row insert and the binding of nine
//! values per element, about a third of an ingest, and once the table outgrew SQLite's page
//! cache every lookup became a read from the file (BENCHMARKS.md, "The element state"). Here the
//! committed state is one immutable file: a lookup is a binary search in a small in-memory
//! directory, one positioned read of a block of about [`BLOCK_BYTES`] and a scan of it. An ingest keeps its
//! changes in memory (one arena of encoded rows and a hash map); past a bound it writes them,
//! sorted, to a temporary run file with a filter of its keys (the committed file is never
//! rewritten mid-ingest), and it writes the next file by merging the committed one, the runs
//! and the arena in key order.
//!
//! ## Generations and crash consistency
//! The state of database `region.db` is the file `region.db.elements.<g>`, replaced whole by
//! each ingest that changes it, by the protocol of [`crate::generations`] (the node-location
//! index's too). Generation 0 is the empty state and has no file.
//!
//! ## File format (version 2)
//! `HXVELEM2` and 8 zero bytes; blocks of records sorted by (element type, id), each record
//! `type: u8, id: zigzag varint, body length: varint, body`; the directory (per block: type
//! `u8`, first id `i64` and offset `u64`, little-endian); a footer of directory offset, block
//! count and row count (`u64` each) and `HXVELEM2`. A body is `version, timestamp` (zigzag
//! varints), a flags byte (1 visible, 2 has a position, 4 has refs), latitude and longitude
//! (zigzag varints, when present), the packed tags (length and bytes) and the packed refs
//! (length and bytes, when present; [`crate::store::pack_refs`]).
//!
//! Version 1 (`HXVELEM1`), written before, differs only in its refs: little-endian `i64`s. Its
//! rows are repacked as they are read, and the next ingest writes version 2.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use crate::generations::{self, Prepared};
use crate::model::ElementType;
use crate::sorted_keys::SortedKeys;
use crate::store::edit_log::{get_varint, put_bytes, put_signed, put_varint, unzigzag};

/// A block is closed once it holds this many bytes (a lookup reads and scans one block). 1 KiB
/// rather than 2: each lookup copies and scans half as much for a directory twice as long (a
/// few MiB at 16x), about 3 % of a 16x ingest (BENCHMARKS.md, session 9). Readers take any
/// block size from the directory.
pub const BLOCK_BYTES: usize = 1024;
const MAGIC: &[u8; 8] = b"HXVELEM2";
/// Files of version 1, whose refs are little-endian `i64`s.
const MAGIC_LEGACY_REFS: &[u8; 8] = b"HXVELEM1";
const HEADER_BYTES: usize = 16;
const FOOTER_BYTES: usize = 32;
const DIR_ENTRY_BYTES: usize = 17;
/// Encoded rows an ingest holds in memory before merging them into a temporary file (with the
/// hash map over them, about 90 MiB at this size).
pub const DEFAULT_SPILL_BYTES: usize = 48 << 20;

const VISIBLE: u8 = 1;
const HAS_POS: u8 = 2;
const HAS_REFS: u8 = 4;
/// Set only in an ingest's temporary runs: the row applies only if the element has no earlier
/// state (never in a committed file).
const IF_ABSENT: u8 = 8;

/// Errors of the element state; each names its file.
#[derive(Debug, thiserror::Error)]
pub enum ElementStateError {
    #[error("{path}: element state: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: element state is damaged: {message}")]
    Damaged { path: PathBuf, message: String },
}

impl From<generations::GenerationError> for ElementStateError {
    fn from(e: generations::GenerationError) -> Self {
        Self::Io {
            path: e.path,
            source: e.source,
        }
    }
}

fn io_err(path: &Path) -> impl Fn(std::io::Error) -> ElementStateError + '_ {
    move |source| ElementStateError::Io {
        path: path.to_owned(),
        source,
    }
}

/// The file-name prefix of the element state of a database file (`region.db` →
/// `region.db.elements`).
#[must_use]
pub fn prefix_for(db: &Path) -> PathBuf {
    let mut s = db.as_os_str().to_owned();
    s.push(".elements");
    PathBuf::from(s)
}

/// An element's key: its type's code and its id. Files and merges are in this order.
type Key = (u8, i64);

fn key(t: ElementType, id: i64) -> Key {
    (type_code(t), id)
}

/// The type's code (0, 1 or 2) as stored.
const fn type_code(t: ElementType) -> u8 {
    t.code() as u8
}

/// The stored state of one element.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Row {
    pub version: i64,
    pub ts: i64,
    pub visible: bool,
    /// Latitude and longitude in 1e-7 degrees.
    pub pos: Option<(i32, i32)>,
    /// Packed tags (`crate::store::pack_tags`).
    pub tags: String,
    /// Packed way refs or relation members, if any.
    pub refs: Option<Vec<u8>>,
}

/// A row's fields by reference, as the writer has them.
#[derive(Debug, Clone, Copy)]
pub struct RowRef<'a> {
    pub version: i64,
    pub ts: i64,
    pub visible: bool,
    pub pos: Option<(i32, i32)>,
    pub tags: &'a str,
    pub refs: Option<&'a [u8]>,
}

fn encode(r: &RowRef<'_>, out: &mut Vec<u8>) {
    put_signed(out, r.version);
    put_signed(out, r.ts);
    let flags = (u8::from(r.visible) * VISIBLE)
        | (u8::from(r.pos.is_some()) * HAS_POS)
        | (u8::from(r.refs.is_some()) * HAS_REFS);
    out.push(flags);
    if let Some((lat, lon)) = r.pos {
        put_signed(out, lat.into());
        put_signed(out, lon.into());
    }
    put_bytes(out, r.tags.as_bytes());
    if let Some(refs) = r.refs {
        put_bytes(out, refs);
    }
}

/// A reading position in a byte slice; `None` past its end.
struct Cursor<'a> {
    data: &'a [u8],
    at: usize,
}

impl<'a> Cursor<'a> {
    fn byte(&mut self) -> Option<u8> {
        let b = *self.data.get(self.at)?;
        self.at += 1;
        Some(b)
    }

    fn varint(&mut self) -> Option<u64> {
        get_varint(self.data, &mut self.at)
    }

    fn signed(&mut self) -> Option<i64> {
        self.varint().map(unzigzag)
    }

    fn bytes(&mut self) -> Option<&'a [u8]> {
        let n = usize::try_from(self.varint()?).ok()?;
        let end = self.at.checked_add(n).filter(|&e| e <= self.data.len())?;
        let b = &self.data[self.at..end];
        self.at = end;
        Some(b)
    }

    /// The next record of a block: its key and body.
    fn record(&mut self) -> Option<(Key, &'a [u8])> {
        let t = self.byte()?;
        let id = self.signed()?;
        Some(((t, id), self.bytes()?))
    }
}

/// The next record from a reader, its body into `body`: its key, `Ok(None)` at a clean end,
/// `Err(None)` when cut short.
fn read_record_into(
    r: &mut impl std::io::Read,
    body: &mut Vec<u8>,
) -> Result<Option<Key>, Option<std::io::Error>> {
    let mut byte = [0u8; 1];
    let mut next = |r: &mut dyn std::io::Read| -> Result<u8, Option<std::io::Error>> {
        match r.read_exact(&mut byte) {
            Ok(()) => Ok(byte[0]),
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => Err(None),
            Err(e) => Err(Some(e)),
        }
    };
    let t = match next(r) {
        Ok(t) => t,
        Err(None) => return Ok(None),
        Err(e) => return Err(e),
    };
    let mut varint = |r: &mut dyn std::io::Read| -> Result<u64, Option<std::io::Error>> {
        let mut v = 0u64;
        for shift in (0..64).step_by(7) {
            let b = next(r)?;
            v |= u64::from(b & 0x7F) << shift;
            if b < 0x80 {
                return Ok(v);
            }
        }
        Err(None)
    };
    let id = unzigzag(varint(r)?);
    let n = usize::try_from(varint(r)?).map_err(|_| None)?;
    if n > 1 << 30 {
        return Err(None);
    }
    body.clear();
    body.resize(n, 0);
    r.read_exact(body)
        .map_err(|e| (e.kind() != std::io::ErrorKind::UnexpectedEof).then_some(e))?;
    Ok(Some((t, id)))
}

/// Decodes a body into `row`, reusing its buffers (an ingest looks up rows by the million).
fn decode_into(body: &[u8], row: &mut Row) -> Option<()> {
    let mut c = Cursor { data: body, at: 0 };
    row.version = c.signed()?;
    row.ts = c.signed()?;
    let flags = c.byte()?;
    row.visible = flags & VISIBLE != 0;
    row.pos = if flags & HAS_POS != 0 {
        let lat = i32::try_from(c.signed()?).ok()?;
        let lon = i32::try_from(c.signed()?).ok()?;
        Some((lat, lon))
    } else {
        None
    };
    row.tags.clear();
    row.tags.push_str(std::str::from_utf8(c.bytes()?).ok()?);
    if flags & HAS_REFS != 0 {
        let refs = c.bytes()?;
        let v = row.refs.get_or_insert_with(Vec::new);
        v.clear();
        v.extend_from_slice(refs);
    } else {
        row.refs = None;
    }
    (c.at == body.len()).then_some(())
}

fn decode(body: &[u8]) -> Option<Row> {
    let mut c = Cursor { data: body, at: 0 };
    let version = c.signed()?;
    let ts = c.signed()?;
    let flags = c.byte()?;
    let pos = if flags & HAS_POS != 0 {
        let lat = i32::try_from(c.signed()?).ok()?;
        let lon = i32::try_from(c.signed()?).ok()?;
        Some((lat, lon))
    } else {
        None
    };
    let tags = std::str::from_utf8(c.bytes()?).ok()?.to_owned();
    let refs = if flags & HAS_REFS != 0 {
        Some(c.bytes()?.to_vec())
    } else {
        None
    };
    (c.at == body.len()).then_some(Row {
        version,
        ts,
        visible: flags & VISIBLE != 0,
        pos,
        tags,
        refs,
    })
}

/// Rewrites a body of a version-1 file (refs as little-endian `i64`s) as version 2 has it, into
/// `out`; `None` when it does not decode.
fn upgrade_legacy_body(body: &[u8], out: &mut Vec<u8>) -> Option<()> {
    let row = decode(body)?;
    let refs = row.refs.as_deref().map(crate::store::repack_legacy_refs);
    out.clear();
    encode(
        &RowRef {
            version: row.version,
            ts: row.ts,
            visible: row.visible,
            pos: row.pos,
            tags: &row.tags,
            refs: refs.as_deref(),
        },
        out,
    );
    Some(())
}

/// A committed element-state file (or the empty state of generation 0), read-only.
#[derive(Debug)]
pub struct ElementState {
    file: Option<File>,
    path: PathBuf,
    /// First key of each block (searched level by level: lookups are random).
    keys: SortedKeys<Key>,
    /// Each block's start offset.
    offsets: Vec<usize>,
    /// Where the blocks end (the directory's offset).
    blocks_end: usize,
    rows: u64,
    /// The block last read by a lookup, and its number.
    block: std::cell::RefCell<(usize, Vec<u8>)>,
    /// A version-1 file: each body is upgraded as it is read, into this buffer.
    legacy: Option<std::cell::RefCell<Vec<u8>>>,
}

impl ElementState {
    /// The empty state (generation 0).
    #[must_use]
    pub fn empty() -> Self {
        Self {
            file: None,
            path: PathBuf::new(),
            keys: SortedKeys::default(),
            offsets: Vec::new(),
            blocks_end: 0,
            rows: 0,
            block: std::cell::RefCell::new((usize::MAX, Vec::new())),
            legacy: None,
        }
    }

    /// Opens generation `generation` of the state whose files start with `prefix`.
    ///
    /// # Errors
    /// When the file is missing, unreadable or damaged.
    pub fn open_generation(prefix: &Path, generation: u64) -> Result<Self, ElementStateError> {
        if generation == 0 {
            return Ok(Self::empty());
        }
        Self::open(&generations::path(prefix, generation))
    }

    /// Opens a state file and reads its directory.
    ///
    /// # Errors
    /// When the file is missing, unreadable or damaged.
    pub fn open(path: &Path) -> Result<Self, ElementStateError> {
        let damaged = |message: &str| ElementStateError::Damaged {
            path: path.to_owned(),
            message: message.to_owned(),
        };
        // Lookups read one block each with a positioned read: the operating system's cache
        // keeps the file, and the process's memory stays small whatever its size. (A memory
        // mapping was tried: the kernel maps the cached neighbours of every faulted page, so
        // the whole file soon counted in the process's resident memory.)
        let file = File::open(path).map_err(io_err(path))?;
        let n = usize::try_from(file.metadata().map_err(io_err(path))?.len())
            .map_err(|_| damaged("file too large"))?;
        let read_at = |at: usize, len: usize| -> Result<Vec<u8>, ElementStateError> {
            let mut b = vec![0u8; len];
            std::os::unix::fs::FileExt::read_exact_at(&file, &mut b, at as u64)
                .map_err(io_err(path))?;
            Ok(b)
        };
        if n < HEADER_BYTES + FOOTER_BYTES {
            return Err(damaged("not an element-state file (too short)"));
        }
        let magic = read_at(0, 8)?;
        if (magic != MAGIC && magic != MAGIC_LEGACY_REFS) || read_at(n - 8, 8)? != magic {
            return Err(damaged("not an element-state file (bad magic)"));
        }
        let legacy = magic == MAGIC_LEGACY_REFS;
        let word = |b: &[u8], at: usize| {
            b.get(at..at + 8)
                .and_then(|b| b.try_into().ok())
                .map(u64::from_le_bytes)
        };
        let foot = n - FOOTER_BYTES;
        let footer = read_at(foot, FOOTER_BYTES)?;
        let (Some(dir_at), Some(blocks), Some(rows)) =
            (word(&footer, 0), word(&footer, 8), word(&footer, 16))
        else {
            return Err(damaged("footer unreadable"));
        };
        let dir_at = usize::try_from(dir_at).map_err(|_| damaged("directory offset"))?;
        let blocks = usize::try_from(blocks).map_err(|_| damaged("block count"))?;
        if dir_at < HEADER_BYTES
            || blocks
                .checked_mul(DIR_ENTRY_BYTES)
                .and_then(|b| b.checked_add(dir_at))
                != Some(foot)
        {
            return Err(damaged("directory does not fit the file"));
        }
        let entries = read_at(dir_at, foot - dir_at)?;
        let mut dir: Vec<(Key, usize)> = Vec::with_capacity(blocks);
        for b in 0..blocks {
            let at = b * DIR_ENTRY_BYTES;
            let (Some(id), Some(off)) = (word(&entries, at + 1), word(&entries, at + 9)) else {
                return Err(damaged("directory unreadable"));
            };
            let off = usize::try_from(off).map_err(|_| damaged("block offset"))?;
            let key = (entries[at], id as i64);
            if off < HEADER_BYTES
                || off >= dir_at
                || dir
                    .last()
                    .is_some_and(|&(k, o): &(Key, usize)| k >= key || o >= off)
            {
                return Err(damaged("directory out of order"));
            }
            dir.push((key, off));
        }
        Ok(Self {
            file: Some(file),
            path: path.to_owned(),
            keys: dir.iter().map(|d| d.0).collect(),
            offsets: dir.iter().map(|d| d.1).collect(),
            blocks_end: dir_at,
            rows,
            block: std::cell::RefCell::new((usize::MAX, Vec::new())),
            legacy: legacy.then(|| std::cell::RefCell::new(Vec::new())),
        })
    }

    /// Rows in the state.
    #[must_use]
    pub const fn len(&self) -> u64 {
        self.rows
    }

    /// Whether the state holds no row.
    #[must_use]
    pub const fn is_empty(&self) -> bool {
        self.rows == 0
    }

    fn damaged(&self, message: &str) -> ElementStateError {
        ElementStateError::Damaged {
            path: self.path.clone(),
            message: message.to_owned(),
        }
    }

    /// Finds an element's encoded row and hands it to `f`.
    fn find<R>(
        &self,
        key: Key,
        mut f: impl FnMut(&[u8]) -> R,
    ) -> Result<Option<R>, ElementStateError> {
        let (Some(file), Some(b)) = (&self.file, self.keys.last_at_most(&key)) else {
            return Ok(None);
        };
        let mut held = self.block.borrow_mut();
        let (number, data) = &mut *held;
        if *number != b {
            let start = self.offsets[b];
            let end = self.offsets.get(b + 1).copied().unwrap_or(self.blocks_end);
            data.resize(end - start, 0);
            *number = usize::MAX;
            std::os::unix::fs::FileExt::read_exact_at(file, data, start as u64)
                .map_err(io_err(&self.path))?;
            *number = b;
        }
        let mut c = Cursor { data, at: 0 };
        while c.at < c.data.len() {
            let (k, body) = c.record().ok_or_else(|| self.damaged("record cut short"))?;
            if k == key {
                if let Some(up) = &self.legacy {
                    let mut up = up.borrow_mut();
                    upgrade_legacy_body(body, &mut up)
                        .ok_or_else(|| self.damaged("row unreadable"))?;
                    return Ok(Some(f(&up)));
                }
                return Ok(Some(f(body)));
            }
            if k > key {
                break;
            }
        }
        Ok(None)
    }

    /// The stored state of an element.
    ///
    /// # Errors
    /// When the file is damaged.
    pub fn get(&self, t: ElementType, id: i64) -> Result<Option<Row>, ElementStateError> {
        match self.find(key(t, id), decode)? {
            Some(row) => row.map(Some).ok_or_else(|| self.damaged("row unreadable")),
            None => Ok(None),
        }
    }

    /// Whether an element has a stored state.
    ///
    /// # Errors
    /// When the file is damaged.
    pub fn contains(&self, t: ElementType, id: i64) -> Result<bool, ElementStateError> {
        Ok(self.find(key(t, id), |_| ())?.is_some())
    }

    /// Every row of one element type, in id order.
    pub fn rows_of(
        &self,
        t: ElementType,
    ) -> impl Iterator<Item = Result<(i64, Row), ElementStateError>> + '_ {
        let code = type_code(t);
        let first = self
            .keys
            .keys()
            .partition_point(|k| *k < (code, i64::MIN))
            .saturating_sub(1);
        self.sequential(first)
            .skip_while(move |r| r.as_ref().is_ok_and(|(k, _)| k.0 < code))
            .take_while(move |r| r.as_ref().map_or(true, |(k, _)| k.0 == code))
            .map(|r| {
                let (k, body) = r?;
                let row = decode(&body).ok_or_else(|| self.damaged("row unreadable"))?;
                Ok((k.1, row))
            })
    }

    /// Every row, by type then id.
    pub fn rows(
        &self,
    ) -> impl Iterator<Item = Result<(ElementType, i64, Row), ElementStateError>> + '_ {
        [ElementType::Node, ElementType::Way, ElementType::Relation]
            .into_iter()
            .flat_map(move |t| {
                self.rows_of(t)
                    .map(move |r| r.map(|(id, row)| (t, id, row)))
            })
    }

    /// Every record from block `first` on, in key order, read with buffered reads (bodies
    /// owned).
    fn sequential(
        &self,
        first: usize,
    ) -> impl Iterator<Item = Result<(Key, Vec<u8>), ElementStateError>> + '_ {
        let mut records = self.records(first);
        std::iter::from_fn(move || {
            let mut body = Vec::new();
            records
                .next_into(&mut body)
                .transpose()
                .map(|k| k.map(|k| (k, body)))
        })
    }

    /// Every record from block `first` on, in key order, for reading into a reused buffer.
    fn records(&self, first: usize) -> FileRecords<'_> {
        let start = self.offsets.get(first).copied().unwrap_or(self.blocks_end);
        FileRecords {
            state: self,
            reader: self.file.as_ref().map(|file| {
                std::io::Read::take(
                    std::io::BufReader::with_capacity(
                        1 << 20,
                        ReadAt {
                            file,
                            at: start as u64,
                        },
                    ),
                    (self.blocks_end - start) as u64,
                )
            }),
        }
    }
}

/// A state file's records in key order, read with buffered reads ([`ElementState::records`]).
struct FileRecords<'a> {
    state: &'a ElementState,
    reader: Option<std::io::Take<std::io::BufReader<ReadAt<'a>>>>,
}

/// One input of a merge: records in key order, each body read into a buffer the merge reuses
/// (no allocation per record).
trait Records {
    /// Reads the next record's body into `body` and returns its key; `None` at the end.
    fn next_into(&mut self, body: &mut Vec<u8>) -> Result<Option<Key>, ElementStateError>;
}

impl Records for FileRecords<'_> {
    fn next_into(&mut self, body: &mut Vec<u8>) -> Result<Option<Key>, ElementStateError> {
        let Some(r) = self.reader.as_mut() else {
            return Ok(None);
        };
        let key = read_record_into(r, body).map_err(|e| match e {
            Some(io) => ElementStateError::Io {
                path: self.state.path.clone(),
                source: io,
            },
            None => self.state.damaged("record cut short"),
        })?;
        if let (Some(_), Some(up)) = (key, &self.state.legacy) {
            let mut up = up.borrow_mut();
            upgrade_legacy_body(body, &mut up)
                .ok_or_else(|| self.state.damaged("row unreadable"))?;
            std::mem::swap(body, &mut up);
        }
        Ok(key)
    }
}

/// The staged rows in key order, read out of the arena.
struct StagedRecords {
    rows: std::vec::IntoIter<(Key, Staged)>,
    arena: Vec<u8>,
}

impl Records for StagedRecords {
    fn next_into(&mut self, body: &mut Vec<u8>) -> Result<Option<Key>, ElementStateError> {
        Ok(self.rows.next().map(|(k, s)| {
            body.clear();
            body.extend_from_slice(self.arena.get(s.range()).unwrap_or(&[]));
            k
        }))
    }
}

/// Sequential reads of a file from an offset, by positioned reads (the file handle is shared
/// with lookups, so its cursor is left alone).
struct ReadAt<'a> {
    file: &'a File,
    at: u64,
}

impl std::io::Read for ReadAt<'_> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = std::os::unix::fs::FileExt::read_at(self.file, buf, self.at)?;
        self.at += n as u64;
        Ok(n)
    }
}

/// Writes a state file from records in strictly increasing key order.
struct StateWriter {
    out: BufWriter<File>,
    path: PathBuf,
    at: usize,
    block_start: usize,
    dir: Vec<(Key, usize)>,
    last: Option<Key>,
    rows: u64,
    scratch: Vec<u8>,
    /// When set, a filter of the keys written (a run's).
    filter: Option<fastbloom::BloomFilter>,
}

impl StateWriter {
    fn create(path: &Path) -> Result<Self, ElementStateError> {
        let file = File::create(path).map_err(io_err(path))?;
        let mut out = BufWriter::with_capacity(1 << 20, file);
        out.write_all(MAGIC).map_err(io_err(path))?;
        out.write_all(&[0; HEADER_BYTES - 8])
            .map_err(io_err(path))?;
        Ok(Self {
            out,
            path: path.to_owned(),
            at: HEADER_BYTES,
            block_start: HEADER_BYTES,
            dir: Vec::new(),
            last: None,
            rows: 0,
            scratch: Vec::with_capacity(64),
            filter: None,
        })
    }

    fn push(&mut self, key: Key, body: &[u8]) -> Result<(), ElementStateError> {
        if self.last.is_some_and(|l| l >= key) {
            return Err(ElementStateError::Damaged {
                path: self.path.clone(),
                message: format!("rows out of order at {key:?}"),
            });
        }
        if self.dir.is_empty() || self.at - self.block_start >= BLOCK_BYTES {
            self.block_start = self.at;
            self.dir.push((key, self.at));
        }
        self.scratch.clear();
        self.scratch.push(key.0);
        put_signed(&mut self.scratch, key.1);
        put_varint(&mut self.scratch, body.len() as u64);
        self.out
            .write_all(&self.scratch)
            .map_err(io_err(&self.path))?;
        self.out.write_all(body).map_err(io_err(&self.path))?;
        self.at += self.scratch.len() + body.len();
        self.last = Some(key);
        self.rows += 1;
        if let Some(f) = &mut self.filter {
            f.insert_hash(filter_key(key));
        }
        Ok(())
    }

    /// Writes the directory and footer, syncs the file if asked, and returns the filter of the
    /// keys written, if one was asked for.
    fn finish(mut self, sync: bool) -> Result<Option<fastbloom::BloomFilter>, ElementStateError> {
        let e = io_err(&self.path);
        let dir_at = self.at as u64;
        for &((t, id), off) in &self.dir {
            self.out.write_all(&[t]).map_err(&e)?;
            self.out.write_all(&id.to_le_bytes()).map_err(&e)?;
            self.out
                .write_all(&(off as u64).to_le_bytes())
                .map_err(&e)?;
        }
        for w in [dir_at, self.dir.len() as u64, self.rows] {
            self.out.write_all(&w.to_le_bytes()).map_err(&e)?;
        }
        self.out.write_all(MAGIC).map_err(&e)?;
        let file = self.out.into_inner().map_err(|x| e(x.into_error()))?;
        if sync {
            file.sync_all().map_err(&e)?;
        }
        Ok(self.filter.take())
    }
}

/// A staged row: where its encoding lies in the arena, and whether it only applies when the
/// element has no earlier state (a created version 1, which replaces nothing).
#[derive(Debug, Clone, Copy)]
struct Staged {
    start: u32,
    len: u32,
    if_absent: bool,
}

impl Staged {
    fn range(self) -> std::ops::Range<usize> {
        self.start as usize..self.start as usize + self.len as usize
    }
}

/// Where a body's flags byte lies (after the version and timestamp varints).
fn flags_at(body: &[u8]) -> Option<usize> {
    let mut at = 0;
    get_varint(body, &mut at)?;
    get_varint(body, &mut at)?;
    (at < body.len()).then_some(at)
}

/// Whether a body carries [`IF_ABSENT`] (only rows of an ingest's temporary runs do).
fn is_if_absent(body: &[u8]) -> bool {
    flags_at(body).is_some_and(|at| body[at] & IF_ABSENT != 0)
}

/// Sets or clears [`IF_ABSENT`] in a body.
fn mark_if_absent(body: &mut [u8], on: bool) {
    if let Some(at) = flags_at(body) {
        if on {
            body[at] |= IF_ABSENT;
        } else {
            body[at] &= !IF_ABSENT;
        }
    }
}

/// The filter hash of an element key.
fn filter_key((t, id): Key) -> u64 {
    use std::hash::BuildHasher;
    foldhash::fast::FixedState::with_seed(0x6865_7876).hash_one((t, id))
}

/// Staged rows spilled to a sorted temporary file during one ingest, with a Bloom filter of its
/// keys so that most lookups of elements it does not hold read nothing.
struct Run {
    state: ElementState,
    /// `None` only for a run written without one (then every lookup reads the file).
    filter: Option<fastbloom::BloomFilter>,
}

impl Run {
    /// The row of `key` in this run, and whether it is an "if absent" row.
    fn find<R>(
        &self,
        key: Key,
        f: &mut impl FnMut(&[u8]) -> R,
    ) -> Result<Option<(bool, R)>, ElementStateError> {
        if self
            .filter
            .as_ref()
            .is_some_and(|f| !f.contains_hash(filter_key(key)))
        {
            return Ok(None);
        }
        self.state.find(key, |b| (is_if_absent(b), f(b)))
    }
}

/// Most runs an ingest keeps before merging them into one (a lookup may read each).
const MAX_RUNS: usize = 8;
/// The false-positive rate of a run's filter (about 10 bits per key).
pub(crate) const FILTER_FALSE_POSITIVES: f64 = 0.01;

/// One input of a merge (bodies carry their "if absent" mark).
type Source<'a> = Box<dyn Records + 'a>;

/// Merges `sources`, oldest first, into `out`. Of an element's rows the newest that replaces
/// wins; failing one, the oldest "if absent" row (it applied to an element with no state, and
/// later ones found it there). With `keep_marks` the winner keeps its mark (a merged run, which
/// still sits on top of the base); without, marks are cleared (the next generation).
fn merge(
    mut sources: Vec<Source<'_>>,
    out: &mut StateWriter,
    keep_marks: bool,
) -> Result<(), ElementStateError> {
    let mut bodies: Vec<Vec<u8>> = vec![Vec::new(); sources.len()];
    let mut heads: Vec<Option<Key>> = Vec::with_capacity(sources.len());
    for (s, body) in sources.iter_mut().zip(&mut bodies) {
        heads.push(s.next_into(body)?);
    }
    while let Some(min) = heads.iter().flatten().min().copied() {
        let mut chosen: Option<usize> = None;
        for (i, h) in heads.iter().enumerate() {
            if *h == Some(min) && (chosen.is_none() || !is_if_absent(&bodies[i])) {
                chosen = Some(i);
            }
        }
        if let Some(c) = chosen {
            if !keep_marks {
                mark_if_absent(&mut bodies[c], false);
            }
            out.push(min, &bodies[c])?;
        }
        for ((h, s), body) in heads.iter_mut().zip(&mut sources).zip(&mut bodies) {
            if *h == Some(min) {
                *h = s.next_into(body)?;
            }
        }
    }
    Ok(())
}

/// The changes one ingest makes to the element state, staged until [`ElementStateTx::prepare`].
///
/// Lookups see the committed state and everything staged so far. Staged rows are encoded into
/// one arena; past `spill_bytes` they are written, sorted, to a temporary run file (the
/// committed file is not rewritten), so memory stays bounded and every row is written about
/// twice whatever the input size: once to its run, once to the next generation, which
/// [`ElementStateTx::prepare`] merges from the committed file, the runs and the arena.
pub struct ElementStateTx {
    prefix: PathBuf,
    committed: u64,
    base: ElementState,
    /// Spilled runs, oldest first (temporary files, deleted when merged or dropped).
    runs: Vec<Run>,
    arena: Vec<u8>,
    staged: foldhash::HashMap<Key, Staged>,
    spill_bytes: usize,
    temp_seq: u32,
    changed: bool,
}

impl ElementStateTx {
    /// Starts staging changes on top of committed generation `committed`.
    ///
    /// # Errors
    /// When the committed file cannot be opened.
    pub fn begin(prefix: &Path, committed: u64) -> Result<Self, ElementStateError> {
        Self::with_spill_bytes(prefix, committed, DEFAULT_SPILL_BYTES)
    }

    /// Like [`ElementStateTx::begin`] with a chosen memory bound (tests use small ones to
    /// exercise the merging path).
    ///
    /// # Errors
    /// When the committed file cannot be opened.
    pub fn with_spill_bytes(
        prefix: &Path,
        committed: u64,
        spill_bytes: usize,
    ) -> Result<Self, ElementStateError> {
        Ok(Self {
            prefix: prefix.to_owned(),
            committed,
            base: ElementState::open_generation(prefix, committed)?,
            runs: Vec::new(),
            // Reserved whole: growing by doubling would copy it and overshoot the bound.
            arena: Vec::with_capacity(spill_bytes.saturating_add(1 << 16).min(1 << 31)),
            staged: foldhash::HashMap::default(),
            spill_bytes: spill_bytes.max(1),
            temp_seq: 0,
            changed: false,
        })
    }

    fn temp_path(&mut self, what: &str) -> PathBuf {
        self.temp_seq += 1;
        generations::temp_path(&self.prefix, self.committed, what, self.temp_seq)
    }

    /// Finds an element's encoded row, staged, in a run or committed, and hands it to `f`.
    /// Newest first: the first row found that replaces is the answer; rows marked "if absent"
    /// yield to any older row, so the oldest of them is the answer when no row replaces. The
    /// answer is always the last row handed to `f` ([`ElementStateTx::get_into`] relies on it).
    fn find<R>(
        &self,
        key: Key,
        mut f: impl FnMut(&[u8]) -> R,
    ) -> Result<Option<R>, ElementStateError> {
        let mut kept: Option<R> = None;
        if let Some(s) = self.staged.get(&key) {
            let body = self.arena.get(s.range()).unwrap_or(&[]);
            if !s.if_absent {
                return Ok(Some(f(body)));
            }
            kept = Some(f(body));
        }
        for run in self.runs.iter().rev() {
            match run.find(key, &mut f)? {
                Some((false, r)) => return Ok(Some(r)),
                Some((true, r)) => kept = Some(r),
                None => {}
            }
        }
        match self.base.find(key, &mut f)? {
            Some(r) => Ok(Some(r)),
            None => Ok(kept),
        }
    }

    /// The latest state of an element: staged, else committed.
    ///
    /// # Errors
    /// When a state file is damaged.
    pub fn get(&self, t: ElementType, id: i64) -> Result<Option<Row>, ElementStateError> {
        match self.find(key(t, id), decode)? {
            Some(row) => row.map(Some).ok_or_else(|| ElementStateError::Damaged {
                path: self.base.path.clone(),
                message: "row unreadable".to_owned(),
            }),
            None => Ok(None),
        }
    }

    /// Like [`ElementStateTx::get`], into `row` (its buffers reused); whether there is a state.
    ///
    /// # Errors
    /// When a state file is damaged.
    pub fn get_into(
        &self,
        t: ElementType,
        id: i64,
        row: &mut Row,
    ) -> Result<bool, ElementStateError> {
        match self.find(key(t, id), |b| decode_into(b, row).is_some())? {
            Some(true) => Ok(true),
            Some(false) => Err(ElementStateError::Damaged {
                path: self.base.path.clone(),
                message: "row unreadable".to_owned(),
            }),
            None => Ok(false),
        }
    }

    /// Whether an element has a state, staged or committed.
    ///
    /// # Errors
    /// When a state file is damaged.
    pub fn contains(&self, t: ElementType, id: i64) -> Result<bool, ElementStateError> {
        Ok(self.find(key(t, id), |_| ())?.is_some())
    }

    /// Stages an element's state. With `replace`, it replaces any earlier state (the caller
    /// checked it is newer); without it (a version 1 staged without looking up the stored
    /// state), an existing state, which can only be as new or newer, is kept.
    ///
    /// # Errors
    /// When writing a temporary run fails.
    pub fn put(
        &mut self,
        replace: bool,
        t: ElementType,
        id: i64,
        row: &RowRef<'_>,
    ) -> Result<(), ElementStateError> {
        let key = key(t, id);
        if !replace && self.staged.contains_key(&key) {
            return Ok(());
        }
        self.changed = true;
        let start = self.arena.len();
        encode(row, &mut self.arena);
        mark_if_absent(&mut self.arena[start..], !replace);
        let (Ok(start), Ok(len)) = (
            u32::try_from(start),
            u32::try_from(self.arena.len() - start),
        ) else {
            return Err(ElementStateError::Damaged {
                path: self.prefix.clone(),
                message: format!("row of {key:?} too large to stage"),
            });
        };
        self.staged.insert(
            key,
            Staged {
                start,
                len,
                if_absent: !replace,
            },
        );
        if self.arena.len() >= self.spill_bytes {
            self.spill()?;
        }
        Ok(())
    }

    /// The staged rows in key order, emptying the stage.
    fn take_staged(&mut self) -> Source<'static> {
        let mut staged: Vec<(Key, Staged)> = std::mem::take(&mut self.staged).into_iter().collect();
        staged.sort_unstable_by_key(|s| s.0);
        let arena = std::mem::take(&mut self.arena);
        self.arena = Vec::with_capacity(arena.capacity());
        Box::new(StagedRecords {
            rows: staged.into_iter(),
            arena,
        })
    }

    /// Writes the staged rows, sorted, to a new temporary run, emptying memory. Once there
    /// would be [`MAX_RUNS`], the runs are merged into the new one as well.
    fn spill(&mut self) -> Result<(), ElementStateError> {
        let path = self.temp_path("run");
        let mut w = StateWriter::create(&path)?;
        let merged = if self.runs.len() + 1 >= MAX_RUNS {
            std::mem::take(&mut self.runs)
        } else {
            Vec::new()
        };
        let most = merged.iter().map(|r| r.state.len()).sum::<u64>() + self.staged.len() as u64;
        w.filter = Some(
            fastbloom::BloomFilter::with_false_pos(FILTER_FALSE_POSITIVES)
                .expected_items(usize::try_from(most).unwrap_or(usize::MAX).max(1)),
        );
        let mut sources: Vec<Source<'_>> = merged
            .iter()
            .map(|r| Box::new(r.state.records(0)) as Source<'_>)
            .collect();
        sources.push(self.take_staged());
        merge(sources, &mut w, true)?;
        // Runs never outlive the ingest: no sync.
        let filter = w.finish(false)?;
        for r in merged {
            let _ = std::fs::remove_file(&r.state.path);
        }
        self.runs.push(Run {
            state: ElementState::open(&path)?,
            filter,
        });
        Ok(())
    }

    /// Writes the next generation's file (complete, synced and renamed into place) and returns
    /// it, or `None` when nothing was staged. The caller records the generation in its database
    /// transaction and then calls [`Prepared::committed`].
    ///
    /// # Errors
    /// When writing the new file fails; the committed generation is untouched.
    pub fn prepare(mut self) -> Result<Option<Prepared>, ElementStateError> {
        if !self.changed {
            return Ok(None);
        }
        let temp = self.temp_path("new");
        let mut w = StateWriter::create(&temp)?;
        let staged = self.take_staged();
        let mut sources: Vec<Source<'_>> = vec![Box::new(self.base.records(0))];
        for r in &self.runs {
            sources.push(Box::new(r.state.records(0)));
        }
        sources.push(staged);
        merge(sources, &mut w, false)?;
        w.finish(true)?;
        Ok(Some(generations::publish(
            &temp,
            &self.prefix,
            self.committed,
        )?))
    }
}

impl Drop for ElementStateTx {
    fn drop(&mut self) {
        // Temporary files only; the committed generation is never touched.
        for r in &self.runs {
            let _ = std::fs::remove_file(&r.state.path);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use std::collections::BTreeMap;

    const TYPES: [ElementType; 3] = [ElementType::Node, ElementType::Way, ElementType::Relation];

    fn random_row(rng: &mut impl Rng, version: i64) -> Row {
        let tags: String = (0..rng.gen_range(0..40))
            .map(|_| char::from(rng.gen_range(b'a'..=b'z')))
            .collect();
        Row {
            version,
            ts: rng.gen_range(-1_000_000_000_000..4_000_000_000),
            visible: rng.gen_bool(0.8),
            pos: rng.gen_bool(0.5).then(|| {
                (
                    rng.gen_range(-900_000_000..=900_000_000),
                    rng.gen_range(i32::MIN..=i32::MAX),
                )
            }),
            tags,
            refs: rng
                .gen_bool(0.5)
                .then(|| (0..rng.gen_range(0..300)).map(|_| rng.gen()).collect()),
        }
    }

    fn as_ref(r: &Row) -> RowRef<'_> {
        RowRef {
            version: r.version,
            ts: r.ts,
            visible: r.visible,
            pos: r.pos,
            tags: &r.tags,
            refs: r.refs.as_deref(),
        }
    }

    /// Several ingests of random puts (replacing, and kept only when absent), with a small
    /// memory bound so rows are merged into temporary files mid-ingest: every lookup and the
    /// full scan agree with a plain ordered map applying the same rules.
    #[test]
    fn lookups_and_scans_agree_with_an_ordered_map_across_generations() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("x.db.elements");
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let mut model: BTreeMap<(u8, i64), Row> = BTreeMap::new();
        let mut committed = 0;
        for ingest in 0..4 {
            let mut tx = ElementStateTx::with_spill_bytes(&prefix, committed, 20_000).unwrap();
            for _ in 0..3_000 {
                let t = TYPES[rng.gen_range(0..3)];
                // Negative ids occur in files edited offline; the order must hold for them.
                let id = rng.gen_range(-50..2_000);
                let k = key(t, id);
                let replace = rng.gen_bool(0.7);
                let version = rng.gen_range(1..9);
                let row = random_row(&mut rng, version);
                tx.put(replace, t, id, &as_ref(&row)).unwrap();
                if replace || !model.contains_key(&k) {
                    model.insert(k, row);
                }
                if rng.gen_bool(0.1) {
                    let (t, id) = (TYPES[rng.gen_range(0..3)], rng.gen_range(-60..2_010));
                    assert_eq!(tx.get(t, id).unwrap().as_ref(), model.get(&key(t, id)));
                    assert_eq!(tx.contains(t, id).unwrap(), model.contains_key(&key(t, id)));
                }
            }
            // More spills than MAX_RUNS: runs were also merged into one.
            assert!(
                !tx.runs.is_empty() && tx.temp_seq as usize > MAX_RUNS,
                "ingest {ingest} spilled {} runs",
                tx.temp_seq
            );
            let prepared = tx.prepare().unwrap().unwrap();
            committed = prepared.generation();
            prepared.committed();
            let state = ElementState::open_generation(&prefix, committed).unwrap();
            assert_eq!(state.len(), model.len() as u64);
            // The "if absent" mark of the runs never reaches a committed file.
            assert!(state
                .sequential(0)
                .all(|r| r.is_ok_and(|(_, body)| !is_if_absent(&body))));
            for (&(code, id), row) in &model {
                let t = TYPES[usize::from(code)];
                assert_eq!(state.get(t, id).unwrap().as_ref(), Some(row));
            }
            for t in TYPES {
                let got: Vec<(i64, Row)> = state.rows_of(t).map(Result::unwrap).collect();
                let want: Vec<(i64, Row)> = model
                    .iter()
                    .filter(|(k, _)| k.0 == type_code(t))
                    .map(|(k, r)| (k.1, r.clone()))
                    .collect();
                assert_eq!(got, want, "{t:?} rows in id order");
            }
        }
        // Only the committed generation is left: previous ones and temporary files are gone.
        let files: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().into_string().unwrap())
            .collect();
        assert_eq!(files, vec![format!("x.db.elements.{committed}")]);
    }

    /// A row staged "only if absent" yields to a committed row, and to a row staged before it.
    #[test]
    fn a_kept_row_never_replaces_an_existing_one() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("k.db.elements");
        let row = |version, tags: &str| Row {
            version,
            ts: 5,
            visible: true,
            pos: None,
            tags: tags.into(),
            refs: None,
        };
        let mut tx = ElementStateTx::begin(&prefix, 0).unwrap();
        tx.put(true, ElementType::Way, 1, &as_ref(&row(3, "old")))
            .unwrap();
        let g = tx.prepare().unwrap().unwrap();
        let committed = g.generation();
        g.committed();
        let mut tx = ElementStateTx::begin(&prefix, committed).unwrap();
        tx.put(false, ElementType::Way, 1, &as_ref(&row(1, "kept?")))
            .unwrap();
        tx.put(false, ElementType::Way, 2, &as_ref(&row(1, "first")))
            .unwrap();
        tx.put(false, ElementType::Way, 2, &as_ref(&row(1, "second")))
            .unwrap();
        assert_eq!(tx.get(ElementType::Way, 1).unwrap(), Some(row(3, "old")));
        assert_eq!(tx.get(ElementType::Way, 2).unwrap(), Some(row(1, "first")));
        let g = tx.prepare().unwrap().unwrap();
        let state = ElementState::open_generation(&prefix, g.generation()).unwrap();
        assert_eq!(state.get(ElementType::Way, 1).unwrap(), Some(row(3, "old")));
        assert_eq!(
            state.get(ElementType::Way, 2).unwrap(),
            Some(row(1, "first"))
        );
        assert_eq!(state.get(ElementType::Node, 1).unwrap(), None);
    }

    /// An ingest dropped before its commit leaves the committed file as it was and no
    /// temporary file behind; damaged files are refused with their name.
    #[test]
    fn an_abandoned_ingest_changes_nothing_and_damage_is_reported() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("a.db.elements");
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let mut tx = ElementStateTx::begin(&prefix, 0).unwrap();
        for id in 0..500 {
            tx.put(
                true,
                ElementType::Node,
                id,
                &as_ref(&random_row(&mut rng, 1)),
            )
            .unwrap();
        }
        let g = tx.prepare().unwrap().unwrap();
        let path = generations::path(&prefix, g.generation());
        let before = std::fs::read(&path).unwrap();
        let mut tx = ElementStateTx::with_spill_bytes(&prefix, 1, 1_000).unwrap();
        for id in 0..500 {
            tx.put(
                true,
                ElementType::Way,
                id,
                &as_ref(&random_row(&mut rng, 2)),
            )
            .unwrap();
        }
        drop(tx);
        assert_eq!(std::fs::read(&path).unwrap(), before);
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);

        let cut = dir.path().join("cut");
        std::fs::write(&cut, &before[..before.len() - 5]).unwrap();
        let e = ElementState::open(&cut).unwrap_err().to_string();
        assert!(
            e.starts_with(&cut.display().to_string()) && e.contains("damaged"),
            "{e}"
        );
        // A record cut inside a block: the directory is intact, the lookup fails.
        let mut bad = before.clone();
        bad[HEADER_BYTES + 1] = 0xFF;
        bad[HEADER_BYTES + 2] = 0xFF;
        let broken = dir.path().join("broken");
        std::fs::write(&broken, &bad).unwrap();
        let s = ElementState::open(&broken).unwrap();
        assert!(s.get(ElementType::Node, 3).is_err());
    }

    /// A file of version 1 (refs as little-endian `i64`s, written before) is read with its refs
    /// packed as now, by lookups and scans, and the next ingest writes version 2.
    #[test]
    fn a_version_1_file_reads_with_refs_repacked_and_is_rewritten_as_version_2() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("v.db.elements");
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(21);
        let mut raw_rows = BTreeMap::new();
        let mut tx = ElementStateTx::begin(&prefix, 0).unwrap();
        for i in 0..600 {
            let t = TYPES[i % 3];
            let mut row = random_row(&mut rng, 1);
            row.refs = row.refs.map(|_| {
                let first: i64 = rng.gen_range(-5..1_000_000_000_000);
                (0..rng.gen_range(0..40))
                    .map(|k| first + k * rng.gen_range(-3..4))
                    .chain([i64::MIN, i64::MAX].into_iter().take(i % 4 / 2))
                    .flat_map(i64::to_le_bytes)
                    .collect()
            });
            tx.put(true, t, i as i64, &as_ref(&row)).unwrap();
            raw_rows.insert((t, i as i64), row);
        }
        let g = tx.prepare().unwrap().unwrap();
        let committed = g.generation();
        g.committed();
        // The same bytes under the older magic are a version-1 file.
        let path = generations::path(&prefix, committed);
        let mut bytes = std::fs::read(&path).unwrap();
        let n = bytes.len();
        bytes[..8].copy_from_slice(MAGIC_LEGACY_REFS);
        bytes[n - 8..].copy_from_slice(MAGIC_LEGACY_REFS);
        std::fs::write(&path, &bytes).unwrap();

        let expected: BTreeMap<(ElementType, i64), Row> = raw_rows
            .iter()
            .map(|(&k, r)| {
                let mut r = r.clone();
                r.refs = r.refs.as_deref().map(crate::store::repack_legacy_refs);
                (k, r)
            })
            .collect();
        let old = ElementState::open(&path).unwrap();
        for (&(t, id), row) in &expected {
            assert_eq!(old.get(t, id).unwrap().as_ref(), Some(row), "{t:?} {id}");
        }
        let all_rows = |s: &ElementState| -> BTreeMap<(ElementType, i64), Row> {
            s.rows()
                .map(|r| r.map(|(t, id, row)| ((t, id), row)))
                .collect::<Result<_, _>>()
                .unwrap()
        };
        assert_eq!(all_rows(&old), expected);
        // Unpacked, the repacked refs are the numbers the old file held.
        let (&k, r) = raw_rows
            .iter()
            .find(|(_, r)| r.refs.as_ref().is_some_and(|b| b.len() > 16))
            .unwrap();
        let raw = r.refs.as_deref().unwrap();
        let numbers: Vec<i64> = raw
            .chunks_exact(8)
            .map(|c| i64::from_le_bytes(c.try_into().unwrap()))
            .collect();
        let packed = old.get(k.0, k.1).unwrap().unwrap().refs.unwrap();
        assert_eq!(
            crate::store::unpack_refs(&packed).collect::<Vec<_>>(),
            numbers
        );
        assert!(packed.len() < raw.len());

        // The next ingest merges the old rows into a version-2 file.
        let mut tx = ElementStateTx::begin(&prefix, committed).unwrap();
        let extra = random_row(&mut rng, 2);
        tx.put(true, ElementType::Way, 10_000, &as_ref(&extra))
            .unwrap();
        let g = tx.prepare().unwrap().unwrap();
        let next = std::fs::read(generations::path(&prefix, g.generation())).unwrap();
        assert_eq!(&next[..8], MAGIC);
        let new = ElementState::open_generation(&prefix, g.generation()).unwrap();
        let mut want = expected;
        want.insert((ElementType::Way, 10_000), extra);
        assert_eq!(all_rows(&new), want);
    }
}
