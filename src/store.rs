//! The state between weekly runs: an embedded SQLite database.
//!
//! Tables: `meta` (schema version), `inputs` (every ingested file by content hash, so a file
//! ingested twice counts once), `changesets` (metadata), `edits` (every element version seen in a
//! diff, unique by type, id and version, with the state it replaced), `elements` (the latest known
//! version of every element: position, tags, node refs; this doubles as the node-location index),
//! `skipped` (odd elements skipped while reading, by reason).
//!
//! Node positions live in the node-location index ([`crate::node_index`]), a compact file next
//! to the database whose generation is recorded in `meta` (`nodes_generation`) by the same
//! transaction as the ingest that wrote it; `elements` keeps nodes only when they carry tags.
//!
//! Writes happen only inside an [`IngestTx`], one SQLite transaction per ingest command: a failed
//! ingest rolls back and leaves the database as it was.

use std::path::{Path, PathBuf};

use rusqlite::{params, Connection, OptionalExtension, Transaction};

use crate::model::{ElementType, Op};
use crate::node_index::{self, NodeEntry, NodeIndex, NodeIndexError, NodeIndexTx};

/// Current database schema version.
pub const SCHEMA_VERSION: i64 = 1;

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
    #[error(transparent)]
    NodeIndex(#[from] NodeIndexError),
}

/// The `meta` key holding the committed node-index generation.
const NODES_GENERATION: &str = "nodes_generation";

/// Tags packed into one string: `key \x1F value \x1E ...`. Both separators are control
/// characters that XML 1.0 does not allow in attribute values, so no tag can contain them.
#[must_use]
pub fn pack_tags(tags: &[(String, String)]) -> String {
    let mut s = String::with_capacity(tags.iter().map(|(k, v)| k.len() + v.len() + 2).sum());
    for (k, v) in tags {
        s.push_str(k);
        s.push('\x1F');
        s.push_str(v);
        s.push('\x1E');
    }
    s
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

/// Node refs (or relation members, as `id * 4 + type code`) as little-endian i64s.
#[must_use]
pub fn pack_refs(refs: impl IntoIterator<Item = i64>) -> Vec<u8> {
    refs.into_iter().flat_map(i64::to_le_bytes).collect()
}

/// Inverse of [`pack_refs`].
pub fn unpack_refs(b: &[u8]) -> impl Iterator<Item = i64> + '_ {
    b.chunks_exact(8).map(|c| {
        let mut a = [0u8; 8];
        a.copy_from_slice(c);
        i64::from_le_bytes(a)
    })
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
CREATE TABLE IF NOT EXISTS edits(
    etype INTEGER NOT NULL, eid INTEGER NOT NULL, version INTEGER NOT NULL,
    op INTEGER NOT NULL, changeset INTEGER NOT NULL, uid INTEGER NOT NULL, user TEXT NOT NULL,
    ts INTEGER NOT NULL, lat_e7 INTEGER, lon_e7 INTEGER, tags TEXT NOT NULL, refs BLOB,
    prev_version INTEGER, prev_ts INTEGER, prev_tags TEXT, prev_lat_e7 INTEGER, prev_lon_e7 INTEGER,
    PRIMARY KEY(etype, eid, version)) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS edits_ts ON edits(ts);
CREATE INDEX IF NOT EXISTS edits_uid ON edits(uid, ts);
CREATE TABLE IF NOT EXISTS elements(
    etype INTEGER NOT NULL, eid INTEGER NOT NULL, version INTEGER NOT NULL, ts INTEGER NOT NULL,
    visible INTEGER NOT NULL, lat_e7 INTEGER, lon_e7 INTEGER, tags TEXT NOT NULL, refs BLOB,
    PRIMARY KEY(etype, eid)) WITHOUT ROWID;
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
            Some(SCHEMA_VERSION) => {}
            Some(found) => {
                return Err(StoreError::Schema {
                    path: path.to_owned(),
                    found,
                })
            }
        }
        store.ensure_node_index()?;
        Ok(store)
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
        {
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
                    nodes.stage(id, NodeEntry::new(c, version))?;
                }
            }
        }
        let prepared = nodes.prepare()?;
        let generation = prepared
            .as_ref()
            .map_or(0, node_index::PreparedIndex::generation);
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

    /// The file-name prefix of this database's node-location index.
    #[must_use]
    pub fn node_index_prefix(&self) -> PathBuf {
        node_index::prefix_for(&self.path)
    }

    /// Opens the committed node-location index, the one API through which positions of nodes
    /// are read.
    ///
    /// # Errors
    /// On SQLite failure, or when the index file is missing or damaged.
    pub fn node_index(&self) -> Result<NodeIndex, StoreError> {
        // An ingest that commits between reading the generation and opening its file removes
        // the file just read; reading the generation again then names the new one.
        let mut attempt = 0;
        loop {
            let generation = read_generation(&self.conn).map_err(|e| self.map_err(e))?;
            match NodeIndex::open_generation(&self.node_index_prefix(), generation) {
                Ok(idx) => return Ok(idx),
                Err(e) if attempt >= 2 => return Err(e.into()),
                Err(_) => attempt += 1,
            }
        }
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
        Ok(IngestTx { tx, path })
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
}

