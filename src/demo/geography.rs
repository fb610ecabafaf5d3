//! The scenario's geography: a local kilometre frame around the Velloran Coast, the places on it
//! (Quillhaven, its villages, harbour and countryside) and land/water tests against the embedded
//! land layer. Everything the generator places goes through [`Geo`], so nothing ordinary ends up
//! in the sea by accident.

use rand::Rng;
use rand_chacha::ChaCha8Rng;

use crate::land::Land;
use crate::model::Coord;

/// Latitude of the frame's origin (km 0, 0), in the open North Atlantic.
const ORIGIN_LAT: f64 = 45.2;
/// Longitude of the frame's origin.
const ORIGIN_LON: f64 = -33.6;
/// Kilometres per degree of latitude on the mean sphere (common practice, no source).
const KM_PER_DEG_LAT: f64 = 111.195;

/// A point in the local frame: kilometres east (`x`) and north (`y`) of the origin.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct P {
    pub x: f64,
    pub y: f64,
}

impl P {
    pub const fn new(x: f64, y: f64) -> Self {
        Self { x, y }
    }

    pub fn offset(self, dx: f64, dy: f64) -> Self {
        Self::new(self.x + dx, self.y + dy)
    }

    /// Distance in kilometres (the frame is small enough to be flat).
    pub fn dist(self, o: Self) -> f64 {
        (self.x - o.x).hypot(self.y - o.y)
    }

    /// OSM coordinates in 1e-7 degree units.
    pub fn to_e7(self) -> (i32, i32) {
        let lat = ORIGIN_LAT + self.y / KM_PER_DEG_LAT;
        let lon = ORIGIN_LON + self.x / km_per_deg_lon();
        // The frame spans a few tens of kilometres, far inside the i32 range.
        #[allow(clippy::cast_possible_truncation, reason = "small, finite values")]
        ((lat * 1e7).round() as i32, (lon * 1e7).round() as i32)
    }

    /// Inverse of [`P::to_e7`].
    pub fn from_e7(lat_e7: i32, lon_e7: i32) -> Self {
        let lat = f64::from(lat_e7) / 1e7;
        let lon = f64::from(lon_e7) / 1e7;
        Self::new(
            (lon - ORIGIN_LON) * km_per_deg_lon(),
            (lat - ORIGIN_LAT) * KM_PER_DEG_LAT,
        )
    }
}

fn km_per_deg_lon() -> f64 {
    KM_PER_DEG_LAT * ORIGIN_LAT.to_radians().cos()
}

/// A point `r` km from `c` in a uniformly random direction and distance up to `r`.
pub(super) fn jitter(c: P, r: f64, rng: &mut ChaCha8Rng) -> P {
    c.offset(rng.gen_range(-r..=r), rng.gen_range(-r..=r))
}

/// The coastal town.
pub(super) const TOWN_NAME: &str = "Quillhaven";
/// The town's main shopping street.
pub(super) const MAIN_STREET: &str = "Lanternfall Street";
/// Where the town's centre is.
pub(super) const TOWN_CENTRE: P = P::new(-4.9, 0.1);
/// South-west corner of the town's street grid.
pub(super) const GRID_ORIGIN: P = P::new(-7.2, -1.8);
/// Spacing of the street grid in km.
pub(super) const GRID_STEP: f64 = 0.18;
/// Blocks of the street grid west to east.
pub(super) const GRID_BLOCKS_X: usize = 18;
/// Blocks of the street grid south to north.
pub(super) const GRID_BLOCKS_Y: usize = 20;
/// Grid row of the main shopping street.
pub(super) const MAIN_STREET_ROW: usize = 11;
/// West and east ends of the shop frontage on the main street.
pub(super) const SHOP_SPAN: (f64, f64) = (-5.75, -4.0);
/// A point in the harbour, on land by the bay.
pub(super) const HARBOUR: P = P::new(-3.8, 0.3);
/// Centre of the offshore island.
pub(super) const ISLAND: P = P::new(5.0, 5.5);
/// Name of the offshore island.
pub(super) const ISLAND_NAME: &str = "Mavrenna Isle";

/// An inland village.
pub(super) struct Village {
    pub name: &'static str,
    pub centre: P,
}

/// The villages, west of the town.
pub(super) const VILLAGES: [Village; 4] = [
    Village {
        name: "Ulvenmarra",
        centre: P::new(-11.0, 3.6),
    },
    Village {
        name: "Tessendrue",
        centre: P::new(-14.5, -3.2),
    },
    Village {
        name: "Korrowind",
        centre: P::new(-8.6, -5.2),
    },
    Village {
        name: "Aubrelin",
        centre: P::new(-16.8, 4.8),
    },
];

