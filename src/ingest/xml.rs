//! Streaming reader for OSM XML: changeset metadata (`<osm><changeset>`), osmChange
//! (`<osmChange><create|modify|delete>`) and snapshots (`<osm><node|way|relation>`).
//!
//! One reused event buffer and one reused element; elements are handed to an [`OsmSink`] as
//! they close, so memory does not grow with the file. Broken XML or a missing/invalid id is
//! fatal for the file; an odd but valid element (a node without coordinates in a snapshot) is
//! skipped and counted.
//!
//! Speed: most tags are in the plain form OSM writers produce (unique attributes, values without
//! entities or line breaks, integers, coordinates with at most 7 decimals, `YYYY-MM-DDTHH:MM:SSZ`
//! times). A fast path reads those from the raw attribute text without copying; anything else,
//! including every error, goes to the general path, which reads the tag again and gives the
//! result and the message it always gave. Between two tags, a tag that lies whole in the input
//! buffer is taken from there by the fast lane (`EventCap::next_tag`) instead of through
//! quick-xml's buffered reader, as the same event quick-xml would give; everything else (text,
//! comments, tags across the buffer's end, anything after text) is read by quick-xml. Since
//! quick-xml does not see the fast lane's tags, the reader checks end tags itself, with
//! quick-xml's errors and positions. No single tag or text run longer than [`MAX_EVENT_BYTES`]
//! is held in memory.

use std::io::{BufRead, Read};

use quick_xml::errors::{Error as XmlError, IllFormedError};
use quick_xml::events::{BytesEnd, BytesStart, Event};
use quick_xml::parser::{ElementParser, Parser};
use quick_xml::utils::{is_whitespace, name_len};
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
/// Longest single XML tag (from `<` to `>`, attributes included), text run or comment read, in
/// bytes; a longer one is refused with an error at its start, so memory stays bounded. A valid
/// element's start tag is a few kilobytes at most (10 attributes and a tag value of
/// [`MAX_TAG_BYTES`], even with every character written as an entity); whitespace between tags
/// does not count.
pub const MAX_EVENT_BYTES: usize = 1 << 20;

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

/// Keeps the strings of `tags` for reuse, a bounded number of them.
fn recycle(tags: &mut Vec<(String, String)>, spare: &mut Vec<(String, String)>) {
    const KEEP: usize = 256;
    let room = KEEP.saturating_sub(spare.len()).min(tags.len());
    spare.extend(tags.drain(..room));
    tags.clear();
}

