//! The report writers: for each region a self-contained HTML page, `changesets.csv` and
//! `outliers.geojson`, then the front page `index.html` and `summary.json`.
//!
//! Pages open from disk with no network: the style sheet and the small table script are inlined
//! (and pinned by hash in a content security policy), images are referenced by relative path,
//! and the only absolute links are to OpenStreetMap changesets, mappers and its copyright page.
//! Every piece of text that comes from OSM (names, comments, reasons, editors, region names) is
//! escaped, and link path segments are percent-encoded. Output is deterministic: the
//! "generated at" text is passed in by the caller.

mod chart;
mod data_files;
mod index_page;
mod page;
mod region_page;
mod text;

use std::collections::HashSet;
use std::fs;
use std::path::{Path, PathBuf};

pub use text::{escape_html, group_thousands, slugify, MAX_SLUG_LEN};

pub(crate) use page::csp_hash;

use crate::summary::{RegionReport, Summary};

/// Folder names at the top of the report that other writers use; a region slug never takes
/// one of them (the heat tile pyramid lives in `tiles/`).
const RESERVED_SLUGS: [&str; 1] = ["tiles"];

/// Errors writing the report; each names the file it was writing.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// Creating a folder or writing a file failed.
    #[error("{path}: cannot write: {source}")]
    Io {
        /// The folder or file.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
    /// Serialising JSON (`summary.json`, `outliers.geojson`) failed.
    #[error("{path}: cannot write JSON: {source}")]
    Json {
        /// The file.
        path: PathBuf,
        /// The underlying error.
        source: serde_json::Error,
    },
    /// Writing `changesets.csv` failed.
    #[error("{path}: cannot write CSV: {source}")]
    Csv {
        /// The file.
        path: PathBuf,
        /// The underlying error.
        source: csv::Error,
    },
    /// The summary and the region reports describe different numbers of regions.
    #[error("{path}: the summary lists {summary} regions but {pages} region reports were given")]
    RegionCount {
        /// The report folder.
        path: PathBuf,
        /// Regions in [`Summary::regions`].
        summary: usize,
        /// Region reports passed to [`write_report`].
        pages: usize,
    },
}

/// Settings and labels the pages show; none of it is read from the environment or the clock.
#[derive(Debug, Clone, Copy)]
pub struct PageContext<'a> {
    /// When the report was made, as the caller wants it shown (e.g. `2026-11-23 06:00 UTC`).
    pub generated_at: &'a str,
    /// hexvigil's version, e.g. `0.1.0`.
    pub tool_version: &'a str,
    /// H3 resolution of the cells.
    pub resolution: u8,
    /// Weeks of history behind each baseline.
    pub baseline_weeks: u32,
    /// False discovery rate of the Benjamini-Hochberg step, e.g. `0.05`.
    pub fdr: f64,
    /// Changeset score at or above which a changeset is flagged.
    pub flag_threshold: f64,
    /// Prefix of a changeset link; the id is appended
    /// (e.g. `https://www.openstreetmap.org/changeset/`). Empty: ids are shown without links
    /// (the demo's, which are fictional and must not point at real changesets).
    pub changeset_url: &'a str,
    /// Prefix of a mapper link; the percent-encoded display name is appended
    /// (e.g. `https://www.openstreetmap.org/user/`). Empty: names are shown without links
    /// (the demo's fictional mappers, whose names could belong to real accounts).
    pub user_url: &'a str,
    /// Address of a tile viewer of the same week that the front page links to (relative to the
    /// report folder, e.g. `tiles/viewer.html`, or absolute), if one is published with it.
    pub tiles_viewer: Option<&'a str>,
}

/// Gives each region a distinct, safe folder name.
///
/// Each name goes through [`slugify`]. When a slug is already taken (two names that differ only
/// in case or punctuation, or a reserved folder such as `tiles`), the first free suffix `-2`,
/// `-3`, … is appended, shortening the slug so the result still fits [`MAX_SLUG_LEN`]. Slugs
/// this function returned come back unchanged when passed in again in the same order.
#[must_use]
pub fn assign_slugs<S: AsRef<str>>(names: &[S]) -> Vec<String> {
    let mut taken: HashSet<String> = RESERVED_SLUGS.iter().map(|s| (*s).to_owned()).collect();
    names
        .iter()
        .map(|name| {
            let base = slugify(name.as_ref());
            let mut slug = base.clone();
            let mut n = 2_u32;
            while taken.contains(&slug) {
                let suffix = format!("-{n}");
                let keep = MAX_SLUG_LEN.saturating_sub(suffix.len()).min(base.len());
                slug = format!("{}{suffix}", base[..keep].trim_end_matches('-'));
                n += 1;
            }
            taken.insert(slug.clone());
            slug
        })
        .collect()
}

fn io_error(path: &Path) -> impl FnOnce(std::io::Error) -> ReportError + '_ {
    move |source| ReportError::Io {
        path: path.to_owned(),
        source,
    }
}

/// Writes the whole report folder.
///
/// For each region, `<out>/<slug>/index.html`, `changesets.csv` and `outliers.geojson`; then
/// `<out>/index.html` and `<out>/summary.json`. Heat images named in [`RegionReport::images`]
/// are expected to be in the region folder already.
///
/// `regions` runs parallel to `summary.regions`. Folder names come from [`assign_slugs`] over
/// each region's `slug` (its `name` when the slug is empty), so they are safe and distinct even
/// when the given slugs are not; `summary.json` records the folder names actually used.
///
/// # Errors
/// [`ReportError::RegionCount`] when `regions` and `summary.regions` differ in length, and an
/// I/O, JSON or CSV error naming the file when writing fails. Files written before the failure
/// stay in place.
pub fn write_report(
    out: &Path,
    summary: &Summary,
    regions: &[RegionReport],
    ctx: &PageContext<'_>,
) -> Result<(), ReportError> {
    if summary.regions.len() != regions.len() {
        return Err(ReportError::RegionCount {
            path: out.to_owned(),
            summary: summary.regions.len(),
            pages: regions.len(),
        });
    }
    let wanted: Vec<&str> = regions
        .iter()
        .map(|r| {
            if r.summary.slug.is_empty() {
                r.summary.name.as_str()
            } else {
                r.summary.slug.as_str()
            }
        })
        .collect();
    let slugs = assign_slugs(&wanted);
    fs::create_dir_all(out).map_err(io_error(out))?;

    for (region, slug) in regions.iter().zip(&slugs) {
        let dir = out.join(slug);
        fs::create_dir_all(&dir).map_err(io_error(&dir))?;
        let page_path = dir.join("index.html");
        fs::write(&page_path, region_page::render(region, ctx)).map_err(io_error(&page_path))?;
        data_files::write_changesets_csv(&dir.join("changesets.csv"), &region.changesets)?;
        data_files::write_outliers_geojson(
            &dir.join("outliers.geojson"),
            &region.summary.outliers,
            &region.outlier_rings,
        )?;
    }

    let index_path = out.join("index.html");
    fs::write(
        &index_path,
        index_page::render(summary, regions, &slugs, ctx),
    )
    .map_err(io_error(&index_path))?;

    let mut recorded = summary.clone();
    for (region, slug) in recorded.regions.iter_mut().zip(slugs) {
        region.slug = slug;
    }
    data_files::write_summary(&out.join("summary.json"), &recorded)
}
