//! The node-location index: the latest known position and version of every node, in a compact
//! sorted file next to the state database.
//!
//! A country holds tens of millions of nodes; keeping their positions in SQLite rows costs
//! several times their size and makes every snapshot ingest a long run of B-tree inserts. This
//! index stores 16 bytes per node (a 32-bit id offset within its block, latitude and longitude
//! in 1e-7 degree integers, the version) in blocks of at most [`BLOCK_ENTRIES`] entries sorted
//! by id; a directory of block start ids (16 bytes per block, about 0.1 byte per node) is read
//! into memory and a lookup reads one block (at most 4 KiB) with a positioned read. Memory use
//! therefore stays small whatever the index size, and the operating system's page cache does
//! the caching.
//!
//! ## Generations and crash consistency
//! The index of database `region.db` is the file `region.db.nodes.<g>`, replaced whole by each
//! ingest that changes it, by the protocol of [`crate::generations`]: an ingest stages the new
//! positions (in memory, spilling sorted runs to disk) and merges them with the committed index
//! into the next generation before its SQLite commit names it.

use std::cell::RefCell;
use std::fs::File;
use std::io::{BufReader, BufWriter, Read, Seek, SeekFrom, Write};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};

use crate::generations::{self, Prepared};
use crate::model::Coord;
use crate::sorted_keys::SortedKeys;

/// Most entries in one block; a block is then at most 4 KiB, one page.
pub const BLOCK_ENTRIES: usize = 256;
const ENTRY_BYTES: u64 = 16;
const DIR_BYTES: u64 = 16;
const HEADER_BYTES: u64 = 64;
const MAGIC: &[u8; 8] = b"HXVNODE1";
/// Entries staged in id order (a plain vector, 96 MB at this size) before they are written out
/// as a run; the hash map of entries staged out of order has its own bound, [`OVERLAY_ENTRIES`].
pub const DEFAULT_RUN_ENTRIES: usize = 4 << 20;
/// Entries staged out of order (in the hash map) before they are written out as a run: 7/8 of
/// 2^21, the most a table of 2^21 buckets (about 52 MB) holds, so it never doubles past that.
const OVERLAY_ENTRIES: usize = 7 << 18;
/// Runs kept beside the base before they are merged into a new base, which bounds the number
/// of positioned reads per lookup during an ingest.
const MAX_RUNS: usize = 16;

/// Errors of the node-location index; each names its file.
#[derive(Debug, thiserror::Error)]
pub enum NodeIndexError {
    #[error("{path}: node-location index: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: node-location index is damaged: {message}")]
    Damaged { path: PathBuf, message: String },
}

impl From<generations::GenerationError> for NodeIndexError {
    fn from(e: generations::GenerationError) -> Self {
        Self::Io {
            path: e.path,
            source: e.source,
        }
    }
}

fn io_err(path: &Path) -> impl Fn(std::io::Error) -> NodeIndexError + '_ {
    move |source| NodeIndexError::Io {
        path: path.to_owned(),
        source,
    }
}

/// The indexed state of one node.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct NodeEntry {
    pub coord: Coord,
    /// The OSM version this position belongs to (0 when the source had no versions).
    pub version: u32,
    /// Whether the node has a row in the database's `elements` table (it carries or carried
    /// tags). Sticky: merging entries of one node keeps it when any has it. The writer skips
    /// the `elements` lookup for a node whose entry says it has no row.
    pub has_row: bool,
}

/// Highest version an entry holds: the top bit of the stored word is [`NodeEntry::has_row`].
const MAX_VERSION: u32 = 0x7FFF_FFFF;

impl NodeEntry {
    /// An entry from a parsed version number (clamped into 31 bits; missing or negative is 0).
    #[must_use]
    pub fn new(coord: Coord, version: i64) -> Self {
        Self {
            coord,
            version: u32::try_from(version.max(0)).map_or(MAX_VERSION, |v| v.min(MAX_VERSION)),
            has_row: false,
        }
    }

    /// The same entry, marked as having a row in `elements` when `has_row`.
    #[must_use]
    pub const fn with_row(mut self, has_row: bool) -> Self {
        self.has_row |= has_row;
        self
    }

    /// Of two entries of one node: the higher version (the second among equals), keeping a
    /// row mark of either.
    fn newer(self, other: Self) -> Self {
        let row = self.has_row || other.has_row;
        let best = if other.version >= self.version {
            other
        } else {
            self
        };
        best.with_row(row)
    }

    fn to_bytes(self, offset: u32) -> [u8; 16] {
        let mut b = [0u8; 16];
        b[0..4].copy_from_slice(&offset.to_le_bytes());
        b[4..8].copy_from_slice(&self.coord.lat_e7().to_le_bytes());
        b[8..12].copy_from_slice(&self.coord.lon_e7().to_le_bytes());
        let word = self.version.min(MAX_VERSION) | (u32::from(self.has_row) << 31);
        b[12..16].copy_from_slice(&word.to_le_bytes());
        b
    }

