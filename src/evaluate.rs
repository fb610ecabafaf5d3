//! Measuring scores against labels: the confusion table, precision, recall, F1 and accuracy at
//! the flag threshold, the precision-recall curve and average precision (defined as in
//! scikit-learn's `precision_recall_curve` and `average_precision_score`, which tests check
//! against), and the train/test split kept by mapper so no mapper is on both sides.

use std::collections::{BTreeMap, BTreeSet, HashSet};
use std::io::Write as _;
use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::features::{ChangesetFeatures, FeatureContext};
use crate::fit::{FitError, Model};
use crate::progress::Progress;
use crate::render::{render_pr_curve, CurveSeries, RenderError};
use crate::score::Scoring;
use crate::store::StoreError;

/// Counts at one threshold: a changeset is flagged when its score is at least the threshold.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize)]
pub struct Confusion {
    pub true_positives: u64,
    pub false_positives: u64,
    pub true_negatives: u64,
    pub false_negatives: u64,
}

#[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
fn ratio(a: u64, b: u64) -> f64 {
    if b == 0 {
        0.0
    } else {
        a as f64 / b as f64
    }
}

impl Confusion {
    /// Counts `scores` (with `labels`, true = vandalism) at `threshold`.
    #[must_use]
    pub fn at(scores: &[f64], labels: &[bool], threshold: f64) -> Self {
        let mut c = Self::default();
        for (&s, &l) in scores.iter().zip(labels) {
            match (s >= threshold, l) {
                (true, true) => c.true_positives += 1,
                (true, false) => c.false_positives += 1,
                (false, false) => c.true_negatives += 1,
                (false, true) => c.false_negatives += 1,
            }
        }
        c
    }

    /// Flagged and vandalism / flagged; 0 when nothing is flagged (scikit-learn's
    /// `zero_division=0`).
    #[must_use]
    pub fn precision(&self) -> f64 {
        ratio(
            self.true_positives,
            self.true_positives + self.false_positives,
        )
    }

    /// Flagged and vandalism / vandalism; 0 when there is no vandalism.
    #[must_use]
    pub fn recall(&self) -> f64 {
        ratio(
            self.true_positives,
            self.true_positives + self.false_negatives,
        )
    }

    /// Harmonic mean of precision and recall; 0 when both are 0.
    #[must_use]
    pub fn f1(&self) -> f64 {
        ratio(
            2 * self.true_positives,
            2 * self.true_positives + self.false_positives + self.false_negatives,
        )
    }

    /// Right answers / all.
    #[must_use]
    pub fn accuracy(&self) -> f64 {
        ratio(
            self.true_positives + self.true_negatives,
            self.true_positives + self.true_negatives + self.false_positives + self.false_negatives,
        )
    }
}

/// One point of a precision-recall curve.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PrPoint {
    /// Flag at or above this score; `None` for the closing point (precision 1, recall 0).
    pub threshold: Option<f64>,
    pub precision: f64,
    pub recall: f64,
}

/// The precision-recall curve at every distinct score, by rising threshold, closed by the point
/// (recall 0, precision 1); scikit-learn's `precision_recall_curve` with its defaults. With no
/// positive label, recall is 1 throughout (as there).
#[must_use]
pub fn pr_curve(scores: &[f64], labels: &[bool]) -> Vec<PrPoint> {
    let mut order: Vec<(f64, bool)> = scores.iter().copied().zip(labels.iter().copied()).collect();
    order.sort_by(|a, b| b.0.total_cmp(&a.0));
    let total_pos = labels.iter().filter(|&&l| l).count() as u64;
    let mut points = Vec::new();
    let (mut tp, mut fp) = (0u64, 0u64);
    let mut i = 0;
    while i < order.len() {
        let t = order[i].0;
        while i < order.len() && order[i].0.total_cmp(&t).is_eq() {
            if order[i].1 {
                tp += 1;
            } else {
                fp += 1;
            }
            i += 1;
        }
        points.push(PrPoint {
            threshold: Some(t),
            precision: ratio(tp, tp + fp),
            recall: if total_pos == 0 {
                1.0
            } else {
                ratio(tp, total_pos)
            },
        });
    }
    points.reverse();
    points.push(PrPoint {
        threshold: None,
        precision: 1.0,
        recall: 0.0,
    });
    points
}

