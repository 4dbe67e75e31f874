//! The lab's journal: every version of every record, in the order it was saved.
//!
//! Nothing is overwritten or deleted. Making a record appends a `create` entry; a
//! correction appends a `correct` entry with the record's next version and a reason; a
//! void appends a `void` entry with a reason. The lab on screen is the replay of the
//! journal ([`replay`]), so the trail of any record or any day is the journal itself.
//!
//! Every entry carries the SHA-256 of the previous entry (`prev`) and its own (`hash`,
//! over the entry's JSON with `hash` empty). A change made outside the app (developer
//! tools, an edited file) breaks the chain where it was made; the replay sets that entry
//! aside, names the record, and goes on with the rest.
//!
//! Record versions are shaped for a later sync with a CouchDB-compatible server: a
//! stable id, a version number, and the hash of the version ([`revision`]).
//! Plain Rust: no browser, no clock (times are passed in), no storage.

use std::collections::HashMap;

use chrono::{DateTime, Utc};
use serde::{Deserialize, Serialize};
use serde_json::Value;
use sha2::{Digest, Sha256};

use crate::engine::readings::Limits;
use crate::lab::{Lab, RecordMeta};

/// `prev` of the first entry.
pub const GENESIS: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// The id of the lab's own settings record (name, demo mark, temperature limits).
pub const SETTINGS_ID: &str = "lab-settings";

/// What kind of record an entry is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Kind {
    Settings,
    Test,
    ControlLevel,
    ControlRun,
    Material,
    Calibration,
    InstrumentEntry,
    PatientResult,
    CorrectiveAction,
    /// Something that happened to the records as a whole (an import, an archive),
    /// kept in the trail; it changes no record.
    Event,
}

impl Kind {
    pub const ALL: [Kind; 10] = [
        Kind::Settings,
        Kind::Test,
        Kind::ControlLevel,
        Kind::ControlRun,
        Kind::Material,
        Kind::Calibration,
        Kind::InstrumentEntry,
        Kind::PatientResult,
        Kind::CorrectiveAction,
        Kind::Event,
    ];

    /// The kind in the lab's words.
    pub fn words(self) -> &'static str {
        match self {
            Kind::Settings => "lab settings",
            Kind::Test => "test set-up",
            Kind::ControlLevel => "control level",
            Kind::ControlRun => "QC run",
            Kind::Material => "material",
            Kind::Calibration => "calibration",
            Kind::InstrumentEntry => "instrument log entry",
            Kind::PatientResult => "patient result",
            Kind::CorrectiveAction => "corrective action",
            Kind::Event => "records event",
        }
    }
}

/// What an entry does to its record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Action {
    Create,
    Correct,
    Void,
}

impl Action {
    pub fn words(self) -> &'static str {
        match self {
            Action::Create => "made",
            Action::Correct => "corrected",
            Action::Void => "voided",
        }
    }
}

/// One journal entry: one version of one record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Entry {
    /// Position in the journal, from 1, without gaps.
    pub seq: u64,
    /// When the entry was made (the PC's clock).
    pub at: DateTime<Utc>,
    /// Initials of who made it.
    pub by: String,
    pub action: Action,
    pub kind: Kind,
    /// The record's stable id.
    pub id: String,
    /// The record's version after this entry: 1 when made, one more per correction or void.
    pub version: u32,
    /// Why (required for corrections and voids).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    /// When the record was first made, where that is earlier than `at` (records brought
    /// over from the one-key format kept only their latest version).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub created: Option<DateTime<Utc>>,
    /// The record at this version, without its `meta` (which the journal supplies).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub body: Option<Value>,
    /// SHA-256 (hex) of the previous entry, [`GENESIS`] for the first.
    pub prev: String,
    /// SHA-256 (hex) of this entry's JSON with `hash` empty.
    #[serde(default)]
    pub hash: String,
}

impl Entry {
    /// The SHA-256 this entry should carry.
    pub fn computed_hash(&self) -> String {
        let mut unhashed = self.clone();
        unhashed.hash.clear();
        let text = serde_json::to_string(&unhashed).unwrap_or_default();
        hex(&Sha256::digest(text.as_bytes()))
    }

    /// Whether `other` is the same change made once (the same record, action, time,
    /// maker, reason and content), wherever it sits in a journal: numbering, version,
    /// links and hash may differ after it was renumbered behind another tab's entries.
    pub fn same_change(&self, other: &Entry) -> bool {
        self.id == other.id
            && self.at == other.at
            && self.by == other.by
            && self.action == other.action
            && self.kind == other.kind
            && self.reason == other.reason
            && self.body == other.body
    }