impl RawElement {
    fn clear(&mut self, spare: &mut Vec<(String, String)>) {
        recycle(&mut self.tags, spare);
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
    fn clear(&mut self, spare: &mut Vec<(String, String)>) {
        recycle(&mut self.tags, spare);
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
    let mut reader = Reader::from_reader(EventCap::new(input));
    let config = reader.config_mut();
    config.trim_text(true);
    // End tags are checked here against `open`: the fast lane reads tags quick-xml never sees.
    config.check_end_names = false;
    config.allow_unmatched_ends = true;
    let mut buf = Vec::with_capacity(4096);
    let mut el = RawElement::default();
    let mut cs = RawChangeset::default();
    // Tag strings of earlier elements, reused so that a tag costs no allocation.
    let mut spare: Vec<(String, String)> = Vec::new();
    let mut root: Option<Root> = None;
    let mut op: Option<Op> = None;
    // What is open below the root: an element or a changeset whose children we collect.
    let mut open_element = false;
    let mut open_changeset = false;
    let mut depth = 0usize;
    let mut open = OpenNames::default();
    let mut spans: Spans = [(0, 0, 0, 0); MAX_PLAIN];
    // Bytes read by the fast lane, which quick-xml's positions do not count.
    let mut fast_bytes = 0u64;
    // quick-xml stands between two tags (its last event was a tag), where the fast lane may
    // read the next tag in its place.
    let mut between_tags = false;

    // Bytes of the last fast-lane tag, skipped at the start of the next round (its event borrows
    // them until then).
    let mut owed = 0usize;

    loop {
        buf.clear();
        if owed > 0 {
            reader.get_mut().skip(owed);
            fast_bytes += owed as u64;
            owed = 0;
        }
        let base = reader.buffer_position() + fast_bytes;
        let lane = if between_tags && root.is_some() {
            let end_ok = open.top_is_fast();
            reader.get_mut().next_tag(end_ok, &mut spans)
        } else {
            None
        };
        let (event, pos, end_pos, fast, lane_plain) = if let Some((ws, len, event, plain)) = lane {
            owed = ws + len;
            let at = base + ws as u64;
            (event, at, at, true, plain)
        } else {
            let before = base;
            reader.get_mut().start_event();
            let event = reader.read_event_into(&mut buf);
            if let Some(skipped) = reader.get_ref().too_long() {
                return Err(ReadError::Parse(ParseError {
                    offset: before + skipped,
                    message: format!(
                        "an XML tag or text run longer than {MAX_EVENT_BYTES} bytes; no valid OSM \
                         element needs one so long"
                    ),
                }));
            }
            let event = event.map_err(|e| {
                // quick-xml gives 0 for errors it has no position for (in text, say); a position
                // it gives is counted from its first byte, before any fast-lane tag.
                let at = reader.error_position();
                ReadError::Parse(ParseError {
                    offset: if at == 0 { 0 } else { at + fast_bytes },
                    message: format!("malformed XML: {e}"),
                })
            })?;
            between_tags = matches!(event, Event::Start(_) | Event::Empty(_) | Event::End(_));
            // Errors point at the start of the tag: the reader stands just past its '>', and
            // the event holds the text between '<' and '>' (without an empty tag's '/'). An end
            // tag's name is trimmed, so its length is counted as it is consumed.
            let after = reader.buffer_position() + fast_bytes;
            let pos = match &event {
                Event::Start(e) => after.saturating_sub(e.len() as u64 + 2),
                Event::Empty(e) => after.saturating_sub(e.len() as u64 + 3),
                _ => before,
            };
            (
                event,
                pos,
                after.saturating_sub(reader.get_ref().tag_len()),
                false,
                None,
            )
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
                // The fast lane has scanned its tags' attributes (the same text as
                // `attributes_raw`: they follow the name).
                let plain = match lane_plain {
                    Some(n) => Some(Plain {
                        text: e.attributes_raw(),
                        spans: &spans[..n],
                    }),
                    None if fast => None,
                    None => Plain::of(e, &mut spans),
                };
                let name = e.name();
                let name = name.as_ref().as_bytes();
                if !empty {
                    depth += 1;
                    open.push(e.name().as_ref(), fast);
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
                            let tags = if open_changeset {
                                &mut cs.tags
                            } else {
                                &mut el.tags
                            };
                            if plain.as_ref().is_none_or(|attrs| {
                                child_fast(
                                    attrs,
                                    name,
                                    open_changeset,
                                    &mut el.refs,
                                    &mut el.members,
                                    tags,
                                    &mut spare,
                                )
                                .is_err()
                            }) {
                                child(e, name, &mut el, &mut cs, open_changeset).map_err(perr)?;
                            }
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
                                el.clear(&mut spare);
                                el.etype = ElementType::from_name(name);
                                if plain
                                    .as_ref()
                                    .is_none_or(|attrs| element_attrs_fast(attrs, &mut el).is_err())
                                {
                                    el.clear(&mut spare);
                                    el.etype = ElementType::from_name(name);
                                    element_attrs(e, &mut el).map_err(perr)?;
                                }
                                if empty {
                                    deliver(op, &el, sink)?;
                                } else {
                                    open_element = true;
                                }
                            }
                            (Root::Osm, b"changeset") => {
                                cs.clear(&mut spare);
                                if plain.as_ref().is_none_or(|attrs| {
                                    changeset_attrs_fast(attrs, &mut cs).is_err()
                                }) {
                                    cs.clear(&mut spare);
                                    changeset_attrs(e, &mut cs).map_err(perr)?;
                                }
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
                open.close(e.name().as_ref()).map_err(|e| {
                    ReadError::Parse(ParseError {
                        offset: end_pos,
                        message: format!("malformed XML: {e}"),
                    })
                })?;
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
    }
    root.ok_or_else(|| {
        ReadError::Parse(ParseError {
            offset: 0,
            message: "empty document".to_owned(),
        })
    })
}

/// The reader's input: buffers `inner` and counts the bytes of the XML event being read, so
/// that one longer than [`MAX_EVENT_BYTES`] is refused (with an I/O error that the reader
/// passes on) before it is buffered whole. Whitespace before the event does not count: the
/// XML reader skips it without keeping it.
struct EventCap<R> {
    inner: R,
    buf: Box<[u8]>,
    start: usize,
    end: usize,
    /// Still in the whitespace before the event.
    leading: bool,
    /// Whitespace bytes consumed before the event.
    skipped: u64,
    /// Bytes of the event consumed so far.
    counted: u64,
    /// Bytes consumed since the event began.
    in_event: u64,
    /// `in_event` when the event's first `<` was consumed.
    tag_start: Option<u64>,
    /// The inner reader reported its end when the fast lane topped the buffer up.
    ended: bool,
    /// An error the inner reader gave when the fast lane topped the buffer up, passed on when
    /// the XML reader reaches it.
    failed: Option<std::io::Error>,
}

impl<R: Read> EventCap<R> {
    /// Large enough that a buffer refill is rare against the per-event cost.
    const CAPACITY: usize = 1 << 17;
    /// The fast lane tops the buffer up when less than this is left (a tag of a way with
    /// many nodes or a long value is still read whole by quick-xml).
    const TOP_UP: usize = 1 << 13;

    fn new(inner: R) -> Self {
        Self {
            inner,
            buf: vec![0; Self::CAPACITY].into_boxed_slice(),
            start: 0,
            end: 0,
            leading: true,
            skipped: 0,
            counted: 0,
            in_event: 0,
            tag_start: None,
            ended: false,
            failed: None,
        }
    }

    /// Bytes consumed from the event's first `<` on: the length of a tag just read.
    fn tag_len(&self) -> u64 {
        self.tag_start.map_or(0, |at| self.in_event - at)
    }

    /// The fast lane: the next tag, when it lies whole in the buffer after whitespace, as
    /// quick-xml would read it (where its tag parser finds the closing `>`; start, empty and end
    /// tags only, in valid UTF-8; an end tag only when `end_ok`). Returns the lengths of the
    /// whitespace and the tag, the event, and for a tag with plain attributes their number
    /// (their places are in `spans`, counted from the end of the name); the caller then
    /// [`skip`](Self::skip)s the whitespace and the tag. Reading tags here instead of through
    /// quick-xml's buffered reader saves its copy of every tag, its whitespace text and its
    /// per-event bookkeeping.
    fn next_tag(
        &mut self,
        end_ok: bool,
        spans: &mut Spans,
    ) -> Option<(usize, usize, Event<'_>, Option<usize>)> {
        if self.end - self.start < Self::TOP_UP && !self.ended && self.failed.is_none() {
            self.top_up();
        }
        let b = &self.buf[self.start..self.end];
        let ws = b
            .iter()
            .position(|&c| !matches!(c, b' ' | b'\t' | b'\r' | b'\n'))?;
        let tag = &b[ws..];
        if tag.first() != Some(&b'<') {
            return None;
        }
        // A start or empty tag with plain attributes ends at the `>` after them; quick-xml's
        // tag parser, which skips a `>` inside quotes, finds the same one.
        let plain = match tag.get(1)? {
            b'!' | b'?' => return None,
            b'/' if !end_ok => return None,
            b'/' => None,
            _ => {
                // quick-xml's name runs to the first whitespace.
                let name = tag[1..].iter().position(|&c| !c.is_ascii_alphanumeric())? + 1;
                if !matches!(tag[name], b' ' | b'\t' | b'\r' | b'\n' | b'/' | b'>') {
                    return None;
                }
                match Plain::scan(&tag[name..], spans) {
                    Ok((stop, n)) if tag.get(name + stop) == Some(&b'>') => {
                        Some((name, stop + 1, n))
                    }
                    Ok((stop, n)) if tag[name + stop..].starts_with(b"/>") => {
                        Some((name, stop + 2, n))
                    }
                    _ => None,
                }
            }
        };
        let end = match plain {
            Some((name, stop, _)) => name + stop,
            None => ElementParser::Outside.feed(&tag[1..])? + 2,
        };
        let tag = std::str::from_utf8(&tag[..end]).ok()?;
        let event = if let Some(name) = tag.strip_prefix("</") {
            // As quick-xml: the name without the whitespace after it.
            let name = &name[..name.len() - 1];
            let name = match name.as_bytes().iter().rposition(|&c| !is_whitespace(c)) {
                Some(last) => &name[..=last],
                None => name,
            };
            Event::End(BytesEnd::new(name))
        } else {
            let (content, empty) = match tag[1..].strip_suffix("/>") {
                Some(content) => (content, true),
                None => (&tag[1..end - 1], false),
            };
            // A plain tag's name is known: it ends at whitespace, `/>` or `>`.
            let name = plain.map_or_else(|| name_len(content.as_bytes()), |(name, _, _)| name - 1);
            let start = BytesStart::from_content(content, name);
            if empty {
                Event::Empty(start)
            } else {
                Event::Start(start)
            }
        };
        Some((ws, end, event, plain.map(|(_, _, n)| n)))
    }

    /// Consumes what the fast lane read.
    fn skip(&mut self, n: usize) {
        self.start += n.min(self.end - self.start);
    }

    /// Moves what is left to the front of the buffer and reads more after it, so that tags
    /// near the end of the buffer stay in the fast lane. An end of input or an error is
    /// remembered and handed on when the XML reader comes to it.
    #[cold]
    fn top_up(&mut self) {
        self.buf.copy_within(self.start..self.end, 0);
        self.end -= self.start;
        self.start = 0;
        loop {
            match self.inner.read(&mut self.buf[self.end..]) {
                Ok(0) => self.ended = true,
                Ok(n) => self.end += n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(e) => self.failed = Some(e),
            }
            break;
        }
    }

    /// Called before each event is read.
    fn start_event(&mut self) {
        self.leading = true;
        self.skipped = 0;
        self.counted = 0;
        self.in_event = 0;
        self.tag_start = None;
    }

    /// The whitespace skipped before the event when the event is longer than the limit.
    fn too_long(&self) -> Option<u64> {
        (self.counted > MAX_EVENT_BYTES as u64).then_some(self.skipped)
    }
}

impl<R: Read> Read for EventCap<R> {
    fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
        let n = {
            let available = self.fill_buf()?;
            let n = available.len().min(out.len());
            out[..n].copy_from_slice(&available[..n]);
            n
        };
        self.consume(n);
        Ok(n)
    }
}

impl<R: Read> EventCap<R> {
    #[cold]
    fn refill(&mut self) -> std::io::Result<()> {
        self.start = 0;
        self.end = 0;
        if let Some(e) = self.failed.take() {
            return Err(e);
        }
        self.end = loop {
            match self.inner.read(&mut self.buf) {
                Ok(n) => break n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(e) => return Err(e),
            }
        };
        Ok(())
    }
}

impl<R: Read> BufRead for EventCap<R> {
    #[inline]
    fn fill_buf(&mut self) -> std::io::Result<&[u8]> {
        if self.counted > MAX_EVENT_BYTES as u64 {
            return Err(std::io::Error::other("XML event too long"));
        }
        if self.start == self.end {
            self.refill()?;
        }
        Ok(&self.buf[self.start..self.end])
    }

    #[inline]
    fn consume(&mut self, n: usize) {
        let n = n.min(self.end - self.start);
        let taken = &self.buf[self.start..self.start + n];
        if self.tag_start.is_none() && taken.first() == Some(&b'<') {
            self.tag_start = Some(self.in_event);
        }
        self.in_event += n as u64;
        let event_bytes = if self.leading {
            // The same whitespace the XML reader skips between tags.
            match taken
                .iter()
                .position(|b| !matches!(b, b' ' | b'\t' | b'\r' | b'\n'))
            {
                Some(i) => {
                    self.leading = false;
                    self.skipped += i as u64;
                    n - i
                }
                None => {
                    self.skipped += n as u64;
                    0
                }
            }
        } else {
            n
        };
        self.counted += event_bytes as u64;
        self.start += n;
    }
}

/// Names of the open elements, to check end tags as quick-xml would (its own check is off:
/// it does not see the tags the fast lane reads).
#[derive(Default)]
struct OpenNames {
    names: String,
    /// Where each name starts in `names`, and whether the fast lane read its start tag.
    starts: Vec<(usize, bool)>,
}

// `#[inline]`: these run for every start and end tag, and the release build otherwise kept them
// as calls (about 5 % of the samples in a profile of reading w5m).
impl OpenNames {
    #[inline]
    fn push(&mut self, name: &str, fast: bool) {
        self.starts.push((self.names.len(), fast));
        self.names.push_str(name);
    }

    /// Whether the innermost open element's start tag came through the fast lane. Only then
    /// may its end tag too: quick-xml keeps a list of the start tags it read and drops each
    /// at the next end tag it reads, so that list stays as short as the nesting.
    #[inline]
    fn top_is_fast(&self) -> bool {
        self.starts.last().is_some_and(|&(_, fast)| fast)
    }

    /// Closes the innermost element, with quick-xml's error when `name` does not match it or
    /// nothing is open.
    #[inline]
    fn close(&mut self, name: &str) -> Result<(), XmlError> {
        let Some((start, _)) = self.starts.pop() else {
            return Err(XmlError::IllFormed(IllFormedError::UnmatchedEndTag(
                name.to_owned(),
            )));
        };
        let expected = &self.names[start..];
        let result = if expected == name {
            Ok(())
        } else {
            Err(XmlError::IllFormed(IllFormedError::MismatchedEndTag {
                expected: expected.to_owned(),
                found: name.to_owned(),
            }))
        };
        self.names.truncate(start);
        result
    }
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

/// The fast path cannot take this tag: the general path reads it again.
#[derive(Debug)]
struct Fallback;

/// [`STOP`] bit: a byte that ends an attribute key or cannot be in a plain one (`=`,
/// whitespace, quotes, `<`, `>`, `/`, `&`).
const KEY_END: u8 = 1;
/// [`STOP`] bit: a byte that ends a plain attribute value or makes it not plain (a quote, `&`,
/// tab or line break).
const VALUE_END: u8 = 2;
/// Byte classes of [`Plain::scan`], looked up instead of compared one by one.
const STOP: [u8; 256] = {
    let mut t = [0u8; 256];
    t[b'=' as usize] = KEY_END;
    t[b' ' as usize] = KEY_END;
    t[b'<' as usize] = KEY_END;
    t[b'>' as usize] = KEY_END;
    t[b'/' as usize] = KEY_END;
    t[b'\t' as usize] = KEY_END | VALUE_END;
    t[b'\r' as usize] = KEY_END | VALUE_END;
    t[b'\n' as usize] = KEY_END | VALUE_END;
    t[b'"' as usize] = KEY_END | VALUE_END;
    t[b'\'' as usize] = KEY_END | VALUE_END;
    t[b'&' as usize] = KEY_END | VALUE_END;
    t
};

/// Most attributes a plain tag may have.
const MAX_PLAIN: usize = 16;

/// Where [`Plain::scan`] found each attribute's key and value: byte ranges of the text it
/// read (key start and end, value start and end). One array is reused for every tag.
type Spans = [(usize, usize, usize, usize); MAX_PLAIN];

/// The attributes of a plain tag: every attribute written `key="value"` or `key='value'` (no
/// space around `=`, no quote, `<`, `>`, `/` or `&` in the key), no key repeated, no value
/// needing normalization (no entity, tab or line break), at most [`MAX_PLAIN`]. On such tags
/// quick-xml's attribute iteration (the general path) finds the same keys and values and no
/// error; this scan is the same walk without its per-tag allocation, duplicate bookkeeping and
/// value copies.
struct Plain<'a> {
    /// The tag's attribute text.
    text: &'a str,
    spans: &'a [(usize, usize, usize, usize)],
}

impl<'a> Plain<'a> {
    /// The attributes of `e`, when they are plain.
    fn of(e: &'a BytesStart<'_>, spans: &'a mut Spans) -> Option<Self> {
        let text = e.attributes_raw();
        let (stop, len) = Self::scan(text.as_bytes(), spans).ok()?;
        (stop == text.len()).then(|| Self {
            text,
            spans: &spans[..len],
        })
    }

    /// Reads plain attributes from the start of `b` up to the first byte, after whitespace,
    /// that cannot begin a key (the end of `b`, or a tag's `/` or `>`), recording their spans.
    /// Returns that byte's index and the number of attributes.
    fn scan(b: &[u8], spans: &mut Spans) -> Result<(usize, usize), Fallback> {
        let mut n = 0;
        let mut i = 0;
        loop {
            while i < b.len() && matches!(b[i], b' ' | b'\t' | b'\r' | b'\n') {
                i += 1;
            }
            if i == b.len() || matches!(b[i], b'/' | b'>') {
                return Ok((i, n));
            }
            let key_start = i;
            // Every byte that ends a key is below `@`; letters and `_` are not.
            loop {
                i = first_below(b, i, b'@');
                match b.get(i) {
                    Some(&c) if STOP[usize::from(c)] & KEY_END == 0 => i += 1,
                    _ => break,
                }
            }
            if i == key_start || b.get(i) != Some(&b'=') {
                return Err(Fallback);
            }
            let key_end = i;
            let quote = match b.get(i + 1) {
                Some(&q @ (b'"' | b'\'')) => q,
                _ => return Err(Fallback),
            };
            i += 2;
            let value_start = i;
            loop {
                // Every byte that ends a value is below `(`; digits, letters, `-`, `.` and `:`
                // are not.
                loop {
                    i = first_below(b, i, b'(');
                    match b.get(i) {
                        Some(&c) if STOP[usize::from(c)] & VALUE_END == 0 => i += 1,
                        _ => break,
                    }
                }
                match b.get(i) {
                    Some(&c) if c == quote => break,
                    // The other quote is part of the value.
                    Some(b'"' | b'\'') => i += 1,
                    _ => return Err(Fallback),
                }
            }
            let key = &b[key_start..key_end];
            // Lengths and first bytes tell most keys apart before their bytes are compared.
            if n == MAX_PLAIN
                || spans[..n].iter().any(|&(start, end, _, _)| {
                    end - start == key.len() && b[start] == key[0] && &b[start..end] == key
                })
            {
                return Err(Fallback);
            }
            spans[n] = (key_start, key_end, value_start, i);
            n += 1;
            i += 1;
        }
    }

    /// The keys and values, in order (each span starts and ends next to an ASCII byte, so on a
    /// character boundary).
    fn pairs(&self) -> impl Iterator<Item = Result<(&'a str, &'a str), Fallback>> + '_ {
        self.spans.iter().map(|&(ks, ke, vs, ve)| {
            Ok((
                self.text.get(ks..ke).ok_or(Fallback)?,
                self.text.get(vs..ve).ok_or(Fallback)?,
            ))
        })
    }
}

/// The index of the first byte of `b` from `i` on that is below `limit` (at most 128), or the
/// length of `b`. Eight bytes at a time: a byte below `limit` is the lowest whose subtraction
/// borrows (a borrow only starts at such a byte), and bytes from 128 up are left out by `!x`.
/// Scanning attribute keys and values this way instead of byte by byte took about 9 % off the
/// reading time of the 1-million-element benchmark file.
fn first_below(b: &[u8], mut i: usize, limit: u8) -> usize {
    const ONES: u64 = 0x0101_0101_0101_0101;
    const HIGH: u64 = 0x8080_8080_8080_8080;
    let sub = ONES * u64::from(limit);
    while let Some(word) = b.get(i..i + 8) {
        let mut bytes = [0u8; 8];
        bytes.copy_from_slice(word);
        let x = u64::from_le_bytes(bytes);
        let found = x.wrapping_sub(sub) & !x & HIGH;
        if found != 0 {
            return i + found.trailing_zeros() as usize / 8;
        }
        i += 8;
    }
    while i < b.len() && b[i] >= limit {
        i += 1;
    }
    i
}

/// An integer as [`parse_i64`] reads it, without building its error message.
fn int(v: &str) -> Result<i64, Fallback> {
    let b = v.as_bytes();
    let (negative, digits) = match b.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, b),
    };
    // Up to 18 digits cannot overflow; anything else is read by the standard parser.
    if digits.is_empty() || digits.len() > 18 {
        return v.trim().parse().map_err(|_| Fallback);
    }
    let mut n = 0i64;
    for &c in digits {
        let d = c.wrapping_sub(b'0');
        if d > 9 {
            return v.trim().parse().map_err(|_| Fallback);
        }
        n = n * 10 + i64::from(d);
    }
    Ok(if negative { -n } else { n })
}

