//! Core value types shared by every stage: identifiers, validated coordinates, ISO weeks,
//! element kinds and edit operations. Raw integers and floats stop at the parser boundary.

use std::fmt;

use chrono::{DateTime, Datelike, Duration, NaiveDate, Utc, Weekday};
use serde::{Deserialize, Serialize};

macro_rules! id_type {
    ($(#[$doc:meta])* $name:ident) => {
        $(#[$doc])*
        #[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
        #[serde(transparent)]
        pub struct $name(pub i64);

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                self.0.fmt(f)
            }
        }
    };
}

id_type!(
    /// An OSM changeset id.
    ChangesetId
);
id_type!(
    /// An OSM user id (`uid`). Anonymous edits from very old data have none.
    UserId
);
id_type!(
    /// An OSM element id; unique only together with its [`ElementType`].
    ElementId
);

/// Node, way or relation.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ElementType {
    Node,
    Way,
    Relation,
}

impl ElementType {
    /// Stable small integer used in the database.
    #[must_use]
    pub const fn code(self) -> i64 {
        match self {
            Self::Node => 0,
            Self::Way => 1,
            Self::Relation => 2,
        }
    }

    /// Inverse of [`ElementType::code`].
    #[must_use]
    pub const fn from_code(code: i64) -> Option<Self> {
        match code {
            0 => Some(Self::Node),
            1 => Some(Self::Way),
            2 => Some(Self::Relation),
            _ => None,
        }
    }

    /// Parses the XML element or member type name (`node`, `way`, `relation`).
    #[must_use]
    pub fn from_name(name: &[u8]) -> Option<Self> {
        match name {
            b"node" => Some(Self::Node),
            b"way" => Some(Self::Way),
            b"relation" => Some(Self::Relation),
            _ => None,
        }
    }

    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Node => "node",
            Self::Way => "way",
            Self::Relation => "relation",
        }
    }
}

/// The operation an osmChange block applies.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Op {
    Create,
    Modify,
    Delete,
}

impl Op {
    #[must_use]
    pub const fn code(self) -> i64 {
        match self {
            Self::Create => 0,
            Self::Modify => 1,
            Self::Delete => 2,
        }
    }

    #[must_use]
    pub const fn from_code(code: i64) -> Option<Self> {
        match code {
            0 => Some(Self::Create),
            1 => Some(Self::Modify),
            2 => Some(Self::Delete),
            _ => None,
        }
    }

    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Create => "create",
            Self::Modify => "modify",
            Self::Delete => "delete",
        }
    }
}

/// A WGS84 position stored as OSM does: integer units of 1e-7 degree.
///
/// Construction validates the range and rejects NaN, so a `Coord` is always a real place.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Coord {
    lat_e7: i32,
    lon_e7: i32,
}

impl Coord {
    /// Largest latitude magnitude in 1e-7 degrees.
    const LAT_MAX: i64 = 900_000_000;
    /// Largest longitude magnitude in 1e-7 degrees.
    const LON_MAX: i64 = 1_800_000_000;

    /// Builds a coordinate from degrees; `None` when NaN, infinite or out of range.
    #[must_use]
    pub fn from_degrees(lat: f64, lon: f64) -> Option<Self> {
        if !lat.is_finite() || !lon.is_finite() {
            return None;
        }
        // Rounding, not truncation: OSM stores exactly 7 decimals.
        let lat_e7 = (lat * 1e7).round();
        let lon_e7 = (lon * 1e7).round();
        #[allow(clippy::cast_possible_truncation, reason = "range checked just below")]
        Self::from_e7(lat_e7 as i64, lon_e7 as i64)
    }

    /// Builds a coordinate from 1e-7 degree units; `None` when out of range.
    #[must_use]
    pub fn from_e7(lat_e7: i64, lon_e7: i64) -> Option<Self> {
        // `unsigned_abs`, not `abs`: i64::MIN (what `from_degrees` saturates huge values to) has
        // no positive i64, and `abs` overflows on it.
        if lat_e7.unsigned_abs() > Self::LAT_MAX.unsigned_abs()
            || lon_e7.unsigned_abs() > Self::LON_MAX.unsigned_abs()
        {
            return None;
        }
        Some(Self {
            lat_e7: i32::try_from(lat_e7).ok()?,
            lon_e7: i32::try_from(lon_e7).ok()?,
        })
    }

    #[must_use]
    pub fn lat(self) -> f64 {
        f64::from(self.lat_e7) / 1e7
    }

    #[must_use]
    pub fn lon(self) -> f64 {
        f64::from(self.lon_e7) / 1e7
    }

    #[must_use]
    pub const fn lat_e7(self) -> i32 {
        self.lat_e7
    }

    #[must_use]
    pub const fn lon_e7(self) -> i32 {
        self.lon_e7
    }

