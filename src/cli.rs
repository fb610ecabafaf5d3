//! Command-line interface: argument parsing and the commands' top-level flow. `main.rs` only
//! calls [`run`] and turns its error into an exit code.

use std::path::{Path, PathBuf};

use clap::{Args, Parser, Subcommand};

use crate::demo::{self, DemoOptions};
use crate::evaluate::{EvaluateError, EvaluateOptions};
use crate::export::{ExportError, Format};
use crate::features::{FeatureConfig, FeatureContext, FEATURES};
use crate::fit::{FitError, Model};
use crate::ingest::replication::SequenceRange;
use crate::ingest::{self, IngestError, IngestOptions, IngestSummary};
use crate::labels::{LabelOptions, LabelsFileError};
use crate::land::{Land, LandError};
use crate::measure::Measure;
use crate::model::IsoWeek;
use crate::pipeline::{self, Analysis, PipelineError, ReportOptions};
use crate::progress::Progress;
use crate::render::{Colormap, Style, StyleError};
use crate::score::Scoring;
use crate::store::{Store, StoreError};
use crate::tiles::{TileError, TileOptions, ZoomRange, DEFAULT_MAX_TILES};

/// Exit codes (documented in README.md).
pub mod exit {
    /// Bad input: a file could not be read or parsed; the database is unchanged.
    pub const BAD_INPUT: u8 = 2;
    /// The database is busy (another run holds it) or unusable.
    pub const STATE: u8 = 3;
    /// Writing the report failed.
    pub const OUTPUT: u8 = 4;
    /// Nothing to report (no data for the week).
    pub const NO_DATA: u8 = 5;
}