    /// The record in a few words from its content: its kind, then its code, name, lot,
    /// sample or time where it has them.
    pub fn label(&self) -> String {
        let Some(b) = &self.body else {
            return self.kind.words().to_string();
        };
        let field = |k: &str| b.get(k).and_then(|v| v.as_str()).map(str::to_string);
        let mut parts = vec![self.kind.words().to_string()];
        parts.extend(
            [
                "code",
                "name",
                "lot",
                "sample_id",
                "run_at",
                "performed_at",
                "at",
                "what",
            ]
            .into_iter()
            .filter_map(field),
        );
        parts.join(" ")
    }

    /// Set `hash` from the content.
    pub fn seal(mut self) -> Entry {
        self.hash = self.computed_hash();
        self
    }
}

fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    bytes.iter().fold(String::with_capacity(64), |mut s, b| {
        let _ = write!(s, "{b:02x}");
        s
    })
}

/// A record version's revision for a CouchDB-compatible store: `N-` then the first 32
/// hex digits of the version's SHA-256 (CouchDB revisions are a number and a digest).
pub fn revision(version: u32, hash: &str) -> String {
    format!("{version}-{}", hash.get(..32).unwrap_or(hash))
}

/// The lab's settings as one record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Settings {
    pub lab_name: String,
    #[serde(default)]
    pub demo: bool,
    pub temperature_limits: Limits,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub absorbance_standards: Vec<crate::lab::AbsorbanceStandard>,
    #[serde(default = "crate::lab::default_instrument_checks")]
    pub instrument_checks: Vec<crate::lab::CheckSchedule>,
}

impl Settings {
    pub fn of(lab: &Lab) -> Settings {
        Settings {
            lab_name: lab.lab_name.clone(),
            demo: lab.demo,
            temperature_limits: lab.temperature_limits,
            absorbance_standards: lab.absorbance_standards.clone(),
            instrument_checks: lab.instrument_checks.clone(),
        }
    }
}

/// A record's content, as the journal stores it: (kind, id, meta, body without meta).
fn records_of(lab: &Lab) -> Vec<(Kind, &str, Option<&RecordMeta>, Value)> {
    fn body<T: Serialize>(r: &T) -> Value {
        let mut v = serde_json::to_value(r).unwrap_or(Value::Null);
        if let Value::Object(m) = &mut v {
            m.remove("meta");
        }
        v
    }
    let mut out = vec![(
        Kind::Settings,
        SETTINGS_ID,
        None,
        serde_json::to_value(Settings::of(lab)).unwrap_or(Value::Null),
    )];
    out.extend(
        lab.tests
            .iter()
            .map(|r| (Kind::Test, r.meta.id.as_str(), Some(&r.meta), body(r))),
    );
    out.extend(lab.control_levels.iter().map(|r| {
        (
            Kind::ControlLevel,
            r.meta.id.as_str(),
            Some(&r.meta),
            body(r),
        )
    }));
    out.extend(
        lab.control_runs
            .iter()
            .map(|r| (Kind::ControlRun, r.meta.id.as_str(), Some(&r.meta), body(r))),
    );
    out.extend(
        lab.materials
            .iter()
            .map(|r| (Kind::Material, r.meta.id.as_str(), Some(&r.meta), body(r))),
    );
    out.extend(lab.calibrations.iter().map(|r| {
        (
            Kind::Calibration,
            r.meta.id.as_str(),
            Some(&r.meta),
            body(r),
        )
    }));
    out.extend(lab.instrument_log.iter().map(|r| {
        (
            Kind::InstrumentEntry,
            r.meta.id.as_str(),
            Some(&r.meta),
            body(r),
        )
    }));
    out.extend(lab.patient_results.iter().map(|r| {
        (
            Kind::PatientResult,
            r.meta.id.as_str(),
            Some(&r.meta),
            body(r),
        )
    }));
    out.extend(lab.corrective_actions.iter().map(|r| {
        (
            Kind::CorrectiveAction,
            r.meta.id.as_str(),
            Some(&r.meta),
            body(r),
        )
    }));
    out
}

/// One change between two states of the lab, not yet an entry.
#[derive(Debug, Clone, PartialEq)]
pub struct Change {
    pub kind: Kind,
    pub id: String,
    pub action: Action,
    pub body: Option<Value>,
    /// Who made the record and when, for a record that arrives already made (import,
    /// first save of a lab kept in the one-key format).
    pub made: Option<(DateTime<Utc>, String)>,
}

