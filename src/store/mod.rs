//! The state between weekly runs: an embedded SQLite database.
//!
//! Tables: `meta` (schema version, node-index generation, replication sequences), `inputs`
//! (every ingested file by content hash, so a file ingested twice counts once), `changesets`
//! (metadata), `edit_blocks` (the edit log, [`edit_log`]: every element version seen in a diff,
//! with the state it replaced, appended in blocks), `changeset_work` (per changeset: its mapper,
//! first edit time, edits and deletions in the diffs, for the mappers' histories), `grid_first`
//! (per square of about 1 km, the time the first node known there appeared), `skipped` (odd
//! elements skipped while reading, by reason).
//!
//! Two compact files sit next to the database, each with its generation recorded in `meta` by
//! the same transaction as the ingest that wrote it: the node-location index
//! ([`crate::node_index`], `nodes_generation`: every node's position and version) and the
//! element state ([`crate::element_state`], `elements_generation`: the latest known version of
//! every way, relation and tagged node, with tags, node refs and members).
//!
//! Writes happen only inside an [`IngestTx`], one SQLite transaction per ingest command: a failed
//! ingest rolls back and leaves the database as it was. Older databases are converted when
//! opened, each step in one transaction: schema 1 (one `edits` row per edit) to 2 (the edit
//! log), and schema 2 (the element state in an `elements` table) to 3.

pub mod edit_log;
pub mod log_file;
pub mod window;

use std::cell::RefCell;
use std::path::{Path, PathBuf};

use rusqlite::{params, Connection, OptionalExtension, Transaction};

use crate::element_state::{self, ElementState, ElementStateError, ElementStateTx, RowRef};
use crate::model::{ElementType, Op};
use crate::node_index::{self, NodeEntry, NodeIndex, NodeIndexError, NodeIndexTx};

/// Current database schema version.
pub const SCHEMA_VERSION: i64 = 4;

/// Errors of the state database.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("{path}: database error: {source}")]
    Sqlite {
        path: PathBuf,
        source: rusqlite::Error,
    },
    #[error("{path}: database schema version {found} is not supported (this build reads {SCHEMA_VERSION})")]
    Schema { path: PathBuf, found: i64 },
    #[error("{path}: the database is busy: another hexvigil run is using it")]
    Busy { path: PathBuf },
    #[error("{path}: edit block {block} at byte {at}: {source}")]
    Damaged {
        path: PathBuf,
        block: i64,
        at: u64,
        source: edit_log::DecodeError,
    },
    #[error(transparent)]
    EditLog(#[from] log_file::LogFileError),
    #[error(transparent)]
    NodeIndex(#[from] NodeIndexError),
    #[error(transparent)]
    ElementState(#[from] ElementStateError),
    #[error(transparent)]
    Generation(#[from] crate::generations::GenerationError),
}

/// The `meta` key holding the committed node-index generation.
const NODES_GENERATION: &str = "nodes_generation";
/// The `meta` key holding the committed element-state generation.
const ELEMENTS_GENERATION: &str = "elements_generation";

/// Tags packed into one string: `key \x1F value \x1E ...`. Both separators are control
/// characters that XML 1.0 does not allow in attribute values, so no tag can contain them.
#[must_use]
pub fn pack_tags(tags: &[(String, String)]) -> String {
    let mut s = String::new();
    pack_tags_into(tags, &mut s);
    s
}

/// [`pack_tags`] into `out`, replacing what it held (its memory is reused).
pub fn pack_tags_into(tags: &[(String, String)], out: &mut String) {
    out.clear();
    out.reserve(tags.iter().map(|(k, v)| k.len() + v.len() + 2).sum());
    for (k, v) in tags {
        out.push_str(k);
        out.push('\x1F');
        out.push_str(v);
        out.push('\x1E');
    }
}

/// Inverse of [`pack_tags`], borrowing from the packed string.
pub fn unpack_tags(s: &str) -> impl Iterator<Item = (&str, &str)> {
    s.split_terminator('\x1E')
        .filter_map(|kv| kv.split_once('\x1F'))
}

/// Looks one tag up in a packed tag string.
#[must_use]
pub fn packed_tag<'a>(s: &'a str, key: &str) -> Option<&'a str> {
    unpack_tags(s).find(|(k, _)| *k == key).map(|(_, v)| v)
}

/// Node refs (or relation members, as `id * 4 + type code`), packed: the first as a zigzag
/// varint, each next one as the zigzag varint of its difference from the one before. A way's
/// nodes are mostly numbered close together, so a ref takes one or two bytes instead of eight
/// (BENCHMARKS.md, "Refs as varint differences"). Edit-log blocks of format 1 and element-state
/// files of version 1 hold refs as little-endian `i64`s instead; their readers repack them
/// ([`repack_legacy_refs`]).
#[must_use]
pub fn pack_refs(refs: impl IntoIterator<Item = i64>) -> Vec<u8> {
    let mut out = Vec::new();
    pack_refs_into(refs, &mut out);
    out
}

/// [`pack_refs`] into `out`, replacing what it held (its memory is reused).
pub fn pack_refs_into(refs: impl IntoIterator<Item = i64>, out: &mut Vec<u8>) {
    out.clear();
    let refs = refs.into_iter();
    out.reserve(refs.size_hint().0 * 2);
    let mut last = 0i64;
    for r in refs {
        edit_log::put_signed(out, r.wrapping_sub(last));
        last = r;
    }
}

/// Inverse of [`pack_refs`]; it stops where the bytes stop making a varint.
pub fn unpack_refs(b: &[u8]) -> impl Iterator<Item = i64> + '_ {
    let mut at = 0;
    let mut last = 0i64;
    std::iter::from_fn(move || {
        let d = edit_log::get_varint(b, &mut at)?;
        last = last.wrapping_add(edit_log::unzigzag(d));
        Some(last)
    })
}

/// Refs stored the older way, as little-endian `i64`s (edit-log blocks of format 1,
/// element-state files of version 1, the refs columns of schemas 1 and 2), packed as
/// [`pack_refs`] does.
pub(crate) fn repack_legacy_refs(raw: &[u8]) -> Vec<u8> {
    pack_refs(raw.chunks_exact(8).map(|c| {
        let mut a = [0u8; 8];
        a.copy_from_slice(c);
        i64::from_le_bytes(a)
    }))
}

/// Encodes a relation member for [`pack_refs`].
#[must_use]
pub const fn member_code(t: ElementType, id: i64) -> i64 {
    id.wrapping_mul(4).wrapping_add(t.code())
}

/// Decodes a relation member from [`member_code`].
#[must_use]
pub fn member_decode(code: i64) -> Option<(ElementType, i64)> {
    Some((
        ElementType::from_code(code.rem_euclid(4))?,
        code.div_euclid(4),
    ))
}

/// An open state database.
pub struct Store {
    conn: Connection,
    path: PathBuf,
}