#[derive(Debug, Parser)]
#[command(
    name = "hexvigil",
    version,
    about = "Weekly vandalism watch for a region's OpenStreetMap data: scores changesets, compares H3 cells with their own history, writes heat images and an HTML report."
)]
pub struct Cli {
    /// No progress bars or notes.
    #[arg(long, short, global = true)]
    pub quiet: bool,
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Read OSM files (changeset metadata, osmChange diffs, .osm and .osm.pbf snapshots; XML plain, gzip or bzip2; replication folders) into the state database.
    Ingest {
        /// State database (created if missing); its node-location index is kept beside it.
        #[arg(long)]
        db: PathBuf,
        /// Only these sequence numbers of replication folders, e.g. 4100-4200.
        #[arg(long)]
        sequences: Option<SequenceRange>,
        /// Files or folders (folders are searched for .osc/.osm/.osm.pbf files; a folder in
        /// the replication layout AAA/BBB/CCC.osc.gz is read in sequence order).
        #[arg(required = true)]
        inputs: Vec<PathBuf>,
    },
    /// Follow a replication server: download the diffs (and changeset metadata) after the sequence recorded in the database, check them, ingest them with the new sequence in one transaction; optionally write the report right after.
    Update(Box<UpdateArgs>),
    /// Analyse a week and write the report folder.
    Report {
        /// State database.
        #[arg(long, required_unless_present = "cell_weeks")]
        db: Option<PathBuf>,
        /// Read the counts from an export folder (`hexvigil export`, or the same tables made by another engine) instead of a database; changesets keep the export's scores.
        #[arg(long, conflicts_with_all = ["db", "model", "scores"])]
        cell_weeks: Option<PathBuf>,
        /// Report folder.
        #[arg(long)]
        out: PathBuf,
        #[command(flatten)]
        settings: ReportArgs,
    },
    /// Derive labels from revert changesets: 1 for changesets reverted with vandalism or spam cited, 0 for reverted mistakes and for settled, unreverted work.
    Labels {
        #[arg(long)]
        db: PathBuf,
        /// Labels file to write (`changeset_id,label`).
        #[arg(long)]
        out: PathBuf,
        /// Unreverted changesets become negatives only when at least this many days older than the newest changeset.
        #[arg(long, default_value_t = 14.0)]
        settle_days: f64,
    },
    /// Fit logistic-regression weights from labels and write a model file for `report --model`.
    Fit {
        #[arg(long)]
        db: PathBuf,
        /// Labels file (`changeset_id,label`).
        #[arg(long)]
        labels: PathBuf,
        /// Model file to write (JSON).
        #[arg(long)]
        out: PathBuf,
        /// L2 penalty on the standardised weights (scikit-learn's 1/C).
        #[arg(long, default_value_t = 1.0)]
        l2: f64,
        /// Land layer for the offshore feature: `world` (built in), a GeoJSON file, or `none`;
        /// use the same as for reports.
        #[arg(long, default_value = "world")]
        land: crate::land::LandSource,
    },
    /// Measure scores against labels on mappers held out from training: precision, recall, F1, accuracy, a confusion table and a precision-recall curve.
    Evaluate {
        #[arg(long)]
        db: PathBuf,
        /// Labels file (`changeset_id,label`).
        #[arg(long)]
        labels: PathBuf,
        /// Also evaluate this model file.
        #[arg(long)]
        model: Option<PathBuf>,
        /// Also evaluate scores computed elsewhere (`changeset_id,score`).
        #[arg(long)]
        scores: Option<PathBuf>,
        /// Folder for metrics.json, confusion.csv, pr_curve.csv and pr_curve.png.
        #[arg(long)]
        out: PathBuf,
        /// Land layer for the offshore feature: `world` (built in), a GeoJSON file, or `none`;
        /// use the same as for reports.
        #[arg(long, default_value = "world")]
        land: crate::land::LandSource,
        /// Changesets scoring at or above this are flagged.
        #[arg(long, default_value_t = 0.5)]
        flag_threshold: f64,
        /// Share of mappers held out for testing.
        #[arg(long, default_value_t = 0.3)]
        test_share: f64,
        /// Seed of the split by mapper.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// L2 penalty of the model fitted on the training mappers.
        #[arg(long, default_value_t = 1.0)]
        l2: f64,
    },
    /// Print one changeset's features, score and reasons.
    Explain {
        #[arg(long)]
        db: PathBuf,
        /// The changeset id.
        changeset: i64,
        /// Score with this model file instead of the default scorecard.
        #[arg(long, conflicts_with = "scores")]
        model: Option<PathBuf>,
        /// Take the score from this file (`changeset_id,score`).
        #[arg(long)]
        scores: Option<PathBuf>,
        /// Land layer for the offshore feature: `world` (built in), a GeoJSON file, or `none`;
        /// use the same as for reports.
        #[arg(long, default_value = "world")]
        land: crate::land::LandSource,
    },
    /// Generate the fictional demo region, ingest it and write its report.
    Demo {
        /// Folder for input/, state.db and report/.
        #[arg(long)]
        out: PathBuf,
        #[arg(long, default_value_t = 7)]
        seed: u64,
        /// Weeks of data (the last one has the injected incidents).
        #[arg(long, default_value_t = 14)]
        weeks: u32,
        /// Multiplies the volume of ordinary mapping (0 to 100), e.g. for benchmark inputs.
        #[arg(long, default_value_t = 1.0)]
        intensity: f64,
        /// Only write input/ (no state.db, no report).
        #[arg(long)]
        inputs_only: bool,
        /// Map style: a built-in name (default, dark, print) or a TOML file.
        #[arg(long, default_value = "default")]
        style: String,
    },
    /// Analyse a week and write an XYZ tile pyramid of one measure, with tiles.json, viewer.html and optionally an MBTiles file.
    Tiles {
        /// State database (only read).
        #[arg(long, required_unless_present = "cell_weeks")]
        db: Option<PathBuf>,
        /// Read the counts from an export folder instead of a database (as `report --cell-weeks`).
        #[arg(long, conflicts_with_all = ["db", "model", "scores"])]
        cell_weeks: Option<PathBuf>,
        /// Folder for {z}/{x}/{y}.png, tiles.json and viewer.html (its old zoom folders are replaced).
        #[arg(long)]
        out: PathBuf,
        /// Zoom levels, e.g. 6-14 or 12.
        #[arg(long, default_value = "6-14")]
        zoom: ZoomRange,
        /// What the cells are coloured by: edits, deletions, newcomers, score or ratio.
        #[arg(long, default_value = "edits")]
        measure: Measure,
        /// Also write the tiles into this MBTiles (SQLite) file.
        #[arg(long)]
        mbtiles: Option<PathBuf>,
        /// Absolute URL the pyramid folder will be served from, for tiles.json (default: its file:// URL).
        #[arg(long)]
        base_url: Option<String>,
        /// Refuse pyramids that need more tiles than this.
        #[arg(long, default_value_t = DEFAULT_MAX_TILES)]
        max_tiles: u64,
        #[command(flatten)]
        settings: ReportArgs,
    },
    /// Export cell-week counts, each changeset's share of them, scored changesets and cell neighbourhoods as Parquet, partitioned by week and H3 base cell, for DuckDB, Spark or another engine.
    Export {
        /// State database (only read).
        #[arg(long)]
        db: PathBuf,
        /// Export folder (new, empty, or an earlier export, which is replaced).
        #[arg(long)]
        out: PathBuf,
        /// Output format.
        #[arg(long, default_value = "parquet")]
        format: Format,
        #[command(flatten)]
        settings: ExportArgs,
    },
}

