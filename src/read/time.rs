//! Finding and parsing timestamps in log lines (for idle-gap session splitting).
//!
//! Recognised forms: ISO 8601 / RFC 3339 date-times (`2026-11-30T08:15:02.123Z`, a space instead
//! of `T`, offsets `+01:00` / `+0100`, no offset = UTC) and the common log format
//! (`30/Nov/2026:08:15:02 +0000`).

/// Milliseconds since 1970-01-01T00:00:00Z of the first timestamp found in `line`.
pub fn find_timestamp_ms(line: &[u8]) -> Option<i64> {
    (0..line.len())
        .filter(|&i| line[i].is_ascii_digit() && (i == 0 || !line[i - 1].is_ascii_digit()))
        .find_map(|i| parse_iso(&line[i..]).or_else(|| parse_clf(&line[i..])))
}

fn digits(b: &[u8], at: usize, n: usize) -> Option<i64> {
    let s = b.get(at..at + n)?;
    s.iter().all(u8::is_ascii_digit).then(|| s.iter().fold(0i64, |v, d| v * 10 + (d - b'0') as i64))
}

fn parse_iso(b: &[u8]) -> Option<i64> {
    let year = digits(b, 0, 4)?;
    (b.get(4) == Some(&b'-') && b.get(7) == Some(&b'-')).then_some(())?;
    let month = digits(b, 5, 2)?;
    let day = digits(b, 8, 2)?;
    matches!(b.get(10), Some(b'T' | b' ')).then_some(())?;
    let hour = digits(b, 11, 2)?;
    (b.get(13) == Some(&b':') && b.get(16) == Some(&b':')).then_some(())?;
    let minute = digits(b, 14, 2)?;
    let second = digits(b, 17, 2)?;
    let mut pos = 19;
    let mut millis = 0;
    if b.get(pos) == Some(&b'.') {
        pos += 1;
        let mut scale = 100;
        while let Some(d) = b.get(pos).filter(|d| d.is_ascii_digit()) {
            millis += (d - b'0') as i64 * scale;
            scale /= 10;
            pos += 1;
        }
    }
    let offset = match b.get(pos) {
        Some(b'+' | b'-') => {
            let sign = if b[pos] == b'-' { -1 } else { 1 };
            let h = digits(b, pos + 1, 2)?;
            let colon = usize::from(b.get(pos + 3) == Some(&b':'));
            let m = digits(b, pos + 3 + colon, 2).unwrap_or(0);
            sign * (h * 60 + m)
        }
        _ => 0,
    };
    to_ms(year, month, day, hour, minute, second, millis, offset)
}

fn parse_clf(b: &[u8]) -> Option<i64> {
    let day = digits(b, 0, 2)?;
    (b.get(2) == Some(&b'/') && b.get(6) == Some(&b'/') && b.get(11) == Some(&b':')).then_some(())?;
    const MONTHS: [&[u8]; 12] =
        [b"Jan", b"Feb", b"Mar", b"Apr", b"May", b"Jun", b"Jul", b"Aug", b"Sep", b"Oct", b"Nov", b"Dec"];
    let month = MONTHS.iter().position(|m| b.get(3..6) == Some(*m))? as i64 + 1;
    let year = digits(b, 7, 4)?;
    let hour = digits(b, 12, 2)?;
    let minute = digits(b, 15, 2)?;
    let second = digits(b, 18, 2)?;
    let offset = match (b.get(20), b.get(21)) {
        (Some(b' '), Some(&s @ (b'+' | b'-'))) => {
            let sign = if s == b'-' { -1 } else { 1 };
            sign * (digits(b, 22, 2)? * 60 + digits(b, 24, 2)?)
        }
        _ => 0,
    };
    to_ms(year, month, day, hour, minute, second, 0, offset)
}

#[allow(clippy::too_many_arguments)]
fn to_ms(y: i64, mo: i64, d: i64, h: i64, mi: i64, s: i64, ms: i64, offset_min: i64) -> Option<i64> {
    if !(1..=12).contains(&mo) || !(1..=31).contains(&d) || h > 23 || mi > 59 || s > 60 {
        return None;
    }
    let days = days_from_civil(y, mo, d);
    Some((((days * 24 + h) * 60 + mi - offset_min) * 60 + s) * 1000 + ms)
}

/// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's `days_from_civil`
/// algorithm, from memory).
fn days_from_civil(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = if y >= 0 { y } else { y - 399 } / 400;
    let yoe = y - era * 400;
    let mp = (m + 9) % 12;
    let doy = (153 * mp + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

#[cfg(test)]
mod tests {
    use super::*;

    // Reference instants: 2000-03-01T00:00:00Z is 951868800 s after the Unix epoch and
    // 2026-11-30T08:15:02Z is 1796026502 s (both computed with Python's
    // datetime(…, tzinfo=timezone.utc).timestamp()).
    #[test]
    fn parses_iso_and_common_log_format() {
        assert_eq!(find_timestamp_ms(b"x 2000-03-01T00:00:00Z y"), Some(951_868_800_000));
        assert_eq!(find_timestamp_ms(b"2026-11-30 08:15:02.5"), Some(1_796_026_502_500));
        assert_eq!(find_timestamp_ms(b"at 2026-11-30T09:15:02+01:00"), Some(1_796_026_502_000));
        assert_eq!(
            find_timestamp_ms(b"1.2.3.4 - - [30/Nov/2026:08:15:02 +0000] \"GET / HTTP/1.1\""),
            Some(1_796_026_502_000)
        );
        assert_eq!(find_timestamp_ms(b"no time 12:00 here"), None);
    }
}
