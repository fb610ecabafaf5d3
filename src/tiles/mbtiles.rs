//! MBTiles 1.3 export: one SQLite file with a `metadata` table and a `tiles` table whose rows are
//! counted from the south (TMS), written to a temporary file and renamed into place when
//! complete, so a failed export never leaves a half-written tileset under the final name.

use std::path::{Path, PathBuf};

use rusqlite::{params, Connection};

use super::{TileError, TileId};

/// SQLite `application_id` registered for MBTiles ("MPBX").
const APPLICATION_ID: i32 = 0x4d50_4258;

/// An MBTiles file being written.
pub(super) struct MbTiles {
    conn: Connection,
    tmp: PathBuf,
    path: PathBuf,
}

impl MbTiles {
    /// Starts a new tileset at `path` (an existing file there is replaced on
    /// [`MbTiles::finish`]).
    pub(super) fn create(path: &Path) -> Result<Self, TileError> {
        let mut tmp_name = path.file_name().unwrap_or_default().to_os_string();
        tmp_name.push(".partial");
        let tmp = path.with_file_name(tmp_name);
        let err = |source| TileError::MbTiles {
            path: path.to_owned(),
            source,
        };
        if tmp.exists() {
            std::fs::remove_file(&tmp).map_err(|source| TileError::Io {
                path: tmp.clone(),
                source,
            })?;
        }
        let conn = Connection::open(&tmp).map_err(err)?;
        conn.pragma_update(None, "application_id", APPLICATION_ID)
            .map_err(err)?;
        conn.execute_batch(
            "CREATE TABLE metadata (name text, value text);
             CREATE UNIQUE INDEX name ON metadata (name);
             CREATE TABLE tiles (zoom_level integer, tile_column integer, tile_row integer, tile_data blob);
             CREATE UNIQUE INDEX tile_index ON tiles (zoom_level, tile_column, tile_row);
             BEGIN;",
        )
        .map_err(err)?;
        Ok(Self {
            conn,
            tmp,
            path: path.to_owned(),
        })
    }

    fn err(&self, source: rusqlite::Error) -> TileError {
        TileError::MbTiles {
            path: self.path.clone(),
            source,
        }
    }

    /// Stores one tile, its row flipped to TMS.
    pub(super) fn put(&self, tile: TileId, png: &[u8]) -> Result<(), TileError> {
        let mut st = self
            .conn
            .prepare_cached(
                "INSERT INTO tiles (zoom_level, tile_column, tile_row, tile_data) VALUES (?1, ?2, ?3, ?4)",
            )
            .map_err(|e| self.err(e))?;
        let row = i64::try_from(tile.tms_row()).unwrap_or(i64::MAX);
        st.execute(params![tile.z, tile.x, row, png])
            .map(|_| ())
            .map_err(|e| self.err(e))
    }

    /// Writes the metadata rows, commits and moves the file into place.
    pub(super) fn finish(self, metadata: &[(&str, String)]) -> Result<(), TileError> {
        {
            let mut st = self
                .conn
                .prepare("INSERT INTO metadata (name, value) VALUES (?1, ?2)")
                .map_err(|e| self.err(e))?;
            for (name, value) in metadata {
                st.execute(params![name, value]).map_err(|e| self.err(e))?;
            }
        }
        self.conn
            .execute_batch("COMMIT;")
            .map_err(|e| self.err(e))?;
        let Self { conn, tmp, path } = self;
        conn.close().map_err(|(_, source)| TileError::MbTiles {
            path: path.clone(),
            source,
        })?;
        std::fs::rename(&tmp, &path).map_err(|source| TileError::Io { path, source })
    }
}
