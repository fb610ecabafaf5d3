//! Files beside the database that an ingest replaces whole: the node-location index
//! ([`crate::node_index`]) and the element state ([`crate::element_state`]).
//!
//! Each is one file per generation, `<prefix>.<g>`, the committed generation `g` being recorded
//! in the database's `meta` table. An ingest never changes that file: it writes generation
//! `g+1` as a temporary file, syncs it, renames it into place and syncs the folder, and only
//! then records `g+1` inside its SQLite transaction. So if the ingest fails or is killed before
//! the SQLite commit, the database still names `g`, whose file is untouched; after the commit it
//! names `g+1`, whose file is complete. Files of other generations are leftovers, removed by the
//! next ingest, which holds the database's write lock. Generation 0 is the empty file, and has
//! no file.

use std::ffi::OsStr;
use std::fs::File;
use std::path::{Path, PathBuf};

/// A file that could not be listed, renamed, synced or removed.
#[derive(Debug, thiserror::Error)]
#[error("{path}: {source}")]
pub struct GenerationError {
    pub path: PathBuf,
    pub source: std::io::Error,
}

fn err(path: &Path) -> impl Fn(std::io::Error) -> GenerationError + '_ {
    move |source| GenerationError {
        path: path.to_owned(),
        source,
    }
}

/// The file holding generation `generation` of the files starting with `prefix`.
#[must_use]
pub fn path(prefix: &Path, generation: u64) -> PathBuf {
    let mut s = prefix.as_os_str().to_owned();
    s.push(format!(".{generation}"));
    PathBuf::from(s)
}

/// A temporary file of the ingest writing the generation after `committed`
/// (`<prefix>.<g+1>.<what><seq>.tmp`), removed with the other leftovers should it survive.
#[must_use]
pub fn temp_path(prefix: &Path, committed: u64, what: &str, seq: u32) -> PathBuf {
    let mut s = path(prefix, committed + 1).into_os_string();
    s.push(format!(".{what}{seq}.tmp"));
    PathBuf::from(s)
}

/// Renames a complete, synced temporary file to generation `committed + 1` and syncs the
/// folder, so that the rename survives a power cut; the caller then records the generation.
///
/// # Errors
/// When the rename or the folder's sync fails.
pub fn publish(temp: &Path, prefix: &Path, committed: u64) -> Result<Prepared, GenerationError> {
    let generation = committed + 1;
    let target = path(prefix, generation);
    std::fs::rename(temp, &target).map_err(err(&target))?;
    sync_parent(&target)?;
    Ok(Prepared {
        prefix: prefix.to_owned(),
        previous: committed,
        generation,
    })
}

/// Syncs the folder holding `p`, so that a new or renamed entry survives a power cut.
///
/// # Errors
/// When the folder cannot be opened or synced.
pub fn sync_parent(p: &Path) -> Result<(), GenerationError> {
    let dir = parent(p);
    File::open(dir).and_then(|d| d.sync_all()).map_err(err(dir))
}

fn parent(p: &Path) -> &Path {
    p.parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."))
}

/// Removes every file starting with `prefix` except generation `keep`: earlier generations and
/// temporary files of interrupted or superseded ingests. Call only while holding the database's
/// write lock.
///
/// # Errors
/// When the folder cannot be listed or a file cannot be removed.
pub fn remove_others(prefix: &Path, keep: u64) -> Result<(), GenerationError> {
    // Compared by file name: a bare prefix (`region.db.nodes`, a database in the working
    // folder) lists its folder as `.`, whose entries read `./region.db.nodes.1`.
    let keep_name = path(prefix, keep).file_name().map(OsStr::to_owned);
    let dir = parent(prefix);
    let Some(stem) = prefix
        .file_name()
        .map(|n| format!("{}.", n.to_string_lossy()))
    else {
        return Ok(());
    };
    for entry in std::fs::read_dir(dir).map_err(err(dir))? {
        let entry = entry.map_err(err(dir))?;
        let name = entry.file_name().to_string_lossy().into_owned();
        let Some(rest) = name.strip_prefix(&stem) else {
            continue;
        };
        // Only our own names: a generation number, optionally followed by a temporary suffix.
        let generation = rest.split('.').next().unwrap_or("");
        if generation.is_empty() || !generation.bytes().all(|b| b.is_ascii_digit()) {
            continue;
        }
        if Some(entry.file_name()) != keep_name {
            let p = entry.path();
            std::fs::remove_file(&p).map_err(err(&p))?;
        }
    }
    Ok(())
}

/// A new generation written and renamed into place, waiting for the database commit.
#[derive(Debug)]
pub struct Prepared {
    prefix: PathBuf,
    previous: u64,
    generation: u64,
}

impl Prepared {
    /// The generation to record in the database transaction.
    #[must_use]
    pub const fn generation(&self) -> u64 {
        self.generation
    }

    /// After the database commit: removes the previous generation's file (best effort; a
    /// leftover is removed by the next ingest).
    pub fn committed(self) {
        if self.previous > 0 {
            let _ = std::fs::remove_file(path(&self.prefix, self.previous));
        }
    }
}
