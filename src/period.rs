//! The period a long history is shown for: a calendar month in the lab's time zone,
//! stepped back and forth, and read from or written as ISO 8601 "YYYY-MM" (what an
//! `<input type="month">` holds). Plain Rust.

use chrono::{DateTime, Datelike, TimeZone, Utc};

/// A calendar month.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub struct Month {
    pub year: i32,
    /// 1–12.
    pub month: u32,
}

impl Month {
    /// The month `t` falls in, in `tz`.
    pub fn of<Tz: TimeZone>(t: DateTime<Utc>, tz: &Tz) -> Month {
        let local = t.with_timezone(tz);
        Month {
            year: local.year(),
            month: local.month(),
        }
    }

    /// "2026-11", as ISO 8601 writes a month; anything else is `None`.
    pub fn parse(text: &str) -> Option<Month> {
        let (y, m) = text.trim().split_once('-')?;
        if y.len() != 4 || m.len() != 2 {
            return None;
        }
        let (year, month) = (y.parse().ok()?, m.parse().ok()?);
        (1..=12).contains(&month).then_some(Month { year, month })
    }

    /// The month `by` months later (earlier when negative).
    pub fn step(self, by: i32) -> Month {
        let index = self.year * 12 + self.month as i32 - 1 + by;
        Month {
            year: index.div_euclid(12),
            month: index.rem_euclid(12) as u32 + 1,
        }
    }

    /// Whether `t` falls in this month in `tz`.
    pub fn contains<Tz: TimeZone>(self, t: DateTime<Utc>, tz: &Tz) -> bool {
        Month::of(t, tz) == self
    }

    /// "2026-11".
    pub fn iso(self) -> String {
        format!("{:04}-{:02}", self.year, self.month)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::FixedOffset;

    #[test]
    fn months_step_across_years_and_read_as_iso_8601() {
        let nov = Month::parse("2026-11").unwrap();
        assert_eq!(nov.step(1).iso(), "2026-12");
        assert_eq!(nov.step(2).iso(), "2027-01");
        assert_eq!(nov.step(-11).iso(), "2025-12");
        assert_eq!(nov.step(-23).iso(), "2024-12");
        for bad in ["2026-13", "2026-00", "26-11", "2026-1", "November", ""] {
            assert_eq!(Month::parse(bad), None, "{bad}");
        }
    }

    /// A run at 22:30 UTC on 30 November is in December for a lab at UTC+3.
    #[test]
    fn a_moment_belongs_to_the_month_of_the_labs_zone() {
        let t: DateTime<Utc> = "2026-11-30T22:30:00Z".parse().unwrap();
        let east = FixedOffset::east_opt(3 * 3600).unwrap();
        assert_eq!(Month::of(t, &Utc).iso(), "2026-11");
        assert_eq!(Month::of(t, &east).iso(), "2026-12");
        assert!(Month::parse("2026-12").unwrap().contains(t, &east));
    }
}
