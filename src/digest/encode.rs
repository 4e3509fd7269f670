//! The canonical value encoding of `cleave-row-v1`: one column of one batch at a time, by the
//! column's concrete type.

use arrow_array::cast::AsArray;
use arrow_array::types::{
    Date32Type, Decimal128Type, Float32Type, Float64Type, Int64Type, TimestampMicrosecondType,
    TimestampMillisecondType, TimestampNanosecondType, TimestampSecondType, UInt64Type,
};
use arrow_array::{Array, ArrayRef, BinaryArray, BooleanArray, StringArray};
use arrow_buffer::{NullBuffer, ScalarBuffer};
use arrow_schema::{DataType, TimeUnit};

use super::cache::{fill, put, slot_index, Slot, ValueCache, SLOT_BYTES};
use super::civil::{write_date, write_timestamp};
use super::normalise::{normalise_ascii_into, normalise_text_into};
use crate::error::{Error, Result};
use crate::value;

thread_local! {
    /// A reused buffer for normalised text.
    static LOOSE_TEXT: std::cell::Cell<String> = const { std::cell::Cell::new(String::new()) };
}

pub(crate) const TAG_NULL: u8 = 0;
pub(crate) const TAG_BOOL: u8 = 1;
pub(crate) const TAG_NUMBER: u8 = 2;
pub(crate) const TAG_STRING: u8 = 3;
pub(crate) const TAG_BINARY: u8 = 4;
pub(crate) const TAG_DATE: u8 = 5;
pub(crate) const TAG_TIMESTAMP: u8 = 6;
pub(crate) const TAG_LOCAL_TIMESTAMP: u8 = 7;

/// One column of one batch, ready to encode value by value: the array is
/// held by its concrete type, so a value costs no dynamic dispatch.
pub(crate) struct Encoder {
    pub(crate) nulls: Option<NullBuffer>,
    pub(crate) kind: Kind,
}

pub(crate) enum Kind {
    Null,
    Bool(BooleanArray),
    Int64(ScalarBuffer<i64>),
    UInt64(ScalarBuffer<u64>),
    Float64(ScalarBuffer<f64>),
    Float32(ScalarBuffer<f32>),
    Decimal(ScalarBuffer<i128>, i64),
    Utf8(StringArray),
    Binary(BinaryArray),
    Date(ScalarBuffer<i32>),
    Timestamp { values: ScalarBuffer<i64>, per_second: i64, zoned: bool },
}

pub(crate) fn cast(array: &ArrayRef, to: &DataType, name: &str) -> Result<ArrayRef> {
    arrow_cast::cast(array, to).map_err(|e| Error::UnsupportedType {
        path: Default::default(),
        column: name.to_string(),
        data_type: format!("{} ({e})", array.data_type()),
    })
}

/// Asks for the cache line at `p` (a hint: no effect on results; `p` need
/// not point into anything).
#[inline(always)]
pub(crate) fn prefetch_ptr<T>(p: *const T) {
    #[cfg(target_arch = "x86_64")]
    // SAFETY: a prefetch reads nothing and cannot fault, whatever the address.
    unsafe {
        std::arch::x86_64::_mm_prefetch::<{ std::arch::x86_64::_MM_HINT_T0 }>(p.cast());
    }
    #[cfg(not(target_arch = "x86_64"))]
    let _ = p;
}

/// Rows ahead whose values [`Encoder::prefetch`] asks for: a row's columns
/// lie in as many places in memory, more than the processor follows alone.
pub(crate) const PREFETCH_ROWS: usize = 8;