const SCHEMA: &str = "
CREATE TABLE IF NOT EXISTS meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS inputs(
    hash TEXT PRIMARY KEY, path TEXT NOT NULL, kind TEXT NOT NULL,
    elements INTEGER NOT NULL, changesets INTEGER NOT NULL, ingested_at INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS changesets(
    id INTEGER PRIMARY KEY, uid INTEGER NOT NULL, user TEXT NOT NULL,
    created_at INTEGER NOT NULL, closed_at INTEGER,
    min_lat REAL, min_lon REAL, max_lat REAL, max_lon REAL,
    num_changes INTEGER NOT NULL, comment TEXT NOT NULL, editor TEXT NOT NULL, source TEXT NOT NULL);
CREATE INDEX IF NOT EXISTS changesets_uid ON changesets(uid, created_at);
CREATE TABLE IF NOT EXISTS edit_blocks(
    id INTEGER PRIMARY KEY, min_ts INTEGER NOT NULL, max_ts INTEGER NOT NULL,
    edits INTEGER NOT NULL, file_offset INTEGER NOT NULL, file_len INTEGER NOT NULL,
    crc INTEGER NOT NULL);
CREATE INDEX IF NOT EXISTS edit_blocks_ts ON edit_blocks(max_ts, min_ts);
CREATE TABLE IF NOT EXISTS changeset_work(
    changeset INTEGER PRIMARY KEY, uid INTEGER NOT NULL, first_ts INTEGER NOT NULL,
    edits INTEGER NOT NULL, deletes INTEGER NOT NULL);
-- Covering: a mapper's work is read from the index alone, not from one table row per
-- changeset (the report's mapper histories, BENCHMARKS.md, Lookups at scale). It replaces the
-- index of (uid, first_ts) that databases made before it carry.
CREATE INDEX IF NOT EXISTS changeset_work_by_uid ON changeset_work(uid, first_ts, changeset, edits, deletes);
DROP INDEX IF EXISTS changeset_work_uid;
CREATE TABLE IF NOT EXISTS grid_first(square INTEGER PRIMARY KEY, first_ts INTEGER NOT NULL);
CREATE TABLE IF NOT EXISTS skipped(reason TEXT PRIMARY KEY, count INTEGER NOT NULL);
";

/// [`StoreError::Busy`] when another connection holds the lock, else the SQLite error.
fn busy_or_sqlite(path: &Path, source: rusqlite::Error) -> StoreError {
    if let rusqlite::Error::SqliteFailure(e, _) = &source {
        if matches!(
            e.code,
            rusqlite::ErrorCode::DatabaseBusy | rusqlite::ErrorCode::DatabaseLocked
        ) {
            return StoreError::Busy {
                path: path.to_owned(),
            };
        }
    }
    StoreError::Sqlite {
        path: path.to_owned(),
        source,
    }
}

impl Store {
    /// Opens (creating if needed) the database at `path` and checks its schema version.
    ///
    /// # Errors
    /// When SQLite cannot open or create the file, or its schema version is unknown.
    pub fn open(path: &Path) -> Result<Self, StoreError> {
        // Setting the journal mode needs a lock too: a run holding the database makes it busy.
        let err = |source| busy_or_sqlite(path, source);
        let conn = Connection::open(path).map_err(err)?;
        // WAL keeps readers working during an ingest; a short busy timeout turns a second
        // writer into a clear "busy" error instead of a long wait.
        conn.pragma_update(None, "journal_mode", "WAL")
            .map_err(err)?;
        // FULL: a commit is on disk when it returns. The ingest removes the previous node-index
        // generation right after its commit, which must then survive a power cut too.
        conn.pragma_update(None, "synchronous", "FULL")
            .map_err(err)?;
        conn.pragma_update(None, "foreign_keys", "OFF")
            .map_err(err)?;
        conn.pragma_update(None, "cache_size", -65_536)
            .map_err(err)?;
        let store = Self {
            conn,
            path: path.to_owned(),
        };
        store
            .conn
            .execute_batch(SCHEMA)
            .map_err(|e| store.map_err(e))?;
        let found: Option<String> = store
            .conn
            .query_row("SELECT value FROM meta WHERE key='schema'", [], |r| {
                r.get(0)
            })
            .optional()
            .map_err(|e| store.map_err(e))?;
        let mut from = SCHEMA_VERSION;
        match found.and_then(|v| v.parse::<i64>().ok()) {
            None => {
                store
                    .conn
                    .execute(
                        "INSERT OR REPLACE INTO meta(key, value) VALUES('schema', ?1)",
                        [SCHEMA_VERSION.to_string()],
                    )
                    .map_err(|e| store.map_err(e))?;
            }
            Some(v @ (1..=SCHEMA_VERSION)) => from = v,
            Some(found) => {
                return Err(StoreError::Schema {
                    path: path.to_owned(),
                    found,
                })
            }
        }
        store.ensure_node_index()?;
        if from == 1 {
            store.migrate_from_1()?;
        }
        if from <= 2 {
            store.migrate_from_2()?;
        }
        if from <= 3 {
            store.migrate_from_3()?;
        }
        // A database copied without its edit-log file is refused now rather than at its
        // first report.
        let end = log_end(&store.conn).map_err(|e| store.map_err(e))?;
        log_file::check(&store.edit_log_path(), end)?;
        Ok(store)
    }

    /// Whether the database has a table of this name (tables of older schemas).
    fn has_table(conn: &Connection, name: &str) -> Result<bool, rusqlite::Error> {
        conn.query_row(
            "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?1",
            [name],
            |_| Ok(()),
        )
        .optional()
        .map(|o| o.is_some())
    }

    /// Converts a schema-2 database in one transaction: the `elements` table's rows are written
    /// to generation 1 of the element state, which the same transaction records before dropping
    /// the table.
    fn migrate_from_2(&self) -> Result<(), StoreError> {
        let err = |e| self.map_err(e);
        let tx = Transaction::new_unchecked(&self.conn, rusqlite::TransactionBehavior::Immediate)
            .map_err(err)?;
        if !Self::has_table(&tx, "elements").map_err(err)? {
            tx.execute("UPDATE meta SET value = '3' WHERE key = 'schema'", [])
                .map_err(err)?;
            return tx.commit().map_err(err);
        }
        let prefix = self.element_state_prefix();
        crate::generations::remove_others(&prefix, 0)?;
        let mut state = ElementStateTx::begin(&prefix, 0)?;
        {
            let mut st = tx
                .prepare(
                    "SELECT etype, eid, version, ts, visible, lat_e7, lon_e7, tags, refs
                     FROM elements ORDER BY etype, eid",
                )
                .map_err(err)?;
            let mut rows = st.query([]).map_err(err)?;
            while let Some(r) = rows.next().map_err(err)? {
                let Some(t) = ElementType::from_code(r.get(0).map_err(err)?) else {
                    continue;
                };
                let lat: Option<i32> = r.get(5).map_err(err)?;
                let lon: Option<i32> = r.get(6).map_err(err)?;
                let tags: String = r.get(7).map_err(err)?;
                let raw: Option<Vec<u8>> = r.get(8).map_err(err)?;
                let refs = raw.as_deref().map(repack_legacy_refs);
                let row = RowRef {
                    version: r.get(2).map_err(err)?,
                    ts: r.get(3).map_err(err)?,
                    visible: r.get(4).map_err(err)?,
                    pos: lat.zip(lon),
                    tags: &tags,
                    refs: refs.as_deref(),
                };
                state.put(true, t, r.get(1).map_err(err)?, &row)?;
            }
        }
        let prepared = state.prepare()?;
        if let Some(p) = &prepared {
            tx.execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES(?1, ?2)",
                params![ELEMENTS_GENERATION, p.generation().to_string()],
            )
            .map_err(err)?;
        }
        tx.execute_batch(
            "DROP TABLE elements;
             UPDATE meta SET value = '3' WHERE key = 'schema';",
        )
        .map_err(err)?;
        tx.commit().map_err(err)?;
        if let Some(p) = prepared {
            p.committed();
        }
        Ok(())
    }

    /// Converts a schema-3 database in one transaction: the edit log's block payloads move from
    /// the `edit_blocks` table to the edit-log file ([`log_file`]), which is synced before the
    /// commit; the table keeps each block's span and place in the file. The space the payloads
    /// took in the database is given back afterwards (`VACUUM`, when no other run is reading).
    fn migrate_from_3(&self) -> Result<(), StoreError> {
        let err = |e| self.map_err(e);
        let tx = Transaction::new_unchecked(&self.conn, rusqlite::TransactionBehavior::Immediate)
            .map_err(err)?;
        let old: bool = tx
            .query_row(
                "SELECT EXISTS(SELECT 1 FROM pragma_table_info('edit_blocks') WHERE name = 'data')",
                [],
                |r| r.get(0),
            )
            .map_err(err)?;
        if old {
            // Nothing in the file is committed yet: whatever an interrupted conversion left goes.
            let mut log = log_file::LogAppender::open(&self.edit_log_path(), 0)?;
            tx.execute_batch(
                "ALTER TABLE edit_blocks RENAME TO edit_blocks_3;
                 DROP INDEX edit_blocks_ts;",
            )
            .map_err(err)?;
            tx.execute_batch(SCHEMA).map_err(err)?;
            {
                let mut st = tx
                    .prepare(
                        "SELECT id, min_ts, max_ts, edits, data FROM edit_blocks_3 ORDER BY id",
                    )
                    .map_err(err)?;
                let mut rows = st.query([]).map_err(err)?;
                let mut ins = tx
                    .prepare(
                        "INSERT INTO edit_blocks(id, min_ts, max_ts, edits, file_offset, file_len, crc)
                         VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7)",
                    )
                    .map_err(err)?;
                while let Some(r) = rows.next().map_err(err)? {
                    let data = r.get_ref(4).map_err(err)?;
                    let data = data.as_blob().map_err(|e| err(e.into()))?;
                    let (offset, crc) = log.append(data)?;
                    ins.execute(params![
                        r.get::<_, i64>(0).map_err(err)?,
                        r.get::<_, i64>(1).map_err(err)?,
                        r.get::<_, i64>(2).map_err(err)?,
                        r.get::<_, i64>(3).map_err(err)?,
                        offset as i64,
                        data.len() as i64,
                        i64::from(crc),
                    ])
                    .map_err(err)?;
                }
            }
            tx.execute("DROP TABLE edit_blocks_3", []).map_err(err)?;
            log.sync()?;
        }
        tx.execute("UPDATE meta SET value = '4' WHERE key = 'schema'", [])
            .map_err(err)?;
        tx.commit().map_err(err)?;
        if old {
            // Compaction only gives the payloads' pages back; the conversion is complete
            // without it, so a failure here (another run reading the database) is not an error.
            let _ = self.conn.execute_batch("VACUUM");
        }
        Ok(())
    }

    /// Converts a schema-1 database (one `edits` row per edit) in one transaction: the edits go
    /// to the log in time order, and the per-changeset work and the first-node squares are
    /// computed from them as an ingest would have.
    fn migrate_from_1(&self) -> Result<(), StoreError> {
        let err = |e| self.map_err(e);
        let tx = Transaction::new_unchecked(&self.conn, rusqlite::TransactionBehavior::Immediate)
            .map_err(err)?;
        let mut created = std::collections::HashSet::new();
        let mut squares: std::collections::HashMap<i64, i64> = std::collections::HashMap::new();
        {
            let mut st = tx
                .prepare(
                    "SELECT etype, eid, version, op, changeset, uid, user, ts, lat_e7, lon_e7, tags, refs,
                            prev_version, prev_ts, prev_tags, prev_lat_e7, prev_lon_e7
                     FROM edits ORDER BY ts, etype, eid, version",
                )
                .map_err(err)?;
            let mut rows = st.query([]).map_err(err)?;
            let mut builder = edit_log::BlockBuilder::default();
            let mut log = log_file::LogAppender::open(&self.edit_log_path(), 0)?;
            let pair = |a: Option<i32>, b: Option<i32>| a.zip(b);
            while let Some(r) = rows.next().map_err(err)? {
                let etype = ElementType::from_code(r.get(0).map_err(err)?);
                let op = Op::from_code(r.get(3).map_err(err)?);
                let (Some(etype), Some(op)) = (etype, op) else {
                    continue;
                };
                let user: String = r.get(6).map_err(err)?;
                let tags: String = r.get(10).map_err(err)?;
                let raw: Option<Vec<u8>> = r.get(11).map_err(err)?;
                let refs = raw.as_deref().map(repack_legacy_refs);
                let prev_version: Option<i64> = r.get(12).map_err(err)?;
                let prev_tags: Option<String> = r.get(14).map_err(err)?;
                let e = edit_log::EditRef {
                    etype,
                    eid: r.get(1).map_err(err)?,
                    version: r.get(2).map_err(err)?,
                    op,
                    changeset: r.get(4).map_err(err)?,
                    uid: r.get(5).map_err(err)?,
                    user: &user,
                    ts: r.get(7).map_err(err)?,
                    pos: pair(r.get(8).map_err(err)?, r.get(9).map_err(err)?),
                    tags: &tags,
                    refs: refs.as_deref(),
                    prev: prev_version.map(|version| edit_log::PrevRef {
                        version,
                        ts: r.get(13).ok().flatten(),
                        tags: prev_tags.as_deref().unwrap_or(""),
                        pos: pair(r.get(15).ok().flatten(), r.get(16).ok().flatten()),
                    }),
                };
                if etype == ElementType::Node && op == Op::Create && e.version == 1 {
                    created.insert(e.eid);
                    if let Some((lat, lon)) = e.pos {
                        let t = squares.entry(grid_square(lat, lon)).or_insert(e.ts);
                        *t = (*t).min(e.ts);
                    }
                }
                builder.push(&e);
                if builder.is_full() {
                    put_block(&tx, &mut log, builder.take())?;
                }
            }
            put_block(&tx, &mut log, builder.take())?;
            log.sync()?;
        }
        for entry in self.node_index()?.iter()? {
            let (id, n) = entry?;
            if !created.contains(&id) {
                squares.insert(grid_square(n.coord.lat_e7(), n.coord.lon_e7()), i64::MIN);
            }
        }
        let squares: Vec<(i64, i64)> = squares.into_iter().collect();
        put_squares(&tx, &squares).map_err(err)?;
        // Schema 1's index does not mark the nodes that have a row in `elements`.
        let committed = read_generation(&tx, NODES_GENERATION).map_err(err)?;
        let mut nodes = NodeIndexTx::begin(&self.node_index_prefix(), committed)?;
        {
            let idx = self.node_index()?;
            let mut st = tx
                .prepare("SELECT eid FROM elements WHERE etype = 0 ORDER BY eid")
                .map_err(err)?;
            let mut rows = st.query([]).map_err(err)?;
            while let Some(r) = rows.next().map_err(err)? {
                let id: i64 = r.get(0).map_err(err)?;
                if let Some(e) = idx.get(id)? {
                    nodes.stage(id, e.with_row(true))?;
                }
            }
        }
        let prepared = nodes.prepare()?;
        if let Some(p) = &prepared {
            tx.execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES(?1, ?2)",
                params![NODES_GENERATION, p.generation().to_string()],
            )
            .map_err(err)?;
        }
        tx.execute_batch(
            "INSERT INTO changeset_work(changeset, uid, first_ts, edits, deletes)
                 SELECT changeset, MIN(uid), MIN(ts), COUNT(*), SUM(op = 2) FROM edits GROUP BY changeset;
             DROP TABLE edits;
             UPDATE meta SET value = '2' WHERE key = 'schema';",
        )
        .map_err(err)?;
        tx.commit().map_err(err)?;
        if let Some(p) = prepared {
            p.committed();
        }
        Ok(())
    }

    /// Records generation 0 in a new database; in a database written before the node-location
    /// index existed, builds the index from the node positions in `elements` first.
    fn ensure_node_index(&self) -> Result<(), StoreError> {
        let known = |c: &Connection| {
            c.query_row(
                "SELECT 1 FROM meta WHERE key = ?1",
                [NODES_GENERATION],
                |_| Ok(()),
            )
            .optional()
            .map(|o| o.is_some())
        };
        if known(&self.conn).map_err(|e| self.map_err(e))? {
            return Ok(());
        }
        let tx = Transaction::new_unchecked(&self.conn, rusqlite::TransactionBehavior::Immediate)
            .map_err(|e| self.map_err(e))?;
        if known(&tx).map_err(|e| self.map_err(e))? {
            return Ok(());
        }
        let prefix = self.node_index_prefix();
        let mut nodes = NodeIndexTx::begin(&prefix, 0)?;
        if Self::has_table(&tx, "elements").map_err(|e| self.map_err(e))? {
            let mut st = tx
                .prepare(
                    "SELECT eid, version, lat_e7, lon_e7 FROM elements
                     WHERE etype = 0 AND lat_e7 IS NOT NULL AND lon_e7 IS NOT NULL ORDER BY eid",
                )
                .map_err(|e| self.map_err(e))?;
            let mut rows = st.query([]).map_err(|e| self.map_err(e))?;
            while let Some(r) = rows.next().map_err(|e| self.map_err(e))? {
                let (id, version, lat, lon): (i64, i64, i64, i64) = (
                    r.get(0).map_err(|e| self.map_err(e))?,
                    r.get(1).map_err(|e| self.map_err(e))?,
                    r.get(2).map_err(|e| self.map_err(e))?,
                    r.get(3).map_err(|e| self.map_err(e))?,
                );
                if let Some(c) = crate::model::Coord::from_e7(lat, lon) {
                    nodes.stage(id, NodeEntry::new(c, version).with_row(true))?;
                }
            }
        }
        let prepared = nodes.prepare()?;
        let generation = prepared
            .as_ref()
            .map_or(0, crate::generations::Prepared::generation);
        tx.execute(
            "INSERT INTO meta(key, value) VALUES(?1, ?2)",
            params![NODES_GENERATION, generation.to_string()],
        )
        .map_err(|e| self.map_err(e))?;
        tx.commit().map_err(|e| self.map_err(e))?;
        if let Some(p) = prepared {
            p.committed();
        }
        Ok(())
    }

    /// The edit-log file beside this database ([`log_file`]).
    #[must_use]
    pub fn edit_log_path(&self) -> PathBuf {
        log_file::path_for(&self.path)
    }

    /// The file-name prefix of this database's node-location index.
    #[must_use]
    pub fn node_index_prefix(&self) -> PathBuf {
        node_index::prefix_for(&self.path)
    }

    /// The file-name prefix of this database's element state.
    #[must_use]
    pub fn element_state_prefix(&self) -> PathBuf {
        element_state::prefix_for(&self.path)
    }

    /// Opens the committed generation of a file beside the database. An ingest that commits
    /// between reading the generation and opening its file removes the file just read; reading
    /// the generation again then names the new one.
    fn open_committed<T, E: Into<StoreError>>(
        &self,
        key: &str,
        open: impl Fn(u64) -> Result<T, E>,
    ) -> Result<T, StoreError> {
        let mut attempt = 0;
        loop {
            let generation = read_generation(&self.conn, key).map_err(|e| self.map_err(e))?;
            match open(generation) {
                Ok(t) => return Ok(t),
                Err(e) if attempt >= 2 => return Err(e.into()),
                Err(_) => attempt += 1,
            }
        }
    }

    /// Opens the committed node-location index, the one API through which positions of nodes
    /// are read.
    ///
    /// # Errors
    /// On SQLite failure, or when the index file is missing or damaged.
    pub fn node_index(&self) -> Result<NodeIndex, StoreError> {
        let prefix = self.node_index_prefix();
        self.open_committed(NODES_GENERATION, |g| NodeIndex::open_generation(&prefix, g))
    }

    /// Opens the committed element state, the one API through which the stored state of ways,
    /// relations and tagged nodes is read.
    ///
    /// # Errors
    /// On SQLite failure, or when the state file is missing or damaged.
    pub fn element_state(&self) -> Result<ElementState, StoreError> {
        let prefix = self.element_state_prefix();
        self.open_committed(ELEMENTS_GENERATION, |g| {
            ElementState::open_generation(&prefix, g)
        })
    }

    /// Sets this connection's SQLite page cache (64 MiB when opened). A connection that reads
    /// rows in key order, like the report's loading thread, needs little: the system's file
    /// cache serves it as well.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn set_cache_mib(&self, mib: u32) -> Result<(), StoreError> {
        self.conn
            .pragma_update(None, "cache_size", -1024 * i64::from(mib))
            .map_err(|e| self.map_err(e))
    }

    /// Maps a SQLite error to a [`StoreError`] naming this database.
    #[must_use]
    pub fn map_err(&self, source: rusqlite::Error) -> StoreError {
        busy_or_sqlite(&self.path, source)
    }

    /// The database file.
    #[must_use]
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Read access for the analysis stages.
    #[must_use]
    pub fn conn(&self) -> &Connection {
        &self.conn
    }

    /// Starts the one write transaction of an ingest. Takes the write lock at once, so a second
    /// concurrent ingest fails with [`StoreError::Busy`] instead of interleaving.
    ///
    /// # Errors
    /// When the database is locked by another run or SQLite fails.
    pub fn begin(&mut self) -> Result<IngestTx<'_>, StoreError> {
        let path = self.path.clone();
        let tx = self
            .conn
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)
            .map_err(|source| busy_or_sqlite(&path, source))?;
        Ok(IngestTx {
            tx,
            log_path: log_file::path_for(&path),
            path,
            log: RefCell::new(None),
        })
    }

    /// A committed `meta` value.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn meta(&self, key: &str) -> Result<Option<String>, StoreError> {
        self.conn
            .query_row("SELECT value FROM meta WHERE key = ?1", [key], |r| r.get(0))
            .optional()
            .map_err(|e| self.map_err(e))
    }

    /// Counts of skipped elements by reason.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn skipped(&self) -> Result<Vec<(String, u64)>, StoreError> {
        let mut st = self
            .conn
            .prepare("SELECT reason, count FROM skipped ORDER BY reason")
            .map_err(|e| self.map_err(e))?;
        let rows = st
            .query_map([], |r| Ok((r.get::<_, String>(0)?, r.get::<_, i64>(1)?)))
            .map_err(|e| self.map_err(e))?;
        rows.map(|r| {
            r.map(|(s, n)| (s, u64::try_from(n).unwrap_or(0)))
                .map_err(|e| self.map_err(e))
        })
        .collect()
    }

    /// Every edit with `from <= ts < to`, each element version once (the copy ingested first),
    /// ordered by time, then element type, id and version.
    ///
    /// # Errors
    /// On SQLite failure or a damaged block.
    pub fn edits(&self, from: i64, to: i64) -> Result<Vec<edit_log::StoredEdit>, StoreError> {
        let most: i64 = self
            .conn
            .query_row(
                "SELECT COALESCE(SUM(edits), 0) FROM edit_blocks WHERE max_ts >= ?1 AND min_ts < ?2",
                params![from, to],
                |r| r.get(0),
            )
            .map_err(|e| self.map_err(e))?;
        let mut out = Vec::with_capacity(usize::try_from(most).unwrap_or(0));
        self.for_each_edit_block(from, to, |data| {
            edit_log::decode(data, |t| t >= from && t < to, &mut out)
        })?;
        Ok(edit_log::dedup_sorted(out))
    }

    /// Calls `f` with the payload of each block of the edit log whose time span meets
    /// `from <= ts < to`, in the order they were written.
    fn for_each_edit_block(
        &self,
        from: i64,
        to: i64,
        mut f: impl FnMut(&[u8]) -> Result<(), edit_log::DecodeError>,
    ) -> Result<(), StoreError> {
        let mut st = self
            .conn
            .prepare_cached(
                "SELECT id, file_offset, file_len, crc FROM edit_blocks
                 WHERE max_ts >= ?1 AND min_ts < ?2 ORDER BY id",
            )
            .map_err(|e| self.map_err(e))?;
        let extents = st
            .query_map(params![from, to], |r| {
                Ok(log_file::Extent {
                    id: r.get(0)?,
                    offset: u64::try_from(r.get::<_, i64>(1)?).unwrap_or(u64::MAX),
                    len: u64::try_from(r.get::<_, i64>(2)?).unwrap_or(u64::MAX),
                    crc: u32::try_from(r.get::<_, i64>(3)?).unwrap_or(0),
                })
            })
            .map_err(|e| self.map_err(e))?
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| self.map_err(e))?;
        let Some(end) = extents.iter().map(log_file::Extent::end).max() else {
            return Ok(());
        };
        let mut reader = log_file::LogReader::open(&self.edit_log_path(), end)?;
        for e in &extents {
            f(reader.read(e)?).map_err(|source| StoreError::Damaged {
                path: reader.path().to_owned(),
                block: e.id,
                at: e.offset,
                source,
            })?;
        }
        Ok(())
    }

    /// The times of the first and the last edit stored.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn edit_span(&self) -> Result<Option<(i64, i64)>, StoreError> {
        let (a, b): (Option<i64>, Option<i64>) = self
            .conn
            .query_row(
                "SELECT MIN(min_ts), MAX(max_ts) FROM edit_blocks",
                [],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )
            .map_err(|e| self.map_err(e))?;
        Ok(a.zip(b))
    }

    /// Every changeset with edits in the diffs and the time of its first edit.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn edited_changesets(&self) -> Result<Vec<(i64, i64)>, StoreError> {
        let mut st = self
            .conn
            .prepare("SELECT changeset, first_ts FROM changeset_work ORDER BY changeset")
            .map_err(|e| self.map_err(e))?;
        let rows = st
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
            .map_err(|e| self.map_err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.map_err(e))
    }

    /// The `grid_first` squares ([`grid_square`]) and when their first known node appeared
    /// (`i64::MIN`: before the data).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn grid_first(&self) -> Result<std::collections::HashMap<i64, i64>, StoreError> {
        let mut st = self
            .conn
            .prepare("SELECT square, first_ts FROM grid_first")
            .map_err(|e| self.map_err(e))?;
        let rows = st
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))
            .map_err(|e| self.map_err(e))?;
        rows.collect::<Result<_, _>>().map_err(|e| self.map_err(e))
    }
}

