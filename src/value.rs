//! Values by meaning: parsing CSV text into typed values, and the canonical
//! decimal form of numbers that row digests use.
//!
//! A number's canonical form is `[-]DIGITSeEXP`, meaning DIGITS x 10^EXP, with
//! no leading or trailing zeros in DIGITS (zero is `0e0`). So the integer 150,
//! the float 150.0 and the decimal 150.00 all read `15e1`, and 1.5 reads
//! `15e-1`. Floats contribute their shortest round-trip decimal digits (the
//! digits Python's `repr` and Rust's `Display` print). Not-a-number is `nan`,
//! the infinities `inf` and `-inf`; -0.0 is zero.

use chrono::{DateTime, NaiveDate, NaiveDateTime};

/// Parses an integer: `-?[0-9]+` without leading zeros, fitting in 64 bits.
///
/// Leading zeros (`007`) mark identifiers, not quantities, so such text stays
/// text (common practice: postal codes and station codes keep their zeros).
pub fn parse_integer(text: &str) -> Option<i64> {
    let digits = text.strip_prefix('-').unwrap_or(text);
    if digits.is_empty() || !digits.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    if digits.len() > 1 && digits.starts_with('0') {
        return None;
    }
    text.parse().ok()
}

/// Parses a decimal number (`-?INT(.DIGITS)?([eE][+-]?DIGITS)?`), or one of
/// `NaN`, `inf`, `-inf`, `Infinity`, `-Infinity`.
pub fn parse_float(text: &str) -> Option<f64> {
    match text {
        "NaN" => return Some(f64::NAN),
        "inf" | "Infinity" => return Some(f64::INFINITY),
        "-inf" | "-Infinity" => return Some(f64::NEG_INFINITY),
        _ => {}
    }
    let b = text.as_bytes();
    let mut i = 0;
    if b.first() == Some(&b'-') {
        i += 1;
    }
    let int_start = i;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
    }
    let int_len = i - int_start;
    if int_len == 0 || (int_len > 1 && b[int_start] == b'0') {
        return None;
    }
    if i < b.len() && b[i] == b'.' {
        i += 1;
        let frac_start = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        if i == frac_start {
            return None;
        }
    }
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        i += 1;
        if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
            i += 1;
        }
        let exp_start = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        if i == exp_start {
            return None;
        }
    }
    if i != b.len() {
        return None;
    }
    let v: f64 = text.parse().ok()?;
    // Text too large for a double (1e400) is not silently infinity.
    v.is_finite().then_some(v)
}

/// Parses `true` or `false`, in any letter case.
pub fn parse_bool(text: &str) -> Option<bool> {
    if text.eq_ignore_ascii_case("true") {
        Some(true)
    } else if text.eq_ignore_ascii_case("false") {
        Some(false)
    } else {
        None
    }
}

const EPOCH_DAYS_FROM_CE: i32 = 719_163;

/// Parses an ISO 8601 calendar date `YYYY-MM-DD` into days since 1970-01-01.
pub fn parse_date(text: &str) -> Option<i32> {
    if text.len() != 10 || text.as_bytes()[4] != b'-' || text.as_bytes()[7] != b'-' {
        return None;
    }
    let d = NaiveDate::parse_from_str(text, "%Y-%m-%d").ok()?;
    Some(chrono::Datelike::num_days_from_ce(&d) - EPOCH_DAYS_FROM_CE)
}

fn micros_exact(nanos: u32) -> bool {
    nanos.is_multiple_of(1000)
}

/// Parses an RFC 3339 timestamp with an offset (`Z` or `+02:00`) into
/// microseconds since the epoch, UTC. More than microsecond precision is
/// refused rather than rounded away.
///
/// Also the forms databases and dataframe libraries write: a space for the
/// `T` (`2013-01-01 10:00:00+00`, as PostgreSQL and DuckDB do), offsets
/// `+HH` and `+HHMM` besides `+HH:MM`, a lower-case `z`, and a fraction of
/// any length (digits past the microsecond must be zeros).
pub fn parse_timestamp(text: &str) -> Option<i64> {
    if text.len() < 20 || !text.as_bytes()[..4].iter().all(u8::is_ascii_digit) {
        return None;
    }
    let t = match DateTime::parse_from_rfc3339(text) {
        Ok(t) => t,
        Err(_) => DateTime::parse_from_rfc3339(&rfc3339_form(text)?).ok()?,
    };
    micros_exact(t.timestamp_subsec_nanos()).then(|| t.timestamp_micros())
}

