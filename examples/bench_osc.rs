//! Writes a synthetic gzip-compressed osmChange file for the ingest benchmark
//! (`bench/ingest.sh`): a week of edits by a few thousand fictional mappers over a
//! country-sized box, with the mix of a real week (mostly node creations, then modifications,
//! ways, deletions without coordinates, a few relations).
//!
//! Usage: `bench_osc OUT.osc.gz [ELEMENTS]` (default 5 000 000).

use std::io::Write;

/// SplitMix64 (Source: Steele, Lea, Flood 2014).
fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

const TAGS: [(&str, &str); 8] = [
    ("building", "yes"),
    ("highway", "residential"),
    ("amenity", "bench"),
    ("shop", "bakery"),
    ("natural", "tree"),
    ("barrier", "fence"),
    ("landuse", "meadow"),
    ("name", "Harbour Lane"),
];

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let out = std::env::args()
        .nth(1)
        .ok_or("usage: bench_osc OUT.osc.gz [ELEMENTS]")?;
    let n: u64 = std::env::args()
        .nth(2)
        .and_then(|a| a.replace('_', "").parse().ok())
        .unwrap_or(5_000_000);
    let file = std::fs::File::create(&out)?;
    let mut w = std::io::BufWriter::with_capacity(
        1 << 20,
        flate2::write::GzEncoder::new(file, flate2::Compression::default()),
    );
    writeln!(w, "<?xml version=\"1.0\" encoding=\"UTF-8\"?>")?;
    writeln!(
        w,
        "<osmChange version=\"0.6\" generator=\"hexvigil bench\">"
    )?;
    // 2026-02-02T00:00:00Z, a Monday; the edits spread over its week.
    let week_start: u64 = 1_769_990_400;
    let mut next_node: u64 = 1_000_000_000;
    let mut next_way: u64 = 100_000_000;
    let mut next_rel: u64 = 1_000_000;
    let mut i = 0u64;
    while i < n {
        let r = mix(i);
        let changeset = 90_000_000 + i / 50;
        let uid = mix(changeset) % 3000 + 1;
        let secs = week_start + i * 604_800 / n.max(1);
        let ts = chrono::DateTime::from_timestamp(i64::try_from(secs)?, 0)
            .ok_or("time out of range")?
            .format("%Y-%m-%dT%H:%M:%SZ");
        let meta = format!(
            "changeset=\"{changeset}\" uid=\"{uid}\" user=\"mapper{uid}\" timestamp=\"{ts}\""
        );
        let lat = 45.0 + (r % 5_000_000) as f64 * 1e-6;
        let lon = 5.0 + ((r >> 24) % 6_000_000) as f64 * 1e-6;
        let tag = TAGS[usize::try_from(r >> 56).unwrap_or(0) % TAGS.len()];
        let pick = r % 100;
        let block = match pick {
            0..=59 | 85..=96 => "create",
            60..=74 => "modify",
            _ => "delete",
        };
        writeln!(w, " <{block}>")?;
        match pick {
            0..=59 => {
                next_node += 1;
                if pick < 12 {
                    writeln!(w, "  <node id=\"{next_node}\" version=\"1\" {meta} lat=\"{lat:.7}\" lon=\"{lon:.7}\">\n   <tag k=\"{}\" v=\"{}\"/>\n  </node>", tag.0, tag.1)?;
                } else {
                    writeln!(w, "  <node id=\"{next_node}\" version=\"1\" {meta} lat=\"{lat:.7}\" lon=\"{lon:.7}\"/>")?;
                }
            }
            60..=74 => {
                let id = 1 + mix(r) % next_node;
                let v = 2 + r % 5;
                writeln!(w, "  <node id=\"{id}\" version=\"{v}\" {meta} lat=\"{lat:.7}\" lon=\"{lon:.7}\"/>")?;
            }
            75..=82 => {
                let id = 1 + mix(r) % next_node;
                writeln!(
                    w,
                    "  <node id=\"{id}\" version=\"{}\" {meta} visible=\"false\"/>",
                    2 + r % 5
                )?;
            }
            83..=84 => {
                let id = 1 + mix(r) % next_way;
                writeln!(
                    w,
                    "  <way id=\"{id}\" version=\"{}\" {meta} visible=\"false\"/>",
                    2 + r % 3
                )?;
            }
            85..=94 => {
                next_way += 1;
                writeln!(w, "  <way id=\"{next_way}\" version=\"1\" {meta}>")?;
                for k in 0..(4 + r % 8) {
                    writeln!(w, "   <nd ref=\"{}\"/>", next_node.saturating_sub(k * 3))?;
                }
                writeln!(w, "   <tag k=\"{}\" v=\"{}\"/>\n  </way>", tag.0, tag.1)?;
            }
            95..=96 => {
                next_rel += 1;
                writeln!(w, "  <relation id=\"{next_rel}\" version=\"1\" {meta}>")?;
                writeln!(
                    w,
                    "   <member type=\"way\" ref=\"{next_way}\" role=\"outer\"/>"
                )?;
                writeln!(
                    w,
                    "   <member type=\"node\" ref=\"{next_node}\" role=\"label\"/>"
                )?;
                writeln!(w, "   <tag k=\"type\" v=\"multipolygon\"/>\n  </relation>")?;
            }
            _ => {
                let id = 1 + mix(r) % next_node;
                writeln!(
                    w,
                    "  <node id=\"{id}\" version=\"{}\" {meta} visible=\"false\"/>",
                    2 + r % 5
                )?;
            }
        }
        writeln!(w, " </{block}>")?;
        i += 1;
    }
    writeln!(w, "</osmChange>")?;
    w.into_inner().map_err(|e| e.into_error())?.finish()?;
    Ok(())
}