/// A committed file generation recorded in `meta` (0, the empty one, when none is).
fn read_generation(conn: &Connection, key: &str) -> Result<u64, rusqlite::Error> {
    let v: Option<String> = conn
        .query_row("SELECT value FROM meta WHERE key = ?1", [key], |r| r.get(0))
        .optional()?;
    Ok(v.and_then(|v| v.parse().ok()).unwrap_or(0))
}

/// Side of a `grid_first` square, in 1e-7 degrees (0.01 degree, about 1.1 km of latitude).
pub const GRID_E7: i32 = 100_000;

/// The `grid_first` square holding a position: row and column of [`GRID_E7`] squares counted
/// from 90° S and 180° W, as one number (`row * 65 536 + column`).
#[must_use]
pub fn grid_square(lat_e7: i32, lon_e7: i32) -> i64 {
    let row = (i64::from(lat_e7) + 900_000_000).div_euclid(i64::from(GRID_E7));
    let col = (i64::from(lon_e7) + 1_800_000_000).div_euclid(i64::from(GRID_E7));
    row * 65_536 + col
}

/// Where the committed blocks of the edit-log file end (the first byte an ingest may write).
fn log_end(conn: &Connection) -> Result<u64, rusqlite::Error> {
    let end: i64 = conn.query_row(
        "SELECT COALESCE(MAX(file_offset + file_len), 0) FROM edit_blocks",
        [],
        |r| r.get(0),
    )?;
    Ok(u64::try_from(end).unwrap_or(0))
}

