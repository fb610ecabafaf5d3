//! Streaming reader for OSM XML: changeset metadata (`<osm><changeset>`), osmChange
//! (`<osmChange><create|modify|delete>`) and snapshots (`<osm><node|way|relation>`).
//!
//! One reused event buffer and one reused element; elements are handed to an [`OsmSink`] as
//! they close, so memory does not grow with the file. Broken XML or a missing/invalid id is
//! fatal for the file; an odd but valid element (a node without coordinates in a snapshot) is
//! skipped and counted.

use std::io::BufRead;

use quick_xml::events::{BytesStart, Event};
use quick_xml::Reader;

use crate::model::{Coord, ElementType, Op};

/// Longest tag key or value accepted, in bytes (the OSM API allows 255 characters, which is at
/// most 1020 bytes of UTF-8).
pub const MAX_TAG_BYTES: usize = 1024;
/// Most tags accepted on one element or changeset.
pub const MAX_TAGS: usize = 5_000;
/// Most node references in one way (the OSM API allows 2 000).
pub const MAX_WAY_NODES: usize = 2_000;
/// Most members in one relation (the OSM API allows 32 000).
pub const MAX_MEMBERS: usize = 32_000;

/// What went wrong at a place in the XML text. The caller adds the file name and turns the
/// byte offset into a line and column.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ParseError {
    /// Byte offset in the (decompressed) XML text.
    pub offset: u64,
    /// What was expected or found, in words.
    pub message: String,
}

/// Errors a sink may raise while receiving data (for example a database error).
pub type SinkError = Box<dyn std::error::Error + Send + Sync>;

/// Failure of [`read_osm`]: the text was bad, or the sink refused.
#[derive(Debug)]
pub enum ReadError {
    Parse(ParseError),
    Sink(SinkError),
}

/// An OSM element as read (one version of it).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RawElement {
    pub etype: Option<ElementType>,
    pub id: i64,
    pub version: i64,
    /// Unix seconds; 0 when absent.
    pub timestamp: i64,
    pub changeset: i64,
    pub uid: i64,
    pub user: String,
    pub visible: bool,
    pub coord: Option<Coord>,
    pub tags: Vec<(String, String)>,
    /// Node ids of a way.
    pub refs: Vec<i64>,
    /// Node and way members of a relation (relation members are not used for placing).
    pub members: Vec<(ElementType, i64)>,
}

impl RawElement {
    fn clear(&mut self) {
        self.etype = None;
        self.id = 0;
        self.version = 0;
        self.timestamp = 0;
        self.changeset = 0;
        self.uid = 0;
        self.user.clear();
        self.visible = true;
        self.coord = None;
        self.tags.clear();
        self.refs.clear();
        self.members.clear();
    }

    /// The value of a tag.
    #[must_use]
    pub fn tag(&self, key: &str) -> Option<&str> {
        self.tags
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }
}

/// Changeset metadata as read.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RawChangeset {
    pub id: i64,
    pub uid: i64,
    pub user: String,
    pub created_at: i64,
    pub closed_at: Option<i64>,
    /// (min, max) corners; absent for changesets without edits.
    pub bbox: Option<(Coord, Coord)>,
    pub num_changes: i64,
    pub tags: Vec<(String, String)>,
}

impl RawChangeset {
    fn clear(&mut self) {
        *self = Self {
            user: std::mem::take(&mut self.user),
            tags: std::mem::take(&mut self.tags),
            ..Self::default()
        };
        self.user.clear();
        self.tags.clear();
    }

    /// The value of a tag.
    #[must_use]
    pub fn tag(&self, key: &str) -> Option<&str> {
        self.tags
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }
}

/// Receives what the reader finds.
pub trait OsmSink {
    /// One changeset's metadata.
    ///
    /// # Errors
    /// The sink's own failure, which stops reading.
    fn changeset(&mut self, cs: &RawChangeset) -> Result<(), SinkError>;
    /// One element version; `op` is `None` in snapshots.
    ///
    /// # Errors
    /// The sink's own failure, which stops reading.
    fn element(&mut self, op: Option<Op>, el: &RawElement) -> Result<(), SinkError>;
    /// An odd but valid element was skipped, for the given reason.
    fn skipped(&mut self, reason: &'static str);
}

/// The kind of document, from its root element.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Root {
    /// `<osm>`: a snapshot or changeset metadata.
    Osm,
    /// `<osmChange>`.
    OsmChange,
}