/// What changed from `old` to `new`, record by record: new ids are created, changed
/// content is corrected, ids that are gone are voided. Settings count as one record.
/// Records are compared as they are first; only a record that differs is written out
/// (so a save costs one pass over the lab, not a copy of it).
pub fn changes(old: &Lab, new: &Lab) -> Vec<Change> {
    let mut out = Vec::new();
    let (a, b) = (Settings::of(old), Settings::of(new));
    if a != b {
        out.push(Change {
            kind: Kind::Settings,
            id: SETTINGS_ID.to_string(),
            // Settings always exist (empty at first): every change is a correction.
            action: Action::Correct,
            body: serde_json::to_value(&b).ok(),
            made: None,
        });
    }
    diff_list(Kind::Test, &old.tests, &new.tests, &mut out);
    diff_list(
        Kind::ControlLevel,
        &old.control_levels,
        &new.control_levels,
        &mut out,
    );
    diff_list(
        Kind::ControlRun,
        &old.control_runs,
        &new.control_runs,
        &mut out,
    );
    diff_list(Kind::Material, &old.materials, &new.materials, &mut out);
    diff_list(
        Kind::Calibration,
        &old.calibrations,
        &new.calibrations,
        &mut out,
    );
    diff_list(
        Kind::InstrumentEntry,
        &old.instrument_log,
        &new.instrument_log,
        &mut out,
    );
    diff_list(
        Kind::PatientResult,
        &old.patient_results,
        &new.patient_results,
        &mut out,
    );
    diff_list(
        Kind::CorrectiveAction,
        &old.corrective_actions,
        &new.corrective_actions,
        &mut out,
    );
    out
}

/// A record's content as the journal stores it: without `meta`.
fn body_of<T: Serialize>(r: &T) -> Value {
    let mut v = serde_json::to_value(r).unwrap_or(Value::Null);
    if let Value::Object(m) = &mut v {
        m.remove("meta");
    }
    v
}

fn diff_list<T: Serialize + PartialEq + crate::lab::Record>(
    kind: Kind,
    old: &[T],
    new: &[T],
    out: &mut Vec<Change>,
) {
    // Lists only ever grow at the end or change in place; pair by position first and
    // fall back to a map of ids when the order differs.
    let same_order = old.iter().zip(new).all(|(a, b)| a.meta().id == b.meta().id);
    let by_id: HashMap<&str, &T> = if same_order {
        HashMap::new()
    } else {
        old.iter().map(|r| (r.meta().id.as_str(), r)).collect()
    };
    for (k, r) in new.iter().enumerate() {
        let before = if same_order {
            old.get(k)
        } else {
            by_id.get(r.meta().id.as_str()).copied()
        };
        match before {
            None => out.push(Change {
                kind,
                id: r.meta().id.clone(),
                action: Action::Create,
                body: Some(body_of(r)),
                made: Some((r.meta().created_at, r.meta().by.clone())),
            }),
            Some(o) if o != r => {
                let body = body_of(r);
                if body_of(o) != body {
                    out.push(Change {
                        kind,
                        id: r.meta().id.clone(),
                        action: Action::Correct,
                        body: Some(body),
                        made: None,
                    });
                }
            }
            Some(_) => {}
        }
    }
    if old.len() > new.len() || !same_order {
        let kept: std::collections::HashSet<&str> =
            new.iter().map(|r| r.meta().id.as_str()).collect();
        for o in old.iter().filter(|o| !kept.contains(o.meta().id.as_str())) {
            out.push(Change {
                kind,
                id: o.meta().id.clone(),
                action: Action::Void,
                body: None,
                made: None,
            });
        }
    }
}

/// The journal's end: the next sequence number and the hash to chain to.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Tip {
    pub next_seq: u64,
    pub hash: String,
}

impl Tip {
    pub fn start() -> Tip {
        Tip {
            next_seq: 1,
            hash: GENESIS.to_string(),
        }
    }

    /// The tip after `entries` (the last one's hash), or the start for none.
    pub fn after(entries: &[Entry]) -> Tip {
        entries.last().map_or_else(Tip::start, |e| Tip {
            next_seq: e.seq + 1,
            hash: e.hash.clone(),
        })
    }
}

/// Why a change could not become an entry.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ChangeError(pub String);

impl std::fmt::Display for ChangeError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

