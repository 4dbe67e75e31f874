//! Stability of reagents, calibrators and controls: until when may a material be used?
//!
//! The usable-until time is the earliest of every limit that applies:
//! * the maker's expiry of the unopened material (a date means the end of that day, a
//!   year-month the end of that month, both in the lab's local time);
//! * opened or reconstituted + the in-use stability;
//! * loaded on the analyzer + the on-board stability;
//! * for a frozen aliquot: frozen + the frozen stability, thawed + the stability after
//!   thawing; an aliquot may be thawed once.
//!
//! Inside a multi-analyte calibrator or control each analyte may have its own, shorter
//! stability (enzymes and bilirubin go first); each analyte then gets its own
//! usable-until. Durations are elapsed time: 48 h after 10:00 on the day before a
//! daylight-saving change is 11:00 local two days later. The caller passes "now" and
//! the lab's time zone; nothing here reads a clock.

use chrono::{DateTime, Datelike, Duration, LocalResult, NaiveDate, TimeZone, Utc};
use serde::{Deserialize, Serialize};
use std::fmt;

/// The maker's expiry printed on the label.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub enum ExpiryDate {
    /// "2027-03-31": usable to the end of that day.
    Day(NaiveDate),
    /// "2027-03": usable to the end of that month.
    Month { year: i32, month: u32 },
}

impl TryFrom<String> for ExpiryDate {
    type Error = String;
    fn try_from(s: String) -> Result<Self, String> {
        s.parse()
    }
}

impl From<ExpiryDate> for String {
    fn from(e: ExpiryDate) -> String {
        e.to_string()
    }
}

impl std::str::FromStr for ExpiryDate {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        let t = s.trim();
        if let Ok(d) = NaiveDate::parse_from_str(t, "%Y-%m-%d") {
            return Ok(ExpiryDate::Day(d));
        }
        if let Some((y, m)) = t.split_once('-') {
            if let (Ok(year), Ok(month)) = (y.parse::<i32>(), m.parse::<u32>()) {
                if (1..=12).contains(&month) && y.len() == 4 && m.len() == 2 {
                    return Ok(ExpiryDate::Month { year, month });
                }
            }
        }
        Err(format!(
            "expiry {t:?} is not a date: write it as on the label, YYYY-MM-DD or YYYY-MM"
        ))
    }
}

impl fmt::Display for ExpiryDate {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ExpiryDate::Day(d) => write!(f, "{}", d.format("%Y-%m-%d")),
            ExpiryDate::Month { year, month } => write!(f, "{year:04}-{month:02}"),
        }
    }
}

impl ExpiryDate {
    /// The first local day after the expiry (the material is expired from its start).
    fn first_day_after(self) -> Option<NaiveDate> {
        match self {
            ExpiryDate::Day(d) => d.succ_opt(),
            ExpiryDate::Month { year, month } => {
                let (y, m) = if month == 12 {
                    (year + 1, 1)
                } else {
                    (year, month + 1)
                };
                NaiveDate::from_ymd_opt(y, m, 1)
            }
        }
    }

    /// The same kind of label `days` later (a month label moves with its last day).
    pub fn shifted(self, days: i64) -> ExpiryDate {
        let moved = |day: NaiveDate| day.checked_add_signed(Duration::try_days(days)?);
        match self {
            ExpiryDate::Day(day) => moved(day).map_or(self, ExpiryDate::Day),
            ExpiryDate::Month { year, month } => last_day_of_month(year, month)
                .and_then(moved)
                .map_or(self, |last| ExpiryDate::Month {
                    year: last.year(),
                    month: last.month(),
                }),
        }
    }

    /// The instant the material expires: the start of the next local day.
    pub fn expires_at<Tz: TimeZone>(self, tz: &Tz) -> Option<DateTime<Utc>> {
        let day = self.first_day_after()?;
        start_of_local_day(day, tz)
    }
}