/// Parses OSM XML from `input`, feeding `sink`. Returns the root kind.
///
/// # Errors
/// [`ReadError::Parse`] for malformed XML, a wrong root, a missing or invalid id, version or
/// coordinate attribute, or a size limit exceeded; [`ReadError::Sink`] when the sink fails.
pub fn read_osm<R: BufRead>(input: R, sink: &mut impl OsmSink) -> Result<Root, ReadError> {
    let mut reader = Reader::from_reader(input);
    reader.config_mut().trim_text(true);
    let mut buf = Vec::with_capacity(4096);
    let mut el = RawElement::default();
    let mut cs = RawChangeset::default();
    let mut root: Option<Root> = None;
    let mut op: Option<Op> = None;
    // What is open below the root: an element or a changeset whose children we collect.
    let mut open_element = false;
    let mut open_changeset = false;
    let mut depth = 0usize;

    loop {
        let before = reader.buffer_position();
        let event = reader.read_event_into(&mut buf).map_err(|e| {
            ReadError::Parse(ParseError {
                offset: reader.error_position(),
                message: format!("malformed XML: {e}"),
            })
        })?;
        // Errors point at the start of the tag: the reader stands just past its '>', and the
        // event holds the text between '<' and '>' (without an empty tag's '/').
        let pos = match &event {
            Event::Start(e) => reader.buffer_position().saturating_sub(e.len() as u64 + 2),
            Event::Empty(e) => reader.buffer_position().saturating_sub(e.len() as u64 + 3),
            _ => before,
        };
        let perr = |message: String| {
            ReadError::Parse(ParseError {
                offset: pos,
                message,
            })
        };
        match event {
            Event::Start(ref e) | Event::Empty(ref e) => {
                let empty = matches!(event, Event::Empty(_));
                let name = e.name();
                let name = name.as_ref().as_bytes();
                if !empty {
                    depth += 1;
                }
                match root {
                    None => {
                        root = Some(match name {
                            b"osm" => Root::Osm,
                            b"osmChange" => Root::OsmChange,
                            other => {
                                return Err(perr(format!(
                                    "expected root element <osm> or <osmChange>, found <{}>",
                                    String::from_utf8_lossy(other)
                                )))
                            }
                        });
                        if empty {
                            break;
                        }
                        continue;
                    }
                    Some(r) => {
                        if open_element || open_changeset {
                            child(e, name, &mut el, &mut cs, open_changeset).map_err(perr)?;
                            continue;
                        }
                        match (r, name) {
                            (Root::OsmChange, b"create") => op = Some(Op::Create),
                            (Root::OsmChange, b"modify") => op = Some(Op::Modify),
                            (Root::OsmChange, b"delete") => op = Some(Op::Delete),
                            (_, b"node" | b"way" | b"relation") => {
                                if r == Root::OsmChange && op.is_none() {
                                    return Err(perr(format!(
                                        "<{}> outside a <create>, <modify> or <delete> block",
                                        String::from_utf8_lossy(name)
                                    )));
                                }
                                el.clear();
                                el.etype = ElementType::from_name(name);
                                element_attrs(e, &mut el).map_err(perr)?;
                                if empty {
                                    deliver(op, &el, sink)?;
                                } else {
                                    open_element = true;
                                }
                            }
                            (Root::Osm, b"changeset") => {
                                cs.clear();
                                changeset_attrs(e, &mut cs).map_err(perr)?;
                                if empty {
                                    sink.changeset(&cs).map_err(ReadError::Sink)?;
                                } else {
                                    open_changeset = true;
                                }
                            }
                            // Bounds, notes, unknown extension elements: ignored.
                            _ => {}
                        }
                    }
                }
            }
            Event::End(ref e) => {
                depth = depth.saturating_sub(1);
                let name = e.name();
                let name = name.as_ref().as_bytes();
                if open_element && matches!(name, b"node" | b"way" | b"relation") {
                    open_element = false;
                    deliver(op, &el, sink)?;
                } else if open_changeset && name == b"changeset" {
                    open_changeset = false;
                    sink.changeset(&cs).map_err(ReadError::Sink)?;
                } else if matches!(name, b"create" | b"modify" | b"delete") {
                    op = None;
                }
            }
            Event::Eof => {
                if root.is_none() {
                    return Err(perr(
                        "empty document: no <osm> or <osmChange> root".to_owned(),
                    ));
                }
                if depth > 0 {
                    return Err(perr(
                        "unexpected end of file: the document is truncated (unclosed elements)"
                            .to_owned(),
                    ));
                }
                break;
            }
            Event::Text(ref t) if root.is_none() && !t.as_ref().is_empty() => {
                return Err(perr(
                    "text before the root element: not an XML document".to_owned(),
                ));
            }
            _ => {}
        }
        buf.clear();
    }
    root.ok_or_else(|| {
        ReadError::Parse(ParseError {
            offset: 0,
            message: "empty document".to_owned(),
        })
    })
}

