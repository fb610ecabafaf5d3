//! Columnar export for engines beyond one machine, and the way back.
//!
//! [`export`] counts weeks of the database exactly as a report does and writes them as Parquet,
//! partitioned Hive-style by ISO week and by H3 resolution-0 parent cell ("base"), so DuckDB,
//! Spark or any other engine can compute baselines and tests over many regions and years:
//!
//! ```text
//! export.json                                                   the manifest (Manifest)
//! cell_weeks/week=2026-W48/base=8019fffffffffff/part-0.parquet  one row per cell and week with edits
//! cell_week_changesets/week=…/base=…|unplaced/part-0.parquet    one row per changeset, cell and week
//! changesets/week=…/part-0.parquet                              scored changesets, by week created
//! cell_neighbours/base=…/part-0.parquet                         each cell's baseline neighbourhood
//! ```
//!
//! [`read`] gives a window of such an export back as [`Counted`], so the maps, tiles and pages
//! come from hexvigil even when the counting ran elsewhere. Every column is described in
//! `docs/export.md`.

mod columns;

use std::collections::{BTreeMap, HashMap, HashSet};
use std::path::{Path, PathBuf};

use h3o::{CellIndex, Resolution};
use serde::{Deserialize, Serialize};

use crate::cells::{CellWeek, CellWeeks, ChangesetCellWeek};
use crate::detect::neighbourhood;
use crate::land::LandSource;
use crate::model::IsoWeek;
use crate::pipeline::{Counted, PipelineError, ReportOptions, ScoredChangeset};
use crate::progress::Progress;
use crate::store::Store;
use crate::summary::Placement;

pub use columns::{read_file, schema, write_file, Column, Row, Values};

/// `format` of the manifest.
pub const FORMAT: &str = "hexvigil-export";
/// `version` of the manifest and tables; a reader refuses other versions.
pub const VERSION: u32 = 1;
/// The manifest's file name, at the top of an export folder.
pub const MANIFEST: &str = "export.json";
/// The tables, each a folder of the export.
pub const TABLES: [&str; 4] = [
    "cell_weeks",
    "cell_week_changesets",
    "changesets",
    "cell_neighbours",
];
/// The `base` partition of edits that could not be placed.
pub const UNPLACED: &str = "unplaced";

/// Export and read-back failures.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    /// A file or folder of an export could not be read.
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    /// A file of the export could not be written.
    #[error("{path}: cannot write: {message}")]
    Write { path: PathBuf, message: String },
    /// A value in a table is missing or wrong.
    #[error("{path}: {position}: {message}")]
    Read {
        path: PathBuf,
        position: String,
        message: String,
    },
    /// A file is not readable Parquet.
    #[error("{path}: not a readable Parquet file: {message}")]
    Parquet { path: PathBuf, message: String },
    /// The manifest, the folder layout or the tables disagree with each other or with the
    /// options.
    #[error("{path}: {message}")]
    Invalid { path: PathBuf, message: String },
    /// The output folder holds something other than an earlier export.
    #[error("{path}: {message}")]
    Folder { path: PathBuf, message: String },
    /// The export does not hold the weeks asked for.
    #[error("{path}: {message}")]
    NoData { path: PathBuf, message: String },
}

/// The output format of `export` (Parquet is the only one).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Parquet,
}

impl std::str::FromStr for Format {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "parquet" => Ok(Self::Parquet),
            _ => Err(format!("unknown format {s:?}; expected parquet")),
        }
    }
}

mod week_text {
    use serde::{Deserialize, Deserializer, Serializer};

    use crate::model::IsoWeek;

    #[allow(clippy::trivially_copy_pass_by_ref, reason = "serde's signature")]
    pub fn serialize<S: Serializer>(w: &IsoWeek, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(w)
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<IsoWeek, D::Error> {
        let text = String::deserialize(d)?;
        IsoWeek::parse(&text).ok_or_else(|| {
            serde::de::Error::custom(format!("{text:?} is not an ISO week like 2026-W47"))
        })
    }
}

/// Elements skipped while reading the OSM files, by reason (listed on the report pages).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Skipped {
    pub reason: String,
    pub count: u64,
}

/// The cautions every export carries: scores and flags name mappers.
pub const CAUTION: &str = "Scores, flags and outliers are statistical prompts, not verdicts: look at the edits, assume good faith, talk to the mapper first, and follow the local community's and the OpenStreetMap Foundation's guidelines on reverts and disputes.";

const fn default_neighbourhood_k() -> u32 {
    2
}

/// `export.json`: what an export holds and how it was counted. An engine writing the same
/// tables needs only the fields without a default.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    /// Always [`FORMAT`].
    pub format: String,
    /// Always [`VERSION`].
    pub version: u32,
    /// [`CAUTION`].
    #[serde(default)]
    pub caution: String,
    /// `hexvigil <version>`, or the engine that wrote the tables.
    #[serde(default)]
    pub generator: String,
    /// H3 resolution of every cell.
    pub resolution: u8,
    /// The first and last week exported.
    #[serde(with = "week_text")]
    pub first_week: IsoWeek,
    #[serde(with = "week_text")]
    pub last_week: IsoWeek,
    /// The week of the first edit in the database: history before it is unknown, not empty.
    #[serde(with = "week_text")]
    pub data_first_week: IsoWeek,
    /// The week a report reads by default (the last complete week of the data).
    #[serde(with = "week_text")]
    pub default_week: IsoWeek,
    /// Changesets scoring at least this are flagged (`flagged`, `flagged_edits`).
    pub flag_threshold: f64,
    /// What scored the changesets: `scorecard`, `model` or `imported`.
    #[serde(default)]
    pub scoring: String,
    /// The land layer behind `offshore_creates` and `water_creates`: `world`, a file, or `none`.
    #[serde(default)]
    pub land: String,
    /// Grid-disk radius of `cell_neighbours` (with the parent cell's other children).
    #[serde(default = "default_neighbourhood_k")]
    pub neighbourhood_k: u32,
    /// Region names in order (the `region` column); the first also takes unplaced edits.
    #[serde(default)]
    pub regions: Vec<String>,
    /// Elements skipped while reading the OSM files.
    #[serde(default)]
    pub skipped: Vec<Skipped>,
    /// Rows per table.
    #[serde(default)]
    pub rows: BTreeMap<String, u64>,
}

