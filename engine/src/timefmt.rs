//! RFC 3339 UTC timestamps from the system clock (provenance only).

use std::time::{SystemTime, UNIX_EPOCH};

/// Now, as `2026-12-01T19:35:16.123Z`.
pub fn now_rfc3339() -> String {
    format_rfc3339(SystemTime::now())
}

pub fn format_rfc3339(t: SystemTime) -> String {
    let d = t.duration_since(UNIX_EPOCH).unwrap_or_default();
    let secs = d.as_secs() as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let (y, m, dd) = civil_from_days(days);
    format!(
        "{y:04}-{m:02}-{dd:02}T{:02}:{:02}:{:02}.{:03}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60,
        d.subsec_millis()
    )
}

/// Days since 1970-01-01 to (year, month, day); H. Hinnant's `civil_from_days`
/// algorithm ("chrono-Compatible Low-Level Date Algorithms", 2013).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z.rem_euclid(146_097);
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = (doy - (153 * mp + 2) / 5 + 1) as u32;
    let m = if mp < 10 { mp + 3 } else { mp - 9 } as u32;
    let y = yoe + era * 400 + i64::from(m <= 2);
    (y, m, d)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    #[test]
    fn known_instants() {
        // 2000-03-01 is day 11017 after the epoch (2000 is a leap year).
        assert_eq!(
            format_rfc3339(UNIX_EPOCH + Duration::from_secs(11_017 * 86_400)),
            "2000-03-01T00:00:00.000Z"
        );
        // 1_000_000_000 s after the epoch is 2001-09-09T01:46:40Z (a widely quoted instant).
        assert_eq!(
            format_rfc3339(UNIX_EPOCH + Duration::from_secs(1_000_000_000)),
            "2001-09-09T01:46:40.000Z"
        );
    }
}
