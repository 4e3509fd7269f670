//! Partition shares and exact counts by largest remainder.
//!
//! Shares are parsed from decimal text into integer weights, so that quotas
//! and their remainders are exact rationals: no float rounding decides which
//! partition gets a row.

use crate::error::{Error, Result};
use crate::seal::manifest::Partition;

/// The asked shares: two (train, test) or three (train, validation, test).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Ratios {
    partitions: Vec<Partition>,
    weights: Vec<u128>,
    total: u128,
    text: Vec<String>,
}

fn parse_decimal(text: &str) -> Option<(u128, u32)> {
    let (int, frac) = match text.split_once('.') {
        Some((i, f)) => (i, f),
        None => (text, ""),
    };
    if int.is_empty() && frac.is_empty() {
        return None;
    }
    if !int.bytes().all(|b| b.is_ascii_digit()) || !frac.bytes().all(|b| b.is_ascii_digit()) || frac.len() > 12 {
        return None;
    }
    let digits = format!("{int}{frac}");
    Some((digits.parse().ok()?, frac.len() as u32))
}

impl Ratios {
    /// Parses `70,15,15`, `0.8,0.2`, ...: percentages summing to 100 or
    /// fractions summing to 1, exactly.
    ///
    /// # Errors
    /// Not two or three values, values that are not plain non-negative
    /// decimals, a zero share, or a sum other than 1 or 100.
    pub fn parse(text: &str) -> Result<Ratios> {
        let parts: Vec<&str> = text.split(',').map(str::trim).collect();
        let partitions = match parts.len() {
            2 => vec![Partition::Train, Partition::Test],
            3 => vec![Partition::Train, Partition::Validation, Partition::Test],
            n => {
                return Err(Error::Options(format!(
                    "--ratios takes two (train,test) or three (train,validation,test) shares, got {n}"
                )))
            }
        };
        let mut parsed = Vec::new();
        for (p, part) in partitions.iter().zip(&parts) {
            if part.starts_with('-') {
                return Err(Error::Options(format!("--ratios: the {p} share `{part}` is negative")));
            }
            let v = parse_decimal(part)
                .ok_or_else(|| Error::Options(format!("--ratios: the {p} share `{part}` is not a number")))?;
            if v.0 == 0 {
                return Err(Error::Options(format!(
                    "--ratios: the {p} share is zero; leave the partition out instead"
                )));
            }
            parsed.push(v);
        }
        let scale = parsed.iter().map(|&(_, s)| s).max().unwrap_or(0);
        let weights: Vec<u128> = parsed.iter().map(|&(v, s)| v * 10u128.pow(scale - s)).collect();
        let total: u128 = weights.iter().sum();
        let one = 10u128.pow(scale);
        if total != one && total != 100 * one {
            let shown = total as f64 / one as f64;
            return Err(Error::Options(format!(
                "--ratios `{text}` add up to {shown}; they must add up to 100 (percent) or 1 (fractions)"
            )));
        }
        Ok(Ratios { partitions, weights, total, text: parts.iter().map(|s| s.to_string()).collect() })
    }

    /// The partitions, in order.
    pub fn partitions(&self) -> &[Partition] {
        &self.partitions
    }

    /// The shares as given.
    pub fn text(&self) -> &[String] {
        &self.text
    }

    /// The shares as integer weights (their sum is 1 or 100 times a power of ten).
    pub(crate) fn weights(&self) -> &[u128] {
        &self.weights
    }

    /// The share of partition `i` as a fraction.
    pub fn share(&self, i: usize) -> f64 {
        self.weights[i] as f64 / self.total as f64
    }

    /// Splits `n` rows by largest remainder: each partition gets the floor of
    /// its exact quota, and the rows left over go to the largest remainders.
    /// Equal remainders go first to the partition furthest below its exact
    /// share of all rows allocated so far (`done` holds the counts of the
    /// earlier strata and is updated), then to the earlier partition. So each
    /// stratum is within one row of its exact share in every partition, and
    /// the totals drift as little as the ties allow.
    pub fn allocate(&self, n: u64, done: &mut [u64]) -> Vec<u64> {
        let k = self.weights.len();
        let n128 = n as u128;
        let mut counts: Vec<u64> = self.weights.iter().map(|w| (n128 * w / self.total) as u64).collect();
        let remainders: Vec<u128> = self.weights.iter().map(|w| n128 * w % self.total).collect();
        let left = n - counts.iter().sum::<u64>();
        let all_before: u128 = done.iter().map(|&d| d as u128).sum::<u128>() + n128;
        // deficit_i x total = exact share of everything so far - what i would hold.
        let deficit = |i: usize, counts: &[u64]| -> i128 {
            (all_before * self.weights[i]) as i128 - ((done[i] + counts[i]) as u128 * self.total) as i128
        };
        let mut order: Vec<usize> = (0..k).collect();
        let base = counts.clone();
        order.sort_by(|&a, &b| {
            remainders[b].cmp(&remainders[a]).then(deficit(b, &base).cmp(&deficit(a, &base))).then(a.cmp(&b))
        });
        for &i in order.iter().take(left as usize) {
            counts[i] += 1;
        }
        for (d, c) in done.iter_mut().zip(&counts) {
            *d += c;
        }
        counts
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_percentages_and_fractions() {
        let r = Ratios::parse("70,15,15").unwrap();
        assert_eq!(r.partitions(), [Partition::Train, Partition::Validation, Partition::Test]);
        assert_eq!(Ratios::parse("0.7,0.15,0.15").unwrap().share(1), 0.15);
        assert_eq!(Ratios::parse("0.8,0.2").unwrap().partitions(), [Partition::Train, Partition::Test]);
        for bad in ["70,20,20", "0.7,0.2,0.2", "-10,110", "a,b", "100", "50,0,50", "1,1,1,1"] {
            assert!(Ratios::parse(bad).is_err(), "{bad}");
        }
    }

    // Largest remainder (Hamilton's method): 10 rows at 70/15/15 have quotas
    // 7, 1.5, 1.5; one row is left and goes to validation (tie, earlier).
    #[test]
    fn largest_remainder_worked_example() {
        let r = Ratios::parse("70,15,15").unwrap();
        let mut done = vec![0; 3];
        assert_eq!(r.allocate(10, &mut done), [7, 2, 1]);
        // The next stratum's tie goes to test, now furthest below its share.
        assert_eq!(r.allocate(10, &mut done), [7, 1, 2]);
        assert_eq!(done, [14, 3, 3]);
    }

    #[test]
    fn every_count_within_one_row_of_its_quota() {
        let r = Ratios::parse("33.3,33.3,33.4").unwrap();
        for n in 0..500u64 {
            let counts = r.allocate(n, &mut [0, 0, 0]);
            assert_eq!(counts.iter().sum::<u64>(), n);
            for (i, c) in counts.iter().enumerate() {
                let exact = n as f64 * r.share(i);
                assert!((*c as f64 - exact).abs() < 1.0, "n={n} i={i} c={c} exact={exact}");
            }
        }
    }
}
