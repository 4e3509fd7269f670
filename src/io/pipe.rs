//! Decoding and encoding on threads of their own, so that reading, digesting
//! and writing overlap. Each stream keeps its order (one producer, one
//! consumer, a FIFO channel), so outputs do not depend on thread timing, and
//! each channel holds only a few batches, so memory stays bounded.

use std::path::PathBuf;
use std::sync::mpsc::{sync_channel, Receiver, SyncSender};
use std::thread::JoinHandle;

use arrow_array::RecordBatch;

use super::{Batch, Batches, FileSummary, Format, PartitionWriter};
use crate::error::{Error, Result};

/// Work done on a thread of its own. Dropped before [`Background::join`],
/// it is waited for, so that the thread is done with what it uses (a
/// staging folder, a file) before its owner goes on.
pub struct Background<T>(Option<JoinHandle<T>>);

impl<T: Send + 'static> Background<T> {
    /// Starts `work`.
    pub fn spawn(work: impl FnOnce() -> T + Send + 'static) -> Self {
        Background(Some(std::thread::spawn(work)))
    }

    /// Waits for the work's result; a panic there is raised here again.
    pub fn join(mut self) -> T {
        let handle = self.0.take().expect("joined once");
        handle.join().unwrap_or_else(|panic| std::panic::resume_unwind(panic))
    }
}

impl<T> Drop for Background<T> {
    fn drop(&mut self) {
        if let Some(handle) = self.0.take() {
            let _ = handle.join();
        }
    }
}

/// Batches in flight between a decoding thread and its consumer.
const DEPTH: usize = 2;

/// A batch stream decoded ahead on its own thread.
pub struct ReadAhead {
    rx: Receiver<Result<Option<Batch>>>,
    handle: Option<JoinHandle<()>>,
    rows: u64,
    done: bool,
    path: PathBuf,
    format: Format,
}

impl Batches {
    /// Moves decoding to a thread of its own, a few batches ahead.
    pub fn read_ahead(self) -> ReadAhead {
        let (tx, rx) = sync_channel(DEPTH);
        let (path, format) = (self.path.clone(), self.format);
        let handle = std::thread::spawn(move || {
            let mut batches = self;
            loop {
                let next = batches.next_batch();
                let last = !matches!(next, Ok(Some(_)));
                if tx.send(next).is_err() || last {
                    return;
                }
            }
        });
        ReadAhead { rx, handle: Some(handle), rows: 0, done: false, path, format }
    }
}

impl ReadAhead {
    /// The next batch, or `None` at the end.
    ///
    /// # Errors
    /// As [`Batches::next_batch`]; a reader thread that stopped without
    /// reaching the end is an error too, never a short table.
    pub fn next_batch(&mut self) -> Result<Option<Batch>> {
        if self.done {
            return Ok(None);
        }
        match self.rx.recv() {
            Ok(Ok(Some(batch))) => {
                self.rows += batch.data.num_rows() as u64;
                Ok(Some(batch))
            }
            Ok(other) => {
                self.done = true;
                other
            }
            Err(_) => {
                self.done = true;
                let panicked = self.handle.take().map(|h| h.join().is_err()).unwrap_or(false);
                Err(Error::decode(
                    self.path.clone(),
                    self.format,
                    format!(
                        "the reading thread stopped before the end of the table{}",
                        if panicked { " (it panicked)" } else { "" }
                    ),
                ))
            }
        }
    }

    /// Rows delivered so far.
    pub fn rows(&self) -> u64 {
        self.rows
    }
}

impl Drop for ReadAhead {
    fn drop(&mut self) {
        // Unblock a reader waiting to send, then wait for it to stop.
        let (_, dead) = sync_channel(0);
        drop(std::mem::replace(&mut self.rx, dead));
        if let Some(h) = self.handle.take() {
            let _ = h.join();
        }
    }
}

