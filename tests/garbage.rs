//! "Must not panic on garbage": the osmChange, changeset and snapshot readers (XML and PBF) get
//! thousands of deterministic mutations of valid fixtures (byte flips, truncations, splices,
//! inserted XML and number tokens) and must return either a result or a typed error with a
//! position inside the input, never panic. This is the stable-toolchain companion of the
//! `cargo fuzz` targets under `fuzz/` (see DEVELOPERS.md); the bad-input corpus and every
//! input the fuzzers found are replayed here.

use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicU64;

use hexvigil::ingest::pbf::read_pbf;
use hexvigil::ingest::xml::{read_osm, OsmSink, RawChangeset, RawElement, ReadError, SinkError};
use hexvigil::ingest::IngestError;
use hexvigil::model::Op;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures")
        .join(name)
}

/// Counts what the reader hands on, so a result is looked at.
#[derive(Default)]
struct Count {
    changesets: usize,
    elements: usize,
    skipped: usize,
}

impl OsmSink for Count {
    fn changeset(&mut self, _: &RawChangeset) -> Result<(), SinkError> {
        self.changesets += 1;
        Ok(())
    }
    fn element(&mut self, _: Option<Op>, _: &RawElement) -> Result<(), SinkError> {
        self.elements += 1;
        Ok(())
    }
    fn skipped(&mut self, _: &'static str) {
        self.skipped += 1;
    }
}

/// SplitMix64 (Steele, Lea, Flood 2014): a seeded, dependency-free source of mutations.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        usize::try_from(self.next() % (n.max(1) as u64)).unwrap()
    }
}

/// Tokens that reach the readers' less travelled paths. Common practice, no source: the kind
/// of dictionary a fuzzer is given for XML and numbers.
const TOKENS: &[&[u8]] = &[
    b"<",
    b">",
    b"\"",
    b"'",
    b"&",
    b"&amp;",
    b"&#0;",
    b"&#xFFFFFFFF;",
    b"]]>",
    b"<![CDATA[",
    b"<!--",
    b"<!DOCTYPE x [<!ENTITY a \"aaaa\">]>",
    b"<?xml version=\"1.0\"?>",
    b"</osmChange>",
    b"<delete>",
    b"<node id=\"1\"/>",
    b"<way id=\"2\"><nd ref=\"1\"/></way>",
    b"<member type=\"way\" ref=\"-1\" role=\"\"/>",
    b"<changeset id=\"3\"/>",
    b"<tag k=\"name\" v=\"x\"/>",
    b" visible=\"false\"",
    b"-9223372036854775808",
    b"9223372036854775808",
    b"1e400",
    b"-0",
    b"NaN",
    b"inf",
    b"2026-02-30T25:61:61Z",
    b"\xff\xfe",
    b"\xc3\x28",
    b"\0",
];

/// One deterministic mutation of `seed`, and what it was (for the failure message).
fn mutate(seed: &[u8], rng: &mut Rng) -> (Vec<u8>, String) {
    let mut v = seed.to_vec();
    let mut what = Vec::new();
    for _ in 0..=rng.below(3) {
        match rng.below(5) {
            0 if !v.is_empty() => {
                let i = rng.below(v.len());
                let b = u8::try_from(rng.next() & 0xFF).unwrap();
                v[i] = b;
                what.push(format!("byte {i} = {b:#04x}"));
            }
            1 => {
                let n = rng.below(v.len() + 1);
                v.truncate(n);
                what.push(format!("truncate to {n}"));
            }
            2 if !v.is_empty() => {
                // Splice: copy a piece of the input over another place.
                let from = rng.below(v.len());
                let len = rng.below((v.len() - from).min(256) + 1);
                let piece = v[from..from + len].to_vec();
                let to = rng.below(v.len() + 1);
                v.splice(to..to, piece);
                what.push(format!("splice {from}+{len} at {to}"));
            }
            3 => {
                let t = TOKENS[rng.below(TOKENS.len())];
                let at = rng.below(v.len() + 1);
                v.splice(at..at, t.iter().copied());
                what.push(format!("insert {:?} at {at}", String::from_utf8_lossy(t)));
            }
            _ if !v.is_empty() => {
                let from = rng.below(v.len());
                let len = rng.below((v.len() - from).min(64) + 1);
                v.drain(from..from + len);
                what.push(format!("delete {from}+{len}"));
            }
            _ => {}
        }
    }
    (v, what.join(", "))
}