/// The first instant of a local calendar day. Where midnight falls in a daylight-saving
/// gap the day starts at the end of the gap; where it repeats, at its first occurrence.
pub fn start_of_local_day<Tz: TimeZone>(day: NaiveDate, tz: &Tz) -> Option<DateTime<Utc>> {
    let midnight = day.and_hms_opt(0, 0, 0)?;
    for minutes in (0..=180).step_by(15) {
        match tz.from_local_datetime(&(midnight + Duration::minutes(minutes))) {
            LocalResult::Single(t) => return Some(t.with_timezone(&Utc)),
            LocalResult::Ambiguous(a, _) => return Some(a.with_timezone(&Utc)),
            LocalResult::None => continue,
        }
    }
    None
}

/// A frozen aliquot's history.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FrozenAliquot {
    pub frozen_at: DateTime<Utc>,
    /// Stability while frozen, hours.
    pub frozen_hours: f64,
    /// When it was thawed, if it has been.
    #[serde(default)]
    pub thawed_at: Option<DateTime<Utc>>,
    /// How many times it has been thawed (more than once: discard).
    #[serde(default)]
    pub thaw_count: u32,
    /// Stability after thawing, hours.
    pub after_thaw_hours: f64,
}

/// One analyte inside a multi-analyte material with its own, usually shorter, stability.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AnalyteStability {
    pub analyte: String,
    /// In-use stability after opening or reconstitution, hours.
    #[serde(default)]
    pub in_use_hours: Option<f64>,
    /// Stability after thawing a frozen aliquot, hours.
    #[serde(default)]
    pub after_thaw_hours: Option<f64>,
}

/// What is known about one material's stability.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Material {
    /// The maker's expiry of the unopened material.
    pub expiry: ExpiryDate,
    /// When it was opened or reconstituted.
    #[serde(default)]
    pub opened_at: Option<DateTime<Utc>>,
    /// In-use stability after opening or reconstitution, hours.
    #[serde(default)]
    pub in_use_hours: Option<f64>,
    /// When it was loaded on the analyzer.
    #[serde(default)]
    pub on_board_since: Option<DateTime<Utc>>,
    /// On-board stability, hours.
    #[serde(default)]
    pub on_board_hours: Option<f64>,
    #[serde(default)]
    pub frozen: Option<FrozenAliquot>,
    #[serde(default)]
    pub analytes: Vec<AnalyteStability>,
}

impl Material {
    /// Every time moved by `by`, and the maker's expiry label by `by` in whole days
    /// (rounded), so a material keeps its story when the demo lab is brought to today.
    /// A time that would leave the calendar stays where it was.
    pub fn shift_by(&mut self, by: Duration) {
        let days = (by.num_seconds() as f64 / 86_400.0).round() as i64;
        self.expiry = self.expiry.shifted(days);
        let shift = |t: &mut DateTime<Utc>| *t = t.checked_add_signed(by).unwrap_or(*t);
        self.opened_at.iter_mut().for_each(shift);
        self.on_board_since.iter_mut().for_each(shift);
        if let Some(f) = self.frozen.as_mut() {
            shift(&mut f.frozen_at);
            f.thawed_at.iter_mut().for_each(shift);
        }
    }

    /// The moments recorded for this material: opened, loaded, frozen, thawed.
    pub fn recorded_times(&self) -> impl Iterator<Item = DateTime<Utc>> + '_ {
        let frozen = self
            .frozen
            .iter()
            .flat_map(|f| std::iter::once(f.frozen_at).chain(f.thawed_at));
        self.opened_at
            .into_iter()
            .chain(self.on_board_since)
            .chain(frozen)
    }
}

/// Which limit sets the usable-until time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Limit {
    MakerExpiry,
    InUse,
    OnBoard,
    Frozen,
    AfterThaw,
    ThawedMoreThanOnce,
}