/// A coordinate written `-?D{1,3}(.D{1,7})?` in 1e-7 degree units, exactly: for these the
/// general path's `f64` parse, `* 1e7` and rounding give the same integer, since the product is
/// within a few units of 2^-52 relative of an integer below 2^31. Other forms (exponents, more
/// decimals, a `+` sign, spaces) go to the general path.
fn e7(v: &str) -> Result<i64, Fallback> {
    const SCALE: [i64; 8] = [10_000_000, 1_000_000, 100_000, 10_000, 1_000, 100, 10, 1];
    let b = v.as_bytes();
    let (negative, rest) = match b.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, b),
    };
    let (whole, fraction) = match rest.iter().position(|&c| c == b'.') {
        Some(i) => (&rest[..i], &rest[i + 1..]),
        None => (rest, &rest[rest.len()..]),
    };
    if whole.is_empty()
        || whole.len() > 3
        || fraction.len() > 7
        || (fraction.is_empty() && whole.len() < rest.len())
    {
        return Err(Fallback);
    }
    let mut n = 0i64;
    for part in [whole, fraction] {
        for &c in part {
            let d = c.wrapping_sub(b'0');
            if d > 9 {
                return Err(Fallback);
            }
            n = n * 10 + i64::from(d);
        }
    }
    n *= SCALE[fraction.len()];
    Ok(if negative { -n } else { n })
}