    /// Decodes one entry; `None` when its coordinates are out of range (a damaged file).
    fn from_bytes(b: &[u8]) -> Option<(u32, Self)> {
        let word = |i: usize| -> Option<[u8; 4]> { b.get(i..i + 4)?.try_into().ok() };
        let offset = u32::from_le_bytes(word(0)?);
        let lat = i32::from_le_bytes(word(4)?);
        let lon = i32::from_le_bytes(word(8)?);
        let word = u32::from_le_bytes(word(12)?);
        let coord = Coord::from_e7(i64::from(lat), i64::from(lon))?;
        Some((
            offset,
            Self {
                coord,
                version: word & MAX_VERSION,
                has_row: word >> 31 == 1,
            },
        ))
    }
}

/// The file-name prefix of the index belonging to a database file (`region.db` →
/// `region.db.nodes`).
#[must_use]
pub fn prefix_for(db: &Path) -> PathBuf {
    let mut s = db.as_os_str().to_owned();
    s.push(".nodes");
    PathBuf::from(s)
}

/// A read-only index file (or the empty index of generation 0).
#[derive(Debug)]
pub struct NodeIndex {
    file: Option<File>,
    path: PathBuf,
    count: u64,
    /// First id of each block and the index of its first entry.
    dir: Vec<(i64, u64)>,
    /// The first ids again, searched level by level (lookups are random).
    bases: SortedKeys<i64>,
    /// Copies of blocks read recently. The nodes of a way usually have neighbouring ids, and
    /// the ways of an area share nodes, so most lookups find their block here.
    cache: RefCell<BlockCache>,
    /// Slots of `cache` (fewer for an ingest's runs, which share the memory bound).
    cache_slots: usize,
    /// For an ingest's run: a filter of its ids, so that a lookup of a node it does not hold
    /// (most lookups, with several runs) reads nothing.
    filter: Option<fastbloom::BloomFilter>,
}

/// The hash of a node id in a run's filter.
fn filter_hash(id: i64) -> u64 {
    use std::hash::BuildHasher;
    foldhash::fast::FixedState::with_seed(0x6e6f_6465).hash_one(id)
}

/// Cache slots of each run of an ingest ([`NodeIndexTx`]): at most [`MAX_RUNS`] of them
/// together hold as much as the committed index's cache.
const RUN_CACHE_SLOTS: usize = CACHE_SLOTS / MAX_RUNS;

/// Blocks held by the cache: at most this many (4 KiB each, 64 MiB in all: an index of 4
/// million nodes fits whole).
const CACHE_SLOTS: usize = 16_384;

/// A direct-mapped cache of blocks of the file: block `b` can only sit in slot
/// `b % slots`. Slot memory is allocated zeroed and untouched until used.
#[derive(Debug, Default)]
struct BlockCache {
    /// Per slot, the block it holds (`usize::MAX`: none) and its entry count.
    tags: Vec<(usize, usize)>,
    bytes: Vec<u8>,
    /// The block of the last lookup.
    last_block: usize,
    /// The entry of the last lookup found in `last_block`.
    last_entry: usize,
}

impl BlockCache {
    const SLOT_BYTES: usize = BLOCK_ENTRIES * ENTRY_BYTES as usize;

    /// The bytes of block `b` if cached, else `None` and the slot to fill.
    fn slot(&mut self, b: usize, slots: usize) -> (usize, bool) {
        if self.tags.is_empty() {
            self.tags = vec![(usize::MAX, 0); slots];
            self.bytes = vec![0; slots * Self::SLOT_BYTES];
        }
        let k = b % self.tags.len();
        (k, self.tags[k].0 == b)
    }

    fn block(&self, k: usize) -> &[u8] {
        let n = self.tags[k].1;
        &self.bytes[k * Self::SLOT_BYTES..k * Self::SLOT_BYTES + n * ENTRY_BYTES as usize]
    }
}

impl NodeIndex {
    /// The empty index.
    #[must_use]
    pub fn empty() -> Self {
        Self {
            file: None,
            path: PathBuf::new(),
            count: 0,
            dir: Vec::new(),
            bases: SortedKeys::default(),
            cache: RefCell::default(),
            cache_slots: CACHE_SLOTS,
            filter: None,
        }
    }

    /// Opens generation `generation` of the index at `prefix`; generation 0 is the empty index.
    ///
    /// # Errors
    /// When the file is missing, unreadable or damaged.
    pub fn open_generation(prefix: &Path, generation: u64) -> Result<Self, NodeIndexError> {
        if generation == 0 {
            return Ok(Self::empty());
        }
        Self::open(&generations::path(prefix, generation))
    }