/// The RFC 3339 spelling of a timestamp written with a space for the `T`, a
/// lower-case `z`, an offset `+HH` or `+HHMM`, or a fraction longer than
/// nanoseconds (its extra digits zeros); `None` when it is none of these.
fn rfc3339_form(text: &str) -> Option<String> {
    let b = text.as_bytes();
    if b.len() < 20 || b[4] != b'-' || b[7] != b'-' || !matches!(b[10], b'T' | b't' | b' ') || b[13] != b':' {
        return None;
    }
    let mut out = String::with_capacity(text.len() + 3);
    out.push_str(&text[..10]);
    out.push('T');
    let rest = &text[11..];
    // The offset: after the time, the last `+`, `-`, `Z` or `z`.
    let at = rest.rfind(['+', '-', 'Z', 'z'])?;
    let (time, offset) = rest.split_at(at);
    let time = match time.split_once('.') {
        Some((whole, frac)) if frac.len() > 9 => {
            if !frac.bytes().all(|c| c.is_ascii_digit()) || frac[9..].bytes().any(|c| c != b'0') {
                return None;
            }
            format!("{whole}.{}", &frac[..9])
        }
        _ => time.to_string(),
    };
    out.push_str(&time);
    let offset = match offset.as_bytes() {
        [b'Z' | b'z'] => "Z".to_string(),
        [s @ (b'+' | b'-'), h1, h2] if h1.is_ascii_digit() && h2.is_ascii_digit() => {
            format!("{}{}{}:00", *s as char, *h1 as char, *h2 as char)
        }
        [s @ (b'+' | b'-'), h1, h2, m1, m2] if [h1, h2, m1, m2].iter().all(|c| c.is_ascii_digit()) => {
            format!("{}{}{}:{}{}", *s as char, *h1 as char, *h2 as char, *m1 as char, *m2 as char)
        }
        [b'+' | b'-', _, _, b':', _, _] => offset.to_string(),
        _ => return None,
    };
    out.push_str(&offset);
    Some(out)
}

/// Parses a date and time without an offset (`2024-05-01T08:30:00`, a space
/// allowed for the `T`) into microseconds since the epoch, read as UTC.
pub fn parse_local_timestamp(text: &str) -> Option<i64> {
    if text.len() < 19 || !text.as_bytes()[..4].iter().all(|b| b.is_ascii_digit()) {
        return None;
    }
    let t = NaiveDateTime::parse_from_str(text, "%Y-%m-%dT%H:%M:%S%.f")
        .or_else(|_| NaiveDateTime::parse_from_str(text, "%Y-%m-%d %H:%M:%S%.f"))
        .ok()?;
    let t = t.and_utc();
    micros_exact(t.timestamp_subsec_nanos()).then(|| t.timestamp_micros())
}

/// Cell text cut to a readable length for messages, control characters escaped.
pub fn shorten(text: &str) -> String {
    let mut out: String = text.chars().take(40).flat_map(char::escape_debug).collect();
    if text.chars().count() > 40 {
        out.push('…');
    }
    out
}

/// A number as sign, significant digits and a power of ten.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Canonical {
    negative: bool,
    /// ASCII digits without leading or trailing zeros; empty for zero.
    digits: Vec<u8>,
    exponent: i64,
}

impl Canonical {
    fn new(negative: bool, digits: &[u8], exponent: i64) -> Self {
        let start = digits.iter().position(|&d| d != b'0').unwrap_or(digits.len());
        let digits = &digits[start..];
        let end = digits.iter().rposition(|&d| d != b'0').map_or(0, |p| p + 1);
        let exponent = exponent + (digits.len() - end) as i64;
        let digits = digits[..end].to_vec();
        if digits.is_empty() {
            return Canonical { negative: false, digits, exponent: 0 };
        }
        Canonical { negative, digits, exponent }
    }

    /// From an integer of up to 128 bits.
    pub fn from_i128(v: i128) -> Self {
        Self::from_scaled(v, 0)
    }

    /// From an unscaled integer and a decimal scale (value = v x 10^-scale).
    pub fn from_scaled(v: i128, scale: i64) -> Self {
        let mut buf = itoa_u128(v.unsigned_abs());
        let digits = std::mem::take(&mut buf);
        Self::new(v < 0, &digits, -scale)
    }