/// Whether [`check_len`] accepts `v`, without building its message.
fn plain_len_ok(v: &str) -> bool {
    // The control characters check_len refuses are all ASCII, so bytes can be looked at.
    v.len() <= MAX_TAG_BYTES
        && !v
            .bytes()
            .any(|b| b < b' ' && !matches!(b, b'\t' | b'\n' | b'\r'))
}

/// [`element_attrs`] for plain tags; on [`Fallback`] `el` is to be cleared and read again.
fn element_attrs_fast(attrs: &Plain<'_>, el: &mut RawElement) -> Result<(), Fallback> {
    let mut has_id = false;
    let (mut lat, mut lon) = (None, None);
    for pair in attrs.pairs() {
        let (key, v) = pair?;
        match key.as_bytes() {
            b"id" => {
                el.id = int(v)?;
                has_id = true;
            }
            b"version" => el.version = int(v)?,
            b"changeset" => el.changeset = int(v)?,
            b"uid" => el.uid = int(v)?,
            b"user" => {
                if !plain_len_ok(v) {
                    return Err(Fallback);
                }
                el.user.push_str(v);
            }
            b"timestamp" => el.timestamp = parse_timestamp(v).ok_or(Fallback)?,
            b"visible" => el.visible = v != "false",
            b"lat" => lat = Some(e7(v)?),
            b"lon" => lon = Some(e7(v)?),
            _ => {}
        }
    }
    if !has_id {
        return Err(Fallback);
    }
    if let (Some(la), Some(lo)) = (lat, lon) {
        el.coord = Some(Coord::from_e7(la, lo).ok_or(Fallback)?);
    }
    Ok(())
}