    /// Opens an index file and reads its directory.
    ///
    /// # Errors
    /// When the file is missing, unreadable or damaged.
    pub fn open(path: &Path) -> Result<Self, NodeIndexError> {
        let file = File::open(path).map_err(io_err(path))?;
        let len = file.metadata().map_err(io_err(path))?.len();
        let damaged = |message: String| NodeIndexError::Damaged {
            path: path.to_owned(),
            message,
        };
        let mut header = [0u8; HEADER_BYTES as usize];
        file.read_exact_at(&mut header, 0)
            .map_err(|_| damaged(format!("{len} bytes is shorter than its header")))?;
        if &header[0..8] != MAGIC {
            return Err(damaged("wrong magic bytes".to_owned()));
        }
        let word = |i: usize| {
            let mut a = [0u8; 8];
            a.copy_from_slice(&header[i..i + 8]);
            u64::from_le_bytes(a)
        };
        let (count, blocks, dir_offset) = (word(8), word(16), word(24));
        let expected = count
            .checked_mul(ENTRY_BYTES)
            .and_then(|e| blocks.checked_mul(DIR_BYTES).map(|d| (e, d)))
            .and_then(|(e, d)| HEADER_BYTES.checked_add(e)?.checked_add(d));
        if expected != Some(len) || dir_offset != HEADER_BYTES + count * ENTRY_BYTES {
            return Err(damaged(format!(
                "its header ({count} entries, {blocks} blocks) does not match its size ({len} bytes)"
            )));
        }
        let mut raw = Vec::new();
        let mut r = BufReader::new(&file);
        r.seek(SeekFrom::Start(dir_offset)).map_err(io_err(path))?;
        r.take(blocks * DIR_BYTES)
            .read_to_end(&mut raw)
            .map_err(io_err(path))?;
        let mut dir = Vec::with_capacity(raw.len() / 16);
        for c in raw.chunks_exact(16) {
            let mut a = [0u8; 8];
            a.copy_from_slice(&c[0..8]);
            let base = i64::from_le_bytes(a);
            a.copy_from_slice(&c[8..16]);
            let first = u64::from_le_bytes(a);
            if first >= count {
                return Err(damaged("a block starts past the last entry".to_owned()));
            }
            if let Some(&(pb, pf)) = dir.last() {
                if base <= pb || first <= pf || first - pf > BLOCK_ENTRIES as u64 {
                    return Err(damaged("its block directory is not in order".to_owned()));
                }
            } else if first != 0 {
                return Err(damaged(
                    "its first block does not start at entry 0".to_owned(),
                ));
            }
            dir.push((base, first));
        }
        if dir
            .last()
            .is_some_and(|&(_, f)| count - f > BLOCK_ENTRIES as u64)
            || (dir.is_empty() && count > 0)
        {
            return Err(damaged("its last block is too long".to_owned()));
        }
        Ok(Self {
            file: Some(file),
            path: path.to_owned(),
            count,
            bases: dir.iter().map(|d| d.0).collect(),
            dir,
            cache: RefCell::default(),
            cache_slots: CACHE_SLOTS,
            filter: None,
        })
    }

    /// Number of nodes in the index.
    #[must_use]
    pub const fn len(&self) -> u64 {
        self.count
    }

    /// Whether the index holds no node.
    #[must_use]
    pub const fn is_empty(&self) -> bool {
        self.count == 0
    }

    fn block_end(&self, b: usize) -> u64 {
        self.dir.get(b + 1).map_or(self.count, |d| d.1)
    }

    /// The indexed state of node `id`.
    ///
    /// # Errors
    /// When the file cannot be read or the block holding `id` is damaged.
    pub fn get(&self, id: i64) -> Result<Option<NodeEntry>, NodeIndexError> {
        let Some(file) = &self.file else {
            return Ok(None);
        };
        if self
            .filter
            .as_ref()
            .is_some_and(|f| !f.contains_hash(filter_hash(id)))
        {
            return Ok(None);
        }
        let mut cache = self.cache.borrow_mut();
        // Neighbouring lookups (the nodes of a way) usually fall in the block of the last one.
        let last = cache.last_block;
        let b = if self.dir.get(last).is_some_and(|d| d.0 <= id)
            && self.dir.get(last + 1).is_none_or(|d| id < d.0)
        {
            last
        } else {
            let Some(b) = self.bases.last_at_most(&id) else {
                return Ok(None);
            };
            cache.last_block = b;
            b
        };
        let (base, first) = self.dir[b];
        // Ids span the whole i64 range (negative ones too), so the difference may overflow.
        let Some(offset) = id.checked_sub(base).and_then(|d| u32::try_from(d).ok()) else {
            return Ok(None);
        };
        let (k, hit) = cache.slot(b, self.cache_slots);
        if !hit {
            let n = usize::try_from(self.block_end(b) - first)
                .unwrap_or(usize::MAX)
                .min(BLOCK_ENTRIES);
            cache.tags[k] = (usize::MAX, 0);
            let at = k * BlockCache::SLOT_BYTES;
            file.read_exact_at(
                &mut cache.bytes[at..at + n * ENTRY_BYTES as usize],
                HEADER_BYTES + first * ENTRY_BYTES,
            )
            .map_err(io_err(&self.path))?;
            cache.tags[k] = (b, n);
        }
        let hint = if b == last { cache.last_entry + 1 } else { 0 };
        let block = cache.block(k);
        let Some(i) = find_offset(block, offset, hint) else {
            return Ok(None);
        };
        cache.last_entry = i;
        let found = NodeEntry::from_bytes(&cache.block(k)[i * 16..i * 16 + 16]);
        found
            .map(|(_, e)| Some(e))
            .ok_or_else(|| NodeIndexError::Damaged {
                path: self.path.clone(),
                message: format!("node {id} has coordinates out of range"),
            })
    }

