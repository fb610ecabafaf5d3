//! Reader for `.osm.pbf` snapshots (and history PBF files), with the `osmpbf` crate.
//!
//! Blobs are read from the file in order, a few at a time, and decoded in parallel with rayon
//! (decompression and decoding dominate); the decoded elements are handed on in file order, so
//! the result is the same as a sequential read. The same limits as the XML reader apply (tag
//! sizes, tags per element, way nodes, relation members), and coordinates out of range are
//! fatal for the file.

use std::fs::File;
use std::io::BufReader;
use std::path::Path;
use std::sync::atomic::AtomicU64;

use osmpbf::{BlobDecode, BlobReader, Element, RelMemberType};
use rayon::prelude::*;

use super::xml::{RawElement, SinkError, MAX_MEMBERS, MAX_TAGS, MAX_TAG_BYTES, MAX_WAY_NODES};
use super::{Counting, IngestError, Item};
use crate::model::{Coord, ElementType};

/// Blobs decoded together; each holds up to 8 000 elements (common practice, no source), so a
/// group stays a few tens of megabytes.
const BLOBS_PER_GROUP: usize = 16;

/// Features a PBF header may require that this reader understands.
const SUPPORTED_FEATURES: [&str; 3] = ["OsmSchema-V0.6", "DenseNodes", "HistoricalInformation"];

/// Reads a PBF file, handing each blob's elements to `emit` in file order.
///
/// # Errors
/// [`IngestError::Format`] naming the blob for undecodable or invalid data; the error of
/// `emit` (as a format error naming the file) when the receiver stops.
pub fn read_pbf(
    path: &Path,
    bytes_read: &AtomicU64,
    emit: &mut dyn FnMut(Vec<Item>) -> Result<(), SinkError>,
) -> Result<(), IngestError> {
    let file = File::open(path).map_err(|source| IngestError::Io {
        path: path.to_owned(),
        source,
    })?;
    let fmt = |message: String| IngestError::Format {
        path: path.to_owned(),
        message,
    };
    // Seekable, so that each blob knows its byte offset for error messages.
    let mut blobs = BlobReader::new_seekable(BufReader::with_capacity(
        1 << 20,
        Counting {
            inner: file,
            count: Some(bytes_read),
        },
    ))
    .map_err(|e| fmt(e.to_string()))?;
    let mut index = 0usize;
    let mut last_offset = 0u64;
    let mut seen_header = false;
    loop {
        let mut group = Vec::with_capacity(BLOBS_PER_GROUP);
        for blob in blobs.by_ref().take(BLOBS_PER_GROUP) {
            let blob = blob.map_err(|e| {
                fmt(format!(
                    "PBF blob {} (following the blob at byte {}): {e}",
                    index + group.len(),
                    last_offset
                ))
            })?;
            last_offset = blob.offset().map_or(last_offset, |o| o.0);
            group.push(blob);
        }
        if group.is_empty() {
            break;
        }
        let decoded: Vec<Result<Option<Vec<Item>>, String>> = group
            .par_iter()
            .enumerate()
            .map(|(i, blob)| {
                std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                    decode_blob(blob, index + i == 0 && !seen_header)
                }))
                .unwrap_or_else(|_| Err("the PBF decoder failed on malformed data".to_owned()))
                .map_err(|m| {
                    let at = blob
                        .offset()
                        .map_or(String::new(), |o| format!(" at byte {}", o.0));
                    format!("PBF blob {}{at}: {m}", index + i)
                })
            })
            .collect();
        for d in decoded {
            if let Some(items) = d.map_err(&fmt)? {
                emit(items).map_err(|e| fmt(e.to_string()))?;
            }
        }
        seen_header = true;
        index += group.len();
    }
    if index == 0 {
        return Err(fmt("empty PBF file: no blobs".to_owned()));
    }
    Ok(())
}

/// Decodes one blob: `None` for a header or unknown blob, the elements of a data blob.
fn decode_blob(blob: &osmpbf::Blob, first: bool) -> Result<Option<Vec<Item>>, String> {
    match blob.decode().map_err(|e| e.to_string())? {
        BlobDecode::OsmHeader(h) => {
            if !first {
                return Err("a second OSMHeader blob".to_owned());
            }
            if let Some(f) = h
                .required_features()
                .iter()
                .find(|f| !SUPPORTED_FEATURES.contains(&f.as_str()))
            {
                return Err(format!(
                    "the file requires the feature {f:?}, which this reader does not support"
                ));
            }
            Ok(None)
        }
        BlobDecode::OsmData(_) if first => {
            Err("the file does not start with an OSMHeader blob".to_owned())
        }
        BlobDecode::OsmData(block) => {
            let mut items = Vec::new();
            let mut failure = None;
            block.for_each_element(|e| {
                if failure.is_none() {
                    match convert(&e) {
                        Ok(el) => items.push(el),
                        Err(m) => failure = Some(m),
                    }
                }
            });
            failure.map_or(Ok(Some(items)), Err)
        }
        BlobDecode::Unknown(_) => Ok(None),
    }
}