/// Sealed entries for `changes`, chained from `tip`. `versions` gives each record's
/// current version. Corrections and voids need a reason; the message says so.
pub fn entries_for(
    changes: &[Change],
    versions: &HashMap<String, u32>,
    tip: &Tip,
    at: DateTime<Utc>,
    by: &str,
    reason: Option<&str>,
) -> Result<Vec<Entry>, ChangeError> {
    let reason = reason.map(str::trim).filter(|r| !r.is_empty());
    let mut out = Vec::with_capacity(changes.len());
    let mut prev = tip.hash.clone();
    for (seq, c) in (tip.next_seq..).zip(changes) {
        let current = versions.get(&c.id).copied().unwrap_or(0);
        if c.action != Action::Create && reason.is_none() && c.kind != Kind::Settings {
            return Err(ChangeError(format!(
                "a {} that was already saved can only be {} with a reason: say why",
                c.kind.words(),
                c.action.words()
            )));
        }
        if let Some(body) = &c.body {
            check_body(c.kind, body).map_err(|e| ChangeError(format!("not saved: {e}")))?;
        }
        let (entry_by, created) = match (&c.made, c.action) {
            (Some((made_at, made_by)), Action::Create) if !made_by.is_empty() => {
                (made_by.clone(), (*made_at < at).then_some(*made_at))
            }
            _ => (by.trim().to_uppercase(), None),
        };
        let entry = Entry {
            seq,
            at,
            by: entry_by,
            action: c.action,
            kind: c.kind,
            id: c.id.clone(),
            version: current + 1,
            reason: reason.map(str::to_string),
            created,
            body: c.body.clone(),
            prev: prev.clone(),
            hash: String::new(),
        }
        .seal();
        prev = entry.hash.clone();
        out.push(entry);
    }
    Ok(out)
}

/// A record's content (without `meta`) within the bounds of `engine::plausible` and
/// its own fields' ranges; the message names the field.
pub fn check_body(kind: Kind, body: &Value) -> Result<(), String> {
    use crate::lab::{self, Record};
    crate::engine::plausible::check_json(body)?;
    fn typed<T: serde::de::DeserializeOwned + Record>(body: &Value) -> Result<(), String> {
        let mut v = body.clone();
        if let Value::Object(m) = &mut v {
            let meta = RecordMeta {
                id: String::new(),
                created_at: DateTime::UNIX_EPOCH,
                changed_at: DateTime::UNIX_EPOCH,
                by: String::new(),
                version: 1,
            };
            m.insert(
                "meta".into(),
                serde_json::to_value(meta).map_err(|e| e.to_string())?,
            );
        }
        let record: T =
            serde_json::from_value(v).map_err(|e| format!("the content cannot be read ({e})"))?;
        record.check()
    }
    match kind {
        Kind::Settings => serde_json::from_value::<Settings>(body.clone())
            .map(|_| ())
            .map_err(|e| format!("the lab settings cannot be read ({e})")),
        Kind::Test => typed::<lab::TestSetup>(body),
        Kind::ControlLevel => typed::<lab::ControlLevel>(body),
        Kind::ControlRun => typed::<lab::ControlRun>(body),
        Kind::Material => typed::<lab::MaterialRecord>(body),
        Kind::Calibration => typed::<lab::CalibrationRecord>(body),
        Kind::InstrumentEntry => typed::<lab::InstrumentEntry>(body),
        Kind::PatientResult => typed::<lab::PatientResult>(body),
        Kind::CorrectiveAction => typed::<lab::CorrectiveAction>(body),
        Kind::Event => serde_json::from_value::<Event>(body.clone())
            .map(|_| ())
            .map_err(|e| format!("the records event cannot be read ({e})")),
    }
}

/// The body of a [`Kind::Event`] entry: what happened, in words.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Event {
    pub what: String,
}

/// An entry the replay could not use: kept in the journal, listed, never deleted.
#[derive(Debug, Clone, PartialEq)]
pub struct SetAside {
    pub seq: u64,
    pub kind: Kind,
    pub id: String,
    pub why: String,
}

/// The lab rebuilt from its journal.
#[derive(Debug, Clone)]
pub struct Replay {
    pub lab: Lab,
    /// Current version and the hash of that version, per record id.
    pub versions: HashMap<String, (u32, String)>,
    /// Entries that were not used, with the reason.
    pub set_aside: Vec<SetAside>,
    /// Where entry numbers skip or repeat (entries lost or added outside Cuvette).
    pub gaps: Vec<String>,
    pub tip: Tip,
    /// When and by whom each record was made.
    created: HashMap<String, (DateTime<Utc>, String)>,
}

impl Replay {
    /// Current version per record id (for [`entries_for`]).
    pub fn version_numbers(&self) -> HashMap<String, u32> {
        self.versions
            .iter()
            .map(|(k, (v, _))| (k.clone(), *v))
            .collect()
    }
}

/// Rebuild the lab from `entries` (in order). `head`, when known, is the hash the last
/// entry must have (kept apart from the entries, so the last one is checked too).
/// `skip` lists entry numbers to leave out (records the user chose to set aside).
pub fn replay(entries: &[Entry], head: Option<&str>, skip: &[u64]) -> Replay {
    let mut r = Replay::empty();
    r.extend(entries, head, skip);
    r
}

impl Replay {
    /// The replay of an empty journal.
    pub fn empty() -> Replay {
        Replay {
            lab: Lab::empty(""),
            versions: HashMap::new(),
            created: HashMap::new(),
            set_aside: Vec::new(),
            gaps: Vec::new(),
            tip: Tip::start(),
        }
    }

