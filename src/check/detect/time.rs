//! Rows in the test period (splits with `--order-by`): a time after the
//! test partition's start less the gap.

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
    times: Vec<i64>,
}

/// Plans the time kind: not applicable without `--order-by`, not checked
/// without the order column.
pub(super) fn plan<'a>(seal: &'a Seal, has: &dyn Fn(&str) -> bool) -> Planned<'a> {
    match &seal.loaded.manifest.order {
        None => (vec![(Kind::Time, Status::NotApplicable("the split had no --order-by".into()))], None),
        Some(o) if !has(&o.column) => {
            (vec![(Kind::Time, Status::NotChecked(format!("missing column {}", o.column)))], None)
        }
        Some(order) => (vec![(Kind::Time, Status::On)], Some(Box::new(Time { order, times: Vec::new() }))),
    }
}

impl Detector for Time<'_> {
    fn columns(&self) -> Vec<String> {
        vec![self.order.column.clone()]
    }

    fn scan(&mut self, path: &Path, batch: &Batch, found: &mut Found) -> Result<()> {
        let o = self.order;
        self.times.clear();
        let kind = time_values(path, batch, &o.column, &mut self.times)?;
        if kind != o.kind {
            return Err(Error::column(
                path,
                &o.column,
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
