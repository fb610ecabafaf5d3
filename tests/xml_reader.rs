//! The XML reader's bound on one read: a tag, text run or comment longer than
//! `MAX_EVENT_BYTES` is refused with an error at its start, after reading little more than the
//! limit from the input, while whitespace between tags and tags below the limit behave as
//! before.

use std::io::{BufReader, Read};

use hexvigil::ingest::xml::{
    read_osm, OsmSink, ParseError, RawChangeset, RawElement, ReadError, SinkError, MAX_EVENT_BYTES,
};
use hexvigil::model::Op;

#[derive(Default)]
struct Count {
    elements: usize,
}

impl OsmSink for Count {
    fn changeset(&mut self, _: &RawChangeset) -> Result<(), SinkError> {
        Ok(())
    }
    fn element(&mut self, _: Option<Op>, _: &RawElement) -> Result<(), SinkError> {
        self.elements += 1;
        Ok(())
    }
    fn skipped(&mut self, _: &'static str) {}
}

fn parse_error(data: &[u8]) -> ParseError {
    match read_osm(data, &mut Count::default()) {
        Err(ReadError::Parse(p)) => p,
        Err(ReadError::Sink(e)) => panic!("sink error: {e}"),
        Ok(root) => panic!("read as {root:?}"),
    }
}

const TOO_LONG: &str = "longer than 1048576 bytes";

#[test]
fn a_tag_longer_than_the_limit_is_refused_at_its_start() {
    let mut doc = b"<osm>\n  <node id=\"1\" lat=\"1\" lon=\"1\" user=\"".to_vec();
    doc.resize(doc.len() + 2 * MAX_EVENT_BYTES, b'a');
    doc.extend_from_slice(b"\"/>\n</osm>");
    let p = parse_error(&doc);
    assert!(p.message.contains(TOO_LONG), "{}", p.message);
    // The tag's '<' is after "<osm>\n  ".
    assert_eq!(p.offset, 8);
}

#[test]
fn text_and_comments_longer_than_the_limit_are_refused() {
    for (open, fill, close) in [
        ("", b'x', ""),
        ("<!--", b'-', "-->"),
        ("<![CDATA[", b'c', "]]>"),
    ] {
        let mut doc = b"<osm><node id=\"1\" lat=\"1\" lon=\"1\"/>  ".to_vec();
        let start = doc.len() as u64;
        doc.extend_from_slice(open.as_bytes());
        doc.resize(doc.len() + MAX_EVENT_BYTES + 1, fill);
        doc.extend_from_slice(format!("{close}</osm>").as_bytes());
        let p = parse_error(&doc);
        assert!(p.message.contains(TOO_LONG), "{open}: {}", p.message);
        assert_eq!(p.offset, start, "{open}");
    }
}

#[test]
fn the_limit_is_exact() {
    let head = b"<osm><node id=\"1\" lat=\"1\" lon=\"1\" user=\"";
    let tail = b"\"/></osm>";
    for extra in [0, 1] {
        let mut doc = head.to_vec();
        // The tag from '<' to '>' is MAX_EVENT_BYTES + extra long.
        doc.resize(5 + MAX_EVENT_BYTES + extra - (tail.len() - 6), b'a');
        doc.extend_from_slice(tail);
        let p = parse_error(&doc);
        let expected = if extra == 0 { "at most 1024" } else { TOO_LONG };
        assert!(p.message.contains(expected), "{extra}: {}", p.message);
        assert_eq!(p.offset, 5);
    }
}

#[test]
fn whitespace_between_tags_does_not_count() {
    let mut doc = b"<osm>".to_vec();
    doc.extend(std::iter::repeat_n(b" \n\t\r", MAX_EVENT_BYTES).flatten());
    doc.extend_from_slice(b"<node id=\"1\" lat=\"1\" lon=\"1\"/>");
    doc.extend(std::iter::repeat_n(b'\n', 3 * MAX_EVENT_BYTES));
    doc.extend_from_slice(b"</osm>");
    let mut sink = Count::default();
    assert!(read_osm(&doc[..], &mut sink).is_ok());
    assert_eq!(sink.elements, 1);
}

/// A 64 MiB attribute value (then the end of the input), counting what is read of it.
struct HugeValue {
    head: &'static [u8],
    served: usize,
}

impl Read for HugeValue {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = buf.len().min((64 << 20) - self.served);
        for (i, b) in buf[..n].iter_mut().enumerate() {
            *b = self.head.get(self.served + i).copied().unwrap_or(b'z');
        }
        self.served += n;
        Ok(n)
    }
}

