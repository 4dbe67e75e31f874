//! The open book: its journal in memory, the lab replayed from it, and the way a change
//! reaches both stores. A change becomes entries at once (shown as "saving"), is
//! committed to IndexedDB with strict durability, and only then counts as saved; the
//! localStorage mirror follows. Until the commit, the unsaved entries are also kept in a
//! per-tab localStorage key (written at once), so a reload or a closed tab in between
//! loses nothing: the next start adopts them. If another tab wrote first, its entries
//! are taken in and ours are renumbered after them, so neither tab's records are lost.

use std::cell::RefCell;
use std::rc::Rc;

use chrono::{DateTime, Utc};

use super::idb::{AppendError, Db};
use super::{Book, Local, StoreError};
use crate::journal::{self, ChangeError, Entry, Replay};
use crate::lab::Lab;
use crate::mirror::{KeyValue, Mirror, Pointer};

/// One book, open.
pub struct Shelf {
    pub book: Book,
    pub db: Option<Db>,
    /// Entries committed (to IndexedDB, or to localStorage where there is no IndexedDB).
    pub entries: Vec<Entry>,
    /// Entries made here and not yet committed.
    pub unsaved: Vec<Entry>,
    /// The lab from `entries` then `unsaved`.
    pub replay: Replay,
    pub skip: Vec<u64>,
    pointer: Option<Pointer>,
    flushing: bool,
    /// How many times another tab's entries were taken in (the lab on screen changed
    /// under a save).
    taken_in: u64,
    /// The localStorage copy's chunks are still to be checked against the journal.
    mirror_unchecked: bool,
}

/// How the last save went.
#[derive(Debug, Clone, PartialEq)]
pub enum Saved {
    /// In IndexedDB (durable) and in the localStorage copy.
    Both,
    /// In IndexedDB; the localStorage copy refused (full): it is behind.
    DurableOnly,
    /// Only in localStorage (this browser gives no IndexedDB): not safe from a power cut.
    LocalOnly,
    /// Not saved: the entries are kept in memory; the message says what to do.
    No(String),
}

impl Shelf {
    fn mirror(&self) -> Mirror {
        Mirror::new(self.book.prefix())
    }

    /// Counts the times another tab's entries were taken in: a save that leaves it
    /// unchanged left the lab on screen as it was.
    pub fn taken_in(&self) -> u64 {
        self.taken_in
    }

    /// The lab on screen (`None` for a book with nothing in it).
    pub fn lab(&self) -> Option<Lab> {
        (!self.entries.is_empty() || !self.unsaved.is_empty()).then(|| self.replay.lab.clone())
    }

    /// Turn the difference between the lab on screen and `new` into entries made `at`
    /// by `by`, shown at once and not yet saved. Returns how many.
    pub fn record(
        &mut self,
        new: &Lab,
        at: DateTime<Utc>,
        by: &str,
        reason: Option<&str>,
    ) -> Result<usize, ChangeError> {
        let changes = journal::changes(&self.replay.lab, new);
        // The current versions of the changed records only (not a copy of every one).
        let versions = changes
            .iter()
            .filter_map(|c| {
                let (v, _) = self.replay.versions.get(&c.id)?;
                Some((c.id.clone(), *v))
            })
            .collect();
        let entries = journal::entries_for(&changes, &versions, &self.replay.tip, at, by, reason)?;
        self.replay.extend_sealed(&entries);
        let n = entries.len();
        self.unsaved.extend(entries);
        self.keep_pending();
        Ok(n)
    }

    /// Entries of a whole lab, made in one go (the demo started, a one-key lab brought in).
    pub fn found(&mut self, lab: &Lab, at: DateTime<Utc>, by: &str) {
        let entries = journal::founding_entries(lab, at, by);
        self.replay.extend_sealed(&entries);
        self.unsaved.extend(entries);
        self.keep_pending();
    }

    /// Every entry, committed or not, in order (what the screen shows).
    pub fn entries_all(&self) -> Vec<Entry> {
        let mut all = self.entries.clone();
        all.extend(self.unsaved.iter().cloned());
        all
    }

    /// Entries made elsewhere and checked (an import), already numbered after the tip:
    /// shown at once, not yet saved.
    pub fn append(&mut self, entries: Vec<Entry>) {
        self.replay.extend_sealed(&entries);
        self.unsaved.extend(entries);
        self.keep_pending();
    }

