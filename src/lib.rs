//! cleave cuts a table (CSV, Parquet, Arrow IPC, JSON Lines) into train /
//! validation / test partitions that are the same on every machine, gives
//! every row a BLAKE3 digest, seals the test partition in a checksummed
//! manifest, and verifies later that nothing changed.
//!
//! The library never prints, reads the environment or the clock: the
//! command line ([`cli`]) does that and passes time and seed in.
//!
//! The rooms, in the order data flows (DEVELOPERS.md has the arrows):
//! - [`format`], [`error`], [`value`], [`rng`]: the leaves;
//! - [`io`]: formats, streamed as Arrow record batches;
//! - [`digest`]: what "the same row" means;
//! - [`seal`]: the manifest, the seal files, the hand-off's row ids and [`seal::verify`];
//! - [`split`]: shares, strata, the seeded assignment and the split itself;
//! - [`check`]: later training files against the seal;
//! - [`score`]: predictions scored on the sealed test set, and the ledger;
//! - [`cli`]: the command line.

pub mod check;
pub mod cli;
pub mod digest;
pub mod error;
pub mod failpoint;
pub mod format;
pub mod interrupt;
pub mod io;
pub mod rng;
pub mod score;
pub mod seal;
pub mod split;
pub mod value;

pub use error::{Error, Result};

#[cfg(test)]
mod layout;
