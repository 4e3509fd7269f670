//! Parquet row groups decoded in parallel, delivered in file order.
//!
//! Worker `w` of `W` decodes row groups `w, w + W, w + 2W, ...` in turn and
//! sends their batches down a channel of its own, each row group closed by
//! an end marker; the consumer takes row group `g` from worker `g mod W`. So
//! batches come out in the file's order, cut at row-group ends and every
//! `batch_rows` rows within them, whatever the number of workers, and each
//! channel holds at most a few batches.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::mpsc::{sync_channel, Receiver};
use std::thread::JoinHandle;

use arrow_array::RecordBatch;
use parquet::arrow::arrow_reader::{ArrowReaderMetadata, ParquetRecordBatchReader, ParquetRecordBatchReaderBuilder};
use parquet::arrow::ProjectionMask;

use super::{decode_err, guarded, Format};
use crate::error::{Error, Result};

/// Batches in flight per worker.
const DEPTH: usize = 2;

/// A message from a worker: a batch, the end of a row group, or an error.
type Message = Result<Option<RecordBatch>>;

/// A reader over `file` for the projected columns and the given row groups.
pub(super) fn build(
    file: File,
    meta: ArrowReaderMetadata,
    indices: Option<&[usize]>,
    row_groups: Option<Vec<usize>>,
    batch_rows: usize,
) -> parquet::errors::Result<ParquetRecordBatchReader> {
    let mut builder = ParquetRecordBatchReaderBuilder::new_with_metadata(file, meta);
    if let Some(idx) = indices {
        let mask = ProjectionMask::roots(builder.parquet_schema(), idx.iter().copied());
        builder = builder.with_projection(mask);
    }
    if let Some(groups) = row_groups {
        builder = builder.with_row_groups(groups);
    }
    builder.with_batch_size(batch_rows).build()
}

/// Row groups decoded by several threads.
pub(super) struct Reader {
    path: PathBuf,
    receivers: Vec<Receiver<Message>>,
    handles: Vec<JoinHandle<()>>,
    next_group: usize,
    row_groups: usize,
}

impl Reader {
    pub(super) fn start(
        path: &Path,
        meta: ArrowReaderMetadata,
        indices: Option<Vec<usize>>,
        row_groups: usize,
        workers: usize,
        batch_rows: usize,
    ) -> Reader {
        let mut receivers = Vec::with_capacity(workers);
        let mut handles = Vec::with_capacity(workers);
        for w in 0..workers {
            let (tx, rx) = sync_channel::<Message>(DEPTH);
            receivers.push(rx);
            let (path, meta, indices) = (path.to_path_buf(), meta.clone(), indices.clone());
            handles.push(std::thread::spawn(move || {
                for group in (w..row_groups).step_by(workers) {
                    let decoded = guarded(&path, Format::Parquet, || {
                        let file = File::open(&path).map_err(|e| Error::io(&path, "cannot open", e))?;
                        let reader = build(file, meta.clone(), indices.as_deref(), Some(vec![group]), batch_rows)
                            .map_err(|e| decode_err(&path, Format::Parquet, e))?;
                        for batch in reader {
                            let batch = batch.map_err(|e| decode_err(&path, Format::Parquet, e));
                            let failed = batch.is_err();
                            if tx.send(batch.map(Some)).is_err() || failed {
                                return Err(Error::malformed(&path, "stopped"));
                            }
                        }
                        Ok(())
                    });
                    match decoded {
                        Ok(()) => {
                            if tx.send(Ok(None)).is_err() {
                                return;
                            }
                        }
                        Err(e) => {
                            // A send error means the consumer has gone or
                            // already holds this worker's error.
                            let _ = tx.send(Err(e));
                            return;
                        }
                    }
                }
            }));
        }
        Reader { path: path.to_path_buf(), receivers, handles, next_group: 0, row_groups }
    }

    /// The next batch in file order, or `None` after the last row group.
    pub(super) fn next_batch(&mut self) -> Result<Option<RecordBatch>> {
        while self.next_group < self.row_groups {
            let worker = self.next_group % self.receivers.len();
            match self.receivers[worker].recv() {
                Ok(Ok(Some(batch))) => return Ok(Some(batch)),
                Ok(Ok(None)) => self.next_group += 1,
                Ok(Err(e)) => {
                    self.row_groups = self.next_group;
                    return Err(e);
                }
                Err(_) => {
                    self.row_groups = self.next_group;
                    return Err(decode_err(
                        &self.path,
                        Format::Parquet,
                        format!("a decoding thread stopped before row group {} was read", self.next_group),
                    ));
                }
            }
        }
        Ok(None)
    }
}

impl Drop for Reader {
    fn drop(&mut self) {
        // Unblock workers waiting to send, then wait for them to stop.
        self.receivers.clear();
        for h in self.handles.drain(..) {
            let _ = h.join();
        }
    }
}