    /// Write the localStorage copy; false when the browser refused.
    fn write_mirror(&mut self, fresh: bool) -> bool {
        let mirror = self.mirror();
        let mut kv = Local;
        // Another tab may have written a newer generation: build on it, never behind it.
        let stored = mirror.pointer(&kv).ok().flatten();
        let previous = match (stored, self.pointer.clone()) {
            (Some(s), Some(p)) if s.generation >= p.generation => Some(s),
            (Some(s), None) => Some(s),
            (_, p) => p,
        };
        if !fresh
            && previous
                .as_ref()
                .is_some_and(|p| p.count as usize > self.entries.len())
        {
            return true; // the copy is ahead of this tab; it will be read, not overwritten
        }
        let previous = previous.map(|p| {
            if fresh {
                Pointer {
                    chunks: Vec::new(),
                    count: 0,
                    ..p
                }
            } else {
                p
            }
        });
        match mirror.write(&mut kv, &self.entries, previous.as_ref()) {
            Ok(p) => {
                self.pointer = Some(p);
                if fresh {
                    mirror.sweep(&mut kv);
                }
                true
            }
            Err(_) => false,
        }
    }

    /// Take in entries another tab committed, and renumber ours after them (an entry of
    /// ours that the other tab already committed, taken from our pending copy after a
    /// reload, is dropped: it is in the journal once).
    fn take_in(&mut self, newer: Vec<Entry>) {
        if newer.is_empty() {
            return;
        }
        self.taken_in += 1;
        self.entries.extend(newer);
        self.replay = journal::replay(&self.entries, None, &self.skip);
        let ours = std::mem::take(&mut self.unsaved);
        self.adopt(ours);
    }

    /// Put `ours` after the committed entries as unsaved, renumbered and re-linked,
    /// leaving out any change the journal already holds.
    fn adopt(&mut self, ours: Vec<Entry>) {
        for mut e in ours {
            if self.entries.iter().any(|c| c.same_change(&e)) {
                continue;
            }
            e.seq = self.replay.tip.next_seq;
            e.prev = self.replay.tip.hash.clone();
            e.version = self.replay.versions.get(&e.id).map_or(1, |(v, _)| v + 1);
            let e = e.seal();
            self.replay.extend_sealed(std::slice::from_ref(&e));
            self.unsaved.push(e);
        }
        self.keep_pending();
    }

    /// Copy the unsaved entries to localStorage at once (a synchronous write), so a
    /// reload or a closed tab before the journal's commit does not lose them.
    fn keep_pending(&self) {
        super::write_pending(self.book, &self.unsaved);
    }
}

