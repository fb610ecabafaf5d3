//! Tile maths of the slippy-map convention (OSM wiki "Slippy map tilenames"): Web Mercator,
//! `2^z × 2^z` tiles per zoom, x eastwards from 180° W, y southwards from the north limit; and
//! the row flip of TMS (MBTiles) storage.

use std::fmt;
use std::str::FromStr;

use crate::render::{mercator_lat, mercator_x, mercator_y};

/// Deepest zoom accepted (TileJSON 3.0.0 allows 0-30; 24 is already ~2 cm per pixel).
pub const MAX_ZOOM: u8 = 24;

/// One XYZ tile.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct TileId {
    /// Zoom level.
    pub z: u8,
    /// Column, 0 at 180° W.
    pub x: u32,
    /// Row, 0 at the north limit of Web Mercator.
    pub y: u32,
}

impl TileId {
    /// Tiles per side at this tile's zoom.
    #[must_use]
    pub fn per_side(&self) -> u64 {
        1u64 << self.z
    }

    /// The tile holding a lon/lat point at zoom `z` (latitudes clamped to the Web Mercator
    /// limit; longitude 180° belongs to the last column). `None` for a NaN or a zoom beyond
    /// [`MAX_ZOOM`].
    #[must_use]
    pub fn containing(lon: f64, lat: f64, z: u8) -> Option<Self> {
        if z > MAX_ZOOM || lon.is_nan() || lat.is_nan() {
            return None;
        }
        let n = 1u64 << z;
        let (x, y) = (index(mercator_x(lon), n), index(mercator_y(lat), n));
        Some(Self { z, x, y })
    }

    /// West, south, east and north edges in degrees.
    #[must_use]
    pub fn bounds(&self) -> [f64; 4] {
        #[allow(clippy::cast_precision_loss, reason = "at most 2^24 tiles a side")]
        let n = self.per_side() as f64;
        let lon = |x: f64| x / n * 360.0 - 180.0;
        let (x, y) = (f64::from(self.x), f64::from(self.y));
        [
            lon(x),
            mercator_lat((y + 1.0) / n),
            lon(x + 1.0),
            mercator_lat(y / n),
        ]
    }

    /// The row as MBTiles (TMS) stores it: counted from the south, `2^z - 1 - y`.
    #[must_use]
    pub fn tms_row(&self) -> u64 {
        (self.per_side() - 1).saturating_sub(u64::from(self.y))
    }

    /// The file path inside a pyramid: `{z}/{x}/{y}.png`.
    #[must_use]
    pub fn path(&self) -> String {
        format!("{}/{}/{}.png", self.z, self.x, self.y)
    }
}

impl fmt::Display for TileId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}/{}", self.z, self.x, self.y)
    }
}

/// The tile index of a normalised coordinate (0..1) with `n` tiles a side, clamped to the grid.
#[must_use]
pub fn index(t: f64, n: u64) -> u32 {
    #[allow(clippy::cast_precision_loss, reason = "at most 2^24 tiles a side")]
    let v = (t * n as f64).floor();
    #[allow(
        clippy::cast_possible_truncation,
        clippy::cast_sign_loss,
        reason = "clamped to 0..n-1, n at most 2^24"
    )]
    let i = v.clamp(0.0, (n - 1) as f64) as u32;
    i
}

/// An inclusive range of zoom levels, written `6-14` or `10`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ZoomRange {
    /// Lowest zoom.
    pub min: u8,
    /// Highest zoom.
    pub max: u8,
}

impl ZoomRange {
    /// The zooms, low to high.
    #[must_use]
    pub fn levels(&self) -> std::ops::RangeInclusive<u8> {
        self.min..=self.max
    }
}

impl fmt::Display for ZoomRange {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}-{}", self.min, self.max)
    }
}

impl FromStr for ZoomRange {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let bad = || format!("{s:?} is not a zoom range like 6-14 (zooms 0-{MAX_ZOOM})");
        let (a, b) = s.trim().split_once('-').unwrap_or((s.trim(), s.trim()));
        let min: u8 = a.trim().parse().map_err(|_| bad())?;
        let max: u8 = b.trim().parse().map_err(|_| bad())?;
        if min > max || max > MAX_ZOOM {
            return Err(bad());
        }
        Ok(Self { min, max })
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn zoom_ranges_parse() {
        assert_eq!(
            "6-14".parse::<ZoomRange>().unwrap(),
            ZoomRange { min: 6, max: 14 }
        );
        assert_eq!(
            " 10 ".parse::<ZoomRange>().unwrap(),
            ZoomRange { min: 10, max: 10 }
        );
        for bad in ["14-6", "6-25", "x", "-3", "6-", ""] {
            assert!(bad.parse::<ZoomRange>().is_err(), "{bad}");
        }
    }

    #[test]
    fn tms_row_of_the_mbtiles_example() {
        // Source: MBTiles 1.3 specification, "Tiles": tile 11/327/791 is stored with
        // tile_row 1256, since 1256 is 2^11 - 1 - 791.
        assert_eq!(
            TileId {
                z: 11,
                x: 327,
                y: 791
            }
            .tms_row(),
            1256
        );
        assert_eq!(TileId { z: 0, x: 0, y: 0 }.tms_row(), 0);
    }

    #[test]
    fn poles_and_dateline_stay_on_the_grid() {
        assert_eq!(
            TileId::containing(180.0, 90.0, 3),
            Some(TileId { z: 3, x: 7, y: 0 })
        );
        assert_eq!(
            TileId::containing(-180.0, -90.0, 3),
            Some(TileId { z: 3, x: 0, y: 7 })
        );
        assert_eq!(TileId::containing(f64::NAN, 0.0, 3), None);
        assert_eq!(TileId::containing(0.0, 0.0, MAX_ZOOM + 1), None);
    }
}