    /// Streams every entry in id order with a buffered sequential read (no memory map, so a
    /// merge of a large index does not grow the process's resident memory).
    ///
    /// # Errors
    /// When the file cannot be reopened.
    pub fn iter(&self) -> Result<Entries, NodeIndexError> {
        let reader = match &self.file {
            Some(_) => {
                let mut f = File::open(&self.path).map_err(io_err(&self.path))?;
                f.seek(SeekFrom::Start(HEADER_BYTES))
                    .map_err(io_err(&self.path))?;
                Some(BufReader::with_capacity(1 << 20, f))
            }
            None => None,
        };
        Ok(Entries {
            reader,
            path: self.path.clone(),
            dir: self.dir.clone(),
            count: self.count,
            next: 0,
            block: 0,
        })
    }
}

/// The index of the entry with id offset `offset` in a block's bytes (entries sorted by
/// offset), if there is one. `hint` is tried first: the entry after the last one found in the
/// same block, which is the next node of a way more often than not. Then, as ids in a block
/// are usually dense or evenly spread, the entry where the offset would be if they were; the
/// binary search that follows only covers the side of that guess holding the offset. Most
/// lookups then touch one or two cache lines of the block instead of one per halving step:
/// on the demo at intensity 24 the report's 5.2 million lookups took about 40 % fewer profile
/// samples than with a plain binary search (what remains is mostly the first touch of a block).
fn find_offset(block: &[u8], offset: u32, hint: usize) -> Option<usize> {
    let off_at = |i: usize| -> Option<u32> {
        let b: [u8; 4] = block.get(i * 16..i * 16 + 4)?.try_into().ok()?;
        Some(u32::from_le_bytes(b))
    };
    let n = block.len() / ENTRY_BYTES as usize;
    if off_at(hint) == Some(offset) {
        return Some(hint);
    }
    let last = off_at(n.checked_sub(1)?)?;
    if offset > last {
        return None;
    }
    let guess = if last == 0 {
        0
    } else {
        usize::try_from(u64::from(offset) * (n as u64 - 1) / u64::from(last)).unwrap_or(0)
    };
    let (mut lo, mut hi) = match off_at(guess)?.cmp(&offset) {
        std::cmp::Ordering::Equal => return Some(guess),
        std::cmp::Ordering::Less => (guess + 1, n),
        std::cmp::Ordering::Greater => (0, guess),
    };
    while lo < hi {
        let mid = (lo + hi) / 2;
        match off_at(mid)?.cmp(&offset) {
            std::cmp::Ordering::Less => lo = mid + 1,
            std::cmp::Ordering::Greater => hi = mid,
            std::cmp::Ordering::Equal => return Some(mid),
        }
    }
    None
}

/// Sequential iterator over an index file's entries, from [`NodeIndex::iter`].
pub struct Entries {
    reader: Option<BufReader<File>>,
    path: PathBuf,
    dir: Vec<(i64, u64)>,
    count: u64,
    next: u64,
    block: usize,
}

impl Iterator for Entries {
    type Item = Result<(i64, NodeEntry), NodeIndexError>;

    fn next(&mut self) -> Option<Self::Item> {
        if self.next >= self.count {
            return None;
        }
        let reader = self.reader.as_mut()?;
        while self
            .dir
            .get(self.block + 1)
            .is_some_and(|d| d.1 <= self.next)
        {
            self.block += 1;
        }
        let base = self.dir.get(self.block)?.0;
        let mut b = [0u8; 16];
        if let Err(e) = reader.read_exact(&mut b) {
            self.next = self.count;
            return Some(Err(NodeIndexError::Io {
                path: self.path.clone(),
                source: e,
            }));
        }
        self.next += 1;
        Some(match NodeEntry::from_bytes(&b) {
            Some((off, e)) => Ok((base + i64::from(off), e)),
            None => Err(NodeIndexError::Damaged {
                path: self.path.clone(),
                message: "an entry has coordinates out of range".to_owned(),
            }),
        })
    }
}

/// Writes an index file from entries given in strictly increasing id order.
struct IndexWriter {
    out: BufWriter<File>,
    path: PathBuf,
    dir: Vec<(i64, u64)>,
    count: u64,
    block_len: usize,
}

impl IndexWriter {
    fn create(path: &Path) -> Result<Self, NodeIndexError> {
        let file = File::create(path).map_err(io_err(path))?;
        let mut out = BufWriter::with_capacity(1 << 20, file);
        out.write_all(&[0u8; HEADER_BYTES as usize])
            .map_err(io_err(path))?;
        Ok(Self {
            out,
            path: path.to_owned(),
            dir: Vec::new(),
            count: 0,
            block_len: 0,
        })
    }

    fn push(&mut self, id: i64, e: NodeEntry) -> Result<(), NodeIndexError> {
        let offset = match self.dir.last() {
            Some(&(base, _)) if self.block_len < BLOCK_ENTRIES && id > base => {
                id.checked_sub(base).and_then(|d| u32::try_from(d).ok())
            }
            _ => None,
        };
        let offset = offset.unwrap_or_else(|| {
            self.dir.push((id, self.count));
            self.block_len = 0;
            0
        });
        self.out
            .write_all(&e.to_bytes(offset))
            .map_err(io_err(&self.path))?;
        self.count += 1;
        self.block_len += 1;
        Ok(())
    }