/// Open a book: sweep what an interrupted save left, read both copies, repair the one
/// that lacks entries, replay. Returns the shelf and what was found, in words.
pub async fn open(book: Book, db: Option<Db>) -> (Shelf, Vec<String>) {
    let mut notes = Vec::new();
    let mirror = Mirror::new(book.prefix());
    let mut kv = Local;
    let swept = mirror.sweep(&mut kv);
    if swept > 0 {
        notes.push(format!(
            "{swept} half-written chunk(s) of an interrupted save were removed; the save \
             before it is intact"
        ));
    }
    let mut whole = true;
    let durable = match &db {
        Some(db) => match db.read(book.store_name(), 0).await {
            Ok((entries, unreadable)) => {
                for (seq, _) in &unreadable {
                    notes.push(format!("journal entry {seq} in IndexedDB cannot be read"));
                }
                whole = unreadable.is_empty();
                Some(entries)
            }
            Err(e) => {
                notes.push(e.0);
                None
            }
        },
        None => None,
    };
    // Where IndexedDB is whole and the copy's pointer names its count and last entry,
    // the copy could only add what IndexedDB already has: its chunks are checked after
    // the lab is shown ([`check_mirror`]), not before.
    let stored_pointer = mirror.pointer(&kv).ok().flatten();
    let deferred = match (&durable, &stored_pointer) {
        (Some(d), Some(p)) => {
            whole && p.count as usize == d.len() && d.last().is_some_and(|e| e.hash == p.head)
        }
        _ => false,
    };
    let read = if deferred {
        crate::mirror::Read {
            pointer: stored_pointer,
            ..Default::default()
        }
    } else {
        let read = mirror.read(&kv);
        notes.extend(read.problems.iter().cloned());
        read
    };
    let rec = match (deferred, durable) {
        (true, Some(entries)) => journal::Reconciled {
            entries,
            ..Default::default()
        },
        (_, durable) => journal::reconcile(durable.as_deref(), &read.entries),
    };
    notes.extend(rec.notes.iter().cloned());
    if let (Some(db), false) = (&db, rec.missing_in_durable.is_empty()) {
        if let Err(e) = db
            .put_missing(book.store_name(), &rec.missing_in_durable)
            .await
        {
            notes.push(e.0);
        }
    }
    let skip = super::set_aside(book);
    let head = (deferred || read.entries == rec.entries)
        .then(|| read.pointer.as_ref().map(|p| p.head.clone()))
        .flatten();
    let replay = journal::replay(&rec.entries, head.as_deref(), &skip);
    let mut shelf = Shelf {
        book,
        db,
        entries: rec.entries,
        unsaved: Vec::new(),
        replay,
        skip,
        pointer: read.pointer,
        flushing: false,
        taken_in: 0,
        mirror_unchecked: deferred,
    };
    // A copy that is only behind gets the missing entries; a damaged or different one
    // is written afresh.
    let fresh =
        !deferred && (!read.problems.is_empty() || !shelf.entries.starts_with(&read.entries));
    if (rec.mirror_stale || fresh) && !shelf.entries.is_empty() && !shelf.write_mirror(fresh) {
        notes.push(
            "the localStorage copy could not be repaired: this browser's storage is full".into(),
        );
    }
    // Changes that were on screen but not yet committed when a page closed.
    let pending = super::take_pending(book);
    if !pending.is_empty() {
        let before = shelf.unsaved.len();
        shelf.adopt(pending);
        let n = shelf.unsaved.len() - before;
        if n > 0 {
            notes.push(format!(
                "{n} change(s) were still being saved when the page was last closed; they \
                 were recovered and are saved now"
            ));
        }
    }
    (shelf, notes)
}

/// Check the localStorage copy left unchecked at start, one chunk per task so the page
/// stays responsive; a chunk that cannot be read or differs from the journal is
/// reported and the copy written afresh from the journal. Returns what was found, in
/// the words of the start-up report.
pub async fn check_mirror(cell: &Rc<RefCell<Shelf>>) -> Vec<String> {
    enum Step {
        Good,
        Done,
        Bad(String),
    }
    let mut k = 0;
    loop {
        let step = {
            let s = cell.borrow();
            if !s.mirror_unchecked {
                return Vec::new();
            }
            let mirror = s.mirror();
            match mirror.pointer(&Local) {
                Ok(Some(p)) if k < p.chunks.len() && p.count as usize <= s.entries.len() => {
                    match mirror.check_chunk(&Local, &p, k, &s.entries) {
                        Ok(()) => Step::Good,
                        Err(why) => Step::Bad(why),
                    }
                }
                // Checked to its end, or another tab wrote a newer copy (this tab takes
                // its entries in; the next start checks that copy).
                Ok(_) => Step::Done,
                Err(why) => Step::Bad(why),
            }
        };
        match step {
            Step::Good => {}
            Step::Done => {
                cell.borrow_mut().mirror_unchecked = false;
                return Vec::new();
            }
            Step::Bad(why) => {
                let mut s = cell.borrow_mut();
                s.mirror_unchecked = false;
                let repaired = s.write_mirror(true);
                return vec![if repaired {
                    format!("{why}. {}", journal::COPY_REWRITTEN)
                } else {
                    format!(
                        "{why}. The copy could not be rewritten: this browser's storage is full"
                    )
                }];
            }
        }
        k += 1;
        super::next_task().await;
    }
}