impl Manifest {
    /// Reads and checks `DIR/export.json`.
    ///
    /// # Errors
    /// When it is missing, malformed, or of another format or version.
    pub fn load(dir: &Path) -> Result<Self, ExportError> {
        let path = dir.join(MANIFEST);
        let text = std::fs::read_to_string(&path).map_err(|source| ExportError::Io {
            path: path.clone(),
            source,
        })?;
        let m: Self = serde_json::from_str(&text).map_err(|e| ExportError::Read {
            path: path.clone(),
            position: format!("line {}, column {}", e.line(), e.column()),
            message: e.to_string(),
        })?;
        if m.format != FORMAT || m.version != VERSION {
            return Err(ExportError::Invalid {
                path,
                message: format!(
                    "format {:?} version {}; this hexvigil reads {FORMAT:?} version {VERSION}",
                    m.format, m.version
                ),
            });
        }
        Ok(m)
    }

    /// Writes `DIR/export.json`.
    ///
    /// # Errors
    /// [`ExportError::Write`] when it cannot be written.
    pub fn save(&self, dir: &Path) -> Result<(), ExportError> {
        let path = dir.join(MANIFEST);
        let text = serde_json::to_string_pretty(self).map_err(|e| ExportError::Write {
            path: path.clone(),
            message: e.to_string(),
        })?;
        std::fs::write(&path, text + "\n").map_err(|e| ExportError::Write {
            path,
            message: e.to_string(),
        })
    }

    fn res(&self, dir: &Path) -> Result<Resolution, ExportError> {
        Resolution::try_from(self.resolution).map_err(|e| ExportError::Invalid {
            path: dir.join(MANIFEST),
            message: format!("resolution {}: {e}", self.resolution),
        })
    }
}

/// What an export wrote.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ExportSummary {
    pub first_week: IsoWeek,
    pub last_week: IsoWeek,
    pub resolution: u8,
    /// Parquet files written.
    pub files: u64,
    /// Bytes of Parquet written.
    pub bytes: u64,
    /// Rows per table.
    pub rows: BTreeMap<String, u64>,
}

fn land_text(l: &LandSource) -> String {
    match l {
        LandSource::World => "world".to_owned(),
        LandSource::File(p) => p.display().to_string(),
        LandSource::None => "none".to_owned(),
    }
}

/// Cell id as the signed 64-bit integer engines store (an H3 index is below 2^63).
fn cell_i64(c: CellIndex) -> i64 {
    i64::try_from(u64::from(c)).unwrap_or(i64::MAX)
}

fn n(x: u64) -> i64 {
    i64::try_from(x).unwrap_or(i64::MAX)
}

/// Days since 1970-01-01 of the week's Monday (Parquet's `DATE`).
fn week_date(w: IsoWeek) -> i32 {
    i32::try_from(w.start_unix().div_euclid(86_400)).unwrap_or(i32::MAX)
}

fn base_of(c: CellIndex) -> String {
    c.parent(Resolution::Zero)
        .map_or_else(|| c.to_string(), |b| b.to_string())
}

/// `(operation, element type)` names of `CellWeek::by_type`, indexed by their codes.
const BY_TYPE: [[&str; 3]; 3] = [
    ["node_creates", "way_creates", "relation_creates"],
    ["node_modifies", "way_modifies", "relation_modifies"],
    ["node_deletes", "way_deletes", "relation_deletes"],
];

fn long<T>(name: &'static str, rows: &[T], f: impl Fn(&T) -> i64) -> Column {
    Column {
        name,
        values: Values::Long(rows.iter().map(f).collect()),
    }
}

fn cell_columns<T>(
    rows: &[T],
    cell: impl Fn(&T) -> Option<CellIndex>,
    week: impl Fn(&T) -> IsoWeek,
    region: impl Fn(&T) -> Option<String>,
) -> Vec<Column> {
    vec![
        Column {
            name: "cell",
            values: Values::OptLong(rows.iter().map(|r| cell(r).map(cell_i64)).collect()),
        },
        Column {
            name: "cell_hex",
            values: Values::OptStr(
                rows.iter()
                    .map(|r| cell(r).map(|c| c.to_string()))
                    .collect(),
            ),
        },
        Column {
            name: "week_start",
            values: Values::Date(rows.iter().map(|r| week_date(week(r))).collect()),
        },
        Column {
            name: "region",
            values: Values::OptStr(rows.iter().map(region).collect()),
        },
    ]
}

struct CellWeekRow<'a> {
    cell: CellIndex,
    week: IsoWeek,
    region: Option<&'a str>,
    counts: &'a CellWeek,
}

fn cell_week_table(rows: &[CellWeekRow<'_>]) -> Vec<Column> {
    let mut c = cell_columns(
        rows,
        |r| Some(r.cell),
        |r| r.week,
        |r| r.region.map(str::to_owned),
    );
    c.extend([
        long("edits", rows, |r| n(r.counts.edits)),
        long("creates", rows, |r| n(r.counts.creates)),
        long("modifies", rows, |r| n(r.counts.modifies)),
        long("deletes", rows, |r| n(r.counts.deletes)),
    ]);
    for (op, names) in BY_TYPE.iter().enumerate() {
        for (et, name) in names.iter().enumerate() {
            c.push(long(name, rows, |r| n(r.counts.by_type[op][et])));
        }
    }
    c.extend([
        long("deleted_features", rows, |r| n(r.counts.deleted_features)),
        long("newcomer_edits", rows, |r| n(r.counts.newcomer_edits)),
        long("newcomer_deletes", rows, |r| n(r.counts.newcomer_deletes)),
        long("offshore_creates", rows, |r| n(r.counts.offshore_creates)),
        long("water_creates", rows, |r| n(r.counts.water_creates)),
        long("spam_renames", rows, |r| n(r.counts.spam_renames)),
        long("flagged_edits", rows, |r| n(r.counts.flagged_edits)),
        long("mappers", rows, |r| n(r.counts.mappers.len() as u64)),
        long("newcomers", rows, |r| n(r.counts.newcomers.len() as u64)),
        Column {
            name: "score_sum",
            values: Values::Double(rows.iter().map(|r| r.counts.score_sum).collect()),
        },
        Column {
            name: "score_max",
            values: Values::Double(rows.iter().map(|r| r.counts.score_max).collect()),
        },
    ]);
    c
}

struct DetailRow<'a> {
    week: IsoWeek,
    region: Option<&'a str>,
    row: &'a ChangesetCellWeek,
}

