//! Buckets every placed edit into an H3 cell (at one resolution per run) and an ISO week, and
//! sums what the detectors measure per cell-week. Each changeset's share of a cell-week
//! ([`ChangesetCellWeek`]) is kept too: it gives the distinct counts of a region and the
//! changesets behind every outlier, and it is what an export carries for other engines.

use std::collections::{BTreeMap, HashMap};

use h3o::{CellIndex, LatLng, Resolution};

use crate::features::EditFacts;
use crate::locate::{count_placement, Edit};
use crate::model::Op;
use crate::summary::Placement;

/// The outlier kinds and the count each one tests.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Kind {
    /// Deleted objects (ways, relations, tagged nodes; a building's vertices do not count again).
    DeletionBurst,
    /// Distinct newcomer accounts editing the cell.
    NewcomerSurge,
    /// Non-maritime objects created in water far from land.
    OffshoreFabrication,
    /// Names changed to advert-like text.
    RenameSpam,
    /// Edits from changesets scoring at or above the flag threshold.
    ScoreHotspot,
}

impl Kind {
    /// All kinds, in reporting order.
    pub const ALL: [Self; 5] = [
        Self::DeletionBurst,
        Self::NewcomerSurge,
        Self::OffshoreFabrication,
        Self::RenameSpam,
        Self::ScoreHotspot,
    ];

    /// The name used in `summary.json`.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::DeletionBurst => "deletion_burst",
            Self::NewcomerSurge => "newcomer_surge",
            Self::OffshoreFabrication => "offshore_fabrication",
            Self::RenameSpam => "rename_spam",
            Self::ScoreHotspot => "score_hotspot",
        }
    }

    /// What the count measures, in words.
    #[must_use]
    pub const fn measure(self) -> &'static str {
        match self {
            Self::DeletionBurst => "deleted objects",
            Self::NewcomerSurge => "newcomer accounts editing",
            Self::OffshoreFabrication => "non-maritime objects created in water",
            Self::RenameSpam => "names changed to advert-like text",
            Self::ScoreHotspot => "edits from flagged changesets",
        }
    }

    const fn index(self) -> usize {
        self as usize
    }
}

/// Counts of one cell in one week.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CellWeek {
    pub edits: u64,
    pub creates: u64,
    pub modifies: u64,
    pub deletes: u64,
    /// Edits by operation and element type: `[op code][element type code]`.
    pub by_type: [[u64; 3]; 3],
    /// Deletions by newcomers.
    pub newcomer_deletes: u64,
    /// Objects created where the land layer says water (legitimate maritime ones included).
    pub water_creates: u64,
    /// Sum and maximum of the edits' changeset scores.
    pub score_sum: f64,
    pub score_max: f64,
    /// Deleted objects in their own right (see `EditFacts::deleted_feature`).
    pub deleted_features: u64,
    pub newcomer_edits: u64,
    pub offshore_creates: u64,
    pub spam_renames: u64,
    pub flagged_edits: u64,
    /// Distinct mappers (uids), sorted.
    pub mappers: Vec<i64>,
    /// Distinct newcomer mappers (uids), sorted.
    pub newcomers: Vec<i64>,
}

impl CellWeek {
    /// The count a kind tests.
    #[must_use]
    pub fn value(&self, k: Kind) -> u64 {
        match k {
            Kind::DeletionBurst => self.deleted_features,
            Kind::NewcomerSurge => self.newcomers.len() as u64,
            Kind::OffshoreFabrication => self.offshore_creates,
            Kind::RenameSpam => self.spam_renames,
            Kind::ScoreHotspot => self.flagged_edits,
        }
    }
}

/// Cell-week counts over an analysis window of consecutive weeks; the last week is the report
/// week.
#[derive(Debug, Clone)]
pub struct CellWeeks {
    pub resolution: Resolution,
    /// Number of weeks; index `weeks - 1` is the report week.
    pub weeks: usize,
    /// Per cell, one entry per week (sorted by cell for deterministic output).
    pub cells: BTreeMap<CellIndex, Vec<CellWeek>>,
}

impl CellWeeks {
    /// A cell's weeks, or `None` if it had no edit in the window.
    #[must_use]
    pub fn get(&self, c: CellIndex) -> Option<&[CellWeek]> {
        self.cells.get(&c).map(Vec::as_slice)
    }
}

