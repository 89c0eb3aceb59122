//! Calendar arithmetic for the demo generator: UTC month boundaries in milliseconds since
//! the Unix epoch, without a date library.

/// Milliseconds in one day.
pub(crate) const MS_PER_DAY: i64 = 86_400_000;

/// Days from 1970-01-01 to the given proleptic Gregorian date (negative before 1970).
///
/// The days-from-civil algorithm (H. Hinnant, "chrono-Compatible Low-Level Date
/// Algorithms", 2013): shift the year to start in March so that the leap day is last,
/// then count whole 400-year eras, years of the era and days of the year.
pub(crate) fn days_from_civil(year: i32, month: u32, day: u32) -> i64 {
    let y = i64::from(year) - i64::from(month <= 2);
    let era = y.div_euclid(400);
    let yoe = y - era * 400; // [0, 399]
    let m = i64::from(month);
    let doy = (153 * (if m > 2 { m - 3 } else { m + 9 }) + 2) / 5 + i64::from(day) - 1; // [0, 365]
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy; // [0, 146096]
    era * 146_097 + doe - 719_468
}

/// One calendar month of the demo year.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Month {
    /// The year.
    pub year: i32,
    /// The month, 1–12.
    pub month: u32,
}

impl Month {
    /// The `index`-th month (0-based) counted from January of `start_year`.
    pub fn nth(start_year: i32, index: u32) -> Month {
        Month {
            year: start_year + (index / 12) as i32,
            month: index % 12 + 1,
        }
    }

    /// The partition name, `YYYY-MM`.
    pub fn name(&self) -> String {
        format!("{:04}-{:02}", self.year, self.month)
    }

    /// The month's first instant, in ms since the Unix epoch (UTC).
    pub fn start_ms(&self) -> i64 {
        days_from_civil(self.year, self.month, 1) * MS_PER_DAY
    }

    /// The next month's first instant, in ms since the Unix epoch (UTC).
    pub fn end_ms(&self) -> i64 {
        let (y, m) = if self.month == 12 {
            (self.year + 1, 1)
        } else {
            (self.year, self.month + 1)
        };
        days_from_civil(y, m, 1) * MS_PER_DAY
    }
}

/// Day of the week for a timestamp in ms since the epoch: 0 = Monday … 6 = Sunday
/// (1970-01-01 was a Thursday).
pub(crate) fn weekday(ms: i64) -> u32 {
    (ms.div_euclid(MS_PER_DAY) + 3).rem_euclid(7) as u32
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn known_dates() {
        // common practice: Unix day numbers of well-known dates
        assert_eq!(days_from_civil(1970, 1, 1), 0);
        assert_eq!(days_from_civil(2000, 3, 1), 11_017);
        assert_eq!(days_from_civil(2024, 2, 29), 19_782);
        assert_eq!(days_from_civil(1969, 12, 31), -1);
        // common practice: 2024 is a leap year, 2023 is not
        let feb24 = Month {
            year: 2024,
            month: 2,
        };
        assert_eq!((feb24.end_ms() - feb24.start_ms()) / MS_PER_DAY, 29);
        let feb23 = Month {
            year: 2023,
            month: 2,
        };
        assert_eq!((feb23.end_ms() - feb23.start_ms()) / MS_PER_DAY, 28);
        // common practice: 2024-01-01 was a Monday
        assert_eq!(weekday(days_from_civil(2024, 1, 1) * MS_PER_DAY), 0);
        assert_eq!(Month::nth(2024, 11).name(), "2024-12");
    }
}