/// Average precision: Σ (R_k − R_{k−1}) P_k over the curve by falling threshold
/// (scikit-learn's `average_precision_score`). 0 with no positive label.
#[must_use]
pub fn average_precision(scores: &[f64], labels: &[bool]) -> f64 {
    if !labels.iter().any(|&l| l) {
        return 0.0;
    }
    let curve = pr_curve(scores, labels);
    // The curve runs by rising threshold with recall falling; walk it backwards.
    let mut ap = 0.0;
    let mut prev_recall = 0.0;
    for p in curve.iter().rev() {
        ap += (p.recall - prev_recall) * p.precision;
        prev_recall = p.recall;
    }
    ap
}

/// Whether a mapper is in the test part of a split: a fixed hash of the user id and the seed
/// puts about `test_share` of mappers (not of changesets) on the test side, the same on every
/// machine and run.
#[must_use]
pub fn is_test_mapper(uid: i64, seed: u64, test_share: f64) -> bool {
    // SplitMix64 finaliser (Steele, Lea and Flood 2014), a well-mixed 64-bit hash.
    let mut z = (uid as u64) ^ seed.wrapping_mul(0x9E37_79B9_7F4A_7C15);
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^= z >> 31;
    #[allow(clippy::cast_precision_loss, reason = "a fraction in [0, 1)")]
    let u = (z >> 11) as f64 / (1u64 << 53) as f64;
    u < test_share
}

/// One scorer's results on a set of labelled changesets.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Evaluation {
    /// `scorecard`, `fitted on the training mappers`, `model FILE`, `imported FILE`.
    pub scorer: String,
    pub threshold: f64,
    pub changesets: u64,
    pub positives: u64,
    pub confusion: Confusion,
    pub precision: f64,
    pub recall: f64,
    pub f1: f64,
    pub accuracy: f64,
    pub average_precision: f64,
    #[serde(skip)]
    pub curve: Vec<PrPoint>,
}

impl Evaluation {
    /// Evaluates scores against labels at a threshold.
    #[must_use]
    pub fn new(scorer: &str, scores: &[f64], labels: &[bool], threshold: f64) -> Self {
        let confusion = Confusion::at(scores, labels, threshold);
        Self {
            scorer: scorer.to_owned(),
            threshold,
            changesets: scores.len() as u64,
            positives: labels.iter().filter(|&&l| l).count() as u64,
            confusion,
            precision: confusion.precision(),
            recall: confusion.recall(),
            f1: confusion.f1(),
            accuracy: confusion.accuracy(),
            average_precision: average_precision(scores, labels),
            curve: pr_curve(scores, labels),
        }
    }
}

/// Errors of an evaluation run.
#[derive(Debug, thiserror::Error)]
pub enum EvaluateError {
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error(transparent)]
    Render(#[from] RenderError),
    /// Nothing to evaluate.
    #[error("{0}")]
    Data(String),
    /// An option out of range.
    #[error("{0}")]
    Options(String),
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
}

/// Settings of an evaluation run.
#[derive(Debug, Clone, Copy)]
pub struct EvaluateOptions {
    /// Flag threshold for the confusion table.
    pub threshold: f64,
    /// Share of mappers held out for testing.
    pub test_share: f64,
    /// Seed of the split.
    pub seed: u64,
    /// L2 penalty of the model fitted on the training mappers.
    pub l2: f64,
}

impl Default for EvaluateOptions {
    fn default() -> Self {
        Self {
            threshold: 0.5,
            test_share: 0.3,
            seed: 1,
            l2: 1.0,
        }
    }
}

/// Sizes of one side of the split.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize)]
pub struct Side {
    pub changesets: u64,
    pub positives: u64,
    pub mappers: u64,
}

/// Everything an evaluation run measured.
#[derive(Debug, Clone, Serialize)]
pub struct EvaluationRun {
    pub train: Side,
    pub test: Side,
    /// Labelled changesets without edits in the database (no features, left out).
    pub without_edits: u64,
    /// Mappers on both sides (always 0: the split is by mapper).
    pub mappers_on_both_sides: u64,
    /// One per scorer, on the test mappers' changesets.
    pub evaluations: Vec<Evaluation>,
    /// The model fitted on the training mappers, when both classes were there.
    #[serde(skip)]
    pub fitted: Option<Model>,
}

