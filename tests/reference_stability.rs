//! Stability edge cases in real time zones (IANA tz database, via chrono-tz):
//! daylight-saving changes, midnight gaps, end of month. The rule that a duration is
//! elapsed time, and that a label date means "to the end of that day", is common
//! practice.

use chrono::{DateTime, Duration, NaiveDate, TimeZone, Utc};
use chrono_tz::{America::Santiago, Europe::Berlin, Tz};
use cuvette::engine::stability::{
    evaluate, local_date, ExpiryDate, Limit, Material, StabilityState, WarningWindow,
};

fn material(expiry: &str) -> Material {
    Material {
        expiry: expiry.parse().unwrap(),
        opened_at: None,
        in_use_hours: None,
        on_board_since: None,
        on_board_hours: None,
        frozen: None,
        analytes: vec![],
    }
}

/// EU summer time starts on the last Sunday of March at 01:00 UTC (Directive
/// 2000/84/EC): 2026-03-29. 48 h from 10:00 CET on the 28th is 11:00 CEST on the 30th.
#[test]
fn in_use_stability_across_spring_forward_is_elapsed_time() {
    let opened = Berlin
        .with_ymd_and_hms(2026, 3, 28, 10, 0, 0)
        .unwrap()
        .with_timezone(&Utc);
    let mut m = material("2027-01");
    m.opened_at = Some(opened);
    m.in_use_hours = Some(48.0);
    let r = evaluate(&m, opened, &Berlin, WarningWindow::default()).unwrap();
    let local = r.material.until.with_timezone(&Berlin);
    assert_eq!(r.material.governed_by, Limit::InUse);
    assert_eq!(
        local.format("%Y-%m-%d %H:%M %Z").to_string(),
        "2026-03-30 11:00 CEST"
    );
    assert_eq!(r.material.until - opened, Duration::hours(48));
}

/// EU summer time ends on the last Sunday of October at 01:00 UTC: 2026-10-25. A label
/// date of 2026-10-25 ends at local midnight, which is 23:00 UTC (CET, UTC+1).
#[test]
fn day_expiry_on_fall_back_day_ends_at_local_midnight() {
    let e: ExpiryDate = "2026-10-25".parse().unwrap();
    let until = e.expires_at(&Berlin).unwrap();
    assert_eq!(
        until,
        DateTime::parse_from_rfc3339("2026-10-25T23:00:00Z").unwrap()
    );
    let m = material("2026-10-25");
    let just_before = until - Duration::seconds(1);
    let r = evaluate(&m, just_before, &Berlin, WarningWindow::default()).unwrap();
    assert_eq!(r.material.state, StabilityState::Expiring);
    let r = evaluate(&m, until, &Berlin, WarningWindow::default()).unwrap();
    assert_eq!(r.material.state, StabilityState::Expired);
}

/// For every day of 2026 and 2027 in zones whose clocks change at midnight (Santiago)
/// or at night (Berlin): the expiry instant is the first moment of the next local day,
/// and one second earlier is still on the label date.
#[test]
fn every_label_date_ends_at_the_start_of_the_next_local_day() {
    let zones: [Tz; 2] = [Santiago, Berlin];
    for tz in zones {
        let mut day = NaiveDate::from_ymd_opt(2026, 1, 1).unwrap();
        while day.format("%Y").to_string() != "2028" {
            let until = ExpiryDate::Day(day).expires_at(&tz).unwrap();
            assert_eq!(
                local_date(until - Duration::seconds(1), &tz),
                day,
                "{tz} {day}"
            );
            assert_eq!(
                local_date(until, &tz),
                day.succ_opt().unwrap(),
                "{tz} {day}"
            );
            day = day.succ_opt().unwrap();
        }
    }
}

/// End of month for a year-month label: 2026-02 (not a leap year) ends at the start of
/// 1 March local time.
#[test]
fn month_label_ends_with_the_month() {
    let e: ExpiryDate = "2026-02".parse().unwrap();
    assert_eq!(
        e.expires_at(&Berlin).unwrap(),
        Berlin
            .with_ymd_and_hms(2026, 3, 1, 0, 0, 0)
            .unwrap()
            .with_timezone(&Utc)
    );
}