/// The H3 cell of a position.
#[must_use]
pub fn cell_of(pos: crate::model::Coord, res: Resolution) -> Option<CellIndex> {
    LatLng::new(pos.lat(), pos.lon())
        .ok()
        .map(|ll| ll.to_cell(res))
}

/// A unit vector of a point of the sphere.
fn unit(lat_rad: f64, lng_rad: f64) -> [f64; 3] {
    let (sa, ca) = lat_rad.sin_cos();
    let (so, co) = lng_rad.sin_cos();
    [ca * co, ca * so, sa]
}

fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

/// A cell with the cap around its centre that lies inside it for certain.
#[derive(Debug, Clone, Copy)]
struct KnownCell {
    cell: CellIndex,
    centre: [f64; 3],
    /// A point `p` with `p · centre >= cos_radius` lies in the cell; above 1 (no point) for
    /// cells the cap test is not used for.
    cos_radius: f64,
}

impl KnownCell {
    /// Share of the distance from the centre to the nearest edge that the cap covers: the rest
    /// is a margin far above rounding errors (about 4 m of a 400 m distance at resolution 8).
    const MARGIN: f64 = 0.99;

    /// H3 places a point by the gnomonic projection on the icosahedron face nearest to it,
    /// where a hexagon's edges are straight; straight lines of that projection are great
    /// circles, so a cell lying on one face is the spherical polygon of its boundary's vertices,
    /// joined by great circles, and convex. A point nearer the centre than every edge's great
    /// circle is inside. Pentagons and cells crossing a face edge (which the projection bends)
    /// never use the cap.
    fn new(cell: CellIndex) -> Self {
        let ll = LatLng::from(cell);
        let centre = unit(ll.lat_radians(), ll.lng_radians());
        let mut cos_radius = 2.0;
        if !cell.is_pentagon() && cell.icosahedron_faces().len() == 1 {
            let v: Vec<[f64; 3]> = cell
                .boundary()
                .iter()
                .map(|p| unit(p.lat_radians(), p.lng_radians()))
                .collect();
            // The sine of the angular distance from the centre to each edge's great circle.
            let nearest = (0..v.len())
                .map(|i| {
                    let (a, b) = (v[i], v[(i + 1) % v.len()]);
                    let n = [
                        a[1] * b[2] - a[2] * b[1],
                        a[2] * b[0] - a[0] * b[2],
                        a[0] * b[1] - a[1] * b[0],
                    ];
                    dot(centre, n).abs() / dot(n, n).sqrt()
                })
                .fold(f64::INFINITY, f64::min);
            if nearest.is_finite() && v.len() >= 3 {
                let sin_r = nearest * Self::MARGIN;
                cos_radius = (1.0 - sin_r * sin_r).sqrt();
            }
        }
        Self {
            cell,
            centre,
            cos_radius,
        }
    }
}

/// The H3 cells of many positions, fast: each small square of latitude and longitude keeps
/// the last cell found in it, and a position within that cell's inner cap (see
/// [`KnownCell::new`]) takes it without h3o's exact computation, which is left for positions
/// near an edge. The answers are those of [`cell_of`]. Edits rarely share a position, but
/// neighbouring ones share a cell: on the demo at intensity 24 (3.9 million edits, 99 % of
/// them at distinct positions) the report's profile samples in h3o and its trigonometry fell
/// by about two thirds.
#[derive(Debug, Clone)]
struct CellFinder {
    resolution: Resolution,
    /// Side of a square, as a right shift of 1e-7 degree coordinates.
    shift: u32,
    /// Direct-mapped by square: the square's key and the last cell found in it.
    slots: Vec<Option<(i64, KnownCell)>>,
    /// Every cell found, with its cap (computed once per cell).
    known: foldhash::HashMap<CellIndex, KnownCell>,
}

impl CellFinder {
    /// Squares remembered (a fixed table of about 900 KiB).
    const SLOTS: usize = 1 << 14;

