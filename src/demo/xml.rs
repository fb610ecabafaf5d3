//! Writing the scenario's files: OSM XML 0.6 snapshots, the changeset metadata dump and gzipped
//! osmChange files, with correct attribute escaping, 7-decimal coordinates and `Z` timestamps.
//! Written by hand through buffered writers because the output is large and regular.

use std::fs::File;
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};

use flate2::write::GzEncoder;
use flate2::Compression;

use super::people::User;
use super::world::{Bbox, ChangesetMeta, Node, Tags, Way, World};
use super::DemoError;
use crate::model::Op;

/// The `generator` attribute of every file.
pub(super) const GENERATOR: &str = "hexvigil-demo";

/// Writes `s` escaped for a double-quoted XML attribute. Characters XML 1.0 cannot carry
/// (other control characters) are dropped.
pub(super) fn escape<W: Write>(w: &mut W, s: &str) -> io::Result<()> {
    let mut start = 0;
    for (i, c) in s.char_indices() {
        let rep: Option<&str> = match c {
            '&' => Some("&amp;"),
            '<' => Some("&lt;"),
            '>' => Some("&gt;"),
            '"' => Some("&quot;"),
            '\'' => Some("&apos;"),
            '\t' => Some("&#9;"),
            '\n' => Some("&#10;"),
            '\r' => Some("&#13;"),
            c if (c as u32) < 0x20 => Some(""),
            _ => None,
        };
        if let Some(rep) = rep {
            w.write_all(&s.as_bytes()[start..i])?;
            w.write_all(rep.as_bytes())?;
            start = i + c.len_utf8();
        }
    }
    w.write_all(&s.as_bytes()[start..])
}

/// Writes 1e-7 degree units as a decimal with exactly 7 decimals.
fn write_e7<W: Write>(w: &mut W, v: i32) -> io::Result<()> {
    let sign = if v < 0 { "-" } else { "" };
    let a = v.unsigned_abs();
    write!(w, "{sign}{}.{:07}", a / 10_000_000, a % 10_000_000)
}

/// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's `days_from_civil`).
pub(super) fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y.rem_euclid(400);
    let (m, d) = (i64::from(m), i64::from(d));
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// Inverse of [`days_from_civil`] (H. Hinnant's `civil_from_days`).
pub(super) fn civil_from_days(z: i64) -> (i64, i64, i64) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    (yoe + era * 400 + i64::from(m <= 2), m, d)
}

/// `YYYY-MM-DD` of a day number.
pub(super) fn date_string(days: i64) -> String {
    let (y, m, d) = civil_from_days(days);
    format!("{y:04}-{m:02}-{d:02}")
}

/// Writes Unix seconds as ISO 8601 UTC, e.g. `2026-11-25T19:05:00Z`.
fn write_time<W: Write>(w: &mut W, secs: i64) -> io::Result<()> {
    let (y, m, d) = civil_from_days(secs.div_euclid(86_400));
    let s = secs.rem_euclid(86_400);
    write!(
        w,
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        s / 3600,
        s / 60 % 60,
        s % 60
    )
}

/// How an element is written.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Style {
    /// In a snapshot: `visible="true"`.
    Snapshot,
    /// In a `<create>` or `<modify>` block.
    Change,
    /// In a `<delete>` block: `visible="false"`, no tags or node list.
    Deleted,
}

fn write_head<W: Write>(
    w: &mut W,
    name: &str,
    id: i64,
    meta: &super::world::Meta,
    user: &User,
    style: Style,
) -> io::Result<()> {
    write!(
        w,
        "  <{name} id=\"{id}\" version=\"{}\" timestamp=\"",
        meta.version
    )?;
    write_time(w, meta.ts)?;
    write!(w, "\" uid=\"{}\" user=\"", user.uid)?;
    escape(w, &user.name)?;
    write!(w, "\" changeset=\"{}\"", meta.cs)?;
    match style {
        Style::Snapshot => w.write_all(b" visible=\"true\""),
        Style::Deleted => w.write_all(b" visible=\"false\""),
        Style::Change => Ok(()),
    }
}

fn write_tags<W: Write>(w: &mut W, tags: &Tags) -> io::Result<()> {
    for (k, v) in tags {
        w.write_all(b"    <tag k=\"")?;
        escape(w, k)?;
        w.write_all(b"\" v=\"")?;
        escape(w, v)?;
        w.write_all(b"\"/>\n")?;
    }
    Ok(())
}

fn write_node<W: Write>(
    w: &mut W,
    id: i64,
    n: &Node,
    user: &User,
    style: Style,
    coords: bool,
) -> io::Result<()> {
    write_head(w, "node", id, &n.meta, user, style)?;
    if coords {
        w.write_all(b" lat=\"")?;
        write_e7(w, n.lat)?;
        w.write_all(b"\" lon=\"")?;
        write_e7(w, n.lon)?;
        w.write_all(b"\"")?;
    }
    if style == Style::Deleted || n.tags.is_empty() {
        return w.write_all(b"/>\n");
    }
    w.write_all(b">\n")?;
    write_tags(w, &n.tags)?;
    w.write_all(b"  </node>\n")
}

