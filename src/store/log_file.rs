//! The edit log's blocks ([`super::edit_log`]) in one append-only file beside the database,
//! `<db>.edits`, while the database's `edit_blocks` table indexes them: each row holds a
//! block's time span, its edit count, and where its bytes are (offset, length, CRC-32).
//!
//! Keeping the payloads out of SQLite writes them once: inside the database they went to the
//! write-ahead log first and were copied into the database file at the checkpoint, which cost
//! an ingest more than the file write itself.
//!
//! Crash safety: an ingest appends after the committed end (the end of the last block the
//! database lists), syncs the file, and only then commits the rows naming the new blocks. A
//! failed or killed ingest leaves bytes after the committed end that no row names; the next
//! ingest, holding the database's write lock, cuts them off before it appends. Readers only read
//! blocks their snapshot of the database lists, which lie before any end a later ingest cuts
//! at, so a report can run during an ingest. The file only grows: nothing removes blocks.

use std::fs::{File, OpenOptions};
use std::os::unix::fs::FileExt;
use std::path::{Path, PathBuf};

/// The edit-log file of a database.
#[must_use]
pub fn path_for(db: &Path) -> PathBuf {
    let mut s = db.as_os_str().to_owned();
    s.push(".edits");
    PathBuf::from(s)
}

/// Where a block lies in the file, as the database records it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Extent {
    /// The block's row id (its place in the log).
    pub id: i64,
    pub offset: u64,
    pub len: u64,
    /// CRC-32 (IEEE) of the block's bytes.
    pub crc: u32,
}

impl Extent {
    /// The byte after the block.
    #[must_use]
    pub const fn end(&self) -> u64 {
        self.offset + self.len
    }
}

/// The edit-log file is missing, shorter than the database says, damaged, or unreadable.
#[derive(Debug, thiserror::Error)]
pub enum LogFileError {
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(
        "{path}: the file is {len} bytes but the database lists edit blocks up to byte {end}: \
         it is missing or truncated (it belongs beside the database and must be copied with it)"
    )]
    Short { path: PathBuf, len: u64, end: u64 },
    #[error(
        "{path}: edit block {id} at byte {offset} ({len} bytes) does not match its checksum: \
         the file is damaged"
    )]
    Checksum {
        path: PathBuf,
        id: i64,
        offset: u64,
        len: u64,
    },
}

fn io(path: &Path) -> impl Fn(std::io::Error) -> LogFileError + '_ {
    move |source| LogFileError::Io {
        path: path.to_owned(),
        source,
    }
}

/// The file's length, 0 when it does not exist.
fn length(path: &Path) -> Result<u64, LogFileError> {
    match std::fs::metadata(path) {
        Ok(m) => Ok(m.len()),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(0),
        Err(e) => Err(io(path)(e)),
    }
}

/// Checks that the file holds at least the committed blocks (`end` bytes).
///
/// # Errors
/// [`LogFileError::Short`] when it is missing or shorter; an I/O error.
pub fn check(path: &Path, end: u64) -> Result<(), LogFileError> {
    let len = length(path)?;
    if len < end {
        return Err(LogFileError::Short {
            path: path.to_owned(),
            len,
            end,
        });
    }
    Ok(())
}

/// Reads committed blocks.
#[derive(Debug)]
pub struct LogReader {
    path: PathBuf,
    file: File,
    buf: Vec<u8>,
}

impl LogReader {
    /// Opens the file for reading.
    ///
    /// # Errors
    /// When it cannot be opened (a missing file is [`LogFileError::Short`]).
    pub fn open(path: &Path, end: u64) -> Result<Self, LogFileError> {
        check(path, end)?;
        let file = File::open(path).map_err(io(path))?;
        Ok(Self {
            path: path.to_owned(),
            file,
            buf: Vec::new(),
        })
    }

    /// A block's bytes, checked against its checksum.
    ///
    /// # Errors
    /// On a read error, a file too short, or a checksum mismatch.
    pub fn read(&mut self, e: &Extent) -> Result<&[u8], LogFileError> {
        let len = usize::try_from(e.len).map_err(|_| self.checksum(e))?;
        self.buf.resize(len, 0);
        self.file
            .read_exact_at(&mut self.buf, e.offset)
            .map_err(|source| {
                if source.kind() == std::io::ErrorKind::UnexpectedEof {
                    LogFileError::Short {
                        path: self.path.clone(),
                        len: length(&self.path).unwrap_or(0),
                        end: e.end(),
                    }
                } else {
                    io(&self.path)(source)
                }
            })?;
        if crc32fast::hash(&self.buf) != e.crc {
            return Err(self.checksum(e));
        }
        Ok(&self.buf)
    }

    fn checksum(&self, e: &Extent) -> LogFileError {
        LogFileError::Checksum {
            path: self.path.clone(),
            id: e.id,
            offset: e.offset,
            len: e.len,
        }
    }