/// Appends a block to the edit-log file and lists it in `edit_blocks`.
fn put_block(
    conn: &Connection,
    log: &mut log_file::LogAppender,
    block: Option<edit_log::Block>,
) -> Result<(), StoreError> {
    let Some(b) = block else {
        return Ok(());
    };
    let (offset, crc) = log.append(&b.data)?;
    let sqlite = |source| StoreError::Sqlite {
        path: conn.path().map(PathBuf::from).unwrap_or_default(),
        source,
    };
    conn.prepare_cached(
        "INSERT INTO edit_blocks(min_ts, max_ts, edits, file_offset, file_len, crc)
         VALUES(?1, ?2, ?3, ?4, ?5, ?6)",
    )
    .and_then(|mut st| {
        st.execute(params![
            b.min_ts,
            b.max_ts,
            b.edits,
            offset as i64,
            b.data.len() as i64,
            i64::from(crc)
        ])
    })
    .map(|_| ())
    .map_err(sqlite)
}

fn put_squares(conn: &Connection, squares: &[(i64, i64)]) -> Result<(), rusqlite::Error> {
    let mut sorted = squares.to_vec();
    sorted.sort_unstable();
    let mut st = conn.prepare_cached(
        "INSERT INTO grid_first(square, first_ts) VALUES(?1, ?2)
         ON CONFLICT(square) DO UPDATE SET first_ts = MIN(first_ts, excluded.first_ts)",
    )?;
    for (k, v) in sorted {
        st.execute(params![k, v])?;
    }
    Ok(())
}

