//! The command line: parse, resolve to a checked configuration, dispatch,
//! and map the outcome to an exit code (0 done, 1 a finding, 2 an error).

mod check;
mod keygen;
mod ledger;
mod output;
mod score;
mod show;
mod split;
mod verify;

use std::process::ExitCode;

use clap::{Parser, Subcommand};

/// Reproducible train / validation / test splits with a sealed test partition.
#[derive(Debug, Parser)]
#[command(name = "cleave", version, about, propagate_version = true)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Split a table into partitions, digest every row and seal the test partition.
    Split(Box<split::Args>),
    /// Check that a sealed folder still matches its manifest (exit 1 if not).
    Verify(verify::Args),
    /// Show a readable summary of a manifest: sizes, shares and strata.
    Show(show::Args),
    /// Check later training files for leaked test rows, near-copies, groups and time periods.
    Check(check::Args),
    /// Write a fresh 256-bit digest key for keyed seals.
    Keygen(keygen::Args),
    /// Score predictions on the sealed test set and record it in the ledger.
    Score(score::ScoreArgs),
    /// List the scorings of a sealed test set and verify the ledger's chain.
    Ledger(ledger::Args),
}

/// What a command ended with.
pub enum Outcome {
    /// Done, nothing found.
    Ok,
    /// Done, and something differs or leaked.
    Finding,
}

/// Runs the command line and returns the process exit code.
pub fn main() -> ExitCode {
    install_panic_hook();
    crate::failpoint::arm(failpoints());
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    let result = match cli.command {
        Command::Split(args) => split::run(*args),
        Command::Verify(args) => verify::run(args),
        Command::Show(args) => show::run(args),
        Command::Check(args) => check::run(args),
        Command::Keygen(args) => keygen::run(args),
        Command::Score(args) => score::run(args),
        Command::Ledger(args) => ledger::run(args),
    };
    match result {
        Ok(Outcome::Ok) => ExitCode::SUCCESS,
        Ok(Outcome::Finding) => ExitCode::from(1),
        Err(e) if output::is_broken_pipe(&e) => ExitCode::SUCCESS,
        Err(e) => {
            output::error(&e);
            match e.downcast_ref::<crate::Error>() {
                // The shell's convention for a process stopped by a signal.
                Some(crate::Error::Interrupted { signal }) => ExitCode::from(128u8.saturating_add(*signal as u8)),
                _ => ExitCode::from(2),
            }
        }
    }
}

/// Panics inside guarded decoders become errors; keep the default hook's
/// report for every other panic (those are bugs).
fn install_panic_hook() {
    let default = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        if !crate::io::decoding() {
            default(info);
        }
    }));
}

/// Reads a `--digest-key` file, warning when other users can read it.
fn read_key(path: &std::path::Path) -> crate::Result<crate::digest::DigestKey> {
    let key = crate::digest::DigestKey::read(path)?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        if let Ok(meta) = std::fs::metadata(path) {
            let mode = meta.permissions().mode() & 0o777;
            if mode & 0o077 != 0 {
                output::warn(&format!(
                    "`{}` can be read by other users (mode {mode:o}); a digest key should be private: chmod 600 it",
                    path.display()
                ));
            }
        }
    }
    Ok(key)
}

/// Parses `--format` and `--output-format` values.
fn parse_format(s: &str) -> Result<crate::io::Format, String> {
    crate::io::Format::parse(s).ok_or_else(|| format!("unknown format `{s}` (csv, parquet, arrow, jsonl)"))
}

/// The manifest's creation time: `SOURCE_DATE_EPOCH` when set (so that two
/// runs can be byte-identical), else now; RFC 3339 in UTC, whole seconds.
/// The failpoints a test armed (`CLEAVE_FAILPOINT`, comma-separated; see
/// [`crate::failpoint`]).
#[allow(clippy::disallowed_methods)]
fn failpoints() -> Vec<String> {
    std::env::var("CLEAVE_FAILPOINT").map(|v| v.split(',').map(str::to_string).collect()).unwrap_or_default()
}

/// The command line's one look at the environment and the clock.
#[allow(clippy::disallowed_methods)]
fn creation_time() -> anyhow::Result<String> {
    let secs = match std::env::var("SOURCE_DATE_EPOCH") {
        Ok(v) => {
            let t = v.as_str();
            if t.is_empty() || !t.bytes().all(|b| b.is_ascii_digit()) {
                anyhow::bail!("SOURCE_DATE_EPOCH `{v}` is not a whole number of seconds since 1970-01-01");
            }
            t.parse::<i64>().map_err(|_| anyhow::anyhow!("SOURCE_DATE_EPOCH `{v}` is out of range"))?
        }
        Err(_) => chrono::Utc::now().timestamp(),
    };
    let t = chrono::DateTime::from_timestamp(secs, 0)
        .ok_or_else(|| anyhow::anyhow!("SOURCE_DATE_EPOCH `{secs}` is out of range"))?;
    Ok(t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true))
}
