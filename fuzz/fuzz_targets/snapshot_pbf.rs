//! Fuzzes the PBF snapshot reader (blob framing, header checks, parallel blob decoding) through
//! a file, as the ingest reads it; seeds in `fuzz/seeds/snapshot_pbf/`. It must return the
//! elements or a format error, never panic.
#![no_main]

use std::sync::atomic::AtomicU64;

use hexvigil::ingest::pbf::read_pbf;
use hexvigil::ingest::IngestError;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    // One file per fuzzing process, rewritten for every input.
    let path = std::env::temp_dir().join(format!("hexvigil-fuzz-{}.osm.pbf", std::process::id()));
    if std::fs::write(&path, data).is_err() {
        return;
    }
    match read_pbf(&path, &AtomicU64::new(0), &mut |_| Ok(())) {
        Ok(()) => {}
        Err(IngestError::Format { message, .. }) => assert!(!message.is_empty()),
        Err(e) => panic!("unexpected kind of error: {e}"),
    }
});
