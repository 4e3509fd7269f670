//! Makes the demo data set: water-quality samples from river monitoring
//! stations (an invented scenario; every value is drawn from a seeded
//! generator, none is measured).
//!
//! ```text
//! cargo run --release --example demo_data -- --rows 3000 fixtures/water-quality.csv
//! cargo run --release --example demo_data -- --rows 10000000 bench-data/wq-10m.parquet
//! ```
//!
//! The format follows the extension (csv, parquet, arrow, jsonl). Rows are
//! made and written a batch at a time, so memory stays flat at any size. The
//! same `--rows` and `--seed` always give the same file.

// A program of its own: it reports on the terminal.
#![allow(clippy::print_stdout, clippy::print_stderr)]

use std::path::PathBuf;
use std::sync::Arc;

use arrow_array::builder::{Float64Builder, Int64Builder, StringBuilder, TimestampMicrosecondBuilder};
use arrow_array::{ArrayRef, RecordBatch};
use arrow_schema::{DataType, Field, Schema, TimeUnit};
use cleave::io::{Format, PartitionWriter};
use rand_chacha::ChaCha8Rng;
use rand_core::{Rng, SeedableRng};

const RIVERS: [&str; 6] = ["Alder", "Brennock", "Calder", "Dunmere", "Esk", "Fallow"];
const NOTES: [&str; 10] = [
    "routine",
    "low flow near weir",
    "sensor cleaned, re-read",
    "\"scum\" on surface, photo taken",
    "sample from bank, high water",
    "bottle 2 of 2",
    "algae visible; faint odour",
    "Café outflow upstream",
    "retest\nrequested by lab",
    "  duplicate   bottle  ",
];

struct Draw(ChaCha8Rng);

