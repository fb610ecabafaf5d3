//! Fuzzes the streaming XML reader on XML snapshots (`<osm>` with nodes, ways and relations); seeds in `fuzz/seeds/snapshot_xml/`.
//! The reader must return a root or a parse error positioned inside the input, never panic.
#![no_main]

use hexvigil::ingest::xml::{read_osm, OsmSink, RawChangeset, RawElement, ReadError, SinkError};
use hexvigil::model::Op;
use libfuzzer_sys::fuzz_target;

struct Discard;

impl OsmSink for Discard {
    fn changeset(&mut self, _: &RawChangeset) -> Result<(), SinkError> {
        Ok(())
    }
    fn element(&mut self, _: Option<Op>, _: &RawElement) -> Result<(), SinkError> {
        Ok(())
    }
    fn skipped(&mut self, _: &'static str) {}
}

fuzz_target!(|data: &[u8]| {
    if let Err(ReadError::Parse(p)) = read_osm(data, &mut Discard) {
        assert!(!p.message.is_empty(), "an error without words");
        assert!(
            p.offset <= data.len() as u64,
            "offset {} beyond the input",
            p.offset
        );
    }
});