    /// From Rust's shortest round-trip text of a finite float.
    fn from_shortest(text: &str) -> Self {
        let (negative, rest) = match text.strip_prefix('-') {
            Some(r) => (true, r),
            None => (false, text),
        };
        let (mantissa, exp) = match rest.find(['e', 'E']) {
            Some(p) => (&rest[..p], rest[p + 1..].parse::<i64>().expect("float text has an integer exponent")),
            None => (rest, 0),
        };
        let mut digits = Vec::with_capacity(mantissa.len());
        let mut frac = 0i64;
        let mut after_point = false;
        for b in mantissa.bytes() {
            if b == b'.' {
                after_point = true;
            } else {
                digits.push(b);
                if after_point {
                    frac += 1;
                }
            }
        }
        Self::new(negative, &digits, exp - frac)
    }

    /// Rounds to `n` significant digits, half away from zero.
    pub fn round_significant(&self, n: usize) -> Self {
        if self.digits.len() <= n {
            return self.clone();
        }
        let mut kept = self.digits[..n].to_vec();
        let mut exponent = self.exponent + (self.digits.len() - n) as i64;
        if self.digits[n] >= b'5' {
            let mut i = n;
            loop {
                if i == 0 {
                    kept.insert(0, b'1');
                    kept.pop();
                    exponent += 1;
                    break;
                }
                i -= 1;
                if kept[i] == b'9' {
                    kept[i] = b'0';
                } else {
                    kept[i] += 1;
                    break;
                }
            }
        }
        Self::new(self.negative, &kept, exponent)
    }

    /// Appends the canonical text `[-]DIGITSeEXP`.
    pub fn write(&self, out: &mut Vec<u8>) {
        if self.digits.is_empty() {
            out.extend_from_slice(b"0e0");
            return;
        }
        if self.negative {
            out.push(b'-');
        }
        out.extend_from_slice(&self.digits);
        out.push(b'e');
        out.extend_from_slice(self.exponent.to_string().as_bytes());
    }
}

fn itoa_u128(mut v: u128) -> Vec<u8> {
    if v == 0 {
        return vec![b'0'];
    }
    let mut out = Vec::with_capacity(40);
    while v > 0 {
        out.push(b'0' + (v % 10) as u8);
        v /= 10;
    }
    out.reverse();
    out
}

/// A non-finite float's canonical text, or `None` for a finite one.
fn non_finite(v: f64) -> Option<&'static [u8]> {
    if v.is_nan() {
        Some(b"nan")
    } else if v == f64::INFINITY {
        Some(b"inf")
    } else if v == f64::NEG_INFINITY {
        Some(b"-inf")
    } else {
        None
    }
}

/// Canonical form of a double; `None` for NaN and the infinities.
pub fn canonical_f64(v: f64) -> Option<Canonical> {
    if non_finite(v).is_some() {
        return None;
    }
    if v == 0.0 {
        return Some(Canonical::new(false, b"", 0));
    }
    let mut buf = ryu::Buffer::new();
    Some(Canonical::from_shortest(buf.format_finite(v)))
}

/// Canonical form of a single-precision float, from its own shortest digits
/// (so 0.1f32 reads `1e-1`, as it was written).
pub fn canonical_f32(v: f32) -> Option<Canonical> {
    if non_finite(v as f64).is_some() {
        return None;
    }
    if v == 0.0 {
        return Some(Canonical::new(false, b"", 0));
    }
    let mut buf = ryu::Buffer::new();
    Some(Canonical::from_shortest(buf.format_finite(v)))
}

/// Appends the canonical text of a double, non-finite values included,
/// without allocating: the shortest digits are taken off Ryu's output.
pub fn write_f64(v: f64, out: &mut Vec<u8>) {
    if let Some(t) = non_finite(v) {
        out.extend_from_slice(t);
        return;
    }
    if let Some((n, k)) = short_decimal(v) {
        write_scaled(v < 0.0, n, k, out);
        return;
    }
    let mut buf = ryu::Buffer::new();
    write_shortest(if v == 0.0 { "0.0" } else { buf.format_finite(v) }, out);
}

/// Powers of ten that a double holds exactly (10^22 is the largest).
const POW10: [f64; 16] = [1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15];

