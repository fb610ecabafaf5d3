//! Benchmark of the node-location index (run by `bench/node_index.sh`, which also measures the
//! peak resident memory): builds an index of N nodes the way a snapshot ingest does, applies a
//! week-sized update as a second generation, then times random lookups.
//!
//! Usage: `bench_node_index DIR [NODES] [UPDATES] [LOOKUPS]` (defaults 50 000 000, 1 000 000,
//! 2 000 000). Prints one `key: value` line per figure.

use std::path::PathBuf;
use std::time::Instant;

use hexvigil::model::Coord;
use hexvigil::node_index::{NodeEntry, NodeIndex, NodeIndexTx};

/// SplitMix64: a fixed, fast pseudo-random sequence (Source: Steele, Lea, Flood 2014).
fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Node number `i`: ids increase with gaps, like an extract's, and positions scatter over a
/// country-sized box.
fn node(i: u64, salt: u64) -> (i64, NodeEntry) {
    let id = i64::try_from(i * 5 + mix(i) % 5).unwrap_or(i64::MAX);
    let r = mix(i ^ (salt << 40));
    let lat = 450_000_000 + i64::try_from(r >> 40).unwrap_or(0) % 50_000_000;
    let lon = 50_000_000 + i64::try_from((r >> 8) & 0xFF_FFFF).unwrap_or(0) * 4;
    let coord =
        Coord::from_e7(lat, lon).unwrap_or_else(|| unreachable!("in range by construction"));
    (
        id,
        NodeEntry::new(coord, 1 + i64::try_from(salt).unwrap_or(0)),
    )
}

fn arg(n: usize, default: u64) -> u64 {
    std::env::args()
        .nth(n)
        .and_then(|a| a.replace('_', "").parse().ok())
        .unwrap_or(default)
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let dir = PathBuf::from(
        std::env::args()
            .nth(1)
            .ok_or("usage: bench_node_index DIR [NODES] [UPDATES] [LOOKUPS]")?,
    );
    let (n, updates, lookups) = (arg(2, 50_000_000), arg(3, 1_000_000), arg(4, 2_000_000));
    let prefix = dir.join("bench.db.nodes");

    let t = Instant::now();
    let mut tx = NodeIndexTx::begin(&prefix, 0)?;
    for i in 0..n {
        let (id, e) = node(i, 0);
        tx.stage(id, e)?;
    }
    let g1 = tx.prepare()?.ok_or("nothing staged")?;
    let build = t.elapsed().as_secs_f64();
    let generation = g1.generation();
    g1.committed();
    let path = hexvigil::generations::path(&prefix, generation);
    let size = std::fs::metadata(&path)?.len();
    println!("nodes: {n}");
    println!("build_s: {build:.2}");
    println!("build_nodes_per_s: {:.0}", n as f64 / build);
    println!("file_bytes: {size}");
    println!("bytes_per_node: {:.2}", size as f64 / n as f64);

    // A week of diffs touches a small share of nodes, in no particular order: staged with
    // lookups of the previous state (as the ingest does), then merged into a new generation.
    let t = Instant::now();
    let mut tx = NodeIndexTx::begin(&prefix, generation)?;
    let mut found = 0u64;
    for k in 0..updates {
        let i = mix(k ^ 0xABCD) % n;
        let (id, e) = node(i, 1);
        found += u64::from(tx.get(id)?.is_some());
        tx.stage(id, e)?;
    }
    let g2 = tx.prepare()?.ok_or("nothing staged")?;
    let update = t.elapsed().as_secs_f64();
    let generation = g2.generation();
    g2.committed();
    println!("update_nodes: {updates}");
    println!("update_s: {update:.2}");
    if found != updates {
        return Err(format!(
            "{} of {updates} updated nodes were not found",
            updates - found
        )
        .into());
    }

    let index = NodeIndex::open_generation(&prefix, generation)?;
    let t = Instant::now();
    let mut wrong = 0u64;
    for k in 0..lookups {
        let i = mix(k ^ 0x1234_5678) % n;
        let (id, mut want) = node(i, 0);
        let got = index.get(id)?;
        if let Some(g) = got {
            if g.version == 2 {
                want = node(i, 1).1;
            }
        }
        wrong += u64::from(got != Some(want));
        // An id in the gap beside a present one must not be found.
        let r = i64::try_from(mix(i) % 5).unwrap_or(0);
        let absent = id - r + (r + 1) % 5;
        wrong += u64::from(index.get(absent)?.is_some());
    }
    let lookup = t.elapsed().as_secs_f64();
    println!("lookups: {}", lookups * 2);
    println!("lookup_s: {lookup:.2}");
    println!("lookups_per_s: {:.0}", (lookups * 2) as f64 / lookup);
    println!("wrong_lookups: {wrong}");
    if wrong > 0 {
        return Err(format!("{wrong} wrong lookups").into());
    }
    Ok(())
}
