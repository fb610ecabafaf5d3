//! The report command's pipeline: from the state database to the report folder.
//!
//! store → locate → features → score → cells → baseline/detect per region → render → report.
//! [`analyse`] does the computing and returns plain data (what tests inspect); [`write`] turns
//! it into files.

use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};
use std::path::{Path, PathBuf};

use h3o::{CellIndex, LatLng, Resolution};

use crate::cells::{CellCounter, CellWeeks, ChangesetCellWeek, RegionWeeks};
use crate::detect::{detect, DetectConfig};
use crate::features::{changeset_features, edit_facts, ExistingData, FeatureConfig, MapperHistory};
use crate::labels::RevertIndex;
use crate::land::{Land, LandError, LandSource};
use crate::locate::{ChangesetMeta, Edit, Locator};
use crate::measure::{heat_cells, Measure};
use crate::model::IsoWeek;
use crate::progress::Progress;
use crate::regions::{Region, RegionError};
use crate::render::{HeatMap, RenderError, Style};
use crate::report::{PageContext, ReportError};
use crate::score::Scoring;
use crate::store::window::WindowTimes;
use crate::store::{Store, StoreError};
use crate::summary::{
    BaselineCounts, ChangesetRow, Counts, FlaggedChangeset, Outlier, Placement, RegionReport,
    RegionSummary, Summary, TrendPoint, SCHEMA_VERSION,
};

