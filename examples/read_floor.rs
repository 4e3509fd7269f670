//! The read floor for benchmarks: reads tables once with cleave's own
//! readers, every column decoded, and does nothing with the rows.
//!
//! ```text
//! cargo run --release --example read_floor -- FILE...
//! ```

use std::path::PathBuf;

use cleave::io::{Format, Table, TypeHints};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let files: Vec<PathBuf> = std::env::args().skip(1).map(PathBuf::from).collect();
    if files.is_empty() {
        return Err("usage: read_floor FILE...".into());
    }
    let mut rows = 0u64;
    for file in &files {
        let format = Format::from_path(file).ok_or("unknown format")?;
        let table = Table::open(file, format, &TypeHints::new())?;
        let mut batches = table.batches(None, false)?;
        while batches.next_batch()?.is_some() {}
        rows += batches.rows();
    }
    println!("{rows} rows");
    Ok(())
}