/// [`changeset_attrs`] for plain tags; on [`Fallback`] `cs` is to be cleared and read again.
fn changeset_attrs_fast(attrs: &Plain<'_>, cs: &mut RawChangeset) -> Result<(), Fallback> {
    let mut has_id = false;
    let mut bbox = [None; 4];
    for pair in attrs.pairs() {
        let (key, v) = pair?;
        match key.as_bytes() {
            b"id" => {
                cs.id = int(v)?;
                has_id = true;
            }
            b"uid" => cs.uid = int(v)?,
            b"user" => {
                if !plain_len_ok(v) {
                    return Err(Fallback);
                }
                cs.user.push_str(v);
            }
            b"created_at" => cs.created_at = parse_timestamp(v).ok_or(Fallback)?,
            b"closed_at" => cs.closed_at = Some(parse_timestamp(v).ok_or(Fallback)?),
            b"num_changes" => cs.num_changes = int(v)?,
            b"min_lat" => bbox[0] = Some(e7(v)?),
            b"min_lon" => bbox[1] = Some(e7(v)?),
            b"max_lat" => bbox[2] = Some(e7(v)?),
            b"max_lon" => bbox[3] = Some(e7(v)?),
            _ => {}
        }
    }
    if !has_id {
        return Err(Fallback);
    }
    if let [Some(a), Some(b), Some(c), Some(d)] = bbox {
        let lo = Coord::from_e7(a, b).ok_or(Fallback)?;
        let hi = Coord::from_e7(c, d).ok_or(Fallback)?;
        cs.bbox = Some((lo, hi));
    }
    Ok(())
}