    /// Writes the directory and header, and syncs the file to disk if asked (a temporary run
    /// or base never outlives its ingest and is not synced).
    fn finish(mut self, sync: bool) -> Result<(), NodeIndexError> {
        let err = io_err(&self.path);
        for &(base, first) in &self.dir {
            self.out.write_all(&base.to_le_bytes()).map_err(&err)?;
            self.out.write_all(&first.to_le_bytes()).map_err(&err)?;
        }
        let mut header = [0u8; HEADER_BYTES as usize];
        header[0..8].copy_from_slice(MAGIC);
        header[8..16].copy_from_slice(&self.count.to_le_bytes());
        header[16..24].copy_from_slice(&(self.dir.len() as u64).to_le_bytes());
        header[24..32].copy_from_slice(&(HEADER_BYTES + self.count * ENTRY_BYTES).to_le_bytes());
        let mut file = self
            .out
            .into_inner()
            .map_err(|e| e.into_error())
            .map_err(&err)?;
        file.seek(SeekFrom::Start(0)).map_err(&err)?;
        file.write_all(&header).map_err(&err)?;
        if sync {
            file.sync_all().map_err(&err)?;
        }
        Ok(())
    }
}

/// A sorted stream of entries: an index file or the sorted staged entries.
type Source<'a> = Box<dyn Iterator<Item = Result<(i64, NodeEntry), NodeIndexError>> + 'a>;

/// Merges sorted sources; for each id the entry with the highest version wins, and among equal
/// versions the one from the later source (sources are given oldest first).
fn merge_into(mut sources: Vec<Source<'_>>, out: &mut IndexWriter) -> Result<(), NodeIndexError> {
    let mut heads: Vec<Option<(i64, NodeEntry)>> = Vec::with_capacity(sources.len());
    for s in &mut sources {
        heads.push(s.next().transpose()?);
    }
    // A linear scan over the heads: there are at most MAX_RUNS + 2 sources.
    loop {
        let Some(min) = heads.iter().flatten().map(|h| h.0).min() else {
            return Ok(());
        };
        let mut best: Option<NodeEntry> = None;
        for (head, source) in heads.iter_mut().zip(sources.iter_mut()) {
            if let Some((id, e)) = *head {
                if id == min {
                    best = Some(best.map_or(e, |b| b.newer(e)));
                    *head = source.next().transpose()?;
                }
            }
        }
        if let Some(e) = best {
            out.push(min, e)?;
        }
    }
}

/// The changes one ingest makes to the index, staged until [`NodeIndexTx::prepare`].
///
/// Lookups see the committed index and everything staged so far. Staged entries live in a hash
/// map; past `run_entries` they are sorted and written out as a run file, and past a few runs
/// those are merged into a temporary base, so memory stays bounded for any input size.
pub struct NodeIndexTx {
    prefix: PathBuf,
    committed: u64,
    base: NodeIndex,
    /// Whether `base` is a temporary compaction (deleted when replaced or dropped).
    base_is_temp: bool,
    runs: Vec<NodeIndex>,
    /// Ids staged in increasing order (a sorted snapshot): kept without hashing, searched
    /// level by level (a binary search over millions of entries misses the cache at almost
    /// every step).
    tail_ids: SortedKeys<i64>,
    /// The entries of `tail_ids`, in the same order.
    tail: Vec<NodeEntry>,
    /// Entries staged out of order, and repeats; later than `tail` for the same id.
    overlay: foldhash::HashMap<i64, NodeEntry>,
    /// The highest id in `overlay` (an id above it cannot be there).
    overlay_max: i64,
    run_entries: usize,
    temp_seq: u32,
    changed: bool,
}

impl NodeIndexTx {
    /// Starts staging changes on top of committed generation `committed`.
    ///
    /// # Errors
    /// When the committed index file cannot be opened.
    pub fn begin(prefix: &Path, committed: u64) -> Result<Self, NodeIndexError> {
        Self::with_run_entries(prefix, committed, DEFAULT_RUN_ENTRIES)
    }

    /// Like [`NodeIndexTx::begin`] with a chosen in-memory run size (tests use small ones to
    /// exercise the spilling paths).
    ///
    /// # Errors
    /// When the committed index file cannot be opened.
    pub fn with_run_entries(
        prefix: &Path,
        committed: u64,
        run_entries: usize,
    ) -> Result<Self, NodeIndexError> {
        Ok(Self {
            prefix: prefix.to_owned(),
            committed,
            base: NodeIndex::open_generation(prefix, committed)?,
            base_is_temp: false,
            runs: Vec::new(),
            // Reserved whole (pages are only touched as entries arrive): growing by doubling
            // would hold the old and the new copy at once.
            tail_ids: SortedKeys::with_capacity(run_entries.max(1)),
            tail: Vec::with_capacity(run_entries.max(1)),
            overlay: foldhash::HashMap::default(),
            overlay_max: i64::MIN,
            run_entries: run_entries.max(1),
            temp_seq: 0,
            changed: false,
        })
    }

    /// The committed generation this transaction started from.
    #[must_use]
    pub const fn committed(&self) -> u64 {
        self.committed
    }

    fn temp_path(&mut self, what: &str) -> PathBuf {
        self.temp_seq += 1;
        generations::temp_path(&self.prefix, self.committed, what, self.temp_seq)
    }