/// Grid x of the town's west-to-east line `i`.
pub(super) fn grid_x(i: usize) -> f64 {
    GRID_ORIGIN.x + GRID_STEP * i as f64
}

/// Grid y of the town's south-to-north line `j`.
pub(super) fn grid_y(j: usize) -> f64 {
    GRID_ORIGIN.y + GRID_STEP * j as f64
}

fn in_town_box(p: P, margin: f64) -> bool {
    let (x1, y1) = (grid_x(GRID_BLOCKS_X), grid_y(GRID_BLOCKS_Y));
    p.x >= GRID_ORIGIN.x - margin
        && p.x <= x1 + margin
        && p.y >= GRID_ORIGIN.y - margin
        && p.y <= y1 + margin
}

fn in_centre_box(p: P) -> bool {
    (-6.2..=-3.96).contains(&p.x) && (-1.2..=1.4).contains(&p.y)
}

/// Where a changeset or a snapshot feature happens.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub(super) enum Area {
    TownCentre,
    Town,
    Harbour,
    Village(usize),
    Countryside,
}

impl Area {
    /// Every area, for bucketing.
    pub fn all() -> impl Iterator<Item = Self> {
        [
            Self::TownCentre,
            Self::Town,
            Self::Harbour,
            Self::Countryside,
        ]
        .into_iter()
        .chain((0..VILLAGES.len()).map(Self::Village))
    }

    /// A dense index for bucket arrays.
    pub fn index(self) -> usize {
        match self {
            Self::TownCentre => 0,
            Self::Town => 1,
            Self::Harbour => 2,
            Self::Countryside => 3,
            Self::Village(k) => 4 + k,
        }
    }

    /// How many [`Area::index`] values exist.
    pub const COUNT: usize = 4 + VILLAGES.len();

    /// Share of ordinary mapping that happens in this area.
    pub fn activity_weight(self) -> f64 {
        match self {
            Self::TownCentre => 0.28,
            Self::Town => 0.28,
            Self::Harbour => 0.05,
            Self::Village(_) => 0.05,
            Self::Countryside => 0.19,
        }
    }

    /// How far from its focus a changeset in this area spreads, in km.
    pub fn spread(self) -> f64 {
        match self {
            Self::TownCentre => 0.12,
            Self::Town | Self::Harbour => 0.15,
            Self::Village(_) => 0.25,
            Self::Countryside => 0.5,
        }
    }

    /// A human name for changeset comments.
    pub fn label(self) -> &'static str {
        match self {
            Self::TownCentre => "central Quillhaven",
            Self::Town => TOWN_NAME,
            Self::Harbour => "Quillhaven harbour",
            Self::Village(k) => VILLAGES.get(k).map_or(TOWN_NAME, |v| v.name),
            Self::Countryside => "the Velloran countryside",
        }
    }

    /// A fallback point that is on land (checked by the tests through [`Geo`]).
    fn anchor(self) -> P {
        match self {
            Self::TownCentre => TOWN_CENTRE,
            Self::Town => P::new(-6.6, -1.2),
            Self::Harbour => HARBOUR,
            Self::Village(k) => VILLAGES.get(k).map_or(TOWN_CENTRE, |v| v.centre),
            Self::Countryside => P::new(-12.5, 0.0),
        }
    }
}

/// The land layer with the helpers the generator needs.
pub(super) struct Geo {
    land: Land,
}

impl Geo {
    pub fn new(land: Land) -> Self {
        Self { land }
    }

    /// Whether a frame point is on land.
    pub fn is_land(&self, p: P) -> bool {
        let (lat, lon) = p.to_e7();
        Coord::from_e7(i64::from(lat), i64::from(lon)).is_some_and(|c| self.land.is_land(c))
    }

    /// Whether every point is on land.
    pub fn all_land(&self, ps: &[P]) -> bool {
        ps.iter().all(|&p| self.is_land(p))
    }

    /// Distance from a point to the nearest land in km (0 on land).
    pub fn distance_to_land_km(&self, p: P) -> Option<f64> {
        let (lat, lon) = p.to_e7();
        let c = Coord::from_e7(i64::from(lat), i64::from(lon))?;
        self.land.distance_to_land_m(c).map(|m| m / 1000.0)
    }

