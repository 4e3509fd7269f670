//! `cleave keygen`.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;

use crate::cli::{output, Outcome};
use crate::digest::DigestKey;

/// Write a fresh 256-bit digest key (64 hexadecimal digits) for keyed seals.
///
/// Keyed digests reveal nothing about the sealed rows to whoever lacks the key. Keep the key
/// with whoever runs the checks; it is never written into a manifest (only its fingerprint is).
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The key file to create; an existing file is never overwritten.
    file: PathBuf,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> anyhow::Result<Outcome> {
    let key = DigestKey::generate().map_err(|e| anyhow::anyhow!("the operating system's random source failed: {e}"))?;
    let mut options = std::fs::File::options();
    options.write(true).create_new(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.mode(0o600);
    }
    let mut file = options
        .open(&args.file)
        .with_context(|| format!("`{}`: cannot create the key file (it is never overwritten)", args.file.display()))?;
    file.write_all(key.to_file_text().as_bytes())
        .and_then(|_| file.sync_all())
        .with_context(|| format!("`{}`: cannot write the key", args.file.display()))?;
    if args.json {
        output::json(&serde_json::json!({
            "schema_version": 1,
            "file": args.file.display().to_string(),
            "fingerprint": key.fingerprint(),
        }))?;
    } else {
        output::print(&format!(
            "wrote a 256-bit digest key to `{}` (fingerprint {})\n",
            output::sanitize(&args.file.display().to_string()),
            key.fingerprint()
        ))?;
    }
    Ok(Outcome::Ok)
}