    /// The file.
    #[must_use]
    pub fn path(&self) -> &Path {
        &self.path
    }
}

/// Appends blocks for one write transaction. Create it only while holding the database's write
/// lock.
#[derive(Debug)]
pub struct LogAppender {
    path: PathBuf,
    file: File,
    end: u64,
    created: bool,
}

impl LogAppender {
    /// Opens (creating if needed) the file to append after `committed_end`, cutting off what a
    /// failed ingest left after it.
    ///
    /// # Errors
    /// When the file is shorter than `committed_end`, or on an I/O error.
    pub fn open(path: &Path, committed_end: u64) -> Result<Self, LogFileError> {
        let created = !path.exists();
        check(path, committed_end)?;
        let file = OpenOptions::new()
            .read(true)
            .write(true)
            .create(true)
            .truncate(false)
            .open(path)
            .map_err(io(path))?;
        if length(path)? > committed_end {
            file.set_len(committed_end).map_err(io(path))?;
        }
        Ok(Self {
            path: path.to_owned(),
            file,
            end: committed_end,
            created,
        })
    }

    /// Writes a block after the previous one; returns its offset and checksum.
    ///
    /// # Errors
    /// On an I/O error.
    pub fn append(&mut self, data: &[u8]) -> Result<(u64, u32), LogFileError> {
        let offset = self.end;
        self.file
            .write_all_at(data, offset)
            .map_err(io(&self.path))?;
        self.end += data.len() as u64;
        Ok((offset, crc32fast::hash(data)))
    }

    /// Makes the appended blocks durable (and a new file's name, by syncing its folder); call
    /// before committing the rows that name them.
    ///
    /// # Errors
    /// On an I/O error.
    pub fn sync(&mut self) -> Result<(), LogFileError> {
        self.file.sync_data().map_err(io(&self.path))?;
        if self.created {
            crate::generations::sync_parent(&self.path).map_err(|e| LogFileError::Io {
                path: e.path,
                source: e.source,
            })?;
            self.created = false;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn extent(id: i64, offset: u64, data: &[u8]) -> Extent {
        Extent {
            id,
            offset,
            len: data.len() as u64,
            crc: crc32fast::hash(data),
        }
    }

    #[test]
    fn the_checksum_is_the_standard_crc32() {
        // Source: "Catalogue of parametrised CRC algorithms" (R. Ehrenkranz / G. Cook),
        // CRC-32/ISO-HDLC check value.
        assert_eq!(crc32fast::hash(b"123456789"), 0xCBF4_3926);
    }

    #[test]
    fn appended_blocks_read_back_and_a_failed_tail_is_cut() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("r.db.edits");
        let mut a = LogAppender::open(&p, 0).unwrap();
        assert_eq!(a.append(b"first").unwrap().0, 0);
        let (off, crc) = a.append(b"second block").unwrap();
        assert_eq!(off, 5);
        a.sync().unwrap();
        // An ingest that wrote a block and then failed: its bytes stay until the next one.
        let mut failed = LogAppender::open(&p, 17).unwrap();
        failed.append(b"never committed").unwrap();
        assert_eq!(std::fs::metadata(&p).unwrap().len(), 32);
        let mut next = LogAppender::open(&p, 17).unwrap();
        assert_eq!(std::fs::metadata(&p).unwrap().len(), 17, "the tail is cut");
        assert_eq!(next.append(b"third").unwrap().0, 17);
        next.sync().unwrap();

        let mut r = LogReader::open(&p, 22).unwrap();
        let e = Extent {
            id: 2,
            offset: off,
            len: 12,
            crc,
        };
        assert_eq!(r.read(&e).unwrap(), b"second block");
        assert_eq!(r.read(&extent(3, 17, b"third")).unwrap(), b"third");
        assert_eq!(r.read(&extent(1, 0, b"first")).unwrap(), b"first");
    }

    #[test]
    fn a_missing_short_or_damaged_file_is_refused_naming_it() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("r.db.edits");
        let err = LogReader::open(&p, 10).unwrap_err().to_string();
        assert!(
            err.contains("r.db.edits") && err.contains("up to byte 10"),
            "{err}"
        );
        assert!(
            LogAppender::open(&p, 10).is_err(),
            "an appender refuses too"
        );
        assert!(!p.exists(), "and creates nothing");

        std::fs::write(&p, b"abcdefgh").unwrap();
        let mut r = LogReader::open(&p, 8).unwrap();
        let mut e = extent(4, 2, b"cdef");
        assert_eq!(r.read(&e).unwrap(), b"cdef");
        e.crc ^= 1;
        let err = r.read(&e).unwrap_err().to_string();
        assert!(
            err.contains("r.db.edits") && err.contains("edit block 4 at byte 2"),
            "{err}"
        );
        let err = r.read(&extent(5, 6, b"ghij")).unwrap_err().to_string();
        assert!(err.contains("up to byte 10"), "{err}");
    }
}
