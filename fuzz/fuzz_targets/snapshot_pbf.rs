//! Fuzzes the PBF snapshot reader (blob framing, header checks, parallel blob decoding) through
//! a file, as the ingest reads it; seeds in `fuzz/seeds/snapshot_pbf/`. It must return the
//! elements or a format error, never let a panic out.
//!
//! `read_pbf` wraps the `osmpbf` decoder in `catch_unwind` and reports its panics as format
//! errors. libfuzzer-sys installs a panic hook that aborts on every panic, caught or not, which
//! would count those contained panics as crashes; the target puts the default hook back, so
//! only a panic that escapes `read_pbf` reaches libFuzzer (its wrapper aborts on it).
#![no_main]

use std::sync::atomic::AtomicU64;
use std::sync::Once;

use hexvigil::ingest::pbf::read_pbf;
use hexvigil::ingest::IngestError;
use libfuzzer_sys::fuzz_target;

static DEFAULT_HOOK: Once = Once::new();

fuzz_target!(|data: &[u8]| {
    // Replaces libfuzzer-sys's aborting hook by the default one.
    DEFAULT_HOOK.call_once(|| drop(std::panic::take_hook()));
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