/// Hands a complete element to the sink, or counts it as skipped when it is odd but valid.
fn deliver(op: Option<Op>, el: &RawElement, sink: &mut impl OsmSink) -> Result<(), ReadError> {
    let deleted = op == Some(Op::Delete) || !el.visible;
    if el.etype == Some(ElementType::Node) && el.coord.is_none() && !deleted {
        sink.skipped("node without valid coordinates");
        return Ok(());
    }
    sink.element(op, el).map_err(ReadError::Sink)
}

fn attr_str<'a>(
    a: &'a quick_xml::events::attributes::Attribute<'a>,
) -> Result<std::borrow::Cow<'a, str>, String> {
    a.normalized_value(quick_xml::XmlVersion::Implicit1_0)
        .map_err(|e| format!("bad attribute {}: {e}", a.key.as_ref()))
}

fn parse_i64(v: &str, what: &str, element: &str) -> Result<i64, String> {
    v.trim().parse::<i64>().map_err(|_| {
        format!(
            "<{element}> attribute {what}=\"{}\" is not an integer",
            clip(v)
        )
    })
}

fn parse_f64(v: &str, what: &str, element: &str) -> Result<f64, String> {
    v.trim().parse::<f64>().map_err(|_| {
        format!(
            "<{element}> attribute {what}=\"{}\" is not a number",
            clip(v)
        )
    })
}

fn clip(v: &str) -> String {
    let mut s: String = v.chars().take(40).collect();
    if s.len() < v.len() {
        s.push('…');
    }
    s
}

fn element_attrs(e: &BytesStart<'_>, el: &mut RawElement) -> Result<(), String> {
    let ename = el.etype.map_or("element", |t| t.name());
    let mut has_id = false;
    let mut lat: Option<f64> = None;
    let mut lon: Option<f64> = None;
    for a in e.attributes() {
        let a = a.map_err(|err| format!("<{ename}> has a malformed attribute: {err}"))?;
        let v = attr_str(&a)?;
        match a.key.as_ref().as_bytes() {
            b"id" => {
                el.id = parse_i64(&v, "id", ename)?;
                has_id = true;
            }
            b"version" => el.version = parse_i64(&v, "version", ename)?,
            b"changeset" => el.changeset = parse_i64(&v, "changeset", ename)?,
            b"uid" => el.uid = parse_i64(&v, "uid", ename)?,
            b"user" => {
                check_len(&v, "user")?;
                el.user.push_str(&v);
            }
            b"timestamp" => {
                el.timestamp = parse_timestamp(&v).ok_or_else(|| {
                    format!(
                        "<{ename}> attribute timestamp=\"{}\" is not an ISO 8601 UTC time",
                        clip(&v)
                    )
                })?;
            }
            b"visible" => el.visible = &*v != "false",
            b"lat" => lat = Some(parse_f64(&v, "lat", ename)?),
            b"lon" => lon = Some(parse_f64(&v, "lon", ename)?),
            _ => {}
        }
    }
    if !has_id {
        return Err(format!("<{ename}> without an id attribute"));
    }
    if let (Some(la), Some(lo)) = (lat, lon) {
        el.coord = Coord::from_degrees(la, lo);
        if el.coord.is_none() {
            return Err(format!(
                "<{ename} id=\"{}\"> has coordinates out of range: lat={la} lon={lo} (expected -90..90, -180..180)",
                el.id
            ));
        }
    }
    Ok(())
}

