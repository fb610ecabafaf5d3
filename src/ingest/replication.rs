//! Replication folders: the `AAA/BBB/CCC.osc.gz` layout of OSM's minutely, hourly and daily
//! diffs, with a `CCC.state.txt` beside each diff naming its sequence number and timestamp.
//!
//! A folder given to `ingest` that holds such files is one input: its diffs are read in
//! sequence order, optionally only those in a [`SequenceRange`], and missing sequence numbers
//! are reported as gaps (not fatal: the rest is ingested). The sequence number is
//! `AAA * 1 000 000 + BBB * 1 000 + CCC`.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::str::FromStr;

use super::IngestError;

/// An inclusive range of sequence numbers, from `--sequences 4100-4200` (or one number).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SequenceRange {
    pub first: u64,
    pub last: u64,
}

impl SequenceRange {
    /// Whether `seq` lies in the range.
    #[must_use]
    pub const fn contains(&self, seq: u64) -> bool {
        self.first <= seq && seq <= self.last
    }
}

impl FromStr for SequenceRange {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let num = |v: &str| {
            v.trim()
                .parse::<u64>()
                .map_err(|_| format!("'{v}' is not a sequence number"))
        };
        let (first, last) = match s.split_once('-') {
            Some((a, b)) => (num(a)?, num(b)?),
            None => (num(s)?, num(s)?),
        };
        if first > last || last > MAX_SEQUENCE {
            return Err(format!(
                "'{s}' is not a range like 4100-4200 (first <= last <= {MAX_SEQUENCE})"
            ));
        }
        Ok(Self { first, last })
    }
}

/// Longest accepted state file; real ones are about 100 bytes.
const MAX_STATE_BYTES: u64 = 4096;

/// The largest sequence number the three-level layout can hold.
const MAX_SEQUENCE: u64 = 999_999_999;

/// What was found in one replication folder and what was selected from it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Replication {
    /// The folder holding the `AAA` level.
    pub root: PathBuf,
    /// The selected diffs, in sequence order.
    pub files: Vec<(u64, PathBuf)>,
    /// Timestamps (Unix seconds) from the state files of the first and last selected diff.
    pub first_time: Option<i64>,
    pub last_time: Option<i64>,
    /// Missing sequence numbers as inclusive ranges: between selected diffs, and at the ends of
    /// a requested range.
    pub gaps: Vec<(u64, u64)>,
}

impl Replication {
    /// First and last selected sequence numbers.
    #[must_use]
    pub fn span(&self) -> Option<(u64, u64)> {
        Some((self.files.first()?.0, self.files.last()?.0))
    }
}

fn three_digits(s: &str) -> Option<u64> {
    (s.len() == 3 && s.bytes().all(|b| b.is_ascii_digit()))
        .then(|| s.parse().ok())
        .flatten()
}

/// The replication root and sequence number of a diff at `AAA/BBB/CCC.osc[.gz|.bz2]`.
#[must_use]
pub fn sequence_of(path: &Path) -> Option<(PathBuf, u64)> {
    let name = path.file_name()?.to_str()?;
    let stem = [".osc.gz", ".osc.bz2", ".osc"]
        .iter()
        .find_map(|ext| name.strip_suffix(ext))?;
    let c = three_digits(stem)?;
    let dir_b = path.parent()?;
    let b = three_digits(dir_b.file_name()?.to_str()?)?;
    let dir_a = dir_b.parent()?;
    let a = three_digits(dir_a.file_name()?.to_str()?)?;
    Some((dir_a.parent()?.to_owned(), a * 1_000_000 + b * 1_000 + c))
}

/// The state file beside a diff: `CCC.state.txt` for `CCC.osc.gz`.
#[must_use]
pub fn state_path(diff: &Path) -> Option<PathBuf> {
    let name = diff.file_name()?.to_str()?;
    let stem = name.split('.').next()?;
    Some(diff.with_file_name(format!("{stem}.state.txt")))
}

/// A state file's content.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct State {
    pub sequence: u64,
    pub timestamp: i64,
}

/// Reads a `state.txt` (Java properties: `key=value` lines, `#` comments, `\:` escapes).
///
/// # Errors
/// When the file cannot be read or lacks a valid `sequenceNumber` or `timestamp`.
pub fn read_state(path: &Path) -> Result<State, IngestError> {
    let io = |source| IngestError::Io {
        path: path.to_owned(),
        source,
    };
    let fmt = |message: String| IngestError::Format {
        path: path.to_owned(),
        message,
    };
    let mut text = String::new();
    std::fs::File::open(path)
        .map_err(io)?
        .take(MAX_STATE_BYTES + 1)
        .read_to_string(&mut text)
        .map_err(io)?;
    if text.len() as u64 > MAX_STATE_BYTES {
        return Err(fmt(format!(
            "a state file of more than {MAX_STATE_BYTES} bytes is not a replication state"
        )));
    }
    let (mut sequence, mut timestamp) = (None, None);
    for (n, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let Some((k, v)) = line.split_once('=') else {
            return Err(fmt(format!("line {}: expected key=value", n + 1)));
        };
        let v = v.trim().replace('\\', "");
        match k.trim() {
            "sequenceNumber" => {
                sequence = Some(v.parse::<u64>().map_err(|_| {
                    fmt(format!(
                        "line {}: sequenceNumber '{v}' is not a number",
                        n + 1
                    ))
                })?);
            }
            "timestamp" => {
                timestamp = Some(super::xml::parse_timestamp(&v).ok_or_else(|| {
                    fmt(format!(
                        "line {}: timestamp '{v}' is not an ISO 8601 UTC time",
                        n + 1
                    ))
                })?);
            }
            _ => {}
        }
    }
    match (sequence, timestamp) {
        (Some(sequence), Some(timestamp)) => Ok(State {
            sequence,
            timestamp,
        }),
        _ => Err(fmt(
            "a state file needs sequenceNumber and timestamp".to_owned()
        )),
    }
}

