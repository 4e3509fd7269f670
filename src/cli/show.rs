//! `cleave show`.

use std::path::PathBuf;

use serde_json::json;

use crate::cli::output::{self, percent, sanitize};
use crate::cli::Outcome;
use crate::seal::manifest;

/// Show a readable summary of a manifest: sizes, shares and strata.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The output folder of a split, or its manifest.yaml.
    manifest: PathBuf,
    /// Print one JSON document instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> anyhow::Result<Outcome> {
    let loaded = manifest::load(&args.manifest)?;
    if !loaded.intact() {
        output::warn(&format!(
            "`{}` was modified after sealing (checksum mismatch): what follows cannot be trusted; run `cleave verify`",
            loaded.path.display()
        ));
    }
    let m = &loaded.manifest;
    if args.json {
        let mut doc = serde_json::to_value(m)?;
        doc["schema_version"] = json!(1);
        doc["checksum_ok"] = json!(loaded.intact());
        output::json(&doc)?;
        return Ok(Outcome::Ok);
    }
    let total = m.source.rows;
    let mut t = String::new();
    t.push_str(&format!(
        "manifest `{}`  checksum {} ({})\n",
        sanitize(&loaded.path.display().to_string()),
        loaded.recorded,
        if loaded.intact() { "matches" } else { "DOES NOT MATCH" }
    ));
    t.push_str(&format!("created {} by {} {}\n", m.created, m.tool.name, m.tool.version));
    t.push_str(&format!(
        "source `{}`: {}, {} rows, {} columns, {} bytes, BLAKE3 {}\n",
        sanitize(&m.source.file),
        m.source.format,
        total,
        m.source.columns.len(),
        m.source.bytes,
        m.source.blake3
    ));
    let o = &m.options;
    let all_columns = o.key.len() + o.label.iter().filter(|l| !o.key.contains(l)).count() == m.source.columns.len();
    t.push_str(&format!(
        "options: ratios {}, seed {}, stratify {}, key {}, label {}\n",
        o.ratios.join(","),
        o.seed,
        if o.stratify.is_empty() { "none".to_string() } else { format!("{} (bins {})", o.stratify.join(","), o.bins) },
        if all_columns { "every column".to_string() } else { o.key.join(",") },
        if o.label.is_empty() { "none".to_string() } else { o.label.join(",") },
    ));
    t.push_str("\npartition        rows    share  asked  bytes         file\n");
    for (p, asked) in m.partitions.iter().zip(&o.ratios) {
        t.push_str(&format!(
            "{:<12} {:>10} {:>8}  {:>5}  {:<12}  {}\n",
            p.name.name(),
            p.rows,
            percent(p.rows, total),
            asked,
            p.bytes,
            sanitize(&p.file)
        ));
    }
    if let Some(g) = &m.groups {
        t.push_str(&format!("\ngroups: {} by {}\n", g.count, g.columns.join(", ")));
        for p in &m.partitions {
            t.push_str(&format!("  {:<12} {:>8} groups\n", p.name.name(), p.groups.unwrap_or(0)));
        }
        for (stratum, dev) in &g.largest_deviation {
            t.push_str(&format!("  `{}`: largest deviation from the asked share {dev} points\n", sanitize(stratum)));
        }
    }
    if let Some(order) = &m.order {
        t.push_str(&format!(
            "\ntime order by `{}` ({:?}), gap {}\n",
            order.column,
            order.kind,
            o.gap.as_deref().unwrap_or("none")
        ));
        for p in &m.partitions {
            if let Some(r) = &p.time {
                t.push_str(&format!(
                    "  {:<12} {} .. {}   left out by the gap: {}{}\n",
                    p.name.name(),
                    r.first,
                    r.last,
                    p.dropped_by_gap.unwrap_or(0),
                    p.dropped_by_group_rule.map(|n| format!(", by the group rule: {n}")).unwrap_or_default()
                ));
            }
        }
    }
    if let Some(f) = &m.folds {
        let column = f.column.as_ref().map(|c| format!(" in column `{c}`")).unwrap_or_default();
        t.push_str(&format!("\nfolds: {} ({}){column}\n", f.k, f.kind.name()));
        if f.blocks.is_empty() {
            for p in m.partitions.iter().filter(|p| !p.folds.is_empty()) {
                let sizes: Vec<String> = p.folds.iter().map(|(k, n)| format!("{k}:{n}")).collect();
                t.push_str(&format!("  {:<12} {}\n", p.name.name(), sizes.join("  ")));
            }
        } else {
            for b in &f.blocks {
                let role = if f.kind != crate::seal::manifest::FoldKind::RollingOrigin {
                    let by: Vec<String> = f
                        .splits
                        .iter()
                        .filter(|s| s.validates.contains(&b.block))
                        .map(|s| s.split.to_string())
                        .collect();
                    format!("validated in split {}", by.join(", "))
                } else if b.block == 0 {
                    "trains only".to_string()
                } else {
                    format!("validates fold {}", b.block)
                };
                t.push_str(&format!(
                    "  block {:<3} {:>8} rows  {} .. {}  {role}\n",
                    b.block, b.rows, b.time.first, b.time.last
                ));
            }
        }
        if !f.splits.is_empty() {
            t.push_str(&fold_splits(f));
        }
        for (stratum, sizes) in &f.strata {
            let sizes: Vec<String> = sizes.iter().map(|n| n.to_string()).collect();
            t.push_str(&format!("  `{}` per fold: {}\n", sanitize(stratum), sizes.join(" ")));
        }
    }
    if let Some(strata) = &m.strata {
        t.push_str(&format!("\nstrata: {} by {}\n", strata.count, o.stratify.join(", ")));
        for c in &strata.columns {
            if c.binned {
                t.push_str(&format!("  `{}` cut into {} quantile bins\n", c.name, c.levels));
            }
        }
        let labels: Vec<&String> = m.partitions[0].strata.keys().collect();
        let width = labels.iter().map(|l| l.chars().count()).max().unwrap_or(7).max(7);
        t.push_str(&format!("{:<width$} {:>8}", "stratum", "rows"));
        for p in &m.partitions {
            t.push_str(&format!("  {:>18}", p.name.name()));
        }
        t.push('\n');
        for label in labels {
            let n: u64 = m.partitions.iter().map(|p| p.strata.get(label).copied().unwrap_or(0)).sum();
            t.push_str(&format!("{:<width$} {:>8}", sanitize(label), n));
            for p in &m.partitions {
                let c = p.strata.get(label).copied().unwrap_or(0);
                t.push_str(&format!("  {:>18}", format!("{c} ({})", percent(c, n))));
            }
            t.push('\n');
        }
        for s in &strata.short {
            let missing: Vec<&str> = s.missing_from.iter().map(|p| p.name()).collect();
            t.push_str(&format!(
                "  too small: `{}` ({} rows) has none in {}\n",
                sanitize(&s.stratum),
                s.rows,
                missing.join(", ")
            ));
        }
    }
    t.push_str(&format!(
        "\nseal over `{}`: digests {} ({}), {}\n",
        m.seal.partition,
        m.digest.algorithm,
        m.digest.encoding,
        if m.seal.keyed { "keyed" } else { "unkeyed" }
    ));
    for f in &m.seal.files {
        t.push_str(&format!(
            "  {:<18} {:>10} records  {}\n",
            f.file,
            f.records,
            if f.shareable { "shareable with the modelling team" } else { "evaluator only (covers the labels)" }
        ));
    }
    if let Some(h) = &m.handoff {
        t.push_str(&format!(
            "  {:<18} {:>10} rows     label-free test rows with `{}`, for the modelling team\n",
            h.file, h.rows, h.row_id
        ));
    }
    output::print(&t)?;
    Ok(Outcome::Ok)
}

