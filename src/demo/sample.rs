//! Small random draws the scenario needs beyond `rand`'s uniform ones: normal, log-normal and
//! Poisson variates and weighted choice, all from the one seeded generator.

use rand::Rng;
use rand_chacha::ChaCha8Rng;

/// A standard normal variate (Box-Muller).
pub(super) fn normal(rng: &mut ChaCha8Rng) -> f64 {
    // 1 - [0, 1) lies in (0, 1], so the logarithm is finite.
    let u1: f64 = 1.0 - rng.gen::<f64>();
    let u2: f64 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// A log-normal count with the given median and log-scale spread, clamped to `[min, max]`.
pub(super) fn lognormal_count(
    rng: &mut ChaCha8Rng,
    median: f64,
    sigma: f64,
    min: u32,
    max: u32,
) -> u32 {
    let v = (median.ln() + sigma * normal(rng)).exp().round();
    clamp_count(v, min, max)
}

fn clamp_count(v: f64, min: u32, max: u32) -> u32 {
    if v.is_nan() || v <= f64::from(min) {
        min
    } else if v >= f64::from(max) {
        max
    } else {
        // In range, checked just above.
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "in range"
        )]
        let n = v as u32;
        n
    }
}

/// A Poisson count: Knuth's product method for small means, a rounded normal approximation
/// above 30 where the difference does not matter for mapping volumes.
pub(super) fn poisson(rng: &mut ChaCha8Rng, lambda: f64) -> u32 {
    if lambda.is_nan() || lambda <= 0.0 {
        return 0;
    }
    if lambda < 30.0 {
        let limit = (-lambda).exp();
        let mut k = 0;
        let mut p: f64 = rng.gen();
        while p > limit {
            k += 1;
            p *= rng.gen::<f64>();
        }
        return k;
    }
    clamp_count(lambda + lambda.sqrt() * normal(rng), 0, u32::MAX)
}

/// Picks one item with probability proportional to its weight; `None` when all weights are 0.
pub(super) fn weighted<T: Copy>(rng: &mut ChaCha8Rng, items: &[(T, f64)]) -> Option<T> {
    let total: f64 = items.iter().map(|(_, w)| w.max(0.0)).sum();
    if total.is_nan() || total <= 0.0 {
        return None;
    }
    let mut r = rng.gen::<f64>() * total;
    let mut last = None;
    for &(item, w) in items {
        if w <= 0.0 {
            continue;
        }
        if r < w {
            return Some(item);
        }
        r -= w;
        last = Some(item);
    }
    last
}

/// Up to `n` distinct items of `pool`, in random order (partial Fisher-Yates).
pub(super) fn choose_n<T: Copy>(rng: &mut ChaCha8Rng, pool: &mut [T], n: usize) -> Vec<T> {
    let n = n.min(pool.len());
    for i in 0..n {
        let j = rng.gen_range(i..pool.len());
        pool.swap(i, j);
    }
    pool[..n].to_vec()
}

/// A 64-bit mix (SplitMix64's finaliser) for decisions that must depend only on an id and the
/// seed, not on how many draws came before.
pub(super) fn mix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}