/// Settings of `export`.
#[derive(Debug, Args, Clone)]
pub struct ExportArgs {
    /// Export only the weeks a report of this ISO week reads (it and --baseline-weeks before it); default: every week in the database.
    #[arg(long, value_parser = parse_week)]
    pub week: Option<IsoWeek>,
    /// Weeks of history exported with --week.
    #[arg(long, default_value_t = 12, value_parser = clap::value_parser!(u32).range(1..=104), requires = "week")]
    pub baseline_weeks: u32,
    /// GeoJSON polygons with a `name` property: fills the `region` column.
    #[arg(long)]
    pub regions: Option<PathBuf>,
    /// Land layer for the water and offshore counts: `world`, a GeoJSON file, or `none`; use the same as for reports.
    #[arg(long, default_value = "world")]
    pub land: crate::land::LandSource,
    /// H3 resolution 5-10 (default: as `report` would choose for the last complete week).
    #[arg(long, value_parser = parse_resolution)]
    pub resolution: Option<h3o::Resolution>,
    /// Changesets scoring at or above this are flagged.
    #[arg(long, default_value_t = 0.5)]
    pub flag_threshold: f64,
    /// Score changesets with this model file (from `fit`) instead of the default scorecard.
    #[arg(long, conflicts_with = "scores")]
    pub model: Option<PathBuf>,
    /// Take changeset scores from this CSV (`changeset_id,score`).
    #[arg(long)]
    pub scores: Option<PathBuf>,
}

/// Arguments of `update`.
#[derive(Debug, Args)]
pub struct UpdateArgs {
    /// State database (created if missing).
    #[arg(long)]
    pub db: PathBuf,
    /// Base URL of a diff replication folder (minute, hour or day) holding state.txt and AAA/BBB/CCC.osc.gz.
    #[arg(long)]
    pub source: String,
    /// Base URL of a changeset replication folder holding state.yaml and AAA/BBB/CCC.osm.gz.
    #[arg(long)]
    pub changesets_source: Option<String>,
    /// At most this many sequences per source in this run (the next run goes on from there).
    #[arg(long)]
    pub max_files: Option<u64>,
    /// Stop before diffs whose state timestamp is later than this (e.g. 2026-11-30T00:00:00Z).
    #[arg(long, value_parser = parse_time)]
    pub until: Option<i64>,
    /// First sequence to fetch when the database has none recorded for a source (default: the server's current one).
    #[arg(long)]
    pub from_sequence: Option<u64>,
    /// Keep only data in this box: min_lon,min_lat,max_lon,max_lat.
    #[arg(long, conflicts_with = "clip")]
    pub bbox: Option<crate::ingest::clip::Clip>,
    /// Keep only data in the polygons of this GeoJSON file.
    #[arg(long)]
    pub clip: Option<PathBuf>,
    /// Longest time for one request in seconds, answer included.
    #[arg(long, default_value_t = 60)]
    pub timeout_secs: u64,
    /// Retries of a request after 5xx, 429, timeouts and connection errors (waits 2 s, 4 s, 8 s...).
    #[arg(long, default_value_t = 4)]
    pub retries: u32,
    /// Write the report into this folder after the update.
    #[arg(long)]
    pub report_out: Option<PathBuf>,
    #[command(flatten)]
    pub settings: ReportArgs,
}

fn parse_time(s: &str) -> Result<i64, String> {
    ingest::xml::parse_timestamp(s)
        .ok_or_else(|| format!("'{s}' is not a UTC time like 2026-11-30T00:00:00Z"))
}

impl From<crate::update::UpdateError> for Failure {
    fn from(e: crate::update::UpdateError) -> Self {
        use crate::update::UpdateError as E;
        if let E::Ingest(i) = e {
            return Self::from(i);
        }
        let code = match &e {
            E::Store(_) => exit::STATE,
            E::Io { .. } => exit::OUTPUT,
            _ => exit::BAD_INPUT,
        };
        Self {
            message: format!("{e} (nothing was ingested)"),
            code,
        }
    }
}

fn update(args: &UpdateArgs, progress: &Progress) -> Result<(), Failure> {
    use crate::update::{self as up, NetOptions, UpdateOptions};
    let clip = match (&args.bbox, &args.clip) {
        (Some(b), _) => Some(b.clone()),
        (None, Some(p)) => Some(
            crate::ingest::clip::Clip::from_geojson(p).map_err(|message| Failure {
                message,
                code: exit::BAD_INPUT,
            })?,
        ),
        (None, None) => None,
    };
    let report_opts = match &args.report_out {
        Some(_) => {
            let mut o = args.settings.options()?;
            o.scoring = scoring(
                args.settings.model.as_deref(),
                args.settings.scores.as_deref(),
            )?;
            Some(o)
        }
        None => None,
    };
    let opts = UpdateOptions {
        source: args.source.clone(),
        changesets_source: args.changesets_source.clone(),
        max_files: args.max_files,
        until: args.until,
        from_sequence: args.from_sequence,
        clip,
        net: NetOptions {
            timeout: std::time::Duration::from_secs(args.timeout_secs.max(1)),
            retries: args.retries,
            ..NetOptions::default()
        },
    };
    let mut store = Store::open(&args.db)?;
    let s = up::update(&mut store, &opts, progress)?;
    drop(store);
    progress.note(&up::run_line("diffs", &s.diffs));
    if let Some(c) = &s.changesets {
        progress.note(&up::run_line("changesets", c));
    }
    progress.note(&ingest_line(&s.ingest));
    if s.ingest.clipped > 0 {
        progress.note(&format!(
            "{} element(s) and changeset(s) outside the clip area were dropped",
            s.ingest.clipped
        ));
    }
    match (&args.report_out, report_opts) {
        (Some(out), Some(o)) => {
            let mut analysis = Source::Db(&args.db).analyse(&o, progress)?;
            report(&mut analysis, out, &o, progress)
        }
        _ => Ok(()),
    }
}