    fn new(resolution: Resolution) -> Self {
        // Squares of about a third of a cell's edge, so most lie well inside a cell's cap.
        let side_e7 = resolution.edge_length_km() / 3.0 / 111.2 * 1e7;
        let mut shift = 0;
        while shift < 30 && f64::from(1u32 << (shift + 1)) <= side_e7 {
            shift += 1;
        }
        Self {
            resolution,
            shift,
            slots: vec![None; Self::SLOTS],
            known: foldhash::HashMap::default(),
        }
    }

    fn cell(&mut self, pos: crate::model::Coord) -> Option<CellIndex> {
        let key =
            (i64::from(pos.lat_e7() >> self.shift) << 32) ^ i64::from(pos.lon_e7() >> self.shift);
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "a hash: only the low bits are kept"
        )]
        let slot = ((key as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15)
            >> (64 - Self::SLOTS.trailing_zeros())) as usize;
        let p = unit(pos.lat().to_radians(), pos.lon().to_radians());
        if let Some(Some((k, known))) = self.slots.get(slot) {
            if *k == key && dot(p, known.centre) >= known.cos_radius {
                return Some(known.cell);
            }
        }
        let cell = cell_of(pos, self.resolution)?;
        if let Some(s) = self.slots.get_mut(slot) {
            let known = *self
                .known
                .entry(cell)
                .or_insert_with(|| KnownCell::new(cell));
            *s = Some((key, known));
        }
        Some(cell)
    }
}

/// Counts placed edits into cell-weeks, and each changeset's share of each cell-week, a batch
/// of edits at a time (a batch must hold all the window's edits of its changesets), so a window
/// is counted without holding all its edits.
#[derive(Debug, Clone)]
pub struct CellCounter {
    resolution: Resolution,
    weeks: usize,
    finder: CellFinder,
    cells: foldhash::HashMap<CellIndex, Vec<CellWeek>>,
    /// The changesets' shares, in the order first met, and where each key's share is: the map
    /// holds small entries, and `finish` sorts the shares in place instead of copying them out
    /// of a map (half the peak memory of a large window).
    rows: Vec<ChangesetCellWeek>,
    row_of: foldhash::HashMap<(usize, Option<CellIndex>, i64), usize>,
}

impl CellCounter {
    /// An empty count of `weeks` weeks at resolution `res`.
    #[must_use]
    pub fn new(res: Resolution, weeks: usize) -> Self {
        Self {
            resolution: res,
            weeks,
            finder: CellFinder::new(res),
            cells: foldhash::HashMap::default(),
            rows: Vec::new(),
            row_of: foldhash::HashMap::default(),
        }
    }