    /// Apply entries that follow the tip (see [`replay`]); each is checked against its
    /// hash and the link to the one before.
    pub fn extend(&mut self, entries: &[Entry], head: Option<&str>, skip: &[u64]) {
        self.extend_checked(entries, head, skip, true);
    }

    /// Apply entries this program has just sealed ([`Entry::seal`]: a save, an import
    /// renumbered after the tip, the demo's founding): their hashes were computed
    /// moments ago, so they are not computed again; the links are still checked. Never
    /// for entries read from storage or a file.
    pub fn extend_sealed(&mut self, entries: &[Entry]) {
        self.extend_checked(entries, None, &[], false);
    }

    fn extend_checked(
        &mut self,
        entries: &[Entry],
        head: Option<&str>,
        skip: &[u64],
        hashes: bool,
    ) {
        for (k, e) in entries.iter().enumerate() {
            let aside = |why: String| SetAside {
                seq: e.seq,
                kind: e.kind,
                id: e.id.clone(),
                why,
            };
            let next_prev = match entries.get(k + 1) {
                Some(n) => Some(n.prev.as_str()),
                None => head,
            };
            if e.seq != self.tip.next_seq || e.prev != self.tip.hash {
                self.gaps.push(format!(
                    "entry {} does not follow entry {}: entries are missing, repeated or out of \
                     order",
                    e.seq,
                    self.tip.next_seq.saturating_sub(1)
                ));
            }
            self.tip = Tip {
                next_seq: e.seq + 1,
                hash: e.hash.clone(),
            };
            // Edited content no longer matches its own hash; an edited and re-sealed
            // entry no longer matches the link the next entry (or the head) holds.
            if (hashes && e.computed_hash() != e.hash) || next_prev.is_some_and(|p| p != e.hash) {
                self.set_aside.push(aside(format!(
                    "entry {} ({} {}) was changed outside Cuvette: its content no longer \
                     matches its SHA-256",
                    e.seq,
                    e.kind.words(),
                    e.id
                )));
                continue;
            }
            if skip.contains(&e.seq) {
                self.set_aside
                    .push(aside(format!("entry {} was set aside on request", e.seq)));
                continue;
            }
            if let Err(why) = apply(&mut self.lab, &mut self.versions, &mut self.created, e) {
                // Name the record, not only the entry number.
                let named = why.replacen(
                    &format!("entry {} ", e.seq),
                    &format!("entry {} ({}) ", e.seq, e.label()),
                    1,
                );
                self.set_aside.push(aside(named));
            }
        }
    }
}

