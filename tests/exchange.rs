//! Records files between PCs: a backup re-imported into an empty lab reproduces every
//! record and version exactly; the same file twice changes nothing; a record both PCs
//! changed is a conflict whose two versions both stay in the trail; a changed, removed
//! or out-of-place entry and another program's JSON are refused with the place named;
//! `demo-data/demo-backup.json` is the demo lab's backup as this Cuvette writes it.

use std::collections::HashMap;

use chrono::{DateTime, Duration, NaiveDate, Utc};
use cuvette::exchange::{self, Choice, Scope};
use cuvette::journal::{self, founding_entries, replay, Entry, Kind};
use cuvette::lab::Lab;

const LARGEST: usize = 50_000_000;

fn demo() -> Lab {
    Lab::from_json(include_str!("../demo-data/demo-lab.json")).expect("demo lab")
}

fn t0() -> DateTime<Utc> {
    "2026-11-27T12:00:00Z".parse().expect("time")
}

/// The demo's journal as it is started (every record made by its maker at its time).
fn demo_journal() -> Vec<Entry> {
    founding_entries(&demo(), t0(), "DEMO")
}

/// A correction of the first control level's mean, made on one PC.
fn correct_mean(entries: &[Entry], mean: f64, at: DateTime<Utc>, by: &str) -> Vec<Entry> {
    let state = replay(entries, None, &[]);
    let mut lab = state.lab.clone();
    lab.control_levels[0].mean = mean;
    let c = journal::changes(&state.lab, &lab);
    let new = journal::entries_for(
        &c,
        &state.version_numbers(),
        &state.tip,
        at,
        by,
        Some("new insert"),
    )
    .expect("entries");
    let mut all = entries.to_vec();
    all.extend(new);
    all
}

fn import(ours: &[Entry], text: &str, choices: &HashMap<String, Choice>) -> Vec<Entry> {
    let checked = exchange::read(text, LARGEST).expect("file accepted");
    let plan = exchange::plan(ours, &checked);
    let current = replay(ours, None, &[]);
    let new = exchange::apply(
        &plan,
        choices,
        &current,
        t0() + Duration::hours(5),
        "im",
        "f.json",
    )
    .expect("applied");
    let mut all = ours.to_vec();
    all.extend(new);
    all
}

#[test]
fn a_backup_into_an_empty_lab_reproduces_every_record_and_version() {
    let ours = correct_mean(&demo_journal(), 96.5, t0() + Duration::hours(1), "ak");
    let lab = replay(&ours, None, &[]).lab;
    let text = exchange::to_text(&exchange::backup(&lab, &ours, t0(), "AK"));
    let checked = exchange::read(&text, LARGEST).expect("accepted");
    assert_eq!(checked.summary.scope, Scope::Backup);
    assert_eq!(checked.summary.versions, ours.len());
    assert_eq!(checked.summary.records["QC run"], lab.control_runs.len());
    let mine = import(&[], &text, &HashMap::new());
    let back = replay(&mine, None, &[]);
    assert!(back.set_aside.is_empty(), "{:?}", back.set_aside);
    assert_eq!(back.lab, lab, "records, versions and times are the same");
    // Every version is there, in order, with its maker, time and reason.
    let id = &lab.control_levels[0].meta.id;
    let h: Vec<(u32, Option<String>)> = journal::history(&mine, id)
        .iter()
        .map(|e| (e.version, e.reason.clone()))
        .collect();
    assert_eq!(h, vec![(1, None), (2, Some("new insert".into()))]);
    // The same file again: nothing to do, nothing appended.
    let checked = exchange::read(&text, LARGEST).unwrap();
    let again = exchange::plan(&mine, &checked);
    assert!(again.is_noop() && again.added.is_empty() && again.conflicts.is_empty());
    assert_eq!(import(&mine, &text, &HashMap::new()), mine);
}

#[test]
fn a_record_changed_on_both_pcs_is_a_conflict_and_both_versions_stay() {
    let shared = demo_journal();
    let a = correct_mean(&shared, 96.5, t0() + Duration::hours(1), "aa");
    let b = correct_mean(&shared, 97.0, t0() + Duration::hours(2), "bb");
    let b_lab = replay(&b, None, &[]).lab;
    let text = exchange::to_text(&exchange::backup(&b_lab, &b, t0(), "BB"));
    let checked = exchange::read(&text, LARGEST).unwrap();
    let plan = exchange::plan(&a, &checked);
    assert_eq!(plan.conflicts.len(), 1);
    assert!(plan.added.is_empty() && plan.newer.is_empty());
    let id = plan.conflicts[0].id.clone();
    assert_eq!(plan.conflicts[0].kind, Kind::ControlLevel);
    // No choice, no import.
    assert!(exchange::apply(
        &plan,
        &HashMap::new(),
        &replay(&a, None, &[]),
        t0(),
        "aa",
        "b.json"
    )
    .is_err());
    for (choice, mean) in [(Choice::Theirs, 97.0), (Choice::Ours, 96.5)] {
        let merged = import(&a, &text, &HashMap::from([(id.clone(), choice)]));
        let r = replay(&merged, None, &[]);
        assert!(r.set_aside.is_empty());
        assert_eq!(r.lab.control_levels[0].mean, mean, "{choice:?}");
        let bodies: Vec<f64> = journal::history(&merged, &id)
            .iter()
            .filter_map(|e| e.body.as_ref()?.get("mean")?.as_f64())
            .collect();
        assert!(
            bodies.contains(&96.5) && bodies.contains(&97.0),
            "{bodies:?}"
        );
        // The trail says what was imported; importing the same file again changes nothing.
        assert!(merged.iter().any(|e| e.kind == Kind::Event));
        assert!(exchange::plan(&merged, &exchange::read(&text, LARGEST).unwrap()).is_noop());
    }
    // The other way round: A's file into B is a plain update once B has A's version.
    let a_lab = replay(&a, None, &[]).lab;
    let later = correct_mean(&a, 98.0, t0() + Duration::hours(3), "aa");
    let text_a = exchange::to_text(&exchange::backup(&a_lab, &later, t0(), "AA"));
    let plan = exchange::plan(&a, &exchange::read(&text_a, LARGEST).unwrap());
    assert_eq!((plan.newer.len(), plan.conflicts.len()), (1, 0));
}