    /// Great-circle distance in metres (haversine, mean Earth radius 6 371 008.8 m).
    #[must_use]
    pub fn distance_m(self, other: Self) -> f64 {
        // Mean radius from IUGG, common practice.
        const R: f64 = 6_371_008.8;
        let (p1, p2) = (self.lat().to_radians(), other.lat().to_radians());
        let dp = p2 - p1;
        let dl = (other.lon() - self.lon()).to_radians();
        let a = (dp / 2.0).sin().powi(2) + p1.cos() * p2.cos() * (dl / 2.0).sin().powi(2);
        2.0 * R * a.sqrt().asin()
    }
}

/// An ISO 8601 week (UTC), e.g. `2026-W47`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct IsoWeek {
    year: i32,
    week: u32,
}

impl IsoWeek {
    /// The ISO week containing an instant (UTC).
    #[must_use]
    pub fn of(t: DateTime<Utc>) -> Self {
        let w = t.iso_week();
        Self {
            year: w.year(),
            week: w.week(),
        }
    }

    /// The ISO week containing a Unix timestamp in seconds; `None` outside chrono's range.
    #[must_use]
    pub fn of_unix(secs: i64) -> Option<Self> {
        DateTime::<Utc>::from_timestamp(secs, 0).map(Self::of)
    }

    /// Parses `YYYY-Www`; `None` when malformed or when the week does not exist in that year.
    #[must_use]
    pub fn parse(s: &str) -> Option<Self> {
        let (y, w) = s.split_once("-W")?;
        let year: i32 = y.parse().ok()?;
        let week: u32 = w.parse().ok()?;
        NaiveDate::from_isoywd_opt(year, week, Weekday::Mon)?;
        Some(Self { year, week })
    }

    /// Monday 00:00 UTC of this week.
    #[must_use]
    pub fn start(self) -> DateTime<Utc> {
        #[allow(clippy::unwrap_used, reason = "validated at construction")]
        let d = NaiveDate::from_isoywd_opt(self.year, self.week, Weekday::Mon).unwrap();
        #[allow(clippy::unwrap_used, reason = "midnight always exists")]
        d.and_hms_opt(0, 0, 0).unwrap().and_utc()
    }

    /// Unix seconds of [`IsoWeek::start`].
    #[must_use]
    pub fn start_unix(self) -> i64 {
        self.start().timestamp()
    }

    /// The week `n` weeks later (negative for earlier).
    #[must_use]
    pub fn offset(self, n: i64) -> Self {
        Self::of(self.start() + Duration::weeks(n))
    }

    /// A dense week number (weeks since 1970-01-05, a Monday) for array indexing.
    #[must_use]
    pub fn ordinal(self) -> i64 {
        (self.start_unix() - 345_600).div_euclid(604_800)
    }
}

impl fmt::Display for IsoWeek {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}-W{:02}", self.year, self.week)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coord_rejects_nan_and_range() {
        assert!(Coord::from_degrees(f64::NAN, 0.0).is_none());
        assert!(Coord::from_degrees(90.000_001, 0.0).is_none());
        assert!(Coord::from_degrees(0.0, -180.000_001).is_none());
        // Found by the osmchange fuzz target (fuzz/regressions/): a latitude so large that
        // `as i64` saturates to i64::MIN; `abs` overflowed on it (a panic with overflow checks).
        assert!(Coord::from_degrees(-9_222_036_775_882.0, 3.0).is_none());
        assert!(Coord::from_e7(i64::MIN, 0).is_none());
        assert!(Coord::from_e7(0, i64::MIN).is_none());
        assert!(Coord::from_e7(i64::MAX, 0).is_none());
        let c = Coord::from_degrees(-33.123_456_7, 151.000_000_1).unwrap();
        assert_eq!(c.lat_e7(), -331_234_567);
        assert_eq!(c.lon_e7(), 1_510_000_001);
    }

    #[test]
    fn iso_week_edges() {
        // Source: ISO 8601 calendar; 2026-01-01 is a Thursday so it lies in 2026-W01,
        // and 2027-01-01 (a Friday) still lies in 2026-W53 (from memory, checked with chrono).
        let t = DateTime::parse_from_rfc3339("2026-01-01T12:00:00Z")
            .unwrap()
            .to_utc();
        assert_eq!(IsoWeek::of(t).to_string(), "2026-W01");
        let t = DateTime::parse_from_rfc3339("2027-01-01T00:00:00Z")
            .unwrap()
            .to_utc();
        assert_eq!(IsoWeek::of(t).to_string(), "2026-W53");
        let w = IsoWeek::parse("2026-W47").unwrap();
        assert_eq!(w.start().to_rfc3339(), "2026-11-16T00:00:00+00:00");
        assert_eq!(w.offset(1).to_string(), "2026-W48");
        assert_eq!(w.offset(1).ordinal() - w.ordinal(), 1);
        assert!(IsoWeek::parse("2025-W53").is_none());
        assert!(IsoWeek::parse("2026-47").is_none());
    }

    #[test]
    fn haversine_one_degree_of_latitude() {
        // Common practice: one degree of latitude on the mean sphere is about 111.195 km.
        let a = Coord::from_degrees(10.0, 20.0).unwrap();
        let b = Coord::from_degrees(11.0, 20.0).unwrap();
        assert!((a.distance_m(b) - 111_195.08).abs() < 1.0);
    }
}