impl Limit {
    /// The limit in a technologist's words.
    pub fn describe(self) -> &'static str {
        match self {
            Limit::MakerExpiry => "maker's expiry date",
            Limit::InUse => "stability after opening or reconstitution",
            Limit::OnBoard => "on-board stability",
            Limit::Frozen => "stability while frozen",
            Limit::AfterThaw => "stability after thawing",
            Limit::ThawedMoreThanOnce => "thawed more than once: discard the aliquot",
        }
    }
}

/// Ok, expiring soon, or expired.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StabilityState {
    Ok,
    Expiring,
    Expired,
}

/// When a material (or one analyte in it) stops being usable, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct UsableUntil {
    pub until: DateTime<Utc>,
    pub governed_by: Limit,
    pub state: StabilityState,
    /// Time left (negative once expired), hours.
    pub hours_left: f64,
    /// Extra facts a technologist should see (e.g. thawed after its frozen stability).
    pub remarks: Vec<String>,
}

/// The verdict for a material and each analyte with its own stability.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StabilityReport {
    pub material: UsableUntil,
    pub analytes: Vec<(String, UsableUntil)>,
}

/// When "expiring" starts: `hours` before the limit, but never more than `fraction` of
/// an in-use or on-board stability (an 8-hour on-board reagent is not "expiring" the
/// moment it is loaded). Lab policy; the defaults (48 h, a quarter) are our choice.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct WarningWindow {
    pub hours: f64,
    pub fraction: f64,
}

impl Default for WarningWindow {
    fn default() -> Self {
        WarningWindow {
            hours: 48.0,
            fraction: 0.25,
        }
    }
}

/// A material that cannot be evaluated.
#[derive(Debug, Clone, PartialEq)]
pub struct StabilityError(pub String);

impl fmt::Display for StabilityError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for StabilityError {}

/// The aliquot thawed at `at`. A frozen aliquot is thawed once: one already thawed is
/// used up or discarded, never refrozen or thawed again.
pub fn thaw(m: &Material, at: DateTime<Utc>) -> Result<Material, StabilityError> {
    let Some(f) = &m.frozen else {
        return Err(StabilityError(
            "this material is not a frozen aliquot, so there is nothing to thaw".into(),
        ));
    };
    if f.thawed_at.is_some() || f.thaw_count > 0 {
        let when = f.thawed_at.map_or("before".to_string(), |t| {
            t.format("%Y-%m-%d %H:%M UTC").to_string()
        });
        return Err(StabilityError(format!(
            "this aliquot was already thawed ({when}): a thawed aliquot is used or discarded, \
             never refrozen or thawed again; thaw another aliquot"
        )));
    }
    if at < f.frozen_at {
        return Err(StabilityError(
            "the thaw would be before the aliquot was frozen: check the PC's clock".into(),
        ));
    }
    let mut thawed = m.clone();
    if let Some(f) = thawed.frozen.as_mut() {
        f.thawed_at = Some(at);
        f.thaw_count = 1;
    }
    Ok(thawed)
}

/// `count` aliquots of `source` frozen at `at`: each keeps the maker's expiry and the
/// analytes of the source, is stable `frozen_hours` in the freezer and `after_thaw_hours`
/// once thawed. The source's own opening and on-board times do not carry over.
pub fn aliquots(
    source: &Material,
    count: usize,
    frozen_hours: f64,
    after_thaw_hours: f64,
    at: DateTime<Utc>,
) -> Result<Vec<Material>, StabilityError> {
    if !super::plausible::ALIQUOTS_AT_ONCE.contains(count as f64) {
        return Err(StabilityError(
            "aliquots: make between 1 and 200 at a time".into(),
        ));
    }
    check_hours("stability while frozen", Some(frozen_hours))?;
    check_hours("stability after thawing", Some(after_thaw_hours))?;
    if source.frozen.is_some() {
        return Err(StabilityError(
            "this is already a frozen aliquot: a thawed aliquot is never refrozen".into(),
        ));
    }
    let one = Material {
        expiry: source.expiry,
        opened_at: None,
        in_use_hours: None,
        on_board_since: None,
        on_board_hours: None,
        frozen: Some(FrozenAliquot {
            frozen_at: at,
            frozen_hours,
            thawed_at: None,
            thaw_count: 0,
            after_thaw_hours,
        }),
        analytes: source.analytes.clone(),
    };
    Ok(vec![one; count])
}

