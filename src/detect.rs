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
    /// H3 grid-disk radius of the neighbourhood the prior is fitted on (with the parent cell's
    /// other children).
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

/// The cells a cell's prior is fitted on: its H3 grid disk of radius `k` and its siblings (the
/// other children of its parent cell), each once, in a fixed order.
#[must_use]
pub fn neighbourhood(cell: CellIndex, k: u32) -> Vec<CellIndex> {
    let mut cells: Vec<CellIndex> = cell.grid_disk(k);
    if let Some(parent) = cell.resolution().pred().and_then(|r| cell.parent(r)) {
        cells.extend(parent.children(cell.resolution()));
    }
    cells.sort_unstable();
    cells.dedup();
    cells
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
    for n in neighbourhood(cell, cfg.neighbourhood_k) {
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn neighbourhood_is_disk_and_siblings() {
        let cell = h3o::LatLng::new(45.2, -33.6)
            .unwrap()
            .to_cell(h3o::Resolution::Eight);
        let n = neighbourhood(cell, 2);
        // Source: H3 documentation: a grid disk of radius k holds 1 + 3k(k+1) cells (19 for
        // k = 2) away from pentagons; a parent has 7 children.
        let disk: Vec<CellIndex> = cell.grid_disk(2);
        assert_eq!(disk.len(), 19);
        assert!(disk.iter().all(|c| n.contains(c)));
        let parent = cell.parent(h3o::Resolution::Seven).unwrap();
        assert!(parent
            .children(h3o::Resolution::Eight)
            .all(|c| n.contains(&c)));
        assert!(n.len() >= 19 && n.len() <= 26);
    }
}

/// Merges outliers into incidents: two outlier cells of the same kind belong together when they
/// are neighbours (H3 grid distance 1) and name at least one common changeset. Input order is
/// kept within an incident; incidents come strongest first (smallest p-value).
#[must_use]
pub fn incidents(outliers: &[crate::summary::Outlier]) -> Vec<crate::summary::Incident> {
    let cells: Vec<Option<CellIndex>> = outliers.iter().map(|o| o.cell.parse().ok()).collect();
    let n = outliers.len();
    let mut parent: Vec<usize> = (0..n).collect();
    fn find(parent: &mut [usize], mut i: usize) -> usize {
        while parent[i] != i {
            parent[i] = parent[parent[i]];
            i = parent[i];
        }
        i
    }
    for i in 0..n {
        for j in i + 1..n {
            let (a, b) = (&outliers[i], &outliers[j]);
            let near = match (cells[i], cells[j]) {
                (Some(x), Some(y)) => x.grid_distance(y).is_ok_and(|d| d <= 1),
                _ => false,
            };
            if a.kind == b.kind && near && a.changesets.iter().any(|c| b.changesets.contains(c)) {
                let (ri, rj) = (find(&mut parent, i), find(&mut parent, j));
                parent[rj] = ri;
            }
        }
    }
    let mut groups: std::collections::BTreeMap<usize, Vec<usize>> =
        std::collections::BTreeMap::new();
    for i in 0..n {
        let r = find(&mut parent, i);
        groups.entry(r).or_default().push(i);
    }
    let mut out: Vec<crate::summary::Incident> = groups
        .into_values()
        .map(|members| {
            let os: Vec<&crate::summary::Outlier> = members.iter().map(|&i| &outliers[i]).collect();
            let observed: u64 = os.iter().map(|o| o.observed).sum();
            #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
            let w = |o: &crate::summary::Outlier| o.observed.max(1) as f64;
            let wsum: f64 = os.iter().map(|o| w(o)).sum();
            let lat = os.iter().map(|o| o.lat * w(o)).sum::<f64>() / wsum;
            let lon = os.iter().map(|o| o.lon * w(o)).sum::<f64>() / wsum;
            let mut bbox = [
                f64::INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::NEG_INFINITY,
            ];
            for c in members.iter().filter_map(|&i| cells[i]) {
                for v in c.boundary().iter() {
                    bbox[0] = bbox[0].min(v.lng());
                    bbox[1] = bbox[1].min(v.lat());
                    bbox[2] = bbox[2].max(v.lng());
                    bbox[3] = bbox[3].max(v.lat());
                }
            }
            let mut changesets: Vec<i64> = Vec::new();
            let mut mappers: Vec<String> = Vec::new();
            for o in &os {
                for c in &o.changesets {
                    if !changesets.contains(c) {
                        changesets.push(*c);
                    }
                }
                for m in &o.mappers {
                    if !mappers.contains(m) {
                        mappers.push(m.clone());
                    }
                }
            }
            if !bbox.iter().all(|v| v.is_finite()) {
                // No parsable cell (outliers built elsewhere): a box around the centre point.
                bbox = [lon, lat, lon, lat];
            }
            let round = |x: f64| (x * 1e6).round() / 1e6;
            crate::summary::Incident {
                kind: os[0].kind.clone(),
                cells: os.iter().map(|o| o.cell.clone()).collect(),
                lat: round(lat),
                lon: round(lon),
                bbox: bbox.map(round),
                observed,
                expected: (os.iter().map(|o| o.expected).sum::<f64>() * 1000.0).round() / 1000.0,
                p_value: os.iter().map(|o| o.p_value).fold(1.0, f64::min),
                q_value: os.iter().map(|o| o.q_value).fold(1.0, f64::min),
                changesets,
                mappers,
            }
        })
        .collect();
    out.sort_by(|a, b| {
        a.p_value
            .total_cmp(&b.p_value)
            .then(a.kind.cmp(&b.kind))
            .then(a.cells.cmp(&b.cells))
    });
    out
}

#[cfg(test)]
mod incident_tests {
    use super::*;
    use crate::summary::Outlier;

    fn outlier(kind: &str, cell: CellIndex, observed: u64, p: f64, changesets: &[i64]) -> Outlier {
        let c = h3o::LatLng::from(cell);
        Outlier {
            kind: kind.to_owned(),
            cell: cell.to_string(),
            lat: c.lat(),
            lon: c.lng(),
            observed,
            expected: 1.0,
            p_value: p,
            q_value: p * 10.0,
            measure: String::new(),
            baseline_source: "own".to_owned(),
            changesets: changesets.to_vec(),
            mappers: changesets.iter().map(|c| format!("m{c}")).collect(),
        }
    }

    #[test]
    fn neighbours_sharing_changesets_merge() {
        let a = h3o::LatLng::new(45.2, -33.6)
            .unwrap()
            .to_cell(h3o::Resolution::Eight);
        let ring: Vec<CellIndex> = a.grid_ring_fast(1).flatten().collect();
        let far = a.grid_ring_fast(3).flatten().next().unwrap();
        let os = vec![
            outlier("deletion_burst", a, 30, 1e-9, &[1, 2]),
            outlier("deletion_burst", ring[0], 10, 1e-5, &[2, 3]),
            // Neighbour, same kind, no shared changeset: its own incident.
            outlier("deletion_burst", ring[1], 12, 1e-4, &[9]),
            // Same changesets, other kind: its own incident.
            outlier("rename_spam", ring[0], 8, 1e-6, &[1]),
            // Same kind and changesets, not a neighbour: its own incident.
            outlier("deletion_burst", far, 8, 1e-3, &[1]),
        ];
        let inc = incidents(&os);
        assert_eq!(inc.len(), 4);
        assert_eq!(inc[0].cells.len(), 2);
        assert_eq!(inc[0].observed, 40);
        assert_eq!(inc[0].changesets, vec![1, 2, 3]);
        assert!((inc[0].p_value - 1e-9).abs() < 1e-18);
        assert!(inc[0].bbox[0] < inc[0].lon && inc[0].lon < inc[0].bbox[2]);
        assert_eq!(inc[1].kind, "rename_spam");
    }
}
