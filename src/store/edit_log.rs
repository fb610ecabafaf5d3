//! The edit log: every element version read from a diff, with the state it replaced, appended
//! to the database in blocks of a few thousand edits (one `edit_blocks` row each) instead of one
//! row per edit. An ingest only appends, so it does no B-tree work per edit; readers select the
//! blocks whose time span meets their window and decode them.
//!
//! A block's payload is a format byte (2) and then, per edit, in order:
//!
//! | field | encoding |
//! |---|---|
//! | flags | one byte: bits 0-1 element type code, bits 2-3 op code, bit 4 has a position, bit 5 has refs, bit 6 has an earlier state, bit 7 the mapper's name follows |
//! | element id, changeset, uid, timestamp | zigzag varints of the difference from the block's previous edit |
//! | version | zigzag varint |
//! | mapper's name | only when flag bit 7: varint length and UTF-8 bytes (once per mapper per block) |
//! | position | when flag bit 4: latitude and longitude in 1e-7 degrees, zigzag varints of the difference from the block's previous position |
//! | tags | varint length and the packed tags ([`super::pack_tags`]) |
//! | refs | when flag bit 5: varint length and the packed refs ([`super::pack_refs`]) |
//! | earlier state | when flag bit 6: a byte (bit 0 has a timestamp, bit 1 has a position), the version (zigzag), the timestamp as a zigzag difference from this edit's, the packed tags (length and bytes), the position (zigzag, absolute) |
//!
//! Blocks of format 1, written before, differ only in their refs: little-endian `i64`s. They
//! are read as they are and their refs repacked ([`super::repack_legacy_refs`]).
//!
//! Varints are LEB128 (7 bits per byte, low first); zigzag maps signed to unsigned (Source:
//! Protocol Buffers encoding guide, "Base 128 Varints" and "ZigZag encoding").
//!
//! The log keeps what the files said, repeats included: two overlapping diffs put the same
//! element version in two blocks. Readers count it once ([`dedup_sorted`]), keeping the copy
//! ingested first, as a unique key on type, id, version and timestamp would.

use std::collections::HashMap;

use crate::model::{ElementType, Op};

/// Edits per block before it is written.
pub const BLOCK_EDITS: usize = 8192;
/// Payload bytes per block before it is written (a block of large edits closes early).
pub const BLOCK_BYTES: usize = 4 << 20;

/// The format byte of blocks written now (refs packed as varint differences).
const FORMAT: u8 = 2;
/// The format byte of older blocks, whose refs are little-endian `i64`s.
const FORMAT_LEGACY_REFS: u8 = 1;

/// One edit as read back from the log.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StoredEdit {
    pub etype: ElementType,
    pub eid: i64,
    pub version: i64,
    pub op: Op,
    pub changeset: i64,
    pub uid: i64,
    /// The mapper's name (shared by all their edits read from one block).
    pub user: std::sync::Arc<str>,
    /// Unix seconds.
    pub ts: i64,
    /// Latitude and longitude in 1e-7 degrees, when the file gave them.
    pub pos: Option<(i32, i32)>,
    /// Packed tags ([`super::pack_tags`]); empty for deletions.
    pub tags: String,
    /// Packed node refs or relation members ([`super::pack_refs`]).
    pub refs: Option<Vec<u8>>,
    /// The state this version replaced, when one was stored.
    pub prev: Option<PrevState>,
}

/// The stored state an edit replaced.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PrevState {
    pub version: i64,
    /// Unknown for untagged nodes, which only the node-location index holds.
    pub ts: Option<i64>,
    pub tags: String,
    pub pos: Option<(i32, i32)>,
}

/// An edit to append, borrowing from the reader's element.
#[derive(Debug, Clone, Copy)]
pub struct EditRef<'a> {
    pub etype: ElementType,
    pub eid: i64,
    pub version: i64,
    pub op: Op,
    pub changeset: i64,
    pub uid: i64,
    pub user: &'a str,
    pub ts: i64,
    pub pos: Option<(i32, i32)>,
    pub tags: &'a str,
    pub refs: Option<&'a [u8]>,
    pub prev: Option<PrevRef<'a>>,
}

/// The replaced state of an [`EditRef`].
#[derive(Debug, Clone, Copy)]
pub struct PrevRef<'a> {
    pub version: i64,
    pub ts: Option<i64>,
    pub tags: &'a str,
    pub pos: Option<(i32, i32)>,
}