#[test]
fn a_changed_removed_or_moved_entry_is_refused_naming_it() {
    let ours = demo_journal();
    let lab = replay(&ours, None, &[]).lab;
    let text = exchange::to_text(&exchange::backup(&lab, &ours, t0(), "AK"));
    // A target edited in a text editor.
    let target = lab.control_levels[0].mean;
    let edited = text.replacen(&format!("\"mean\":{target:?}"), "\"mean\":120.0", 1);
    assert_ne!(edited, text);
    let e = exchange::read(&edited, LARGEST).unwrap_err().0;
    assert!(
        e.contains("control level") && e.contains("does not match its SHA-256"),
        "{e}"
    );
    // One byte of an id flipped (the phantom level of the issue).
    let id = &lab.control_levels[1].meta.id;
    let flipped: String = id.chars().rev().collect();
    let e = exchange::read(&text.replacen(id.as_str(), &flipped, 1), LARGEST)
        .unwrap_err()
        .0;
    assert!(e.contains("SHA-256"), "{e}");
    // An entry removed, with the digest recomputed: the chain says where.
    let mut f: exchange::RecordsFile = serde_json::from_str(&text).unwrap();
    f.entries.remove(5);
    f.digest = exchange::digest(&f.entries);
    let e = exchange::read(&serde_json::to_string(&f).unwrap(), LARGEST)
        .unwrap_err()
        .0;
    assert!(e.contains("chain is broken"), "{e}");
    // A day file with an entry removed: the digest says so.
    let day = NaiveDate::from_ymd_opt(2026, 11, 26).unwrap();
    let mut d = exchange::day_file(&lab, &ours, day, &Utc, t0(), "AK");
    d.entries.pop();
    let e = exchange::read(&exchange::to_text(&d), LARGEST)
        .unwrap_err()
        .0;
    assert!(e.contains("digest"), "{e}");
}