    /// Records a node's position at a version. For each node the highest version staged or
    /// committed wins; among equal versions, the one staged last.
    ///
    /// # Errors
    /// When spilling a run to disk fails.
    pub fn stage(&mut self, id: i64, entry: NodeEntry) -> Result<(), NodeIndexError> {
        self.changed = true;
        // Snapshots come sorted by id: appending them skips the hash map. With this (and at
        // most 16 runs before a compaction) staging and writing 50 million sorted nodes went
        // from 70 s to 13 s (BENCHMARKS.md).
        if self.tail_ids.keys().last().is_none_or(|&l| id > l)
            && (id > self.overlay_max || !self.overlay.contains_key(&id))
        {
            self.tail_ids.push(id);
            self.tail.push(entry);
            if self.tail.len() >= self.run_entries {
                self.spill()?;
            }
            return Ok(());
        }
        self.overlay_max = self.overlay_max.max(id);
        match self.overlay.entry(id) {
            std::collections::hash_map::Entry::Occupied(mut o) => {
                let merged = o.get().newer(entry);
                o.insert(merged);
            }
            std::collections::hash_map::Entry::Vacant(v) => {
                v.insert(entry);
            }
        }
        if self.overlay.len() >= self.run_entries.min(OVERLAY_ENTRIES) {
            self.spill()?;
        }
        Ok(())
    }

    /// Writes `n` entries, in id order, as a run.
    fn write_run(
        &mut self,
        n: usize,
        sorted: impl IntoIterator<Item = (i64, NodeEntry)>,
    ) -> Result<(), NodeIndexError> {
        if n == 0 {
            return Ok(());
        }
        let path = self.temp_path("run");
        let mut w = IndexWriter::create(&path)?;
        let mut filter =
            fastbloom::BloomFilter::with_false_pos(crate::element_state::FILTER_FALSE_POSITIVES)
                .expected_items(n);
        for (id, e) in sorted {
            w.push(id, e)?;
            filter.insert_hash(filter_hash(id));
        }
        w.finish(false)?;
        let mut run = NodeIndex::open(&path)?;
        run.cache_slots = RUN_CACHE_SLOTS;
        run.filter = Some(filter);
        self.runs.push(run);
        Ok(())
    }

    /// Writes the staged entries out as runs (the tail first: the overlay is later), and
    /// merges the runs into a new temporary base when there are too many.
    fn spill(&mut self) -> Result<(), NodeIndexError> {
        let ids = std::mem::replace(
            &mut self.tail_ids,
            SortedKeys::with_capacity(self.run_entries),
        );
        let tail = std::mem::replace(&mut self.tail, Vec::with_capacity(self.run_entries));
        self.write_run(tail.len(), ids.into_keys().into_iter().zip(tail))?;
        let mut sorted: Vec<(i64, NodeEntry)> = self.overlay.drain().collect();
        self.overlay_max = i64::MIN;
        sorted.sort_unstable_by_key(|e| e.0);
        self.write_run(sorted.len(), sorted)?;
        if self.runs.len() > MAX_RUNS {
            let path = self.temp_path("base");
            let mut w = IndexWriter::create(&path)?;
            let mut sources: Vec<Source<'_>> = vec![Box::new(self.base.iter()?)];
            for r in &self.runs {
                sources.push(Box::new(r.iter()?));
            }
            merge_into(sources, &mut w)?;
            w.finish(false)?;
            let old_base = std::mem::replace(&mut self.base, NodeIndex::open(&path)?);
            if self.base_is_temp {
                let _ = std::fs::remove_file(&old_base.path);
            }
            self.base_is_temp = true;
            for r in self.runs.drain(..) {
                let _ = std::fs::remove_file(&r.path);
            }
        }
        Ok(())
    }

    /// The state of node `id`: the highest version among the committed index and the staged
    /// changes.
    ///
    /// # Errors
    /// When an index file cannot be read.
    pub fn get(&self, id: i64) -> Result<Option<NodeEntry>, NodeIndexError> {
        let mut best = self.base.get(id)?;
        for r in &self.runs {
            if let Some(e) = r.get(id)? {
                best = Some(best.map_or(e, |b| b.newer(e)));
            }
        }
        let staged = self
            .tail_ids
            .last_at_most(&id)
            .filter(|&i| self.tail_ids.keys()[i] == id)
            .map(|i| self.tail[i]);
        for e in [staged, self.overlay.get(&id).copied()]
            .into_iter()
            .flatten()
        {
            best = Some(best.map_or(e, |b| b.newer(e)));
        }
        Ok(best)
    }

    /// Writes the next generation's file (complete, synced and renamed into place) and returns
    /// it, or `None` when nothing was staged. The caller records the generation in its database
    /// transaction and then calls [`Prepared::committed`].
    ///
    /// # Errors
    /// When writing the new file fails; the committed generation is untouched.
    pub fn prepare(mut self) -> Result<Option<Prepared>, NodeIndexError> {
        if !self.changed {
            return Ok(None);
        }
        let mut overlay: Vec<(i64, NodeEntry)> =
            std::mem::take(&mut self.overlay).into_iter().collect();
        overlay.sort_unstable_by_key(|e| e.0);
        let temp = self.temp_path("new");
        let mut w = IndexWriter::create(&temp)?;
        let mut sources: Vec<Source<'_>> = vec![Box::new(self.base.iter()?)];
        for r in &self.runs {
            sources.push(Box::new(r.iter()?));
        }
        let ids = std::mem::take(&mut self.tail_ids).into_keys();
        let tail = std::mem::take(&mut self.tail);
        sources.push(Box::new(ids.into_iter().zip(tail).map(Ok)));
        sources.push(Box::new(overlay.into_iter().map(Ok)));
        merge_into(sources, &mut w)?;
        w.finish(true)?;
        Ok(Some(generations::publish(
            &temp,
            &self.prefix,
            self.committed,
        )?))
    }
}