/// Settings shared by `report` and `demo`.
#[derive(Debug, Args, Clone)]
pub struct ReportArgs {
    /// ISO week to report, e.g. 2026-W47 (default: the last complete week in the data).
    #[arg(long, value_parser = parse_week)]
    pub week: Option<IsoWeek>,
    /// GeoJSON polygons with a `name` property, one report page each.
    #[arg(long)]
    pub regions: Option<PathBuf>,
    /// Land layer: `world` (built in: Natural Earth 1:10m land), a GeoJSON file of land
    /// polygons, or `none` (no backdrop, no offshore detection).
    #[arg(long, default_value = "world")]
    pub land: crate::land::LandSource,
    /// H3 resolution 5-10 (default: from the size of the edited area).
    #[arg(long, value_parser = parse_resolution)]
    pub resolution: Option<h3o::Resolution>,
    /// Weeks of history behind each baseline.
    #[arg(long, default_value_t = 12, value_parser = clap::value_parser!(u32).range(1..=104))]
    pub baseline_weeks: u32,
    /// False discovery rate for the outlier tests.
    #[arg(long, default_value_t = 0.05)]
    pub fdr: f64,
    /// Changesets scoring at or above this are flagged.
    #[arg(long, default_value_t = 0.5)]
    pub flag_threshold: f64,
    /// Map style: a built-in name (default, dark, print) or a TOML file.
    #[arg(long, default_value = "default")]
    pub style: String,
    /// Colour map for counts and scores, overriding the style's: viridis, cividis or magma.
    #[arg(long)]
    pub colormap: Option<Colormap>,
    /// Text for the report's "generated at" line (default: now, UTC).
    #[arg(long)]
    pub generated_at: Option<String>,
    /// Link the report's front page to a tile viewer of the same week at this address, relative
    /// to the report folder or absolute (e.g. tiles/viewer.html, after `hexvigil tiles --out
    /// REPORT/tiles`).
    #[arg(long, value_name = "HREF")]
    pub tiles_viewer: Option<String>,
    /// Score changesets with this model file (from `fit`) instead of the default scorecard.
    #[arg(long, conflicts_with = "scores")]
    pub model: Option<PathBuf>,
    /// Take changeset scores from this CSV (`changeset_id,score`, scores 0-1) computed elsewhere; changesets missing from it keep the default scorecard's score.
    #[arg(long)]
    pub scores: Option<PathBuf>,
}

/// The scoring that `--model` or `--scores` ask for (the default scorecard without either).
///
/// # Errors
/// A [`Failure`] when the file is unreadable or malformed.
fn scoring(model: Option<&Path>, scores: Option<&Path>) -> Result<Scoring, Failure> {
    if let Some(p) = model {
        return Ok(Scoring::Model(Model::load(p)?));
    }
    if let Some(p) = scores {
        let scores = crate::labels::read_scores(p)?;
        let source = p.file_name().map_or_else(
            || p.display().to_string(),
            |n| n.to_string_lossy().into_owned(),
        );
        return Ok(Scoring::Imported { scores, source });
    }
    Ok(Scoring::Scorecard)
}

fn load_land(source: &crate::land::LandSource) -> Result<Land, Failure> {
    source.load().map_err(Failure::from)
}

fn parse_week(s: &str) -> Result<IsoWeek, String> {
    IsoWeek::parse(s).ok_or_else(|| format!("'{s}' is not an ISO week like 2026-W47"))
}

fn parse_resolution(s: &str) -> Result<h3o::Resolution, String> {
    let n: u8 = s.parse().map_err(|_| format!("'{s}' is not a number"))?;
    if !(5..=10).contains(&n) {
        return Err(format!("resolution {n} is outside 5-10"));
    }
    h3o::Resolution::try_from(n).map_err(|e| e.to_string())
}

