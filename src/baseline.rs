//! Each cell's expectation for the report week, from its own previous weeks shrunk toward its
//! neighbourhood: a Gamma-Poisson (empirical Bayes) model.
//!
//! The weekly count of a cell is Poisson with rate λ; λ has a Gamma(α, β) prior (shape α,
//! rate β) fitted by the method of moments to the weekly counts of the cell's neighbourhood (its
//! H3 grid disk). After `n` weeks of own history summing to `s`, the posterior is
//! Gamma(α + s, β + n) and next week's count is negative binomial with `r = α + s` and
//! `p = (β + n) / (β + n + 1)`. A quiet cell's expectation stays near its neighbourhood's; a
//! busy cell's follows its own history.
//!
//! Real weekly counts vary more than a constant-rate Poisson allows (a cleanup week, a mapping
//! party). That week-to-week spread is a second Gamma factor with shape `k`, fitted on the
//! neighbourhood's own weekly histories ([`fit_dispersion`]). The predictive count then has mean
//! `μ = a / b` and variance `μ + μ² (1/a + 1/k + 1/(a k))`, and is reported as the negative
//! binomial with the same mean and variance (`r = 1 / (1/a + 1/k + 1/(a k))`). Without extra
//! spread (`k = ∞`) this is exactly the Gamma-Poisson predictive above.

use statrs::function::beta::checked_beta_reg;
use statrs::function::gamma::checked_gamma_lr;

/// Gamma prior on a cell's weekly rate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Prior {
    /// Shape.
    pub alpha: f64,
    /// Rate, in weeks: how many weeks of history the prior is worth.
    pub beta: f64,
}

/// Bounds on the prior fit.
#[derive(Debug, Clone, Copy)]
pub struct PriorBounds {
    /// Smallest prior mean per cell-week, so an all-zero neighbourhood does not make any count
    /// infinitely surprising.
    pub floor_mean: f64,
    /// Prior weight bounds, in weeks.
    pub min_beta: f64,
    pub max_beta: f64,
}

impl Default for PriorBounds {
    fn default() -> Self {
        Self {
            floor_mean: 0.05,
            min_beta: 0.25,
            max_beta: 24.0,
        }
    }
}

/// Fits a Gamma prior to neighbourhood cell-week counts by the method of moments.
///
/// Mean `m` and variance `v` of the counts: the Poisson-Gamma mixture has `E = α/β` and
/// `Var = α/β + α/β²`, so `β = m / (v − m)` and `α = m β`. With no overdispersion (`v ≤ m`) the
/// cells look alike and the prior takes its largest weight.
#[must_use]
pub fn fit_prior(samples: &[u64], bounds: &PriorBounds) -> Prior {
    #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
    let (m, v) = if samples.is_empty() {
        (0.0, 0.0)
    } else {
        let n = samples.len() as f64;
        let m = samples.iter().map(|&x| x as f64).sum::<f64>() / n;
        let v = samples.iter().map(|&x| (x as f64 - m).powi(2)).sum::<f64>() / n;
        (m, v)
    };
    let mean = m.max(bounds.floor_mean);
    let beta = if v > m && m > 0.0 {
        (m / (v - m)).clamp(bounds.min_beta, bounds.max_beta)
    } else {
        bounds.max_beta
    };
    Prior {
        alpha: mean * beta,
        beta,
    }
}

/// Negative-binomial predictive distribution of next week's count.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Predictive {
    /// Shape (number of successes), > 0.
    pub r: f64,
    /// Success probability in (0, 1): pmf C(k+r−1, k) p^r (1−p)^k, as SciPy's `nbinom(r, p)`.
    pub p: f64,
}

impl Predictive {
    /// Combines a prior with a cell's own weekly history and the week-to-week dispersion shape
    /// `k` (`f64::INFINITY` for none).
    #[must_use]
    pub fn from_history(prior: Prior, history: &[u64], k: f64) -> Self {
        #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
        let (s, n) = (history.iter().sum::<u64>() as f64, history.len() as f64);
        let a = prior.alpha + s;
        let b = prior.beta + n;
        let mean = a / b;
        let r = 1.0 / (1.0 / a + 1.0 / k + 1.0 / (a * k));
        Self {
            r,
            p: r / (r + mean),
        }
    }

    /// Expected count.
    #[must_use]
    pub fn mean(&self) -> f64 {
        self.r * (1.0 - self.p) / self.p
    }

    /// Upper tail P(X ≥ k).
    #[must_use]
    pub fn tail(&self, k: u64) -> f64 {
        nb_tail(k, self.r, self.p)
    }
}

/// Smallest dispersion shape accepted: below it one odd week would swamp every test.
pub const MIN_DISPERSION: f64 = 0.5;

/// Fits the week-to-week dispersion shape `k` by pooled method of moments over cells' weekly
/// histories: for a cell with mean `m` and sample variance `v`, a negative binomial has
/// `v = m + m² / k`, so `k = Σ m² / Σ (v − m)⁺`. Returns `f64::INFINITY` when no cell shows
/// more spread than Poisson.
#[must_use]
pub fn fit_dispersion<'a>(histories: impl IntoIterator<Item = &'a [u64]>) -> f64 {
    let (mut num, mut den) = (0.0, 0.0);
    for h in histories {
        if h.len() < 2 {
            continue;
        }
        #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
        let (n, m) = {
            let n = h.len() as f64;
            (n, h.iter().map(|&x| x as f64).sum::<f64>() / n)
        };
        if m <= 0.0 {
            continue;
        }
        #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
        let v = h.iter().map(|&x| (x as f64 - m).powi(2)).sum::<f64>() / (n - 1.0);
        num += m * m;
        den += (v - m).max(0.0);
    }
    if den <= 0.0 {
        f64::INFINITY
    } else {
        (num / den).max(MIN_DISPERSION)
    }
}

