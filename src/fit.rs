//! Fitting scores from labels: L2-regularised logistic regression on standardised features,
//! solved by Newton's method (iteratively reweighted least squares), and the versioned JSON model
//! file that `report --model` loads.
//!
//! The objective is the one scikit-learn's `LogisticRegression(C = 1 / l2)` minimises on the same
//! standardised matrix: the summed log-loss plus `l2 / 2 · |w|²`, the intercept unpenalised.
//! A test compares the fit with scikit-learn's on a committed dataset. With at most a few dozen
//! features the Newton step is a small dense solve (Cholesky), and the optimum is reached to
//! machine precision in a handful of iterations, which a first-order method would not promise.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::features::{ChangesetFeatures, FEATURES};
use crate::score::{logistic, Scored};

/// The `format` field of a model file.
pub const MODEL_FORMAT: &str = "hexvigil-logistic-model";
/// The model file version this build writes and reads.
pub const MODEL_VERSION: u32 = 1;
/// Newton iterations before giving up.
const MAX_ITERATIONS: usize = 100;
/// Contributions below this (log-odds) are not worth telling a reviewer.
const REASON_MIN: f64 = 0.25;
/// At most this many reasons per changeset.
const MAX_REASONS: usize = 6;

/// Errors fitting or reading a model.
#[derive(Debug, thiserror::Error)]
pub enum FitError {
    #[error("cannot fit: {0}")]
    Data(String),
    #[error("the fit did not converge in {MAX_ITERATIONS} Newton iterations")]
    NoConvergence,
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}: not a model file: {message}")]
    Format { path: PathBuf, message: String },
}

/// A fitted logistic regression on standardised inputs.
#[derive(Debug, Clone, PartialEq)]
pub struct Logistic {
    /// Column means used for standardising.
    pub means: Vec<f64>,
    /// Column scales (population standard deviations; 1 for constant columns).
    pub scales: Vec<f64>,
    /// Weights of the standardised columns.
    pub weights: Vec<f64>,
    pub intercept: f64,
    /// Newton iterations used.
    pub iterations: usize,
}

fn log1p_exp(x: f64) -> f64 {
    if x > 0.0 {
        x + (-x).exp().ln_1p()
    } else {
        x.exp().ln_1p()
    }
}

/// Solves `a x = b` for a symmetric positive definite `a` (row-major, n × n) by Cholesky.
fn cholesky_solve(a: &[f64], b: &[f64], n: usize) -> Option<Vec<f64>> {
    let mut l = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..=i {
            let mut s = a[i * n + j];
            for k in 0..j {
                s -= l[i * n + k] * l[j * n + k];
            }
            if i == j {
                if s <= 0.0 || !s.is_finite() {
                    return None;
                }
                l[i * n + i] = s.sqrt();
            } else {
                l[i * n + j] = s / l[j * n + j];
            }
        }
    }
    let mut y = vec![0.0; n];
    for i in 0..n {
        let mut s = b[i];
        for k in 0..i {
            s -= l[i * n + k] * y[k];
        }
        y[i] = s / l[i * n + i];
    }
    let mut x = vec![0.0; n];
    for i in (0..n).rev() {
        let mut s = y[i];
        for k in i + 1..n {
            s -= l[k * n + i] * x[k];
        }
        x[i] = s / l[i * n + i];
    }
    Some(x)
}