impl Draw {
    fn unit(&mut self) -> f64 {
        (self.0.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }
    /// Roughly normal: the sum of four uniforms, centred and scaled.
    fn normal(&mut self, mean: f64, sd: f64) -> f64 {
        let s: f64 = (0..4).map(|_| self.unit()).sum::<f64>() - 2.0;
        mean + sd * s * (3.0f64).sqrt()
    }
    fn below(&mut self, n: u64) -> u64 {
        self.0.next_u64() % n
    }
}

fn round(v: f64, places: i32) -> f64 {
    let f = 10f64.powi(places);
    (v * f).round() / f
}

fn schema() -> Arc<Schema> {
    let f = |n: &str, t: DataType| Field::new(n, t, true);
    Arc::new(Schema::new(vec![
        f("station", DataType::Utf8),
        f("river", DataType::Utf8),
        f("sample_time", DataType::Timestamp(TimeUnit::Microsecond, Some("UTC".into()))),
        f("bloom_class", DataType::Utf8),
        f("water_temp_c", DataType::Float64),
        f("ph", DataType::Float64),
        f("dissolved_oxygen_mg_l", DataType::Float64),
        f("turbidity_ntu", DataType::Float64),
        f("conductivity_us_cm", DataType::Int64),
        f("nitrate_mg_l", DataType::Float64),
        f("phosphate_mg_l", DataType::Float64),
        f("chlorophyll_ug_l", DataType::Float64),
        f("note", DataType::Utf8),
    ]))
}

fn batch(draw: &mut Draw, first: u64, n: usize, stations: u64) -> RecordBatch {
    let mut station = StringBuilder::new();
    let mut river = StringBuilder::new();
    let mut time = TimestampMicrosecondBuilder::with_capacity(n).with_timezone("UTC");
    let mut class = StringBuilder::new();
    let mut temp = Float64Builder::with_capacity(n);
    let mut ph = Float64Builder::with_capacity(n);
    let mut oxygen = Float64Builder::with_capacity(n);
    let mut turbidity = Float64Builder::with_capacity(n);
    let mut conductivity = Int64Builder::with_capacity(n);
    let mut nitrate = Float64Builder::with_capacity(n);
    let mut phosphate = Float64Builder::with_capacity(n);
    let mut chlorophyll = Float64Builder::with_capacity(n);
    let mut note = StringBuilder::new();
    // 2022-01-01T00:00:00Z; each station sampled once a day, in the morning.
    let start = 1_640_995_200i64;
    for i in 0..n as u64 {
        let row = first + i;
        let s = row % stations;
        let river_ix = (s % RIVERS.len() as u64) as usize;
        station.append_value(format!("{}-{:03}", &RIVERS[river_ix][..3].to_uppercase(), s));
        river.append_value(RIVERS[river_ix]);
        let t = start + (row / stations) as i64 * 86_400 + 6 * 3600 + draw.below(4 * 3600) as i64;
        time.append_value(t * 1_000_000);
        let day = (row / stations) as f64 % 365.0;
        let season = (day / 365.0 * std::f64::consts::TAU - 1.9).sin();
        let w = round(draw.normal(12.0 + 8.0 * season, 2.0), 2);
        let p = round(draw.normal(7.4, 0.3), 2);
        let phos = round((draw.normal(0.08, 0.04)).max(0.005), 3);
        let chl = round((draw.normal(3.0 + 1.0 * (w - 8.0).max(0.0) + 80.0 * phos, 3.0)).max(0.1), 1);
        // The class is read off a field assessment, which agrees with the
        // measured chlorophyll only roughly.
        let assessed = chl + draw.normal(0.0, 2.5);
        let c = if assessed > 19.0 {
            "high"
        } else if assessed > 14.0 {
            "moderate"
        } else if assessed > 9.0 {
            "low"
        } else {
            "none"
        };
        class.append_value(c);
        temp.append_value(w);
        ph.append_value(p);
        oxygen.append_value(round(draw.normal(10.5 - 0.15 * w, 0.6), 2));
        // A missing turbidity reading now and then.
        if draw.below(50) == 0 {
            turbidity.append_null();
        } else {
            turbidity.append_value(round(draw.normal(8.0, 3.0).abs(), 1));
        }
        conductivity.append_value(draw.normal(420.0, 60.0).round() as i64);
        nitrate.append_value(round(draw.normal(2.2, 0.7).abs(), 2));
        phosphate.append_value(phos);
        chlorophyll.append_value(chl);
        if draw.below(4) == 0 {
            note.append_value(NOTES[draw.below(NOTES.len() as u64) as usize]);
        } else {
            note.append_null();
        }
    }
    let columns: Vec<ArrayRef> = vec![
        Arc::new(station.finish()),
        Arc::new(river.finish()),
        Arc::new(time.finish()),
        Arc::new(class.finish()),
        Arc::new(temp.finish()),
        Arc::new(ph.finish()),
        Arc::new(oxygen.finish()),
        Arc::new(turbidity.finish()),
        Arc::new(conductivity.finish()),
        Arc::new(nitrate.finish()),
        Arc::new(phosphate.finish()),
        Arc::new(chlorophyll.finish()),
        Arc::new(note.finish()),
    ];
    RecordBatch::try_new(schema(), columns).expect("columns match the schema")
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut rows = 3000u64;
    let mut seed = 2026u64;
    let mut stations = 0u64;
    let mut out: Option<PathBuf> = None;
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--rows" => rows = args.next().ok_or("--rows needs a value")?.replace('_', "").parse()?,
            "--seed" => seed = args.next().ok_or("--seed needs a value")?.parse()?,
            "--stations" => stations = args.next().ok_or("--stations needs a value")?.parse()?,
            _ if out.is_none() => out = Some(PathBuf::from(a)),
            _ => return Err(format!("unexpected argument `{a}`").into()),
        }
    }
    let out = out.ok_or("usage: demo_data [--rows N] [--seed S] [--stations K] OUT.{csv,parquet,arrow,jsonl}")?;
    let format = Format::from_path(&out).ok_or("the output's extension must be csv, parquet, arrow or jsonl")?;
    // About one station per 100 rows, at least 12: entities for grouped splits.
    let stations = if stations > 0 { stations } else { (rows / 100).clamp(12, 100_000) };
    let mut draw = Draw(ChaCha8Rng::seed_from_u64(seed));
    let _ = std::fs::remove_file(&out);
    let mut writer = PartitionWriter::create(&out, format, &schema(), None, None)?;
    let mut done = 0u64;
    while done < rows {
        let n = (rows - done).min(65_536) as usize;
        writer.write_batch(&batch(&mut draw, done, n, stations))?;
        done += n as u64;
    }
    let summary = writer.finish()?;
    eprintln!("wrote {} ({rows} rows, {} bytes)", out.display(), summary.bytes);
    Ok(())
}