fn read_generation(conn: &Connection) -> Result<u64, rusqlite::Error> {
    let v: Option<String> = conn
        .query_row(
            "SELECT value FROM meta WHERE key = ?1",
            [NODES_GENERATION],
            |r| r.get(0),
        )
        .optional()?;
    Ok(v.and_then(|v| v.parse().ok()).unwrap_or(0))
}

/// Previous state of an element, as stored before an edit replaced it.
#[derive(Debug, Clone, Default)]
pub struct Prev {
    pub version: i64,
    /// Unknown for untagged nodes, which only the node-location index holds.
    pub ts: Option<i64>,
    pub tags: String,
    pub lat_e7: Option<i32>,
    pub lon_e7: Option<i32>,
    pub refs: Option<Vec<u8>>,
}

/// One ingest's write transaction.
pub struct IngestTx<'a> {
    tx: Transaction<'a>,
    path: PathBuf,
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
        read_generation(&self.tx).map_err(|e| self.err(e))
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

    /// Inserts or refreshes a changeset's metadata.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn put_changeset(&self, cs: &crate::ingest::xml::RawChangeset) -> Result<(), StoreError> {
        let mut st = self
            .tx
            .prepare_cached(
                "INSERT OR REPLACE INTO changesets(id, uid, user, created_at, closed_at, min_lat, min_lon, max_lat, max_lon, num_changes, comment, editor, source)
                 VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13)",
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

    /// The latest stored state of an element.
    ///
    /// # Errors
    /// On SQLite failure.
    pub fn element(&self, t: ElementType, id: i64) -> Result<Option<Prev>, StoreError> {
        let mut st = self
            .tx
            .prepare_cached(
                "SELECT version, ts, tags, lat_e7, lon_e7, refs FROM elements WHERE etype = ?1 AND eid = ?2",
            )
            .map_err(|e| self.err(e))?;
        st.query_row(params![t.code(), id], |r| {
            Ok(Prev {
                version: r.get(0)?,
                ts: r.get(1)?,
                tags: r.get(2)?,
                lat_e7: r.get(3)?,
                lon_e7: r.get(4)?,
                refs: r.get(5)?,
            })
        })
        .optional()
        .map_err(|e| self.err(e))
    }

    /// Writes the latest state of an element. With `replace`, the caller checked the version is
    /// newer than the stored one; without it (a version 1 written without looking up the
    /// stored state), an existing row, which can only be as new or newer, is kept.
    ///
    /// # Errors
    /// On SQLite failure.
    #[allow(clippy::too_many_arguments, reason = "one column each")]
    pub fn put_element(
        &self,
        replace: bool,
        t: ElementType,
        id: i64,
        version: i64,
        ts: i64,
        visible: bool,
        pos: Option<(i32, i32)>,
        tags: &str,
        refs: Option<&[u8]>,
    ) -> Result<(), StoreError> {
        let mut st = self
            .tx
            .prepare_cached(if replace {
                "INSERT OR REPLACE INTO elements(etype, eid, version, ts, visible, lat_e7, lon_e7, tags, refs)
                 VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)"
            } else {
                "INSERT OR IGNORE INTO elements(etype, eid, version, ts, visible, lat_e7, lon_e7, tags, refs)
                 VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)"
            })
            .map_err(|e| self.err(e))?;
        st.execute(params![
            t.code(),
            id,
            version,
            ts,
            visible,
            pos.map(|p| p.0),
            pos.map(|p| p.1),
            tags,
            refs
        ])
        .map(|_| ())
        .map_err(|e| self.err(e))
    }

    /// Records one edit; returns false when that element version was already stored.
    ///
    /// # Errors
    /// On SQLite failure.
    #[allow(clippy::too_many_arguments, reason = "one column each")]
    pub fn put_edit(
        &self,
        t: ElementType,
        id: i64,
        version: i64,
        op: Op,
        changeset: i64,
        uid: i64,
        user: &str,
        ts: i64,
        pos: Option<(i32, i32)>,
        tags: &str,
        refs: Option<&[u8]>,
        prev: Option<&Prev>,
    ) -> Result<bool, StoreError> {
        let mut st = self
            .tx
            .prepare_cached(
                "INSERT OR IGNORE INTO edits(etype, eid, version, op, changeset, uid, user, ts, lat_e7, lon_e7, tags, refs,
                    prev_version, prev_ts, prev_tags, prev_lat_e7, prev_lon_e7)
                 VALUES(?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15, ?16, ?17)",
            )
            .map_err(|e| self.err(e))?;
        st.execute(params![
            t.code(),
            id,
            version,
            op.code(),
            changeset,
            uid,
            user,
            ts,
            pos.map(|p| p.0),
            pos.map(|p| p.1),
            tags,
            refs,
            prev.map(|p| p.version),
            prev.and_then(|p| p.ts),
            prev.map(|p| p.tags.as_str()),
            prev.and_then(|p| p.lat_e7),
            prev.and_then(|p| p.lon_e7),
        ])
        .map(|n| n > 0)
        .map_err(|e| self.err(e))
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

    /// Makes the ingest permanent.
    ///
    /// # Errors
    /// On SQLite failure (the ingest is then rolled back).
    pub fn commit(self) -> Result<(), StoreError> {
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

    /// A database from before the node-location index: node positions only in `elements`,
    /// no generation in `meta`. Opening it builds the index from them.
    #[test]
    fn positions_in_elements_are_moved_to_the_index_on_open() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("old.db");
        {
            let s = Store::open(&path).unwrap();
            s.conn()
                .execute_batch(
                    "DELETE FROM meta WHERE key = 'nodes_generation';
                     INSERT INTO elements VALUES(0, 7, 3, 0, 1, 452000000, -336000000, '', NULL);
                     INSERT INTO elements VALUES(0, 8, 1, 0, 0, NULL, NULL, '', NULL);
                     INSERT INTO elements VALUES(1, 7, 1, 0, 1, NULL, NULL, '', NULL);",
                )
                .unwrap();
        }
        let s = Store::open(&path).unwrap();
        let idx = s.node_index().unwrap();
        assert_eq!(idx.len(), 1);
        let e = idx.get(7).unwrap().unwrap();
        assert_eq!(
            (e.coord.lat_e7(), e.coord.lon_e7(), e.version),
            (452_000_000, -336_000_000, 3)
        );
        let generation: String = s
            .conn()
            .query_row(
                "SELECT value FROM meta WHERE key = 'nodes_generation'",
                [],
                |r| r.get(0),
            )
            .unwrap();
        assert_eq!(generation, "1");
        // Opened again: nothing more to do.
        drop(s);
        assert_eq!(Store::open(&path).unwrap().node_index().unwrap().len(), 1);
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