/// A changeset's features and its label (true = vandalism).
type Labelled<'a> = (&'a ChangesetFeatures, bool);

fn side(rows: &[Labelled<'_>]) -> Side {
    Side {
        changesets: rows.len() as u64,
        positives: rows.iter().filter(|r| r.1).count() as u64,
        mappers: rows.iter().map(|r| r.0.uid).collect::<HashSet<_>>().len() as u64,
    }
}

/// Splits the labelled changesets by mapper, fits a model on the training mappers and
/// evaluates it, the default scorecard and each of `scorers` on the test mappers.
///
/// # Errors
/// On database failure, or when no labelled changeset has edits.
pub fn evaluate(
    ctx: &FeatureContext<'_>,
    labels: &BTreeMap<i64, u8>,
    scorers: &[(String, Scoring)],
    opts: &EvaluateOptions,
    progress: &Progress,
) -> Result<EvaluationRun, EvaluateError> {
    if !(opts.test_share > 0.0 && opts.test_share < 1.0) {
        return Err(EvaluateError::Options(format!(
            "the test share must be between 0 and 1, not {}",
            opts.test_share
        )));
    }
    if !(opts.l2 > 0.0 && opts.l2.is_finite()) {
        return Err(EvaluateError::Options(format!(
            "the L2 penalty must be positive, not {}",
            opts.l2
        )));
    }
    let ids: BTreeSet<i64> = labels.keys().copied().collect();
    let features = ctx.for_changesets(&ids, progress)?;
    if features.is_empty() {
        return Err(EvaluateError::Data(
            "no labelled changeset has edits in the database".to_owned(),
        ));
    }
    let labelled: Vec<(&ChangesetFeatures, bool)> = features
        .iter()
        .filter_map(|f| labels.get(&f.id).map(|&l| (f, l == 1)))
        .collect();
    let (test, train): (Vec<Labelled<'_>>, Vec<Labelled<'_>>) = labelled
        .into_iter()
        .partition(|(f, _)| is_test_mapper(f.uid, opts.seed, opts.test_share));
    if test.is_empty() {
        return Err(EvaluateError::Data(
            "no labelled changeset fell on the test side of the split".to_owned(),
        ));
    }
    let train_uids: HashSet<i64> = train.iter().map(|r| r.0.uid).collect();
    let both = test
        .iter()
        .map(|r| r.0.uid)
        .filter(|u| train_uids.contains(u))
        .collect::<HashSet<_>>()
        .len() as u64;
    let fitted = match Model::fit(&train, opts.l2) {
        Ok(m) => Some(m),
        Err(FitError::Data(m)) => {
            progress.note(&format!("no model fitted on the training mappers: {m}"));
            None
        }
        Err(e) => return Err(EvaluateError::Data(e.to_string())),
    };
    let truth: Vec<bool> = test.iter().map(|r| r.1).collect();
    let mut all: Vec<(String, Scoring)> =
        vec![("default scorecard".to_owned(), Scoring::Scorecard)];
    if let Some(m) = &fitted {
        all.push((
            "model fitted on the training mappers".to_owned(),
            Scoring::Model(m.clone()),
        ));
    }
    all.extend(scorers.iter().cloned());
    let evaluations = all
        .iter()
        .map(|(name, s)| {
            let scores: Vec<f64> = test.iter().map(|r| s.score(r.0).score).collect();
            Evaluation::new(name, &scores, &truth, opts.threshold)
        })
        .collect();
    Ok(EvaluationRun {
        train: side(&train),
        test: side(&test),
        without_edits: (labels.len() - test.len() - train.len()) as u64,
        mappers_on_both_sides: both,
        evaluations,
        fitted,
    })
}

fn io_err(path: &Path) -> impl Fn(std::io::Error) -> EvaluateError + '_ {
    move |source| EvaluateError::Io {
        path: path.to_owned(),
        source,
    }
}