/// Commit what is unsaved, until nothing is; one flush at a time (a second call while
/// one runs returns at once, the running one picks its entries up).
pub async fn flush(cell: &Rc<RefCell<Shelf>>) -> Option<Saved> {
    {
        let mut s = cell.borrow_mut();
        if s.flushing || s.unsaved.is_empty() {
            return None;
        }
        s.flushing = true;
    }
    let mut outcome = Saved::Both;
    loop {
        let (db, book, batch) = {
            let s = cell.borrow();
            (s.db.clone(), s.book, s.unsaved.clone())
        };
        if batch.is_empty() {
            break;
        }
        match db {
            Some(db) => match db.append(book.store_name(), &batch).await {
                Ok(()) => {
                    let mut s = cell.borrow_mut();
                    s.unsaved.drain(..batch.len());
                    s.entries.extend(batch);
                    s.keep_pending();
                    if !s.write_mirror(false) {
                        outcome = Saved::DurableOnly;
                    }
                }
                Err(AppendError::Taken) => {
                    let from = cell.borrow().entries.len() as u64 + 1;
                    let newer = db.read(book.store_name(), from).await;
                    match newer {
                        Ok((newer, _)) if !newer.is_empty() => cell.borrow_mut().take_in(newer),
                        Ok(_) => {
                            outcome = Saved::No(
                                "the journal refused the entry numbers and has no newer \
                                 entries: reload the page"
                                    .into(),
                            );
                            break;
                        }
                        Err(e) => {
                            outcome = Saved::No(e.0);
                            break;
                        }
                    }
                }
                Err(AppendError::Refused(why)) => {
                    outcome = Saved::No(why);
                    break;
                }
            },
            None => {
                let mut s = cell.borrow_mut();
                let before = s.entries.len();
                s.entries.extend(batch.iter().cloned());
                if s.write_mirror(false) {
                    s.unsaved.drain(..batch.len());
                    s.keep_pending();
                    outcome = Saved::LocalOnly;
                } else {
                    s.entries.truncate(before);
                    outcome = Saved::No("the browser's storage is full".into());
                    break;
                }
            }
        }
    }
    cell.borrow_mut().flushing = false;
    Some(outcome)
}

/// Replace the book's whole journal (after an archive was verified): IndexedDB in one
/// transaction, then a fresh localStorage generation. Refused while changes are unsaved.
pub async fn replace(cell: &Rc<RefCell<Shelf>>, entries: Vec<Entry>) -> Result<(), StoreError> {
    let (db, book) = {
        let s = cell.borrow();
        if !s.unsaved.is_empty() || s.flushing {
            return Err(StoreError(
                "changes are still being saved; try again when the screen says all saved".into(),
            ));
        }
        (s.db.clone(), s.book)
    };
    if let Some(db) = &db {
        db.replace_all(book.store_name(), &entries).await?;
    }
    let mut s = cell.borrow_mut();
    s.replay = journal::replay(&entries, None, &s.skip);
    s.entries = entries;
    if !s.write_mirror(true) && db.is_none() {
        return Err(StoreError(
            "the browser's storage refused the rewritten records".into(),
        ));
    }
    Ok(())
}

/// Take in what another tab committed. Returns true when something new came in.
pub async fn refresh(cell: &Rc<RefCell<Shelf>>) -> bool {
    let (db, book, have, busy) = {
        let s = cell.borrow();
        (s.db.clone(), s.book, s.entries.len(), s.flushing)
    };
    if busy {
        return false; // the running flush takes the other tab's entries in itself
    }
    let newer = match db {
        Some(db) => match db.read(book.store_name(), have as u64 + 1).await {
            Ok((newer, _)) => newer,
            Err(_) => return false,
        },
        None => {
            let read = Mirror::new(book.prefix()).read(&Local);
            read.entries.into_iter().skip(have).collect()
        }
    };
    if newer.is_empty() {
        return false;
    }
    cell.borrow_mut().take_in(newer);
    true
}

/// Remove a book from both stores (the demo switched off).
pub async fn clear(book: Book, db: Option<&Db>) -> Result<(), StoreError> {
    Mirror::new(book.prefix()).clear(&mut Local);
    super::take_pending(book);
    if let Some(db) = db {
        db.clear(book.store_name()).await?;
    }
    Ok(())
}

/// An empty shelf (before the stores answered).
pub fn empty(book: Book, db: Option<Db>) -> Shelf {
    Shelf {
        book,
        db,
        entries: Vec::new(),
        unsaved: Vec::new(),
        replay: Replay::empty(),
        skip: Vec::new(),
        pointer: None,
        flushing: false,
        taken_in: 0,
        mirror_unchecked: false,
    }
}

/// Characters the book's localStorage copy takes.
pub fn mirror_size(book: Book) -> usize {
    Mirror::new(book.prefix()).size(&Local)
}

/// Whether a key-value store has anything under the book's prefix.
pub fn has_mirror(book: Book) -> bool {
    Local.keys().iter().any(|k| k.starts_with(book.prefix()))
}
