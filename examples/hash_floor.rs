//! The hashing floor for benchmarks: BLAKE3 in keyed mode over ROWS
//! messages of BYTES bytes each, one message at a time as row digests are
//! computed, on one thread. A row digest cannot cost less than this.
//!
//! ```text
//! cargo run --release --example hash_floor -- ROWS BYTES
//! ```

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let [rows, bytes] = args.as_slice() else {
        return Err("usage: hash_floor ROWS BYTES".into());
    };
    let (rows, bytes): (u64, usize) = (rows.parse()?, bytes.parse()?);
    let key = [7u8; 32];
    let mut message: Vec<u8> = (0..bytes).map(|i| i as u8).collect();
    let start = std::time::Instant::now();
    let mut fold = 0u8;
    for i in 0..rows {
        message[..8].copy_from_slice(&i.to_le_bytes());
        fold ^= blake3::keyed_hash(&key, &message).as_bytes()[0];
    }
    let secs = start.elapsed().as_secs_f64();
    println!(
        "{rows} messages of {bytes} bytes: {secs:.2} s, {:.0} ns each (fold {fold})",
        secs * 1e9 / rows as f64
    );
    Ok(())
}