/// Fits `P(y = 1) = logistic(b + Σ w_j z_j)` with `z` the standardised columns of `x`,
/// minimising the summed log-loss plus `l2 / 2 · |w|²`.
///
/// # Errors
/// [`FitError::Data`] for empty, ragged or non-finite input, a non-positive `l2`, or labels of
/// one class only; [`FitError::NoConvergence`] if Newton's method stalls.
#[allow(clippy::cast_precision_loss, reason = "row counts are far below 2^52")]
pub fn fit_logistic(x: &[Vec<f64>], y: &[bool], l2: f64) -> Result<Logistic, FitError> {
    let n = x.len();
    let p = x.first().map_or(0, Vec::len);
    if n == 0 || y.len() != n || x.iter().any(|r| r.len() != p) {
        return Err(FitError::Data(
            "no rows, or rows of different lengths".to_owned(),
        ));
    }
    if !(l2 > 0.0 && l2.is_finite()) {
        return Err(FitError::Data(format!(
            "the L2 penalty must be positive, not {l2}"
        )));
    }
    if x.iter().flatten().any(|v| !v.is_finite()) {
        return Err(FitError::Data("a feature value is not finite".to_owned()));
    }
    let positives = y.iter().filter(|&&v| v).count();
    if positives == 0 || positives == n {
        return Err(FitError::Data(format!(
            "labels of both classes are needed ({positives} of {n} are 1)"
        )));
    }
    let means: Vec<f64> = (0..p)
        .map(|j| x.iter().map(|r| r[j]).sum::<f64>() / n as f64)
        .collect();
    let scales: Vec<f64> = (0..p)
        .map(|j| {
            let var = x.iter().map(|r| (r[j] - means[j]).powi(2)).sum::<f64>() / n as f64;
            if var > 1e-24 {
                var.sqrt()
            } else {
                1.0
            }
        })
        .collect();
    let z: Vec<Vec<f64>> = x
        .iter()
        .map(|r| (0..p).map(|j| (r[j] - means[j]) / scales[j]).collect())
        .collect();
    // Parameters: weights 0..p, intercept at p.
    let d = p + 1;
    let mut beta = vec![0.0; d];
    let rate = positives as f64 / n as f64;
    beta[p] = (rate / (1.0 - rate)).ln();
    let eta = |b: &[f64], row: &[f64]| b[p] + row.iter().zip(b).map(|(a, w)| a * w).sum::<f64>();
    let objective = |b: &[f64]| {
        let loss: f64 = z
            .iter()
            .zip(y)
            .map(|(row, &yi)| {
                let e = eta(b, row);
                log1p_exp(e) - if yi { e } else { 0.0 }
            })
            .sum();
        loss + 0.5 * l2 * b[..p].iter().map(|w| w * w).sum::<f64>()
    };
    let mut current = objective(&beta);
    for iteration in 1..=MAX_ITERATIONS {
        let mut grad = vec![0.0; d];
        let mut hess = vec![0.0; d * d];
        for (row, &yi) in z.iter().zip(y) {
            let mu = logistic(eta(&beta, row));
            let r = mu - f64::from(u8::from(yi));
            let w = (mu * (1.0 - mu)).max(1e-300);
            for a in 0..d {
                let xa = if a == p { 1.0 } else { row[a] };
                grad[a] += r * xa;
                for b in 0..=a {
                    let xb = if b == p { 1.0 } else { row[b] };
                    hess[a * d + b] += w * xa * xb;
                }
            }
        }
        for a in 0..d {
            for b in 0..a {
                hess[b * d + a] = hess[a * d + b];
            }
        }
        for j in 0..p {
            grad[j] += l2 * beta[j];
            hess[j * d + j] += l2;
        }
        let step = cholesky_solve(&hess, &grad, d).ok_or(FitError::NoConvergence)?;
        // Damped step: halve until the objective does not rise.
        let mut t = 1.0;
        let mut next: Vec<f64>;
        let mut value;
        loop {
            next = beta.iter().zip(&step).map(|(b, s)| b - t * s).collect();
            value = objective(&next);
            if value <= current + 1e-12 * current.abs() || t < 1e-10 {
                break;
            }
            t *= 0.5;
        }
        let moved = step.iter().map(|s| (t * s).abs()).fold(0.0, f64::max);
        beta = next;
        current = value;
        let gmax = grad.iter().map(|g| g.abs()).fold(0.0, f64::max);
        if moved < 1e-10 || gmax < 1e-10 {
            let intercept = beta[p];
            beta.truncate(p);
            return Ok(Logistic {
                means,
                scales,
                weights: beta,
                intercept,
                iterations: iteration,
            });
        }
    }
    Err(FitError::NoConvergence)
}

