//! Records on a USB stick and back: the records file (a full backup, or one day's
//! records), its checks, and the import plan.
//!
//! A records file is our own JSON format (`cuvette-records`, version 1, described by
//! `docs/records-file.schema.json`): the lab's name, what the file covers, and journal
//! entries — every version of every record it carries, each with its SHA-256 — plus a
//! digest over the entries' hashes, so a removed, added, moved or edited entry is found.
//! A backup holds the whole journal, so its hash chain is checked link by link from the
//! first entry; a day file holds the day's records with their whole history up to the
//! end of that day, and the lab's set-up.
//!
//! Reading a file checks everything before anything changes ([`read`]): the format, every
//! entry's hash, the chain, the digest, each record's plausible ranges, and that the
//! file's records replay cleanly. An import is then a [`Plan`]: records new here, records
//! this PC has identically, records the other PC changed further, and conflicts (both
//! changed the same record); nothing happens until [`apply`] is called with the user's
//! choice for each conflict. Identity is by content ([`Entry::same_change`]), so the
//! same file imported twice changes nothing. Plain Rust: no browser, no clock.

use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};

use chrono::{DateTime, NaiveDate, TimeZone, Utc};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::journal::{self, Action, Entry, Kind, Replay, Tip, GENESIS, SETTINGS_ID};
use crate::lab::Lab;

/// The format's name, in every file.
pub const FORMAT: &str = "cuvette-records";
/// The newest format version this Cuvette reads and writes.
pub const FORMAT_VERSION: u32 = 1;

/// What a records file covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scope {
    /// The whole journal, from its first entry.
    Backup,
    /// One day's records (with their history up to that day's end) and the set-up.
    Day,
    /// A year's records, archived: kept on the stick, removed from the browser.
    Year,
}

/// A records file as written.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RecordsFile {
    pub format: String,
    pub format_version: u32,
    pub scope: Scope,
    pub lab_name: String,
    #[serde(default)]
    pub demo: bool,
    /// When the file was written, and by whom.
    pub made_at: DateTime<Utc>,
    pub made_by: String,
    /// The day a day file covers (the lab's local date).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub day: Option<NaiveDate>,
    /// The year an archive covers (the lab's local calendar).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub year: Option<i32>,
    pub entries: Vec<Entry>,
    /// SHA-256 (hex) over the entries' hashes, in order, each followed by a newline.
    pub digest: String,
}