/// [`child`] for plain tags; changes nothing when it returns [`Fallback`].
fn child_fast(
    attrs: &Plain<'_>,
    name: &[u8],
    in_changeset: bool,
    refs: &mut Vec<i64>,
    members: &mut Vec<(ElementType, i64)>,
    tags: &mut Vec<(String, String)>,
    spare: &mut Vec<(String, String)>,
) -> Result<(), Fallback> {
    match name {
        b"tag" => {
            let (mut k, mut v) = (None, None);
            for pair in attrs.pairs() {
                let (key, value) = pair?;
                match key {
                    "k" => k = Some(value),
                    "v" => v = Some(value),
                    _ => {}
                }
            }
            let (Some(k), Some(v)) = (k, v) else {
                return Err(Fallback);
            };
            if !plain_len_ok(k) || !plain_len_ok(v) || tags.len() >= MAX_TAGS {
                return Err(Fallback);
            }
            let (mut key, mut value) = spare.pop().unwrap_or_default();
            key.clear();
            key.push_str(k);
            value.clear();
            value.push_str(v);
            tags.push((key, value));
        }
        b"nd" if !in_changeset => {
            // A plain tag has one ref; the general path takes the first of several.
            let mut r = None;
            for pair in attrs.pairs() {
                let (key, value) = pair?;
                if key == "ref" {
                    r = Some(int(value)?);
                }
            }
            let r = r.ok_or(Fallback)?;
            if refs.len() >= MAX_WAY_NODES {
                return Err(Fallback);
            }
            refs.push(r);
        }
        b"member" if !in_changeset => {
            let (mut t, mut r) = (None, None);
            for pair in attrs.pairs() {
                let (key, value) = pair?;
                match key {
                    "type" => t = Some(value),
                    "ref" => r = Some(int(value)?),
                    _ => {}
                }
            }
            let (Some(t), Some(r)) = (t, r) else {
                return Err(Fallback);
            };
            let t = ElementType::from_name(t.as_bytes()).ok_or(Fallback)?;
            if members.len() >= MAX_MEMBERS {
                return Err(Fallback);
            }
            if t != ElementType::Relation {
                members.push((t, r));
            }
        }
        // Ignored children cost nothing to read again.
        _ => return Err(Fallback),
    }
    Ok(())
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
        let leap = y % 4 == 0 && (y % 100 != 0 || y % 400 == 0);
        let month_days = [
            31,
            28 + i64::from(leap),
            31,
            30,
            31,
            30,
            31,
            31,
            30,
            31,
            30,
            31,
        ];
        let last = *month_days.get(usize::try_from(mo.checked_sub(1)?).ok()?)?;
        if d < 1 || d > last || h > 23 || mi > 59 || se > 60 {
            return None;
        }
        // Days since 1970-01-01 in the proleptic Gregorian calendar, counting years from March
        // so that the leap day ends a year (chrono's dates, without building one: this was a
        // few percent of the reading time).
        // Source: Howard Hinnant, "chrono-Compatible Low-Level Date Algorithms",
        // days_from_civil (howardhinnant.github.io/date_algorithms.html).
        let y = if mo <= 2 { y - 1 } else { y };
        let era = y.div_euclid(400);
        let year_of_era = y - era * 400;
        let day_of_year = (153 * ((mo + 9) % 12) + 2) / 5 + d - 1;
        let day_of_era = year_of_era * 365 + year_of_era / 4 - year_of_era / 100 + day_of_year;
        let days = era * 146_097 + day_of_era - 719_468;
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

    /// Seeded test values, from the ChaCha generator the other tests use.
    struct Rng(rand_chacha::ChaCha8Rng);
    impl Rng {
        fn new(seed: u64) -> Self {
            Self(rand::SeedableRng::seed_from_u64(seed))
        }
        fn next(&mut self) -> u64 {
            rand::RngCore::next_u64(&mut self.0)
        }
        fn below(&mut self, n: usize) -> usize {
            rand::Rng::gen_range(&mut self.0, 0..n.max(1))
        }
    }

    /// The general path's reading of a longitude: `f64`, then `Coord::from_degrees`; and the
    /// fast path's: 1e-7 units, then `Coord::from_e7`.
    fn both_ways(s: &str) -> (Option<Coord>, Option<Coord>) {
        let general = s
            .trim()
            .parse()
            .ok()
            .and_then(|v: f64| Coord::from_degrees(0.0, v));
        (general, e7(s).ok().and_then(|n| Coord::from_e7(0, n)))
    }

    #[test]
    fn fixed_point_coordinates_match_the_f64_path() {
        // Edge cases: signs, zero, the limits, more decimals than 7, other number forms.
        for s in [
            "-0.0000001",
            "0.0000001",
            "90",
            "-90",
            "90.0000000",
            "89.9999999",
            "-0",
            "0",
            "0.5",
            "12.3456785",
            "1.0000005",
            "45.1",
            "007.1234567",
            "5.",
            ".5",
            "-.5",
            "+1.5",
            " 1.5",
            "1e-3",
            "1E2",
            "0000.5",
            "90.0000001",
            "1.23456785",
        ] {
            match e7(s) {
                Ok(_) => assert_eq!(both_ways(s).0, both_ways(s).1, "{s}"),
                // Forms the fast path leaves to the general path.
                Err(Fallback) => assert!(
                    s.contains(['e', 'E', '+', ' '])
                        || s.starts_with('.')
                        || s.starts_with("-.")
                        || s.ends_with('.')
                        || s.starts_with("0000")
                        || s.split('.').nth(1).is_some_and(|f| f.len() > 7),
                    "{s} should be read by the fast path"
                ),
            }
        }
        assert_eq!(e7("-0.0000001").ok(), Some(-1));
        assert_eq!(e7("180").ok(), Some(1_800_000_000));
        // Out of range either way.
        assert_eq!(both_ways("180.0000001"), (None, None));
        // Seeded random values in 1e-7 units, written with 0 to 7 decimals.
        let mut rng = Rng::new(7);
        for _ in 0..200_000 {
            let units = i64::try_from(rng.below(3_600_000_001)).unwrap() - 1_800_000_000;
            let decimals = rng.below(8);
            let s = format!("{:.*}", decimals, units as f64 / 1e7);
            let (general, fast) = both_ways(&s);
            assert!(fast.is_some(), "{s}");
            assert_eq!(general, fast, "{s}");
        }
    }

    #[test]
    fn integers_match_the_standard_parser() {
        for s in [
            "0",
            "-0",
            "1",
            "-1",
            "123456789012345678",
            "-123456789012345678",
            "9223372036854775807",
            "-9223372036854775808",
            "9223372036854775808",
            "+5",
            " 5",
            "5 ",
            "",
            "-",
            "1a",
            "１",
        ] {
            assert_eq!(int(s).ok(), s.trim().parse::<i64>().ok(), "{s:?}");
        }
        // Seeded numbers of 1 to 20 digits, some with a sign, some with one byte changed (to a
        // neighbour of '0' or '9', a sign, or anything).
        let mut rng = Rng::new(13);
        for _ in 0..300_000 {
            let len = 1 + rng.below(20);
            let mut s: Vec<u8> = (0..len)
                .map(|_| b'0' + u8::try_from(rng.below(10)).unwrap())
                .collect();
            if rng.below(3) == 0 {
                s.insert(0, b'-');
            }
            if rng.below(2) == 0 {
                let at = rng.below(s.len());
                s[at] = match rng.below(4) {
                    0 => b'/',
                    1 => b':',
                    2 => b'-',
                    _ => u8::try_from(rng.next() % 128).unwrap(),
                };
            }
            let s = String::from_utf8(s).unwrap();
            assert_eq!(int(&s).ok(), s.trim().parse::<i64>().ok(), "{s:?}");
        }
    }

    #[test]
    fn timestamps_match_the_calendar() {
        // Every year, month and day in the fixed form, against chrono's date arithmetic.
        let epoch = chrono::NaiveDate::from_ymd_opt(1970, 1, 1).unwrap();
        let mut valid = 0;
        for y in 0..=9999 {
            for m in 0..=13 {
                for d in 0..=32 {
                    let s = format!("{y:04}-{m:02}-{d:02}T23:59:07Z");
                    let expected = chrono::NaiveDate::from_ymd_opt(y, m, d)
                        .map(|date| date.signed_duration_since(epoch).num_days() * 86_400 + 86_347);
                    assert_eq!(parse_timestamp(&s), expected, "{s}");
                    valid += usize::from(expected.is_some());
                }
            }
        }
        // 10 000 years of 365.2425 days.
        assert_eq!(valid, 3_652_425);
    }

    /// Start tags the fast path takes or leaves: plain, with entities, odd spacing, repeated
    /// or malformed attributes, other number forms.
    fn tag_variants() -> Vec<String> {
        let bases = [
            r#"node id="1" version="2" changeset="3" uid="4" user="a b" timestamp="2026-01-01T00:00:00Z" lat="1.5" lon="-2.25""#,
            r#"way id="5" version="1" visible="false" user='q"r'"#,
            r#"node id="6" lat="90" lon="180" visible="true""#,
            r#"tag k="name" v="X""#,
            r#"nd ref="7""#,
            r#"member type="way" ref="8" role="outer""#,
            r#"member type="relation" ref="9" role="""#,
            r#"changeset id="10" uid="4" user="u" created_at="2026-01-01T00:00:00Z" closed_at="2026-01-01T01:00:00Z" min_lat="-1.5" min_lon="2" max_lat="3" max_lon="4.0000001" num_changes="5""#,
            r#"changeset id="11" created_at="2026-01-01T00:00:00Z" open="true""#,
        ];
        let tokens = [
            " min_lat=\"95\"",
            " closed_at=\"x\"",
            " ",
            "\t",
            "\n",
            "\r",
            "=",
            "\"",
            "'",
            "&amp;",
            "&lt;",
            "&bogus;",
            "&",
            " id=\"2\"",
            " k=\"k\"",
            " ref=\"1\"",
            " lat=\"1e-3\"",
            "x",
            "-",
            "+",
            ".",
            "0",
            "9",
            "é",
            " a='\"'",
            "\u{1}",
            "99999999999999999999",
            " type=\"node\"",
            " v=\"v\"",
        ];
        let mut rng = Rng::new(11);
        let mut out: Vec<String> = bases.iter().map(|s| (*s).to_owned()).collect();
        for _ in 0..40_000 {
            let mut s = bases[rng.below(bases.len())].to_owned();
            for _ in 0..=rng.below(2) {
                let mut at = rng.below(s.len() + 1);
                while !s.is_char_boundary(at) {
                    at -= 1;
                }
                if rng.below(3) == 0 && at < s.len() {
                    let mut end = at + 1;
                    while !s.is_char_boundary(end) {
                        end += 1;
                    }
                    s.replace_range(at..end, "");
                } else {
                    s.insert_str(at, tokens[rng.below(tokens.len())]);
                }
            }
            out.push(s);
        }
        out
    }

    #[test]
    fn fast_path_agrees_with_the_general_path() {
        let (mut fast, mut total) = (0, 0);
        for text in tag_variants() {
            let doc = format!("<{text}/>");
            let mut reader = Reader::from_str(&doc);
            let Ok(Event::Empty(e)) = reader.read_event() else {
                continue;
            };
            let name = e.name();
            let name = name.as_ref().as_bytes();
            total += 1;
            if matches!(name, b"node" | b"way" | b"relation") {
                let mut spare = Vec::new();
                let (mut a, mut b) = (RawElement::default(), RawElement::default());
                a.clear(&mut spare);
                b.clear(&mut spare);
                let mut spans = [(0, 0, 0, 0); MAX_PLAIN];
                let plain = Plain::of(&e, &mut spans);
                if plain.is_some_and(|p| element_attrs_fast(&p, &mut a).is_ok()) {
                    fast += 1;
                    assert_eq!(element_attrs(&e, &mut b), Ok(()), "{text}");
                    assert_eq!(a, b, "{text}");
                }
            } else if name == b"changeset" {
                let mut spare = Vec::new();
                let (mut a, mut b) = (RawChangeset::default(), RawChangeset::default());
                a.clear(&mut spare);
                b.clear(&mut spare);
                let mut spans = [(0, 0, 0, 0); MAX_PLAIN];
                let plain = Plain::of(&e, &mut spans);
                if plain.is_some_and(|p| changeset_attrs_fast(&p, &mut a).is_ok()) {
                    fast += 1;
                    assert_eq!(changeset_attrs(&e, &mut b), Ok(()), "{text}");
                    assert_eq!(a, b, "{text}");
                }
            } else {
                for in_changeset in [false, true] {
                    let (mut a, mut b) = (RawElement::default(), RawElement::default());
                    let (mut ca, mut cb) = (RawChangeset::default(), RawChangeset::default());
                    let mut spare = vec![("old".to_owned(), "strings".to_owned())];
                    let tags = if in_changeset {
                        &mut ca.tags
                    } else {
                        &mut a.tags
                    };
                    let mut spans = [(0, 0, 0, 0); MAX_PLAIN];
                    let plain = Plain::of(&e, &mut spans);
                    if plain.is_some_and(|p| {
                        child_fast(
                            &p,
                            name,
                            in_changeset,
                            &mut a.refs,
                            &mut a.members,
                            tags,
                            &mut spare,
                        )
                        .is_ok()
                    }) {
                        fast += 1;
                        let general = child(&e, name, &mut b, &mut cb, in_changeset);
                        assert_eq!(general, Ok(()), "{text}");
                        assert_eq!((a.clone(), ca.clone()), (b, cb), "{text}");
                    }
                }
            }
        }
        // A good share of the variants is still plain, and many are not.
        assert!(total > 30_000, "{total}");
        assert!(fast > total / 5 && fast < total / 2, "{fast} of {total}");
    }

    #[test]
    fn first_below_matches_a_byte_loop() {
        let mut rng = Rng::new(3);
        for _ in 0..20_000 {
            let len = rng.below(40);
            let b: Vec<u8> = (0..len)
                .map(|_| match rng.below(4) {
                    0 => u8::try_from(rng.next() % 256).unwrap(),
                    1 => b" \t\"'&=<>/"[rng.below(9)],
                    _ => b'a' + u8::try_from(rng.below(26)).unwrap(),
                })
                .collect();
            let start = rng.below(len + 1);
            for limit in [0, 1, b'(', b'@', 128] {
                let expected = (start..len).find(|&i| b[i] < limit).unwrap_or(len);
                assert_eq!(
                    first_below(&b, start, limit),
                    expected,
                    "{b:?} from {start} below {limit}"
                );
            }
        }
    }

    /// The first error quick-xml itself gives on `doc` in its default configuration (which
    /// checks end tags against start tags), as `read_osm` reports it, with its position.
    fn quick_xml_error(doc: &str) -> Option<(u64, String)> {
        let mut reader = Reader::from_reader(doc.as_bytes());
        reader.config_mut().trim_text(true);
        let mut buf = Vec::new();
        loop {
            match reader.read_event_into(&mut buf) {
                Err(e) => return Some((reader.error_position(), format!("malformed XML: {e}"))),
                Ok(Event::Eof) => return None,
                Ok(_) => buf.clear(),
            }
        }
    }

    #[test]
    fn end_tags_are_checked_as_quick_xml_checks_them() {
        let node = r#"<node id="1" lat="1" lon="1">"#;
        for doc in [
            // Start and end tag both read by the fast lane.
            format!("<osm>{node}</way></osm>"),
            format!("<osm>\n  {node}\n  </way \t>\n</osm>"),
            format!("<osmChange><create>{node}</node></create></modify></osmChange>"),
            // After text quick-xml reads the start tag, and then the end tag too.
            format!("<osm>text{node}</way></osm>"),
            format!("<osm>text{node} </nod ></osm>"),
            // A name the fast lane leaves to quick-xml.
            "<osm><x-y></x-z></osm>".to_owned(),
            // End tags with nothing open.
            "<osm></osm></osm>".to_owned(),
            "<osm><node id=\"1\"/></osm></node>".to_owned(),
            // After a byte order mark, which quick-xml does not count in its positions.
            "\u{feff} <osm>  </node></osm>".to_owned(),
            format!("\u{feff}<osm>{node}</way ></osm>"),
        ] {
            let expected = quick_xml_error(&doc);
            assert!(expected.is_some(), "{doc}");
            match read(&doc) {
                Err(ReadError::Parse(p)) => {
                    assert_eq!(Some((p.offset, p.message)), expected, "{doc}");
                }
                other => panic!(
                    "{doc}: expected a parse error, got {:?}",
                    other.map(|r| r.0)
                ),
            }
        }
    }
}
