//! cleave cuts a table (CSV, Parquet, Arrow IPC, JSON Lines) into train /
//! validation / test partitions that are the same on every machine, gives
//! every row a BLAKE3 digest, seals the test partition in a checksummed
//! manifest, and verifies later that nothing changed.
//!
//! The library never prints, reads the environment or the clock: the
//! command line ([`cli`]) does that and passes time and seed in.
//!
//! - [`io`]: formats, streamed as Arrow record batches;
//! - [`value`] and [`digest`]: what "the same row" means;
//! - [`split`]: shares, strata, the seeded assignment and the split itself;
//! - [`manifest`] and [`seal`]: what a split wrote and the seal over it;
//! - [`verify`]: whether a sealed folder still matches;
//! - [`check`]: later training files against the seal.

#![warn(missing_docs)]

pub mod check;
pub mod cli;
pub mod digest;
pub mod error;
pub mod format;
pub mod io;
pub mod rng;
pub mod score;
pub mod seal;
pub mod split;
pub mod value;

pub use error::{Error, Result};

#[cfg(test)]
mod layout;