/// Builds a batch on the writing thread (taking rows out of a larger batch,
/// adding columns), so that the sender is free for other work.
type Build = Box<dyn FnOnce() -> Result<RecordBatch> + Send>;

enum Chunk {
    Batch(RecordBatch),
    Build(Build),
    Raw(Vec<u8>),
}

/// A partition file written on its own thread, in the order chunks are sent.
pub struct WriterThread {
    path: PathBuf,
    format: Format,
    tx: Option<SyncSender<Chunk>>,
    handle: Option<JoinHandle<Result<FileSummary>>>,
}

impl PartitionWriter {
    /// Moves the encoding and writing of this file to a thread of its own.
    pub fn spawn(self) -> WriterThread {
        let (tx, rx) = sync_channel::<Chunk>(DEPTH);
        let (path, format) = (self.path.clone(), self.format);
        let handle = std::thread::spawn(move || {
            let mut w = self;
            for chunk in rx {
                match chunk {
                    Chunk::Batch(b) => w.write_batch(&b)?,
                    Chunk::Build(f) => w.write_batch(&f()?)?,
                    Chunk::Raw(bytes) => w.write_raw(&bytes)?,
                }
            }
            w.finish()
        });
        WriterThread { path, format, tx: Some(tx), handle: Some(handle) }
    }
}

impl WriterThread {
    fn send(&mut self, chunk: Chunk) -> Result<()> {
        let sent = self.tx.as_ref().map(|tx| tx.send(chunk).is_ok()).unwrap_or(false);
        if sent {
            return Ok(());
        }
        // The thread stopped early: its error says why.
        self.tx = None;
        match self.join() {
            Err(e) => Err(e),
            Ok(_) => Err(self.failure("the writing thread stopped early")),
        }
    }

    fn join(&mut self) -> Result<FileSummary> {
        match self.handle.take().map(|h| h.join()) {
            Some(Ok(r)) => r,
            Some(Err(_)) => Err(self.failure("the writing thread panicked")),
            None => Err(self.failure("the writing thread was already finished")),
        }
    }

    fn failure(&self, message: &str) -> Error {
        Error::encode(self.path.clone(), self.format, message.to_string())
    }

    /// Queues a batch of rows.
    ///
    /// # Errors
    /// The writer failed on an earlier chunk (its error).
    pub fn write_batch(&mut self, batch: RecordBatch) -> Result<()> {
        if batch.num_rows() == 0 {
            return Ok(());
        }
        self.send(Chunk::Batch(batch))
    }

    /// Queues a batch to be built on the writing thread, then written.
    ///
    /// # Errors
    /// As [`WriterThread::write_batch`]; an error of `build` comes back
    /// from a later call or from [`WriterThread::finish`].
    pub fn write_with(&mut self, build: impl FnOnce() -> Result<RecordBatch> + Send + 'static) -> Result<()> {
        self.send(Chunk::Build(Box::new(build)))
    }

    /// Queues raw CSV record bytes.
    ///
    /// # Errors
    /// As [`WriterThread::write_batch`].
    pub fn write_raw(&mut self, bytes: Vec<u8>) -> Result<()> {
        if bytes.is_empty() {
            return Ok(());
        }
        self.send(Chunk::Raw(bytes))
    }

    /// Sends no more chunks: the thread writes what is queued, then finishes
    /// and syncs the file while the caller goes on; [`WriterThread::finish`]
    /// then waits for it.
    pub fn close(&mut self) {
        self.tx = None;
    }

    /// Waits for every queued chunk, finishes the file and returns its summary.
    ///
    /// # Errors
    /// Encoder or disk failures.
    pub fn finish(mut self) -> Result<FileSummary> {
        self.tx = None;
        self.join()
    }
}

impl Drop for WriterThread {
    fn drop(&mut self) {
        self.tx = None;
        if let Some(h) = self.handle.take() {
            let _ = h.join();
        }
    }
}
