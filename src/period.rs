//! The period a long history is shown for: a calendar month in the lab's time zone,
//! stepped back and forth, and read from or written as ISO 8601 "YYYY-MM" (what an
//! `<input type="month">` holds); or a range of days, "YYYY-MM-DD" to "YYYY-MM-DD"
//! (what `<input type="date">` holds). Plain Rust.

use chrono::{DateTime, Datelike, NaiveDate, TimeZone, Utc};

/// The longest range of days shown at once (a year and a day: a leap year with its
/// neighbour's first day). Our bound: what is drawn follows the period, so a range of
/// ten years would put ten years in the page.
pub const LONGEST_RANGE_DAYS: i64 = 367;

/// What a history view shows: a month, or a range of days (both ends included).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Period {
    Month(Month),
    Days { from: NaiveDate, to: NaiveDate },
}

impl Period {
    /// The month `t` falls in, in `tz`: the default period.
    pub fn month_of<Tz: TimeZone>(t: DateTime<Utc>, tz: &Tz) -> Period {
        Period::Month(Month::of(t, tz))
    }

    /// The days from `from` to `to` as typed ("2026-11-03"); a message says what to fix.
    pub fn days(from: &str, to: &str) -> Result<Period, String> {
        let date = |text: &str, which: &str| {
            NaiveDate::parse_from_str(text.trim(), "%Y-%m-%d")
                .map_err(|_| format!("{which}: give a date as YYYY-MM-DD (got {:?})", text.trim()))
        };
        let (from, to) = (date(from, "from")?, date(to, "to")?);
        if to < from {
            return Err("to: the last day comes on or after the first".into());
        }
        if (to - from).num_days() + 1 > LONGEST_RANGE_DAYS {
            return Err(format!(
                "to: show at most {LONGEST_RANGE_DAYS} days at once; choose a shorter range"
            ));
        }
        Ok(Period::Days { from, to })
    }

    /// Whether `t` falls in the period, in `tz`.
    pub fn contains<Tz: TimeZone>(self, t: DateTime<Utc>, tz: &Tz) -> bool {
        match self {
            Period::Month(m) => m.contains(t, tz),
            Period::Days { from, to } => {
                let day = t.with_timezone(tz).date_naive();
                from <= day && day <= to
            }
        }
    }

    /// The period `by` steps later (earlier when negative): months by months, a range
    /// of days by its own length.
    pub fn step(self, by: i32) -> Period {
        match self {
            Period::Month(m) => Period::Month(m.step(by)),
            Period::Days { from, to } => {
                let len = chrono::Duration::days(((to - from).num_days() + 1) * by as i64);
                match (from.checked_add_signed(len), to.checked_add_signed(len)) {
                    (Some(from), Some(to)) => Period::Days { from, to },
                    _ => self,
                }
            }
        }
    }

    /// "2026-11", or "2026-11-03 to 2026-11-20".
    pub fn label(self) -> String {
        match self {
            Period::Month(m) => m.iso(),
            Period::Days { from, to } => format!("{from} to {to}"),
        }
    }

    /// The period as instants, `[from, to)`, for `tz`: comparing instants is what a view
    /// does per record (no zone arithmetic per record). `None` only for a period at the
    /// calendar's ends.
    pub fn instants<Tz: TimeZone>(self, tz: &Tz) -> Option<(DateTime<Utc>, DateTime<Utc>)> {
        let (first, after) = match self {
            Period::Month(m) => {
                let next = m.step(1);
                (
                    NaiveDate::from_ymd_opt(m.year, m.month, 1)?,
                    NaiveDate::from_ymd_opt(next.year, next.month, 1)?,
                )
            }
            Period::Days { from, to } => (from, to.succ_opt()?),
        };
        let start = |d: NaiveDate| {
            // Local midnight; where a zone skips midnight, the first moment after it.
            let midnight = d.and_hms_opt(0, 0, 0)?;
            (0..=4).find_map(|h| {
                tz.from_local_datetime(&(midnight + chrono::Duration::hours(h)))
                    .earliest()
                    .map(|t| t.with_timezone(&Utc))
            })
        };
        Some((start(first)?, start(after)?))
    }

    /// The month shown, when the period is one.
    pub fn month(self) -> Option<Month> {
        match self {
            Period::Month(m) => Some(m),
            Period::Days { .. } => None,
        }
    }
}

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

    /// A range includes both its ends in the lab's zone, steps by its own length, and
    /// refuses a reversed, unreadable or over-long range with the field to fix.
    #[test]
    fn a_range_of_days() {
        let p = Period::days("2026-11-03", " 2026-11-09").unwrap();
        assert_eq!(p.label(), "2026-11-03 to 2026-11-09");
        let at = |s: &str| s.parse::<DateTime<Utc>>().unwrap();
        assert!(p.contains(at("2026-11-03T00:00:00Z"), &Utc));
        assert!(p.contains(at("2026-11-09T23:59:59Z"), &Utc));
        assert!(!p.contains(at("2026-11-10T00:00:00Z"), &Utc));
        let east = FixedOffset::east_opt(3 * 3600).unwrap();
        assert!(
            p.contains(at("2026-11-02T21:30:00Z"), &east),
            "03 Nov 00:30 at UTC+3"
        );
        assert_eq!(p.step(1).label(), "2026-11-10 to 2026-11-16");
        assert_eq!(p.step(-1).label(), "2026-10-27 to 2026-11-02");
        assert!(Period::days("2026-11-09", "2026-11-03")
            .unwrap_err()
            .starts_with("to:"));
        assert!(Period::days("03/11/2026", "2026-11-09")
            .unwrap_err()
            .starts_with("from:"));
        assert!(Period::days("2024-01-01", "2025-01-01").is_ok(), "367 days");
        assert!(Period::days("2024-01-01", "2025-01-02")
            .unwrap_err()
            .contains("at most 367"));
        // As instants: the same answers as `contains`, in either zone.
        for zone in [east, FixedOffset::west_opt(10 * 3600).unwrap()] {
            let (from, to) = p.instants(&zone).unwrap();
            for t in [
                "2026-11-02T13:59:59Z",
                "2026-11-02T21:00:00Z",
                "2026-11-03T10:00:00Z",
                "2026-11-09T20:59:59Z",
                "2026-11-10T09:59:59Z",
                "2026-11-10T10:00:00Z",
            ] {
                let t = at(t);
                assert_eq!(from <= t && t < to, p.contains(t, &zone), "{t} at {zone}");
            }
        }
        let (from, to) = Period::Month(Month::parse("2026-12").unwrap())
            .instants(&east)
            .unwrap();
        assert_eq!(
            (from, to),
            (at("2026-11-30T21:00:00Z"), at("2026-12-31T21:00:00Z"))
        );
        let m = Period::month_of(at("2026-11-30T22:30:00Z"), &east);
        assert_eq!(
            (m.label(), m.step(-1).label()),
            ("2026-12".into(), "2026-11".into())
        );
        assert_eq!(p.month(), None);
    }

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
