//! Splitting a table into train / validation / test partitions and sealing
//! the test partition.
//!
//! Two passes over the input. The first reads only the columns the
//! assignment needs (stratify, group and order columns; the key columns for
//! `--stable` without groups) and decides every row's partition and fold.
//! The second streams every batch once, routes rows to the partition writers
//! in input order, and digests them. What stays in memory is per row a few
//! ids, a partition and a 16-byte digest, never the table.
//!
//! Everything is written into a staging folder beside the target and renamed
//! into place at the end, so the target is either absent, the old folder, or
//! the complete new one.
//!
//! The stages, one file each: [`config`] (options, checked and resolved
//! against the table), [`pass_one`], [`assign`], [`pass_two`], [`record`]
//! (the manifest), and [`output`] (lock, staging folder, commit). [`run`] is
//! their sequence.

mod assign;
mod config;
mod folds;
mod memo;
mod multilabel;
mod output;
mod pass_one;
mod pass_two;
mod ratio;
mod record;
mod rounding;
mod strata;
mod structure;

pub use self::config::{Copies, SplitConfig};
pub use self::folds::{FoldCount, Window};
use self::output::{OutputLock, Staging};
pub use self::ratio::Ratios;
use crate::error::Result;
use crate::io;
use crate::seal::manifest::{self, Manifest};

/// The partition code of a row left out (by the gap or the group rule).
pub(crate) const DROPPED: u8 = u8::MAX;

/// What a split produced.
#[derive(Debug, Clone)]
pub struct SplitOutcome {
    /// The manifest as written.
    pub manifest: Manifest,
    /// Its checksum: the seal's identity.
    pub manifest_checksum: String,
    /// Things the user should know (strata too small, ...).
    pub warnings: Vec<String>,
    /// Rows left out by the gap.
    pub dropped_by_gap: u64,
    /// Rows left out by the group rule of time-ordered grouped splits.
    pub dropped_by_group: u64,
}

/// Runs a split.
///
/// # Errors
/// Bad options, unreadable or malformed input, too few rows, and disk
/// failures; nothing is left behind on error.
pub fn run(cfg: &SplitConfig) -> Result<SplitOutcome> {
    config::check_combinations(cfg)?;
    let _lock = OutputLock::take(&cfg.out)?;
    let mut said = output::recover(&cfg.out)?;
    // Standard input (`-`) and pipes are read once into a file beside the
    // output, which both passes read and which is removed at the end.
    let spool = output::Spool::take(cfg)?;
    let spooled;
    let cfg = match &spool {
        Some(s) => {
            spooled = SplitConfig { input: s.file.clone(), source_name: Some(s.name.clone()), ..cfg.clone() };
            &spooled
        }
        None => cfg,
    };
    output::check_output(cfg)?;
    let mut opened = config::open(cfg)?;
    let facts = pass_one::first_pass(cfg, &mut opened)?;
    if let Some(expected) = cfg.expect_rows.filter(|&n| n != facts.rows) {
        return Err(crate::Error::malformed(
            &cfg.input,
            format!(
                "has {} data rows, not the {expected} of --expect-rows (a truncated or changed extract?)",
                facts.rows
            ),
        ));
    }
    // Pass two's reading starts now: its first batches are decoded while
    // the rows are assigned (on one core).
    let batches = opened.table.batches(None, opened.raw_csv())?.read_ahead();
    let plan = assign::decide(cfg, &opened, &facts)?;
    let staging = Staging::create(&cfg.out)?;
    let written = pass_two::write(cfg, &opened, &facts, &plan, batches, &staging.path)?;
    let source_summary = opened.source_hash.take().expect("started when opened").join()?;
    if let Some(expected) = cfg.expect_input_digest.as_deref().filter(|&d| d != source_summary.blake3) {
        return Err(crate::Error::malformed(
            &cfg.input,
            format!("hashes to {}, not the {expected} of --expect-input-digest", source_summary.blake3),
        ));
    }
    let record::Recorded { manifest, mut warnings, dropped_by_gap, dropped_by_group } =
        record::record(cfg, &opened, &facts, plan, written, source_summary);
    let text = manifest.to_text();
    io::write_small(&staging.path.join(manifest::FILE_NAME), text.as_bytes())?;
    let checksum = text.trim_end().rsplit(' ').next().expect("checksum line").to_string();
    output::sync_dir(&staging.path)?;
    crate::interrupt::check()?;
    crate::failpoint::kill_at("split-before-commit");
    said.extend(output::commit(staging, &cfg.out, cfg.force, cfg.discard_ledger)?);
    said.append(&mut warnings);
    let warnings = said;
    let manifest = Manifest { checksum: Some(checksum.clone()), ..manifest };
    Ok(SplitOutcome { manifest, manifest_checksum: checksum, warnings, dropped_by_gap, dropped_by_group })
}

