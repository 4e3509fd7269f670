//! Rows in the test period (splits with `--order-by`): a time after the
//! test partition's start less the gap; with `--until`, a label interval
//! whose end is.

use std::path::Path;

use super::{Detector, Found, Planned, Status};
use crate::check::sealed::Seal;
use crate::check::Kind;
use crate::error::{Error, Result};
use crate::io::Batch;
use crate::seal::manifest::OrderRecord;
use crate::seal::time::time_values;

struct Time<'a> {
    order: &'a OrderRecord,
    /// The column compared: the label interval's end with `--until`, else the order column.
    column: &'a str,
    times: Vec<i64>,
}

/// Plans the time kind: not applicable without `--order-by`, not checked
/// without the order column.
pub(super) fn plan<'a>(seal: &'a Seal, has: &dyn Fn(&str) -> bool) -> Planned<'a> {
    match &seal.loaded.manifest.order {
        None => (vec![(Kind::Time, Status::NotApplicable("the split had no --order-by".into()))], None),
        Some(o) => {
            // With --until, a row reaches the test period when its label
            // interval's end does: that column is compared.
            let column = o.until.as_deref().unwrap_or(&o.column);
            if !has(column) {
                return (vec![(Kind::Time, Status::NotChecked(format!("missing column {column}")))], None);
            }
            (vec![(Kind::Time, Status::On)], Some(Box::new(Time { order: o, column, times: Vec::new() })))
        }
    }
}

impl Detector for Time<'_> {
    fn columns(&self) -> Vec<String> {
        vec![self.column.to_string()]
    }

    fn scan(&mut self, path: &Path, batch: &Batch, found: &mut Found) -> Result<()> {
        let o = self.order;
        self.times.clear();
        let kind = time_values(path, batch, self.column, &mut self.times)?;
        if kind != o.kind {
            return Err(Error::column(
                path,
                self.column,
                format!("holds {kind:?} values here but {:?} values in the seal", o.kind),
            ));
        }
        let threshold = o.test_start.saturating_sub(o.gap);
        for (i, &t) in self.times.iter().enumerate() {
            if t > threshold {
                found.hit(Kind::Time, batch, i, None);
            }
        }
        Ok(())
    }
}
