//! Copies of sealed test rows: `row` (label included), `features` (any
//! label) and `near` (equal after normalisation). Each row of the checked
//! file is encoded once for the three.

use std::path::Path;

use super::{Detector, Found, Planned, Status};
use crate::check::sealed::Seal;
use crate::check::Kind;
use crate::digest;
use crate::error::Result;
use crate::io::Batch;

struct Copies<'a> {
    seal: &'a Seal,
    /// Whether the labels are here and the evaluator's row digests too.
    rows: bool,
}

/// Plans the copy kinds: features and near need every feature column; row
/// needs the labels too, and the evaluator's `seal.rows.bin`.
pub(super) fn plan<'a>(seal: &'a Seal, has: &dyn Fn(&str) -> bool) -> Planned<'a> {
    let missing = |cols: &[String]| -> Vec<String> { cols.iter().filter(|c| !has(c)).cloned().collect() };
    let missing_features = missing(seal.spec.features());
    let features_ok = missing_features.is_empty();
    let mut statuses = Vec::new();
    if features_ok {
        statuses.push((Kind::Features, Status::On));
        statuses.push((Kind::Near, Status::On));
    } else {
        let why = format!("missing column(s) {}", missing_features.join(", "));
        statuses.push((Kind::Features, Status::NotChecked(why.clone())));
        statuses.push((Kind::Near, Status::NotChecked(why)));
    }
    let labels_missing = missing(seal.spec.labels());
    let rows = match &seal.rows {
        None => {
            let why = "the evaluator's part of the seal (seal.rows.bin) is not here".to_string();
            statuses.push((Kind::Row, Status::NotApplicable(why)));
            false
        }
        Some(_) if !features_ok || !labels_missing.is_empty() => {
            let mut gone = missing_features;
            gone.extend(labels_missing);
            statuses.push((Kind::Row, Status::NotChecked(format!("missing column(s) {}", gone.join(", ")))));
            false
        }
        Some(_) => {
            statuses.push((Kind::Row, Status::On));
            true
        }
    };
    let detector: Option<Box<dyn Detector + 'a>> = features_ok.then(|| Box::new(Copies { seal, rows }) as _);
    (statuses, detector)
}

impl Detector for Copies<'_> {
    fn columns(&self) -> Vec<String> {
        let mut columns = self.seal.spec.features().to_vec();
        if self.rows {
            columns.extend(self.seal.spec.labels().iter().cloned());
        }
        columns
    }

    fn scan(&mut self, path: &Path, batch: &Batch, found: &mut Found) -> Result<()> {
        let seal = self.seal;
        let schema = batch.data.schema();
        let bound = if self.rows { seal.spec.bind(path, &schema)? } else { seal.spec.bind_features(path, &schema)? };
        let enc = bound.encoder(&batch.data)?;
        let rows_seal = seal.rows.as_ref().filter(|_| self.rows);
        let all: Vec<usize> = (0..batch.data.num_rows()).collect();
        // Digests and seal lookups run in parallel, chunk by chunk (the
        // chunks of `all`, which is 0..n, are runs of row indices); hits come
        // back in row order, so examples do not depend on the number of
        // threads.
        let hits = digest::par_chunks(&all, |rows, scratch, out: &mut Vec<[Option<u64>; 3]>| {
            let n = rows.len();
            let mut found: [Vec<Option<u64>>; 3] = Default::default();
            let mut digests = Vec::with_capacity(n);
            enc.features_and_loose(rows, scratch, &mut digests);
            seal.features.get_many(n, |i| &digests[i].0, &mut found[1]);
            seal.loose.get_many(n, |i| &digests[i].1, &mut found[2]);
            found[0].resize(n, None);
            // A row is sealed only if its features are: the seal's row and
            // features digests come from the same test rows. So only the
            // rows whose features were found are hashed whole.
            if let Some(s) = rows_seal {
                let picks: Vec<usize> = (0..n).filter(|&i| found[1][i].is_some()).collect();
                let mut whole = Vec::with_capacity(picks.len());
                enc.rows_among(scratch, &picks, &mut whole);
                for (&i, d) in picks.iter().zip(&whole) {
                    found[0][i] = s.get(d);
                }
            }
            out.extend((0..n).map(|i| [found[0][i], found[1][i], found[2][i]]));
        });
        for (i, h) in hits.iter().enumerate() {
            for (kind, t) in [Kind::Row, Kind::Features, Kind::Near].into_iter().zip(h) {
                if let Some(t) = t {
                    found.hit(kind, batch, i, Some(*t));
                }
            }
        }
        Ok(())
    }
}
