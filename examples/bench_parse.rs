//! Reads an OSM XML file (plain, gzip or bzip2) with hexvigil's streaming reader and discards
//! what it finds: the cost of decompressing and parsing alone, without the database, for the
//! ingest benchmark (`bench/ingest.sh`).
//!
//! Usage: `bench_parse FILE [--decompress-only]`

use hexvigil::ingest::xml::{read_osm, OsmSink, RawChangeset, RawElement, SinkError};
use hexvigil::model::Op;

/// Counts what the reader hands over.
#[derive(Default)]
struct Count {
    elements: u64,
    changesets: u64,
    tags: u64,
}

impl OsmSink for Count {
    fn changeset(&mut self, _cs: &RawChangeset) -> Result<(), SinkError> {
        self.changesets += 1;
        Ok(())
    }

    fn element(&mut self, _op: Option<Op>, el: &RawElement) -> Result<(), SinkError> {
        self.elements += 1;
        self.tags += el.tags.len() as u64;
        Ok(())
    }

    fn skipped(&mut self, _reason: &'static str) {}
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let path = std::env::args().nth(1).ok_or("usage: bench_parse FILE")?;
    let started = std::time::Instant::now();
    let mut input = hexvigil::ingest::open_decompressed(std::path::Path::new(&path))?;
    if std::env::args().nth(2).as_deref() == Some("--decompress-only") {
        let n = std::io::copy(&mut input, &mut std::io::sink())?;
        println!("{n} bytes in {:.2} s", started.elapsed().as_secs_f64());
        return Ok(());
    }
    let mut sink = Count::default();
    read_osm(input, &mut sink).map_err(|e| format!("{path}: {e:?}"))?;
    let secs = started.elapsed().as_secs_f64();
    println!(
        "{} elements, {} changesets, {} tags in {secs:.2} s ({:.0} elements/s)",
        sink.elements,
        sink.changesets,
        sink.tags,
        sink.elements as f64 / secs
    );
    Ok(())
}