/// `|v| = n / 10^k` with the fewest fraction digits `k`, when a decimal of at
/// most 15 significant digits rounds to `v`: then it is the shortest
/// round-trip decimal, the one Ryu finds, at a fraction of the cost.
///
/// Why it agrees with Ryu: `n` and `10^k` are exact doubles, so `n / 10^k`
/// is correctly rounded (IEEE 754 division, ties to even: the same interval
/// Ryu searches), and the test `n / 10^k == |v|` says exactly that the
/// decimal reads back as `v`. A double's rounding interval is narrower than
/// `2.3e-16 |v|`, while two decimals of at most 15 digits near `|v|` lie at
/// least `1e-15 |v|` apart, so at most one of them reads back as `v`: the one
/// with the fewest fraction digits is the shortest, and it is unique. The
/// product `|v| x 10^k` is off by at most half an ulp, far less than the
/// distance to the next half-integer, so rounding it finds `n` whenever `n`
/// exists (Clinger's fast path, run backwards); an `n` off by one could only
/// fail the test, never pass it wrongly. Anything else, zero,
/// subnormals and very large or small magnitudes go to Ryu.
fn short_decimal(v: f64) -> Option<(u64, usize)> {
    let a = v.abs();
    if !(1e-7..1e15).contains(&a) {
        return None;
    }
    for (k, &p) in POW10.iter().enumerate() {
        let x = a * p;
        if x >= 1e15 {
            return None;
        }
        // Any integer next to x will do: the test below accepts only n.
        let n = (x + 0.5) as u64;
        // A decimal that reads back as v lies within about 3e-16 x of x, so
        // one further away needs no division to be ruled out.
        if (x - n as f64).abs() <= x * 1e-9 && n as f64 / p == a {
            return Some((n, k));
        }
    }
    None
}

/// Appends `[-]DIGITSeEXP` for `n x 10^-k` (`n > 0`).
fn write_scaled(negative: bool, mut n: u64, k: usize, out: &mut Vec<u8>) {
    let mut exp = -(k as i64);
    while n.is_multiple_of(10) {
        n /= 10;
        exp += 1;
    }
    if negative {
        out.push(b'-');
    }
    let mut buf = itoa::Buffer::new();
    out.extend_from_slice(buf.format(n).as_bytes());
    out.push(b'e');
    out.extend_from_slice(buf.format(exp).as_bytes());
}

/// Appends `[-]DIGITSeEXP` for a finite float's shortest text (`1.5`,
/// `1e-7`, `1.2345e20`, `100.0`), as [`Canonical`] would write it.
fn write_shortest(text: &str, out: &mut Vec<u8>) {
    let b = text.as_bytes();
    let (negative, b) = match b.first() {
        Some(b'-') => (true, &b[1..]),
        _ => (false, b),
    };
    let mut digits = [0u8; 40];
    let mut n = 0usize;
    let mut frac = 0i64;
    let mut after_point = false;
    let mut i = 0;
    while i < b.len() && b[i] != b'e' && b[i] != b'E' {
        match b[i] {
            b'.' => after_point = true,
            d => {
                // Leading zeros carry no digit.
                if n > 0 || d != b'0' {
                    digits[n] = d;
                    n += 1;
                }
                if after_point {
                    frac += 1;
                }
            }
        }
        i += 1;
    }
    let mut exp: i64 = if i < b.len() {
        std::str::from_utf8(&b[i + 1..]).ok().and_then(|e| e.parse().ok()).expect("float text has an integer exponent")
    } else {
        0
    };
    exp -= frac;
    while n > 0 && digits[n - 1] == b'0' {
        n -= 1;
        exp += 1;
    }
    if n == 0 {
        out.extend_from_slice(b"0e0");
        return;
    }
    if negative {
        out.push(b'-');
    }
    out.extend_from_slice(&digits[..n]);
    out.push(b'e');
    out.extend_from_slice(itoa::Buffer::new().format(exp).as_bytes());
}

/// Rounds canonical number text (`DIGITSeEXP`) to `n` significant digits,
/// half away from zero, as [`Canonical::round_significant`] does; other
/// text (`nan`, `inf`) is copied.
pub fn round_text(text: &[u8], n: usize, out: &mut Vec<u8>) {
    let Some(e) = text.iter().position(|&b| b == b'e') else {
        out.extend_from_slice(text);
        return;
    };
    let (negative, digits) = match text[0] {
        b'-' => (true, &text[1..e]),
        _ => (false, &text[..e]),
    };
    if digits.len() <= n {
        out.extend_from_slice(text);
        return;
    }
    let exp: i64 = std::str::from_utf8(&text[e + 1..]).ok().and_then(|x| x.parse().ok()).expect("canonical exponent");
    Canonical::new(negative, digits, exp).round_significant(n).write(out);
}

