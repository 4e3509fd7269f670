//! The read floor for benchmarks: reads every partition of a split once
//! with cleave's own readers, the way `verify` reads them (column types
//! from the manifest, every column decoded), and does nothing with the rows.
//!
//! ```text
//! cargo run --release --example read_floor -- SPLIT_FOLDER
//! ```

// A program of its own: it reports on the terminal.
#![allow(clippy::print_stdout, clippy::print_stderr)]

use std::path::PathBuf;

use cleave::io::{Table, TypeHints};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [folder] = args.as_slice() else {
        return Err("usage: read_floor SPLIT_FOLDER".into());
    };
    let loaded = cleave::seal::manifest::load(&PathBuf::from(folder))?;
    let m = &loaded.manifest;
    let hints: TypeHints = m.source.columns.iter().map(|c| (c.name.clone(), c.column_type)).collect();
    let mut rows = 0u64;
    for part in &m.partitions {
        let table = Table::open(&loaded.file(&part.file), part.format, &hints)?;
        let mut batches = table.batches(None, false)?;
        while batches.next_batch()?.is_some() {}
        rows += batches.rows();
    }
    println!("{rows} rows");
    Ok(())
}