/// A finished block, ready to be written.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Block {
    pub min_ts: i64,
    pub max_ts: i64,
    pub edits: u32,
    pub data: Vec<u8>,
}

/// The running state both the encoder and the decoder keep (the previous edit's values).
#[derive(Debug, Default, Clone, Copy)]
struct Last {
    eid: i64,
    changeset: i64,
    uid: i64,
    ts: i64,
    lat: i32,
    lon: i32,
}

/// Collects edits into a block.
#[derive(Debug, Default)]
pub struct BlockBuilder {
    data: Vec<u8>,
    edits: u32,
    min_ts: i64,
    max_ts: i64,
    last: Last,
    /// Mappers whose name is already in this block.
    named: foldhash::HashSet<i64>,
}

pub(crate) fn put_varint(out: &mut Vec<u8>, mut v: u64) {
    while v >= 0x80 {
        out.push((v as u8) | 0x80);
        v >>= 7;
    }
    out.push(v as u8);
}

/// The varint at `*at` (Protocol Buffers' base-128 encoding, least significant group first),
/// moving `*at` past it; `None` when the data ends inside it or it runs past 64 bits.
#[inline]
pub(crate) fn get_varint(data: &[u8], at: &mut usize) -> Option<u64> {
    let mut v = 0u64;
    for shift in (0..64).step_by(7) {
        let b = *data.get(*at)?;
        *at += 1;
        v |= u64::from(b & 0x7F) << shift;
        if b < 0x80 {
            return Some(v);
        }
    }
    None
}

pub(crate) const fn zigzag(v: i64) -> u64 {
    ((v << 1) ^ (v >> 63)) as u64
}

pub(crate) const fn unzigzag(v: u64) -> i64 {
    ((v >> 1) as i64) ^ -((v & 1) as i64)
}

pub(crate) fn put_signed(out: &mut Vec<u8>, v: i64) {
    put_varint(out, zigzag(v));
}

pub(crate) fn put_bytes(out: &mut Vec<u8>, b: &[u8]) {
    put_varint(out, b.len() as u64);
    out.extend_from_slice(b);
}

impl BlockBuilder {
    /// Appends one edit.
    pub fn push(&mut self, e: &EditRef<'_>) {
        if self.edits == 0 {
            self.data.clear();
            self.data.push(FORMAT);
            self.last = Last::default();
            self.named.clear();
            self.min_ts = e.ts;
            self.max_ts = e.ts;
        }
        self.min_ts = self.min_ts.min(e.ts);
        self.max_ts = self.max_ts.max(e.ts);
        let new_user = self.named.insert(e.uid);
        let flags = (e.etype.code() as u8 & 3)
            | ((e.op.code() as u8 & 3) << 2)
            | (u8::from(e.pos.is_some()) << 4)
            | (u8::from(e.refs.is_some()) << 5)
            | (u8::from(e.prev.is_some()) << 6)
            | (u8::from(new_user) << 7);
        let d = &mut self.data;
        let last = &mut self.last;
        d.push(flags);
        put_signed(d, e.eid.wrapping_sub(last.eid));
        put_signed(d, e.changeset.wrapping_sub(last.changeset));
        put_signed(d, e.uid.wrapping_sub(last.uid));
        put_signed(d, e.ts.wrapping_sub(last.ts));
        put_signed(d, e.version);
        (last.eid, last.changeset, last.uid, last.ts) = (e.eid, e.changeset, e.uid, e.ts);
        if new_user {
            put_bytes(d, e.user.as_bytes());
        }
        if let Some((lat, lon)) = e.pos {
            put_signed(d, i64::from(lat) - i64::from(last.lat));
            put_signed(d, i64::from(lon) - i64::from(last.lon));
            (last.lat, last.lon) = (lat, lon);
        }
        put_bytes(d, e.tags.as_bytes());
        if let Some(r) = e.refs {
            put_bytes(d, r);
        }
        if let Some(p) = e.prev {
            d.push(u8::from(p.ts.is_some()) | (u8::from(p.pos.is_some()) << 1));
            put_signed(d, p.version);
            if let Some(t) = p.ts {
                put_signed(d, e.ts.wrapping_sub(t));
            }
            put_bytes(d, p.tags.as_bytes());
            if let Some((lat, lon)) = p.pos {
                put_signed(d, i64::from(lat));
                put_signed(d, i64::from(lon));
            }
        }
        self.edits += 1;
    }

