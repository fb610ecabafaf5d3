//! Buckets every placed edit into an H3 cell (at one resolution per run) and an ISO week, and
//! sums what the detectors measure per cell-week. Each changeset's share of a cell-week
//! ([`ChangesetCellWeek`]) is kept too: it gives the distinct counts of a region and the
//! changesets behind every outlier, and it is what an export carries for other engines. A
//! report folds the earlier weeks' shares into per-region totals ([`RegionWeeks`]) as it counts.

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
    cells: foldhash::HashMap<CellIndex, Tally>,
    /// The changesets' shares, in the order first met, and where each key's share is: the map
    /// holds small entries, and `finish` sorts the shares in place instead of copying them out
    /// of a map (half the peak memory of a large window). A batch's shares are complete when
    /// it is added, so the map only covers the current batch.
    rows: Vec<ChangesetCellWeek>,
    row_of: foldhash::HashMap<(usize, Option<CellIndex>, i64), usize>,
}

/// A cell's weeks, and per week the sum of its edits' changeset scores in units of
/// [`SCORE_UNIT`]: an integer sum is exact, so it does not depend on the order edits come in.
#[derive(Debug, Clone)]
struct Tally {
    weeks: Vec<CellWeek>,
    score_units: Vec<u128>,
}

/// The resolution of summed scores (2^-32).
const SCORE_UNIT: f64 = 1.0 / 4_294_967_296.0;