/// Groups diffs found in folders into replication folders, keeps those in `range`, reads their
/// state files and finds the gaps. Returns the replication folders and the paths that are not
/// replication diffs.
///
/// # Errors
/// When a state file is unreadable, malformed, or names another sequence than its diff.
pub fn select(
    found: Vec<PathBuf>,
    range: Option<SequenceRange>,
) -> Result<(Vec<Replication>, Vec<PathBuf>), IngestError> {
    let mut others = Vec::new();
    let mut by_root: std::collections::BTreeMap<PathBuf, Vec<(u64, PathBuf)>> =
        std::collections::BTreeMap::new();
    for p in found {
        match sequence_of(&p) {
            Some((root, seq)) => by_root.entry(root).or_default().push((seq, p)),
            None => others.push(p),
        }
    }
    let mut out = Vec::new();
    for (root, mut files) in by_root {
        files.sort();
        // The same sequence twice (say 100.osc and 100.osc.gz) keeps the first by path.
        files.dedup_by_key(|f| f.0);
        files.retain(|f| range.is_none_or(|r| r.contains(f.0)));
        let mut gaps = Vec::new();
        let mut expect = range.map(|r| r.first);
        for &(seq, _) in &files {
            if let Some(e) = expect {
                if seq > e {
                    gaps.push((e, seq - 1));
                }
            }
            expect = Some(seq + 1);
        }
        if let (Some(r), Some(e)) = (range, expect) {
            if e <= r.last {
                gaps.push((e, r.last));
            }
        }
        let mut times = Vec::with_capacity(2);
        for (seq, diff) in [files.first(), files.last()].into_iter().flatten() {
            times.push(match state_path(diff).filter(|s| s.exists()) {
                Some(sp) => {
                    let st = read_state(&sp)?;
                    if st.sequence != *seq {
                        return Err(IngestError::Format {
                            path: sp,
                            message: format!(
                                "sequenceNumber={} does not match its diff's place in the folder ({seq})",
                                st.sequence
                            ),
                        });
                    }
                    Some(st.timestamp)
                }
                None => None,
            });
        }
        out.push(Replication {
            root,
            first_time: times.first().copied().flatten(),
            last_time: times.last().copied().flatten(),
            files,
            gaps,
        });
    }
    Ok((out, others))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sequence_numbers_from_paths() {
        assert_eq!(
            sequence_of(Path::new("r/minute/004/123/456.osc.gz")),
            Some((PathBuf::from("r/minute"), 4_123_456))
        );
        assert_eq!(sequence_of(Path::new("r/004/123/45.osc.gz")), None);
        assert_eq!(sequence_of(Path::new("r/004/12x/456.osc")), None);
        assert_eq!(sequence_of(Path::new("r/004/123/456.osm")), None);
        assert_eq!(
            state_path(Path::new("a/000/001/002.osc.gz")),
            Some(PathBuf::from("a/000/001/002.state.txt"))
        );
    }

    #[test]
    fn ranges_parse() {
        assert_eq!(
            "4100-4200".parse::<SequenceRange>(),
            Ok(SequenceRange {
                first: 4100,
                last: 4200
            })
        );
        assert_eq!(
            "7".parse::<SequenceRange>(),
            Ok(SequenceRange { first: 7, last: 7 })
        );
        assert!("4200-4100".parse::<SequenceRange>().is_err());
        assert!("a-b".parse::<SequenceRange>().is_err());
    }

    #[test]
    fn gaps_inside_and_at_the_ends_of_a_range() {
        let files: Vec<PathBuf> = [1, 2, 5, 6, 9]
            .iter()
            .map(|s| PathBuf::from(format!("r/000/000/{s:03}.osc.gz")))
            .chain([PathBuf::from("r/other.osm")])
            .collect();
        let (reps, others) = select(files.clone(), None).unwrap();
        assert_eq!(others, vec![PathBuf::from("r/other.osm")]);
        assert_eq!(reps[0].gaps, vec![(3, 4), (7, 8)]);
        assert_eq!(reps[0].span(), Some((1, 9)));
        let (reps, _) = select(files, Some(SequenceRange { first: 0, last: 6 })).unwrap();
        assert_eq!(reps[0].gaps, vec![(0, 0), (3, 4)]);
        assert_eq!(reps[0].files.len(), 4);
    }

    #[test]
    fn state_files() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("s.state.txt");
        // Source: the layout osmosis writes (escaped colons, a comment line).
        std::fs::write(
            &p,
            "#Sat Nov 28 10:00:02 UTC 2026\nsequenceNumber=4100\ntimestamp=2026-11-28T10\\:00\\:00Z\n",
        )
        .unwrap();
        let st = read_state(&p).unwrap();
        assert_eq!(st.sequence, 4100);
        assert_eq!(
            Some(st.timestamp),
            super::super::xml::parse_timestamp("2026-11-28T10:00:00Z")
        );
        std::fs::write(&p, "sequenceNumber=x\n").unwrap();
        assert!(read_state(&p).unwrap_err().to_string().contains("line 1"));
    }
}