fn write_way<W: Write>(w: &mut W, id: i64, way: &Way, user: &User, style: Style) -> io::Result<()> {
    write_head(w, "way", id, &way.meta, user, style)?;
    if style == Style::Deleted {
        return w.write_all(b"/>\n");
    }
    w.write_all(b">\n")?;
    for &n in &way.nodes {
        writeln!(w, "    <nd ref=\"{}\"/>", World::node_id(n))?;
    }
    write_tags(w, &way.tags)?;
    w.write_all(b"  </way>\n")
}

fn io_err(path: &Path) -> impl FnOnce(io::Error) -> DemoError + '_ {
    move |source| DemoError::Io {
        path: path.to_owned(),
        source,
    }
}

fn create(path: &Path) -> Result<BufWriter<File>, DemoError> {
    File::create(path)
        .map(|f| BufWriter::with_capacity(1 << 16, f))
        .map_err(io_err(path))
}

fn finish(path: &Path, w: BufWriter<File>) -> Result<(), DemoError> {
    w.into_inner()
        .map_err(|e| e.into_error())
        .map(drop)
        .map_err(io_err(path))
}

/// Writes the snapshot: bounds, then all nodes, ways and relations.
pub(super) fn write_snapshot(
    path: &Path,
    world: &World,
    users: &[User],
    bounds: Bbox,
) -> Result<(), DemoError> {
    let mut w = create(path)?;
    let body = |w: &mut BufWriter<File>| -> io::Result<()> {
        writeln!(w, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>")?;
        writeln!(w, "<osm version=\"0.6\" generator=\"{GENERATOR}\">")?;
        w.write_all(b"  <bounds minlat=\"")?;
        write_e7(w, bounds.min_lat)?;
        w.write_all(b"\" minlon=\"")?;
        write_e7(w, bounds.min_lon)?;
        w.write_all(b"\" maxlat=\"")?;
        write_e7(w, bounds.max_lat)?;
        w.write_all(b"\" maxlon=\"")?;
        write_e7(w, bounds.max_lon)?;
        w.write_all(b"\"/>\n")?;
        for (i, n) in (0u32..).zip(&world.nodes) {
            let user = &users[n.meta.user as usize];
            write_node(w, World::node_id(i), n, user, Style::Snapshot, true)?;
        }
        for (i, way) in (0u32..).zip(&world.ways) {
            let user = &users[way.meta.user as usize];
            write_way(w, World::way_id(i), way, user, Style::Snapshot)?;
        }
        for (i, r) in (0u32..).zip(&world.relations) {
            let user = &users[r.meta.user as usize];
            write_head(
                w,
                "relation",
                World::rel_id(i),
                &r.meta,
                user,
                Style::Snapshot,
            )?;
            w.write_all(b">\n")?;
            for &(way, role) in &r.members {
                write!(
                    w,
                    "    <member type=\"way\" ref=\"{}\" role=\"",
                    World::way_id(way)
                )?;
                escape(w, role)?;
                w.write_all(b"\"/>\n")?;
            }
            write_tags(w, &r.tags)?;
            w.write_all(b"  </relation>\n")?;
        }
        w.write_all(b"</osm>\n")
    };
    body(&mut w).map_err(io_err(path))?;
    finish(path, w)
}

/// Writes the changeset metadata dump, in the order given.
pub(super) fn write_changesets<'a>(
    path: &Path,
    changesets: impl Iterator<Item = &'a ChangesetMeta>,
    users: &[User],
) -> Result<(), DemoError> {
    let mut w = create(path)?;
    let body = |w: &mut BufWriter<File>| -> io::Result<()> {
        writeln!(w, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>")?;
        writeln!(w, "<osm version=\"0.6\" generator=\"{GENERATOR}\">")?;
        for cs in changesets {
            let user = &users[cs.user as usize];
            write!(w, "  <changeset id=\"{}\" created_at=\"", cs.id)?;
            write_time(w, cs.created_at)?;
            w.write_all(b"\" closed_at=\"")?;
            write_time(w, cs.closed_at)?;
            write!(w, "\" open=\"false\" user=\"")?;
            escape(w, &user.name)?;
            write!(w, "\" uid=\"{}\"", user.uid)?;
            if let Some(b) = cs.bbox {
                w.write_all(b" min_lat=\"")?;
                write_e7(w, b.min_lat)?;
                w.write_all(b"\" min_lon=\"")?;
                write_e7(w, b.min_lon)?;
                w.write_all(b"\" max_lat=\"")?;
                write_e7(w, b.max_lat)?;
                w.write_all(b"\" max_lon=\"")?;
                write_e7(w, b.max_lon)?;
                w.write_all(b"\"")?;
            }
            write!(
                w,
                " comments_count=\"0\" num_changes=\"{}\"",
                cs.num_changes
            )?;
            if cs.tags.is_empty() {
                w.write_all(b"/>\n")?;
                continue;
            }
            w.write_all(b">\n")?;
            for (k, v) in &cs.tags {
                w.write_all(b"    <tag k=\"")?;
                escape(w, k)?;
                w.write_all(b"\" v=\"")?;
                escape(w, v)?;
                w.write_all(b"\"/>\n")?;
            }
            w.write_all(b"  </changeset>\n")?;
        }
        w.write_all(b"</osm>\n")
    };
    body(&mut w).map_err(io_err(path))?;
    finish(path, w)
}

/// One day's gzipped osmChange file. Consecutive edits with the same operation share a block.
pub(super) struct DiffWriter {
    path: PathBuf,
    w: BufWriter<GzEncoder<File>>,
    block: Option<Op>,
}

impl DiffWriter {
    /// Creates the file and writes the header.
    pub fn create(path: &Path) -> Result<Self, DemoError> {
        let f = File::create(path).map_err(io_err(path))?;
        // Fast compression: the files are rewritten on every demo run and the ratio hardly
        // differs for this repetitive XML.
        let mut w = BufWriter::with_capacity(1 << 16, GzEncoder::new(f, Compression::fast()));
        (|| -> io::Result<()> {
            writeln!(w, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>")?;
            writeln!(w, "<osmChange version=\"0.6\" generator=\"{GENERATOR}\">")
        })()
        .map_err(io_err(path))?;
        Ok(Self {
            path: path.to_owned(),
            w,
            block: None,
        })
    }

    fn open_block(&mut self, op: Op) -> io::Result<()> {
        if self.block == Some(op) {
            return Ok(());
        }
        if let Some(prev) = self.block {
            writeln!(self.w, " </{}>", prev.name())?;
        }
        writeln!(self.w, " <{}>", op.name())?;
        self.block = Some(op);
        Ok(())
    }

    fn style(op: Op) -> Style {
        if op == Op::Delete {
            Style::Deleted
        } else {
            Style::Change
        }
    }

    /// Writes a node edit; `coords` false omits lat/lon (only meaningful for deletions).
    pub fn node(
        &mut self,
        op: Op,
        id: i64,
        n: &Node,
        user: &User,
        coords: bool,
    ) -> Result<(), DemoError> {
        self.open_block(op)
            .and_then(|()| write_node(&mut self.w, id, n, user, Self::style(op), coords))
            .map_err(io_err(&self.path))
    }

    /// Writes a way edit.
    pub fn way(&mut self, op: Op, id: i64, way: &Way, user: &User) -> Result<(), DemoError> {
        self.open_block(op)
            .and_then(|()| write_way(&mut self.w, id, way, user, Self::style(op)))
            .map_err(io_err(&self.path))
    }

    /// Closes the last block and the document and flushes the gzip stream.
    pub fn finish(mut self) -> Result<(), DemoError> {
        let path = self.path;
        (|| -> io::Result<()> {
            if let Some(prev) = self.block {
                writeln!(self.w, " </{}>", prev.name())?;
            }
            writeln!(self.w, "</osmChange>")?;
            let gz = self.w.into_inner().map_err(|e| e.into_error())?;
            gz.finish().map(drop)
        })()
        .map_err(io_err(&path))
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn escapes_attribute_text() {
        let mut out = Vec::new();
        escape(&mut out, "a&b<c>\"d'e\tf\ng\u{1}h é").unwrap();
        assert_eq!(
            String::from_utf8(out).unwrap(),
            "a&amp;b&lt;c&gt;&quot;d&apos;e&#9;f&#10;gh é"
        );
    }

    #[test]
    fn coordinates_have_seven_decimals() {
        let mut out = Vec::new();
        write_e7(&mut out, -336_000_005).unwrap();
        out.push(b' ');
        write_e7(&mut out, 452_000_000).unwrap();
        out.push(b' ');
        write_e7(&mut out, -5).unwrap();
        assert_eq!(
            String::from_utf8(out).unwrap(),
            "-33.6000005 45.2000000 -0.0000005"
        );
    }

    #[test]
    fn calendar_matches_chrono() {
        use chrono::{Datelike, NaiveDate, Weekday};
        for (y, m, d) in [
            (1970, 1, 1),
            (2026, 8, 24),
            (2026, 11, 29),
            (2024, 2, 29),
            (2000, 3, 1),
        ] {
            let days = days_from_civil(y, m, d);
            let nd = NaiveDate::from_ymd_opt(i32::try_from(y).unwrap(), m, d).unwrap();
            let epoch = NaiveDate::from_ymd_opt(1970, 1, 1).unwrap();
            assert_eq!(days, (nd - epoch).num_days());
            assert_eq!(civil_from_days(days), (y, i64::from(m), i64::from(d)));
        }
        let monday = NaiveDate::from_ymd_opt(2026, 8, 24).unwrap();
        assert_eq!(monday.weekday(), Weekday::Mon);
        let mut out = Vec::new();
        write_time(
            &mut out,
            days_from_civil(2026, 11, 25) * 86_400 + 19 * 3600 + 5 * 60 + 7,
        )
        .unwrap();
        assert_eq!(String::from_utf8(out).unwrap(), "2026-11-25T19:05:07Z");
    }
}