/// A stability in hours as a duration; `check_hours` has bounded it, and a value that
/// slipped past (never expected) becomes "no time at all" rather than an overflow.
fn hours(h: f64) -> Duration {
    if super::plausible::STABILITY_HOURS.contains(h) {
        Duration::milliseconds((h * 3_600_000.0).round() as i64)
    } else {
        Duration::zero()
    }
}

/// `t` plus a stability, or the end of the calendar where the sum would leave it.
fn after(t: DateTime<Utc>, h: f64) -> DateTime<Utc> {
    t.checked_add_signed(hours(h))
        .unwrap_or(DateTime::<Utc>::MAX_UTC)
}

fn check_hours(name: &str, h: Option<f64>) -> Result<(), StabilityError> {
    match h {
        Some(v) => super::plausible::STABILITY_HOURS
            .check(name, v)
            .map(|_| ())
            .map_err(|e| StabilityError(format!("{e} (copy it from the insert)"))),
        None => Ok(()),
    }
}

/// A candidate limit: when, which, and the length of the stability (for the warning).
type Candidate = (DateTime<Utc>, Limit, Option<f64>);

/// Evaluate a material at `now` in the lab's time zone `tz`.
pub fn evaluate<Tz: TimeZone>(
    m: &Material,
    now: DateTime<Utc>,
    tz: &Tz,
    warning: WarningWindow,
) -> Result<StabilityReport, StabilityError> {
    check_hours("in_use_hours", m.in_use_hours)?;
    check_hours("on_board_hours", m.on_board_hours)?;
    let maker = m.expiry.expires_at(tz).ok_or_else(|| {
        StabilityError(format!(
            "expiry {} is outside the calendar this program handles",
            m.expiry
        ))
    })?;
    let mut remarks = Vec::new();
    let mut common: Vec<Candidate> = vec![(maker, Limit::MakerExpiry, None)];
    if let (Some(since), Some(h)) = (m.on_board_since, m.on_board_hours) {
        common.push((after(since, h), Limit::OnBoard, Some(h)));
    }
    if m.in_use_hours.is_some() && m.opened_at.is_none() {
        remarks.push("not opened yet: the in-use stability starts when it is opened".to_string());
    }
    if let Some(opened) = m.opened_at {
        if opened >= maker {
            remarks.push(format!("opened after the maker's expiry ({})", m.expiry));
        }
    }
    let mut thawed_at = None;
    if let Some(f) = &m.frozen {
        check_hours("frozen_hours", Some(f.frozen_hours))?;
        check_hours("after_thaw_hours", Some(f.after_thaw_hours))?;
        let frozen_limit = after(f.frozen_at, f.frozen_hours);
        common.push((frozen_limit, Limit::Frozen, None));
        if let Some(t) = f.thawed_at {
            if t < f.frozen_at {
                return Err(StabilityError(
                    "thawed_at is before frozen_at: check the dates of this aliquot".to_string(),
                ));
            }
            thawed_at = Some(t);
            if t >= frozen_limit {
                remarks.push(
                    "thawed after its stability while frozen had run out: discard".to_string(),
                );
            }
            if f.thaw_count > 1 {
                common.push((t, Limit::ThawedMoreThanOnce, None));
            }
        }
    }
    let material_only = |in_use: Option<f64>, after_thaw: Option<f64>| -> Vec<Candidate> {
        let mut v = common.clone();
        if let (Some(opened), Some(h)) = (m.opened_at, in_use) {
            v.push((after(opened, h), Limit::InUse, Some(h)));
        }
        if let (Some(t), Some(h)) = (thawed_at, after_thaw) {
            v.push((after(t, h), Limit::AfterThaw, Some(h)));
        }
        v
    };
    let material_after_thaw = m.frozen.as_ref().map(|f| f.after_thaw_hours);
    let material = pick(
        material_only(m.in_use_hours, material_after_thaw),
        now,
        warning,
        remarks.clone(),
    );
    let mut analytes = Vec::new();
    for a in &m.analytes {
        check_hours(&format!("{}: in_use_hours", a.analyte), a.in_use_hours)?;
        check_hours(
            &format!("{}: after_thaw_hours", a.analyte),
            a.after_thaw_hours,
        )?;
        let mut c = material_only(m.in_use_hours, material_after_thaw);
        if let (Some(opened), Some(h)) = (m.opened_at, a.in_use_hours) {
            c.push((after(opened, h), Limit::InUse, Some(h)));
        }
        if let (Some(t), Some(h)) = (thawed_at, a.after_thaw_hours) {
            c.push((after(t, h), Limit::AfterThaw, Some(h)));
        }
        analytes.push((a.analyte.clone(), pick(c, now, warning, remarks.clone())));
    }
    Ok(StabilityReport { material, analytes })
}