/// SHA-256 over the entries' hashes (see [`RecordsFile::digest`]).
pub fn digest(entries: &[Entry]) -> String {
    let mut h = Sha256::new();
    for e in entries {
        h.update(e.hash.as_bytes());
        h.update(b"\n");
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

fn file(
    scope: Scope,
    lab: &Lab,
    entries: Vec<Entry>,
    day: Option<NaiveDate>,
    at: DateTime<Utc>,
    by: &str,
) -> RecordsFile {
    RecordsFile {
        format: FORMAT.into(),
        format_version: FORMAT_VERSION,
        scope,
        lab_name: lab.lab_name.clone(),
        demo: lab.demo,
        made_at: at,
        made_by: by.to_string(),
        day,
        year: None,
        digest: digest(&entries),
        entries,
    }
}

/// A full backup: every entry of the journal.
pub fn backup(lab: &Lab, entries: &[Entry], at: DateTime<Utc>, by: &str) -> RecordsFile {
    file(Scope::Backup, lab, entries.to_vec(), None, at, by)
}

/// One day's records: every record with an entry on `day` (local to `tz`), with its
/// history up to the end of that day; the set-up (tests, control levels) as it stood
/// then; and the day's records events.
pub fn day_file<Tz: TimeZone>(
    lab: &Lab,
    entries: &[Entry],
    day: NaiveDate,
    tz: &Tz,
    at: DateTime<Utc>,
    by: &str,
) -> RecordsFile {
    let local = |e: &Entry| e.at.with_timezone(tz).date_naive();
    let touched: HashSet<&str> = entries
        .iter()
        .filter(|e| local(e) == day)
        .map(|e| e.id.as_str())
        .collect();
    let chosen: Vec<Entry> = entries
        .iter()
        .filter(|e| local(e) <= day)
        .filter(|e| {
            touched.contains(e.id.as_str())
                || matches!(e.kind, Kind::Test | Kind::ControlLevel | Kind::Settings)
        })
        .cloned()
        .collect();
    file(Scope::Day, lab, chosen, Some(day), at, by)
}

/// The file as text (one line; the digest and hashes keep it honest, not the layout).
pub fn to_text(f: &RecordsFile) -> String {
    serde_json::to_string(f).unwrap_or_default()
}

/// A file that was read and passed every check.
#[derive(Debug, Clone)]
pub struct Checked {
    pub file: RecordsFile,
    /// The file's records on their own, as they replay.
    pub lab: Lab,
    pub summary: Summary,
}

/// What a checked file holds, for the preview and `cuvette-calc check-backup`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Summary {
    pub format_version: u32,
    pub scope: Scope,
    pub lab_name: String,
    pub demo: bool,
    pub made_at: DateTime<Utc>,
    pub made_by: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub day: Option<NaiveDate>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub year: Option<i32>,
    /// Current records per kind (words as in the trail), and versions in all.
    pub records: BTreeMap<String, usize>,
    pub versions: usize,
    /// The first and last entry's time, and the days (UTC dates) with entries.
    pub first: Option<DateTime<Utc>>,
    pub last: Option<DateTime<Utc>>,
    pub days_covered: usize,
    /// How the chain was checked, in words.
    pub chain: String,
}

/// Why a file was refused: the place and what is wrong, in words.
#[derive(Debug, Clone, PartialEq)]
pub struct Refused(pub String);

impl std::fmt::Display for Refused {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

const LONGEST_ID: usize = 100;
const LONGEST_INITIALS: usize = 40;

/// Read and check a records file (or a lab exported by an older Cuvette as one JSON
/// object). `largest` is the most bytes accepted (the storage left). Nothing is changed.
pub fn read(text: &str, largest: usize) -> Result<Checked, Refused> {
    let refuse = |s: String| Err(Refused(s));
    if text.len() > largest {
        return refuse(format!(
            "the file is {} MB, more than the {} MB this browser can still store; export \
             and archive older records first",
            text.len().div_ceil(1_000_000),
            largest / 1_000_000
        ));
    }
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let value: serde_json::Value = serde_json::from_str(text).map_err(|e| {
        Refused(format!(
            "this is not a Cuvette records file: it is not JSON that can be read (line {}, \
             column {}: {e})",
            e.line(),
            e.column()
        ))
    })?;
    let Some(top) = value.as_object() else {
        return refuse("this is not a Cuvette records file: it holds no records object".into());
    };
    let file: RecordsFile = match top.get("format") {
        Some(serde_json::Value::String(f)) if f == FORMAT => {
            if let Some(v) = top.get("format_version").and_then(|v| v.as_u64()) {
                if v > FORMAT_VERSION as u64 {
                    return refuse(format!(
                        "this file was written by a newer Cuvette (format version {v}; this \
                         one reads up to {FORMAT_VERSION}): open it with the newer version"
                    ));
                }
            }
            serde_json::from_value(value)
                .map_err(|e| Refused(format!("this records file is damaged or incomplete: {e}")))?
        }
        Some(_) => {
            return refuse(
                "this is not a Cuvette records file: its \"format\" is not cuvette-records".into(),
            )
        }
        None => older_export(top, text)?,
    };
    check(file)
}

/// A lab as an older Cuvette exported it (one JSON object with every record), made into
/// a backup whose entries are the records as they were.
fn older_export(
    top: &serde_json::Map<String, serde_json::Value>,
    text: &str,
) -> Result<RecordsFile, Refused> {
    const FIELDS: [&str; 13] = [
        "schema_version",
        "lab_name",
        "demo",
        "tests",
        "control_levels",
        "control_runs",
        "materials",
        "calibrations",
        "instrument_log",
        "patient_results",
        "corrective_actions",
        "temperature_limits",
        "absorbance_standards",
    ];
    let required = [
        "schema_version",
        "lab_name",
        "tests",
        "control_levels",
        "control_runs",
    ];
    let missing: Vec<&str> = required
        .into_iter()
        .filter(|k| !top.contains_key(*k))
        .collect();
    let unknown: Vec<&String> = top
        .keys()
        .filter(|k| !FIELDS.contains(&k.as_str()))
        .collect();
    if !missing.is_empty() || !unknown.is_empty() {
        return Err(Refused(format!(
            "this is not a Cuvette records file{}{}",
            if missing.is_empty() {
                String::new()
            } else {
                format!(": it lacks {}", missing.join(", "))
            },
            if unknown.is_empty() {
                String::new()
            } else {
                format!(
                    "; it holds fields Cuvette does not write ({})",
                    unknown
                        .iter()
                        .take(5)
                        .map(|s| s.as_str())
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            }
        )));
    }
    let lab = Lab::from_json(text).map_err(Refused)?;
    if let Some((id, why)) = lab.implausible_records().into_iter().next() {
        return Err(Refused(format!("record {id}: {why}")));
    }
    let entries = journal::founding_entries(&lab, lab.newest_time().unwrap_or_default(), "");
    Ok(file(
        Scope::Backup,
        &lab,
        entries,
        None,
        lab.newest_time().unwrap_or_default(),
        "",
    ))
}

/// Every check of a parsed file.
fn check(file: RecordsFile) -> Result<Checked, Refused> {
    let refuse = |s: String| Err(Refused(s));
    if file.lab_name.chars().count() > crate::engine::plausible::LONGEST_TEXT
        || file.made_by.chars().count() > LONGEST_INITIALS
    {
        return refuse("the file's lab name or maker is longer than Cuvette writes".into());
    }
    let mut prev = GENESIS.to_string();
    let mut last_seq = 0u64;
    for (k, e) in file.entries.iter().enumerate() {
        let place = format!("entry {} ({} {})", e.seq, e.kind.words(), short(&e.id));
        if e.id.is_empty() || e.id.chars().count() > LONGEST_ID {
            return refuse(format!("{place}: the record id is empty or too long"));
        }
        if e.by.chars().count() > LONGEST_INITIALS {
            return refuse(format!(
                "{place}: the initials are longer than 40 characters"
            ));
        }
        if e.computed_hash() != e.hash {
            return refuse(format!(
                "{place}: its content does not match its SHA-256; the file was changed after \
                 Cuvette wrote it. Nothing was imported"
            ));
        }
        if e.seq <= last_seq {
            return refuse(format!(
                "{place}: entries are out of order or repeated (after entry {last_seq})"
            ));
        }
        if file.scope == Scope::Backup && (e.seq != k as u64 + 1 || e.prev != prev) {
            return refuse(format!(
                "{place}: the hash chain is broken here (entries are missing, added or \
                 changed before it)"
            ));
        }
        // Each record's ranges are checked once, by the replay below.
        if e.body.is_none() && e.action != Action::Void {
            return refuse(format!("{place}: the record's content is missing"));
        }
        prev = e.hash.clone();
        last_seq = e.seq;
    }
    if digest(&file.entries) != file.digest {
        return refuse(
            "the file's digest does not match its entries: an entry was removed, added or \
             moved. Nothing was imported"
                .into(),
        );
    }
    let chained = rechain(&file.entries);
    let replayed = journal::replay(&chained, None, &[]);
    if let Some(a) = replayed.set_aside.first() {
        return refuse(format!(
            "{} {}: {}",
            a.kind.words(),
            short(&a.id),
            a.why.replace(&format!("entry {} ", a.seq), "")
        ));
    }
    if let Some(why) = duplicates(&replayed.lab) {
        return refuse(why);
    }
    let summary = summarize(&file, &replayed);
    Ok(Checked {
        lab: replayed.lab,
        summary,
        file,
    })
}

/// An id as shown in messages (the first 8 characters of a UUID are enough to find it).
fn short(id: &str) -> String {
    id.chars().take(8).collect()
}

/// The same entries numbered 1… and linked afresh (a day file's entries are a
/// selection of a journal, so their own numbers and links skip).
fn rechain(entries: &[Entry]) -> Vec<Entry> {
    let mut out: Vec<Entry> = Vec::with_capacity(entries.len());
    for e in entries {
        let tip = Tip::after(&out);
        let mut e = e.clone();
        e.seq = tip.next_seq;
        e.prev = tip.hash;
        out.push(e.seal());
    }
    out
}

/// Two records that are one in the lab's eyes: a test code twice, or a control level
/// twice for one test (same name and lot).
pub fn duplicates(lab: &Lab) -> Option<String> {
    let mut codes = HashSet::new();
    for t in &lab.tests {
        if !codes.insert(t.code.as_str()) {
            return Some(format!("the test code {} is set up twice", t.code));
        }
    }
    let mut levels = HashSet::new();
    for l in &lab.control_levels {
        if !levels.insert((l.test_id.as_str(), l.name.as_str(), l.lot.as_str())) {
            return Some(format!(
                "control level {} (lot {}) appears twice for one test",
                l.name, l.lot
            ));
        }
    }
    None
}

fn summarize(file: &RecordsFile, replayed: &Replay) -> Summary {
    let lab = &replayed.lab;
    let mut records = BTreeMap::new();
    for (kind, n) in [
        (Kind::Test, lab.tests.len()),
        (Kind::ControlLevel, lab.control_levels.len()),
        (Kind::ControlRun, lab.control_runs.len()),
        (Kind::Material, lab.materials.len()),
        (Kind::Calibration, lab.calibrations.len()),
        (Kind::InstrumentEntry, lab.instrument_log.len()),
        (Kind::PatientResult, lab.patient_results.len()),
        (Kind::CorrectiveAction, lab.corrective_actions.len()),
    ] {
        records.insert(kind.words().to_string(), n);
    }
    let days: BTreeSet<NaiveDate> = file.entries.iter().map(|e| e.at.date_naive()).collect();
    Summary {
        format_version: file.format_version,
        scope: file.scope,
        lab_name: file.lab_name.clone(),
        demo: file.demo,
        made_at: file.made_at,
        made_by: file.made_by.clone(),
        day: file.day,
        year: file.year,
        records,
        versions: file.entries.len(),
        first: file.entries.iter().map(|e| e.at).min(),
        last: file.entries.iter().map(|e| e.at).max(),
        days_covered: days.len(),
        chain: match file.scope {
            Scope::Backup => "intact: every entry's SHA-256 and every link from the first".into(),
            Scope::Day | Scope::Year => {
                "intact: every entry's SHA-256 and the file's digest".into()
            }
        },
    }
}

/// One record in an import preview.
#[derive(Debug, Clone, PartialEq)]
pub struct PlanLine {
    pub kind: Kind,
    pub id: String,
    /// The record in a few words.
    pub label: String,
    /// Versions the file brings that this PC lacks.
    pub versions: usize,
}

/// A record both PCs changed since they last shared it.
#[derive(Debug, Clone, PartialEq)]
pub struct Conflict {
    pub kind: Kind,
    pub id: String,
    pub label: String,
    /// The current version here and the file's latest, as the trail shows them.
    pub ours: Entry,
    pub theirs: Entry,
}

/// Which version becomes current where both PCs changed a record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Choice {
    Ours,
    Theirs,
}

/// What an import will do, before it does it.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    pub added: Vec<PlanLine>,
    pub newer: Vec<PlanLine>,
    /// Records this PC already has as the file has them (or newer).
    pub same: usize,
    pub conflicts: Vec<Conflict>,
    /// The file's entries this PC lacks, in the file's order, per record.
    missing: Vec<Entry>,
}

impl Plan {
    /// Whether importing changes nothing.
    pub fn is_noop(&self) -> bool {
        self.missing.is_empty()
    }
}

/// Compare the file with this PC's journal, record by record (the lab's settings stay
/// this PC's unless it has none).
pub fn plan(ours: &[Entry], file: &Checked) -> Plan {
    let mut mine: HashMap<&str, Vec<&Entry>> = HashMap::new();
    for e in ours {
        mine.entry(e.id.as_str()).or_default().push(e);
    }
    let mut theirs: Vec<(&str, Vec<&Entry>)> = Vec::new();
    let mut at: HashMap<&str, usize> = HashMap::new();
    for e in &file.file.entries {
        let k = *at.entry(e.id.as_str()).or_insert_with(|| {
            theirs.push((e.id.as_str(), Vec::new()));
            theirs.len() - 1
        });
        theirs[k].1.push(e);
    }
    let mut p = Plan {
        added: Vec::new(),
        newer: Vec::new(),
        same: 0,
        conflicts: Vec::new(),
        missing: Vec::new(),
    };
    let mut keep: HashSet<*const Entry> = HashSet::new();
    for (id, list) in &theirs {
        let here = mine.get(id).map(Vec::as_slice).unwrap_or(&[]);
        if id == &SETTINGS_ID && !ours.is_empty() {
            p.same += 1;
            continue;
        }
        let lacking: Vec<&Entry> = list
            .iter()
            .copied()
            .filter(|e| !here.iter().any(|h| h.same_change(e)))
            .collect();
        let last = list.last().copied();
        let line = |versions: usize| PlanLine {
            kind: list[0].kind,
            id: id.to_string(),
            label: last.unwrap_or(list[0]).label(),
            versions,
        };
        if lacking.is_empty() {
            p.same += 1;
            continue;
        }
        if here.is_empty() {
            p.added.push(line(lacking.len()));
        } else if here.iter().all(|h| list.iter().any(|e| e.same_change(h))) {
            p.newer.push(line(lacking.len()));
        } else if let (Some(o), Some(t)) = (here.last(), last) {
            p.conflicts.push(Conflict {
                kind: t.kind,
                id: id.to_string(),
                label: t.label(),
                ours: (*o).clone(),
                theirs: t.clone(),
            });
        }
        keep.extend(lacking.iter().map(|e| *e as *const Entry));
    }
    p.missing = file
        .file
        .entries
        .iter()
        .filter(|e| keep.contains(&(*e as *const Entry)))
        .cloned()
        .collect();
    p
}

/// A records event's id: its own for every import (the entries it brought, when, by
/// whom, from which file), so two PCs importing the same file make two events.
fn event_id(entries: &[Entry], at: DateTime<Utc>, by: &str, file_name: &str) -> String {
    let mut h = Sha256::new();
    h.update(digest(entries).as_bytes());
    h.update(at.to_rfc3339().as_bytes());
    h.update(by.as_bytes());
    h.update(file_name.as_bytes());
    h.finalize()
        .iter()
        .take(8)
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The entries an import appends after `current` (the replay of this PC's journal):
/// the file's missing versions in order, renumbered and linked; for a conflict where
/// this PC's version is kept, a correction restoring it after the other's; and one
/// records event saying what was imported. Refused (nothing to append) if the result
/// would not replay cleanly or would hold a record twice.
pub fn apply(
    plan: &Plan,
    choices: &HashMap<String, Choice>,
    current: &Replay,
    at: DateTime<Utc>,
    by: &str,
    file_name: &str,
) -> Result<Vec<Entry>, Refused> {
    if plan.is_noop() {
        return Ok(Vec::new());
    }
    if let Some(c) = plan.conflicts.iter().find(|c| !choices.contains_key(&c.id)) {
        return Err(Refused(format!(
            "choose which version of {} to keep before importing",
            c.label
        )));
    }
    let mut trial = current.clone();
    let mut out: Vec<Entry> = Vec::new();
    let push = |mut e: Entry, trial: &mut Replay, out: &mut Vec<Entry>| {
        e.seq = trial.tip.next_seq;
        e.prev = trial.tip.hash.clone();
        e.version = trial.versions.get(&e.id).map_or(1, |(v, _)| v + 1);
        let e = e.seal();
        trial.extend(std::slice::from_ref(&e), None, &[]);
        out.push(e);
    };
    for e in &plan.missing {
        push(e.clone(), &mut trial, &mut out);
    }
    let by = by.trim().to_uppercase();
    for c in &plan.conflicts {
        if choices.get(&c.id) == Some(&Choice::Ours) {
            let keep = Entry {
                at,
                by: by.clone(),
                action: if c.ours.action == Action::Void {
                    Action::Void
                } else {
                    Action::Correct
                },
                reason: Some(format!(
                    "both PCs changed this record; this PC's version kept on importing {file_name}"
                )),
                created: None,
                ..c.ours.clone()
            };
            push(keep, &mut trial, &mut out);
        }
    }
    let what = format!(
        "imported {file_name}: {} record(s) added, {} updated, {} conflict(s) resolved, {} \
         already here",
        plan.added.len(),
        plan.newer.len(),
        plan.conflicts.len(),
        plan.same
    );
    let id = event_id(&out, at, &by, file_name);
    let event = Entry {
        seq: 0,
        at,
        by,
        action: Action::Create,
        kind: Kind::Event,
        id: format!("event-{id}"),
        version: 1,
        reason: None,
        created: None,
        body: serde_json::to_value(journal::Event { what }).ok(),
        prev: String::new(),
        hash: String::new(),
    };
    push(event, &mut trial, &mut out);
    let before = current.set_aside.len();
    if let Some(a) = trial.set_aside.get(before) {
        return Err(Refused(format!(
            "the import would leave {} {} unusable ({}); nothing was imported",
            a.kind.words(),
            short(&a.id),
            a.why
        )));
    }
    if let Some(why) = duplicates(&trial.lab) {
        return Err(Refused(format!(
            "after the import {why}; nothing was imported"
        )));
    }
    Ok(out)
}

/// The records of `year` (local to `tz`) that can leave the browser: QC runs,
/// calibrations, instrument log entries, patient results, materials and records events whose every
/// version was made in that year, the year being over at `now`. Kept whatever their
/// age: the set-up (tests, control levels, settings), each test's newest usable
/// calibration, and any material not yet expired at `now`.
pub fn archivable<Tz: TimeZone>(
    lab: &Lab,
    entries: &[Entry],
    year: i32,
    now: DateTime<Utc>,
    tz: &Tz,
) -> HashSet<String> {
    use chrono::Datelike;
    if year >= now.with_timezone(tz).year() {
        return HashSet::new();
    }
    let mut in_year: HashMap<&str, bool> = HashMap::new();
    for e in entries {
        let ok = e.at.with_timezone(tz).year() == year
            && matches!(
                e.kind,
                Kind::ControlRun
                    | Kind::Calibration
                    | Kind::InstrumentEntry
                    | Kind::PatientResult
                    | Kind::CorrectiveAction
                    | Kind::Material
                    | Kind::Event
            );
        *in_year.entry(e.id.as_str()).or_insert(true) &= ok;
    }
    let mut keep: HashSet<&str> = HashSet::new();
    for t in &lab.tests {
        if let Some(c) = lab.current_calibration(&t.meta.id) {
            keep.insert(c.meta.id.as_str());
        }
    }
    for m in &lab.materials {
        let expired = crate::engine::stability::evaluate(
            &m.stability,
            now,
            tz,
            crate::engine::stability::WarningWindow::default(),
        )
        .is_ok_and(|r| r.material.state == crate::engine::stability::StabilityState::Expired);
        if !expired {
            keep.insert(m.meta.id.as_str());
        }
    }
    in_year
        .into_iter()
        .filter(|(id, ok)| *ok && !keep.contains(id))
        .map(|(id, _)| id.to_string())
        .collect()
}

/// The archive of `year`: every version of the records [`archivable`] chose, and the
/// set-up, so the file opens on its own (read-only) with its charts.
pub fn year_file(
    lab: &Lab,
    entries: &[Entry],
    year: i32,
    chosen: &HashSet<String>,
    at: DateTime<Utc>,
    by: &str,
) -> RecordsFile {
    let picked: Vec<Entry> = entries
        .iter()
        .filter(|e| {
            chosen.contains(&e.id)
                || matches!(e.kind, Kind::Test | Kind::ControlLevel | Kind::Settings)
        })
        .cloned()
        .collect();
    let mut f = file(Scope::Year, lab, picked, None, at, by);
    f.year = Some(year);
    f
}

/// Check the copy of an archive read back from the stick: it must be the file that was
/// written (same scope, year and digest) and pass every check of [`read`].
pub fn verify_copy(text: &str, written: &RecordsFile) -> Result<Checked, Refused> {
    let c = read(text, usize::MAX)?;
    if c.file.scope != Scope::Year || c.file.year != written.year || c.file.digest != written.digest
    {
        return Err(Refused(
            "this is not the archive just written (its contents differ); pick the copy on \
             the USB stick"
                .into(),
        ));
    }
    Ok(c)
}

/// The journal after an archive was verified: the entries of every record not archived,
/// in order, numbered and linked afresh from the first, then a records event naming the
/// archive (year, records, versions, the file's digest) and the hash the journal ended
/// with before. Refused if the kept records would not replay as they were.
pub fn after_archive(
    entries: &[Entry],
    archived: &RecordsFile,
    chosen: &HashSet<String>,
    at: DateTime<Utc>,
    by: &str,
    file_name: &str,
) -> Result<Vec<Entry>, Refused> {
    let before = journal::replay(entries, None, &[]);
    let mut out = rechain(
        &entries
            .iter()
            .filter(|e| !chosen.contains(&e.id))
            .cloned()
            .collect::<Vec<_>>(),
    );
    let removed = entries.iter().filter(|e| chosen.contains(&e.id)).count();
    let what = format!(
        "archived {}: {} record(s) ({removed} versions) written to {file_name} (SHA-256 digest \
         {}), checked on the copy read back, then removed from this browser; the journal \
         before ended with entry {} ({})",
        archived.year.map_or(String::new(), |y| y.to_string()),
        chosen.len(),
        archived.digest,
        entries.len(),
        entries.last().map_or(GENESIS, |e| e.hash.as_str()),
    );
    let tip = Tip::after(&out);
    out.push(
        Entry {
            seq: tip.next_seq,
            at,
            by: by.trim().to_uppercase(),
            action: Action::Create,
            kind: Kind::Event,
            id: format!("event-{}", event_id(&out, at, by, file_name)),
            version: 1,
            reason: None,
            created: None,
            body: serde_json::to_value(journal::Event { what }).ok(),
            prev: tip.hash,
            hash: String::new(),
        }
        .seal(),
    );
    let after = journal::replay(&out, None, &[]);
    let mut want = before.lab.clone();
    for id in chosen {
        want.remove_record(id);
    }
    if !after.set_aside.is_empty() || after.lab != want {
        return Err(Refused(
            "the records kept would not read back as they are; nothing was removed".into(),
        ));
    }
    Ok(out)
}
