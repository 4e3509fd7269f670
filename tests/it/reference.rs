//! Checks against references outside the project, run by
//! tests/python/reference.py (each check names its source there):
//! Palmer penguins and Fisher's iris from PyPI packages, the blake3 package,
//! pyarrow, jsonschema, and an independent implementation of cleave-row-v1.
//! They need `pip install -r tests/python/requirements.txt` (`.ci/run` does it).

use std::process::Command;

use crate::util::BIN;

fn reference(check: &str) {
    let work = tempfile::tempdir().unwrap();
    let script = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/python/reference.py");
    let out = Command::new("python3")
        .args([script, check, BIN])
        .arg(work.path())
        .output()
        .expect("python3 runs (the reference checks need it; see tests/python/requirements.txt)");
    assert!(
        out.status.success(),
        "reference check `{check}` failed:\n{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
}

#[test]
fn independent_encoding_reproduces_every_sealed_digest() {
    reference("digests");
}

#[test]
fn digest_vectors_agree_with_the_independent_encoding() {
    reference("vectors");
}

#[test]
fn palmer_penguins_exact_class_counts() {
    reference("penguins");
}

#[test]
fn fisher_iris_exact_class_counts_from_json_lines() {
    reference("iris");
}

#[test]
fn checksums_equal_the_blake3_package() {
    reference("blake3");
}

#[test]
fn pyarrow_parquet_gives_the_same_split_and_reads_partitions_back() {
    reference("pyarrow");
}

#[test]
fn manifests_and_json_reports_validate_against_their_schemas() {
    reference("schema");
}

#[test]
fn palmer_penguins_raw_grouped_by_nest_and_ordered_by_egg_date() {
    reference("penguins_time");
}

#[test]
fn test_partition_exported_by_pyarrow_is_found_in_full() {
    reference("cross_format");
}

#[test]
fn metrics_agree_with_numpy_and_scipy() {
    reference("metrics");
}

#[test]
fn daily_weather_grouped_by_month_loses_no_row() {
    reference("weather_months");
}

#[test]
fn flights_grouped_by_aircraft_are_refused_or_meet_their_shares() {
    reference("flights");
}

#[test]
fn the_readme_fold_loop_gives_the_manifest_splits_in_scikit_learn() {
    reference("fold_loops");
}

#[test]
fn a_stratified_split_is_reproduced_from_counts_and_rank_cutoffs() {
    reference("rank_cutoffs");
}

#[test]
fn column_names_yaml_readers_could_mistype_come_back_as_text() {
    reference("yaml_names");
}