/// Every split of a fold design, one line each: its membership column, a
/// picture of its blocks (V validated, T trains, `.` unused; windows have
/// none) and its row counts.
fn fold_splits(f: &crate::seal::manifest::FoldRecord) -> String {
    use crate::seal::manifest::FoldKind;
    let mut t = String::new();
    if let Some(u) = &f.until {
        t.push_str(&format!("  label intervals end at `{}`", sanitize(u)));
        t.push_str(&f.embargo.as_ref().map(|e| format!("; embargo {}", sanitize(e))).unwrap_or_default());
        t.push('\n');
    }
    let blocks = f.blocks.len();
    t.push_str(&format!(
        "  {:<10} {:<width$}  {:>9} {:>9} {:>9}\n",
        "column",
        "blocks",
        "train",
        "validate",
        "out",
        width = (2 * blocks).max(6)
    ));
    for (s, name) in f.splits.iter().zip(&f.membership) {
        let picture: String = (0..blocks as u32)
            .map(|b| {
                let c = if s.validates.contains(&b) {
                    'V'
                } else if f.kind == FoldKind::RollingOrigin && s.validates.iter().all(|&v| b > v) {
                    '.'
                } else {
                    'T'
                };
                format!("{c} ")
            })
            .collect();
        t.push_str(&format!(
            "  {:<10} {:<width$}  {:>9} {:>9} {:>9}\n",
            sanitize(name),
            picture.trim_end(),
            s.train,
            s.validate,
            s.out,
            width = (2 * blocks).max(6)
        ));
    }
    if !f.paths.is_empty() {
        t.push_str(&format!("  {} paths (the split each block's predictions come from):\n", f.paths.len()));
        for (j, path) in f.paths.iter().enumerate() {
            let splits: Vec<String> = path.iter().map(|s| s.to_string()).collect();
            t.push_str(&format!("    path {j}: {}\n", splits.join(" ")));
        }
    }
    t
}
