//! RFC 3339 timestamps in UTC, the one formatter of the project: to the second
//! (`2026-03-01T09:30:00Z`, model files and receipts), to the millisecond
//! (`2026-03-01T09:30:00.125Z`, history records, shadow reports, evaluation reports) and to the
//! microsecond (`2026-03-01T09:30:00.125250Z`, log lines), without a date-time dependency since
//! these three forms are all it writes.
//!
//! The civil date comes from the day count by the proleptic Gregorian rules (400-year eras of
//! 146,097 days, March-based years so that the leap day falls at the end of a year).

use std::time::{SystemTime, UNIX_EPOCH};

/// The timestamp of `seconds` after 1970-01-01T00:00:00Z, to the second.
pub fn rfc3339_seconds(seconds: u64) -> String {
    let days = (seconds / 86_400) as i64;
    let of_day = seconds % 86_400;
    let (year, month, day) = civil_from_days(days);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z",
        of_day / 3600,
        of_day % 3600 / 60,
        of_day % 60
    )
}

/// The current time, to the second.
pub fn now_rfc3339_seconds() -> String {
    let seconds = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map(|d| d.as_secs())
        .unwrap_or(0);
    rfc3339_seconds(seconds)
}

/// `time` to the millisecond. Times before 1970 are written as 1970-01-01T00:00:00.000Z; the
/// clock of a machine that promotes models is not expected to read earlier.
pub fn rfc3339_millis(time: SystemTime) -> String {
    let since_epoch = time.duration_since(UNIX_EPOCH).unwrap_or_default();
    let seconds = rfc3339_seconds(since_epoch.as_secs());
    format!(
        "{}.{:03}Z",
        seconds.trim_end_matches('Z'),
        since_epoch.subsec_millis()
    )
}

/// Write `time` to the microsecond into `out` (log lines: written for every request, so into the
/// line being built rather than a new string). Times before 1970 are written as the epoch.
pub fn write_rfc3339_micros(out: &mut impl std::fmt::Write, time: SystemTime) -> std::fmt::Result {
    let since_epoch = time.duration_since(UNIX_EPOCH).unwrap_or_default();
    let seconds = since_epoch.as_secs();
    let of_day = seconds % 86_400;
    let (year, month, day) = civil_from_days((seconds / 86_400) as i64);
    write!(
        out,
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}.{:06}Z",
        of_day / 3600,
        of_day % 3600 / 60,
        of_day % 60,
        since_epoch.subsec_micros()
    )
}

/// Year, month (1–12) and day (1–31) of a day count from 1970-01-01.
fn civil_from_days(days: i64) -> (i64, u32, u32) {
    let shifted = days + 719_468; // days from 0000-03-01
    let era = shifted.div_euclid(146_097);
    let day_of_era = shifted.rem_euclid(146_097);
    let year_of_era =
        (day_of_era - day_of_era / 1460 + day_of_era / 36_524 - day_of_era / 146_096) / 365;
    let day_of_year = day_of_era - (365 * year_of_era + year_of_era / 4 - year_of_era / 100);
    let month_index = (5 * day_of_year + 2) / 153; // 0 = March
    let day = (day_of_year - (153 * month_index + 2) / 5 + 1) as u32;
    let month = if month_index < 10 {
        month_index + 3
    } else {
        month_index - 9
    } as u32;
    let year = year_of_era + era * 400 + i64::from(month <= 2);
    (year, month, day)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reference instants: the epoch; 2000-02-29 (a leap day of a century leap year) is day
    /// 11,016; 1,700,000,000 s is 2023-11-14T22:13:20Z (Python's
    /// `datetime.fromtimestamp(1700000000, timezone.utc)`, exact).
    #[test]
    fn known_instants() {
        assert_eq!(rfc3339_seconds(0), "1970-01-01T00:00:00Z");
        assert_eq!(rfc3339_seconds(11_016 * 86_400), "2000-02-29T00:00:00Z");
        assert_eq!(rfc3339_seconds(1_700_000_000), "2023-11-14T22:13:20Z");
        assert_eq!(rfc3339_seconds(4_107_542_399), "2100-02-28T23:59:59Z");
    }

    fn at(seconds: u64, millis: u64) -> String {
        use std::time::Duration;
        rfc3339_millis(UNIX_EPOCH + Duration::from_secs(seconds) + Duration::from_millis(millis))
    }

    /// Reference: Python 3 `datetime.fromtimestamp(s, timezone.utc).isoformat()`, exact.
    #[test]
    fn known_instants_to_the_millisecond() {
        assert_eq!(at(0, 0), "1970-01-01T00:00:00.000Z");
        assert_eq!(at(951_782_400, 0), "2000-02-29T00:00:00.000Z");
        assert_eq!(at(951_868_799, 999), "2000-02-29T23:59:59.999Z");
        assert_eq!(at(1_709_251_199, 5), "2024-02-29T23:59:59.005Z");
        assert_eq!(at(4_107_542_400, 0), "2100-03-01T00:00:00.000Z");
        assert_eq!(at(1_735_689_599, 0), "2024-12-31T23:59:59.000Z");
    }

    /// Reference: Python 3 `datetime.fromtimestamp(s, timezone.utc)
    /// .isoformat(timespec='microseconds')`, exact.
    #[test]
    fn known_instants_to_the_microsecond() {
        use std::time::Duration;
        let at = |seconds: u64, micros: u64| {
            let mut out = String::new();
            let time = UNIX_EPOCH + Duration::from_secs(seconds) + Duration::from_micros(micros);
            write_rfc3339_micros(&mut out, time).expect("a String takes any text");
            out
        };
        assert_eq!(at(0, 0), "1970-01-01T00:00:00.000000Z");
        assert_eq!(at(951_868_799, 999_001), "2000-02-29T23:59:59.999001Z");
        assert_eq!(at(1_709_251_199, 5), "2024-02-29T23:59:59.000005Z");
    }
}