/// Loads `--style` and applies `--colormap` over it.
fn load_style(name: &str, colormap: Option<Colormap>) -> Result<Style, Failure> {
    let mut style = Style::load(name)?;
    if let Some(c) = colormap {
        if c.is_diverging() {
            return Err(Failure {
                message: format!(
                    "--colormap {c}: a diverging map cannot colour counts; use viridis, cividis or magma"
                ),
                code: exit::BAD_INPUT,
            });
        }
        style.maps.sequential = c;
    }
    Ok(style)
}

impl ReportArgs {
    fn options(&self) -> Result<ReportOptions, Failure> {
        let mut o = ReportOptions {
            week: self.week,
            regions: self.regions.clone(),
            land: self.land.clone(),
            resolution: self.resolution,
            baseline_weeks: self.baseline_weeks,
            flag_threshold: self.flag_threshold,
            style: load_style(&self.style, self.colormap)?,
            generated_at: self
                .generated_at
                .clone()
                .unwrap_or_else(|| chrono::Utc::now().format("%Y-%m-%d %H:%M UTC").to_string()),
            tiles_viewer: self.tiles_viewer.clone(),
            ..ReportOptions::default()
        };
        o.detect.fdr = self.fdr;
        Ok(o)
    }
}

impl ExportArgs {
    fn options(&self) -> Result<ReportOptions, Failure> {
        Ok(ReportOptions {
            week: self.week,
            regions: self.regions.clone(),
            land: self.land.clone(),
            resolution: self.resolution,
            baseline_weeks: self.baseline_weeks,
            flag_threshold: self.flag_threshold,
            scoring: scoring(self.model.as_deref(), self.scores.as_deref())?,
            ..ReportOptions::default()
        })
    }
}

/// A failed command: the message to print and the exit code.
#[derive(Debug)]
pub struct Failure {
    pub message: String,
    pub code: u8,
}

impl From<IngestError> for Failure {
    fn from(e: IngestError) -> Self {
        let code = match &e {
            IngestError::Store(_) => exit::STATE,
            _ => exit::BAD_INPUT,
        };
        Self {
            message: format!("{e} (nothing was ingested)"),
            code,
        }
    }
}

impl From<StoreError> for Failure {
    fn from(e: StoreError) -> Self {
        Self {
            message: e.to_string(),
            code: exit::STATE,
        }
    }
}

impl From<LabelsFileError> for Failure {
    fn from(e: LabelsFileError) -> Self {
        Self {
            message: e.to_string(),
            code: exit::BAD_INPUT,
        }
    }
}

impl From<FitError> for Failure {
    fn from(e: FitError) -> Self {
        let code = match &e {
            FitError::Io { .. } => exit::OUTPUT,
            _ => exit::BAD_INPUT,
        };
        Self {
            message: e.to_string(),
            code,
        }
    }
}

impl From<LandError> for Failure {
    fn from(e: LandError) -> Self {
        Self {
            message: e.to_string(),
            code: exit::BAD_INPUT,
        }
    }
}

impl From<EvaluateError> for Failure {
    fn from(e: EvaluateError) -> Self {
        let code = match &e {
            EvaluateError::Store(_) => exit::STATE,
            EvaluateError::Data(_) => exit::NO_DATA,
            EvaluateError::Options(_) => exit::BAD_INPUT,
            EvaluateError::Render(_) | EvaluateError::Io { .. } => exit::OUTPUT,
        };
        Self {
            message: e.to_string(),
            code,
        }
    }
}

impl From<PipelineError> for Failure {
    fn from(e: PipelineError) -> Self {
        let code = match &e {
            PipelineError::Store(_) => exit::STATE,
            PipelineError::Land(_) | PipelineError::Region(_) => exit::BAD_INPUT,
            PipelineError::NoData { .. } => exit::NO_DATA,
            PipelineError::Render(_) | PipelineError::Report(_) => exit::OUTPUT,
            PipelineError::Export(e) => match e {
                ExportError::Write { .. } | ExportError::Folder { .. } => exit::OUTPUT,
                ExportError::NoData { .. } => exit::NO_DATA,
                _ => exit::BAD_INPUT,
            },
        };
        Self {
            message: e.to_string(),
            code,
        }
    }
}

impl From<StyleError> for Failure {
    fn from(e: StyleError) -> Self {
        Self {
            message: e.to_string(),
            code: exit::BAD_INPUT,
        }
    }
}

impl From<TileError> for Failure {
    fn from(e: TileError) -> Self {
        let code = match &e {
            TileError::TooMany { .. } | TileError::BaseUrl { .. } => exit::BAD_INPUT,
            _ => exit::OUTPUT,
        };
        Self {
            message: e.to_string(),
            code,
        }
    }
}