/// Upper tail P(X ≥ k) of the negative binomial with shape `r` and success probability `p`;
/// equals SciPy's `nbinom.sf(k - 1, r, p)`. Uses the identity P(X ≥ k) = I_{1−p}(k, r) with the
/// regularised incomplete beta function.
#[must_use]
pub fn nb_tail(k: u64, r: f64, p: f64) -> f64 {
    if k == 0 {
        return 1.0;
    }
    if r > 1e8 {
        return poisson_tail(k, r * (1.0 - p) / p);
    }
    #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
    let kf = k as f64;
    checked_beta_reg(kf, r, 1.0 - p).map_or(f64::NAN, |v| v.clamp(0.0, 1.0))
}

/// Upper tail P(X ≥ k) of the Poisson distribution with mean `lambda`; equals SciPy's
/// `poisson.sf(k - 1, lambda)`. Uses P(X ≥ k) = P(k, λ), the regularised lower incomplete gamma
/// function. It is the limit of [`nb_tail`] as the shape grows, which [`nb_tail`] switches to
/// when the shape is so large that the beta function loses precision.
#[must_use]
pub fn poisson_tail(k: u64, lambda: f64) -> f64 {
    if k == 0 {
        return 1.0;
    }
    if lambda <= 0.0 {
        return 0.0;
    }
    #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
    let kf = k as f64;
    checked_gamma_lr(kf, lambda).map_or(f64::NAN, |v| v.clamp(0.0, 1.0))
}

/// Benjamini-Hochberg adjusted p-values (q-values), in the input's order.
///
/// `q_(i) = min_{j ≥ i} (m / j) p_(j)`, capped at 1, for p-values sorted ascending.
#[must_use]
pub fn benjamini_hochberg(p: &[f64]) -> Vec<f64> {
    let m = p.len();
    let mut order: Vec<usize> = (0..m).collect();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]));
    let mut q = vec![1.0; m];
    let mut running = 1.0f64;
    for (rank, &i) in order.iter().enumerate().rev() {
        #[allow(clippy::cast_precision_loss, reason = "cell counts are far below 2^52")]
        let v = p[i] * m as f64 / (rank + 1) as f64;
        running = running.min(v);
        q[i] = running.min(1.0);
    }
    q
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bh_1995_example() {
        // Source: Benjamini & Hochberg (1995), J. R. Statist. Soc. B 57(1), section 4: the 15
        // p-values below give 4 rejections at q = 0.05 (SciPy's false_discovery_control agrees).
        let p = [
            0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262,
            0.5719, 0.6528, 0.7590, 1.000,
        ];
        let q = benjamini_hochberg(&p);
        assert_eq!(q.iter().filter(|&&q| q <= 0.05).count(), 4);
    }

    #[test]
    fn prior_fit_by_moments() {
        // Counts 0, 2, 4, 6: mean 3, population variance 5, so beta = 3 / 2, alpha = 4.5.
        let pr = fit_prior(&[0, 2, 4, 6], &PriorBounds::default());
        assert!((pr.beta - 1.5).abs() < 1e-12);
        assert!((pr.alpha - 4.5).abs() < 1e-12);
        // No spread: the prior takes its largest weight at the floor mean.
        let pr = fit_prior(&[0, 0, 0], &PriorBounds::default());
        assert!((pr.alpha / pr.beta - 0.05).abs() < 1e-12);
        assert!((pr.beta - 24.0).abs() < 1e-12);
    }

    #[test]
    fn dispersion_by_moments() {
        // Poisson-like histories (variance = mean) show no extra spread.
        assert!(
            fit_dispersion([&[2u64, 4, 3, 3][..]]).is_infinite()
                || fit_dispersion([&[2u64, 4, 3, 3][..]]) > 100.0
        );
        // Mean 5, sample variance 30: k = 25 / 25 = 1.
        let k = fit_dispersion([&[0u64, 0, 0, 10, 10, 10][..]]);
        assert!((k - 1.0).abs() < 1e-12, "{k}");
    }

    #[test]
    fn predictive_mean_is_posterior_mean() {
        let pr = Prior {
            alpha: 2.0,
            beta: 1.0,
        };
        let d = Predictive::from_history(pr, &[3, 5, 4], f64::INFINITY);
        // Posterior Gamma(2 + 12, 1 + 3): mean 3.5, and r = a = 14 without extra spread.
        assert!((d.mean() - 3.5).abs() < 1e-12);
        assert!((d.r - 14.0).abs() < 1e-12);
        // With week-to-week spread the mean stays and the variance grows to
        // mu + mu^2 (1/a + 1/k + 1/(a k)).
        let w = Predictive::from_history(pr, &[3, 5, 4], 2.0);
        assert!((w.mean() - 3.5).abs() < 1e-12);
        let var = w.r * (1.0 - w.p) / (w.p * w.p);
        let want = 3.5 + 3.5 * 3.5 * (1.0 / 14.0 + 0.5 + 1.0 / 28.0);
        assert!((var - want).abs() < 1e-9, "{var} vs {want}");
        assert!((d.tail(0) - 1.0).abs() < f64::EPSILON);
        assert!(d.tail(10) < d.tail(5));
    }
}