impl Drop for NodeIndexTx {
    fn drop(&mut self) {
        // Temporary files only; the committed generation is never touched.
        for r in &self.runs {
            let _ = std::fs::remove_file(&r.path);
        }
        if self.base_is_temp {
            let _ = std::fs::remove_file(&self.base.path);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use std::collections::HashMap;

    fn entry(lat: i64, lon: i64, version: u32) -> NodeEntry {
        NodeEntry {
            coord: Coord::from_e7(lat, lon).unwrap(),
            version,
            has_row: false,
        }
    }

    fn commit(tx: NodeIndexTx) -> u64 {
        let p = tx.prepare().unwrap().unwrap();
        let g = p.generation();
        p.committed();
        g
    }

    #[test]
    fn the_row_mark_is_stored_and_sticky() {
        let c = Coord::from_e7(452_000_000, -336_000_000).unwrap();
        let plain = NodeEntry::new(c, 7);
        let marked = NodeEntry::new(c, 3).with_row(true);
        for e in [plain, marked, NodeEntry::new(c, i64::MAX).with_row(true)] {
            assert_eq!(NodeEntry::from_bytes(&e.to_bytes(9)), Some((9, e)));
        }
        assert_eq!(NodeEntry::new(c, i64::MAX).version, MAX_VERSION);
        // A newer version without the mark keeps the older one's mark.
        let merged = marked.newer(plain);
        assert_eq!((merged.version, merged.has_row), (7, true));
        assert_eq!(plain.newer(marked), merged);
    }

    #[test]
    fn empty_generation_has_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("s.db.nodes");
        let tx = NodeIndexTx::begin(&prefix, 0).unwrap();
        assert_eq!(tx.get(1).unwrap(), None);
        assert!(tx.prepare().unwrap().is_none());
    }

    /// A few million random nodes (ids spread over a planet-like range, with gaps wider than
    /// 2^32 to force block splits), staged through several runs and compactions over two
    /// generations: every lookup must return the highest version's position.
    #[test]
    fn random_millions_round_trip() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("s.db.nodes");
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let n = 2_000_000usize;
        let mut truth: HashMap<i64, NodeEntry> = HashMap::with_capacity(n);
        let mut tx = NodeIndexTx::with_run_entries(&prefix, 0, 60_000).unwrap();
        for i in 0..n {
            let id = if i % 1000 == 0 {
                rng.gen_range(i64::MIN..i64::MAX)
            } else {
                rng.gen_range(1..13_000_000_000i64)
            };
            let e = entry(
                rng.gen_range(-900_000_000..=900_000_000),
                rng.gen_range(-1_800_000_000..=1_800_000_000),
                rng.gen_range(0..4),
            );
            tx.stage(id, e).unwrap();
            let t = truth.entry(id).or_insert(e);
            if e.version >= t.version {
                *t = e;
            }
        }
        assert!(tx.base_is_temp, "the test should exercise compaction");
        let g1 = commit(tx);
        // A second generation changes a tenth of the nodes, some to lower versions (ignored).
        let mut tx = NodeIndexTx::with_run_entries(&prefix, g1, 50_000).unwrap();
        let ids: Vec<i64> = truth.keys().copied().take(n / 10).collect();
        for id in ids {
            let e = entry(
                rng.gen_range(0..1000),
                rng.gen_range(0..1000),
                rng.gen_range(0..6),
            );
            tx.stage(id, e).unwrap();
            let t = truth.get_mut(&id).unwrap();
            if e.version >= t.version {
                *t = e;
            }
            assert_eq!(tx.get(id).unwrap(), Some(*t), "staged lookup of {id}");
        }
        let g2 = commit(tx);
        assert!(
            !generations::path(&prefix, g1).exists(),
            "old generation removed"
        );
        let idx = NodeIndex::open_generation(&prefix, g2).unwrap();
        assert_eq!(idx.len(), truth.len() as u64);
        for (id, e) in &truth {
            assert_eq!(idx.get(*id).unwrap(), Some(*e), "node {id}");
        }
        for _ in 0..100_000 {
            let id = rng.gen_range(i64::MIN..i64::MAX);
            assert_eq!(idx.get(id).unwrap(), truth.get(&id).copied());
        }
        let streamed: Vec<i64> = idx.iter().unwrap().map(|r| r.unwrap().0).collect();
        assert!(streamed.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(streamed.len(), truth.len());
    }

    /// A sorted snapshot, then repeats in and out of order with higher, equal and lower
    /// versions: the highest version wins, and among equal ones the one staged last.
    #[test]
    fn sorted_stages_and_repeats_keep_the_latest() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("s.db.nodes");
        let mut tx = NodeIndexTx::with_run_entries(&prefix, 0, 1000).unwrap();
        let mut truth = HashMap::new();
        for id in 0..10_000i64 {
            let e = entry(id, 1, 2);
            tx.stage(id * 3, e).unwrap();
            truth.insert(id * 3, e);
        }
        for (k, id) in (0..30_000i64).step_by(7).enumerate() {
            let version = [1u32, 2, 3][k % 3];
            let e = entry(id, 2, version);
            tx.stage(id, e).unwrap();
            let t = truth.entry(id).or_insert(e);
            if version >= t.version {
                *t = e;
            }
            assert_eq!(tx.get(id).unwrap(), Some(*t), "staged {id}");
        }
        // In increasing order again, past everything staged: back to the sorted path.
        for id in 40_000..41_000i64 {
            tx.stage(id, entry(id, 3, 1)).unwrap();
            truth.insert(id, entry(id, 3, 1));
        }
        let g = commit(tx);
        let idx = NodeIndex::open_generation(&prefix, g).unwrap();
        assert_eq!(idx.len(), truth.len() as u64);
        for (id, e) in &truth {
            assert_eq!(idx.get(*id).unwrap(), Some(*e), "node {id}");
        }
    }