/// Apply one checked entry to the lab.
fn apply(
    lab: &mut Lab,
    versions: &mut HashMap<String, (u32, String)>,
    created: &mut HashMap<String, (DateTime<Utc>, String)>,
    e: &Entry,
) -> Result<(), String> {
    let current = versions.get(&e.id).map(|(v, _)| *v);
    match (e.action, current) {
        (Action::Create, Some(_)) => {
            return Err(format!("entry {} makes {} a second time", e.seq, e.id));
        }
        (Action::Correct | Action::Void, None) if e.kind != Kind::Settings => {
            return Err(format!(
                "entry {} changes {}, which was never made",
                e.seq, e.id
            ));
        }
        _ => {}
    }
    if e.action == Action::Create {
        created.insert(e.id.clone(), (e.created.unwrap_or(e.at), e.by.clone()));
    }
    let (created_at, created_by) = created.get(&e.id).cloned().unwrap_or((e.at, e.by.clone()));
    let meta = RecordMeta {
        id: e.id.clone(),
        created_at,
        changed_at: e.at,
        by: created_by,
        version: e.version,
    };
    let body = |e: &Entry| -> Result<Value, String> {
        let mut v = e
            .body
            .clone()
            .ok_or_else(|| format!("entry {} has no content", e.seq))?;
        if !matches!(e.kind, Kind::Settings | Kind::Event) {
            let Value::Object(m) = &mut v else {
                return Err(format!("entry {}: the content is not a record", e.seq));
            };
            m.insert(
                "meta".into(),
                serde_json::to_value(&meta).map_err(|x| x.to_string())?,
            );
        }
        Ok(v)
    };
    fn put<T: serde::de::DeserializeOwned + crate::lab::Record>(
        list: &mut Vec<T>,
        action: Action,
        id: &str,
        v: Option<Value>,
        seq: u64,
    ) -> Result<(), String> {
        // A create was checked against the versions already: no search for it.
        let at = if action == Action::Create {
            None
        } else {
            list.iter().position(|r| r.meta().id == id)
        };
        match (action, v) {
            (Action::Void, _) => {
                if let Some(k) = at {
                    list.remove(k);
                }
                Ok(())
            }
            (_, Some(v)) => {
                crate::engine::plausible::check_json(&v)
                    .map_err(|x| format!("entry {seq} holds a value no lab records: {x}"))?;
                let record: T = serde_json::from_value(v)
                    .map_err(|x| format!("entry {seq}: the content cannot be read ({x})"))?;
                record
                    .check()
                    .map_err(|x| format!("entry {seq} holds a value no lab records: {x}"))?;
                match at {
                    Some(k) => list[k] = record,
                    None => list.push(record),
                }
                Ok(())
            }
            (_, None) => Err(format!("entry {seq} has no content")),
        }
    }
    let v = if e.action == Action::Void {
        None
    } else {
        Some(body(e)?)
    };
    match e.kind {
        Kind::Settings => {
            if let Some(v) = &v {
                crate::engine::plausible::check_json(v)
                    .map_err(|x| format!("entry {}: the lab settings: {x}", e.seq))?;
            }
            let s: Settings = serde_json::from_value(v.unwrap_or(Value::Null))
                .map_err(|x| format!("entry {}: the lab settings cannot be read ({x})", e.seq))?;
            lab.lab_name = s.lab_name;
            lab.demo = s.demo;
            lab.temperature_limits = s.temperature_limits;
            lab.absorbance_standards = s.absorbance_standards;
            lab.instrument_checks = s.instrument_checks;
        }
        Kind::Test => put(&mut lab.tests, e.action, &e.id, v, e.seq)?,
        Kind::ControlLevel => put(&mut lab.control_levels, e.action, &e.id, v, e.seq)?,
        Kind::ControlRun => put(&mut lab.control_runs, e.action, &e.id, v, e.seq)?,
        Kind::Material => put(&mut lab.materials, e.action, &e.id, v, e.seq)?,
        Kind::Calibration => put(&mut lab.calibrations, e.action, &e.id, v, e.seq)?,
        Kind::InstrumentEntry => put(&mut lab.instrument_log, e.action, &e.id, v, e.seq)?,
        Kind::PatientResult => put(&mut lab.patient_results, e.action, &e.id, v, e.seq)?,
        Kind::CorrectiveAction => put(&mut lab.corrective_actions, e.action, &e.id, v, e.seq)?,
        Kind::Event => {
            let v = v.unwrap_or(Value::Null);
            crate::engine::plausible::check_json(&v)
                .map_err(|x| format!("entry {}: {x}", e.seq))?;
            serde_json::from_value::<Event>(v)
                .map_err(|x| format!("entry {}: the records event cannot be read ({x})", e.seq))?;
        }
    }
    versions.insert(e.id.clone(), (e.version, e.hash.clone()));
    Ok(())
}

/// The entries about one record, oldest first: its history.
pub fn history<'a>(entries: &'a [Entry], id: &str) -> Vec<&'a Entry> {
    entries.iter().filter(|e| e.id == id).collect()
}

/// The entries made on one local day, oldest first: the day's trail.
pub fn day<'a, Tz: chrono::TimeZone>(
    entries: &'a [Entry],
    date: chrono::NaiveDate,
    tz: &Tz,
) -> Vec<&'a Entry> {
    entries
        .iter()
        .filter(|e| e.at.with_timezone(tz).date_naive() == date)
        .collect()
}

/// The journal that makes `lab` from nothing: one `create` per record, each with its
/// maker and time (used to bring a lab kept in the one-key format into the journal, and
/// to start the demo). Entries are made at `at` unless the record says when it was made.
pub fn founding_entries(lab: &Lab, at: DateTime<Utc>, by: &str) -> Vec<Entry> {
    let all = changes(&Lab::empty(""), lab);
    let mut out: Vec<Entry> = Vec::with_capacity(all.len());
    let records: HashMap<&str, &RecordMeta> = records_of(lab)
        .into_iter()
        .filter_map(|(_, id, m, _)| m.map(|m| (id, m)))
        .collect();
    for c in all {
        let tip = Tip::after(&out);
        let (when, who, created) = match records.get(c.id.as_str()) {
            Some(m) => (
                m.changed_at,
                m.by.clone(),
                (m.created_at < m.changed_at).then_some(m.created_at),
            ),
            None => (at, by.to_string(), None),
        };
        let entry = Entry {
            seq: tip.next_seq,
            at: when,
            by: who,
            action: Action::Create,
            kind: c.kind,
            id: c.id,
            version: 1,
            reason: None,
            created,
            body: c.body,
            prev: tip.hash,
            hash: String::new(),
        }
        .seal();
        out.push(entry);
    }
    out
}

