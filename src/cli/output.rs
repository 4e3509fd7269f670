//! The only writer of stdout and stderr: reports as text or one JSON
//! document, warnings and errors as single lines.

// The one place that writes to the terminal.
#![allow(clippy::disallowed_methods)]

use std::io::Write;

/// Prints a report to stdout.
///
/// # Errors
/// Writing fails (a broken pipe is recognised by [`is_broken_pipe`]).
pub fn print(text: &str) -> anyhow::Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

/// Prints one JSON document to stdout.
///
/// # Errors
/// As [`print`].
pub fn json(value: &serde_json::Value) -> anyhow::Result<()> {
    let mut text = serde_json::to_string_pretty(value)?;
    text.push('\n');
    print(&text)
}

/// A warning on stderr.
pub fn warn(message: &str) {
    let _ = writeln!(std::io::stderr(), "warning: {}", sanitize(message));
}

/// An error on stderr: one line, the context first, then each cause not
/// already said, joined by `: `.
pub fn error(e: &anyhow::Error) {
    let mut line = String::new();
    for cause in e.chain() {
        let c = cause.to_string();
        if line.contains(&c) {
            continue;
        }
        if !line.is_empty() {
            line.push_str(": ");
        }
        line.push_str(&c);
    }
    let _ = writeln!(std::io::stderr(), "error: {}", sanitize(&line));
}

/// Whether an error is stdout closed by the reader (`cleave ... | head`).
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| c.downcast_ref::<std::io::Error>().is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe))
}

/// Control characters escaped, so that a cell value or a path cannot move
/// the terminal's cursor.
pub fn sanitize(text: &str) -> String {
    text.chars().flat_map(|c| if c.is_control() { c.escape_default().collect::<Vec<_>>() } else { vec![c] }).collect()
}

/// A share as a percentage with one decimal.
pub fn percent(part: u64, whole: u64) -> String {
    if whole == 0 {
        return "-".into();
    }
    format!("{:.1}%", part as f64 * 100.0 / whole as f64)
}