/// Appends the canonical text of a single-precision float.
pub fn write_f32(v: f32, out: &mut Vec<u8>) {
    match canonical_f32(v) {
        Some(c) => c.write(out),
        None => out.extend_from_slice(non_finite(v as f64).expect("not finite")),
    }
}

/// Appends the canonical text of a 64-bit integer without allocating.
pub fn write_i64(v: i64, out: &mut Vec<u8>) {
    if v == 0 {
        out.extend_from_slice(b"0e0");
        return;
    }
    let mut mag = v.unsigned_abs();
    let mut exp = 0u32;
    while mag.is_multiple_of(10) {
        mag /= 10;
        exp += 1;
    }
    if v < 0 {
        out.push(b'-');
    }
    let mut buf = itoa::Buffer::new();
    out.extend_from_slice(buf.format(mag).as_bytes());
    out.push(b'e');
    out.extend_from_slice(buf.format(exp).as_bytes());
}

/// Appends the canonical text of an unsigned 64-bit integer.
pub fn write_u64(v: u64, out: &mut Vec<u8>) {
    if v <= i64::MAX as u64 {
        write_i64(v as i64, out);
    } else {
        Canonical::from_i128(v as i128).write(out);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn text_f64(v: f64) -> String {
        let mut out = Vec::new();
        write_f64(v, &mut out);
        String::from_utf8(out).unwrap()
    }

    fn text_i64(v: i64) -> String {
        let mut out = Vec::new();
        write_i64(v, &mut out);
        String::from_utf8(out).unwrap()
    }

    #[test]
    fn integers_and_integral_floats_read_the_same() {
        for (i, f) in
            [(150i64, 150.0f64), (0, -0.0), (-7, -7.0), (1_000_000, 1e6), (123456789012345, 123456789012345.0)]
        {
            assert_eq!(text_i64(i), text_f64(f));
        }
        assert_eq!(text_i64(150), "15e1");
        assert_eq!(text_i64(i64::MIN), "-9223372036854775808e0");
        assert_eq!(text_f64(1.5), "15e-1");
        assert_eq!(text_f64(0.001), "1e-3");
        assert_eq!(text_f64(f64::NAN), "nan");
        let mut out = Vec::new();
        Canonical::from_scaled(15000, 2).write(&mut out);
        assert_eq!(out, b"15e1");
    }

    // Shortest round-trip digits as printed by Python's repr (values from
    // memory of `repr(0.1 + 0.2)` and `repr(1/3)`).
    #[test]
    fn shortest_round_trip_digits() {
        assert_eq!(text_f64(0.1 + 0.2), "30000000000000004e-17");
        assert_eq!(text_f64(1.0 / 3.0), "3333333333333333e-16");
        assert_eq!(text_f64(1e300), "1e300");
        assert_eq!(text_f64(5e-324), "5e-324");
    }

    #[test]
    fn fast_float_text_agrees_with_the_canonical_form() {
        for v in [1.5, -0.25, 1e-7, 1.2345e20, 100.0, 0.1 + 0.2, -1e300, 5e-324, 123456.0, 7.0, -0.0, 0.0] {
            let mut fast = Vec::new();
            write_f64(v, &mut fast);
            let mut slow = Vec::new();
            canonical_f64(v).unwrap().write(&mut slow);
            assert_eq!(String::from_utf8(fast).unwrap(), String::from_utf8(slow).unwrap(), "{v}");
        }
    }

    fn ryu_text(v: f64) -> String {
        let mut out = Vec::new();
        if v == 0.0 {
            write_shortest("0.0", &mut out);
        } else {
            write_shortest(ryu::Buffer::new().format_finite(v), &mut out);
        }
        String::from_utf8(out).unwrap()
    }

    // The short-decimal path must print exactly what Ryu's shortest digits
    // give, for decimal-looking values (where it is taken), their
    // neighbours one ulp away (where it must step aside) and any bit pattern.
    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(20_000))]
        #[test]
        fn short_decimal_path_agrees_with_ryu(
            n in 1u64..1_000_000_000_000_000,
            k in 0u32..18,
            step in -2i64..=2,
            bits in proptest::prelude::any::<u64>(),
        ) {
            let d = n as f64 / 10f64.powi(k as i32);
            for v in [d, -d, f64::from_bits((d.to_bits() as i64 + step) as u64), f64::from_bits(bits)] {
                if v.is_finite() {
                    proptest::prop_assert_eq!(text_f64(v), ryu_text(v), "{:e}", v);
                }
            }
        }
    }

    #[test]
    #[allow(clippy::excessive_precision)] // the doubles next to the path's edges, written out in full
    fn short_decimal_path_edges() {
        for v in [
            1e-7,
            9.999999999999999e-8,
            1e15,
            999999999999999.9,
            999999999999999.0,
            0.3,
            0.1 + 0.2,
            2.0f64.powi(-20),
            1.7976931348623157e308,
            2.2250738585072014e-308,
            123.456,
            4.35,
            0.07,
            1e14 + 0.5,
            9007199254740993.0,
        ] {
            assert_eq!(text_f64(v), ryu_text(v), "{v:e}");
            assert_eq!(text_f64(-v), ryu_text(-v), "{v:e}");
        }
    }

    #[test]
    fn round_to_six_significant_digits() {
        let r = |v: f64| {
            let mut out = Vec::new();
            canonical_f64(v).unwrap().round_significant(6).write(&mut out);
            String::from_utf8(out).unwrap()
        };
        assert_eq!(r(1.23456789), "123457e-5");
        assert_eq!(r(6.5432101), "654321e-5");
        assert_eq!(r(9.9999996), "1e1");
        assert_eq!(r(1234565.0), "123457e1");
        assert_eq!(r(-0.000123456789), "-123457e-9");
    }

    #[test]
    fn csv_text_recognition() {
        assert_eq!(parse_integer("42"), Some(42));
        assert_eq!(parse_integer("007"), None);
        assert_eq!(parse_integer("-0"), Some(0));
        assert_eq!(parse_float("1.50"), Some(1.5));
        assert_eq!(parse_float("1e400"), None);
        assert_eq!(parse_float(".5"), None);
        assert_eq!(parse_float("1."), None);
        assert_eq!(parse_bool("TRUE"), Some(true));
        assert_eq!(parse_date("1970-01-02"), Some(1));
        assert_eq!(parse_date("2024-02-30"), None);
        // RFC 3339 section 5.8 examples.
        assert_eq!(parse_timestamp("1985-04-12T23:20:50.52Z"), Some(482196050520000));
        assert_eq!(parse_timestamp("1996-12-19T16:39:57-08:00"), Some(851042397000000));
        assert_eq!(parse_timestamp("1937-01-01T12:00:27.87+00:20"), Some(-1041337172130000));
        assert_eq!(parse_local_timestamp("1970-01-01 00:00:01"), Some(1_000_000));
    }

    /// The spellings databases and dataframe libraries write name the same
    /// instants: PostgreSQL and DuckDB (`+00`, a space), pandas (`+00:00`,
    /// a space), `+HHMM` offsets, lower-case `z`, long zero fractions (the
    /// forms are common practice; the values worked by hand).
    #[test]
    fn timestamps_as_databases_write_them() {
        let instant = parse_timestamp("2013-01-01T10:00:00Z").unwrap();
        for text in [
            "2013-01-01 10:00:00+00",
            "2013-01-01 10:00:00+0000",
            "2013-01-01 10:00:00+00:00",
            "2013-01-01t10:00:00z",
            "2013-01-01 05:00:00-05",
            "2013-01-01 15:30:00+0530",
            "2013-01-01 10:00:00.000000000000+00",
        ] {
            assert_eq!(parse_timestamp(text), Some(instant), "{text}");
        }
        assert_eq!(parse_timestamp("2013-01-01 10:00:00.25+00"), Some(instant + 250_000));
        // More than microseconds, a bad offset, no offset: not timestamps with an offset.
        for text in [
            "2013-01-01 10:00:00.1234567+00",
            "2013-01-01 10:00:00+5",
            "2013-01-01 10:00:00",
            "2013-01-01 10:00:00+00:0",
        ] {
            assert_eq!(parse_timestamp(text), None, "{text}");
        }
    }
}