/// The journal from its two copies: IndexedDB (the durable one, `None` where the
/// browser has none) and the localStorage mirror.
#[derive(Debug, Clone, Default)]
pub struct Reconciled {
    pub entries: Vec<Entry>,
    /// Entries the mirror has and IndexedDB lacks: write them there.
    pub missing_in_durable: Vec<Entry>,
    /// The mirror lacks or differs from some entries: rewrite it.
    pub mirror_stale: bool,
    /// What was found, in words, for the start-up report.
    pub notes: Vec<String>,
}

/// The start-up report's words for a localStorage copy that differs from the journal
/// from entry `e` on.
pub fn copy_differs_from(e: &Entry) -> String {
    format!(
        "the localStorage copy differs from the journal from entry {} ({} {}) on: it was \
         changed outside Cuvette",
        e.seq,
        e.kind.words(),
        e.id
    )
}

/// What was done about a damaged or different localStorage copy.
pub const COPY_REWRITTEN: &str = "The journal in IndexedDB was used and the copy rewritten";

/// Decide the journal from both copies. Where both hold an entry number they must be
/// equal; where they differ the durable copy is used and the difference reported.
pub fn reconcile(durable: Option<&[Entry]>, mirror: &[Entry]) -> Reconciled {
    let Some(durable) = durable else {
        return Reconciled {
            entries: mirror.to_vec(),
            ..Reconciled::default()
        };
    };
    let same = durable
        .iter()
        .zip(mirror)
        .take_while(|(a, b)| a == b)
        .count();
    let mut out = Reconciled::default();
    if same < durable.len().min(mirror.len()) {
        out.notes.push(format!(
            "{}. {COPY_REWRITTEN}",
            copy_differs_from(&durable[same])
        ));
        out.entries = durable.to_vec();
        out.mirror_stale = true;
    } else if durable.len() >= mirror.len() {
        out.entries = durable.to_vec();
        out.mirror_stale = durable.len() > mirror.len();
        if out.mirror_stale {
            out.notes.push(format!(
                "{} saved entries were missing from the localStorage copy (the browser had not \
                 written them before it closed); they were copied back from IndexedDB",
                durable.len() - mirror.len()
            ));
        }
    } else {
        out.missing_in_durable = mirror[durable.len()..].to_vec();
        out.entries = mirror.to_vec();
        out.notes.push(format!(
            "{} entries were missing from IndexedDB; they were copied back from localStorage",
            mirror.len() - durable.len()
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> Lab {
        Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap()
    }

    fn at(s: &str) -> DateTime<Utc> {
        s.parse().unwrap()
    }

    #[test]
    fn a_founded_journal_replays_to_the_same_lab() {
        let lab = demo();
        let entries = founding_entries(&lab, at("2026-11-27T09:00:00Z"), "AK");
        let r = replay(&entries, None, &[]);
        assert!(r.set_aside.is_empty(), "{:?}", r.set_aside);
        assert_eq!(r.lab, lab);
        assert_eq!(r.tip.next_seq as usize, entries.len() + 1);
    }

    /// Entries just sealed here replay to the same state whether or not their hashes
    /// are computed again; an entry edited after sealing is caught only by the check
    /// that computes them (which every start-up and every read of another tab's
    /// entries uses).
    #[test]
    fn sealed_entries_replay_alike_and_only_the_full_check_catches_an_edit() {
        let lab = crate::demo::demo_lab();
        let entries = founding_entries(&lab, at("2026-11-27T09:00:00Z"), "AK");
        let mut sealed = Replay::empty();
        sealed.extend_sealed(&entries);
        let checked = replay(&entries, None, &[]);
        assert_eq!(sealed.lab, checked.lab);
        assert_eq!(sealed.tip, checked.tip);
        assert_eq!(sealed.version_numbers(), checked.version_numbers());
        assert!(sealed.set_aside.is_empty() && sealed.gaps.is_empty());
        let mut edited = entries.clone();
        let k = edited.len() / 2;
        edited[k].by = "ZZ".into();
        assert_eq!(replay(&edited, None, &[]).set_aside.len(), 1);
        let mut trusting = Replay::empty();
        trusting.extend_sealed(&edited);
        assert!(trusting.set_aside.is_empty());
    }

    #[test]
    fn a_correction_keeps_the_old_version_and_needs_a_reason() {
        let lab = demo();
        let mut entries = founding_entries(&lab, at("2026-11-27T09:00:00Z"), "AK");
        let r = replay(&entries, None, &[]);
        let mut changed = r.lab.clone();
        changed.control_levels[0].mean = 96.0;
        let c = changes(&r.lab, &changed);
        assert_eq!(c.len(), 1);
        assert_eq!(c[0].action, Action::Correct);
        let when = at("2026-11-28T10:00:00Z");
        let err = entries_for(&c, &r.version_numbers(), &r.tip, when, "jm", None).unwrap_err();
        assert!(err.0.contains("with a reason"), "{err}");
        let new = entries_for(
            &c,
            &r.version_numbers(),
            &r.tip,
            when,
            "jm",
            Some("new lot insert"),
        )
        .unwrap();
        entries.extend(new);
        let r2 = replay(&entries, None, &[]);
        assert_eq!(r2.lab.control_levels[0].mean, 96.0);
        assert_eq!(r2.lab.control_levels[0].meta.version, 2);
        assert_eq!(r2.lab.control_levels[0].meta.changed_at, when);
        let id = &lab.control_levels[0].meta.id;
        let h = history(&entries, id);
        assert_eq!(h.len(), 2);
        assert_eq!(h[0].body.as_ref().unwrap()["mean"], 95.0);
        assert_eq!(h[1].reason.as_deref(), Some("new lot insert"));
        assert_eq!(h[1].by, "JM");
    }

    #[test]
    fn a_void_removes_the_record_from_use_but_not_from_the_trail() {
        let lab = demo();
        let mut entries = founding_entries(&lab, at("2026-11-27T09:00:00Z"), "AK");
        let r = replay(&entries, None, &[]);
        let mut changed = r.lab.clone();
        let gone = changed.control_runs.remove(3);
        let c = changes(&r.lab, &changed);
        let new = entries_for(
            &c,
            &r.version_numbers(),
            &r.tip,
            at("2026-11-28T10:00:00Z"),
            "jm",
            Some("wrong control vial"),
        )
        .unwrap();
        assert_eq!(new[0].action, Action::Void);
        entries.extend(new);
        let r2 = replay(&entries, None, &[]);
        assert_eq!(r2.lab.control_runs.len(), lab.control_runs.len() - 1);
        assert!(r2
            .lab
            .control_runs
            .iter()
            .all(|x| x.meta.id != gone.meta.id));
        assert_eq!(history(&entries, &gone.meta.id).len(), 2);
    }

    #[test]
    fn an_edited_entry_is_set_aside_and_named() {
        let lab = demo();
        let mut entries = founding_entries(&lab, at("2026-11-27T09:00:00Z"), "AK");
        let k = entries
            .iter()
            .position(|e| e.kind == Kind::ControlRun)
            .unwrap()
            + 5;
        let id = entries[k].id.clone();
        entries[k].body.as_mut().unwrap()["values"][0] = serde_json::json!(100.0);
        let r = replay(&entries, None, &[]);
        assert_eq!(r.set_aside.len(), 1, "{:?}", r.set_aside);
        assert_eq!(r.set_aside[0].id, id);
        assert!(r.set_aside[0].why.contains("changed outside Cuvette"));
        assert_eq!(r.lab.control_runs.len(), lab.control_runs.len() - 1);
        // Re-sealing the edited entry does not hide it: the next entry's link breaks.
        entries[k] = entries[k].clone().seal();
        let r = replay(&entries, None, &[]);
        assert_eq!(r.set_aside.len(), 1);
        assert_eq!(r.set_aside[0].id, id);
        // The last entry is checked against the head kept apart.
        let mut entries = founding_entries(&lab, at("2026-11-27T09:00:00Z"), "AK");
        let head = entries.last().unwrap().hash.clone();
        let last = entries.len() - 1;
        entries[last].by = "ZZ".into();
        entries[last] = entries[last].clone().seal();
        assert_eq!(replay(&entries, Some(&head), &[]).set_aside.len(), 1);
    }

    #[test]
    fn the_two_copies_reconcile_to_the_longer_and_report_repairs() {
        let all = founding_entries(&demo(), at("2026-11-27T09:00:00Z"), "AK");
        let r = reconcile(Some(&all), &all[..40]);
        assert_eq!(r.entries, all);
        assert!(r.mirror_stale && r.missing_in_durable.is_empty());
        assert!(r.notes[0].contains("copied back from IndexedDB"));
        let r = reconcile(Some(&all[..40]), &all);
        assert_eq!(r.entries, all);
        assert_eq!(r.missing_in_durable, all[40..].to_vec());
        let r = reconcile(Some(&all), &all);
        assert!(!r.mirror_stale && r.notes.is_empty());
        let mut edited = all.clone();
        edited[7].by = "XX".into();
        let r = reconcile(Some(&all), &edited);
        assert_eq!(r.entries, all);
        assert!(r.mirror_stale && r.notes[0].contains("entry 8"));
        assert_eq!(reconcile(None, &edited).entries, edited);
    }

    #[test]
    fn revisions_look_like_couchdb_revisions() {
        let rev = revision(3, &"ab".repeat(32));
        assert_eq!(rev, format!("3-{}", "ab".repeat(16)));
    }
}