impl Logistic {
    /// Log-odds for one row of raw (unstandardised) features.
    #[must_use]
    pub fn logit(&self, row: &[f64]) -> f64 {
        self.intercept
            + row
                .iter()
                .zip(&self.means)
                .zip(&self.scales)
                .zip(&self.weights)
                .map(|(((v, m), s), w)| w * (v - m) / s)
                .sum::<f64>()
    }
}

/// What a model was trained on.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Training {
    pub positives: u64,
    pub negatives: u64,
    /// The L2 penalty (scikit-learn's `1 / C`).
    pub l2: f64,
    pub iterations: u64,
}

/// A model file: the fitted weights with everything needed to apply them.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Model {
    /// Always [`MODEL_FORMAT`].
    pub format: String,
    /// [`MODEL_VERSION`].
    pub version: u32,
    /// Feature names (from [`FEATURES`]), in the order of the vectors below.
    pub features: Vec<String>,
    pub means: Vec<f64>,
    pub scales: Vec<f64>,
    /// Weights of the standardised features (log-odds per standard deviation).
    pub weights: Vec<f64>,
    pub intercept: f64,
    pub training: Training,
    /// Index into [`FEATURES`] of each entry of `features` (filled on load).
    #[serde(skip)]
    columns: Vec<usize>,
}

impl Model {
    /// Fits a model on changesets and their labels (true = vandalism), over every feature.
    ///
    /// # Errors
    /// As [`fit_logistic`].
    pub fn fit(rows: &[(&ChangesetFeatures, bool)], l2: f64) -> Result<Self, FitError> {
        let x: Vec<Vec<f64>> = rows.iter().map(|(c, _)| c.vector()).collect();
        let y: Vec<bool> = rows.iter().map(|r| r.1).collect();
        let fit = fit_logistic(&x, &y, l2)?;
        let positives = y.iter().filter(|&&v| v).count() as u64;
        Ok(Self {
            format: MODEL_FORMAT.to_owned(),
            version: MODEL_VERSION,
            features: FEATURES.iter().map(|f| f.name.to_owned()).collect(),
            means: fit.means,
            scales: fit.scales,
            weights: fit.weights,
            intercept: fit.intercept,
            training: Training {
                positives,
                negatives: y.len() as u64 - positives,
                l2,
                iterations: fit.iterations as u64,
            },
            columns: (0..FEATURES.len()).collect(),
        })
    }

    /// Reads and checks a model file: format, version, known feature names, lengths, finite
    /// numbers and positive scales.
    ///
    /// # Errors
    /// [`FitError::Io`] or [`FitError::Format`] naming the file.
    pub fn load(path: &Path) -> Result<Self, FitError> {
        let text = std::fs::read_to_string(path).map_err(|source| FitError::Io {
            path: path.to_owned(),
            source,
        })?;
        let bad = |message: String| FitError::Format {
            path: path.to_owned(),
            message,
        };
        let mut m: Self = serde_json::from_str(&text).map_err(|e| bad(e.to_string()))?;
        if m.format != MODEL_FORMAT {
            return Err(bad(format!(
                "format is {:?}, not {MODEL_FORMAT:?}",
                m.format
            )));
        }
        if m.version != MODEL_VERSION {
            return Err(bad(format!(
                "version {} (this build reads version {MODEL_VERSION})",
                m.version
            )));
        }
        let k = m.features.len();
        if m.means.len() != k || m.scales.len() != k || m.weights.len() != k {
            return Err(bad(
                "features, means, scales and weights differ in length".to_owned()
            ));
        }
        let numbers = m.means.iter().chain(&m.weights).chain([&m.intercept]);
        if numbers.into_iter().any(|v| !v.is_finite())
            || m.scales.iter().any(|s| !(s.is_finite() && *s > 0.0))
        {
            return Err(bad(
                "a number is not finite, or a scale is not positive".to_owned()
            ));
        }
        m.columns = m
            .features
            .iter()
            .map(|name| {
                FEATURES
                    .iter()
                    .position(|f| f.name == name)
                    .ok_or_else(|| bad(format!("unknown feature {name:?}")))
            })
            .collect::<Result<_, _>>()?;
        Ok(m)
    }