#[test]
fn another_programs_json_and_hostile_text_are_refused() {
    for (text, says) in [
        (
            r#"{"schema_version":1,"lab_name":"x"}"#,
            "not a Cuvette records file: it lacks tests",
        ),
        (
            r#"{"schema_version":1,"lab_name":"x","tests":[],"control_levels":[],"control_runs":[],"users":[]}"#,
            "fields Cuvette does not write (users)",
        ),
        (r#"[1,2,3]"#, "holds no records object"),
        (
            r#"{"format":"cuvette-records","format_version":9}"#,
            "newer Cuvette",
        ),
        (r#"{"format":"something-else"}"#, "not cuvette-records"),
        ("{\"a\":", "not JSON"),
        ("", "not JSON"),
    ] {
        let e = exchange::read(text, LARGEST).unwrap_err().0;
        assert!(e.contains(says), "{text} -> {e}");
    }
    // Sealed properly but holding a value no lab records (a file made by another tool):
    // refused by its ranges, naming the record.
    let mut odd = demo();
    odd.control_levels[0].sd = 1e308;
    let entries = founding_entries(&odd, t0(), "X");
    let text = exchange::to_text(&exchange::backup(&odd, &entries, t0(), "X"));
    let e = exchange::read(&text, LARGEST).unwrap_err().0;
    assert!(
        e.starts_with("control level") && e.contains("holds a value no lab records"),
        "{e}"
    );
    let deep = "[".repeat(100_000) + &"]".repeat(100_000);
    assert!(exchange::read(&deep, LARGEST)
        .unwrap_err()
        .0
        .contains("not JSON"));
    let big = "x".repeat(1_000_001);
    assert!(exchange::read(&big, 1_000_000)
        .unwrap_err()
        .0
        .contains("more than"));
}

#[test]
fn a_lab_exported_by_the_older_cuvette_is_read_as_a_backup() {
    let checked = exchange::read(include_str!("../demo-data/demo-lab.json"), LARGEST).unwrap();
    assert_eq!(checked.lab.control_runs.len(), demo().control_runs.len());
    let into_empty = exchange::plan(&[], &checked);
    assert_eq!(into_empty.added.len(), {
        let l = demo();
        1 + l.tests.len()
            + l.control_levels.len()
            + l.control_runs.len()
            + l.materials.len()
            + l.calibrations.len()
            + l.instrument_log.len()
            + l.patient_results.len()
            + l.corrective_actions.len()
    });
}

#[test]
fn a_day_file_carries_the_days_records_with_their_set_up() {
    let ours = demo_journal();
    let lab = replay(&ours, None, &[]).lab;
    let newest = lab.newest_time().unwrap();
    let day = newest.date_naive();
    let f = exchange::day_file(&lab, &ours, day, &Utc, t0(), "AK");
    let text = exchange::to_text(&f);
    let checked = exchange::read(&text, LARGEST).expect("accepted");
    let runs_that_day = lab
        .control_runs
        .iter()
        .filter(|r| r.meta.changed_at.date_naive() == day)
        .count();
    assert!(runs_that_day > 0);
    assert_eq!(checked.lab.control_runs.len(), runs_that_day);
    assert_eq!(checked.lab.tests.len(), lab.tests.len());
    assert_eq!(checked.lab.control_levels.len(), lab.control_levels.len());
    // Into an empty lab: the day's runs with the tests and levels they need.
    let mine = import(&[], &text, &HashMap::new());
    let r = replay(&mine, None, &[]);
    assert!(r.set_aside.is_empty());
    assert_eq!(r.lab.control_runs.len(), runs_that_day);
    // Into the lab it came from: nothing new.
    assert!(exchange::plan(&ours, &checked).is_noop());
}

/// `demo-data/demo-backup.json` is the demo lab's backup as this Cuvette writes it (set
/// CUVETTE_WRITE_DEMO_BACKUP=1 to rewrite it after a deliberate change), and it checks.
#[test]
fn the_demo_backup_is_current_and_valid() {
    let ours = demo_journal();
    let lab = replay(&ours, None, &[]).lab;
    let text = exchange::to_text(&exchange::backup(&lab, &ours, t0(), "DEMO")) + "\n";
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/demo-backup.json");
    if std::env::var("CUVETTE_WRITE_DEMO_BACKUP").is_ok() {
        std::fs::write(path, &text).unwrap();
    }
    let stored = std::fs::read_to_string(path).expect("demo-data/demo-backup.json");
    assert_eq!(stored, text, "rewrite with CUVETTE_WRITE_DEMO_BACKUP=1");
    assert!(exchange::read(&stored, LARGEST).is_ok());
}

/// An archive of a year that is over: written, its copy checked, then removed from the
/// journal; the rest replays as it was, the trail names the archive, the archive opens
/// on its own, and a copy that differs is refused.
#[test]
fn a_year_is_archived_only_after_its_copy_checks_and_the_rest_stays_as_it_was() {
    let ours = demo_journal();
    let lab = replay(&ours, None, &[]).lab;
    let now: DateTime<Utc> = "2027-03-01T08:00:00Z".parse().unwrap();
    // Not a year that is still running.
    assert!(exchange::archivable(&lab, &ours, 2027, now, &Utc).is_empty());
    let chosen = exchange::archivable(&lab, &ours, 2026, now, &Utc);
    assert!(chosen.len() > 50, "{}", chosen.len());
    for t in &lab.tests {
        let current = lab.current_calibration(&t.meta.id).unwrap();
        assert!(
            !chosen.contains(&current.meta.id),
            "the calibration in use stays"
        );
        assert!(!chosen.contains(&t.meta.id), "the set-up stays");
    }
    let f = exchange::year_file(&lab, &ours, 2026, &chosen, now, "AK");
    let text = exchange::to_text(&f);
    // The copy read back: the same file passes; another file is refused.
    let opened = exchange::verify_copy(&text, &f).expect("the copy checks");
    assert_eq!(opened.lab.control_runs.len(), lab.control_runs.len());
    let day = exchange::to_text(&exchange::day_file(
        &lab,
        &ours,
        lab.newest_time().unwrap().date_naive(),
        &Utc,
        now,
        "AK",
    ));
    assert!(exchange::verify_copy(&day, &f).is_err());
    let after = exchange::after_archive(&ours, &f, &chosen, now, "ak", "a.json").unwrap();
    let r = replay(&after, None, &[]);
    assert!(r.set_aside.is_empty() && r.gaps.is_empty());
    assert_eq!(r.lab.control_runs.len(), 0);
    assert_eq!(r.lab.tests, lab.tests);
    assert_eq!(r.lab.calibrations.len(), lab.tests.len());
    let last = after.last().unwrap();
    assert_eq!(last.kind, Kind::Event);
    let what = last.body.as_ref().unwrap()["what"].as_str().unwrap();
    assert!(
        what.starts_with("archived 2026: ") && what.contains(&f.digest),
        "{what}"
    );
    // The archive imported back brings every archived record again.
    let plan = exchange::plan(&after, &opened);
    assert_eq!(plan.added.len(), chosen.len());
}
