//! Civil dates and times as text: days since 1970 to `YYYY-MM-DD`, instants to RFC 3339, without
//! a calendar library in the loop.

/// Civil date from days since 1970-01-01 (proleptic Gregorian; the
/// days-from-civil inverse of H. Hinnant's "chrono-compatible low-level date
/// algorithms").
pub(crate) fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let y = yoe + era * 400;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    (if m <= 2 { y + 1 } else { y }, m, d)
}

pub(crate) fn push_padded(out: &mut Vec<u8>, v: u32, width: usize) {
    let mut digits = [0u8; 10];
    let mut n = 0;
    let mut x = v;
    loop {
        digits[n] = b'0' + (x % 10) as u8;
        n += 1;
        x /= 10;
        if x == 0 {
            break;
        }
    }
    for _ in n..width {
        out.push(b'0');
    }
    out.extend(digits[..n].iter().rev());
}

/// Two digits of `v < 100`.
pub(crate) fn push2(out: &mut Vec<u8>, v: u32) {
    out.extend_from_slice(&[b'0' + (v / 10) as u8, b'0' + (v % 10) as u8]);
}

pub(crate) fn write_year(y: i64, out: &mut Vec<u8>) {
    if (0..10_000).contains(&y) {
        push2(out, y as u32 / 100);
        push2(out, y as u32 % 100);
        return;
    }
    if y < 0 {
        out.push(b'-');
    }
    // Every digit of the year: a year past 2^32 (a timestamp of seconds near the ends of i64)
    // must not wrap onto another.
    match u32::try_from(y.unsigned_abs()) {
        Ok(abs) => push_padded(out, abs, 4),
        Err(_) => out.extend_from_slice(itoa::Buffer::new().format(y.unsigned_abs()).as_bytes()),
    }
}

/// `YYYY-MM-DD` of days since the epoch.
pub fn write_date(days: i64, out: &mut Vec<u8>) {
    thread_local! {
        /// The last date written on this thread: rows near each other in a
        /// file mostly fall on the same day.
        static LAST: std::cell::Cell<(i64, [u8; 10])> = const { std::cell::Cell::new((i64::MIN, [0; 10])) };
    }
    let (last_days, last_text) = LAST.get();
    if days == last_days {
        out.extend_from_slice(&last_text);
        return;
    }
    let (y, m, d) = civil_from_days(days);
    if (0..10_000).contains(&y) {
        // The common case in one copy: every row of a date or timestamp
        // column comes here, and pushing byte by byte cost more than the
        // calendar arithmetic.
        let mut text = *b"0000-00-00";
        put_digits(&mut text[..4], y as u32);
        put_digits(&mut text[5..7], m);
        put_digits(&mut text[8..], d);
        out.extend_from_slice(&text);
        LAST.set((days, text));
        return;
    }
    write_year(y, out);
    out.push(b'-');
    push2(out, m);
    out.push(b'-');
    push2(out, d);
}

/// The decimal digits of `v`, right-aligned in `slot` (which must hold them).
pub(crate) fn put_digits(slot: &mut [u8], mut v: u32) {
    for digit in slot.iter_mut().rev() {
        *digit = b'0' + (v % 10) as u8;
        v /= 10;
    }
}

/// `YYYY-MM-DDTHH:MM:SS[.fraction][Z]` of seconds and nanoseconds since the epoch.
pub fn write_timestamp(secs: i64, nanos: u32, zoned: bool, out: &mut Vec<u8>) {
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400) as u32;
    write_date(days, out);
    let mut time = *b"T00:00:00";
    put_digits(&mut time[1..3], rem / 3600);
    put_digits(&mut time[4..6], rem / 60 % 60);
    put_digits(&mut time[7..], rem % 60);
    out.extend_from_slice(&time);
    if nanos > 0 {
        let mut frac = [0u8; 9];
        let mut x = nanos;
        for d in frac.iter_mut().rev() {
            *d = b'0' + (x % 10) as u8;
            x /= 10;
        }
        let end = frac.iter().rposition(|&d| d != b'0').expect("nanos > 0") + 1;
        out.push(b'.');
        out.extend_from_slice(&frac[..end]);
    }
    if zoned {
        out.push(b'Z');
    }
}

#[cfg(test)]
mod tests {
    use super::{civil_from_days, write_date};

    /// Years past 2^32 (reachable from timestamps of seconds) keep every digit: two dates 2^32
    /// years apart must not write the same text, or their rows would share a digest.
    #[test]
    fn years_past_two_to_the_32_keep_every_digit() {
        for days in [1_600_000_000_000i64, -1_600_000_000_000, 106_751_991_167_300] {
            let (year, month, day) = civil_from_days(days);
            assert!(year.unsigned_abs() > u32::MAX as u64, "{year}");
            let mut text = Vec::new();
            write_date(days, &mut text);
            assert_eq!(String::from_utf8(text).unwrap(), format!("{year}-{month:02}-{day:02}"));
        }
        let mut near = Vec::new();
        write_date(-1, &mut near);
        assert_eq!(near, b"1969-12-31");
    }
}