#[cfg(test)]
mod tests {
    use proptest::prelude::*;

    use super::assign::{stratified, tally};
    use super::strata::Strata;
    use super::*;
    use crate::rng::SplitRng;
    use crate::seal::handoff::{row_id, RowIds};

    fn strata_of(sizes: &[u64], order_seed: u64) -> Strata {
        // Rows of the strata interleaved in a seeded order, as in a real file.
        let mut row_stratum: Vec<u32> =
            sizes.iter().enumerate().flat_map(|(s, &n)| std::iter::repeat_n(s as u32, n as usize)).collect();
        SplitRng::new(order_seed).shuffle(&mut row_stratum);
        Strata {
            row_stratum,
            labels: (0..sizes.len()).map(|s| format!("s{s}")).collect(),
            sizes: sizes.to_vec(),
            columns: vec![],
        }
    }

    /// Ids hashed side by side are those of the definition, one at a time
    /// with the `blake3` crate, across many lanes' worth of rows and from
    /// any first row.
    #[test]
    fn row_ids_side_by_side_match_one_at_a_time() {
        for seed in [0u64, 7, u64::MAX] {
            let ids = RowIds::new(seed);
            for rows in [1u64..2, 1..1001, 9_990..10_037] {
                let mut got = Vec::new();
                ids.each_id(rows.clone(), |id| got.push(id.to_string()));
                let expected: Vec<String> = rows.map(|r| row_id(seed, r)).collect();
                assert_eq!(got, expected);
            }
        }
    }

    proptest! {
        #[test]
        fn every_row_once_and_every_stratum_within_one_row(
            sizes in proptest::collection::vec(0u64..200, 1..8),
            shares in prop_oneof![Just("70,15,15"), Just("80,20"), Just("0.5,0.25,0.25"), Just("33.3,33.3,33.4"), Just("1,1,98")],
            seed in any::<u64>(),
        ) {
            let ratios = Ratios::parse(shares).unwrap();
            let strata = strata_of(&sizes, seed ^ 1);
            let plan = stratified(&strata, &ratios, seed, None);
            prop_assert_eq!(plan.partition.len() as u64, sizes.iter().sum::<u64>());
            for (s, &n) in sizes.iter().enumerate() {
                let mut got = vec![0u64; ratios.partitions().len()];
                for (row, &st) in strata.row_stratum.iter().enumerate() {
                    if st as usize == s {
                        got[plan.partition[row] as usize] += 1;
                    }
                }
                prop_assert_eq!(&got, &tally(&strata, &plan.partition, ratios.partitions().len())[s]);
                for (p, &c) in got.iter().enumerate() {
                    let exact = n as f64 * ratios.share(p);
                    prop_assert!((c as f64 - exact).abs() < 1.0, "stratum {} partition {}: {} vs {}", s, p, c, exact);
                }
            }
        }

        #[test]
        fn same_seed_same_plan(sizes in proptest::collection::vec(1u64..100, 1..5), seed in any::<u64>()) {
            let ratios = Ratios::parse("70,15,15").unwrap();
            let strata = strata_of(&sizes, 3);
            prop_assert_eq!(stratified(&strata, &ratios, seed, None).partition, stratified(&strata, &ratios, seed, None).partition);
        }
    }
}