fn changeset_attrs(e: &BytesStart<'_>, cs: &mut RawChangeset) -> Result<(), String> {
    let mut has_id = false;
    let (mut min_lat, mut min_lon, mut max_lat, mut max_lon) = (None, None, None, None);
    for a in e.attributes() {
        let a = a.map_err(|err| format!("<changeset> has a malformed attribute: {err}"))?;
        let v = attr_str(&a)?;
        let ts = |v: &str, what: &str| {
            parse_timestamp(v).ok_or_else(|| {
                format!(
                    "<changeset> attribute {what}=\"{}\" is not an ISO 8601 UTC time",
                    clip(v)
                )
            })
        };
        match a.key.as_ref().as_bytes() {
            b"id" => {
                cs.id = parse_i64(&v, "id", "changeset")?;
                has_id = true;
            }
            b"uid" => cs.uid = parse_i64(&v, "uid", "changeset")?,
            b"user" => {
                check_len(&v, "user")?;
                cs.user.push_str(&v);
            }
            b"created_at" => cs.created_at = ts(&v, "created_at")?,
            b"closed_at" => cs.closed_at = Some(ts(&v, "closed_at")?),
            b"num_changes" => cs.num_changes = parse_i64(&v, "num_changes", "changeset")?,
            b"min_lat" => min_lat = Some(parse_f64(&v, "min_lat", "changeset")?),
            b"min_lon" => min_lon = Some(parse_f64(&v, "min_lon", "changeset")?),
            b"max_lat" => max_lat = Some(parse_f64(&v, "max_lat", "changeset")?),
            b"max_lon" => max_lon = Some(parse_f64(&v, "max_lon", "changeset")?),
            _ => {}
        }
    }
    if !has_id {
        return Err("<changeset> without an id attribute".to_owned());
    }
    if let (Some(a), Some(b), Some(c), Some(d)) = (min_lat, min_lon, max_lat, max_lon) {
        match (Coord::from_degrees(a, b), Coord::from_degrees(c, d)) {
            (Some(lo), Some(hi)) => cs.bbox = Some((lo, hi)),
            _ => {
                return Err(format!(
                    "<changeset id=\"{}\"> has a bounding box out of range",
                    cs.id
                ))
            }
        }
    }
    Ok(())
}

fn check_len(v: &str, what: &str) -> Result<(), String> {
    // XML 1.0 allows no control characters but tab, line feed and carriage return; refusing them
    // also keeps the store's tag packing (which uses U+001E and U+001F) unambiguous.
    if let Some(c) = v
        .chars()
        .find(|&c| c < ' ' && !matches!(c, '\t' | '\n' | '\r'))
    {
        return Err(format!(
            "{what} holds the control character U+{:04X}, which XML 1.0 does not allow",
            u32::from(c)
        ));
    }
    if v.len() > MAX_TAG_BYTES {
        return Err(format!(
            "{what} is {} bytes long; at most {MAX_TAG_BYTES} are accepted",
            v.len()
        ));
    }
    Ok(())
}