    /// Whether the block has reached its size.
    #[must_use]
    pub fn is_full(&self) -> bool {
        self.edits as usize >= BLOCK_EDITS || self.data.len() >= BLOCK_BYTES
    }

    /// The finished block, if it holds any edit; the builder starts a new one.
    pub fn take(&mut self) -> Option<Block> {
        if self.edits == 0 {
            return None;
        }
        // The next block starts with as much room: growing it by doubling copied it.
        let room = Vec::with_capacity(self.data.capacity());
        let block = Block {
            min_ts: self.min_ts,
            max_ts: self.max_ts,
            edits: self.edits,
            data: std::mem::replace(&mut self.data, room),
        };
        self.edits = 0;
        Some(block)
    }
}

/// A block's payload does not decode.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("damaged at byte {offset} of its payload: {message}")]
pub struct DecodeError {
    pub offset: usize,
    pub message: &'static str,
}

struct Cursor<'a> {
    data: &'a [u8],
    at: usize,
}

impl<'a> Cursor<'a> {
    fn fail(&self, message: &'static str) -> DecodeError {
        DecodeError {
            offset: self.at,
            message,
        }
    }

    fn byte(&mut self) -> Result<u8, DecodeError> {
        let b = *self
            .data
            .get(self.at)
            .ok_or_else(|| self.fail("ends inside an edit"))?;
        self.at += 1;
        Ok(b)
    }

    fn varint(&mut self) -> Result<u64, DecodeError> {
        get_varint(self.data, &mut self.at).ok_or_else(|| {
            if self.at >= self.data.len() {
                self.fail("ends inside an edit")
            } else {
                self.fail("varint longer than 64 bits")
            }
        })
    }

    fn signed(&mut self) -> Result<i64, DecodeError> {
        Ok(unzigzag(self.varint()?))
    }

    fn coord(&mut self) -> Result<i32, DecodeError> {
        let v = self.signed()?;
        i32::try_from(v).map_err(|_| self.fail("coordinate out of range"))
    }

    fn bytes(&mut self) -> Result<&'a [u8], DecodeError> {
        let n = usize::try_from(self.varint()?).map_err(|_| self.fail("length out of range"))?;
        let end = self
            .at
            .checked_add(n)
            .filter(|&e| e <= self.data.len())
            .ok_or_else(|| self.fail("length past the end"))?;
        let b = &self.data[self.at..end];
        self.at = end;
        Ok(b)
    }
}

/// One edit as it lies in a block: numbers decoded, text and refs still borrowed.
struct RawEdit<'a> {
    etype: ElementType,
    eid: i64,
    version: i64,
    op: Op,
    changeset: i64,
    uid: i64,
    ts: i64,
    pos: Option<(i32, i32)>,
    tags: &'a [u8],
    refs: Option<&'a [u8]>,
    /// The refs are little-endian `i64`s (a block of format 1).
    legacy_refs: bool,
    prev: Option<RawPrev<'a>>,
    /// Byte offset just after the edit (for errors).
    end: usize,
}

/// The replaced state of a [`RawEdit`].
struct RawPrev<'a> {
    version: i64,
    ts: Option<i64>,
    tags: &'a [u8],
    pos: Option<(i32, i32)>,
}