fn pick(
    candidates: Vec<Candidate>,
    now: DateTime<Utc>,
    warning: WarningWindow,
    remarks: Vec<String>,
) -> UsableUntil {
    // The earliest; on a tie the first listed (the maker's expiry) governs.
    let mut best = candidates[0];
    for c in &candidates[1..] {
        if c.0 < best.0 {
            best = *c;
        }
    }
    let (until, governed_by, length) = best;
    let left = until - now;
    let hours_left = left.num_milliseconds() as f64 / 3_600_000.0;
    let window = match length {
        Some(len) => warning.hours.min(warning.fraction * len),
        None => warning.hours,
    };
    let state = if now >= until {
        StabilityState::Expired
    } else if hours_left <= window {
        StabilityState::Expiring
    } else {
        StabilityState::Ok
    };
    UsableUntil {
        until,
        governed_by,
        state,
        hours_left,
        remarks,
    }
}

/// Time left in words: "3 d 4 h", "5 h 20 min", "expired 2 d ago".
pub fn describe_left(hours_left: f64) -> String {
    let minutes = (hours_left.abs() * 60.0).round() as i64;
    let (d, h, m) = (minutes / 1440, minutes % 1440 / 60, minutes % 60);
    let span = if d > 0 {
        format!("{d} d {h} h")
    } else if h > 0 {
        format!("{h} h {m} min")
    } else {
        format!("{m} min")
    };
    if hours_left < 0.0 {
        format!("expired {span} ago")
    } else {
        format!("{span} left")
    }
}

/// The local calendar date of an instant (for display and for tests).
pub fn local_date<Tz: TimeZone>(t: DateTime<Utc>, tz: &Tz) -> NaiveDate {
    t.with_timezone(tz).date_naive()
}