#[test]
fn memory_stays_bounded_on_a_huge_tag() {
    let mut input = HugeValue {
        head: b"<osmChange><create><node id=\"1\" user=\"",
        served: 0,
    };
    let p = match read_osm(BufReader::new(&mut input), &mut Count::default()) {
        Err(ReadError::Parse(p)) => p,
        other => panic!("expected a parse error, got {:?}", other.map(|_| ())),
    };
    assert!(p.message.contains(TOO_LONG), "{}", p.message);
    assert_eq!(p.offset, 19);
    // Read: the limit, plus at most one buffer of the reader and one of the BufReader.
    assert!(input.served > MAX_EVENT_BYTES);
    assert!(
        input.served < MAX_EVENT_BYTES + (1 << 18),
        "{} bytes read",
        input.served
    );
}

/// Hands out its input 1 to `most` bytes at a time, so that tags straddle the ends of the
/// reader's buffer.
struct Trickle<'a> {
    data: &'a [u8],
    most: usize,
    step: usize,
}

impl Read for Trickle<'_> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        self.step = self.step.wrapping_mul(31).wrapping_add(7);
        let n = (1 + self.step % self.most)
            .min(buf.len())
            .min(self.data.len());
        buf[..n].copy_from_slice(&self.data[..n]);
        self.data = &self.data[n..];
        Ok(n)
    }
}

/// Everything the reader hands over, in order, and how it ends.
#[derive(Default)]
struct Record(Vec<String>);

impl OsmSink for Record {
    fn changeset(&mut self, cs: &RawChangeset) -> Result<(), SinkError> {
        self.0.push(format!("{cs:?}"));
        Ok(())
    }
    fn element(&mut self, op: Option<Op>, el: &RawElement) -> Result<(), SinkError> {
        self.0.push(format!("{op:?} {el:?}"));
        Ok(())
    }
    fn skipped(&mut self, reason: &'static str) {
        self.0.push(reason.to_owned());
    }
}

fn record(input: impl std::io::BufRead) -> Vec<String> {
    let mut sink = Record::default();
    let end = match read_osm(input, &mut sink) {
        Ok(root) => format!("{root:?}"),
        Err(ReadError::Parse(p)) => format!("{} at {}", p.message, p.offset),
        Err(ReadError::Sink(e)) => format!("sink: {e}"),
    };
    sink.0.push(end);
    sink.0
}

/// The reader takes tags that lie whole in its buffer itself and leaves the others, and
/// everything after text, to quick-xml: what it reads, every error and every error position
/// must not depend on where the input's reads happen to end. The XML files of the fixtures,
/// and seeded edits of them, read at once and a few bytes at a time.
#[test]
fn any_read_size_gives_the_same_result() {
    let mut files = Vec::new();
    for dir in ["fixtures/ingest", "fixtures/bad"] {
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join(dir);
        for entry in std::fs::read_dir(dir).unwrap() {
            let path = entry.unwrap().path();
            if path.extension().is_some_and(|e| e == "osm" || e == "osc") {
                files.push(std::fs::read(&path).unwrap());
            }
        }
    }
    assert!(files.len() > 20, "{} files", files.len());
    let edits: [&[u8]; 12] = [
        b" ",
        b"\n",
        b"\"",
        b"'",
        b">",
        b"<",
        b"/",
        b"&amp;",
        b"</node>",
        b"</way >",
        b"<tag k=\"a\" v=\"b\"/>",
        b"\xff",
    ];
    // Seeded edits.
    let mut rng = <rand_chacha::ChaCha8Rng as rand::SeedableRng>::seed_from_u64(5);
    let mut next = move || usize::try_from(rand::RngCore::next_u32(&mut rng)).unwrap();
    let mut cases = 0;
    for file in &files {
        // The large fixtures (thousands of tags, deep nesting) once each, in larger reads.
        let (rounds, sizes): (usize, &[usize]) = if file.len() > 40_000 {
            (1, &[64, 3000])
        } else {
            (60, &[1, 5, 64, 3000])
        };
        for round in 0..rounds {
            let mut doc = file.clone();
            if round > 0 {
                let at = next() % (doc.len() + 1);
                let edit = edits[next() % edits.len()];
                if next() % 3 == 0 && at < doc.len() {
                    doc.remove(at);
                } else {
                    doc.splice(at..at, edit.iter().copied());
                }
            }
            let whole = record(&doc[..]);
            for &most in sizes {
                let input = Trickle {
                    data: &doc,
                    most,
                    step: round,
                };
                assert_eq!(
                    record(BufReader::new(input)),
                    whole,
                    "{}",
                    String::from_utf8_lossy(&doc)
                );
            }
            cases += 1;
        }
    }
    assert!(cases > 1_000, "{cases}");
}