/// Walks a block's payload edit by edit, calling `visit` with each edit and the mappers' names
/// met so far in the block.
fn walk<'a>(
    data: &'a [u8],
    mut visit: impl FnMut(&RawEdit<'a>, &HashMap<i64, &'a [u8]>) -> Result<(), DecodeError>,
) -> Result<(), DecodeError> {
    let mut c = Cursor { data, at: 0 };
    let legacy_refs = match c.byte()? {
        FORMAT => false,
        FORMAT_LEGACY_REFS => true,
        _ => return Err(c.fail("unknown block format")),
    };
    let mut last = Last::default();
    let mut users: HashMap<i64, &'a [u8]> = HashMap::new();
    while c.at < data.len() {
        let flags = c.byte()?;
        let etype = ElementType::from_code(i64::from(flags & 3))
            .ok_or_else(|| c.fail("unknown element type"))?;
        let op = Op::from_code(i64::from((flags >> 2) & 3)).ok_or_else(|| c.fail("unknown op"))?;
        last.eid = last.eid.wrapping_add(c.signed()?);
        last.changeset = last.changeset.wrapping_add(c.signed()?);
        last.uid = last.uid.wrapping_add(c.signed()?);
        last.ts = last.ts.wrapping_add(c.signed()?);
        let version = c.signed()?;
        if flags & 0x80 != 0 {
            let name = c.bytes()?;
            users.insert(last.uid, name);
        }
        let pos = if flags & 0x10 != 0 {
            let lat = i64::from(last.lat) + c.signed()?;
            let lon = i64::from(last.lon) + c.signed()?;
            last.lat = i32::try_from(lat).map_err(|_| c.fail("coordinate out of range"))?;
            last.lon = i32::try_from(lon).map_err(|_| c.fail("coordinate out of range"))?;
            Some((last.lat, last.lon))
        } else {
            None
        };
        let tags = c.bytes()?;
        let refs = if flags & 0x20 != 0 {
            Some(c.bytes()?)
        } else {
            None
        };
        let prev = if flags & 0x40 != 0 {
            let pflags = c.byte()?;
            let version = c.signed()?;
            let ts = if pflags & 1 != 0 {
                Some(last.ts.wrapping_sub(c.signed()?))
            } else {
                None
            };
            let tags = c.bytes()?;
            let pos = if pflags & 2 != 0 {
                Some((c.coord()?, c.coord()?))
            } else {
                None
            };
            Some(RawPrev {
                version,
                ts,
                tags,
                pos,
            })
        } else {
            None
        };
        let raw = RawEdit {
            etype,
            eid: last.eid,
            version,
            op,
            changeset: last.changeset,
            uid: last.uid,
            ts: last.ts,
            pos,
            tags,
            refs,
            legacy_refs,
            prev,
            end: c.at,
        };
        visit(&raw, &users)?;
    }
    Ok(())
}

/// Decodes a block's payload, calling `keep` on each edit's timestamp first: edits it refuses
/// are skipped without building their strings.
///
/// # Errors
/// When the payload is damaged.
pub fn decode(
    data: &[u8],
    mut keep: impl FnMut(i64) -> bool,
    out: &mut Vec<StoredEdit>,
) -> Result<(), DecodeError> {
    let mut names: HashMap<i64, std::sync::Arc<str>> = HashMap::new();
    walk(data, |e, users| {
        if !keep(e.ts) {
            return Ok(());
        }
        let fail = |message| DecodeError {
            offset: e.end,
            message,
        };
        let text = |b: &[u8]| {
            std::str::from_utf8(b)
                .map(str::to_owned)
                .map_err(|_| fail("text is not UTF-8"))
        };
        out.push(StoredEdit {
            etype: e.etype,
            eid: e.eid,
            version: e.version,
            op: e.op,
            changeset: e.changeset,
            uid: e.uid,
            user: match names.get(&e.uid) {
                Some(n) => n.clone(),
                None => {
                    let raw = users
                        .get(&e.uid)
                        .ok_or_else(|| fail("mapper without a name"))?;
                    let n: std::sync::Arc<str> = text(raw)?.into();
                    names.insert(e.uid, n.clone());
                    n
                }
            },
            ts: e.ts,
            pos: e.pos,
            tags: text(e.tags)?,
            refs: e.refs.map(|r| {
                if e.legacy_refs {
                    super::repack_legacy_refs(r)
                } else {
                    r.to_vec()
                }
            }),
            prev: match &e.prev {
                Some(p) => Some(PrevState {
                    version: p.version,
                    ts: p.ts,
                    tags: text(p.tags)?,
                    pos: p.pos,
                }),
                None => None,
            },
        });
        Ok(())
    })
}

/// The changeset, mapper and time of every edit of a block's payload, without building any
/// text: for passes that only need to know who edited when.
///
/// # Errors
/// When the payload is damaged.
pub fn scan(data: &[u8], mut f: impl FnMut(i64, i64, i64)) -> Result<(), DecodeError> {
    walk(data, |e, _| {
        f(e.changeset, e.uid, e.ts);
        Ok(())
    })
}

