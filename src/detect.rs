//! Outlier cells: for each region and kind, the upper-tail probability of each cell's observed
//! report-week count under its baseline, Benjamini-Hochberg q-values across the region's tested
//! cells, and a minimum effect size so that small jumps (0 to 2) are never outliers.

use h3o::CellIndex;

use crate::baseline::{benjamini_hochberg, fit_dispersion, fit_prior, Predictive, PriorBounds};
use crate::cells::{CellWeek, CellWeeks, Kind};

/// Detection settings.
#[derive(Debug, Clone, Copy)]
pub struct DetectConfig {
    /// False discovery rate for Benjamini-Hochberg.
    pub fdr: f64,
    /// Observed must be at least this many times the expectation.
    pub min_ratio: f64,
    /// H3 grid-disk radius of the neighbourhood the prior is fitted on.
    pub neighbourhood_k: u32,
    pub prior: PriorBounds,
}

impl Default for DetectConfig {
    fn default() -> Self {
        Self {
            fdr: 0.05,
            min_ratio: 2.0,
            neighbourhood_k: 2,
            prior: PriorBounds::default(),
        }
    }
}

/// Smallest excess over the expectation (observed − expected) that can make an outlier, per
/// kind: a handful of deletions or renames is everyday work; a few newcomers at once is not.
#[must_use]
pub const fn min_excess(k: Kind) -> f64 {
    match k {
        Kind::DeletionBurst | Kind::ScoreHotspot => 10.0,
        Kind::NewcomerSurge => 4.0,
        Kind::OffshoreFabrication | Kind::RenameSpam => 5.0,
    }
}

/// One tested cell.
#[derive(Debug, Clone, PartialEq)]
pub struct Test {
    pub kind: Kind,
    pub cell: CellIndex,
    pub observed: u64,
    pub expected: f64,
    pub p_value: f64,
    pub q_value: f64,
    /// The cell had edits of its own in the history weeks.
    pub own_history: bool,
    pub outlier: bool,
}

/// A cell's predictive distribution of `count` for the report week: a Gamma prior fitted on
/// its H3 grid disk's history weeks, updated by its own history weeks, with the
/// neighbourhood's week-to-week dispersion (see [`crate::baseline`]).
#[must_use]
pub fn predict(
    cw: &CellWeeks,
    cell: CellIndex,
    count: &dyn Fn(&CellWeek) -> u64,
    cfg: &DetectConfig,
) -> Predictive {
    let report = cw.weeks - 1;
    let own = cw.get(cell);
    let history: Vec<u64> = (0..report)
        .map(|w| own.map_or(0, |v| count(&v[w])))
        .collect();
    let mut samples = Vec::new();
    let mut active: Vec<Vec<u64>> = Vec::new();
    for n in cell.grid_disk::<Vec<_>>(cfg.neighbourhood_k) {
        let nv = cw.get(n);
        let h: Vec<u64> = (0..report)
            .map(|w| nv.map_or(0, |v| count(&v[w])))
            .collect();
        samples.extend_from_slice(&h);
        if nv.is_some() {
            active.push(h);
        }
    }
    let prior = fit_prior(&samples, &cfg.prior);
    let k = fit_dispersion(active.iter().map(Vec::as_slice));
    Predictive::from_history(prior, &history, k)
}

/// Tests every cell of `cells_in_region` for every kind. Offshore fabrication is skipped when
/// `offshore` is false (no land layer). Score hotspots are dropped where another kind already
/// flags the cell, since they would repeat the same evidence.
#[must_use]
pub fn detect(
    cw: &CellWeeks,
    cells_in_region: &[CellIndex],
    offshore: bool,
    cfg: &DetectConfig,
) -> Vec<Test> {
    let report = cw.weeks - 1;
    let mut all = Vec::new();
    for kind in Kind::ALL {
        if kind == Kind::OffshoreFabrication && !offshore {
            continue;
        }
        let mut tests: Vec<Test> = cells_in_region
            .iter()
            .map(|&cell| {
                let own = cw.get(cell);
                let own_history = own.is_some_and(|v| v[..report].iter().any(|x| x.edits > 0));
                let pred = predict(cw, cell, &|c| c.value(kind), cfg);
                let observed = own.map_or(0, |v| v[report].value(kind));
                Test {
                    kind,
                    cell,
                    observed,
                    expected: pred.mean(),
                    p_value: pred.tail(observed),
                    q_value: 1.0,
                    own_history,
                    outlier: false,
                }
            })
            .collect();
        let q = benjamini_hochberg(&tests.iter().map(|t| t.p_value).collect::<Vec<_>>());
        for (t, q) in tests.iter_mut().zip(q) {
            t.q_value = q;
            #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
            let obs = t.observed as f64;
            t.outlier = q <= cfg.fdr
                && obs - t.expected >= min_excess(kind)
                && obs >= cfg.min_ratio * t.expected;
        }
        all.extend(tests);
    }
    let specific: std::collections::HashSet<CellIndex> = all
        .iter()
        .filter(|t| t.outlier && t.kind != Kind::ScoreHotspot)
        .map(|t| t.cell)
        .collect();
    for t in &mut all {
        if t.kind == Kind::ScoreHotspot && specific.contains(&t.cell) {
            t.outlier = false;
        }
    }
    all
}
