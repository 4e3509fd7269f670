//! The hashing floor for benchmarks: BLAKE3 in keyed mode over ROWS
//! messages of BYTES bytes each, on one thread, once one message at a time
//! (the `blake3` crate) and once 16 messages side by side
//! ([`cleave::digest::lanes`], as row digests are computed). A row digest cannot
//! cost less than this.
//!
//! ```text
//! cargo run --release --example hash_floor -- ROWS BYTES
//! ```

// A program of its own: it reports on the terminal.
#![allow(clippy::print_stdout, clippy::print_stderr)]

use std::ops::Range;

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [rows, bytes] = args.as_slice() else {
        return Err("usage: hash_floor ROWS BYTES".into());
    };
    let (rows, bytes): (usize, usize) = (rows.parse()?, bytes.parse()?);
    let key = [7u8; 32];
    let mut message: Vec<u8> = (0..bytes).map(|i| i as u8).collect();
    let start = std::time::Instant::now();
    let mut fold = 0u8;
    for i in 0..rows {
        message[..8].copy_from_slice(&(i as u64).to_le_bytes());
        fold ^= blake3::keyed_hash(&key, &message).as_bytes()[0];
    }
    report("one at a time", rows, bytes, start.elapsed().as_secs_f64(), fold);

    // Batches of 4,096 messages laid end to end, as the digest code lays
    // out encoded rows.
    const BATCH: usize = 4096;
    let mut buf: Vec<u8> = Vec::with_capacity(BATCH * bytes);
    for i in 0..BATCH {
        message[..8].copy_from_slice(&(i as u64).to_le_bytes());
        buf.extend_from_slice(&message);
    }
    let ranges: Vec<Range<usize>> = (0..BATCH).map(|i| i * bytes..(i + 1) * bytes).collect();
    let mut out = Vec::with_capacity(BATCH);
    let start = std::time::Instant::now();
    let mut fold = 0u8;
    let mut done = 0;
    while done < rows {
        let n = BATCH.min(rows - done);
        out.clear();
        buf[..8].copy_from_slice(&(done as u64).to_le_bytes());
        cleave::digest::lanes::keyed_many(&key, &buf, &ranges[..n], &mut out);
        fold ^= out.iter().fold(0, |f, d| f ^ d[0]);
        done += n;
    }
    report("16 side by side", rows, bytes, start.elapsed().as_secs_f64(), fold);
    Ok(())
}

fn report(how: &str, rows: usize, bytes: usize, secs: f64, fold: u8) {
    println!(
        "{rows} messages of {bytes} bytes, {how}: {secs:.2} s, {:.0} ns each (fold {fold})",
        secs * 1e9 / rows as f64
    );
}
