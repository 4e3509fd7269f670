//! The score room's unit tests.

use super::metric::{metric_value, Metric};
use super::predictions::Predictions;
use super::resample::{bootstrap_interval, optimism, quantile};
use super::truth::Truth;
use crate::rng::SplitRng;

fn all(n: usize) -> Vec<u32> {
    (0..n as u32).collect()
}

// Hand-worked: y = 1, 2, 3; p = 1, 2, 4. Errors 0, 0, 1: mse = mae = 1/3,
// rmse = 0.57735; SS_tot = 2, SS_res = 1, r2 = 0.5.
#[test]
fn regression_metrics_by_hand() {
    let t = Truth::Numbers(vec![1.0, 2.0, 3.0]);
    let p = Predictions::Numbers(vec![1.0, 2.0, 4.0]);
    let v = |m| metric_value(m, &t, &p, None, &all(3)).unwrap();
    assert!((v(Metric::Mse) - 1.0 / 3.0).abs() < 1e-12);
    assert!((v(Metric::Mae) - 1.0 / 3.0).abs() < 1e-12);
    assert!((v(Metric::Rmse) - (1.0f64 / 3.0).sqrt()).abs() < 1e-12);
    assert!((v(Metric::R2) - 0.5).abs() < 1e-12);
}

// The ROC AUC example of scikit-learn's documentation (from memory):
// y = 0, 0, 1, 1 and scores 0.1, 0.4, 0.35, 0.8 give 0.75.
#[test]
fn auc_worked_example() {
    let t = Truth::Classes { names: vec!["0".into(), "1".into()], y: vec![0, 0, 1, 1] };
    let s = [0.1, 0.4, 0.35, 0.8];
    let p = Predictions::Probabilities { classes: 2, p: s.iter().flat_map(|&x| [1.0 - x, x]).collect() };
    assert!((metric_value(Metric::Auc, &t, &p, Some(1), &all(4)).unwrap() - 0.75).abs() < 1e-12);
    // Accuracy by argmax: 0.1 -> 0, 0.4 -> 0, 0.35 -> 0 (wrong), 0.8 -> 1.
    assert!((metric_value(Metric::Accuracy, &t, &p, None, &all(4)).unwrap() - 0.75).abs() < 1e-12);
    // F1 of class 1: TP 1, FN 1, FP 0 -> 2/3.
    assert!((metric_value(Metric::F1, &t, &p, Some(1), &all(4)).unwrap() - 2.0 / 3.0).abs() < 1e-12);
    // log-loss: -(ln 0.9 + ln 0.6 + ln 0.35 + ln 0.8) / 4.
    let want = -((0.9f64).ln() + (0.6f64).ln() + (0.35f64).ln() + (0.8f64).ln()) / 4.0;
    assert!((metric_value(Metric::LogLoss, &t, &p, None, &all(4)).unwrap() - want).abs() < 1e-12);
}

#[test]
fn quantiles_interpolate_like_numpy() {
    // numpy.quantile([1, 2, 3, 4], 0.25) = 1.75 (linear method).
    assert_eq!(quantile(&[1.0, 2.0, 3.0, 4.0], 0.25), 1.75);
    assert_eq!(quantile(&[1.0, 2.0, 3.0, 4.0], 1.0), 4.0);
}

fn normal(rng: &mut SplitRng) -> f64 {
    // Box-Muller from two uniform draws.
    let u1 = (rng.below(1 << 53) as f64 + 0.5) / (1u64 << 53) as f64;
    let u2 = rng.below(1 << 53) as f64 / (1u64 << 53) as f64;
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

// Coverage of the 95% percentile interval of a mean over seeded
// repetitions: close to nominal (binomial sd over 400 repetitions is 1.1
// points, so 91.5 to 98.5 is three of them).
#[test]
fn bootstrap_interval_covers_about_95_percent() {
    let mut rng = SplitRng::new(99);
    let (reps, n) = (400, 200);
    let mut covered = 0;
    for r in 0..reps {
        let x: Vec<f64> = (0..n).map(|_| 3.0 + normal(&mut rng)).collect();
        let mean = |idx: &[u32]| Some(idx.iter().map(|&i| x[i as usize]).sum::<f64>() / idx.len() as f64);
        let (lo, hi) = bootstrap_interval(n, 1000, 0.95, r, mean);
        if lo <= 3.0 && 3.0 <= hi {
            covered += 1;
        }
    }
    let rate = covered as f64 / reps as f64;
    assert!((0.915..=0.985).contains(&rate), "coverage of the 95% interval over {reps} repetitions: {rate:.4}");
}

// The expected minimum of two independent N(mu, sigma^2) is
// mu - sigma / sqrt(pi) (a standard order-statistics result): 4.436 for
// mu = 5, sigma = 1. Two submissions of equal merit, per-row losses
// N(5, n) so that each test-set mean is N(5, 1): the best observed score
// averages 4.436, and the optimism estimate recovers the 0.564 gap.
#[test]
fn optimism_recovers_the_expected_minimum_of_two_normals() {
    let mut rng = SplitRng::new(7);
    let (reps, n) = (300usize, 100usize);
    let (mut best_sum, mut opt_sum, mut corrected_sum) = (0.0, 0.0, 0.0);
    for r in 0..reps {
        let losses: Vec<Vec<f64>> =
            (0..2).map(|_| (0..n).map(|_| 5.0 + (n as f64).sqrt() * normal(&mut rng)).collect()).collect();
        let mean =
            |j: usize, idx: &[u32]| Some(idx.iter().map(|&i| losses[j][i as usize]).sum::<f64>() / idx.len() as f64);
        let full: Vec<f64> = (0..2).map(|j| mean(j, &all(n)).unwrap()).collect();
        let best = full[0].min(full[1]);
        let o = optimism(n, &full, false, 400, r as u64, mean);
        best_sum += best;
        opt_sum += o;
        corrected_sum += best + o;
    }
    let gap = 1.0 / std::f64::consts::PI.sqrt();
    let (best, opt, corrected) = (best_sum / reps as f64, opt_sum / reps as f64, corrected_sum / reps as f64);
    assert!((best - (5.0 - gap)).abs() < 0.1, "best of two averages {best}, expected 4.436");
    assert!((opt - gap).abs() < 0.05, "optimism averages {opt}, expected {gap}");
    assert!((corrected - 5.0).abs() < 0.1, "corrected averages {corrected}");
}
