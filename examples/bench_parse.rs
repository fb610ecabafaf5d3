//! Reads an OSM XML file (plain, gzip or bzip2) with hexvigil's streaming reader and discards
//! what it finds: the cost of decompressing and parsing alone, without the database, for the
//! ingest benchmark (`bench/ingest.sh`) and `bench/parse.sh`.
//!
//! Usage: `bench_parse FILE [--decompress-only | --hash]`
//!
//! `--hash` also hashes everything the reader hands over (each element, changeset and skip
//! reason in its `Debug` form, and the outcome), so that two builds of the reader can be
//! checked to read a large file the same way; hashing makes the run slower, so time runs
//! without it.

use std::hash::{DefaultHasher, Hasher};

use hexvigil::ingest::xml::{read_osm, OsmSink, RawChangeset, RawElement, ReadError, SinkError};
use hexvigil::model::Op;

/// Counts what the reader hands over, and hashes it when asked.
#[derive(Default)]
struct Count {
    elements: u64,
    changesets: u64,
    tags: u64,
    hash: Option<DefaultHasher>,
}

impl Count {
    fn hash(&mut self, what: std::fmt::Arguments<'_>) {
        if let Some(h) = &mut self.hash {
            h.write(what.to_string().as_bytes());
        }
    }
}

impl OsmSink for Count {
    fn changeset(&mut self, cs: &RawChangeset) -> Result<(), SinkError> {
        self.changesets += 1;
        self.hash(format_args!("C {cs:?}"));
        Ok(())
    }

    fn element(&mut self, op: Option<Op>, el: &RawElement) -> Result<(), SinkError> {
        self.elements += 1;
        self.tags += el.tags.len() as u64;
        self.hash(format_args!("E {op:?} {el:?}"));
        Ok(())
    }

    fn skipped(&mut self, reason: &'static str) {
        self.hash(format_args!("S {reason}"));
    }
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let path = std::env::args().nth(1).ok_or("usage: bench_parse FILE")?;
    let option = std::env::args().nth(2);
    let started = std::time::Instant::now();
    let mut input = hexvigil::ingest::open_decompressed(std::path::Path::new(&path))?;
    if option.as_deref() == Some("--decompress-only") {
        let n = std::io::copy(&mut input, &mut std::io::sink())?;
        println!("{n} bytes in {:.2} s", started.elapsed().as_secs_f64());
        return Ok(());
    }
    let mut sink = Count {
        hash: (option.as_deref() == Some("--hash")).then(DefaultHasher::new),
        ..Count::default()
    };
    let outcome = read_osm(input, &mut sink);
    let secs = started.elapsed().as_secs_f64();
    match &outcome {
        Ok(root) => sink.hash(format_args!("ok {root:?}")),
        Err(ReadError::Parse(p)) => sink.hash(format_args!("err {} {}", p.offset, p.message)),
        Err(ReadError::Sink(e)) => sink.hash(format_args!("sink {e}")),
    }
    if let Some(h) = &sink.hash {
        println!("hash {:016x}", h.finish());
    }
    outcome.map_err(|e| format!("{path}: {e:?}"))?;
    println!(
        "{} elements, {} changesets, {} tags in {secs:.2} s ({:.0} elements/s)",
        sink.elements,
        sink.changesets,
        sink.tags,
        sink.elements as f64 / secs
    );
    Ok(())
}