/// Reads XML bytes; `Err` describes a panic or an error that breaks the contract.
fn check_xml(data: &[u8]) -> Result<(), String> {
    let mut sink = Count::default();
    let result =
        std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| read_osm(data, &mut sink)))
            .map_err(|_| "panicked".to_owned())?;
    match result {
        Ok(_) => Ok(()),
        Err(ReadError::Parse(p)) if p.message.is_empty() => Err("empty error message".to_owned()),
        Err(ReadError::Parse(p)) if p.offset > data.len() as u64 => Err(format!(
            "error offset {} beyond the input's {} bytes: {}",
            p.offset,
            data.len(),
            p.message
        )),
        Err(ReadError::Parse(_)) => Ok(()),
        Err(ReadError::Sink(e)) => Err(format!("the counting sink never fails, yet: {e}")),
    }
}

/// Reads PBF bytes through a file, as the ingest does.
fn check_pbf(data: &[u8], file: &Path) -> Result<(), String> {
    std::fs::write(file, data).unwrap();
    let bytes = AtomicU64::new(0);
    let mut items = 0usize;
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
        read_pbf(file, &bytes, &mut |batch| {
            items += batch.len();
            Ok(())
        })
    }))
    .map_err(|_| "panicked".to_owned())?;
    match result {
        Ok(()) => Ok(()),
        Err(IngestError::Format { message, .. }) if message.is_empty() => {
            Err("empty error message".to_owned())
        }
        Err(IngestError::Format { .. }) => Ok(()),
        Err(other) => Err(format!("unexpected kind of error: {other}")),
    }
}

/// Seeds of each reader: valid files of each kind.
const XML_SEEDS: [&str; 4] = [
    "ingest/history.osc",
    "ingest/deleted_nodes.osc",
    "ingest/changesets.osm",
    "ingest/small.osm",
];

#[test]
fn xml_readers_survive_thousands_of_mutations() {
    let mut failures = Vec::new();
    let mut runs = 0;
    for (s, name) in XML_SEEDS.iter().enumerate() {
        let seed = std::fs::read(fixture(name)).unwrap();
        // The unmutated seed must read cleanly, so the mutations start from valid input.
        let mut sink = Count::default();
        assert!(read_osm(&seed[..], &mut sink).is_ok(), "{name} is valid");
        assert!(sink.elements + sink.changesets > 0, "{name} holds data");
        let mut rng = Rng(0x6761_7262_6167_6500 + s as u64);
        for i in 0..1500 {
            let (data, what) = mutate(&seed, &mut rng);
            runs += 1;
            if let Err(e) = check_xml(&data) {
                failures.push(format!("{name} mutation {i} ({what}): {e}"));
            }
        }
    }
    assert_eq!(runs, 6000);
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn pbf_reader_survives_thousands_of_mutations() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("m.osm.pbf");
    let seed = std::fs::read(fixture("ingest/small.osm.pbf")).unwrap();
    assert_eq!(check_pbf(&seed, &file), Ok(()));
    let mut rng = Rng(0x7062_6600);
    let mut failures = Vec::new();
    for i in 0..2000 {
        let (data, what) = mutate(&seed, &mut rng);
        if let Err(e) = check_pbf(&data, &file) {
            failures.push(format!("small.osm.pbf mutation {i} ({what}): {e}"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// The bad-input corpus and every input the fuzzers found (kept in `fuzz/regressions/`, named
/// after what they found) go straight to the readers: `.pbf` files to the PBF reader, the rest
/// (compressed files as raw bytes) to the XML reader; none may panic.
#[test]
fn bad_corpus_and_fuzz_regressions_read_without_panic() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let tmp = tempfile::tempdir().unwrap();
    let mut failures = Vec::new();
    let mut checked = 0;
    for dir in ["fixtures/bad", "fuzz/regressions"] {
        for entry in std::fs::read_dir(root.join(dir)).unwrap() {
            let path = entry.unwrap().path();
            let name = path.file_name().unwrap().to_string_lossy().into_owned();
            if name.ends_with(".md") || name.ends_with(".tsv") || name.ends_with(".geojson") {
                continue;
            }
            let data = std::fs::read(&path).unwrap();
            let r = if name.ends_with(".pbf") {
                check_pbf(&data, &tmp.path().join("r.osm.pbf"))
            } else {
                check_xml(&data)
            };
            checked += 1;
            if let Err(e) = r {
                failures.push(format!("{dir}/{name}: {e}"));
            }
        }
    }
    assert!(checked >= 40, "only {checked} files replayed");
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