fn ingest_line(s: &IngestSummary) -> String {
    #[allow(clippy::cast_precision_loss, reason = "display only")]
    let rate = s.elements as f64 / (s.elapsed_ms.max(1) as f64 / 1000.0);
    format!(
        "ingested {} file(s) ({} already ingested): {} elements, {} edits, {} changesets, {} skipped elements in {:.1} s ({:.0} elements/s)",
        s.files,
        s.already_ingested,
        s.elements,
        s.edits,
        s.changesets,
        s.skipped_elements,
        s.elapsed_ms as f64 / 1000.0,
        rate
    ) + &match s.replication.iter().map(|r| r.gaps.len()).sum::<usize>() {
        0 => String::new(),
        gaps => format!("; {gaps} sequence gap(s) in replication folders"),
    }
}

/// Where a report's counts come from.
enum Source<'a> {
    /// A state database.
    Db(&'a Path),
    /// An export folder.
    Export(&'a Path),
}

impl<'a> Source<'a> {
    fn from_args(db: Option<&'a Path>, cell_weeks: Option<&'a Path>) -> Result<Self, Failure> {
        match (db, cell_weeks) {
            (_, Some(dir)) => Ok(Self::Export(dir)),
            (Some(db), None) => Ok(Self::Db(db)),
            (None, None) => Err(Failure {
                message: "--db or --cell-weeks is required".to_owned(),
                code: exit::BAD_INPUT,
            }),
        }
    }

    fn analyse(&self, opts: &ReportOptions, progress: &Progress) -> Result<Analysis, Failure> {
        match self {
            Self::Db(db) => {
                let store = Store::open(db)?;
                Ok(pipeline::analyse(&store, opts, progress)?)
            }
            Self::Export(dir) => Ok(pipeline::analyse_export(dir, opts, progress)?),
        }
    }
}

/// Writes the report folder of an analysis and tells what it holds.
fn report(
    analysis: &mut Analysis,
    out: &Path,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<(), Failure> {
    pipeline::write(analysis, out, opts)?;
    for r in &analysis.summary.regions {
        progress.note(&format!(
            "{}: {} edits, {} changesets, {} flagged, {} outlier cells",
            r.name,
            r.counts.edits,
            r.counts.changesets,
            r.counts.flagged_changesets,
            r.counts.outlier_cells
        ));
    }
    progress.note(&format!(
        "report written to {}",
        out.join("index.html").display()
    ));
    Ok(())
}

/// Writes the tile pyramid of an analysis and tells what it holds.
fn tiles(
    analysis: &Analysis,
    out: &Path,
    opts: &ReportOptions,
    tile_opts: &TileOptions,
    progress: &Progress,
) -> Result<(), Failure> {
    let s = crate::tiles::write_tiles(analysis, opts, tile_opts, out, progress)?;
    let per_zoom: Vec<String> = s
        .per_zoom
        .iter()
        .map(|(z, n)| format!("z{z}: {n}"))
        .collect();
    progress.note(&format!(
        "{} tiles of {} written ({}; {} blank tiles skipped); open {}",
        s.written,
        tile_opts.measure,
        per_zoom.join(", "),
        s.blank,
        out.join("viewer.html").display()
    ));
    if let Some(mb) = &tile_opts.mbtiles {
        progress.note(&format!("MBTiles written to {}", mb.display()));
    }
    Ok(())
}

fn export(
    db: &Path,
    out: &Path,
    format: Format,
    opts: &ReportOptions,
    progress: &Progress,
) -> Result<(), Failure> {
    let store = Store::open(db)?;
    match format {
        Format::Parquet => {
            let s = crate::export::export(&store, out, opts, progress)?;
            let rows: Vec<String> = s.rows.iter().map(|(t, n)| format!("{t}: {n}")).collect();
            #[allow(clippy::cast_precision_loss, reason = "display only")]
            let mib = s.bytes as f64 / 1_048_576.0;
            progress.note(&format!(
                "exported {} to {} at H3 resolution {}: {} Parquet files, {mib:.1} MiB ({}) in {}",
                s.first_week,
                s.last_week,
                s.resolution,
                s.files,
                rows.join(", "),
                out.display()
            ));
        }
    }
    Ok(())
}

fn labels(db: &Path, out: &Path, settle_days: f64, progress: &Progress) -> Result<(), Failure> {
    let store = Store::open(db)?;
    let found = crate::labels::derive_labels(&store, &LabelOptions { settle_days })?;
    crate::labels::write_labels(out, &found.labels).map_err(|e| Failure {
        message: e.to_string(),
        code: exit::OUTPUT,
    })?;
    let positives = found.labels.values().filter(|&&l| l == 1).count();
    progress.note(&format!(
        "{} revert changesets ({} citing vandalism): {} changesets labelled 1, {} labelled 0 ({} of them reverted without vandalism cited); {} ids named by reverts are not in the database; written to {}",
        found.reverts,
        found.vandalism_reverts,
        positives,
        found.labels.len() - positives,
        found.reverted_negatives,
        found.unknown_targets,
        out.display()
    ));
    Ok(())
}

fn fit(
    db: &Path,
    labels_path: &Path,
    out: &Path,
    l2: f64,
    land: &crate::land::LandSource,
    progress: &Progress,
) -> Result<(), Failure> {
    let labels = crate::labels::read_labels(labels_path)?;
    let store = Store::open(db)?;
    let land = load_land(land)?;
    let ctx = FeatureContext::load(&store, &land, FeatureConfig::default())?;
    let ids = labels.keys().copied().collect();
    let features = ctx.for_changesets(&ids, progress)?;
    let rows: Vec<_> = features
        .iter()
        .filter_map(|f| labels.get(&f.id).map(|&l| (f, l == 1)))
        .collect();
    let model = Model::fit(&rows, l2)?;
    model.save(out)?;
    progress.note(&format!(
        "fitted on {} changesets ({} labelled 1; {} labelled changesets have no edits in the database) in {} Newton iterations; model written to {}",
        rows.len(),
        model.training.positives,
        labels.len() - rows.len(),
        model.training.iterations,
        out.display()
    ));
    Ok(())
}

fn evaluate(
    db: &Path,
    labels_path: &Path,
    scorers: &[(String, Scoring)],
    out: &Path,
    land: &crate::land::LandSource,
    opts: &EvaluateOptions,
    progress: &Progress,
) -> Result<(), Failure> {
    let labels = crate::labels::read_labels(labels_path)?;
    let store = Store::open(db)?;
    let land = load_land(land)?;
    let ctx = FeatureContext::load(&store, &land, FeatureConfig::default())?;
    let run = crate::evaluate::evaluate(&ctx, &labels, scorers, opts, progress)?;
    crate::evaluate::write_run(out, &run)?;
    println!(
        "train: {} changesets ({} labelled 1) of {} mappers; test: {} changesets ({} labelled 1) of {} other mappers",
        run.train.changesets,
        run.train.positives,
        run.train.mappers,
        run.test.changesets,
        run.test.positives,
        run.test.mappers
    );
    println!("scorer | precision | recall | F1 | accuracy | average precision | TP FP TN FN");
    for e in &run.evaluations {
        let c = e.confusion;
        println!(
            "{} | {:.3} | {:.3} | {:.3} | {:.4} | {:.3} | {} {} {} {}",
            e.scorer,
            e.precision,
            e.recall,
            e.f1,
            e.accuracy,
            e.average_precision,
            c.true_positives,
            c.false_positives,
            c.true_negatives,
            c.false_negatives
        );
    }
    progress.note(&format!("evaluation written to {}", out.display()));
    Ok(())
}

fn explain(
    db: &Path,
    id: i64,
    scoring: &Scoring,
    land: &crate::land::LandSource,
) -> Result<(), Failure> {
    let store = Store::open(db)?;
    let land = load_land(land)?;
    let ctx = FeatureContext::load(&store, &land, FeatureConfig::default())?;
    let quiet = Progress::new(true);
    let features = ctx.for_changesets(&std::iter::once(id).collect(), &quiet)?;
    let Some(c) = features.first() else {
        return Err(Failure {
            message: format!(
                "{}: changeset {id} has no edits in the database",
                db.display()
            ),
            code: exit::NO_DATA,
        });
    };
    let s = scoring.score(c);
    println!("changeset {} by {} (uid {})", c.id, c.user, c.uid);
    if !c.comment.is_empty() {
        println!("comment: {}", c.comment);
    }
    println!("score: {:.4} ({})", s.score, scoring.name());
    println!("reasons, strongest first:");
    for (_, r) in &s.reasons {
        println!("  - {r}");
    }
    if ctx.reverts.reverted(c.id).is_some() {
        let by: Vec<String> = ctx
            .reverts
            .reverts
            .iter()
            .filter(|x| x.targets.contains(&c.id))
            .map(|x| {
                format!(
                    "{}{}",
                    x.id,
                    if x.vandalism {
                        " (vandalism cited)"
                    } else {
                        ""
                    }
                )
            })
            .collect();
        println!("reverted by: {}", by.join(", "));
    }
    println!("features:");
    for f in FEATURES {
        println!("  {:<30} {:>9.3}  {}", f.name, f.value(c), f.words(c));
    }
    println!(
        "A score is a statistical prompt, not a verdict: look at the edits, assume good faith, talk to the mapper first, and follow the community's and the OSM Foundation's guidelines on reverts and disputes."
    );
    Ok(())
}

/// Runs a parsed command line.
///
/// # Errors
/// A [`Failure`] with the one-line message and exit code.
pub fn run(cli: Cli) -> Result<(), Failure> {
    let progress = Progress::new(cli.quiet);
    match cli.command {
        Command::Ingest {
            db,
            sequences,
            inputs,
        } => {
            let mut store = Store::open(&db)?;
            let s =
                ingest::ingest_with(&mut store, &inputs, &IngestOptions { sequences }, &progress)?;
            progress.note(&ingest_line(&s));
            Ok(())
        }
        Command::Update(args) => update(&args, &progress),
        Command::Report {
            db,
            cell_weeks,
            out,
            settings,
        } => {
            let mut opts = settings.options()?;
            opts.scoring = scoring(settings.model.as_deref(), settings.scores.as_deref())?;
            let source = Source::from_args(db.as_deref(), cell_weeks.as_deref())?;
            let mut analysis = source.analyse(&opts, &progress)?;
            report(&mut analysis, &out, &opts, &progress)
        }
        Command::Export {
            db,
            out,
            format,
            settings,
        } => export(&db, &out, format, &settings.options()?, &progress),
        Command::Tiles {
            db,
            cell_weeks,
            out,
            zoom,
            measure,
            mbtiles,
            base_url,
            max_tiles,
            settings,
        } => {
            let opts = TileOptions {
                zooms: zoom,
                measure,
                mbtiles,
                base_url,
                max_tiles,
            };
            let source = Source::from_args(db.as_deref(), cell_weeks.as_deref())?;
            let settings = settings.options()?;
            let analysis = source.analyse(&settings, &progress)?;
            tiles(&analysis, &out, &settings, &opts, &progress)
        }
        Command::Labels {
            db,
            out,
            settle_days,
        } => labels(&db, &out, settle_days, &progress),
        Command::Fit {
            db,
            labels,
            out,
            l2,
            land,
        } => fit(&db, &labels, &out, l2, &land, &progress),
        Command::Evaluate {
            db,
            labels,
            model,
            scores,
            out,
            land,
            flag_threshold,
            test_share,
            seed,
            l2,
        } => {
            let mut scorers = Vec::new();
            if let Some(p) = &model {
                scorers.push((format!("model {}", p.display()), scoring(Some(p), None)?));
            }
            if let Some(p) = &scores {
                scorers.push((format!("imported {}", p.display()), scoring(None, Some(p))?));
            }
            let opts = EvaluateOptions {
                threshold: flag_threshold,
                test_share,
                seed,
                l2,
            };
            evaluate(&db, &labels, &scorers, &out, &land, &opts, &progress)
        }
        Command::Explain {
            db,
            changeset,
            model,
            scores,
            land,
        } => explain(
            &db,
            changeset,
            &scoring(model.as_deref(), scores.as_deref())?,
            &land,
        ),
        Command::Demo {
            out,
            seed,
            weeks,
            intensity,
            inputs_only,
            style,
        } => {
            let style = load_style(&style, None)?;
            let input = out.join("input");
            let files = demo::generate(
                &input,
                &DemoOptions {
                    seed,
                    weeks,
                    intensity,
                },
            )
            .map_err(|e| Failure {
                message: e.to_string(),
                code: exit::OUTPUT,
            })?;
            progress.note(&format!("demo input written to {}", input.display()));
            if inputs_only {
                return Ok(());
            }
            let db = out.join("state.db");
            let mut store = Store::open(&db)?;
            let mut inputs = vec![files.snapshot.clone(), files.changesets.clone()];
            inputs.extend(files.diffs.iter().cloned());
            let s = ingest::ingest(&mut store, &inputs, &progress)?;
            progress.note(&ingest_line(&s));
            drop(store);
            let opts = ReportOptions {
                regions: Some(files.regions.clone()),
                land: crate::land::LandSource::File(files.land.clone()),
                // Fixed so the demo's report is the same on every run.
                generated_at: "demo run (fictional data)".to_owned(),
                style,
                // The tiles below are written into the report folder.
                tiles_viewer: Some("tiles/viewer.html".to_owned()),
                // Fictional changesets and mappers: no links to real ones of the same id or name.
                changeset_url: String::new(),
                user_url: String::new(),
                ..ReportOptions::default()
            };
            let report_dir = out.join("report");
            // One analysis serves both the report and the tiles.
            let mut analysis = Source::Db(&db).analyse(&opts, &progress)?;
            report(&mut analysis, &report_dir, &opts, &progress)?;
            // The town scale of the demo: zoom 9 shows the whole coast, 14 single streets.
            let tile_opts = TileOptions {
                zooms: ZoomRange { min: 9, max: 14 },
                ..TileOptions::default()
            };
            tiles(
                &analysis,
                &report_dir.join("tiles"),
                &opts,
                &tile_opts,
                &progress,
            )
        }
    }
}