fn detail_table(rows: &[DetailRow<'_>]) -> Vec<Column> {
    let mut c = cell_columns(
        rows,
        |r| r.row.cell,
        |r| r.week,
        |r| r.region.map(str::to_owned),
    );
    c.extend([
        long("changeset", rows, |r| r.row.changeset),
        long("uid", rows, |r| r.row.uid),
        long("edits", rows, |r| n(r.row.edits())),
        long("creates", rows, |r| n(r.row.creates)),
        long("modifies", rows, |r| n(r.row.modifies)),
        long("deletes", rows, |r| n(r.row.deletes)),
        long("newcomer_edits", rows, |r| n(r.row.newcomer_edits)),
        long("deleted_features", rows, |r| n(r.row.deleted_features)),
        long("offshore_creates", rows, |r| n(r.row.offshore_creates)),
        long("spam_renames", rows, |r| n(r.row.spam_renames)),
        long("flagged_edits", rows, |r| n(r.row.flagged_edits)),
        long("own_coordinates", rows, |r| {
            n(r.row.placement.own_coordinates)
        }),
        long("node_index", rows, |r| n(r.row.placement.node_index)),
        long("changeset_bbox", rows, |r| {
            n(r.row.placement.changeset_bbox)
        }),
        long("unplaced", rows, |r| n(r.row.placement.unplaced)),
    ]);
    c
}

fn changeset_table(rows: &[&ScoredChangeset], threshold: f64) -> Vec<Column> {
    vec![
        long("changeset", rows, |r| r.id),
        long("uid", rows, |r| r.uid),
        Column {
            name: "user",
            values: Values::Str(rows.iter().map(|r| r.user.clone()).collect()),
        },
        Column {
            name: "created_at",
            values: Values::Micros(
                rows.iter()
                    .map(|r| r.created_at.saturating_mul(1_000_000))
                    .collect(),
            ),
        },
        Column {
            name: "account_age_days",
            values: Values::Double(rows.iter().map(|r| r.account_age_days).collect()),
        },
        Column {
            name: "comment",
            values: Values::Str(rows.iter().map(|r| r.comment.clone()).collect()),
        },
        Column {
            name: "editor",
            values: Values::Str(rows.iter().map(|r| r.editor.clone()).collect()),
        },
        Column {
            name: "score",
            values: Values::Double(rows.iter().map(|r| r.score).collect()),
        },
        Column {
            name: "flagged",
            values: Values::Bool(rows.iter().map(|r| r.score >= threshold).collect()),
        },
        Column {
            name: "reasons",
            values: Values::StrList(rows.iter().map(|r| r.reasons.clone()).collect()),
        },
    ]
}

fn neighbour_table(rows: &[(CellIndex, CellIndex)]) -> Vec<Column> {
    vec![
        long("cell", rows, |r| cell_i64(r.0)),
        Column {
            name: "cell_hex",
            values: Values::Str(rows.iter().map(|r| r.0.to_string()).collect()),
        },
        long("neighbour", rows, |r| cell_i64(r.1)),
        Column {
            name: "neighbour_hex",
            values: Values::Str(rows.iter().map(|r| r.1.to_string()).collect()),
        },
    ]
}

/// Empties `out` for a new export: a missing or empty folder is fine, an earlier export loses
/// its tables and manifest, anything else is refused.
fn prepare_folder(out: &Path) -> Result<(), ExportError> {
    let io = |path: &Path, e: std::io::Error| ExportError::Write {
        path: path.to_owned(),
        message: e.to_string(),
    };
    if out.exists() {
        let mut entries = std::fs::read_dir(out).map_err(|e| io(out, e))?;
        let empty = entries.next().is_none();
        if !empty {
            if !out.join(MANIFEST).is_file() {
                return Err(ExportError::Folder {
                    path: out.to_owned(),
                    message: format!(
                        "the folder is not empty and holds no earlier export ({MANIFEST}); choose an empty or new folder"
                    ),
                });
            }
            std::fs::remove_file(out.join(MANIFEST)).map_err(|e| io(out, e))?;
            for t in TABLES {
                let d = out.join(t);
                if d.exists() {
                    std::fs::remove_dir_all(&d).map_err(|e| io(&d, e))?;
                }
            }
        }
    }
    std::fs::create_dir_all(out).map_err(|e| io(out, e))
}

fn write_partition(
    dir: &Path,
    table: &str,
    columns: &[Column],
    summary: &mut ExportSummary,
) -> Result<(), ExportError> {
    std::fs::create_dir_all(dir).map_err(|e| ExportError::Write {
        path: dir.to_owned(),
        message: e.to_string(),
    })?;
    summary.bytes += write_file(&dir.join("part-0.parquet"), table, columns)?;
    summary.files += 1;
    *summary.rows.entry(table.to_owned()).or_default() +=
        columns.first().map_or(0, |c| match &c.values {
            Values::Long(v) => v.len(),
            Values::OptLong(v) => v.len(),
            _ => 0,
        }) as u64;
    Ok(())
}

/// Exports the database's weeks to `out` as Parquet: every week with edits, or with
/// `opts.week` the window a report of that week reads (it and up to `opts.baseline_weeks`
/// before it). Changesets are scored with `opts.scoring`, cells bucketed at `opts.resolution`
/// (by default as a report of the last complete week would), regions from `opts.regions` fill
/// the `region` column and `opts.land` decides what lies in water.
///
/// # Errors
/// On database failure, unreadable land or regions files, no data, an `out` folder that holds
/// something other than an earlier export, or a file that cannot be written.
pub fn export(
    store: &Store,
    out: &Path,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<ExportSummary, PipelineError> {
    let (data_first, data_last) = crate::pipeline::data_weeks(store)?;
    let (first_week, last_week, default_week) = match opts.week {
        Some(w) => {
            let h = crate::pipeline::history_weeks(w, Some(data_first), opts.baseline_weeks);
            (w.offset(-i64::from(h)), w, w)
        }
        None => (
            data_first,
            data_last,
            crate::pipeline::report_week(store, opts)?,
        ),
    };
    progress.note(&format!("exporting {first_week} to {last_week}"));
    let land = opts.land.load()?;
    let regions = match &opts.regions {
        Some(p) => crate::regions::load(p)?,
        None => crate::regions::everything(),
    };
    let weeks = crate::pipeline::CountWeeks {
        first: first_week,
        last: last_week,
        resolution: default_week,
        details_from: first_week,
    };
    let counted = crate::pipeline::count(store, weeks, &land, None, opts, progress)?;
    prepare_folder(out)?;
    let summary = write_tables(out, &counted, &regions, opts, progress)?;
    let manifest = Manifest {
        format: FORMAT.to_owned(),
        version: VERSION,
        caution: CAUTION.to_owned(),
        generator: format!("hexvigil {}", env!("CARGO_PKG_VERSION")),
        resolution: summary.resolution,
        first_week,
        last_week,
        data_first_week: data_first,
        default_week,
        flag_threshold: opts.flag_threshold,
        scoring: opts.scoring.name().to_owned(),
        land: land_text(&opts.land),
        neighbourhood_k: opts.detect.neighbourhood_k,
        regions: regions.iter().map(|r| r.name.clone()).collect(),
        skipped: store
            .skipped()?
            .into_iter()
            .map(|(reason, count)| Skipped { reason, count })
            .collect(),
        rows: summary.rows.clone(),
    };
    manifest.save(out)?;
    Ok(summary)
}

/// Writes the four tables of a counted window into `out` (an existing, empty folder), with
/// each placed cell's first region from `regions` in the `region` column, changesets flagged
/// at `opts.flag_threshold` and neighbourhoods of radius `opts.detect.neighbourhood_k`.
///
/// # Errors
/// [`ExportError::Write`] when a file cannot be written.
pub fn write_tables(
    out: &Path,
    counted: &Counted,
    regions: &[crate::regions::Region],
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<ExportSummary, ExportError> {
    let first_week = counted.first_week;
    let last_week = counted.report_week();
    let cw = &counted.cell_weeks;
    let region_of: HashMap<CellIndex, &str> = cw
        .cells
        .keys()
        .filter_map(|&c| {
            crate::regions::region_of(regions, c).map(|r| (c, regions[r].name.as_str()))
        })
        .collect();
    let week_at = |i: usize| first_week.offset(i64::try_from(i).unwrap_or(0));
    let mut summary = ExportSummary {
        first_week,
        last_week,
        resolution: u8::from(cw.resolution),
        files: 0,
        bytes: 0,
        rows: TABLES.iter().map(|t| ((*t).to_owned(), 0)).collect(),
    };

    let mut by_part: BTreeMap<(IsoWeek, String), Vec<CellWeekRow<'_>>> = BTreeMap::new();
    for (&cell, weeks) in &cw.cells {
        for (i, counts) in weeks.iter().enumerate().filter(|(_, c)| c.edits > 0) {
            by_part
                .entry((week_at(i), base_of(cell)))
                .or_default()
                .push(CellWeekRow {
                    cell,
                    week: week_at(i),
                    region: region_of.get(&cell).copied(),
                    counts,
                });
        }
    }
    let mut details: BTreeMap<(IsoWeek, String), Vec<DetailRow<'_>>> = BTreeMap::new();
    for row in &counted.changeset_cells {
        let base = row.cell.map_or_else(|| UNPLACED.to_owned(), base_of);
        details
            .entry((week_at(row.week), base))
            .or_default()
            .push(DetailRow {
                week: week_at(row.week),
                region: row.cell.and_then(|c| region_of.get(&c).copied()),
                row,
            });
    }
    let mut changesets: BTreeMap<IsoWeek, Vec<&ScoredChangeset>> = BTreeMap::new();
    for c in counted.changesets.values() {
        if let Some(w) = IsoWeek::of_unix(c.created_at) {
            changesets.entry(w).or_default().push(c);
        }
    }
    let mut neighbours: BTreeMap<String, Vec<(CellIndex, CellIndex)>> = BTreeMap::new();
    for &cell in cw.cells.keys() {
        let list = neighbours.entry(base_of(cell)).or_default();
        list.extend(
            neighbourhood(cell, opts.detect.neighbourhood_k)
                .into_iter()
                .map(|nb| (cell, nb)),
        );
    }

    let files = by_part.len() + details.len() + changesets.len() + neighbours.len();
    let bar = progress.steps(files as u64, "export");
    for ((week, base), rows) in &by_part {
        let dir = out.join(format!("cell_weeks/week={week}/base={base}"));
        write_partition(&dir, "cell_weeks", &cell_week_table(rows), &mut summary)?;
        bar.inc(1);
    }
    for ((week, base), rows) in &details {
        let dir = out.join(format!("cell_week_changesets/week={week}/base={base}"));
        write_partition(
            &dir,
            "cell_week_changesets",
            &detail_table(rows),
            &mut summary,
        )?;
        bar.inc(1);
    }
    for (week, rows) in &mut changesets {
        rows.sort_by_key(|c| c.id);
        let dir = out.join(format!("changesets/week={week}"));
        let columns = changeset_table(rows, opts.flag_threshold);
        write_partition(&dir, "changesets", &columns, &mut summary)?;
        bar.inc(1);
    }
    for (base, rows) in &neighbours {
        let dir = out.join(format!("cell_neighbours/base={base}"));
        write_partition(
            &dir,
            "cell_neighbours",
            &neighbour_table(rows),
            &mut summary,
        )?;
        bar.inc(1);
    }
    bar.finish_and_clear();
    Ok(summary)
}

/// The week folders (`week=YYYY-Www`) of a table that fall in `from..=to`, sorted.
fn week_folders(
    table: &Path,
    from: Option<IsoWeek>,
    to: IsoWeek,
) -> Result<Vec<(IsoWeek, PathBuf)>, ExportError> {
    if !table.is_dir() {
        return Err(ExportError::Invalid {
            path: table.to_owned(),
            message: "missing table folder".to_owned(),
        });
    }
    let entries = std::fs::read_dir(table).map_err(|e| ExportError::Io {
        path: table.to_owned(),
        source: e,
    })?;
    let mut out = Vec::new();
    for entry in entries {
        let p = entry
            .map_err(|e| ExportError::Io {
                path: table.to_owned(),
                source: e,
            })?
            .path();
        let name = p
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        let Some(text) = name.strip_prefix("week=") else {
            continue;
        };
        let week = IsoWeek::parse(text).ok_or_else(|| ExportError::Invalid {
            path: p.clone(),
            message: format!("{text:?} is not an ISO week like 2026-W47"),
        })?;
        if from.is_none_or(|f| week >= f) && week <= to {
            out.push((week, p));
        }
    }
    out.sort();
    Ok(out)
}

fn row_cell(row: &Row<'_>, res: Resolution) -> Result<Option<CellIndex>, ExportError> {
    let Some(v) = row.opt_long("cell")? else {
        return Ok(None);
    };
    let cell = u64::try_from(v)
        .ok()
        .and_then(|u| CellIndex::try_from(u).ok())
        .ok_or_else(|| row.error(&format!("cell {v} is not an H3 cell index")))?;
    if cell.resolution() != res {
        return Err(row.error(&format!(
            "cell {cell} is at resolution {}, the export at {res}",
            cell.resolution()
        )));
    }
    Ok(Some(cell))
}

/// Distinct mappers and newcomers per cell and week index, as an export stores them.
type DistinctCounts = HashMap<(CellIndex, usize), (u64, u64)>;

fn read_cell_weeks(
    dir: &Path,
    res: Resolution,
    first: IsoWeek,
    weeks: usize,
    last: IsoWeek,
) -> Result<(BTreeMap<CellIndex, Vec<CellWeek>>, DistinctCounts), ExportError> {
    let mut cells: BTreeMap<CellIndex, Vec<CellWeek>> = BTreeMap::new();
    let mut distinct: DistinctCounts = HashMap::new();
    for (week, folder) in week_folders(&dir.join("cell_weeks"), Some(first), last)? {
        let w = usize::try_from(week.ordinal() - first.ordinal()).unwrap_or(0);
        for file in columns::parquet_files(&folder)? {
            read_file(&file, |row| {
                let cell = row_cell(row, res)?.ok_or_else(|| row.error("cell is null"))?;
                let mut c = CellWeek {
                    edits: row.count("edits")?,
                    creates: row.count("creates")?,
                    modifies: row.count("modifies")?,
                    deletes: row.count("deletes")?,
                    newcomer_deletes: row.count("newcomer_deletes")?,
                    water_creates: row.count("water_creates")?,
                    score_sum: row.double("score_sum")?,
                    score_max: row.double("score_max")?,
                    deleted_features: row.count("deleted_features")?,
                    newcomer_edits: row.count("newcomer_edits")?,
                    offshore_creates: row.count("offshore_creates")?,
                    spam_renames: row.count("spam_renames")?,
                    flagged_edits: row.count("flagged_edits")?,
                    ..CellWeek::default()
                };
                for (op, names) in BY_TYPE.iter().enumerate() {
                    for (et, name) in names.iter().enumerate() {
                        c.by_type[op][et] = row.count(name)?;
                    }
                }
                if c.edits == 0 {
                    return Err(row.error("a cell-week row needs at least one edit"));
                }
                if c.edits != c.creates + c.modifies + c.deletes {
                    return Err(row.error("edits is not creates + modifies + deletes"));
                }
                let slot = &mut cells
                    .entry(cell)
                    .or_insert_with(|| vec![CellWeek::default(); weeks])[w];
                if slot.edits > 0 {
                    return Err(row.error(&format!("cell {cell} appears twice in week {week}")));
                }
                *slot = c;
                distinct.insert((cell, w), (row.count("mappers")?, row.count("newcomers")?));
                Ok(())
            })?;
        }
    }
    Ok((cells, distinct))
}

fn read_details(
    dir: &Path,
    res: Resolution,
    first: IsoWeek,
    last: IsoWeek,
) -> Result<Vec<ChangesetCellWeek>, ExportError> {
    let mut rows: BTreeMap<(usize, Option<CellIndex>, i64), ChangesetCellWeek> = BTreeMap::new();
    for (week, folder) in week_folders(&dir.join("cell_week_changesets"), Some(first), last)? {
        let w = usize::try_from(week.ordinal() - first.ordinal()).unwrap_or(0);
        for file in columns::parquet_files(&folder)? {
            read_file(&file, |row| {
                let cell = row_cell(row, res)?;
                let r = ChangesetCellWeek {
                    week: w,
                    cell,
                    changeset: row.long("changeset")?,
                    uid: row.long("uid")?,
                    creates: row.count("creates")?,
                    modifies: row.count("modifies")?,
                    deletes: row.count("deletes")?,
                    newcomer_edits: row.count("newcomer_edits")?,
                    deleted_features: row.count("deleted_features")?,
                    offshore_creates: row.count("offshore_creates")?,
                    spam_renames: row.count("spam_renames")?,
                    flagged_edits: row.count("flagged_edits")?,
                    placement: Placement {
                        own_coordinates: row.count("own_coordinates")?,
                        node_index: row.count("node_index")?,
                        changeset_bbox: row.count("changeset_bbox")?,
                        unplaced: row.count("unplaced")?,
                    },
                };
                if row.count("edits")? != r.edits() {
                    return Err(row.error("edits is not creates + modifies + deletes"));
                }
                let p = &r.placement;
                if p.own_coordinates + p.node_index + p.changeset_bbox + p.unplaced != r.edits() {
                    return Err(row.error("the placement counts do not add up to edits"));
                }
                let key = (w, cell, r.changeset);
                if rows.insert(key, r).is_some() {
                    return Err(row.error(&format!(
                        "changeset {} appears twice for this cell in week {week}",
                        key.2
                    )));
                }
                Ok(())
            })?;
        }
    }
    Ok(rows.into_values().collect())
}

fn read_changesets(
    dir: &Path,
    last: IsoWeek,
    wanted: &HashSet<i64>,
) -> Result<HashMap<i64, ScoredChangeset>, ExportError> {
    let mut out = HashMap::new();
    for (_, folder) in week_folders(&dir.join("changesets"), None, last)? {
        for file in columns::parquet_files(&folder)? {
            read_file(&file, |row| {
                let id = row.long("changeset")?;
                if !wanted.contains(&id) {
                    return Ok(());
                }
                let c = ScoredChangeset {
                    id,
                    uid: row.long("uid")?,
                    user: row.string("user")?,
                    created_at: row.timestamp_secs("created_at")?,
                    account_age_days: row.double("account_age_days")?,
                    comment: row.string("comment")?,
                    editor: row.string("editor")?,
                    score: row.double("score")?,
                    reasons: row.strings("reasons")?,
                };
                if !(0.0..=1.0).contains(&c.score) {
                    return Err(row.error(&format!("score {} is outside 0-1", c.score)));
                }
                if out.insert(id, c).is_some() {
                    return Err(row.error(&format!("changeset {id} appears twice")));
                }
                Ok(())
            })?;
        }
    }
    Ok(out)
}

/// Reads the weeks `first_week` to `last_week` of the export in `dir` (described by
/// `manifest`) for a report of `last_week`, checking that the tables agree with each other.
///
/// # Errors
/// When the export does not hold those weeks, when `opts` asks for another resolution or flag
/// threshold than the export was counted with, or when a table is missing, unreadable or
/// inconsistent (the error names the file and row, or the cell and week).
pub fn read(
    dir: &Path,
    manifest: &Manifest,
    first_week: IsoWeek,
    last_week: IsoWeek,
    opts: &ReportOptions,
) -> Result<Counted, ExportError> {
    let invalid = |message: String| ExportError::Invalid {
        path: dir.join(MANIFEST),
        message,
    };
    let res = manifest.res(dir)?;
    if let Some(r) = opts.resolution.filter(|&r| r != res) {
        return Err(invalid(format!(
            "the export was counted at H3 resolution {res}, not {r}; export again with --resolution {r}"
        )));
    }
    if (opts.flag_threshold - manifest.flag_threshold).abs() > 1e-12 {
        return Err(invalid(format!(
            "the export flagged changesets at {}, not {}; export again with --flag-threshold {}",
            manifest.flag_threshold, opts.flag_threshold, opts.flag_threshold
        )));
    }
    if first_week < manifest.first_week || last_week > manifest.last_week {
        return Err(ExportError::NoData {
            path: dir.to_owned(),
            message: format!(
                "the export holds {} to {}; a report of {last_week} needs {first_week} to {last_week}",
                manifest.first_week, manifest.last_week
            ),
        });
    }
    let weeks = usize::try_from(last_week.ordinal() - first_week.ordinal() + 1).unwrap_or(1);
    let (mut cells, distinct) = read_cell_weeks(dir, res, first_week, weeks, last_week)?;
    let changeset_cells = read_details(dir, res, first_week, last_week)?;
    if !changeset_cells.iter().any(|r| r.week + 1 == weeks) {
        return Err(ExportError::NoData {
            path: dir.to_owned(),
            message: format!("no edits in the report week {last_week}"),
        });
    }

    // The distinct mappers of each cell-week come from its changesets; they must agree with
    // the cell-week counts.
    let detail_path = dir.join("cell_week_changesets");
    let mut sums: HashMap<(CellIndex, usize), [u64; 6]> = HashMap::new();
    for r in &changeset_cells {
        let Some(cell) = r.cell else { continue };
        let cw = cells
            .get_mut(&cell)
            .and_then(|v| v.get_mut(r.week))
            .filter(|c| c.edits > 0)
            .ok_or_else(|| ExportError::Invalid {
                path: detail_path.clone(),
                message: format!(
                    "cell {cell} in week {} has changesets but no row in cell_weeks",
                    first_week.offset(i64::try_from(r.week).unwrap_or(0))
                ),
            })?;
        cw.mappers.push(r.uid);
        if r.newcomer_edits > 0 {
            cw.newcomers.push(r.uid);
        }
        let s = sums.entry((cell, r.week)).or_default();
        for (i, v) in [
            r.edits(),
            r.deleted_features,
            r.newcomer_edits,
            r.offshore_creates,
            r.spam_renames,
            r.flagged_edits,
        ]
        .into_iter()
        .enumerate()
        {
            s[i] += v;
        }
    }
    for (&cell, weeks) in &mut cells {
        for (w, c) in weeks.iter_mut().enumerate().filter(|(_, c)| c.edits > 0) {
            c.mappers.sort_unstable();
            c.mappers.dedup();
            c.newcomers.sort_unstable();
            c.newcomers.dedup();
            let s = sums.get(&(cell, w)).copied().unwrap_or_default();
            let want = [
                c.edits,
                c.deleted_features,
                c.newcomer_edits,
                c.offshore_creates,
                c.spam_renames,
                c.flagged_edits,
            ];
            let (mappers, newcomers) = distinct.get(&(cell, w)).copied().unwrap_or_default();
            if s != want
                || mappers != c.mappers.len() as u64
                || newcomers != c.newcomers.len() as u64
            {
                return Err(ExportError::Invalid {
                    path: detail_path,
                    message: format!(
                        "cell {cell} in week {}: the changesets' counts (edits, deleted features, newcomer edits, offshore creates, spam renames, flagged edits {s:?}; {} mappers, {} newcomers) differ from cell_weeks ({want:?}; {mappers} mappers, {newcomers} newcomers)",
                        first_week.offset(i64::try_from(w).unwrap_or(0)),
                        c.mappers.len(),
                        c.newcomers.len()
                    ),
                });
            }
        }
    }

    let wanted: HashSet<i64> = changeset_cells.iter().map(|r| r.changeset).collect();
    let changesets = read_changesets(dir, last_week, &wanted)?;
    if let Some(missing) = wanted
        .iter()
        .filter(|id| !changesets.contains_key(id))
        .min()
    {
        return Err(ExportError::Invalid {
            path: dir.join("changesets"),
            message: format!(
                "changeset {missing} has edits in cell_week_changesets but no row here (in a week up to {last_week})"
            ),
        });
    }
    Ok(Counted {
        first_week,
        cell_weeks: CellWeeks {
            resolution: res,
            weeks,
            cells,
        },
        changeset_cells,
        region_weeks: None,
        scores: changesets.values().map(|c| (c.id, c.score)).collect(),
        changesets,
    })
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    fn cell(lat: f64, lon: f64) -> CellIndex {
        h3o::LatLng::new(lat, lon)
            .unwrap()
            .to_cell(Resolution::Eight)
    }

    /// Two weeks: a cell on each side of a base-cell boundary, a changeset in both, and edits
    /// that could not be placed.
    fn sample() -> (Counted, Vec<crate::regions::Region>) {
        let (a, b) = (cell(45.2, -33.6), cell(-12.0, 100.0));
        assert_ne!(base_of(a), base_of(b));
        let rows = vec![
            ChangesetCellWeek {
                week: 0,
                cell: Some(a),
                changeset: 10,
                uid: 1,
                creates: 2,
                newcomer_edits: 2,
                placement: Placement {
                    own_coordinates: 2,
                    ..Placement::default()
                },
                ..ChangesetCellWeek::default()
            },
            ChangesetCellWeek {
                week: 1,
                cell: None,
                changeset: 11,
                uid: 2,
                deletes: 1,
                placement: Placement {
                    unplaced: 1,
                    ..Placement::default()
                },
                ..ChangesetCellWeek::default()
            },
            ChangesetCellWeek {
                week: 1,
                cell: Some(a),
                changeset: 11,
                uid: 2,
                deletes: 3,
                deleted_features: 3,
                flagged_edits: 3,
                placement: Placement {
                    node_index: 3,
                    ..Placement::default()
                },
                ..ChangesetCellWeek::default()
            },
            ChangesetCellWeek {
                week: 1,
                cell: Some(b),
                changeset: 12,
                uid: 1,
                modifies: 1,
                newcomer_edits: 1,
                spam_renames: 1,
                placement: Placement {
                    changeset_bbox: 1,
                    ..Placement::default()
                },
                ..ChangesetCellWeek::default()
            },
        ];
        let mut cells = BTreeMap::new();
        let mut wa = vec![CellWeek::default(); 2];
        wa[0] = CellWeek {
            edits: 2,
            creates: 2,
            newcomer_edits: 2,
            score_sum: 0.25,
            score_max: 0.125,
            mappers: vec![1],
            newcomers: vec![1],
            ..CellWeek::default()
        };
        wa[0].by_type[0][0] = 2;
        wa[1] = CellWeek {
            edits: 3,
            deletes: 3,
            deleted_features: 3,
            flagged_edits: 3,
            score_sum: 2.7,
            score_max: 0.9,
            mappers: vec![2],
            ..CellWeek::default()
        };
        wa[1].by_type[2][1] = 3;
        let mut wb = vec![CellWeek::default(); 2];
        wb[1] = CellWeek {
            edits: 1,
            modifies: 1,
            newcomer_edits: 1,
            spam_renames: 1,
            score_sum: 0.4,
            score_max: 0.4,
            mappers: vec![1],
            newcomers: vec![1],
            ..CellWeek::default()
        };
        wb[1].by_type[1][0] = 1;
        cells.insert(a, wa);
        cells.insert(b, wb);
        let first_week = IsoWeek::parse("2026-W52").unwrap();
        let scored =
            |id: i64, uid: i64, at: i64, score: f64, reasons: Vec<String>| ScoredChangeset {
                id,
                uid,
                user: format!("mapper «{uid}» ö"),
                created_at: at,
                account_age_days: 3.25,
                comment: "fixed 'the' \"names\"\nsecond line".to_owned(),
                editor: String::new(),
                score,
                reasons,
            };
        let start = first_week.start_unix();
        let changesets: HashMap<i64, ScoredChangeset> = [
            scored(10, 1, start + 100, 0.125, Vec::new()),
            scored(
                11,
                2,
                start + 604_800 - 3600,
                0.9,
                vec!["deleted 4 objects".to_owned(), "no comment".to_owned()],
            ),
            scored(
                12,
                1,
                start + 700_000,
                0.4,
                vec!["a name like an advert".to_owned()],
            ),
        ]
        .into_iter()
        .map(|c| (c.id, c))
        .collect();
        let counted = Counted {
            first_week,
            cell_weeks: CellWeeks {
                resolution: Resolution::Eight,
                weeks: 2,
                cells,
            },
            changeset_cells: rows,
            region_weeks: None,
            scores: changesets.values().map(|c| (c.id, c.score)).collect(),
            changesets,
        };
        (counted, crate::regions::everything())
    }

    fn manifest(counted: &Counted, regions: &[crate::regions::Region]) -> Manifest {
        Manifest {
            format: FORMAT.to_owned(),
            version: VERSION,
            caution: CAUTION.to_owned(),
            generator: "test".to_owned(),
            resolution: 8,
            first_week: counted.first_week,
            last_week: counted.report_week(),
            data_first_week: counted.first_week,
            default_week: counted.report_week(),
            flag_threshold: 0.5,
            scoring: "scorecard".to_owned(),
            land: "none".to_owned(),
            neighbourhood_k: 2,
            regions: regions.iter().map(|r| r.name.clone()).collect(),
            skipped: vec![Skipped {
                reason: "node without coordinates".to_owned(),
                count: 2,
            }],
            rows: BTreeMap::new(),
        }
    }

    #[test]
    fn tables_read_back_as_written() {
        let (counted, regions) = sample();
        let dir = tempfile::tempdir().unwrap();
        let opts = ReportOptions::default();
        let s = write_tables(dir.path(), &counted, &regions, &opts, &Progress::silent()).unwrap();
        assert_eq!(s.rows["cell_weeks"], 3);
        assert_eq!(s.rows["cell_week_changesets"], 4);
        assert_eq!(s.rows["changesets"], 3);
        // The year turns between the two weeks, and the base cells differ.
        for part in [
            "cell_weeks/week=2026-W52/base=801bfffffffffff/part-0.parquet",
            "cell_week_changesets/week=2026-W53/base=unplaced/part-0.parquet",
            "changesets/week=2026-W52/part-0.parquet",
            "changesets/week=2026-W53/part-0.parquet",
        ] {
            assert!(dir.path().join(part).is_file(), "{part}");
        }
        let m = manifest(&counted, &regions);
        m.save(dir.path()).unwrap();
        assert_eq!(Manifest::load(dir.path()).unwrap(), m);
        let back = read(
            dir.path(),
            &m,
            counted.first_week,
            counted.report_week(),
            &opts,
        )
        .unwrap();
        assert_eq!(back.first_week, counted.first_week);
        assert_eq!(back.cell_weeks.weeks, 2);
        assert_eq!(back.cell_weeks.cells, counted.cell_weeks.cells);
        assert_eq!(back.changeset_cells, counted.changeset_cells);
        assert_eq!(back.changesets, counted.changesets);
        // The report week alone, as a report with no history reads it.
        let one = read(
            dir.path(),
            &m,
            counted.report_week(),
            counted.report_week(),
            &opts,
        )
        .unwrap();
        assert_eq!(one.cell_weeks.weeks, 1);
        assert_eq!(one.changeset_cells.len(), 3);
        assert!(one.changeset_cells.iter().all(|r| r.week == 0));
    }

    #[test]
    fn every_column_is_documented() {
        let doc = include_str!("../../docs/export.md");
        let tables = [
            ("cell_weeks", cell_week_table(&[])),
            ("cell_week_changesets", detail_table(&[])),
            ("changesets", changeset_table(&[], 0.5)),
            ("cell_neighbours", neighbour_table(&[])),
        ];
        for (table, columns) in tables {
            let section = doc
                .split(&format!("### `{table}`"))
                .nth(1)
                .and_then(|s| s.split("\n### ").next())
                .unwrap();
            for c in columns {
                assert!(
                    section.contains(&format!("`{}`", c.name)),
                    "docs/export.md, table {table}, lacks column {}",
                    c.name
                );
            }
        }
        let manifest = serde_json::to_value(manifest(&sample().0, &[])).unwrap();
        for field in manifest.as_object().unwrap().keys() {
            assert!(
                doc.contains(&format!("`{field}`")),
                "export.json field {field}"
            );
        }
    }

    #[test]
    fn minimal_manifest_from_another_engine_loads() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(
            dir.path().join(MANIFEST),
            r#"{"format": "hexvigil-export", "version": 1, "resolution": 7,
                "first_week": "2026-W01", "last_week": "2026-W10",
                "data_first_week": "2025-W40", "default_week": "2026-W09",
                "flag_threshold": 0.5}"#,
        )
        .unwrap();
        let m = Manifest::load(dir.path()).unwrap();
        assert_eq!(m.neighbourhood_k, 2);
        assert!(m.skipped.is_empty());
        assert_eq!(m.default_week.to_string(), "2026-W09");
        std::fs::write(
            dir.path().join(MANIFEST),
            r#"{"format": "hexvigil-export", "version": 2}"#,
        )
        .unwrap();
        let e = Manifest::load(dir.path()).unwrap_err();
        assert!(e.to_string().contains("line 1, column"), "{e}");
    }

    #[test]
    fn read_refuses_other_settings_and_missing_weeks() {
        let (counted, regions) = sample();
        let dir = tempfile::tempdir().unwrap();
        let opts = ReportOptions::default();
        write_tables(dir.path(), &counted, &regions, &opts, &Progress::silent()).unwrap();
        let m = manifest(&counted, &regions);
        let (first, last) = (counted.first_week, counted.report_week());
        let err =
            |o: &ReportOptions, f: IsoWeek, l: IsoWeek| read(dir.path(), &m, f, l, o).unwrap_err();
        let e = err(
            &ReportOptions {
                flag_threshold: 0.6,
                ..ReportOptions::default()
            },
            first,
            last,
        );
        assert!(matches!(e, ExportError::Invalid { .. }), "{e}");
        let e = err(
            &ReportOptions {
                resolution: Some(Resolution::Nine),
                ..ReportOptions::default()
            },
            first,
            last,
        );
        assert!(e.to_string().contains("resolution 8, not 9"), "{e}");
        let e = err(&opts, first.offset(-1), last);
        assert!(matches!(e, ExportError::NoData { .. }), "{e}");
    }

    #[test]
    fn read_names_the_file_and_row_of_a_bad_value() {
        let (mut counted, regions) = sample();
        // A changeset the changesets table does not hold.
        counted.changesets.remove(&12);
        let dir = tempfile::tempdir().unwrap();
        let opts = ReportOptions::default();
        write_tables(dir.path(), &counted, &regions, &opts, &Progress::silent()).unwrap();
        let m = manifest(&counted, &regions);
        let e = read(
            dir.path(),
            &m,
            counted.first_week,
            counted.report_week(),
            &opts,
        )
        .unwrap_err();
        assert!(e.to_string().contains("changeset 12 has edits"), "{e}");

        // A negative count, written by another engine.
        let (counted, _) = sample();
        let file = dir
            .path()
            .join("cell_weeks/week=2026-W52/base=801bfffffffffff/part-0.parquet");
        let rows = [CellWeekRow {
            cell: counted.cell_weeks.cells.keys().copied().next().unwrap(),
            week: counted.first_week,
            region: None,
            counts: &counted.cell_weeks.cells.values().next().unwrap()[0],
        }];
        let mut columns = cell_week_table(&rows);
        for c in &mut columns {
            if c.name == "spam_renames" {
                c.values = Values::Long(vec![-1]);
            }
        }
        write_file(&file, "cell_weeks", &columns).unwrap();
        let e = read(
            dir.path(),
            &m,
            counted.first_week,
            counted.report_week(),
            &opts,
        )
        .unwrap_err();
        let text = e.to_string();
        assert!(
            text.contains("part-0.parquet: row 1, column spam_renames: -1 is negative"),
            "{text}"
        );
    }

    #[test]
    fn earlier_export_is_replaced_and_other_folders_refused() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("notes.txt"), "mine").unwrap();
        let e = prepare_folder(dir.path()).unwrap_err();
        assert!(matches!(e, ExportError::Folder { .. }), "{e}");
        assert!(dir.path().join("notes.txt").is_file());

        let dir = tempfile::tempdir().unwrap();
        let (counted, regions) = sample();
        write_tables(
            dir.path(),
            &counted,
            &regions,
            &ReportOptions::default(),
            &Progress::silent(),
        )
        .unwrap();
        manifest(&counted, &regions).save(dir.path()).unwrap();
        prepare_folder(dir.path()).unwrap();
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}