/// Sorts edits read in log order by time, then type, id and version, keeping the first copy
/// read of each element version (the one ingested first). A copy is the same type, id, version
/// and timestamp: a version's timestamp is part of it, and readers that take the log a week at
/// a time must find both copies in the same week. Sorts small keys, not the edits: moving whole
/// edits around in a sort was a seventh of a report's time.
#[must_use]
pub fn dedup_sorted(mut edits: Vec<StoredEdit>) -> Vec<StoredEdit> {
    let mut order: Vec<(i64, i64, i64, i64, usize)> = edits
        .iter()
        .enumerate()
        .map(|(i, e)| (e.ts, e.etype.code(), e.eid, e.version, i))
        .collect();
    // The position breaks ties, so the first copy read comes first and survives the dedup.
    order.sort_unstable();
    order.dedup_by(|b, a| (a.0, a.1, a.2, a.3) == (b.0, b.1, b.2, b.3));
    let kept = order.len();
    // Where each edit goes: the kept ones in order, then the repeats (dropped).
    let mut dest = vec![usize::MAX; edits.len()];
    for (j, o) in order.iter().enumerate() {
        dest[o.4] = j;
    }
    let mut next = kept;
    for d in &mut dest {
        if *d == usize::MAX {
            *d = next;
            next += 1;
        }
    }
    // Moves each edit once, following the permutation's cycles, without a second vector.
    for i in 0..edits.len() {
        while dest[i] != i {
            let j = dest[i];
            edits.swap(i, j);
            dest.swap(i, j);
        }
    }
    edits.truncate(kept);
    edits
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample(i: i64) -> StoredEdit {
        StoredEdit {
            etype: [ElementType::Node, ElementType::Way, ElementType::Relation][(i % 3) as usize],
            eid: 1_000_000_000 - i * 7919,
            version: 1 + i % 5,
            op: [Op::Create, Op::Modify, Op::Delete][(i % 3) as usize],
            changeset: 90_000_000 + i / 10,
            uid: i % 4 - 1,
            user: format!("mapper {}", i % 4).into(),
            ts: 1_769_990_400 + i * 13 - (i % 7) * 100,
            pos: (i % 4 != 0).then_some((-900_000_000 + (i as i32) * 3, 1_799_999_999 - i as i32)),
            tags: if i % 2 == 0 {
                String::new()
            } else {
                super::super::pack_tags(&[("name".into(), format!("Café {i}"))])
            },
            refs: (i % 3 == 1).then(|| super::super::pack_refs([i, -i, i64::MAX])),
            prev: (i % 5 != 0).then(|| PrevState {
                version: i % 5,
                ts: (i % 2 == 0).then_some(1_700_000_000 + i),
                tags: "a\u{1F}b\u{1E}".into(),
                pos: (i % 3 == 0).then_some((900_000_000, -1_800_000_000)),
            }),
        }
    }

    fn push(b: &mut BlockBuilder, e: &StoredEdit) {
        b.push(&EditRef {
            etype: e.etype,
            eid: e.eid,
            version: e.version,
            op: e.op,
            changeset: e.changeset,
            uid: e.uid,
            user: &e.user,
            ts: e.ts,
            pos: e.pos,
            tags: &e.tags,
            refs: e.refs.as_deref(),
            prev: e.prev.as_ref().map(|p| PrevRef {
                version: p.version,
                ts: p.ts,
                tags: &p.tags,
                pos: p.pos,
            }),
        });
    }

    /// A block of format 1 (written before: refs as little-endian `i64`s) decodes with its refs
    /// packed as now; nothing else in it differs.
    #[test]
    fn a_format_1_block_decodes_with_its_refs_repacked() {
        let edits: Vec<StoredEdit> = (0..60).map(sample).collect();
        let numbers = |i: i64| [i, -i, i64::MAX, 5_000_000_000 + i];
        let mut b = BlockBuilder::default();
        for (i, e) in (0..).zip(&edits) {
            let mut old = e.clone();
            old.refs = old
                .refs
                .map(|_| numbers(i).iter().flat_map(|n| n.to_le_bytes()).collect());
            push(&mut b, &old);
        }
        let mut block = b.take().unwrap();
        assert_eq!(block.data[0], FORMAT);
        block.data[0] = FORMAT_LEGACY_REFS;
        let mut back = Vec::new();
        decode(&block.data, |_| true, &mut back).unwrap();
        let want: Vec<StoredEdit> = (0..)
            .zip(&edits)
            .map(|(i, e)| {
                let mut e = e.clone();
                e.refs = e.refs.map(|_| super::super::pack_refs(numbers(i)));
                e
            })
            .collect();
        assert_eq!(back, want);
        block.data[0] = 3;
        assert!(decode(&block.data, |_| true, &mut back).is_err());
    }

    #[test]
    fn blocks_round_trip() {
        let edits: Vec<StoredEdit> = (0..500).map(sample).collect();
        let mut b = BlockBuilder::default();
        for e in &edits {
            push(&mut b, e);
        }
        let block = b.take().unwrap();
        assert_eq!(block.edits, 500);
        assert_eq!(block.min_ts, edits.iter().map(|e| e.ts).min().unwrap());
        assert_eq!(block.max_ts, edits.iter().map(|e| e.ts).max().unwrap());
        let mut back = Vec::new();
        decode(&block.data, |_| true, &mut back).unwrap();
        assert_eq!(back, edits);
        // The builder starts afresh: a second block decodes on its own.
        push(&mut b, &edits[7]);
        let second = b.take().unwrap();
        let mut one = Vec::new();
        decode(&second.data, |_| true, &mut one).unwrap();
        assert_eq!(one, vec![edits[7].clone()]);
        assert!(b.take().is_none());
    }

    #[test]
    fn filter_skips_without_losing_the_thread() {
        let edits: Vec<StoredEdit> = (0..200).map(sample).collect();
        let mut b = BlockBuilder::default();
        for e in &edits {
            push(&mut b, e);
        }
        let block = b.take().unwrap();
        let mut back = Vec::new();
        decode(&block.data, |t| t % 2 == 0, &mut back).unwrap();
        let want: Vec<_> = edits.into_iter().filter(|e| e.ts % 2 == 0).collect();
        assert_eq!(back, want);
    }

    #[test]
    fn damaged_blocks_are_errors_not_panics() {
        let mut b = BlockBuilder::default();
        for e in (0..50).map(sample) {
            push(&mut b, &e);
        }
        let block = b.take().unwrap();
        for cut in 0..block.data.len() {
            let mut out = Vec::new();
            // Every prefix either decodes (at an edit boundary) or fails; none panics.
            let _ = decode(&block.data[..cut], |_| true, &mut out);
        }
        let mut out = Vec::new();
        assert!(decode(&[9, 0], |_| true, &mut out).is_err());
        assert!(decode(&block.data[..block.data.len() - 1], |_| true, &mut out).is_err());
    }

    #[test]
    fn dedup_matches_a_plain_sort_and_filter() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        for n in [0usize, 1, 2, 5, 50, 500] {
            // Few distinct keys, so repeats (with other payloads) are common.
            let edits: Vec<StoredEdit> = (0..n)
                .map(|i| {
                    let mut e = sample(i as i64);
                    e.ts = rng.gen_range(0..8);
                    e.eid = rng.gen_range(0..4);
                    e.version = rng.gen_range(1..3);
                    e
                })
                .collect();
            let mut want: Vec<(usize, StoredEdit)> = edits.iter().cloned().enumerate().collect();
            want.sort_by_key(|(i, e)| (e.ts, e.etype.code(), e.eid, e.version, *i));
            let mut seen = std::collections::HashSet::new();
            want.retain(|(_, e)| seen.insert((e.ts, e.etype.code(), e.eid, e.version)));
            let want: Vec<StoredEdit> = want.into_iter().map(|(_, e)| e).collect();
            assert_eq!(dedup_sorted(edits), want, "n = {n}");
        }
    }

    #[test]
    fn repeats_count_once_and_the_first_copy_wins() {
        let mut a = sample(3);
        let mut b = a.clone();
        b.prev = None;
        let c = sample(4);
        a.ts += 10;
        b.ts += 10;
        let v = dedup_sorted(vec![c.clone(), a.clone(), b, c.clone()]);
        let mut want = vec![a.clone(), c];
        want.sort_by_key(|e| e.ts);
        assert_eq!(v, want);
        // A different timestamp makes a different version record: both are kept.
        let mut d = a.clone();
        d.ts += 1;
        assert_eq!(dedup_sorted(vec![d.clone(), a.clone()]), vec![a, d]);
    }

    #[test]
    fn zigzag_matches_the_protocol_buffers_table() {
        // Source: Protocol Buffers encoding guide, ZigZag table: 0→0, -1→1, 1→2, -2→3,
        // 2147483647→4294967294, -2147483648→4294967295.
        for (s, u) in [
            (0i64, 0u64),
            (-1, 1),
            (1, 2),
            (-2, 3),
            (2_147_483_647, 4_294_967_294),
            (-2_147_483_648, 4_294_967_295),
        ] {
            assert_eq!(zigzag(s), u);
            assert_eq!(unzigzag(u), s);
        }
        // Source: same guide, "150" is encoded as 96 01.
        let mut out = Vec::new();
        put_varint(&mut out, 150);
        assert_eq!(out, vec![0x96, 0x01]);
    }
}