fn child(
    e: &BytesStart<'_>,
    name: &[u8],
    el: &mut RawElement,
    cs: &mut RawChangeset,
    in_changeset: bool,
) -> Result<(), String> {
    match name {
        b"tag" => {
            let (mut k, mut v) = (None, None);
            for a in e.attributes() {
                let a = a.map_err(|err| format!("<tag> has a malformed attribute: {err}"))?;
                match a.key.as_ref().as_bytes() {
                    b"k" => k = Some(attr_str(&a)?.into_owned()),
                    b"v" => v = Some(attr_str(&a)?.into_owned()),
                    _ => {}
                }
            }
            let (Some(k), Some(v)) = (k, v) else {
                return Err("<tag> without both k and v attributes".to_owned());
            };
            check_len(&k, "tag key")?;
            check_len(&v, &format!("value of tag {}", clip(&k)))?;
            let tags = if in_changeset {
                &mut cs.tags
            } else {
                &mut el.tags
            };
            if tags.len() >= MAX_TAGS {
                return Err(format!("more than {MAX_TAGS} tags on one element"));
            }
            tags.push((k, v));
        }
        b"nd" if !in_changeset => {
            let r = e
                .try_get_attribute("ref")
                .map_err(|err| format!("<nd> has a malformed attribute: {err}"))?
                .ok_or("<nd> without a ref attribute")?;
            let r = parse_i64(&attr_str(&r)?, "ref", "nd")?;
            if el.refs.len() >= MAX_WAY_NODES {
                return Err(format!("way {} has more than {MAX_WAY_NODES} nodes", el.id));
            }
            el.refs.push(r);
        }
        b"member" if !in_changeset => {
            let (mut t, mut r) = (None, None);
            for a in e.attributes() {
                let a = a.map_err(|err| format!("<member> has a malformed attribute: {err}"))?;
                match a.key.as_ref().as_bytes() {
                    b"type" => t = Some(attr_str(&a)?.into_owned()),
                    b"ref" => r = Some(parse_i64(&attr_str(&a)?, "ref", "member")?),
                    _ => {}
                }
            }
            let (Some(t), Some(r)) = (t, r) else {
                return Err("<member> without type and ref attributes".to_owned());
            };
            let Some(t) = ElementType::from_name(t.as_bytes()) else {
                return Err(format!(
                    "<member> type=\"{}\" is not node, way or relation",
                    clip(&t)
                ));
            };
            if el.members.len() >= MAX_MEMBERS {
                return Err(format!(
                    "relation {} has more than {MAX_MEMBERS} members",
                    el.id
                ));
            }
            if t != ElementType::Relation {
                el.members.push((t, r));
            }
        }
        // Discussion comments in changeset dumps and other extensions are ignored.
        _ => {}
    }
    Ok(())
}