    /// A random focus point for work in `area`, always on land.
    pub fn sample(&self, area: Area, rng: &mut ChaCha8Rng) -> P {
        for _ in 0..200 {
            let p = match area {
                Area::TownCentre => P::new(rng.gen_range(-6.2..-3.96), rng.gen_range(-1.2..1.4)),
                Area::Town => {
                    let p = P::new(
                        rng.gen_range(GRID_ORIGIN.x..grid_x(GRID_BLOCKS_X)),
                        rng.gen_range(GRID_ORIGIN.y..grid_y(GRID_BLOCKS_Y)),
                    );
                    if in_centre_box(p) {
                        continue;
                    }
                    p
                }
                Area::Harbour => P::new(rng.gen_range(-3.95..-3.65), rng.gen_range(-0.6..1.0)),
                Area::Village(k) => {
                    let c = VILLAGES.get(k).map_or(TOWN_CENTRE, |v| v.centre);
                    jitter(c, 0.55, rng)
                }
                Area::Countryside => {
                    let p = P::new(rng.gen_range(-19.5..-1.0), rng.gen_range(-7.4..7.4));
                    if in_town_box(p, 0.4) || VILLAGES.iter().any(|v| v.centre.dist(p) < 1.0) {
                        continue;
                    }
                    p
                }
            };
            if self.is_land(p) {
                return p;
            }
        }
        area.anchor()
    }

    /// A random point in the sea near the coast or in the bay, where buoys belong.
    pub fn sample_water(&self, near: P, rng: &mut ChaCha8Rng) -> Option<P> {
        for _ in 0..200 {
            let p = if near.x < -2.0 {
                P::new(rng.gen_range(-3.3..-0.4), rng.gen_range(-1.1..2.5))
            } else {
                jitter(near, 1.5, rng)
            };
            if !self.is_land(p) && p.x < 3.0 {
                return Some(p);
            }
        }
        None
    }
}

/// The corners of a rectangular building footprint centred on `c`, `w` km along the unit vector
/// `u` and `d` km across it; with `cut`, one corner is cut off (five corners).
pub(super) fn footprint(c: P, u: (f64, f64), w: f64, d: f64, cut: bool) -> Vec<P> {
    let v = (-u.1, u.0);
    let at = |a: f64, b: f64| P::new(c.x + u.0 * a + v.0 * b, c.y + u.1 * a + v.1 * b);
    let (hw, hd) = (w / 2.0, d / 2.0);
    if cut {
        vec![
            at(-hw, -hd),
            at(hw, -hd),
            at(hw, hd * 0.2),
            at(hw * 0.3, hd),
            at(-hw, hd),
        ]
    } else {
        vec![at(-hw, -hd), at(hw, -hd), at(hw, hd), at(-hw, hd)]
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "embedded constant fixtures")]
mod tests {
    use geo::{Contains, Point};

    use super::*;
    use crate::demo::{LAND_GEOJSON, REGIONS_GEOJSON};

    fn geo() -> Geo {
        Geo::new(Land::from_geojson_str(LAND_GEOJSON).unwrap())
    }

    #[test]
    fn places_are_on_land() {
        let g = geo();
        for area in Area::all() {
            assert!(g.is_land(area.anchor()), "{area:?}");
        }
        for v in &VILLAGES {
            assert!(g.is_land(v.centre), "{}", v.name);
        }
        assert!(g.is_land(ISLAND));
        let corners = [
            P::new(GRID_ORIGIN.x, GRID_ORIGIN.y),
            P::new(grid_x(GRID_BLOCKS_X), GRID_ORIGIN.y),
            P::new(GRID_ORIGIN.x, grid_y(GRID_BLOCKS_Y)),
            P::new(grid_x(GRID_BLOCKS_X), grid_y(GRID_BLOCKS_Y)),
        ];
        assert!(g.all_land(&corners));
    }

    #[test]
    fn frame_round_trips() {
        let p = P::new(-4.9, 0.1);
        let (lat, lon) = p.to_e7();
        assert!(P::from_e7(lat, lon).dist(p) < 1e-5);
        // The origin is in the open North Atlantic.
        assert_eq!(P::new(0.0, 0.0).to_e7(), (452_000_000, -336_000_000));
    }

    #[test]
    fn regions_cover_land_and_coastal_sea() {
        let regions = crate::geojson_io::polygons_from_geojson(REGIONS_GEOJSON).unwrap();
        assert_eq!(regions.len(), 2);
        let inside = |p: P| {
            let (lat, lon) = p.to_e7();
            let pt = Point::new(f64::from(lon) / 1e7, f64::from(lat) / 1e7);
            regions.iter().filter(|(_, mp)| mp.contains(&pt)).count()
        };
        let mut probes = vec![
            TOWN_CENTRE,
            HARBOUR,
            ISLAND,
            P::new(8.0, 0.0),
            P::new(4.3, -4.1),
        ];
        probes.extend(VILLAGES.iter().map(|v| v.centre));
        probes.extend([
            P::new(-10.0, 15.0),
            P::new(-10.0, -15.0),
            P::new(-19.9, 0.0),
        ]);
        for p in probes {
            assert_eq!(inside(p), 1, "{p:?}");
        }
    }
}
