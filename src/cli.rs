//! Command-line interface: argument parsing and the commands' top-level flow. `main.rs` only
//! calls [`run`] and turns its error into an exit code.

use std::path::{Path, PathBuf};

use clap::{Args, Parser, Subcommand};

use crate::demo::{self, DemoOptions};
use crate::ingest::replication::SequenceRange;
use crate::ingest::{self, IngestError, IngestOptions, IngestSummary};
use crate::model::IsoWeek;
use crate::pipeline::{self, PipelineError, ReportOptions};
use crate::progress::Progress;
use crate::render::Colormap;
use crate::store::{Store, StoreError};

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
    /// Analyse a week and write the report folder.
    Report {
        #[arg(long)]
        db: PathBuf,
        /// Report folder.
        #[arg(long)]
        out: PathBuf,
        #[command(flatten)]
        settings: ReportArgs,
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
    },
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
    /// GeoJSON land polygons (enables offshore detection and the land backdrop).
    #[arg(long)]
    pub land: Option<PathBuf>,
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
    /// Colour map: viridis, cividis or magma.
    #[arg(long, default_value = "viridis")]
    pub colormap: Colormap,
    /// Text for the report's "generated at" line (default: now, UTC).
    #[arg(long)]
    pub generated_at: Option<String>,
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

impl ReportArgs {
    fn options(&self) -> ReportOptions {
        let mut o = ReportOptions {
            week: self.week,
            regions: self.regions.clone(),
            land: self.land.clone(),
            resolution: self.resolution,
            baseline_weeks: self.baseline_weeks,
            flag_threshold: self.flag_threshold,
            colormap: self.colormap,
            generated_at: self
                .generated_at
                .clone()
                .unwrap_or_else(|| chrono::Utc::now().format("%Y-%m-%d %H:%M UTC").to_string()),
            ..ReportOptions::default()
        };
        o.detect.fdr = self.fdr;
        o
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

impl From<PipelineError> for Failure {
    fn from(e: PipelineError) -> Self {
        let code = match &e {
            PipelineError::Store(_) => exit::STATE,
            PipelineError::Land(_) | PipelineError::Region(_) => exit::BAD_INPUT,
            PipelineError::NoData { .. } => exit::NO_DATA,
            PipelineError::Render(_) | PipelineError::Report(_) => exit::OUTPUT,
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
        "ingested {} file(s) ({} already ingested): {} elements, {} new edits, {} changesets, {} skipped elements in {:.1} s ({:.0} elements/s)",
        s.files,
        s.already_ingested,
        s.elements,
        s.new_edits,
        s.changesets,
        s.skipped_elements,
        s.elapsed_ms as f64 / 1000.0,
        rate
    ) + &match s.replication.iter().map(|r| r.gaps.len()).sum::<usize>() {
        0 => String::new(),
        gaps => format!("; {gaps} sequence gap(s) in replication folders"),
    }
}

fn report(db: &Path, out: &Path, opts: &ReportOptions, progress: &Progress) -> Result<(), Failure> {
    let store = Store::open(db)?;
    let mut analysis = pipeline::analyse(&store, opts, progress)?;
    pipeline::write(&mut analysis, out, opts)?;
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
        Command::Report { db, out, settings } => report(&db, &out, &settings.options(), &progress),
        Command::Demo { out, seed, weeks } => {
            let input = out.join("input");
            let files = demo::generate(
                &input,
                &DemoOptions {
                    seed,
                    weeks,
                    ..DemoOptions::default()
                },
            )
            .map_err(|e| Failure {
                message: e.to_string(),
                code: exit::OUTPUT,
            })?;
            progress.note(&format!("demo input written to {}", input.display()));
            let db = out.join("state.db");
            let mut store = Store::open(&db)?;
            let mut inputs = vec![files.snapshot.clone(), files.changesets.clone()];
            inputs.extend(files.diffs.iter().cloned());
            let s = ingest::ingest(&mut store, &inputs, &progress)?;
            progress.note(&ingest_line(&s));
            drop(store);
            let opts = ReportOptions {
                regions: Some(files.regions.clone()),
                land: Some(files.land.clone()),
                // Fixed so the demo's report is the same on every run.
                generated_at: "demo run (fictional data)".to_owned(),
                ..ReportOptions::default()
            };
            report(&db, &out.join("report"), &opts, &progress)
        }
    }
}