/// Last day of a month (for tests and for showing "end of month").
pub fn last_day_of_month(year: i32, month: u32) -> Option<NaiveDate> {
    ExpiryDate::Month { year, month }
        .first_day_after()?
        .pred_opt()
        .filter(|d| d.month() == month)
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::FixedOffset;

    fn utc(s: &str) -> DateTime<Utc> {
        DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc)
    }

    #[test]
    fn expiry_parses_day_and_month_and_refuses_nonsense() {
        assert_eq!(
            "2027-03".parse::<ExpiryDate>().unwrap(),
            ExpiryDate::Month {
                year: 2027,
                month: 3
            }
        );
        assert!(matches!(
            "2027-03-31".parse::<ExpiryDate>().unwrap(),
            ExpiryDate::Day(_)
        ));
        for bad in ["2027-13", "31/03/2027", "2027-02-30", ""] {
            let e = bad.parse::<ExpiryDate>().unwrap_err();
            assert!(e.contains("YYYY-MM"), "{e}");
        }
    }

    /// End of month: February of a leap year (2028) ends on the 29th, of 2027 on the 28th
    /// (Gregorian calendar rule).
    #[test]
    fn month_expiry_ends_at_end_of_month() {
        let tz = FixedOffset::east_opt(3 * 3600).unwrap();
        let e = ExpiryDate::Month {
            year: 2028,
            month: 2,
        };
        assert_eq!(e.expires_at(&tz).unwrap(), utc("2028-03-01T00:00:00+03:00"));
        assert_eq!(last_day_of_month(2027, 2).unwrap().day(), 28);
        assert_eq!(last_day_of_month(2028, 2).unwrap().day(), 29);
        assert_eq!(
            ExpiryDate::Month {
                year: 2026,
                month: 12
            }
            .expires_at(&tz)
            .unwrap(),
            utc("2027-01-01T00:00:00+03:00")
        );
    }

    #[test]
    fn earliest_limit_governs() {
        let tz = Utc;
        let m = Material {
            expiry: "2027-06".parse().unwrap(),
            opened_at: Some(utc("2026-12-01T08:00:00Z")),
            in_use_hours: Some(7.0 * 24.0),
            on_board_since: None,
            on_board_hours: None,
            frozen: None,
            analytes: vec![AnalyteStability {
                analyte: "ALT".into(),
                in_use_hours: Some(48.0),
                after_thaw_hours: None,
            }],
        };
        let r = evaluate(
            &m,
            utc("2026-12-02T08:00:00Z"),
            &tz,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(r.material.governed_by, Limit::InUse);
        assert_eq!(r.material.until, utc("2026-12-08T08:00:00Z"));
        assert_eq!(r.material.state, StabilityState::Ok);
        let (name, alt) = &r.analytes[0];
        assert_eq!(name, "ALT");
        assert_eq!(alt.until, utc("2026-12-03T08:00:00Z"));
        // 24 h left of a 48 h stability: inside a quarter? No (12 h) → still ok.
        assert_eq!(alt.state, StabilityState::Ok);
        let later = evaluate(
            &m,
            utc("2026-12-03T07:00:00Z"),
            &tz,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(later.analytes[0].1.state, StabilityState::Expiring);
        let after = evaluate(
            &m,
            utc("2026-12-03T08:00:00Z"),
            &tz,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(after.analytes[0].1.state, StabilityState::Expired);
    }

    #[test]
    fn thaw_rules() {
        let base = Material {
            expiry: "2027-12-31".parse().unwrap(),
            opened_at: None,
            in_use_hours: None,
            on_board_since: None,
            on_board_hours: None,
            frozen: Some(FrozenAliquot {
                frozen_at: utc("2026-11-01T10:00:00Z"),
                frozen_hours: 30.0 * 24.0,
                thawed_at: Some(utc("2026-12-05T10:00:00Z")),
                thaw_count: 1,
                after_thaw_hours: 8.0,
            }),
            analytes: vec![],
        };
        // Thawed after the 30 frozen days ran out (2026-12-01 10:00): expired, and said so.
        let r = evaluate(
            &base,
            utc("2026-12-05T11:00:00Z"),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(r.material.governed_by, Limit::Frozen);
        assert_eq!(r.material.state, StabilityState::Expired);
        assert!(r
            .material
            .remarks
            .iter()
            .any(|s| s.contains("thawed after")));
        // Thawed within its frozen stability but after the maker's expiry: the label wins.
        let mut late = base.clone();
        late.expiry = "2026-11".parse().unwrap();
        if let Some(f) = late.frozen.as_mut() {
            f.frozen_at = utc("2026-11-20T10:00:00Z");
            f.thawed_at = Some(utc("2026-12-01T06:00:00Z"));
        }
        let r = evaluate(
            &late,
            utc("2026-12-01T07:00:00Z"),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(r.material.governed_by, Limit::MakerExpiry);
        assert_eq!(r.material.state, StabilityState::Expired);
        assert_eq!(r.material.until, utc("2026-12-01T00:00:00Z"));
        // Thawed twice: discard from the moment of thawing.
        let mut twice = base.clone();
        if let Some(f) = twice.frozen.as_mut() {
            f.thawed_at = Some(utc("2026-11-20T10:00:00Z"));
            f.thaw_count = 2;
        }
        let r = evaluate(
            &twice,
            utc("2026-11-20T11:00:00Z"),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(r.material.governed_by, Limit::ThawedMoreThanOnce);
        assert_eq!(r.material.state, StabilityState::Expired);
    }

    #[test]
    fn time_left_in_words() {
        assert_eq!(describe_left(76.0), "3 d 4 h left");
        assert_eq!(describe_left(5.0 + 20.0 / 60.0), "5 h 20 min left");
        assert_eq!(describe_left(-48.5), "expired 2 d 0 h ago");
        assert_eq!(describe_left(0.25), "15 min left");
    }

    #[test]
    fn bad_hours_are_refused_by_name() {
        let m = Material {
            expiry: "2027-01".parse().unwrap(),
            opened_at: None,
            in_use_hours: Some(-3.0),
            on_board_since: None,
            on_board_hours: None,
            frozen: None,
            analytes: vec![],
        };
        let e = evaluate(
            &m,
            utc("2026-12-01T00:00:00Z"),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap_err();
        assert!(e.0.contains("in_use_hours"), "{}", e.0);
    }

    /// Thaw once (common practice; the maker's insert decides): the first thaw starts
    /// the after-thaw stability; a second is refused, as is freezing an aliquot again.
    #[test]
    fn an_aliquot_is_thawed_once_and_never_refrozen() {
        let source = Material {
            expiry: "2027-06".parse().unwrap(),
            opened_at: Some(utc("2026-11-01T08:00:00Z")),
            in_use_hours: Some(8.0),
            on_board_since: None,
            on_board_hours: None,
            frozen: None,
            analytes: vec![],
        };
        let made = aliquots(&source, 5, 30.0 * 24.0, 2.0, utc("2026-11-01T08:30:00Z")).unwrap();
        assert_eq!(made.len(), 5);
        assert!(made
            .iter()
            .all(|a| a.opened_at.is_none() && a.frozen.as_ref().unwrap().thaw_count == 0));
        assert!(
            thaw(&source, utc("2026-11-02T08:00:00Z")).is_err(),
            "not an aliquot"
        );
        let thawed = thaw(&made[0], utc("2026-11-10T08:00:00Z")).unwrap();
        let r = evaluate(
            &thawed,
            utc("2026-11-10T09:00:00Z"),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap();
        assert_eq!(
            (r.material.governed_by, r.material.until),
            (Limit::AfterThaw, utc("2026-11-10T10:00:00Z"))
        );
        let again = thaw(&thawed, utc("2026-11-10T11:00:00Z")).unwrap_err();
        assert!(
            again.0.contains("already thawed (2026-11-10 08:00 UTC)"),
            "{}",
            again.0
        );
        assert!(
            aliquots(&thawed, 1, 24.0, 2.0, utc("2026-11-10T11:00:00Z")).is_err(),
            "never refrozen"
        );
        assert!(
            thaw(&made[1], utc("2026-10-31T08:00:00Z")).is_err(),
            "before it was frozen"
        );
        assert!(aliquots(&source, 0, 24.0, 2.0, utc("2026-11-01T08:30:00Z")).is_err());
        assert!(aliquots(&source, 2, -1.0, 2.0, utc("2026-11-01T08:30:00Z")).is_err());
    }
}