/// A score in [`SCORE_UNIT`]s (scores lie in 0..=1; anything else is clamped there).
#[allow(
    clippy::cast_possible_truncation,
    clippy::cast_sign_loss,
    reason = "clamped to 0..=2^32 first"
)]
fn score_units(score: f64) -> u128 {
    (score.clamp(0.0, 1.0) / SCORE_UNIT).round() as u128
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
    /// window (`None` outside); `score(changeset)` is its changeset's score, flagged at
    /// `threshold` and above.
    pub fn add(
        &mut self,
        edits: &[Edit],
        facts: &[EditFacts],
        week_of: &[Option<usize>],
        score: &dyn Fn(i64) -> f64,
        threshold: f64,
    ) {
        // The shares of earlier batches are complete: their changesets do not come again.
        self.row_of.clear();
        for ((e, f), w) in edits.iter().zip(facts).zip(week_of) {
            let Some(week) = *w else { continue };
            let cell = e.pos.and_then(|p| self.finder.cell(p));
            let sc = score(e.changeset);
            let is_flagged = sc >= threshold;
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
            let tally = self.cells.entry(cell).or_insert_with(|| Tally {
                weeks: vec![CellWeek::default(); weeks],
                score_units: vec![0; weeks],
            });
            tally.score_units[week] += score_units(sc);
            let cw = &mut tally.weeks[week];
            cw.score_max = cw.score_max.max(sc);
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
        for tally in self.cells.values_mut() {
            for &w in &touched {
                let Some(cw) = tally.weeks.get_mut(w) else {
                    continue;
                };
                cw.mappers.sort_unstable();
                cw.mappers.dedup();
                cw.newcomers.sort_unstable();
                cw.newcomers.dedup();
            }
        }
    }

    /// Takes out the changesets' shares of the weeks before `week` counted so far (each is
    /// complete), in the order first met; `finish` then returns only the others.
    pub fn take_shares_before(&mut self, week: usize) -> Vec<ChangesetCellWeek> {
        self.row_of.clear();
        self.rows.extract_if(.., |r| r.week < week).collect()
    }

    /// The cell-weeks, with each one's sum and maximum of its edits' changeset scores, and the
    /// changesets' shares (those not taken out) sorted by week, cell (unplaced first) and
    /// changeset.
    #[must_use]
    pub fn finish(self) -> (CellWeeks, Vec<ChangesetCellWeek>) {
        drop(self.row_of);
        let mut rows = self.rows;
        rows.sort_unstable_by_key(|r| (r.week, r.cell, r.changeset));
        debug_assert!(Kind::ALL.iter().enumerate().all(|(i, k)| k.index() == i));
        let cells = self
            .cells
            .into_iter()
            .map(|(c, t)| {
                let mut weeks = t.weeks;
                for (cw, units) in weeks.iter_mut().zip(t.score_units) {
                    #[allow(clippy::cast_precision_loss, reason = "a sum, rounded once")]
                    {
                        cw.score_sum = units as f64 * SCORE_UNIT;
                    }
                }
                (c, weeks)
            })
            .collect();
        (
            CellWeeks {
                resolution: self.resolution,
                weeks: self.weeks,
                cells,
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

/// What a region's weekly trend and baseline take from the changesets' shares: the sums, and
/// the distinct changesets, flagged changesets and newcomer mappers.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct RegionWeek {
    pub edits: u64,
    pub deletes: u64,
    pub newcomer_edits: u64,
    /// Changesets with an edit in the region this week.
    pub changesets: u64,
    /// Of those, the flagged ones.
    pub flagged_changesets: u64,
    /// Mappers with an edit in the region this week made while they were newcomers.
    pub newcomers: foldhash::HashSet<i64>,
}

/// [`RegionWeek`]s of a window, per region and week. Folding the shares of the weeks before
/// the report week into these as they are counted keeps a report's memory to the report week's
/// shares, instead of the window's: changesets are counted batch by batch (each batch holds
/// every share of its changesets), so only the newcomers' ids are kept.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RegionWeeks {
    weeks: usize,
    /// `[region * weeks + week]`.
    cells: Vec<RegionWeek>,
}

impl RegionWeeks {
    /// Empty totals for `regions` regions and `weeks` weeks.
    #[must_use]
    pub fn new(regions: usize, weeks: usize) -> Self {
        Self {
            weeks,
            cells: vec![RegionWeek::default(); regions * weeks],
        }
    }

    /// Adds a batch of changesets' shares, each with its region (weeks outside the window and
    /// unknown regions ignored); `flagged(changeset)` says whether a changeset is flagged. A
    /// batch must hold all the shares of its changesets that are ever added: a changeset is
    /// counted once per region and week of the batch, so one added again in a later batch would
    /// be counted twice.
    pub fn add_batch<'a>(
        &mut self,
        shares: impl IntoIterator<Item = (usize, &'a ChangesetCellWeek)>,
        flagged: impl Fn(i64) -> bool,
    ) {
        let mut seen: foldhash::HashSet<(usize, i64)> = foldhash::HashSet::default();
        for (region, share) in shares {
            if share.week >= self.weeks {
                continue;
            }
            let at = region * self.weeks + share.week;
            let Some(t) = self.cells.get_mut(at) else {
                continue;
            };
            t.edits += share.edits();
            t.deletes += share.deletes;
            t.newcomer_edits += share.newcomer_edits;
            if seen.insert((at, share.changeset)) {
                t.changesets += 1;
                t.flagged_changesets += u64::from(flagged(share.changeset));
            }
            if share.newcomer_edits > 0 {
                t.newcomers.insert(share.uid);
            }
        }
    }

    /// A region's weeks, in window order (empty for an unknown region).
    #[must_use]
    pub fn region(&self, region: usize) -> &[RegionWeek] {
        self.cells
            .get(region * self.weeks..(region + 1) * self.weeks)
            .unwrap_or(&[])
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

    fn edit(changeset: i64, uid: i64, lat: f64, op: Op) -> Edit {
        Edit {
            etype: crate::model::ElementType::Node,
            eid: changeset * 100 + uid,
            version: 1,
            op,
            changeset,
            uid,
            user: "Ann".into(),
            ts: 0,
            pos: crate::model::Coord::from_degrees(lat, 10.0),
            placed_by: crate::locate::PlacedBy::Own,
            tags: String::new(),
            prev_tags: None,
            prev_version: None,
            prev_ts: None,
            prev_pos: None,
        }
    }

    /// The same edits counted in batches of another order give the same cell-weeks: the
    /// score sums are exact sums, not float sums in arrival order.
    #[test]
    fn counts_do_not_depend_on_batch_order() {
        let scores = |cs: i64| [0.1, 0.7, 1.0 / 3.0, 0.9999][usize::try_from(cs).unwrap() % 4];
        let batches: Vec<Vec<Edit>> = (0..4)
            .map(|cs| {
                (0..5)
                    .map(|i| edit(cs, cs % 2, 50.0 + f64::from(i % 2) * 0.3, Op::Create))
                    .collect()
            })
            .collect();
        let count = |order: &[usize]| {
            let mut c = CellCounter::new(Resolution::Seven, 2);
            for &b in order {
                let facts = vec![EditFacts::default(); batches[b].len()];
                let week_of = vec![Some(b % 2); batches[b].len()];
                c.add(&batches[b], &facts, &week_of, &scores, 0.5);
            }
            c.finish()
        };
        let (a, rows_a) = count(&[0, 1, 2, 3]);
        let (b, rows_b) = count(&[3, 1, 0, 2]);
        assert_eq!(a.cells, b.cells);
        assert_eq!(rows_a, rows_b);
        // Week 0 holds changesets 0 and 2: 3 + 3 edits in one cell, 2 + 2 in the other.
        let cell = cell_of(
            crate::model::Coord::from_degrees(50.0, 10.0).unwrap(),
            Resolution::Seven,
        );
        let w0 = &a.get(cell.unwrap()).unwrap()[0];
        assert_eq!(w0.edits, 6);
        assert!((w0.score_sum - 3.0 * (0.1 + 1.0 / 3.0)).abs() < 1e-9);
        assert!((w0.score_max - 1.0 / 3.0).abs() < 1e-12);
        assert_eq!(w0.flagged_edits, 0);
        assert_eq!(a.get(cell.unwrap()).unwrap()[1].flagged_edits, 6);
    }

    /// Folding the earlier weeks' shares into region totals keeps what the trend needs: sums,
    /// and changesets and newcomers counted once per region and week.
    #[test]
    fn region_weeks_count_distinct_changesets_and_newcomers() {
        let share = |week, changeset, uid, deletes, newcomer_edits| ChangesetCellWeek {
            week,
            changeset,
            uid,
            creates: 1,
            deletes,
            newcomer_edits,
            ..ChangesetCellWeek::default()
        };
        let mut t = RegionWeeks::new(2, 3);
        let flagged = |cs: i64| cs % 2 == 0;
        // One changeset in two cells of region 0, week 1: one changeset, edits summed.
        let first = [
            (0, share(1, 10, 7, 2, 1)),
            (0, share(1, 11, 8, 0, 0)),
            (0, share(1, 10, 7, 1, 2)),
            (1, share(1, 10, 7, 0, 0)), // the same changeset in another region
            (0, share(2, 10, 7, 0, 0)), // and in another week
            (0, share(3, 13, 9, 0, 0)), // outside the window
            (2, share(0, 14, 9, 0, 0)), // no such region
        ];
        t.add_batch(first.iter().map(|(r, s)| (*r, s)), flagged);
        // A later batch: other changesets, one more newcomer already counted.
        let second = [(0, share(1, 12, 7, 0, 1)), (1, share(1, 15, 8, 0, 0))];
        t.add_batch(second.iter().map(|(r, s)| (*r, s)), flagged);
        let w = &t.region(0)[1];
        assert_eq!((w.edits, w.deletes, w.newcomer_edits), (7, 3, 4));
        assert_eq!((w.changesets, w.flagged_changesets), (3, 2));
        assert_eq!(w.newcomers.len(), 1);
        let w = &t.region(1)[1];
        assert_eq!((w.changesets, w.flagged_changesets), (2, 1));
        assert!(w.newcomers.is_empty());
        assert_eq!(t.region(0)[2].changesets, 1);
        assert_eq!(t.region(0)[0].changesets, 0);
        assert!(t.region(2).is_empty());
    }

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