    /// Writes the model as pretty JSON.
    ///
    /// # Errors
    /// [`FitError::Io`] naming the file.
    pub fn save(&self, path: &Path) -> Result<(), FitError> {
        let io = |source| FitError::Io {
            path: path.to_owned(),
            source,
        };
        let mut text = serde_json::to_string_pretty(self)
            .map_err(|e| io(std::io::Error::other(e.to_string())))?;
        text.push('\n');
        std::fs::write(path, text).map_err(io)
    }

    /// Each feature's contribution to the log-odds (weight × standardised value), in the
    /// model's feature order.
    #[must_use]
    pub fn contributions(&self, c: &ChangesetFeatures) -> Vec<(usize, f64)> {
        self.columns
            .iter()
            .enumerate()
            .map(|(k, &col)| {
                let v = FEATURES[col].value(c);
                (col, self.weights[k] * (v - self.means[k]) / self.scales[k])
            })
            .collect()
    }

    /// Scores a changeset; the reasons are the largest contributions, in words.
    #[must_use]
    pub fn score(&self, c: &ChangesetFeatures) -> Scored {
        let contributions = self.contributions(c);
        let logit = self.intercept + contributions.iter().map(|x| x.1).sum::<f64>();
        // Features that read the same in words (the account-age family) are told once.
        let mut reasons: Vec<(f64, String)> = Vec::new();
        for (col, v) in contributions {
            let words = FEATURES[col].words(c);
            match reasons.iter_mut().find(|r| r.1 == words) {
                Some(r) => r.0 += v,
                None => reasons.push((v, words)),
            }
        }
        reasons.retain(|r| r.0.abs() >= REASON_MIN);
        reasons.sort_by(|a, b| b.0.abs().total_cmp(&a.0.abs()).then(a.1.cmp(&b.1)));
        reasons.truncate(MAX_REASONS);
        Scored {
            score: logistic(logit),
            reasons,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cholesky_solves_a_small_system() {
        let a = [4.0, 2.0, 2.0, 3.0];
        let x = cholesky_solve(&a, &[2.0, 1.0], 2).unwrap();
        assert!((4.0 * x[0] + 2.0 * x[1] - 2.0).abs() < 1e-12);
        assert!((2.0 * x[0] + 3.0 * x[1] - 1.0).abs() < 1e-12);
        assert!(cholesky_solve(&[0.0], &[1.0], 1).is_none());
    }

    #[test]
    fn one_class_is_refused() {
        let x = vec![vec![1.0], vec![2.0]];
        assert!(matches!(
            fit_logistic(&x, &[true, true], 1.0),
            Err(FitError::Data(_))
        ));
    }

    #[test]
    fn stronger_penalty_shrinks_weights() {
        let x: Vec<Vec<f64>> = (0..40)
            .map(|i| vec![f64::from(i % 10), f64::from(i % 3)])
            .collect();
        let y: Vec<bool> = (0..40).map(|i| i % 10 >= 6 || i % 7 == 0).collect();
        let weak = fit_logistic(&x, &y, 0.01).unwrap();
        let strong = fit_logistic(&x, &y, 100.0).unwrap();
        assert!(strong.weights[0].abs() < weak.weights[0].abs());
        assert!(weak.weights[0] > 0.0);
    }
}