fn check_tags<'a>(
    el: &mut RawElement,
    tags: impl Iterator<Item = (&'a str, &'a str)>,
) -> Result<(), String> {
    for (k, v) in tags {
        if k.len() > MAX_TAG_BYTES || v.len() > MAX_TAG_BYTES {
            return Err(format!(
                "{} {}: a tag is longer than {MAX_TAG_BYTES} bytes",
                el.etype.map_or("element", ElementType::name),
                el.id
            ));
        }
        if el.tags.len() >= MAX_TAGS {
            return Err(format!("more than {MAX_TAGS} tags on one element"));
        }
        el.tags.push((k.to_owned(), v.to_owned()));
    }
    Ok(())
}

fn set_user(el: &mut RawElement, user: Result<&str, osmpbf::Error>) -> Result<(), String> {
    let user = user.map_err(|e| format!("user name of {}: {e}", el.id))?;
    if user.len() > MAX_TAG_BYTES {
        return Err(format!(
            "user is {} bytes long; at most {MAX_TAG_BYTES} are accepted",
            user.len()
        ));
    }
    el.user.push_str(user);
    Ok(())
}

fn coord(el: &RawElement, lat: i32, lon: i32) -> Result<Option<Coord>, String> {
    if !el.visible {
        // Deleted versions in history files carry no meaningful position.
        return Ok(None);
    }
    Coord::from_e7(i64::from(lat), i64::from(lon))
        .map(Some)
        .ok_or_else(|| {
            format!(
                "<node id=\"{}\"> has coordinates out of range: lat={} lon={} (expected -90..90, -180..180)",
                el.id,
                f64::from(lat) * 1e-7,
                f64::from(lon) * 1e-7
            )
        })
}

fn with_info(el: &mut RawElement, info: &osmpbf::Info<'_>) -> Result<(), String> {
    el.version = info.version().map_or(0, i64::from);
    el.timestamp = info.milli_timestamp().map_or(0, |t| t.div_euclid(1000));
    el.changeset = info.changeset().unwrap_or(0);
    el.uid = info.uid().map_or(0, i64::from);
    el.visible = info.visible();
    if let Some(u) = info.user() {
        set_user(el, u)?;
    }
    Ok(())
}

/// Converts one PBF element into the reader's element type (nodes in snapshots have no op).
fn convert(e: &Element<'_>) -> Result<Item, String> {
    let mut el = RawElement {
        visible: true,
        ..RawElement::default()
    };
    match e {
        Element::DenseNode(n) => {
            el.etype = Some(ElementType::Node);
            el.id = n.id();
            if let Some(info) = n.info() {
                el.version = i64::from(info.version());
                el.timestamp = info.milli_timestamp().div_euclid(1000);
                el.changeset = info.changeset();
                el.uid = i64::from(info.uid());
                el.visible = info.visible();
                set_user(&mut el, info.user())?;
            }
            el.coord = coord(&el, n.decimicro_lat(), n.decimicro_lon())?;
            check_tags(&mut el, n.tags())?;
        }
        Element::Node(n) => {
            el.etype = Some(ElementType::Node);
            el.id = n.id();
            with_info(&mut el, &n.info())?;
            el.coord = coord(&el, n.decimicro_lat(), n.decimicro_lon())?;
            check_tags(&mut el, n.tags())?;
        }
        Element::Way(w) => {
            el.etype = Some(ElementType::Way);
            el.id = w.id();
            with_info(&mut el, &w.info())?;
            check_tags(&mut el, w.tags())?;
            for r in w.refs() {
                if el.refs.len() >= MAX_WAY_NODES {
                    return Err(format!("way {} has more than {MAX_WAY_NODES} nodes", el.id));
                }
                el.refs.push(r);
            }
        }
        Element::Relation(r) => {
            el.etype = Some(ElementType::Relation);
            el.id = r.id();
            with_info(&mut el, &r.info())?;
            check_tags(&mut el, r.tags())?;
            for m in r.members() {
                let t = match m.member_type {
                    RelMemberType::Node => ElementType::Node,
                    RelMemberType::Way => ElementType::Way,
                    // Relation members are not used for placing (as in the XML reader).
                    RelMemberType::Relation => continue,
                };
                if el.members.len() >= MAX_MEMBERS {
                    return Err(format!(
                        "relation {} has more than {MAX_MEMBERS} members",
                        el.id
                    ));
                }
                el.members.push((t, m.member_id));
            }
        }
    }
    super::Element::pack(&el)
        .map(|p| Item::Element(None, p))
        .ok_or_else(|| "element without a type".to_owned())
}