/// Parses `YYYY-MM-DDTHH:MM:SSZ` (the form OSM writes) and, failing that, any RFC 3339 time.
#[must_use]
pub fn parse_timestamp(s: &str) -> Option<i64> {
    let b = s.as_bytes();
    if b.len() == 20 && b[4] == b'-' && b[7] == b'-' && b[10] == b'T' && b[19] == b'Z' {
        let num = |r: std::ops::Range<usize>| -> Option<i64> {
            let mut n = 0i64;
            for &c in &b[r] {
                if !c.is_ascii_digit() {
                    return None;
                }
                n = n * 10 + i64::from(c - b'0');
            }
            Some(n)
        };
        let (y, mo, d) = (num(0..4)?, num(5..7)?, num(8..10)?);
        let (h, mi, se) = (num(11..13)?, num(14..16)?, num(17..19)?);
        #[allow(clippy::cast_possible_truncation, reason = "four digits fit in i32")]
        let date = chrono::NaiveDate::from_ymd_opt(
            y as i32,
            u32::try_from(mo).ok()?,
            u32::try_from(d).ok()?,
        )?;
        if h > 23 || mi > 59 || se > 60 {
            return None;
        }
        let days = date
            .signed_duration_since(chrono::NaiveDate::from_ymd_opt(1970, 1, 1)?)
            .num_days();
        return Some(days * 86_400 + h * 3600 + mi * 60 + se);
    }
    chrono::DateTime::parse_from_rfc3339(s)
        .ok()
        .map(|t| t.timestamp())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Default)]
    struct Collect {
        els: Vec<(Option<Op>, RawElement)>,
        css: Vec<RawChangeset>,
        skipped: Vec<&'static str>,
    }
    impl OsmSink for Collect {
        fn changeset(&mut self, cs: &RawChangeset) -> Result<(), SinkError> {
            self.css.push(cs.clone());
            Ok(())
        }
        fn element(&mut self, op: Option<Op>, el: &RawElement) -> Result<(), SinkError> {
            self.els.push((op, el.clone()));
            Ok(())
        }
        fn skipped(&mut self, reason: &'static str) {
            self.skipped.push(reason);
        }
    }

    fn read(s: &str) -> Result<(Root, Collect), ReadError> {
        let mut c = Collect::default();
        let r = read_osm(s.as_bytes(), &mut c)?;
        Ok((r, c))
    }

    #[test]
    fn timestamps() {
        // Source: Python datetime(2026, 11, 16, tzinfo=timezone.utc).timestamp() == 1794787200.
        assert_eq!(parse_timestamp("1970-01-01T00:00:00Z"), Some(0));
        assert_eq!(parse_timestamp("2026-11-16T00:00:00Z"), Some(1_794_787_200));
        assert_eq!(
            parse_timestamp("2026-11-16T01:00:00+01:00"),
            Some(1_794_787_200)
        );
        assert_eq!(parse_timestamp("2026-13-16T00:00:00Z"), None);
        assert_eq!(parse_timestamp("yesterday"), None);
    }

    #[test]
    fn osmchange_blocks_and_children() {
        let (root, c) = read(
            r#"<?xml version="1.0"?><osmChange version="0.6">
            <create><node id="1" version="1" changeset="10" uid="5" user="a&amp;b" timestamp="2026-01-01T00:00:00Z" lat="1.5" lon="2.5"><tag k="name" v="X &lt;Y&gt;"/></node>
            <way id="2" version="1" changeset="10"><nd ref="1"/><nd ref="3"/></way></create>
            <modify><relation id="4" version="2" changeset="10"><member type="way" ref="2" role=""/><member type="relation" ref="9" role=""/></relation></modify>
            <delete><node id="3" version="3" changeset="11" visible="false"/></delete>
            </osmChange>"#,
        )
        .unwrap();
        assert_eq!(root, Root::OsmChange);
        assert_eq!(c.els.len(), 4);
        assert_eq!(c.els[0].0, Some(Op::Create));
        assert_eq!(c.els[0].1.user, "a&b");
        assert_eq!(c.els[0].1.tag("name"), Some("X <Y>"));
        assert_eq!(c.els[1].1.refs, vec![1, 3]);
        assert_eq!(c.els[2].1.members, vec![(ElementType::Way, 2)]);
        assert_eq!(c.els[3].0, Some(Op::Delete));
        assert!(c.els[3].1.coord.is_none());
    }

    #[test]
    fn changesets_with_tags() {
        let (root, c) = read(
            r#"<osm><changeset id="7" uid="3" user="u" created_at="2026-01-01T00:00:00Z" closed_at="2026-01-01T01:00:00Z" min_lat="1" min_lon="2" max_lat="3" max_lon="4" num_changes="5"><tag k="comment" v="hello"/><discussion/></changeset><changeset id="8" created_at="2026-01-01T00:00:00Z"/></osm>"#,
        )
        .unwrap();
        assert_eq!(root, Root::Osm);
        assert_eq!(c.css.len(), 2);
        assert_eq!(c.css[0].tag("comment"), Some("hello"));
        assert_eq!(c.css[0].closed_at, Some(1_767_229_200));
        assert!(c.css[1].bbox.is_none());
    }

    #[test]
    fn node_without_coordinates_in_snapshot_is_skipped() {
        let (_, c) =
            read(r#"<osm><node id="1" version="1"/><node id="2" lat="1" lon="1"/></osm>"#).unwrap();
        assert_eq!(c.els.len(), 1);
        assert_eq!(c.skipped, vec!["node without valid coordinates"]);
    }

    #[test]
    fn fatal_errors_carry_offsets() {
        let e = |s: &str| match read(s) {
            Err(ReadError::Parse(p)) => p,
            other => panic!("expected a parse error, got {:?}", other.map(|r| r.0)),
        };
        assert!(e("<html></html>").message.contains("expected root element"));
        let p = e(r#"<osm><node id="x" lat="1" lon="1"/></osm>"#);
        assert!(
            p.message.contains("id=\"x\" is not an integer"),
            "{}",
            p.message
        );
        assert_eq!(p.offset, 5);
        assert!(e(r#"<osm><node lat="1" lon="1"/></osm>"#)
            .message
            .contains("without an id"));
        assert!(e(r#"<osm><node id="1" lat="91" lon="1"/></osm>"#)
            .message
            .contains("out of range"));
        assert!(e(r#"<osm><node id="1" lat="NaN" lon="1"/></osm>"#)
            .message
            .contains("out of range"));
        assert!(e(r#"<osm><node id="1" lat="1" lon="1">"#)
            .message
            .contains("truncated"));
        assert!(
            e(r#"<osmChange><node id="1" lat="1" lon="1"/></osmChange>"#)
                .message
                .contains("outside a <create>")
        );
        assert!(e("").message.contains("empty"));
        let long = "x".repeat(MAX_TAG_BYTES + 1);
        assert!(e(&format!(
            r#"<osm><node id="1" lat="1" lon="1"><tag k="a" v="{long}"/></node></osm>"#
        ))
        .message
        .contains("at most"));
    }
}
