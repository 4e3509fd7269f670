//! Resampling the test rows: percentile bootstrap intervals and the optimism of picking the best
//! of several submissions.

use crate::rng::SplitRng;

/// Linear-interpolation quantile of sorted values (numpy's default).
pub fn quantile(sorted: &[f64], q: f64) -> f64 {
    let pos = q * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo as f64)
}

/// A resample of `n` rows with replacement.
pub(crate) fn resample(rng: &mut SplitRng, n: usize, out: &mut Vec<u32>) {
    out.clear();
    out.extend((0..n).map(|_| rng.below(n as u64) as u32));
}

/// A percentile bootstrap interval of `f` over `n` rows.
pub fn bootstrap_interval(
    n: usize,
    resamples: usize,
    confidence: f64,
    seed: u64,
    f: impl Fn(&[u32]) -> Option<f64>,
) -> (f64, f64) {
    let mut rng = SplitRng::with_context("cleave 2026-12-02 bootstrap interval v1", seed);
    let mut idx = Vec::with_capacity(n);
    let mut values = Vec::with_capacity(resamples);
    for _ in 0..resamples {
        resample(&mut rng, n, &mut idx);
        if let Some(v) = f(&idx) {
            values.push(v);
        }
    }
    values.sort_by(f64::total_cmp);
    if values.is_empty() {
        return (f64::NAN, f64::NAN);
    }
    let tail = (1.0 - confidence) / 2.0;
    (quantile(&values, tail), quantile(&values, 1.0 - tail))
}

/// Optimism of the best of several submissions (see the module's notes):
/// `full[j]` is submission j's value on all rows, `f(j, rows)` its value on
/// a resample. Returns the optimism, never negative.
pub fn optimism(
    n: usize,
    full: &[f64],
    higher_is_better: bool,
    resamples: usize,
    seed: u64,
    f: impl Fn(usize, &[u32]) -> Option<f64>,
) -> f64 {
    let mut rng = SplitRng::with_context("cleave 2026-12-02 selection optimism v1", seed);
    let mut idx = Vec::with_capacity(n);
    let (mut sum, mut count) = (0.0, 0u64);
    for _ in 0..resamples {
        resample(&mut rng, n, &mut idx);
        let mut best: Option<f64> = None;
        for (j, &fj) in full.iter().enumerate() {
            let Some(v) = f(j, &idx) else { continue };
            let d = v - fj;
            best = Some(match best {
                None => d,
                Some(b) if higher_is_better => b.max(d),
                Some(b) => b.min(d),
            });
        }
        if let Some(b) = best {
            sum += b;
            count += 1;
        }
    }
    if count == 0 {
        return 0.0;
    }
    (sum / count as f64).abs()
}