/// Writes `metrics.json`, `confusion.csv`, `pr_curve.csv` and `pr_curve.png` into `dir`.
///
/// # Errors
/// When a file cannot be written.
pub fn write_run(dir: &Path, run: &EvaluationRun) -> Result<(), EvaluateError> {
    std::fs::create_dir_all(dir).map_err(io_err(dir))?;
    let path = dir.join("metrics.json");
    let mut text = serde_json::to_string_pretty(run)
        .map_err(|e| io_err(&path)(std::io::Error::other(e.to_string())))?;
    text.push('\n');
    std::fs::write(&path, text).map_err(io_err(&path))?;

    let path = dir.join("confusion.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&path).map_err(io_err(&path))?);
    let mut rows = String::from(
        "scorer,threshold,true_positives,false_positives,true_negatives,false_negatives,precision,recall,f1,accuracy,average_precision\n",
    );
    for e in &run.evaluations {
        let c = e.confusion;
        rows.push_str(&format!(
            "{},{},{},{},{},{},{:.4},{:.4},{:.4},{:.4},{:.4}\n",
            e.scorer,
            e.threshold,
            c.true_positives,
            c.false_positives,
            c.true_negatives,
            c.false_negatives,
            e.precision,
            e.recall,
            e.f1,
            e.accuracy,
            e.average_precision
        ));
    }
    f.write_all(rows.as_bytes()).map_err(io_err(&path))?;
    f.flush().map_err(io_err(&path))?;

    let path = dir.join("pr_curve.csv");
    let mut f = std::io::BufWriter::new(std::fs::File::create(&path).map_err(io_err(&path))?);
    let mut rows = String::from("scorer,threshold,precision,recall\n");
    for e in &run.evaluations {
        for p in &e.curve {
            let t = p.threshold.map_or(String::new(), |t| format!("{t}"));
            rows.push_str(&format!("{},{t},{},{}\n", e.scorer, p.precision, p.recall));
        }
    }
    f.write_all(rows.as_bytes()).map_err(io_err(&path))?;
    f.flush().map_err(io_err(&path))?;

    let points: Vec<Vec<(f64, f64)>> = run
        .evaluations
        .iter()
        .map(|e| e.curve.iter().map(|p| (p.recall, p.precision)).collect())
        .collect();
    let labels: Vec<String> = run
        .evaluations
        .iter()
        .map(|e| {
            format!(
                "{} (average precision {:.2})",
                e.scorer, e.average_precision
            )
        })
        .collect();
    let series: Vec<CurveSeries<'_>> = run
        .evaluations
        .iter()
        .zip(&points)
        .zip(&labels)
        .map(|((e, p), l)| CurveSeries {
            label: l,
            points: p,
            operating_point: (e.confusion.true_positives + e.confusion.false_positives > 0)
                .then_some((e.recall, e.precision)),
        })
        .collect();
    let subtitle = format!(
        "{} test changesets ({} labelled vandalism) of {} mappers held out; dots: flag threshold {}",
        run.test.changesets,
        run.test.positives,
        run.test.mappers,
        run.evaluations.first().map_or(0.5, |e| e.threshold)
    );
    let pix = render_pr_curve("Precision and recall of the scores", &subtitle, &series)?;
    crate::render::save_png(&pix, &dir.join("pr_curve.png"))?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn docstring_example_of_the_reference() {
        // Source: scikit-learn's precision_recall_curve docstring example.
        let c = pr_curve(&[0.1, 0.4, 0.35, 0.8], &[false, false, true, true]);
        let p: Vec<f64> = c.iter().map(|x| x.precision).collect();
        let r: Vec<f64> = c.iter().map(|x| x.recall).collect();
        let expect_p = [0.5, 2.0 / 3.0, 0.5, 1.0, 1.0];
        for (a, b) in p.iter().zip(expect_p) {
            assert!((a - b).abs() < 1e-12, "{p:?}");
        }
        assert_eq!(r, vec![1.0, 1.0, 0.5, 0.5, 0.0]);
        assert_eq!(c[1].threshold, Some(0.35));
    }

    #[test]
    fn split_is_by_mapper_and_near_its_share() {
        let test = (0..10_000).filter(|&u| is_test_mapper(u, 1, 0.3)).count();
        assert!((2_700..3_300).contains(&test), "{test}");
        assert_eq!(is_test_mapper(42, 1, 0.3), is_test_mapper(42, 1, 0.3));
        let other = (0..10_000)
            .filter(|&u| is_test_mapper(u, 1, 0.3) != is_test_mapper(u, 2, 0.3))
            .count();
        assert!(other > 1_000, "the seed changes the split");
    }
}