    /// Lookups in the orders the report makes them (a way's nodes one after another, backwards,
    /// with strides, ids between entries and past a block's last one), over dense blocks, evenly
    /// spread ones and uneven ones: each must find exactly what a scan of the entries finds.
    #[test]
    fn lookups_in_any_order_find_each_entry() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("s.db.nodes");
        let mut tx = NodeIndexTx::begin(&prefix, 0).unwrap();
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(11);
        let mut truth = std::collections::BTreeMap::new();
        // Dense ids, then every third id, then random gaps of up to a thousand.
        let mut ids: Vec<i64> = (1..3000).collect();
        ids.extend((3000..9000).step_by(3));
        let mut id = 9000;
        for _ in 0..3000 {
            id += rng.gen_range(1..1000);
            ids.push(id);
        }
        for (k, &id) in ids.iter().enumerate() {
            let k = i64::try_from(k).unwrap();
            let e = entry(k, -k, 1);
            tx.stage(id, e).unwrap();
            truth.insert(id, e);
        }
        let g = commit(tx);
        let idx = NodeIndex::open_generation(&prefix, g).unwrap();
        let top = id + 2000;
        let ascending: Vec<i64> = (-5..top).collect();
        let descending: Vec<i64> = (-5..top).rev().collect();
        let strided: Vec<i64> = (0..top).step_by(5).chain((1..top).step_by(257)).collect();
        let random: Vec<i64> = (0..20_000).map(|_| rng.gen_range(-5..top)).collect();
        for order in [ascending, descending, strided, random] {
            for id in order {
                assert_eq!(idx.get(id).unwrap(), truth.get(&id).copied(), "node {id}");
            }
        }
    }

    #[test]
    fn abandoned_transaction_leaves_committed_generation() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("s.db.nodes");
        let mut tx = NodeIndexTx::begin(&prefix, 0).unwrap();
        tx.stage(5, entry(1, 2, 1)).unwrap();
        let g = commit(tx);
        let mut tx = NodeIndexTx::with_run_entries(&prefix, g, 2).unwrap();
        for i in 0..10 {
            tx.stage(i, entry(3, 4, 9)).unwrap();
        }
        drop(tx);
        // Killed after renaming the next generation but before the database commit: the
        // leftover is ignored and removed by the next writer.
        let mut tx = NodeIndexTx::begin(&prefix, g).unwrap();
        tx.stage(6, entry(1, 1, 1)).unwrap();
        let stale = tx.prepare().unwrap().unwrap();
        assert!(generations::path(&prefix, stale.generation()).exists());
        let idx = NodeIndex::open_generation(&prefix, g).unwrap();
        assert_eq!(idx.get(5).unwrap(), Some(entry(1, 2, 1)));
        assert_eq!(idx.get(6).unwrap(), None);
        generations::remove_others(&prefix, g).unwrap();
        let left: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(
            left,
            vec![generations::path(&prefix, g)
                .file_name()
                .unwrap()
                .to_owned()]
        );
    }

    #[test]
    fn damaged_files_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let prefix = dir.path().join("s.db.nodes");
        let mut tx = NodeIndexTx::begin(&prefix, 0).unwrap();
        for i in 0..1000 {
            tx.stage(i * 7, entry(i, -i, 1)).unwrap();
        }
        let g = commit(tx);
        let path = generations::path(&prefix, g);
        let bytes = std::fs::read(&path).unwrap();
        std::fs::write(&path, &bytes[..bytes.len() - 5]).unwrap();
        assert!(matches!(
            NodeIndex::open(&path),
            Err(NodeIndexError::Damaged { .. })
        ));
        std::fs::write(&path, b"not an index").unwrap();
        assert!(matches!(
            NodeIndex::open(&path),
            Err(NodeIndexError::Damaged { .. })
        ));
        std::fs::remove_file(&path).unwrap();
        assert!(matches!(
            NodeIndex::open(&path),
            Err(NodeIndexError::Io { .. })
        ));
    }
}
