//! `tiles.json`, following TileJSON 3.0.0: `tilejson` and `tiles` (required), and the optional
//! `name`, `description`, `version`, `attribution`, `legend`, `scheme`, `bounds`, `center`,
//! `minzoom` and `maxzoom`. Raster tiles need no `vector_layers` (section 3.3 of the spec).

use serde::{Deserialize, Serialize};

/// The TileJSON version written.
pub const TILEJSON_VERSION: &str = "3.0.0";

/// A TileJSON 3.0.0 document for a raster pyramid.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TileJson {
    /// Always [`TILEJSON_VERSION`].
    pub tilejson: String,
    /// Tile URL templates with `{z}`, `{x}` and `{y}`; absolute, as the spec requires.
    pub tiles: Vec<String>,
    /// Name of the tileset.
    pub name: String,
    /// What the tiles show.
    pub description: String,
    /// Version of the tileset (semver).
    pub version: String,
    /// Data attribution (plain text).
    pub attribution: String,
    /// The legend as plain text: measure, scale and breaks.
    pub legend: String,
    /// Always `xyz`.
    pub scheme: String,
    /// West, south, east, north in degrees; never wraps the antimeridian (a pyramid crossing
    /// it spans -180 to 180).
    pub bounds: [f64; 4],
    /// Longitude, latitude and (whole) zoom of the default view.
    pub center: (f64, f64, u8),
    /// Lowest zoom.
    pub minzoom: u8,
    /// Highest zoom.
    pub maxzoom: u8,
}