/// Errors of the report pipeline.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error(transparent)]
    Land(#[from] LandError),
    #[error(transparent)]
    Region(#[from] RegionError),
    #[error(transparent)]
    Render(#[from] RenderError),
    #[error(transparent)]
    Report(#[from] ReportError),
    #[error(transparent)]
    Export(#[from] crate::export::ExportError),
    #[error("{path}: {message}")]
    NoData { path: PathBuf, message: String },
}

/// Settings of a report run.
#[derive(Debug, Clone)]
pub struct ReportOptions {
    /// Report week; default: the last complete ISO week in the data.
    pub week: Option<IsoWeek>,
    pub regions: Option<PathBuf>,
    pub land: LandSource,
    /// H3 resolution; default from the extent of the week's edits.
    pub resolution: Option<Resolution>,
    pub baseline_weeks: u32,
    /// Changesets scoring at or above this are flagged.
    pub flag_threshold: f64,
    /// The default scorecard, a fitted model, or imported scores.
    pub scoring: Scoring,
    pub features: FeatureConfig,
    pub detect: DetectConfig,
    /// Map style of the heat images (colour maps, backdrop, fonts; whether roads are drawn).
    pub style: Style,
    /// Shown as the report's "generated at" (injected so output is reproducible).
    pub generated_at: String,
    pub changeset_url: String,
    pub user_url: String,
    /// A tile viewer of the same week for the front page to link to (see
    /// [`crate::report::PageContext::tiles_viewer`]).
    pub tiles_viewer: Option<String>,
}

impl Default for ReportOptions {
    fn default() -> Self {
        Self {
            week: None,
            regions: None,
            land: LandSource::World,
            resolution: None,
            baseline_weeks: 12,
            flag_threshold: 0.5,
            scoring: Scoring::default(),
            features: FeatureConfig::default(),
            detect: DetectConfig::default(),
            style: Style::default(),
            generated_at: String::new(),
            changeset_url: "https://www.openstreetmap.org/changeset/".to_owned(),
            user_url: "https://www.openstreetmap.org/user/".to_owned(),
            tiles_viewer: None,
        }
    }
}

/// A region's week, ready to draw and write.
pub struct RegionAnalysis {
    pub report: RegionReport,
    /// Cells of the region with their report-week counts (for images).
    pub cells: Vec<CellIndex>,
    pub extent: geo::Rect<f64>,
}

/// Everything a report run computed.
pub struct Analysis {
    pub summary: Summary,
    pub regions: Vec<RegionAnalysis>,
    pub cell_weeks: CellWeeks,
    pub land: Land,
    /// Main roads near the regions (lon/lat polylines), when the style draws them.
    pub roads: Vec<Vec<(f64, f64)>>,
}

/// The default week: the week of the last edit if the data reaches its Sunday, else the one
/// before.
fn default_week(store: &Store) -> Result<IsoWeek, PipelineError> {
    let last: Option<i64> = store.edit_span()?.map(|s| s.1);
    let no_data = || PipelineError::NoData {
        path: store.path().to_owned(),
        message: "no edits in the database: ingest osmChange files first".to_owned(),
    };
    let last = last.ok_or_else(no_data)?;
    let w = IsoWeek::of_unix(last).ok_or_else(no_data)?;
    Ok(if last >= w.start_unix() + 6 * 86_400 {
        w
    } else {
        w.offset(-1)
    })
}

/// Resolution by the size of the area edited: 8 (about 0.7 km² cells) for a town, down to 5
/// for a country. Common practice, no source: a few hundred to a few thousand cells per map.
fn default_resolution(extent_km: f64) -> Resolution {
    match extent_km {
        d if d < 60.0 => Resolution::Eight,
        d if d < 300.0 => Resolution::Seven,
        d if d < 1500.0 => Resolution::Six,
        _ => Resolution::Five,
    }
}

fn bbox_of(points: impl Iterator<Item = (f64, f64)>) -> Option<geo::Rect<f64>> {
    let mut b: Option<(f64, f64, f64, f64)> = None;
    for (x, y) in points {
        b = Some(match b {
            None => (x, y, x, y),
            Some((a, c, d, e)) => (a.min(x), c.min(y), d.max(x), e.max(y)),
        });
    }
    b.map(|(a, c, d, e)| geo::Rect::new((a, c), (d, e)))
}

/// Widens a map extent by 6% on each side so edge cells are not cut, clamped to valid degrees.
fn pad(r: geo::Rect<f64>) -> geo::Rect<f64> {
    let dx = r.width().max(1e-4) * 0.06;
    let dy = r.height().max(1e-4) * 0.06;
    geo::Rect::new(
        ((r.min().x - dx).max(-180.0), (r.min().y - dy).max(-85.0)),
        ((r.max().x + dx).min(180.0), (r.max().y + dy).min(85.0)),
    )
}

/// What the report lists about a changeset, with its score: the same whether counted from the
/// database or read from an export.
#[derive(Debug, Clone, PartialEq)]
pub struct ScoredChangeset {
    pub id: i64,
    pub uid: i64,
    pub user: String,
    /// Unix seconds: the changeset's creation, or its first edit if earlier.
    pub created_at: i64,
    /// Days since the mapper's first changeset seen, at the changeset.
    pub account_age_days: f64,
    pub comment: String,
    pub editor: String,
    /// Score in [0, 1].
    pub score: f64,
    /// Plain-words reasons, strongest first.
    pub reasons: Vec<String>,
}

/// A window of consecutive ISO weeks counted cell by cell, the last being the report week:
/// everything the per-region steps read. [`count`] makes it from the database; an export
/// ([`crate::export`]) holds it for other engines and gives it back.
#[derive(Debug, Clone)]
pub struct Counted {
    /// The window's first week.
    pub first_week: IsoWeek,
    /// Cell-week counts over the window.
    pub cell_weeks: CellWeeks,
    /// Each changeset's share of each cell-week, unplaced edits included (`cell: None`): of
    /// every week, or only of the report week when the earlier ones are in `region_weeks`.
    pub changeset_cells: Vec<ChangesetCellWeek>,
    /// The shares of the weeks before the report week, folded into per-region totals as they
    /// were counted (a report from the database; an export keeps every share instead).
    pub region_weeks: Option<RegionWeeks>,
    /// The changesets listed in full (texts, reasons): those with an edit in the report week for
    /// a report, every one of the window for an export.
    pub changesets: HashMap<i64, ScoredChangeset>,
    /// The scores of the changesets with an edit in the window that scored at or above the
    /// flag threshold: a report from the database keeps only these, an export gives every one.
    pub scores: foldhash::HashMap<i64, f64>,
}

/// The region a changeset's share counts in: its cell's region, or for edits that could not be
/// placed, the first region, in every week alike. (Counting them in the report week alone, as
/// before, set that region's report week against usual weeks that left them out.)
fn share_region(
    share: &ChangesetCellWeek,
    region_of_cell: impl FnOnce(CellIndex) -> Option<usize>,
) -> Option<usize> {
    match share.cell {
        Some(c) => region_of_cell(c),
        None => Some(0),
    }
}

impl Counted {
    /// The window's last week.
    #[must_use]
    pub fn report_week(&self) -> IsoWeek {
        self.first_week
            .offset(i64::try_from(self.cell_weeks.weeks).unwrap_or(1) - 1)
    }
}

/// Weeks of history behind report week `week`: `baseline_weeks`, or fewer when the data starts
/// later (weeks before the first edit stored are unknown, not empty).
#[must_use]
pub fn history_weeks(week: IsoWeek, data_first_week: Option<IsoWeek>, baseline_weeks: u32) -> u32 {
    let known = data_first_week.map_or(0, |f| (week.ordinal() - f.ordinal()).max(0));
    baseline_weeks.min(u32::try_from(known).unwrap_or(u32::MAX))
}

/// The week of the first edit stored, if any.
///
/// # Errors
/// On database failure.
pub fn data_first_week(store: &Store) -> Result<Option<IsoWeek>, PipelineError> {
    let first_ts: Option<i64> = store.edit_span()?.map(|s| s.0);
    Ok(first_ts.and_then(IsoWeek::of_unix))
}

/// The weeks from the first to the last edit stored.
///
/// # Errors
/// On database failure, or [`PipelineError::NoData`] when there are no edits.
pub fn data_weeks(store: &Store) -> Result<(IsoWeek, IsoWeek), PipelineError> {
    let (first, last) = store.edit_span()?.unzip();
    first
        .and_then(IsoWeek::of_unix)
        .zip(last.and_then(IsoWeek::of_unix))
        .ok_or_else(|| PipelineError::NoData {
            path: store.path().to_owned(),
            message: "no edits in the database: ingest osmChange files first".to_owned(),
        })
}

/// The report week `opts.week`, or by default the last complete week in the data.
///
/// # Errors
/// On database failure or when there are no edits.
pub fn report_week(store: &Store, opts: &ReportOptions) -> Result<IsoWeek, PipelineError> {
    match opts.week {
        Some(w) => Ok(w),
        None => default_week(store),
    }
}

fn load_regions(opts: &ReportOptions) -> Result<Vec<Region>, PipelineError> {
    Ok(match &opts.regions {
        Some(p) => crate::regions::load(p)?,
        None => crate::regions::everything(),
    })
}

/// The weeks [`count`] counts.
#[derive(Debug, Clone, Copy)]
pub struct CountWeeks {
    pub first: IsoWeek,
    /// The last week, which must have edits.
    pub last: IsoWeek,
    /// Without `opts.resolution`, the resolution suits the area edited in this week.
    pub resolution: IsoWeek,
    /// Changesets with an edit in this week or later keep their user, comment, editor and
    /// reasons; earlier ones keep their ids and score only (enough for weekly counts).
    pub details_from: IsoWeek,
}

/// Counts the weeks `weeks.first` to `weeks.last` from the database: loads and places their
/// edits, scores the changesets (with `opts.scoring`, flagging at `opts.flag_threshold`) and
/// buckets the edits into cells at `opts.resolution`, or by default at the resolution suited to
/// the area edited in `weeks.resolution`.
///
/// Memory follows a part of the window, not the whole: a first pass reads only who edited when
/// (the hours of each changeset's first and last edit, each mapper's first edit, edits per
/// hour), then the edits are loaded in parts of at most [`PART_EDITS`] (by a second thread with
/// its own connection), and each changeset is scored and counted once all its edits in the
/// window are loaded (a changeset with edits in a later part waits for it; only these are
/// remembered from the first pass). Only the flagged changesets keep their score after their
/// part, and the mappers' histories are read a stretch at a time as the parts advance.
///
/// The store's connection keeps a page cache of [`COUNTING_CACHE_MIB`] from here on.
///
/// With `fold_into`, the changesets' shares of the weeks before `weeks.last` are folded into
/// per-region totals as they are counted ([`Counted::region_weeks`]), so memory follows the
/// report week's shares; without, every share is kept (an export).
///
/// # Errors
/// On database failure, or [`PipelineError::NoData`] when `weeks.last` has no edits.
pub fn count(
    store: &Store,
    weeks: CountWeeks,
    land: &Land,
    fold_into: Option<&[Region]>,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<Counted, PipelineError> {
    let (first_week, last_week, resolution_week) = (weeks.first, weeks.last, weeks.resolution);
    let from = first_week.start_unix();
    let to = last_week.offset(1).start_unix();
    let times = store.window_times(from, to)?;
    if times.last_ts.is_none_or(|t| t < last_week.start_unix()) {
        return Err(PipelineError::NoData {
            path: store.path().to_owned(),
            message: format!("no edits in the report week {last_week}"),
        });
    }
    let parts = window_parts(from, to, &times.hourly, PART_EDITS);
    let rw = (
        resolution_week.start_unix(),
        resolution_week.offset(1).start_unix(),
    );
    let extent_parts: Option<Vec<(i64, i64)>> = opts.resolution.is_none().then(|| {
        parts
            .iter()
            .copied()
            .filter(|&(a, b)| a < rw.1 && b > rw.0)
            .collect()
    });
    let WindowTimes {
        changeset_hours,
        mapper_first,
        hourly,
        ..
    } = times;
    let carried = carried_changesets(from, &parts, changeset_hours);
    store.set_cache_mib(COUNTING_CACHE_MIB)?;
    // Read before the loading thread starts: reading every changeset's comment for the revert
    // index is the report's largest passing need (SQLite sorts the whole changesets table), and
    // it would otherwise come on top of the loading thread's node-index cache and first parts.
    let reverts = RevertIndex::load(store)?;
    let existing = ExistingData::load(store)?;
    std::thread::scope(|scope| {
        // A second connection loads and places the edits, one part ahead of the counting
        // below (a core each when there are two). The hand-over waits for the receiver, so at
        // most two parts are held: the one being counted and the next.
        let (tx, rx) = std::sync::mpsc::sync_channel(0);
        let (path, load) = (store.path(), parts.as_slice());
        scope.spawn(move || load_parts(path, extent_parts.as_deref(), rw, load, &tx));
        let window = Window {
            first_week,
            weeks: usize::try_from(last_week.ordinal() - first_week.ordinal() + 1).unwrap_or(0),
            from,
            parts: &parts,
            carried: &carried,
            mapper_first: &mapper_first,
            hourly: &hourly,
            details_from: weeks.details_from.start_unix(),
            reverts: &reverts,
            existing: &existing,
        };
        count_loaded(store, &rx, &window, land, fold_into, opts, progress)
    })
}

/// How far (seconds) the mappers' histories reach beyond the part being counted: a mapper's
/// changesets are read up to this far past the part's end when the part needs more, and those
/// further before the part's changesets than this are folded into counts, so memory follows
/// about twice this span of the mappers' changesets, not their whole histories (BENCHMARKS.md,
/// "Report memory (session 6)").
const HISTORY_STRETCH: i64 = 7 * 86_400;

/// The SQLite page cache of the caller's connection from [`count`] on. It reads the changesets
/// once in full (the revert index) and then each mapper's stretches by index; the 64 MiB of an
/// ingest held as much again as any other part of the report at 16x, for no measurable gain in
/// time (BENCHMARKS.md, "Report memory (session 6)").
const COUNTING_CACHE_MIB: u32 = 8;

/// The SQLite page cache of the connection that loads the parts (BENCHMARKS.md, "The edit log
/// out of SQLite, the report's earlier weeks folded").
const LOADER_CACHE_MIB: u32 = 8;

/// Most edits per part of a window counted at once (fewer when an hour holds more): memory
/// follows a part's edits, whatever the size of the region.
const PART_EDITS: u64 = 100_000;

/// Splits `from..to` into consecutive parts of whole hours holding at most `most` edits each
/// (by `hourly` counts; an hour holding more is a part of its own), never across the start of
/// an ISO week.
fn window_parts(from: i64, to: i64, hourly: &[u64], most: u64) -> Vec<(i64, i64)> {
    let mut parts = Vec::new();
    let (mut start, mut held) = (from, 0u64);
    let mut t = from;
    for &n in hourly {
        if t >= to {
            break;
        }
        let week_starts = (t - from) % 604_800 == 0 && t > start;
        if t > start && (held + n > most || week_starts) {
            parts.push((start, t));
            (start, held) = (t, 0);
        }
        held += n;
        t += 3600;
    }
    if start < to {
        parts.push((start, to));
    }
    parts
}

/// The changesets whose edits in the window fall in more than one of `parts` (consecutive
/// parts of whole hours from `from`), each with the index of the part holding its last edit,
/// from the first pass's hours of each changeset's first and last edit (freed here): the only
/// changesets [`count_loaded`] holds back at the end of a part, a few per part boundary,
/// instead of an entry for every changeset of the window.
fn carried_changesets(
    from: i64,
    parts: &[(i64, i64)],
    hours: foldhash::HashMap<i64, (u32, u32)>,
) -> foldhash::HashMap<i64, usize> {
    let starts: Vec<i64> = parts.iter().map(|&(a, _)| (a - from) / 3600).collect();
    let part_of = |h: u32| {
        starts
            .partition_point(|&s| s <= i64::from(h))
            .saturating_sub(1)
    };
    hours
        .into_iter()
        .filter_map(|(cs, (first, last))| {
            let (p, q) = (part_of(first), part_of(last));
            (p != q).then_some((cs, q))
        })
        .collect()
}

/// The window [`count`] counts, how it is split, and what is read once for it.
struct Window<'a> {
    first_week: IsoWeek,
    weeks: usize,
    /// Start of the first week (unix seconds).
    from: i64,
    parts: &'a [(i64, i64)],
    /// The changesets with edits in more than one part, each with the index of the part
    /// holding its last edit ([`carried_changesets`]).
    carried: &'a foldhash::HashMap<i64, usize>,
    /// Per mapper (uid), the time of their first edit in the window.
    mapper_first: &'a foldhash::HashMap<i64, i64>,
    /// Edits per hour of the window.
    hourly: &'a [u64],
    /// See [`CountWeeks::details_from`] (unix seconds).
    details_from: i64,
    /// The revert index and the existing-data grid, read once for the window.
    reverts: &'a RevertIndex,
    existing: &'a ExistingData,
}

/// What the loading thread of [`count`] sends: the size of the area edited in the resolution
/// week (km across), then each part's placed edits with their changesets' metadata.
enum Loaded {
    ExtentKm(f64),
    Part(Vec<Edit>, HashMap<i64, ChangesetMeta>),
}

/// The loading thread of [`count`]: opens its own connection and sends what it loads, or the
/// first error; stops early when the receiver is gone.
fn load_parts(
    path: &Path,
    extent_parts: Option<&[(i64, i64)]>,
    resolution_week: (i64, i64),
    parts: &[(i64, i64)],
    tx: &std::sync::mpsc::SyncSender<Result<Loaded, StoreError>>,
) {
    let run = || -> Result<(), StoreError> {
        let store = Store::open(path)?;
        // This connection reads the edit log's index and changesets by id ranges, in order.
        store.set_cache_mib(LOADER_CACHE_MIB)?;
        let mut locator = Locator::new(&store)?;
        if let Some(extent_parts) = extent_parts {
            let (a, b) = resolution_week;
            let mut ext: Option<geo::Rect<f64>> = None;
            for &(p, q) in extent_parts {
                let (edits, _) = locator.load(p.max(a), q.min(b))?;
                let points = edits
                    .iter()
                    .filter_map(|e| e.pos.map(|p| (p.lon(), p.lat())));
                let corners = ext.map(|r| [(r.min().x, r.min().y), (r.max().x, r.max().y)]);
                ext = bbox_of(points.chain(corners.into_iter().flatten()));
            }
            let km = ext.map_or(0.0, |r| {
                let a = crate::model::Coord::from_degrees(r.min().y, r.min().x);
                let b = crate::model::Coord::from_degrees(r.max().y, r.max().x);
                a.zip(b).map_or(0.0, |(a, b)| a.distance_m(b) / 1000.0)
            });
            if tx.send(Ok(Loaded::ExtentKm(km))).is_err() {
                return Ok(());
            }
        }
        for &(a, b) in parts {
            let (edits, metas) = locator.load(a, b)?;
            if tx.send(Ok(Loaded::Part(edits, metas))).is_err() {
                return Ok(());
            }
        }
        Ok(())
    };
    if let Err(e) = run() {
        // The receiver may be gone already; then nobody needs the error.
        let _ = tx.send(Err(e));
    }
}

/// The counting side of [`count`].
fn count_loaded(
    store: &Store,
    rx: &std::sync::mpsc::Receiver<Result<Loaded, StoreError>>,
    window: &Window<'_>,
    land: &Land,
    fold_into: Option<&[Region]>,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<Counted, PipelineError> {
    let (weeks, from) = (window.weeks, window.from);
    let first_edit = window.mapper_first;
    let (reverts, existing) = (window.reverts, window.existing);
    // The mappers' histories follow the parts ([`HISTORY_STRETCH`]).
    let mut hist = MapperHistory::default();
    let lost = || PipelineError::NoData {
        path: store.path().to_owned(),
        message: "the thread loading edits stopped".to_owned(),
    };
    let next = || rx.recv().map_err(|_| lost())?.map_err(PipelineError::from);
    let res = match opts.resolution {
        Some(r) => r,
        None => match next()? {
            Loaded::ExtentKm(km) => default_resolution(km),
            Loaded::Part(..) => return Err(lost()),
        },
    };
    let threshold = opts.flag_threshold;
    let mut counter = CellCounter::new(res, weeks);
    let report_idx = weeks.saturating_sub(1);
    let mut region_weeks = fold_into.map(|r| RegionWeeks::new(r.len(), weeks));
    let mut region_cache: foldhash::HashMap<CellIndex, Option<usize>> =
        foldhash::HashMap::default();
    // Earlier weeks' changesets keep no record (a full record each was the largest share of
    // the report's peak memory, BENCHMARKS.md, "Where the report's memory goes"), and only the
    // flagged ones keep their score, which the weekly trend counts; the others' scores are
    // needed only while their part is counted.
    let mut part_scores: foldhash::HashMap<i64, f64> = foldhash::HashMap::default();
    let mut flagged: foldhash::HashMap<i64, f64> = foldhash::HashMap::default();
    let mut changesets: HashMap<i64, ScoredChangeset> = HashMap::new();
    let mut waiting: Vec<Edit> = Vec::new();
    let mut waiting_metas: HashMap<i64, ChangesetMeta> = HashMap::new();
    let bar = progress.steps(window.hourly.iter().sum(), "count");
    for (k, &(part_start, part_end)) in window.parts.iter().enumerate() {
        let Loaded::Part(mut ready, mut metas) = next()? else {
            return Err(lost());
        };
        bar.inc(ready.len() as u64);
        // The order of a batch's edits does not matter to the steps below.
        ready.append(&mut waiting);
        metas.extend(waiting_metas.drain());
        // Changesets with edits after this part wait, with their metadata, for a later part.
        let done = |cs: i64| window.carried.get(&cs).is_none_or(|&last| last <= k);
        let later: Vec<Edit> = ready.extract_if(.., |e| !done(e.changeset)).collect();
        for e in &later {
            if let Some(m) = metas.remove(&e.changeset) {
                waiting_metas.insert(e.changeset, m);
            }
        }
        waiting = later;
        // A changeset's mapper history is asked about at its start, its metadata's or its first
        // edit's, whichever is earlier; the edits' facts ask only for the first changeset's time.
        let mut asked: foldhash::HashMap<i64, i64> = foldhash::HashMap::default();
        for e in &ready {
            let t = metas
                .get(&e.changeset)
                .map_or(e.ts, |m| m.created_at.min(e.ts));
            asked
                .entry(e.uid)
                .and_modify(|a| *a = (*a).min(t))
                .or_insert(t);
        }
        hist.prepare(store, reverts, asked, part_end, HISTORY_STRETCH)?;
        // Each changeset is scored in the part of its last edit, and parts never cross the start
        // of a week: those with an edit in the week of `details_from` or later are the ones
        // scored in a part starting there or later.
        let details = part_start >= window.details_from;
        let facts = edit_facts(&ready, &hist, first_edit, land, existing, &opts.features);
        part_scores.clear();
        for f in changeset_features(&ready, &facts, &metas, &hist, first_edit) {
            let s = opts.scoring.score(&f);
            part_scores.insert(f.id, s.score);
            if s.score >= threshold {
                flagged.insert(f.id, s.score);
            }
            if details {
                changesets.insert(
                    f.id,
                    ScoredChangeset {
                        id: f.id,
                        uid: f.uid,
                        user: f.user,
                        created_at: f.created_at,
                        account_age_days: f.account_age_days,
                        comment: f.comment,
                        editor: f.editor,
                        score: s.score,
                        reasons: s.reasons.into_iter().map(|r| r.1).collect(),
                    },
                );
            }
        }
        let week_of: Vec<Option<usize>> = ready
            .iter()
            .map(|e| {
                let w = (e.ts - from).div_euclid(604_800);
                usize::try_from(w).ok().filter(|&w| w < weeks)
            })
            .collect();
        let score = |cs: i64| part_scores.get(&cs).copied().unwrap_or(0.0);
        counter.add(&ready, &facts, &week_of, &score, threshold);
        if let (Some(totals), Some(regions)) = (&mut region_weeks, fold_into) {
            // The shares taken are all those of this part's changesets before the report week.
            let shares = counter.take_shares_before(report_idx);
            let placed = shares.iter().filter_map(|share| {
                let region = share_region(share, |c| {
                    *region_cache
                        .entry(c)
                        .or_insert_with(|| crate::regions::region_of(regions, c))
                });
                region.map(|r| (r, share))
            });
            totals.add_batch(placed, |cs| score(cs) >= threshold);
        }
    }
    bar.finish();
    let (cell_weeks, changeset_cells) = counter.finish();
    Ok(Counted {
        first_week: window.first_week,
        cell_weeks,
        changeset_cells,
        region_weeks,
        changesets,
        scores: flagged,
    })
}

/// Runs every analysis stage on the database.
///
/// # Errors
/// On database failure, unreadable land or regions files, or when there is no data.
pub fn analyse(
    store: &Store,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<Analysis, PipelineError> {
    let week = report_week(store, opts)?;
    let n_hist = history_weeks(week, data_first_week(store)?, opts.baseline_weeks);
    let first_week = week.offset(-i64::from(n_hist));
    progress.note(&format!(
        "report week {week}, baseline {first_week} to {}",
        week.offset(-1)
    ));
    let land = opts.land.load()?;
    let regions = load_regions(opts)?;
    let weeks = CountWeeks {
        first: first_week,
        last: week,
        resolution: week,
        details_from: week,
    };
    let counted = count(store, weeks, &land, Some(&regions), opts, progress)?;
    let mut analysis = analyse_counted(counted, &regions, land, store.skipped()?, opts, progress);
    analysis.roads = main_roads(store, &analysis, opts, progress)?;
    Ok(analysis)
}

/// Runs the per-region stages on a window read from an export folder (the reverse path:
/// cell-week counts made elsewhere, maps and report from hexvigil). The report week is
/// `opts.week` or the export's default week; the map has no road context.
///
/// # Errors
/// When the export is missing, malformed or does not cover the window, when its resolution or
/// flag threshold differs from `opts`, or on unreadable land or regions files.
pub fn analyse_export(
    dir: &Path,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<Analysis, PipelineError> {
    let manifest = crate::export::Manifest::load(dir)?;
    let week = opts.week.unwrap_or(manifest.default_week);
    let n_hist = history_weeks(week, Some(manifest.data_first_week), opts.baseline_weeks);
    let first_week = week.offset(-i64::from(n_hist));
    progress.note(&format!(
        "report week {week}, baseline {first_week} to {}, from the export in {}",
        week.offset(-1),
        dir.display()
    ));
    let land = opts.land.load()?;
    let regions = load_regions(opts)?;
    let counted = crate::export::read(dir, &manifest, first_week, week, opts)?;
    Ok(analyse_counted(
        counted,
        &regions,
        land,
        manifest
            .skipped
            .iter()
            .map(|s| (s.reason.clone(), s.count))
            .collect(),
        opts,
        progress,
    ))
}

/// Main roads around the regions' maps (lon/lat polylines), when the style draws them.
fn main_roads(
    store: &Store,
    analysis: &Analysis,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<Vec<Vec<(f64, f64)>>, PipelineError> {
    let area = bbox_of(analysis.regions.iter().flat_map(|r| {
        let (a, b) = (r.extent.min(), r.extent.max());
        [(a.x, a.y), (b.x, b.y)]
    }));
    Ok(match area {
        Some(area) if opts.style.roads.show => {
            let found = crate::roads::main_roads(store, area)?;
            if found.truncated {
                progress.note(&format!(
                    "main roads: only the first {} nodes were read; the rest are not drawn",
                    crate::roads::MAX_ROAD_NODES
                ));
            }
            found.lines
        }
        _ => Vec::new(),
    })
}

/// The per-region stages over a counted window: each region's outlier tests, counts against
/// its usual week, changesets, incidents and trend, for the window's last week. `skipped` is
/// listed on the pages; the result has no road context.
#[allow(
    clippy::too_many_lines,
    reason = "one linear pipeline, easier to read whole"
)]
#[must_use]
pub fn analyse_counted(
    counted: Counted,
    regions: &[Region],
    land: Land,
    skipped: Vec<(String, u64)>,
    opts: &ReportOptions,
    progress: &Progress,
) -> Analysis {
    let week = counted.report_week();
    let first_week = counted.first_week;
    let cw = counted.cell_weeks;
    let weeks = cw.weeks;
    let report_idx = weeks - 1;
    let n_hist = u32::try_from(report_idx).unwrap_or(u32::MAX);
    let res = cw.resolution;
    let threshold = opts.flag_threshold;
    let changesets = &counted.changesets;
    let contributions = crate::cells::contributions(&counted.changeset_cells, report_idx);

    // Which region each cell belongs to.
    let region_of_cell: HashMap<CellIndex, usize> = cw
        .cells
        .keys()
        .filter_map(|&c| crate::regions::region_of(regions, c).map(|r| (c, r)))
        .collect();
    // Each region's weeks: the totals folded while counting, if any, plus the shares kept.
    // The shares kept are all those of their changesets not folded already.
    let mut totals = counted
        .region_weeks
        .unwrap_or_else(|| RegionWeeks::new(regions.len(), weeks));
    let placed = counted.changeset_cells.iter().filter_map(|share| {
        share_region(share, |c| region_of_cell.get(&c).copied()).map(|r| (r, share))
    });
    totals.add_batch(placed, |id| {
        counted.scores.get(&id).is_some_and(|&s| s >= threshold)
    });

    let slugs =
        crate::report::assign_slugs(&regions.iter().map(|r| r.name.as_str()).collect::<Vec<_>>());
    let bar = progress.steps(regions.len() as u64, "analyse");
    let mut out_regions = Vec::new();
    for (ri, region) in regions.iter().enumerate() {
        let cells: Vec<CellIndex> = cw
            .cells
            .keys()
            .copied()
            .filter(|c| region_of_cell.get(c) == Some(&ri))
            .collect();
        // Without a single week of history there is nothing to compare with.
        let tests = if n_hist == 0 {
            Vec::new()
        } else {
            detect(&cw, &cells, !land.is_empty(), &opts.detect)
        };

        // Counts for the week and the trend.
        let mut counts = Counts::default();
        let mut placement = Placement::default();
        let region_weeks = totals.region(ri);
        let trend: Vec<TrendPoint> = region_weeks
            .iter()
            .enumerate()
            .map(|(w, t)| TrendPoint {
                week: first_week.offset(w as i64).to_string(),
                edits: t.edits,
                deletes: t.deletes,
                newcomer_edits: t.newcomer_edits,
                flagged_changesets: t.flagged_changesets,
            })
            .collect();
        let mut mappers = BTreeSet::new();
        let mut cs_rows: BTreeMap<i64, (u64, u64, u64)> = BTreeMap::new();
        for r in &counted.changeset_cells {
            let in_region = share_region(r, |c| region_of_cell.get(&c).copied()) == Some(ri);
            if in_region && r.week == report_idx {
                placement += r.placement.clone();
                counts.edits += r.edits();
                counts.creates += r.creates;
                counts.modifies += r.modifies;
                counts.deletes += r.deletes;
                let row = cs_rows.entry(r.changeset).or_default();
                row.0 += r.creates;
                row.1 += r.modifies;
                row.2 += r.deletes;
                mappers.insert(r.uid);
            }
        }
        counts.changesets = cs_rows.len() as u64;
        counts.mappers = mappers.len() as u64;
        counts.newcomers = region_weeks
            .get(report_idx)
            .map_or(0, |t| t.newcomers.len() as u64);
        #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
        let baseline_counts = {
            let n = report_idx.max(1) as f64;
            BaselineCounts {
                weeks: n_hist,
                edits: trend[..report_idx]
                    .iter()
                    .map(|t| t.edits as f64)
                    .sum::<f64>()
                    / n,
                deletes: trend[..report_idx]
                    .iter()
                    .map(|t| t.deletes as f64)
                    .sum::<f64>()
                    / n,
                newcomers: region_weeks[..report_idx]
                    .iter()
                    .map(|t| t.newcomers.len() as f64)
                    .sum::<f64>()
                    / n,
                changesets: region_weeks[..report_idx]
                    .iter()
                    .map(|t| t.changesets as f64)
                    .sum::<f64>()
                    / n,
            }
        };

        // Changesets of the week in this region.
        let mut rows: Vec<ChangesetRow> = cs_rows
            .iter()
            .filter_map(|(&id, &(c, m, d))| {
                let s = changesets.get(&id)?;
                Some(ChangesetRow {
                    id,
                    user: s.user.clone(),
                    uid: s.uid,
                    created_at: s.created_at,
                    account_age_days: (s.account_age_days * 10.0).round() / 10.0,
                    creates: c,
                    modifies: m,
                    deletes: d,
                    comment: s.comment.clone(),
                    editor: s.editor.clone(),
                    score: s.score,
                    reasons: s.reasons.clone(),
                    flagged: s.score >= threshold,
                })
            })
            .collect();
        rows.sort_by(|a, b| b.score.total_cmp(&a.score).then(a.id.cmp(&b.id)));
        let flagged_changesets: Vec<FlaggedChangeset> = rows
            .iter()
            .filter(|r| r.flagged)
            .map(|r| FlaggedChangeset {
                id: r.id,
                user: r.user.clone(),
                uid: r.uid,
                score: r.score,
                reasons: r.reasons.clone(),
            })
            .collect();
        counts.flagged_changesets = flagged_changesets.len() as u64;
        let user_of: HashMap<i64, &str> = rows.iter().map(|r| (r.id, r.user.as_str())).collect();

        // Outliers, strongest evidence first.
        let mut outs: Vec<_> = tests.iter().filter(|t| t.outlier).collect();
        outs.sort_by(|a, b| {
            a.p_value
                .total_cmp(&b.p_value)
                .then(a.kind.cmp(&b.kind))
                .then(a.cell.cmp(&b.cell))
        });
        let mut outliers = Vec::new();
        let mut rings = Vec::new();
        for t in &outs {
            let mut contrib: Vec<(i64, u64)> = contributions
                .get(&(t.cell, t.kind))
                .map(|m| m.iter().map(|(&k, &v)| (k, v)).collect())
                .unwrap_or_default();
            contrib.sort_by(|a, b| b.1.cmp(&a.1).then(a.0.cmp(&b.0)));
            let mut names: Vec<String> = Vec::new();
            for (id, _) in &contrib {
                if let Some(u) = user_of.get(id) {
                    if !names.iter().any(|n| n == u) {
                        names.push((*u).to_owned());
                    }
                }
            }
            let c = LatLng::from(t.cell);
            outliers.push(Outlier {
                kind: t.kind.name().to_owned(),
                cell: t.cell.to_string(),
                lat: (c.lat() * 1e6).round() / 1e6,
                lon: (c.lng() * 1e6).round() / 1e6,
                observed: t.observed,
                expected: (t.expected * 1000.0).round() / 1000.0,
                p_value: t.p_value,
                q_value: t.q_value,
                measure: t.kind.measure().to_owned(),
                baseline_source: if t.own_history {
                    "own"
                } else {
                    "neighbourhood"
                }
                .to_owned(),
                changesets: contrib.iter().map(|c| c.0).collect(),
                mappers: names,
            });
            let mut ring: Vec<(f64, f64)> = t
                .cell
                .boundary()
                .iter()
                .map(|ll| (ll.lng(), ll.lat()))
                .collect();
            if let Some(&first) = ring.first() {
                ring.push(first);
            }
            rings.push(ring);
        }
        counts.outlier_cells = outs.iter().map(|t| t.cell).collect::<HashSet<_>>().len() as u64;

        let extent = region
            .area
            .as_ref()
            .and_then(geo::BoundingRect::bounding_rect)
            .or_else(|| {
                bbox_of(
                    cells
                        .iter()
                        .map(|&c| LatLng::from(c))
                        .map(|ll| (ll.lng(), ll.lat())),
                )
            })
            .map(pad)
            .unwrap_or_else(|| geo::Rect::new((-1.0, -1.0), (1.0, 1.0)));
        out_regions.push(RegionAnalysis {
            report: RegionReport {
                summary: RegionSummary {
                    name: region.name.clone(),
                    slug: slugs[ri].clone(),
                    week: week.to_string(),
                    counts,
                    baseline_counts,
                    placement,
                    incidents: crate::detect::incidents(&outliers),
                    outliers,
                    flagged_changesets,
                },
                changesets: rows,
                trend,
                outlier_rings: rings,
                skipped: skipped.clone(),
                images: Vec::new(),
            },
            cells,
            extent,
        });
        bar.inc(1);
    }
    bar.finish_and_clear();
    let summary = Summary {
        schema: SCHEMA_VERSION,
        generator: format!("hexvigil {}", env!("CARGO_PKG_VERSION")),
        week: week.to_string(),
        resolution: u8::from(res),
        baseline_weeks: n_hist,
        regions: out_regions
            .iter()
            .map(|r| r.report.summary.clone())
            .collect(),
    };
    Analysis {
        summary,
        regions: out_regions,
        cell_weeks: cw,
        land,
        roads: Vec::new(),
    }
}

/// Draws the images and writes the report folder.
///
/// # Errors
/// When an image or a file cannot be written.
pub fn write(
    analysis: &mut Analysis,
    out: &Path,
    opts: &ReportOptions,
) -> Result<(), PipelineError> {
    let mut all_images = Vec::with_capacity(analysis.regions.len());
    for r in &analysis.regions {
        let dir = out.join(&r.report.summary.slug);
        std::fs::create_dir_all(&dir).map_err(|source| ReportError::Io {
            path: dir.clone(),
            source,
        })?;
        let outlined: Vec<CellIndex> = r
            .report
            .summary
            .outliers
            .iter()
            .filter_map(|o| o.cell.parse().ok())
            .collect();
        let name = &r.report.summary.name;
        let week = &r.report.summary.week;
        let mut images = Vec::new();
        for measure in Measure::ALL {
            let cells = heat_cells(analysis, &r.cells, measure, &opts.detect);
            let what = measure.title();
            let middle = if measure.is_count() {
                #[allow(
                    clippy::cast_possible_truncation,
                    clippy::cast_sign_loss,
                    reason = "sums of counts"
                )]
                let total = cells.iter().map(|c| c.value).sum::<f64>() as u64;
                format!("{} {what}", crate::report::group_thousands(total))
            } else if measure == Measure::Ratio {
                format!(
                    "expectation from {} weeks of history",
                    analysis.summary.baseline_weeks
                )
            } else {
                "each cell's highest-scoring changeset".to_owned()
            };
            let title = format!("{name}: {what}, {week}");
            let subtitle = format!(
                "H3 resolution {} · {middle} · outlier cells outlined",
                analysis.summary.resolution
            );
            let map = HeatMap {
                title: &title,
                subtitle: &subtitle,
                legend_label: measure.legend(),
                cells: &cells,
                outlined: &outlined,
                land: &analysis.land,
                roads: &analysis.roads,
                extent: r.extent,
                style: &opts.style,
                colormap: measure.colormap(&opts.style),
                scale: measure.scale(),
                value_max: measure.value_max(),
                width: 1200,
            };
            let pix = crate::render::render_heat(&map)?;
            let file = measure.file_name();
            crate::render::save_png(&pix, &dir.join(file))?;
            images.push((
                file.to_owned(),
                format!("{}; outlier cells outlined", measure.legend()),
            ));
        }
        all_images.push(images);
    }
    for (r, images) in analysis.regions.iter_mut().zip(all_images) {
        r.report.images = images;
    }
    let reports: Vec<RegionReport> = analysis.regions.iter().map(|r| r.report.clone()).collect();
    let ctx = PageContext {
        generated_at: &opts.generated_at,
        tool_version: env!("CARGO_PKG_VERSION"),
        resolution: analysis.summary.resolution,
        baseline_weeks: analysis.summary.baseline_weeks,
        fdr: opts.detect.fdr,
        flag_threshold: opts.flag_threshold,
        changeset_url: &opts.changeset_url,
        user_url: &opts.user_url,
        tiles_viewer: opts.tiles_viewer.as_deref(),
    };
    crate::report::write_report(out, &analysis.summary, &reports, &ctx)?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Only the changesets with edits in two or more parts are carried, each to the part of
    /// its last edit.
    #[test]
    fn carried_changesets_are_those_spanning_parts() {
        let from = 1_797_811_200;
        let h = 3600;
        // Parts: hours 0-2, 3, 4-9, 10 to the end of the week.
        let parts = [
            (from, from + 3 * h),
            (from + 3 * h, from + 4 * h),
            (from + 4 * h, from + 10 * h),
            (from + 10 * h, from + 604_800),
        ];
        let hours: foldhash::HashMap<i64, (u32, u32)> = [
            (1, (0, 2)),
            (2, (2, 3)),
            (3, (3, 3)),
            (4, (1, 11)),
            (5, (4, 9)),
            (6, (9, 10)),
            (7, (167, 167)),
        ]
        .into_iter()
        .collect();
        let got = carried_changesets(from, &parts, hours);
        let want: foldhash::HashMap<i64, usize> = [(2, 1), (4, 3), (6, 3)].into_iter().collect();
        assert_eq!(got, want);
    }

    #[test]
    fn unplaced_shares_count_in_the_first_region_in_every_week() {
        // A region's report week is compared with its usual weeks: edits that could not be
        // placed must count the same way in both (common practice, no source).
        let share = |week, cell| ChangesetCellWeek {
            week,
            cell,
            changeset: 1,
            ..ChangesetCellWeek::default()
        };
        let cell = h3o::LatLng::new(45.2, -33.6)
            .unwrap()
            .to_cell(h3o::Resolution::Nine);
        for week in [0, 5, 13] {
            assert_eq!(
                share_region(&share(week, None), |_| Some(1)),
                Some(0),
                "week {week}"
            );
            assert_eq!(share_region(&share(week, Some(cell)), |_| Some(1)), Some(1));
            assert_eq!(share_region(&share(week, Some(cell)), |_| None), None);
        }
    }

    #[test]
    fn window_parts_cover_the_window_in_bounded_parts_within_weeks() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let from = 1_797_811_200; // a Monday
        for weeks in [1i64, 2, 14] {
            let to = from + weeks * 604_800;
            let hours = usize::try_from((to - from) / 3600 + 1).unwrap();
            let hourly: Vec<u64> = (0..hours)
                .map(|h| {
                    if h % 97 == 5 {
                        500
                    } else {
                        rng.gen_range(0..40)
                    }
                })
                .collect();
            let parts = window_parts(from, to, &hourly, 300);
            assert_eq!(parts.first().map(|p| p.0), Some(from));
            assert_eq!(parts.last().map(|p| p.1), Some(to));
            for w in parts.windows(2) {
                assert_eq!(w[0].1, w[1].0, "parts are consecutive");
            }
            for &(a, b) in &parts {
                assert!(a < b);
                assert_eq!((a - from) % 3600, 0);
                assert_eq!(
                    (a - from) / 604_800,
                    (b - 1 - from) / 604_800,
                    "{a}..{b} crosses a week"
                );
                let first = usize::try_from((a - from) / 3600).unwrap();
                let last = usize::try_from((b - from) / 3600).unwrap();
                let held: u64 = hourly[first..last].iter().sum();
                assert!(held <= 300 || last - first == 1, "{a}..{b} holds {held}");
            }
            assert!(parts.len() as i64 >= weeks);
        }
        assert_eq!(
            window_parts(from, from + 60, &[0], 10),
            vec![(from, from + 60)]
        );
    }
}