    /// Adds a batch of edits with their facts. `week_of[i]` is edit `i`'s week index in the
    /// window (`None` outside); `flagged(changeset)` says whether its changeset is flagged.
    pub fn add(
        &mut self,
        edits: &[Edit],
        facts: &[EditFacts],
        week_of: &[Option<usize>],
        flagged: &dyn Fn(i64) -> bool,
    ) {
        for ((e, f), w) in edits.iter().zip(facts).zip(week_of) {
            let Some(week) = *w else { continue };
            let cell = e.pos.and_then(|p| self.finder.cell(p));
            let is_flagged = flagged(e.changeset);
            let rows = &mut self.rows;
            let i = *self
                .row_of
                .entry((week, cell, e.changeset))
                .or_insert_with(|| {
                    rows.push(ChangesetCellWeek {
                        week,
                        cell,
                        changeset: e.changeset,
                        uid: e.uid,
                        ..ChangesetCellWeek::default()
                    });
                    rows.len() - 1
                });
            let r = &mut rows[i];
            match e.op {
                Op::Create => r.creates += 1,
                Op::Modify => r.modifies += 1,
                Op::Delete => r.deletes += 1,
            }
            r.newcomer_edits += u64::from(f.newcomer);
            r.deleted_features += u64::from(f.deleted_feature);
            r.offshore_creates += u64::from(f.offshore_create);
            r.spam_renames += u64::from(f.spam_rename);
            r.flagged_edits += u64::from(is_flagged);
            count_placement(&mut r.placement, e.placed_by);
            let Some(cell) = cell else { continue };
            let weeks = self.weeks;
            let cw = &mut self
                .cells
                .entry(cell)
                .or_insert_with(|| vec![CellWeek::default(); weeks])[week];
            cw.edits += 1;
            match e.op {
                Op::Create => cw.creates += 1,
                Op::Modify => cw.modifies += 1,
                Op::Delete => cw.deletes += 1,
            }
            #[allow(
                clippy::cast_possible_truncation,
                clippy::cast_sign_loss,
                reason = "codes are 0..=2"
            )]
            {
                cw.by_type[e.op.code() as usize][e.etype.code() as usize] += 1;
            }
            cw.newcomer_deletes += u64::from(f.newcomer && e.op == Op::Delete);
            cw.water_creates += u64::from(f.water_create);
            cw.newcomer_edits += u64::from(f.newcomer);
            cw.offshore_creates += u64::from(f.offshore_create);
            cw.deleted_features += u64::from(f.deleted_feature);
            cw.spam_renames += u64::from(f.spam_rename);
            cw.flagged_edits += u64::from(is_flagged);
            if cw.mappers.last() != Some(&e.uid) {
                cw.mappers.push(e.uid);
            }
            if f.newcomer && cw.newcomers.last() != Some(&e.uid) {
                cw.newcomers.push(e.uid);
            }
        }
        // Distinct mappers: only the weeks this batch touched can hold repeats.
        let mut touched: Vec<usize> = week_of.iter().flatten().copied().collect();
        touched.sort_unstable();
        touched.dedup();
        for weeks in self.cells.values_mut() {
            for &w in &touched {
                let Some(cw) = weeks.get_mut(w) else { continue };
                cw.mappers.sort_unstable();
                cw.mappers.dedup();
                cw.newcomers.sort_unstable();
                cw.newcomers.dedup();
            }
        }
    }

    /// The cell-weeks, with each one's sum and maximum of its edits' changeset scores
    /// (`score(changeset)`), and the changesets' shares sorted by week, cell (unplaced first) and
    /// changeset.
    #[must_use]
    pub fn finish(mut self, score: &dyn Fn(i64) -> f64) -> (CellWeeks, Vec<ChangesetCellWeek>) {
        // Summed per changeset in a fixed order, so the result does not depend on batches.
        drop(self.row_of);
        let mut rows = self.rows;
        rows.sort_unstable_by_key(|r| (r.week, r.cell, r.changeset));
        for r in &rows {
            let Some(cw) = r
                .cell
                .and_then(|c| self.cells.get_mut(&c))
                .and_then(|w| w.get_mut(r.week))
            else {
                continue;
            };
            let sc = score(r.changeset);
            #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
            {
                cw.score_sum += r.edits() as f64 * sc;
            }
            cw.score_max = cw.score_max.max(sc);
        }
        debug_assert!(Kind::ALL.iter().enumerate().all(|(i, k)| k.index() == i));
        (
            CellWeeks {
                resolution: self.resolution,
                weeks: self.weeks,
                cells: self.cells.into_iter().collect(),
            },
            rows,
        )
    }
}

/// One changeset's edits in one cell and week of the window (or its edits that could not be
/// placed, `cell: None`), and what they count toward.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ChangesetCellWeek {
    /// Week index in the window (the last is the report week).
    pub week: usize,
    /// `None` for edits that could not be placed.
    pub cell: Option<CellIndex>,
    pub changeset: i64,
    /// The changeset's mapper.
    pub uid: i64,
    pub creates: u64,
    pub modifies: u64,
    pub deletes: u64,
    /// Edits made while the mapper was a newcomer (so the mapper counts as one here).
    pub newcomer_edits: u64,
    /// The changeset's share of each kind's count ([`CellWeek::value`], edits for the newcomer
    /// kind).
    pub deleted_features: u64,
    pub offshore_creates: u64,
    pub spam_renames: u64,
    pub flagged_edits: u64,
    /// How these edits got their position.
    pub placement: Placement,
}

impl ChangesetCellWeek {
    /// All edits.
    #[must_use]
    pub const fn edits(&self) -> u64 {
        self.creates + self.modifies + self.deletes
    }

