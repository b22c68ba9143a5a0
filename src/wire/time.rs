//! Times as users write them: RFC 3339, read into UTC the same way everywhere.

use chrono::{DateTime, Timelike, Utc};

/// `text` as an RFC 3339 time in UTC, or the message that says why not (without the
/// field's name, which the caller adds). A leap second (`:60`) is refused: it has no
/// place on the ACT/365F clock, and would read `:60` in one output and `:00` of the
/// next minute in another; refused rather than moved.
///
/// # Errors
/// The message, for text that is not RFC 3339 or that names a leap second.
pub fn parse_utc(text: &str) -> Result<DateTime<Utc>, String> {
    match DateTime::parse_from_rfc3339(text) {
        Ok(t) if t.nanosecond() >= 1_000_000_000 => {
            Err(format!("leap seconds (:60) are not accepted; give 23:59:59 or the next minute, got {text:?}"))
        }
        Ok(t) => Ok(t.with_timezone(&Utc)),
        Err(e) => Err(format!("must be an RFC 3339 time such as 2026-11-30T15:30:00Z ({e}), got {text:?}")),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn offsets_become_utc_and_leap_seconds_are_refused() {
        // RFC 3339 section 5.6: an offset time names the same instant in UTC.
        let t = parse_utc("2026-11-30T17:30:00+02:00").expect("time");
        assert_eq!(t.to_rfc3339(), "2026-11-30T15:30:00+00:00");
        let leap = parse_utc("2026-12-31T23:59:60Z").expect_err("leap second");
        assert!(leap.contains("leap seconds"), "{leap}");
        let bad = parse_utc("30/11/2026").expect_err("not RFC 3339");
        assert!(bad.contains("RFC 3339"), "{bad}");
    }
}