impl Encoder {
    /// Asks for the memory that encoding `row` will read: its value, and for
    /// text its offsets and bytes (the offsets of a row further on first, so
    /// that they are at hand when its bytes are asked for).
    #[inline(always)]
    pub(crate) fn prefetch(&self, row: usize) {
        match &self.kind {
            Kind::Int64(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::UInt64(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Float64(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Float32(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Date(a) => prefetch_ptr(a.as_ptr().wrapping_add(row)),
            Kind::Timestamp { values, .. } => prefetch_ptr(values.as_ptr().wrapping_add(row)),
            Kind::Utf8(a) => {
                let offsets = a.value_offsets();
                prefetch_ptr(offsets.as_ptr().wrapping_add(row + PREFETCH_ROWS));
                if let Some(&start) = offsets.get(row) {
                    prefetch_ptr(a.value_data().as_ptr().wrapping_add(start as usize));
                }
            }
            _ => {}
        }
    }

    pub(crate) fn new(array: &ArrayRef, name: &str) -> Result<Self> {
        let dt = array.data_type().clone();
        if let DataType::Dictionary(_, value) = &dt {
            let plain = cast(array, value, name)?;
            return Encoder::new(&plain, name);
        }
        let kind = match dt {
            DataType::Null => Kind::Null,
            DataType::Boolean => Kind::Bool(array.as_boolean().clone()),
            DataType::Int64 => Kind::Int64(array.as_primitive::<Int64Type>().values().clone()),
            DataType::Int8
            | DataType::Int16
            | DataType::Int32
            | DataType::UInt8
            | DataType::UInt16
            | DataType::UInt32 => {
                return Encoder::new(&cast(array, &DataType::Int64, name)?, name);
            }
            DataType::UInt64 => Kind::UInt64(array.as_primitive::<UInt64Type>().values().clone()),
            DataType::Float64 => Kind::Float64(array.as_primitive::<Float64Type>().values().clone()),
            DataType::Float32 => Kind::Float32(array.as_primitive::<Float32Type>().values().clone()),
            DataType::Decimal128(_, scale) => {
                Kind::Decimal(array.as_primitive::<Decimal128Type>().values().clone(), scale as i64)
            }
            DataType::Utf8 => Kind::Utf8(array.as_string::<i32>().clone()),
            DataType::LargeUtf8 | DataType::Utf8View => {
                return Encoder::new(&cast(array, &DataType::Utf8, name)?, name);
            }
            DataType::Binary => Kind::Binary(array.as_binary::<i32>().clone()),
            DataType::LargeBinary | DataType::BinaryView | DataType::FixedSizeBinary(_) => {
                return Encoder::new(&cast(array, &DataType::Binary, name)?, name);
            }
            DataType::Date32 => Kind::Date(array.as_primitive::<Date32Type>().values().clone()),
            DataType::Date64 => return Encoder::new(&cast(array, &DataType::Date32, name)?, name),
            DataType::Timestamp(unit, tz) => {
                let (values, per_second) = match unit {
                    TimeUnit::Second => (array.as_primitive::<TimestampSecondType>().values().clone(), 1),
                    TimeUnit::Millisecond => (array.as_primitive::<TimestampMillisecondType>().values().clone(), 1_000),
                    TimeUnit::Microsecond => {
                        (array.as_primitive::<TimestampMicrosecondType>().values().clone(), 1_000_000)
                    }
                    TimeUnit::Nanosecond => {
                        (array.as_primitive::<TimestampNanosecondType>().values().clone(), 1_000_000_000)
                    }
                };
                Kind::Timestamp { values, per_second, zoned: tz.is_some() }
            }
            other => {
                return Err(Error::UnsupportedType {
                    path: Default::default(),
                    column: name.to_string(),
                    data_type: other.to_string(),
                })
            }
        };
        let nulls = array.logical_nulls().filter(|n| n.null_count() > 0);
        Ok(Encoder { nulls, kind })
    }

    pub(crate) fn is_null(&self, row: usize) -> bool {
        matches!(self.kind, Kind::Null) || self.nulls.as_ref().is_some_and(|n| n.is_null(row))
    }

    /// The type tag and bits under which value `row`'s encodings are
    /// cached, for the types whose values repeat and are costly to write.
    #[inline]
    pub(crate) fn cache_key(&self, row: usize) -> Option<(u8, u64)> {
        if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
            return None;
        }
        match &self.kind {
            Kind::Float64(a) => Some((1, a[row].to_bits())),
            Kind::Float32(a) => Some((2, a[row].to_bits() as u64)),
            Kind::Int64(a) => Some((3, a[row] as u64)),
            Kind::UInt64(a) => Some((4, a[row])),
            Kind::Date(a) => Some((5, a[row] as u32 as u64)),
            _ => None,
        }
    }

    /// Appends value `row`'s exact encoding to `exact` and, when asked, its
    /// loose encoding to `loose`, from `cache` where it can.
    #[inline]
    pub(crate) fn write_cached(
        &self,
        row: usize,
        exact: &mut Vec<u8>,
        loose: Option<&mut Vec<u8>>,
        cache: &mut ValueCache,
    ) {
        let at = exact.len();
        let held = match self.cache_key(row).filter(|_| !cache.slots.is_empty()) {
            Some((kind, bits)) => self.put_cached(row, kind, bits, cache, exact).then(|| slot_index(kind, bits)),
            None => {
                self.write(row, exact, false);
                None
            }
        };
        let Some(loose) = loose else { return };
        let Some(index) = held else {
            self.loosen(row, &exact[at..], loose);
            return;
        };
        let slot = &mut cache.slots[index];
        if slot.loose_len == 0 {
            let at = loose.len();
            self.loosen(row, &slot.exact[..slot.exact_len as usize], loose);
            if let Some((bytes, len)) = fill(&loose[at..]) {
                slot.loose = bytes;
                slot.loose_len = len;
            }
        } else {
            put(loose, &slot.loose, slot.loose_len);
        }
    }

    /// Appends value `row`'s exact encoding to `out` from its slot in
    /// `cache` (`kind` and `bits` being its cache key), or writes it and
    /// fills the slot; returns whether the slot holds the value now (an
    /// encoding longer than a slot is not kept).
    #[inline(always)]
    pub(crate) fn put_cached(
        &self,
        row: usize,
        kind: u8,
        bits: u64,
        cache: &mut ValueCache,
        out: &mut Vec<u8>,
    ) -> bool {
        let slot = &mut cache.slots[slot_index(kind, bits)];
        if slot.kind == kind && slot.bits == bits {
            put(out, &slot.exact, slot.exact_len);
            return true;
        }
        let at = out.len();
        self.write(row, out, false);
        match fill(&out[at..]) {
            Some((bytes, len)) => {
                *slot = Slot { kind, exact_len: len, loose_len: 0, bits, exact: bytes, loose: [0; SLOT_BYTES] };
                true
            }
            None => false,
        }
    }

    /// Appends the exact encoding of the value of each of `rows` to `out`,
    /// and after each where it ends to `ends`: as [`Encoder::write_cached`]
    /// row by row, in a loop per type (a column's values are read in order,
    /// which the processor follows without being asked).
    pub(crate) fn write_column(&self, rows: &[usize], cache: &mut ValueCache, out: &mut Vec<u8>, ends: &mut Vec<u32>) {
        let cached = !cache.slots.is_empty();
        match &self.kind {
            // The tags are those of `cache_key`.
            Kind::Float64(a) if cached => self.column_cached(rows, cache, out, ends, 1, |r| a[r].to_bits()),
            Kind::Float32(a) if cached => self.column_cached(rows, cache, out, ends, 2, |r| a[r].to_bits() as u64),
            Kind::Int64(a) if cached => self.column_cached(rows, cache, out, ends, 3, |r| a[r] as u64),
            Kind::UInt64(a) if cached => self.column_cached(rows, cache, out, ends, 4, |r| a[r]),
            Kind::Date(a) if cached => self.column_cached(rows, cache, out, ends, 5, |r| a[r] as u32 as u64),
            Kind::Utf8(a) => {
                for &row in rows {
                    if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
                        out.push(TAG_NULL);
                    } else {
                        write_text(a, row, out);
                    }
                    ends.push(out.len() as u32);
                }
            }
            Kind::Timestamp { values, per_second, zoned } => {
                for &row in rows {
                    if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
                        out.push(TAG_NULL);
                    } else {
                        write_timestamp_value(values[row], *per_second, *zoned, out);
                    }
                    ends.push(out.len() as u32);
                }
            }
            _ => {
                for &row in rows {
                    self.write(row, out, false);
                    ends.push(out.len() as u32);
                }
            }
        }
    }

    /// [`Encoder::write_column`] for a type whose encodings are cached under
    /// `tag` and the value's bits.
    #[inline(always)]
    pub(crate) fn column_cached(
        &self,
        rows: &[usize],
        cache: &mut ValueCache,
        out: &mut Vec<u8>,
        ends: &mut Vec<u32>,
        tag: u8,
        bits: impl Fn(usize) -> u64,
    ) {
        for &row in rows {
            if self.nulls.as_ref().is_some_and(|n| n.is_null(row)) {
                out.push(TAG_NULL);
            } else {
                self.put_cached(row, tag, bits(row), cache, out);
            }
            ends.push(out.len() as u32);
        }
    }

    /// Appends the loose encoding of value `row`, given its exact encoding:
    /// text is normalised, floats rounded; everything else is unchanged.
    pub(crate) fn loosen(&self, row: usize, exact: &[u8], out: &mut Vec<u8>) {
        match self.kind {
            Kind::Float64(_) | Kind::Float32(_) if exact[0] == TAG_NUMBER => {
                with_len(out, TAG_NUMBER, |o| value::round_text(&exact[5..], 6, o));
            }
            Kind::Utf8(_) if exact[0] == TAG_STRING => self.write(row, out, true),
            _ => out.extend_from_slice(exact),
        }
    }

    /// Appends value `row`'s encoding; `loose` normalises text and floats.
    #[inline]
    pub(crate) fn write(&self, row: usize, out: &mut Vec<u8>, loose: bool) {
        if self.is_null(row) {
            out.push(TAG_NULL);
            return;
        }
        match &self.kind {
            Kind::Null => unreachable!("handled above"),
            Kind::Bool(a) => {
                out.push(TAG_BOOL);
                out.push(a.value(row) as u8);
            }
            Kind::Int64(a) => with_len(out, TAG_NUMBER, |o| value::write_i64(a[row], o)),
            Kind::UInt64(a) => with_len(out, TAG_NUMBER, |o| value::write_u64(a[row], o)),
            Kind::Float64(a) => {
                let v = a[row];
                with_len(out, TAG_NUMBER, |o| match loose.then(|| value::canonical_f64(v)).flatten() {
                    Some(c) => c.round_significant(6).write(o),
                    None => value::write_f64(v, o),
                });
            }
            Kind::Float32(a) => {
                let v = a[row];
                with_len(out, TAG_NUMBER, |o| match loose.then(|| value::canonical_f32(v)).flatten() {
                    Some(c) => c.round_significant(6).write(o),
                    None => value::write_f32(v, o),
                });
            }
            Kind::Decimal(a, scale) => {
                with_len(out, TAG_NUMBER, |o| value::Canonical::from_scaled(a[row], *scale).write(o));
            }
            Kind::Utf8(a) => {
                let s = a.value(row);
                if loose && s.is_ascii() {
                    with_len(out, TAG_STRING, |o| normalise_ascii_into(s.as_bytes(), o));
                } else if loose {
                    let n = LOOSE_TEXT.with(|cell| {
                        let mut buf = cell.take();
                        buf.clear();
                        normalise_text_into(s, &mut buf);
                        with_len(out, TAG_STRING, |o| o.extend_from_slice(buf.as_bytes()));
                        buf
                    });
                    LOOSE_TEXT.with(|cell| cell.set(n));
                } else {
                    write_text(a, row, out);
                }
            }
            Kind::Binary(a) => with_len(out, TAG_BINARY, |o| o.extend_from_slice(a.value(row))),
            Kind::Date(a) => with_len(out, TAG_DATE, |o| write_date(a[row] as i64, o)),
            Kind::Timestamp { values, per_second, zoned } => {
                write_timestamp_value(values[row], *per_second, *zoned, out)
            }
        }
    }
}

/// Appends the exact encoding of text value `row` (not null). Short text is
/// copied as a fixed 32-byte window of the array's value buffer, then cut to
/// length (a copy of varying length is a call; one of fixed length is not).
#[inline(always)]
pub(crate) fn write_text(a: &StringArray, row: usize, out: &mut Vec<u8>) {
    let s = a.value(row);
    out.push(TAG_STRING);
    out.extend_from_slice(&(s.len() as u32).to_le_bytes());
    let start = a.value_offsets()[row] as usize;
    match a.value_data().get(start..start + 32) {
        Some(window) if s.len() <= 32 => {
            let end = out.len() + s.len();
            out.extend_from_slice(window);
            out.truncate(end);
        }
        _ => out.extend_from_slice(s.as_bytes()),
    }
}

/// Appends the encoding of timestamp value `v`, counted in `1 / per_second`
/// seconds since the epoch (not null).
#[inline(always)]
pub(crate) fn write_timestamp_value(v: i64, per_second: i64, zoned: bool, out: &mut Vec<u8>) {
    let secs = v.div_euclid(per_second);
    let nanos = v.rem_euclid(per_second) * (1_000_000_000 / per_second);
    let tag = if zoned { TAG_TIMESTAMP } else { TAG_LOCAL_TIMESTAMP };
    with_len(out, tag, |o| write_timestamp(secs, nanos as u32, zoned, o));
}

pub(crate) fn with_len(out: &mut Vec<u8>, tag: u8, body: impl FnOnce(&mut Vec<u8>)) {
    out.push(tag);
    let at = out.len();
    out.extend_from_slice(&[0; 4]);
    body(out);
    let len = (out.len() - at - 4) as u32;
    out[at..at + 4].copy_from_slice(&len.to_le_bytes());
}
