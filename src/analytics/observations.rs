//! Observation days of a swap's realized leg (MATH.md section 8).
//!
//! A variance, gamma or leverage swap observes one close per business day; its realized
//! leg averages the squared daily returns over the number of returns expected over its
//! life, so a seasoned swap weighs what has been realized by returns observed over
//! returns expected, not by calendar time. Business days here are weekdays less the
//! holidays a book gives (common practice, no source: exchange calendars differ, so the
//! holidays are the user's).
//!
//! Counting rule: the returns of a swap started on day `s` and maturing on day `m` are
//! those of the observation days `d` with `s < d <= m` (the close on `s` is the initial
//! level). At a valuation on day `v` the returns already observed are those with
//! `s < d < v`: the valuation day's own close is not yet in.

use chrono::{Datelike, NaiveDate, Weekday};

/// Weekdays less a list of holidays.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct ObservationCalendar {
    /// Sorted, without repeats.
    holidays: Vec<NaiveDate>,
}

impl ObservationCalendar {
    /// Every weekday observes.
    pub fn weekdays() -> Self {
        Self::default()
    }

    /// Weekdays less `holidays` (any order; repeats and weekend dates are harmless).
    pub fn with_holidays(mut holidays: Vec<NaiveDate>) -> Self {
        holidays.sort_unstable();
        holidays.dedup();
        Self { holidays }
    }

    /// Number of holidays given.
    pub fn holiday_count(&self) -> usize {
        self.holidays.len()
    }

    /// Whether `day` has an observation.
    pub fn observes(&self, day: NaiveDate) -> bool {
        !is_weekend(day) && self.holidays.binary_search(&day).is_err()
    }

    /// Observation days `d` with `after < d <= through`; 0 when `through <= after`.
    pub fn count_after_through(&self, after: NaiveDate, through: NaiveDate) -> u32 {
        if through <= after {
            return 0;
        }
        let days = (through - after).num_days();
        let weeks = days / 7;
        // Five weekdays in every full week; the remaining days one by one.
        let mut count = 5 * weeks;
        let mut day = after + chrono::Days::new(7 * weeks as u64);
        while day < through {
            day = day.succ_opt().unwrap_or(through);
            if !is_weekend(day) {
                count += 1;
            }
        }
        let lo = self.holidays.partition_point(|h| *h <= after);
        let hi = self.holidays.partition_point(|h| *h <= through);
        let holidays_on_weekdays = self.holidays[lo..hi].iter().filter(|h| !is_weekend(**h)).count() as i64;
        u32::try_from(count - holidays_on_weekdays).unwrap_or(u32::MAX)
    }

    /// Returns observed by a valuation on `valuation` of a swap started on `start`:
    /// observation days `d` with `start < d < valuation`.
    pub fn observed_before(&self, start: NaiveDate, valuation: NaiveDate) -> u32 {
        valuation.pred_opt().map_or(0, |last| self.count_after_through(start, last))
    }
}

fn is_weekend(day: NaiveDate) -> bool {
    matches!(day.weekday(), Weekday::Sat | Weekday::Sun)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn day(y: i32, m: u32, d: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, d).expect("valid date")
    }

    /// The slow definition the fast count must equal.
    fn count_one_by_one(calendar: &ObservationCalendar, after: NaiveDate, through: NaiveDate) -> u32 {
        after.iter_days().skip(1).take_while(|d| *d <= through).filter(|d| calendar.observes(*d)).count() as u32
    }

    #[test]
    fn counts_weekdays_less_holidays_as_a_walk_over_the_days_does() {
        let calendar = ObservationCalendar::with_holidays(vec![day(2026, 12, 25), day(2027, 1, 1), day(2026, 12, 26)]);
        let start = day(2026, 11, 27);
        for length in 0..400 {
            let end = start + chrono::Days::new(length);
            for c in [&calendar, &ObservationCalendar::weekdays()] {
                assert_eq!(c.count_after_through(start, end), count_one_by_one(c, start, end), "{end}");
            }
        }
        // Hand count: Mon 30 Nov to Fri 4 Dec 2026 are five returns after Fri 27 Nov.
        assert_eq!(calendar.count_after_through(day(2026, 11, 27), day(2026, 12, 4)), 5);
        // Fri 25 Dec 2026 is a holiday, Sat 26 Dec a weekend anyway.
        assert_eq!(calendar.count_after_through(day(2026, 12, 24), day(2026, 12, 28)), 1);
        assert_eq!(calendar.count_after_through(day(2026, 12, 4), day(2026, 11, 27)), 0);
    }

    #[test]
    fn the_valuation_days_own_close_is_not_yet_observed() {
        let weekdays = ObservationCalendar::weekdays();
        // Started Mon 23 Nov 2026, valued Mon 30 Nov: Tue to Fri observed, Mon not yet.
        assert_eq!(weekdays.observed_before(day(2026, 11, 23), day(2026, 11, 30)), 4);
        assert_eq!(weekdays.observed_before(day(2026, 11, 30), day(2026, 11, 30)), 0);
        assert_eq!(weekdays.observed_before(day(2026, 12, 7), day(2026, 11, 30)), 0);
    }
}
