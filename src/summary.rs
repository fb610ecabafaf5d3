//! The report's data contract: `summary.json` (schema 1) and the richer per-region data the HTML,
//! CSV and GeoJSON writers read. Every field here is documented in README.md; scripts and tests
//! read `summary.json`, so changing a field means bumping [`SCHEMA_VERSION`].

use serde::{Deserialize, Serialize};

/// Version of `summary.json`.
pub const SCHEMA_VERSION: u32 = 1;

/// Top level of `summary.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// Always [`SCHEMA_VERSION`].
    pub schema: u32,
    /// `hexvigil <version>`.
    pub generator: String,
    /// The report week, ISO 8601 (`2026-W47`).
    pub week: String,
    /// H3 resolution of the cells.
    pub resolution: u8,
    /// Weeks of history the baselines use.
    pub baseline_weeks: u32,
    /// One entry per region, in the order of the regions file (or one "All data" region).
    pub regions: Vec<RegionSummary>,
}

/// Per-region part of `summary.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RegionSummary {
    pub name: String,
    /// File-system safe name; the region's folder in the report.
    pub slug: String,
    pub week: String,
    pub counts: Counts,
    /// The same counts averaged over the baseline weeks (what a normal week looks like).
    pub baseline_counts: BaselineCounts,
    /// How edits were given a position.
    pub placement: Placement,
    /// Outlier cells merged into incidents (neighbouring cells of one kind sharing changesets),
    /// strongest evidence first.
    pub incidents: Vec<Incident>,
    /// Outlier cells, strongest evidence first.
    pub outliers: Vec<Outlier>,
    /// Changesets scoring at or above the flag threshold, highest score first.
    pub flagged_changesets: Vec<FlaggedChangeset>,
}

/// Counts of the region's report week.
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Counts {
    pub edits: u64,
    pub creates: u64,
    pub modifies: u64,
    pub deletes: u64,
    pub changesets: u64,
    pub mappers: u64,
    /// Mappers whose account was younger than the newcomer threshold at their first edit of the week.
    pub newcomers: u64,
    pub flagged_changesets: u64,
    pub outlier_cells: u64,
}

/// Mean weekly counts over the baseline weeks.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct BaselineCounts {
    pub weeks: u32,
    pub edits: f64,
    pub deletes: f64,
    pub newcomers: f64,
    pub changesets: f64,
}

/// How many of the week's edits were placed each way (never silently dropped).
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct Placement {
    /// The element carried its own coordinates (nodes).
    pub own_coordinates: u64,
    /// From the node-location index (deleted nodes without coordinates, ways, relations).
    pub node_index: u64,
    /// Fell back to the centre of the changeset's bounding box.
    pub changeset_bbox: u64,
    /// Could not be placed at all (no node positions and no changeset box); counted, not mapped.
    pub unplaced: u64,
}

impl std::ops::AddAssign for Placement {
    fn add_assign(&mut self, o: Self) {
        self.own_coordinates += o.own_coordinates;
        self.node_index += o.node_index;
        self.changeset_bbox += o.changeset_bbox;
        self.unplaced += o.unplaced;
    }
}

/// One outlier cell.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Outlier {
    /// `deletion_burst`, `newcomer_surge`, `offshore_fabrication`, `rename_spam` or `score_hotspot`.
    pub kind: String,
    /// H3 cell index as a hexadecimal string.
    pub cell: String,
    /// Cell centre.
    pub lat: f64,
    pub lon: f64,
    /// Observed count of the kind's measure in the report week.
    pub observed: u64,
    /// Baseline expectation (negative-binomial predictive mean).
    pub expected: f64,
    /// Upper-tail probability P(X >= observed) under the baseline.
    pub p_value: f64,
    /// Benjamini-Hochberg adjusted p-value across the region's tested cells for this kind.
    pub q_value: f64,
    /// What the count measures, in words (e.g. "deletions").
    pub measure: String,
    /// `own` when the cell had history of its own, `neighbourhood` when it borrowed it.
    pub baseline_source: String,
    /// Changesets contributing to the count, most contributing first.
    pub changesets: Vec<i64>,
    /// Their mappers (display names), most contributing first.
    pub mappers: Vec<String>,
}

/// Neighbouring outlier cells of one kind that share changesets, taken together.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Incident {
    pub kind: String,
    /// H3 cells, as in `outliers`.
    pub cells: Vec<String>,
    /// Centre: the mean of the cell centres weighted by their observed counts.
    pub lat: f64,
    pub lon: f64,
    /// `[min_lon, min_lat, max_lon, max_lat]` of the cells' boundaries.
    pub bbox: [f64; 4],
    /// Sums over the cells.
    pub observed: u64,
    pub expected: f64,
    /// The smallest over the cells.
    pub p_value: f64,
    pub q_value: f64,
    /// Changesets and mappers, most contributing first.
    pub changesets: Vec<i64>,
    pub mappers: Vec<String>,
}

/// One flagged changeset.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FlaggedChangeset {
    pub id: i64,
    pub user: String,
    pub uid: i64,
    /// Score in [0, 1].
    pub score: f64,
    /// Plain-words reasons, strongest first.
    pub reasons: Vec<String>,
}

/// One row of `changesets.csv` and of the report's changeset table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChangesetRow {
    pub id: i64,
    pub user: String,
    pub uid: i64,
    /// Unix seconds of the first edit (or the changeset's creation time).
    pub created_at: i64,
    /// Account age in days at the changeset (days since the mapper's first changeset seen).
    pub account_age_days: f64,
    pub creates: u64,
    pub modifies: u64,
    pub deletes: u64,
    pub comment: String,
    pub editor: String,
    pub score: f64,
    pub reasons: Vec<String>,
    pub flagged: bool,
}

/// A week of the region's trend chart.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TrendPoint {
    pub week: String,
    pub edits: u64,
    pub deletes: u64,
    pub newcomer_edits: u64,
    /// Changesets with an edit in the region that week scoring at or above the flag threshold
    /// (the report week's value equals `counts.flagged_changesets`).
    pub flagged_changesets: u64,
}

/// Everything the region page, its CSV and its GeoJSON need.
#[derive(Debug, Clone, PartialEq)]
pub struct RegionReport {
    pub summary: RegionSummary,
    /// All changesets of the week with at least one edit in the region, highest score first.
    pub changesets: Vec<ChangesetRow>,
    /// Report week last, oldest first.
    pub trend: Vec<TrendPoint>,
    /// Outlier cell boundaries (lon, lat rings, closed), parallel to `summary.outliers`.
    pub outlier_rings: Vec<Vec<(f64, f64)>>,
    /// Elements skipped while reading (odd but valid input), with reason, over the whole store.
    pub skipped: Vec<(String, u64)>,
    /// File names (relative to the region folder) of the heat images, with a caption each.
    pub images: Vec<(String, String)>,
}