/// One changeset's share of an ingest's edits, for `changeset_work`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Work {
    pub uid: i64,
    pub first_ts: i64,
    pub edits: u64,
    pub deletes: u64,
}

impl Work {
    /// Adds one edit.
    pub fn add(&mut self, ts: i64, delete: bool) {
        self.first_ts = self.first_ts.min(ts);
        self.edits += 1;
        self.deletes += u64::from(delete);
    }

    /// Adds another share of the same changeset.
    pub fn merge(&mut self, other: Self) {
        self.first_ts = self.first_ts.min(other.first_ts);
        self.edits += other.edits;
        self.deletes += other.deletes;
    }
}

/// One ingest's write transaction.
pub struct IngestTx<'a> {
    tx: Transaction<'a>,
    path: PathBuf,
    /// The edit-log file, opened at the first block this ingest appends.
    log_path: PathBuf,
    log: RefCell<Option<log_file::LogAppender>>,
}

impl IngestTx<'_> {
    fn err(&self, source: rusqlite::Error) -> StoreError {
        StoreError::Sqlite {
            path: self.path.clone(),
            source,
        }
    }

    /// The committed node-index generation (the one this transaction started from).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn node_generation(&self) -> Result<u64, StoreError> {
        read_generation(&self.tx, NODES_GENERATION).map_err(|e| self.err(e))
    }

    /// Records the node-index generation this ingest wrote; it becomes current at commit.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn set_node_generation(&self, generation: u64) -> Result<(), StoreError> {
        self.tx
            .execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES(?1, ?2)",
                params![NODES_GENERATION, generation.to_string()],
            )
            .map(|_| ())
            .map_err(|e| self.err(e))
    }

    /// The committed element-state generation (the one this transaction started from).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn elements_generation(&self) -> Result<u64, StoreError> {
        read_generation(&self.tx, ELEMENTS_GENERATION).map_err(|e| self.err(e))
    }

    /// Records the element-state generation this ingest wrote; it becomes current at commit.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn set_elements_generation(&self, generation: u64) -> Result<(), StoreError> {
        self.set_meta(ELEMENTS_GENERATION, &generation.to_string())
    }

    /// Sets a `meta` value; it becomes visible at commit (used for replication sequences).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn set_meta(&self, key: &str, value: &str) -> Result<(), StoreError> {
        self.tx
            .execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES(?1, ?2)",
                params![key, value],
            )
            .map(|_| ())
            .map_err(|e| self.err(e))
    }

    /// Whether an input with this content hash was ingested before.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn has_input(&self, hash: &str) -> Result<bool, StoreError> {
        self.tx
            .query_row("SELECT 1 FROM inputs WHERE hash = ?1", [hash], |_| Ok(()))
            .optional()
            .map(|o| o.is_some())
            .map_err(|e| self.err(e))
    }

    /// Records an ingested input.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn record_input(
        &self,
        hash: &str,
        path: &str,
        kind: &str,
        elements: u64,
        changesets: u64,
        now: i64,
    ) -> Result<(), StoreError> {
        self.tx
            .execute(
                "INSERT INTO inputs(hash, path, kind, elements, changesets, ingested_at) VALUES(?1, ?2, ?3, ?4, ?5, ?6)",
                params![hash, path, kind, elements as i64, changesets as i64, now],
            )
            .map(|_| ())
            .map_err(|e| self.err(e))
    }

    /// Inserts or refreshes a changeset's metadata. An upsert rather than `INSERT OR REPLACE`,
    /// whose rows spent time in SQLite's statement journal: 1.38 s against 1.21 s for the 4x
    /// compare input's changeset dump (BENCHMARKS.md).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn put_changeset(&self, cs: &crate::ingest::xml::RawChangeset) -> Result<(), StoreError> {
        let mut st = self
            .tx
            .prepare_cached(
                "INSERT INTO changesets(id, uid, user, created_at, closed_at, min_lat, min_lon, max_lat, max_lon, num_changes, comment, editor, source)
                 VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)
                 ON CONFLICT(id) DO UPDATE SET uid = excluded.uid, user = excluded.user,
                    created_at = excluded.created_at, closed_at = excluded.closed_at,
                    min_lat = excluded.min_lat, min_lon = excluded.min_lon,
                    max_lat = excluded.max_lat, max_lon = excluded.max_lon,
                    num_changes = excluded.num_changes, comment = excluded.comment,
                    editor = excluded.editor, source = excluded.source",
            )
            .map_err(|e| self.err(e))?;
        let (a, b) = cs
            .bbox
            .map_or((None, None), |(lo, hi)| (Some(lo), Some(hi)));
        st.execute(params![
            cs.id,
            cs.uid,
            cs.user,
            cs.created_at,
            cs.closed_at,
            a.map(crate::model::Coord::lat),
            a.map(crate::model::Coord::lon),
            b.map(crate::model::Coord::lat),
            b.map(crate::model::Coord::lon),
            cs.num_changes,
            cs.tag("comment").unwrap_or(""),
            cs.tag("created_by").unwrap_or(""),
            cs.tag("source").unwrap_or(""),
        ])
        .map(|_| ())
        .map_err(|e| self.err(e))
    }

    /// Appends a block of the edit log: its bytes to the edit-log file, its row to
    /// `edit_blocks`. They count once the ingest commits.
    ///
    /// # Errors
    /// On SQLite failure, or when the edit-log file cannot be written.
    pub fn put_edit_block(&self, block: Option<edit_log::Block>) -> Result<(), StoreError> {
        if block.is_none() {
            return Ok(());
        }
        let mut log = self.log.borrow_mut();
        let log = match &mut *log {
            Some(l) => l,
            None => {
                let end = log_end(&self.tx).map_err(|e| self.err(e))?;
                log.insert(log_file::LogAppender::open(&self.log_path, end)?)
            }
        };
        put_block(&self.tx, log, block)
    }

    /// Adds changesets' work (edits and deletions, first edit time) from the diffs.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn add_changeset_work(
        &self,
        work: &foldhash::HashMap<i64, Work>,
    ) -> Result<(), StoreError> {
        let mut sorted: Vec<(i64, Work)> = work.iter().map(|(&k, &v)| (k, v)).collect();
        sorted.sort_unstable_by_key(|w| w.0);
        let mut st = self
            .tx
            .prepare_cached(
                "INSERT INTO changeset_work(changeset, uid, first_ts, edits, deletes) VALUES(?1, ?2, ?3, ?4, ?5)
                 ON CONFLICT(changeset) DO UPDATE SET first_ts = MIN(first_ts, excluded.first_ts),
                    edits = edits + excluded.edits, deletes = deletes + excluded.deletes",
            )
            .map_err(|e| self.err(e))?;
        for (cs, w) in sorted {
            st.execute(params![
                cs,
                w.uid,
                w.first_ts,
                i64::try_from(w.edits).unwrap_or(i64::MAX),
                i64::try_from(w.deletes).unwrap_or(i64::MAX)
            ])
            .map_err(|e| self.err(e))?;
        }
        Ok(())
    }

    /// Lowers the first-node times of `grid_first` squares ([`grid_square`]): (square, time).
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn add_grid_first(&self, squares: &[(i64, i64)]) -> Result<(), StoreError> {
        put_squares(&self.tx, squares).map_err(|e| self.err(e))
    }

    /// Adds to the skipped-element count for a reason.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn add_skipped(&self, reason: &str, n: u64) -> Result<(), StoreError> {
        self.tx
            .execute(
                "INSERT INTO skipped(reason, count) VALUES(?1, ?2)
                 ON CONFLICT(reason) DO UPDATE SET count = count + excluded.count",
                params![reason, n as i64],
            )
            .map(|_| ())
            .map_err(|e| self.err(e))
    }

    /// Makes the ingest permanent: syncs the blocks it appended to the edit-log file, then
    /// commits.
    ///
    /// # Errors
    /// On SQLite failure or when the edit-log file cannot be synced (the ingest is then rolled
    /// back).
    pub fn commit(self) -> Result<(), StoreError> {
        // The blocks are on disk before the rows naming them are.
        if let Some(log) = self.log.borrow_mut().as_mut() {
            log.sync()?;
        }
        let path = self.path;
        self.tx
            .commit()
            .map_err(|source| StoreError::Sqlite { path, source })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tags_round_trip() {
        let tags = vec![
            ("name".to_owned(), "Café = bar; x".to_owned()),
            ("a".to_owned(), String::new()),
        ];
        let p = pack_tags(&tags);
        let back: Vec<_> = unpack_tags(&p).collect();
        assert_eq!(back, vec![("name", "Café = bar; x"), ("a", "")]);
        assert_eq!(packed_tag(&p, "a"), Some(""));
        assert_eq!(packed_tag(&p, "b"), None);
    }

    #[test]
    fn refs_and_members_round_trip() {
        let r = pack_refs([1, -2, i64::MAX / 8]);
        assert_eq!(
            unpack_refs(&r).collect::<Vec<_>>(),
            vec![1, -2, i64::MAX / 8]
        );
        // 150 is zigzag 300, the varint AC 02; the step of -1 is zigzag 1, one byte.
        // Source: Protocol Buffers encoding guide ("Base 128 Varints": 300 is ac 02; "ZigZag
        // encoding": -1 maps to 1).
        assert_eq!(pack_refs([150, 149]), [0xAC, 0x02, 0x01]);
        let extremes = [i64::MIN, i64::MAX, 0, i64::MIN, -1, i64::MAX];
        assert_eq!(
            unpack_refs(&pack_refs(extremes)).collect::<Vec<_>>(),
            extremes
        );
        // Refs as older files hold them, little-endian i64s, repacked.
        let raw: Vec<u8> = extremes.iter().flat_map(|v| v.to_le_bytes()).collect();
        assert_eq!(repack_legacy_refs(&raw), pack_refs(extremes));
        // A cut varint ends the refs; nothing past it is made up.
        let cut = &pack_refs([1, 300])[..2];
        assert_eq!(unpack_refs(cut).collect::<Vec<_>>(), vec![1]);
        for (t, id) in [
            (ElementType::Node, 5),
            (ElementType::Way, 77),
            (ElementType::Relation, 1),
        ] {
            assert_eq!(member_decode(member_code(t, id)), Some((t, id)));
        }
    }

    #[test]
    fn failed_transaction_changes_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("s.db");
        let mut s = Store::open(&path).unwrap();
        {
            let tx = s.begin().unwrap();
            tx.add_skipped("x", 3).unwrap();
            // dropped without commit
        }
        assert!(s.skipped().unwrap().is_empty());
        let tx = s.begin().unwrap();
        tx.add_skipped("x", 3).unwrap();
        tx.add_skipped("x", 2).unwrap();
        tx.commit().unwrap();
        assert_eq!(s.skipped().unwrap(), vec![("x".to_owned(), 5)]);
    }

    /// A schema-2 database from before the node-location index: node positions only in
    /// `elements`, no generation in `meta`. Opening it builds the index from them, then moves
    /// the `elements` rows to the element state and drops the table (schema 3, then 4).
    #[test]
    fn a_schema_2_database_is_converted_on_open() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("old.db");
        Connection::open(&path)
            .unwrap()
            .execute_batch(
                "CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
                 INSERT INTO meta VALUES('schema', '2');
                 CREATE TABLE elements(
                    etype INTEGER NOT NULL, eid INTEGER NOT NULL, version INTEGER NOT NULL, ts INTEGER NOT NULL,
                    visible INTEGER NOT NULL, lat_e7 INTEGER, lon_e7 INTEGER, tags TEXT NOT NULL, refs BLOB,
                    PRIMARY KEY(etype, eid)) WITHOUT ROWID;
                 INSERT INTO elements VALUES(0, 7, 3, 100, 1, 452000000, -336000000,
                    'amenity' || char(31) || 'bench' || char(30), NULL);
                 INSERT INTO elements VALUES(0, 8, 1, 200, 0, NULL, NULL, '', NULL);
                 INSERT INTO elements VALUES(1, 7, 1, 300, 1, NULL, NULL, '', x'0700000000000000');",
            )
            .unwrap();
        let s = Store::open(&path).unwrap();
        let idx = s.node_index().unwrap();
        assert_eq!(idx.len(), 1);
        let e = idx.get(7).unwrap().unwrap();
        assert_eq!(
            (e.coord.lat_e7(), e.coord.lon_e7(), e.version),
            (452_000_000, -336_000_000, 3)
        );
        assert_eq!(s.meta("nodes_generation").unwrap().as_deref(), Some("1"));
        assert_eq!(s.meta("elements_generation").unwrap().as_deref(), Some("1"));
        assert_eq!(s.meta("schema").unwrap().as_deref(), Some("4"));
        let state = s.element_state().unwrap();
        assert_eq!(state.len(), 3);
        assert_eq!(
            state.get(ElementType::Node, 7).unwrap(),
            Some(element_state::Row {
                version: 3,
                ts: 100,
                visible: true,
                pos: Some((452_000_000, -336_000_000)),
                tags: "amenity\x1Fbench\x1E".into(),
                refs: None,
            })
        );
        assert!(!state.get(ElementType::Node, 8).unwrap().unwrap().visible);
        assert_eq!(
            state.get(ElementType::Way, 7).unwrap().unwrap().refs,
            Some(pack_refs([7]))
        );
        assert!(!Store::has_table(s.conn(), "elements").unwrap());
        // Opened again: nothing more to do.
        drop(s);
        let s = Store::open(&path).unwrap();
        assert_eq!(s.node_index().unwrap().len(), 1);
        assert_eq!(s.element_state().unwrap().len(), 3);
    }

    /// A changeset read again (a later dump, a replication file) replaces its row whole.
    #[test]
    fn a_changeset_read_again_replaces_its_row() {
        let dir = tempfile::tempdir().unwrap();
        let mut s = Store::open(&dir.path().join("s.db")).unwrap();
        let cs = |comment: &str, closed_at| crate::ingest::xml::RawChangeset {
            id: 42,
            uid: 7,
            user: "Ann".into(),
            created_at: 1000,
            closed_at,
            bbox: None,
            num_changes: 3,
            tags: vec![("comment".into(), comment.into())],
        };
        let tx = s.begin().unwrap();
        tx.put_changeset(&cs("first", None)).unwrap();
        tx.put_changeset(&cs("second", Some(2000))).unwrap();
        tx.commit().unwrap();
        let rows: Vec<(i64, String, Option<i64>)> = s
            .conn()
            .prepare("SELECT id, comment, closed_at FROM changesets")
            .unwrap()
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
            .unwrap()
            .collect::<Result<_, _>>()
            .unwrap();
        assert_eq!(rows, vec![(42, "second".to_owned(), Some(2000))]);
    }

    /// One block of two edits, as an ingest would write it.
    fn sample_block(ts: i64) -> edit_log::Block {
        let mut b = edit_log::BlockBuilder::default();
        for (eid, op) in [(11, Op::Create), (12, Op::Delete)] {
            b.push(&edit_log::EditRef {
                etype: ElementType::Node,
                eid,
                version: 1,
                op,
                changeset: 40,
                uid: 3,
                user: "Ann",
                ts: ts + eid,
                pos: Some((452_000_000, -336_000_000)),
                tags: "",
                refs: None,
                prev: None,
            });
        }
        b.take().unwrap()
    }

    /// A schema-3 database keeps the edit log's payloads in `edit_blocks.data`. Opening it
    /// moves them to the edit-log file, in order, and the same edits read back.
    #[test]
    fn a_schema_3_database_moves_its_edit_log_to_the_file() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("v3.db");
        // A leftover of an interrupted conversion, which must go.
        std::fs::write(log_file::path_for(&path), b"leftover").unwrap();
        let c = Connection::open(&path).unwrap();
        c.execute_batch(
            "CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
             INSERT INTO meta VALUES('schema', '3'), ('nodes_generation', '0');
             CREATE TABLE edit_blocks(
                id INTEGER PRIMARY KEY, min_ts INTEGER NOT NULL, max_ts INTEGER NOT NULL,
                edits INTEGER NOT NULL, data BLOB NOT NULL);
             CREATE INDEX edit_blocks_ts ON edit_blocks(max_ts, min_ts);",
        )
        .unwrap();
        let blocks = [sample_block(1000), sample_block(5000)];
        for b in &blocks {
            c.execute(
                "INSERT INTO edit_blocks(min_ts, max_ts, edits, data) VALUES(?1, ?2, ?3, ?4)",
                params![b.min_ts, b.max_ts, b.edits, b.data],
            )
            .unwrap();
        }
        drop(c);
        let s = Store::open(&path).unwrap();
        assert_eq!(s.meta("schema").unwrap().as_deref(), Some("4"));
        let file = std::fs::read(log_file::path_for(&path)).unwrap();
        let joined: Vec<u8> = blocks.iter().flat_map(|b| b.data.clone()).collect();
        assert_eq!(file, joined, "the payloads, in order, and nothing else");
        let edits = s.edits(i64::MIN, i64::MAX).unwrap();
        let got: Vec<_> = edits.iter().map(|e| (e.eid, e.ts, e.op)).collect();
        assert_eq!(
            got,
            vec![
                (11, 1011, Op::Create),
                (12, 1012, Op::Delete),
                (11, 5011, Op::Create),
                (12, 5012, Op::Delete)
            ]
        );
        assert_eq!(s.edits(5000, 6000).unwrap().len(), 2, "blocks by time span");
        let data_column: i64 = s
            .conn()
            .query_row(
                "SELECT count(*) FROM pragma_table_info('edit_blocks') WHERE name = 'data'",
                [],
                |r| r.get(0),
            )
            .unwrap();
        assert_eq!(data_column, 0);
        drop(s);
        let s = Store::open(&path).unwrap();
        assert_eq!(s.edits(i64::MIN, i64::MAX).unwrap().len(), 4);
    }

    /// An ingest that appended a block and failed leaves bytes no row names; the next one cuts
    /// them off and appends after the committed blocks. A database without its file is refused.
    #[test]
    fn a_failed_ingest_leaves_the_edit_log_as_committed() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("s.db");
        let log = log_file::path_for(&path);
        let mut s = Store::open(&path).unwrap();
        let tx = s.begin().unwrap();
        tx.put_edit_block(Some(sample_block(1000))).unwrap();
        tx.commit().unwrap();
        let committed = std::fs::read(&log).unwrap();
        {
            let tx = s.begin().unwrap();
            tx.put_edit_block(Some(sample_block(2000))).unwrap();
            // dropped without commit
        }
        assert!(std::fs::metadata(&log).unwrap().len() > committed.len() as u64);
        assert_eq!(s.edits(i64::MIN, i64::MAX).unwrap().len(), 2);
        let tx = s.begin().unwrap();
        tx.put_edit_block(Some(sample_block(3000))).unwrap();
        tx.commit().unwrap();
        let mut want = committed;
        want.extend_from_slice(&sample_block(3000).data);
        assert_eq!(std::fs::read(&log).unwrap(), want);
        let ts: Vec<i64> = s
            .edits(i64::MIN, i64::MAX)
            .unwrap()
            .iter()
            .map(|e| e.ts)
            .collect();
        assert_eq!(ts, vec![1011, 1012, 3011, 3012]);
        drop(s);

        std::fs::remove_file(&log).unwrap();
        let err = Store::open(&path).err().unwrap().to_string();
        assert!(
            err.contains("s.db.edits") && err.contains("missing"),
            "{err}"
        );
    }

    /// A database of schema 1 (one `edits` row per edit) is converted when opened: the same
    /// edits come back from the log, with the changesets' work and first-node squares.
    #[test]
    fn a_schema_1_database_is_converted_on_open() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("v1.db");
        // Its node-location index, without row marks: node 5 has a row, node 6 does not.
        let c = crate::model::Coord::from_e7(452_000_100, -336_000_000).unwrap();
        let mut nodes = NodeIndexTx::begin(&node_index::prefix_for(&path), 0).unwrap();
        nodes.stage(5, NodeEntry::new(c, 2)).unwrap();
        let far = crate::model::Coord::from_e7(-100_000_000, 50_000_000).unwrap();
        nodes.stage(6, NodeEntry::new(far, 1)).unwrap();
        let prepared = nodes.prepare().unwrap().unwrap();
        assert_eq!(prepared.generation(), 1);
        prepared.committed();
        Connection::open(&path)
            .unwrap()
            .execute_batch(
                "CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
                 INSERT INTO meta VALUES('schema', '1'), ('nodes_generation', '1');
                 CREATE TABLE elements(
                    etype INTEGER NOT NULL, eid INTEGER NOT NULL, version INTEGER NOT NULL, ts INTEGER NOT NULL,
                    visible INTEGER NOT NULL, lat_e7 INTEGER, lon_e7 INTEGER, tags TEXT NOT NULL, refs BLOB,
                    PRIMARY KEY(etype, eid)) WITHOUT ROWID;
                 INSERT INTO elements VALUES(0, 5, 2, 2000, 1, 452000100, -336000000,
                    'a' || char(31) || 'b' || char(30), NULL);
                 CREATE TABLE edits(
                    etype INTEGER NOT NULL, eid INTEGER NOT NULL, version INTEGER NOT NULL,
                    op INTEGER NOT NULL, changeset INTEGER NOT NULL, uid INTEGER NOT NULL, user TEXT NOT NULL,
                    ts INTEGER NOT NULL, lat_e7 INTEGER, lon_e7 INTEGER, tags TEXT NOT NULL, refs BLOB,
                    prev_version INTEGER, prev_ts INTEGER, prev_tags TEXT, prev_lat_e7 INTEGER, prev_lon_e7 INTEGER,
                    PRIMARY KEY(etype, eid, version)) WITHOUT ROWID;
                 INSERT INTO edits VALUES(0, 5, 1, 0, 77, 9, 'Ann', 1000, 452000000, -336000000, '',
                    NULL, NULL, NULL, NULL, NULL, NULL);
                 INSERT INTO edits VALUES(0, 5, 2, 1, 78, 9, 'Ann', 2000, 452000100, -336000000,
                    'a' || char(31) || 'b' || char(30), NULL, 1, 1000, '', 452000000, -336000000);
                 INSERT INTO edits VALUES(1, 6, 3, 2, 78, 9, 'Ann', 2100, NULL, NULL, '',
                    x'0500000000000000', 2, 1500, 'building' || char(31) || 'yes' || char(30), NULL, NULL);",
            )
            .unwrap();
        let s = Store::open(&path).unwrap();
        let edits = s.edits(i64::MIN, i64::MAX).unwrap();
        let brief: Vec<_> = edits
            .iter()
            .map(|e| {
                (
                    e.etype,
                    e.eid,
                    e.version,
                    e.op,
                    e.changeset,
                    &*e.user,
                    e.ts,
                    e.pos,
                    e.tags.as_str(),
                    e.refs.clone(),
                    e.prev.clone(),
                )
            })
            .collect();
        assert_eq!(
            brief,
            vec![
                (
                    ElementType::Node,
                    5,
                    1,
                    Op::Create,
                    77,
                    "Ann",
                    1000,
                    Some((452_000_000, -336_000_000)),
                    "",
                    None,
                    None
                ),
                (
                    ElementType::Node,
                    5,
                    2,
                    Op::Modify,
                    78,
                    "Ann",
                    2000,
                    Some((452_000_100, -336_000_000)),
                    "a\x1Fb\x1E",
                    None,
                    Some(edit_log::PrevState {
                        version: 1,
                        ts: Some(1000),
                        tags: String::new(),
                        pos: Some((452_000_000, -336_000_000))
                    }),
                ),
                (
                    ElementType::Way,
                    6,
                    3,
                    Op::Delete,
                    78,
                    "Ann",
                    2100,
                    None,
                    "",
                    Some(pack_refs([5])),
                    Some(edit_log::PrevState {
                        version: 2,
                        ts: Some(1500),
                        tags: "building\x1Fyes\x1E".into(),
                        pos: None
                    }),
                ),
            ]
        );
        assert_eq!(
            s.mapper_work_between(9, i64::MIN, None).unwrap(),
            vec![(1000, 1, 0), (2000, 2, 1)]
        );
        // Node 5 from its creation in the edits; node 6, never seen created, from the start.
        let squares = s.grid_first().unwrap();
        assert_eq!(squares.len(), 2);
        assert_eq!(
            squares.get(&grid_square(452_000_000, -336_000_000)),
            Some(&1000)
        );
        assert_eq!(
            squares.get(&grid_square(-100_000_000, 50_000_000)),
            Some(&i64::MIN)
        );
        assert_eq!(s.meta("schema").unwrap().as_deref(), Some("4"));
        let tagged = s
            .element_state()
            .unwrap()
            .get(ElementType::Node, 5)
            .unwrap();
        assert_eq!(
            tagged.map(|r| (r.version, r.tags)),
            Some((2, "a\x1Fb\x1E".into()))
        );
        let idx = s.node_index().unwrap();
        assert!(idx.get(5).unwrap().unwrap().has_row);
        assert!(!idx.get(6).unwrap().unwrap().has_row);
        let old: i64 = s
            .conn()
            .query_row(
                "SELECT count(*) FROM sqlite_master WHERE name = 'edits'",
                [],
                |r| r.get(0),
            )
            .unwrap();
        assert_eq!(old, 0);
    }

    #[test]
    fn second_writer_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("s.db");
        let mut a = Store::open(&path).unwrap();
        let mut b = Store::open(&path).unwrap();
        let _tx = a.begin().unwrap();
        assert!(matches!(b.begin(), Err(StoreError::Busy { .. })));
    }
}