    /// The changeset's contribution to a kind's count: its edits counting toward it.
    #[must_use]
    pub const fn contribution(&self, k: Kind) -> u64 {
        match k {
            Kind::DeletionBurst => self.deleted_features,
            Kind::NewcomerSurge => self.newcomer_edits,
            Kind::OffshoreFabrication => self.offshore_creates,
            Kind::RenameSpam => self.spam_renames,
            Kind::ScoreHotspot => self.flagged_edits,
        }
    }
}

/// Per cell and kind, each changeset's contribution in week `week` (changesets contributing
/// nothing are left out).
#[must_use]
pub fn contributions(
    rows: &[ChangesetCellWeek],
    week: usize,
) -> HashMap<(CellIndex, Kind), BTreeMap<i64, u64>> {
    let mut out: HashMap<(CellIndex, Kind), BTreeMap<i64, u64>> = HashMap::new();
    for r in rows.iter().filter(|r| r.week == week) {
        let Some(cell) = r.cell else { continue };
        for k in Kind::ALL {
            let n = r.contribution(k);
            if n > 0 {
                *out.entry((cell, k))
                    .or_default()
                    .entry(r.changeset)
                    .or_default() += n;
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The finder against h3o's exact answer, over clusters of points (so most take the cap)
    /// around random places, around the twelve pentagons (icosahedron vertices) and around the
    /// midpoints of icosahedron edges, at coarse, middling and fine resolutions.
    #[test]
    fn finder_gives_the_exact_cells() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let to_deg = |v: [f64; 3]| {
            let n = dot(v, v).sqrt();
            (
                (v[2] / n).asin().to_degrees(),
                v[1].atan2(v[0]).to_degrees(),
            )
        };
        let pentagons: Vec<[f64; 3]> = CellIndex::base_cells()
            .filter(|c| c.is_pentagon())
            .map(|c| {
                let ll = LatLng::from(c);
                unit(ll.lat_radians(), ll.lng_radians())
            })
            .collect();
        let mut centres: Vec<(f64, f64)> = pentagons.iter().map(|&p| to_deg(p)).collect();
        for a in &pentagons {
            for b in &pentagons {
                // Neighbouring vertices of the icosahedron are 63.4 degrees apart.
                if dot(*a, *b) > 0.4 && dot(*a, *b) < 0.5 {
                    centres.push(to_deg([a[0] + b[0], a[1] + b[1], a[2] + b[2]]));
                }
            }
        }
        assert_eq!(
            centres.len(),
            12 + 60,
            "pentagons and both ways along the 30 edges"
        );
        for _ in 0..150 {
            centres.push((rng.gen_range(-89.0..89.0), rng.gen_range(-180.0..180.0)));
        }
        let (mut checked, mut in_cap) = (0u64, 0u64);
        for r in [2u8, 5, 6, 7, 8, 9, 12] {
            let res = Resolution::try_from(r).unwrap();
            let spread = res.edge_length_km() * 4.0 / 111.2;
            let mut finder = CellFinder::new(res);
            for &(lat, lon) in &centres {
                for _ in 0..300 {
                    let la = (lat + rng.gen_range(-spread..spread)).clamp(-89.9, 89.9);
                    let lo = (lon + rng.gen_range(-spread..spread) + 540.0) % 360.0 - 180.0;
                    let Some(p) = crate::model::Coord::from_degrees(la, lo) else {
                        continue;
                    };
                    let exact = cell_of(p, res);
                    let known = exact.and_then(|c| finder.known.get(&c).copied());
                    let v = unit(p.lat().to_radians(), p.lon().to_radians());
                    in_cap += u64::from(known.is_some_and(|k| dot(v, k.centre) >= k.cos_radius));
                    assert_eq!(finder.cell(p), exact, "{la}, {lo} at resolution {r}");
                    checked += 1;
                }
            }
        }
        assert!(
            in_cap * 2 > checked,
            "the caps should serve most points: {in_cap} of {checked}"
        );
    }

    #[test]
    fn cell_counts_per_resolution() {
        // Source: H3 documentation, "Tables of cell statistics across resolutions": the number
        // of cells at resolution r is 2 + 120 * 7^r.
        for r in 0..=15u8 {
            let res = Resolution::try_from(r).unwrap();
            assert_eq!(res.cell_count(), 2 + 120 * 7u64.pow(u32::from(r)));
        }
    }
}
