//! The browser shell: leptos components for the bench's views.
//!
//! Components hold engine values in signals and call the engine for every number they
//! show; they do no arithmetic of their own. Storage goes through [`crate::store`],
//! drawing through [`chart`].

mod calibration;
pub(crate) mod chart;
mod control_charts;
mod exchange;
mod instrument;
mod materials;
mod planning;
mod records;
mod runs;
mod setup;
mod today;

use chrono::{Local, Utc};
use leptos::prelude::*;

use crate::lab::Lab;
use crate::store::{self, shelf::Saved, shelf::Shelf};

/// A new record made now by the technician on duty (meta and the instant), or the
/// message asking for initials: every record says who did it.
pub(super) fn new_record(
    technician: ReadSignal<String>,
) -> Result<(crate::lab::RecordMeta, chrono::DateTime<Utc>), String> {
    let initials = technician.get_untracked();
    if initials.trim().is_empty() {
        return Err("enter your initials (top right) first: every record says who did it".into());
    }
    let now = Utc::now();
    Ok((
        crate::lab::RecordMeta::new(store::random_bytes(), now, &initials),
        now,
    ))
}

/// The lab as the cards of one drawing share it: one copy per change, however many
/// cards and forms read it.
pub(super) type SharedLab = std::sync::Arc<Lab>;

/// Run `f` and leave its duration, in milliseconds, under `name` in the page's
/// `cuvetteTimings` object (the newest only), for the browser benchmarks to read;
/// nothing is shown. (Not the performance timeline: a test's fixed clock replaces it.)
pub(super) fn timed<T>(name: &'static str, f: impl FnOnce() -> T) -> T {
    timing_starts(name);
    let out = f();
    timing_ends(name);
    out
}

thread_local! {
    static TIMING_STARTS: std::cell::RefCell<Vec<(&'static str, f64)>> =
        const { std::cell::RefCell::new(Vec::new()) };
}

fn page_now() -> Option<f64> {
    Some(web_sys::window()?.performance()?.now())
}

/// Start timing `name` (for work that awaits between its start and end).
pub(super) fn timing_starts(name: &'static str) {
    if let Some(t) = page_now() {
        TIMING_STARTS.with_borrow_mut(|s| {
            s.retain(|(n, _)| *n != name);
            s.push((name, t));
        });
    }
}

/// End timing `name`: its duration goes to `cuvetteTimings[name]`.
pub(super) fn timing_ends(name: &'static str) {
    let start = TIMING_STARTS.with_borrow_mut(|s| {
        let k = s.iter().position(|(n, _)| *n == name)?;
        Some(s.swap_remove(k).1)
    });
    let (Some(start), Some(now)) = (start, page_now()) else {
        return;
    };
    let global = js_sys::global();
    let key = wasm_bindgen::JsValue::from_str("cuvetteTimings");
    let timings = js_sys::Reflect::get(&global, &key)
        .ok()
        .filter(|v| v.is_object())
        .unwrap_or_else(|| {
            let o = js_sys::Object::new().into();
            let _ = js_sys::Reflect::set(&global, &key, &o);
            o
        });
    let _ = js_sys::Reflect::set(
        &timings,
        &wasm_bindgen::JsValue::from_str(name),
        &wasm_bindgen::JsValue::from_f64(now - start),
    );
}

/// The lab a card's form changes: the one on screen now. A card is kept while its
/// test's key stays the same ([`Lab::test_keys`]), so the copy it was drawn from can
/// lack another test's newer records: good for drawing its own test, never for saving.
pub(super) fn lab_to_change(drawn: &Lab) -> Lab {
    use_context::<Trail>()
        .and_then(|t| t.current_lab())
        .unwrap_or_else(|| drawn.clone())
}

/// One card per test, or the empty state: the shape of the Calibration and QC runs
/// views. A test's card is drawn again only when its key changes (its own records, or
/// the lab-wide ones it may cite); the other cards stay as they are.
pub(super) fn per_test(
    lab: ReadSignal<Option<SharedLab>>,
    card: impl Fn(&SharedLab, &crate::lab::TestSetup) -> AnyView + Send + Sync + Clone + 'static,
) -> impl IntoView {
    #[derive(Clone, Copy, PartialEq)]
    enum Shown {
        NoLab,
        NoTests,
        Tests,
    }
    // A memo, so that a change redraws the cards through the keyed list below and
    // only a change of what is shown at all starts the list afresh.
    let shown = Memo::new(move |_| {
        lab.with(|l| match l {
            None => Shown::NoLab,
            Some(l) if l.tests.is_empty() => Shown::NoTests,
            Some(_) => Shown::Tests,
        })
    });
    let cards = move || {
        lab.with(|l| {
            let Some(l) = l else { return Vec::new() };
            let keys = l.test_keys();
            let shared = SharedLab::clone(l);
            (0..shared.tests.len())
                .map(|k| {
                    let key = keys
                        .get(&shared.tests[k].meta.id)
                        .copied()
                        .unwrap_or_default();
                    (shared.tests[k].meta.id.clone(), key, k, shared.clone())
                })
                .collect::<Vec<_>>()
        })
    };
    move || match shown.get() {
        Shown::NoLab => view! { <EmptyState text=NO_LAB /> }.into_any(),
        Shown::NoTests => {
            view! { <EmptyState text="No tests set up yet: add them in Set-up." /> }.into_any()
        }
        Shown::Tests => {
            let card = card.clone();
            view! {
                <For
                    each=cards
                    key=|(id, key, _, _)| (id.clone(), *key)
                    children=move |(_, _, k, lab)| card(&lab, &lab.tests[k])
                />
            }
            .into_any()
        }
    }
}

/// The period a long history is shown for: a month, with the previous and next one
/// click away and any month by its picker, or a range of days.
#[component]
pub(super) fn PeriodPicker(
    /// The period shown.
    period: RwSignal<crate::period::Period>,
    /// The test selector of the month field (the others are named from it).
    testid: &'static str,
) -> impl IntoView {
    use crate::period::Period;
    let (from, set_from) = signal(String::new());
    let (to, set_to) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let show_range = move |_| match Period::days(&from.get_untracked(), &to.get_untracked()) {
        Ok(p) => {
            set_message.set(None);
            period.set(p);
        }
        Err(e) => set_message.set(Some(e)),
    };
    view! {
        <div class="period no-print">
            <p>
                <button data-testid=format!("{testid}-previous") on:click=move |_| period.update(|p| *p = p.step(-1))>
                    "◀ previous"
                </button>
                " "
                <label>"Month "
                    <input type="month" data-testid=testid
                        prop:value=move || period.get().month().map(|m| m.iso()).unwrap_or_default()
                        on:change=move |ev| {
                            if let Some(m) = crate::period::Month::parse(&event_target_value(&ev)) {
                                period.set(Period::Month(m));
                            }
                        } />
                </label>
                " "
                <button data-testid=format!("{testid}-next") on:click=move |_| period.update(|p| *p = p.step(1))>
                    "next ▶"
                </button>
                " "
                <button data-testid=format!("{testid}-this") on:click=move |_| period.set(Period::month_of(Utc::now(), &Local))>
                    "this month"
                </button>
                " · "
                <label>"from "<input type="date" data-testid=format!("{testid}-from") on:input=move |ev| set_from.set(event_target_value(&ev)) /></label>
                " "
                <label>"to "<input type="date" data-testid=format!("{testid}-to") on:input=move |ev| set_to.set(event_target_value(&ev)) /></label>
                " "
                <button data-testid=format!("{testid}-range") on:click=show_range>"show these days"</button>
            </p>
            <p class="muted" data-testid=format!("{testid}-shown")>{move || format!("Shown: {}", period.get().label())}</p>
            {move || message.get().map(|m| view! { <p class="problem" data-testid=format!("{testid}-message")>{m}</p> })}
        </div>
    }
}

/// How long before "now" the demo lab's newest record is placed when it is loaded.
const DEMO_LEAD: chrono::Duration = chrono::Duration::minutes(3);

/// The bench's views, in the order of the navigation.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum View {
    Today,
    Calibration,
    Runs,
    Charts,
    Materials,
    Instrument,
    Records,
    Setup,
}

impl View {
    pub const ALL: [View; 8] = [
        View::Today,
        View::Calibration,
        View::Runs,
        View::Charts,
        View::Materials,
        View::Instrument,
        View::Records,
        View::Setup,
    ];

    /// Label in the navigation.
    pub fn label(self) -> &'static str {
        match self {
            View::Today => "Today",
            View::Calibration => "Calibration",
            View::Runs => "QC runs",
            View::Charts => "Control charts",
            View::Materials => "Materials",
            View::Instrument => "Instrument log",
            View::Records => "Records",
            View::Setup => "Set-up",
        }
    }

    /// Stable name for storage and test selectors.
    pub fn slug(self) -> &'static str {
        match self {
            View::Today => "today",
            View::Calibration => "calibration",
            View::Runs => "runs",
            View::Charts => "charts",
            View::Materials => "materials",
            View::Instrument => "instrument",
            View::Records => "records",
            View::Setup => "setup",
        }
    }

    fn from_slug(s: &str) -> Option<View> {
        View::ALL.into_iter().find(|v| v.slug() == s)
    }
}

/// How the lab on screen stands against the stores.
#[derive(Debug, Clone, PartialEq)]
pub enum SaveState {
    Opening,
    Saving,
    Saved(chrono::DateTime<Utc>),
    /// Saved durably; the localStorage copy is behind (storage full).
    DurableOnly(chrono::DateTime<Utc>),
    /// Saved in localStorage only (no IndexedDB in this browser).
    LocalOnly(chrono::DateTime<Utc>),
    /// Not saved; the changes are held on screen.
    NotSaved(String),
}

/// The open book, shared by the App's handlers (one thread: a local value).
type ShelfCell = StoredValue<std::rc::Rc<std::cell::RefCell<Shelf>>, LocalStorage>;

/// A change to commit: the lab as it should be, and the reason for a correction or void.
#[derive(Debug, Clone)]
pub struct Change {
    pub lab: Lab,
    pub reason: Option<String>,
}

/// Context for views that correct, void or look up a record's history.
#[derive(Clone, Copy)]
pub(crate) struct Trail {
    /// Commit a correction or void with its reason.
    pub amend: Callback<Change>,
    /// Commit entries an import prepared (numbered after the current tip).
    pub append: Callback<Vec<crate::journal::Entry>>,
    /// Show a records file read-only instead of the lab (`None` closes it).
    pub view_archive: Callback<Option<(String, Lab)>>,
    /// Show the shelf again after its journal was replaced (an archive removed).
    pub refresh: Callback<()>,
    /// The record whose history is shown.
    pub history_of: RwSignal<Option<String>>,
    /// Bumped whenever the journal changed (for the trail and history views).
    pub revision: ReadSignal<u64>,
    /// Bumped after each commit reached the stores (for the storage figures).
    pub committed: ReadSignal<u64>,
    pub shelf: ShelfCell,
}

impl Trail {
    /// The lab as it is now (read when a correction is made, never held by a row).
    pub fn current_lab(&self) -> Option<Lab> {
        self.shelf.get_value().borrow().lab()
    }
}

/// The whole app: the recovery screen if the last start failed, else the bench.
#[component]
pub fn App() -> impl IntoView {
    match store::begin_start() {
        Some(why) => view! { <records::RecoveryScreen why=why /> }.into_any(),
        None => view! { <Bench /> }.into_any(),
    }
}

/// The lab's QC verdicts for its current state, judged once per change and shared by
/// every view (a new instance after each change, so comparing is by identity).
#[derive(Clone)]
pub(super) struct Judged(pub std::sync::Arc<crate::verdicts::LabVerdicts>);

impl PartialEq for Judged {
    fn eq(&self, other: &Judged) -> bool {
        std::sync::Arc::ptr_eq(&self.0, &other.0)
    }
}

/// The shared verdicts (provided by the bench for the lab on screen).
pub(super) fn judged() -> Memo<Judged> {
    expect_context::<Memo<Judged>>()
}

#[component]
fn Bench() -> impl IntoView {
    let (lab, set_lab) = signal::<Option<SharedLab>>(None);
    // Each change judges again only the tests it touched (the others keep their
    // verdicts from the previous state). Timed for the benchmarks (see `timed`).
    provide_context(Memo::new(move |before: Option<&Judged>| {
        let name = match before {
            Some(b) if !b.0.is_empty() => "cuvette:verdicts-after-change",
            _ => "cuvette:verdicts-all",
        };
        Judged(std::sync::Arc::new(timed(name, || {
            lab.with(|l| {
                l.as_ref()
                    .map(|l| crate::verdicts::LabVerdicts::after(before.map(|b| b.0.as_ref()), l))
                    .unwrap_or_default()
            })
        })))
    }));
    let (problem, set_problem) = signal::<Option<String>>(None);
    let (save_state, set_save_state) = signal(SaveState::Opening);
    let (notes, set_notes) = signal::<Vec<String>>(Vec::new());
    let (book, set_book) = signal(store::open_book());
    let (revision, set_revision) = signal(0u64);
    let (committed, set_committed) = signal(0u64);
    let (sheet, set_sheet) = signal(None::<exchange::Sheet>);
    let history_of = RwSignal::new(None::<String>);
    let shelf: ShelfCell = StoredValue::new_local(std::rc::Rc::new(std::cell::RefCell::new(
        store::shelf::empty(book.get_untracked(), None),
    )));
    let start = store::view()
        .and_then(|s| View::from_slug(&s))
        .unwrap_or(View::Today);
    let (active, set_active) = signal(start);
    let (technician, set_technician) = signal(store::technician());
    // Countdowns and "today" follow the clock without a reload.
    let (clock, set_clock) = signal(Utc::now());
    // The previous sitting's clock, read before this one overwrites it.
    let last_seen = store::clock_last_seen();
    store::set_clock_last_seen(clock.get_untracked());
    set_interval(
        move || {
            let now = Utc::now();
            set_clock.set(now);
            store::set_clock_last_seen(now);
        },
        std::time::Duration::from_secs(30),
    );
    // An archive opened read-only is shown instead of the lab until it is closed.
    let viewing = RwSignal::new(None::<(String, Lab)>);
    let show = move || {
        if let Some((_, archive)) = viewing.get_untracked() {
            set_lab.set(Some(SharedLab::new(archive)));
        } else {
            let cell = shelf.get_value();
            let s = cell.borrow();
            set_lab.set(s.lab().map(SharedLab::new));
        }
        set_revision.update(|r| *r += 1);
    };
    let tabs = StoredValue::new_local(None::<store::Tabs>);
    let flush = move || {
        let cell = shelf.get_value();
        leptos::task::spawn_local(async move {
            let taken_in = cell.borrow().taken_in();
            let Some(outcome) = store::shelf::flush(&cell).await else {
                return;
            };
            let now = Utc::now();
            let book = cell.borrow().book;
            set_save_state.set(match outcome {
                Saved::Both => SaveState::Saved(now),
                Saved::DurableOnly => SaveState::DurableOnly(now),
                Saved::LocalOnly => SaveState::LocalOnly(now),
                Saved::No(why) => SaveState::NotSaved(why),
            });
            tabs.with_value(|t| {
                if let Some(t) = t {
                    t.announce(book)
                }
            });
            set_committed.update(|c| *c += 1);
            // The lab on screen already holds the change; it is drawn again only when
            // another tab's entries were taken in on the way.
            if cell.borrow().taken_in() != taken_in {
                show();
            }
        });
    };
    // Open the stores, bring in a lab kept in the one-key format, show the book.
    leptos::task::spawn_local(async move {
        let mut found = Vec::new();
        let db = match store::idb::Db::open().await {
            Ok(db) => Some(db),
            Err(e) => {
                found.push(format!(
                    "{e}. Records are kept in localStorage only, which the browser writes to \
                     disk late: a power cut can lose the last minutes of work. Use another \
                     browser window (not private mode), and export your records often."
                ));
                None
            }
        };
        timing_starts("cuvette:open-journal");
        let (mut opened, notes) = store::shelf::open(book.get_untracked(), db.clone()).await;
        timing_ends("cuvette:open-journal");
        found.extend(notes);
        if let Some(old) = store::one_key_lab() {
            if opened.entries.is_empty() && !store::shelf::has_mirror(store::Book::Lab) {
                match Lab::from_json(&old) {
                    Ok(old_lab) => {
                        let target = if old_lab.demo {
                            store::Book::Demo
                        } else {
                            store::Book::Lab
                        };
                        if target != opened.book {
                            opened = store::shelf::open(target, db.clone()).await.0;
                            set_book.set(target);
                            let _ = store::set_open_book(target);
                        }
                        opened.found(&old_lab, Utc::now(), &store::technician());
                        let n = opened.unsaved.len();
                        let cell = std::rc::Rc::new(std::cell::RefCell::new(opened));
                        let outcome = store::shelf::flush(&cell).await;
                        if matches!(
                            outcome,
                            Some(Saved::Both | Saved::DurableOnly | Saved::LocalOnly)
                        ) {
                            store::forget_one_key_lab();
                            found.push(format!(
                                "The lab kept in the older one-key format was brought into the \
                                 journal ({n} records); nothing was lost."
                            ));
                        } else {
                            found.push(
                                "The lab kept in the older one-key format could not be brought \
                                 into the journal; it was left as it was."
                                    .into(),
                            );
                        }
                        opened = std::rc::Rc::try_unwrap(cell)
                            .map(|c| c.into_inner())
                            .unwrap_or_else(|c| store::shelf::empty(c.borrow().book, db.clone()));
                    }
                    Err(e) => found.push(format!(
                        "the lab saved by an older Cuvette could not be read ({e}). It was left \
                         untouched"
                    )),
                }
            }
        }
        for a in &opened.replay.set_aside {
            found.push(format!("Set aside, not used: {}", a.why));
        }
        found.extend(opened.replay.gaps.iter().cloned());
        let recovered = !opened.unsaved.is_empty();
        shelf.set_value(std::rc::Rc::new(std::cell::RefCell::new(opened)));
        set_notes.set(found);
        set_save_state.set(SaveState::Saved(Utc::now()));
        show();
        check_mirror_later(shelf, set_notes);
        if recovered {
            set_save_state.set(SaveState::Saving);
            flush();
        }
        tabs.set_value(store::Tabs::open(move |news| {
            let cell = shelf.get_value();
            if cell.borrow().book != news {
                return;
            }
            leptos::task::spawn_local(async move {
                if store::shelf::refresh(&cell).await {
                    show();
                }
            });
        }));
        // Once the lab is drawn, this start has succeeded (a hang never gets here; a
        // panic is recorded by the panic hook).
        request_animation_frame(store::start_finished);
    });

    let choose = move |v: View| {
        set_active.set(v);
        if let Err(e) = store::set_view(v.slug()) {
            set_problem.set(Some(e.0));
        }
    };
    let commit = move |change: Change| {
        if let Some((name, _)) = viewing.get_untracked() {
            set_problem.set(Some(format!(
                "{name} is open read-only: nothing in it can be changed. Close it to work on \
                 the lab."
            )));
            show();
            return;
        }
        let by = technician.get_untracked();
        let result = {
            let cell = shelf.get_value();
            let mut s = cell.borrow_mut();
            s.record(&change.lab, Utc::now(), &by, change.reason.as_deref())
        };
        match result {
            Ok(0) => {}
            Ok(_) => {
                set_problem.set(None);
                set_save_state.set(SaveState::Saving);
                show();
                flush();
            }
            Err(e) => set_problem.set(Some(e.0)),
        }
    };
    let save = Callback::new(move |changed: Lab| {
        commit(Change {
            lab: changed,
            reason: None,
        })
    });
    let amend = Callback::new(commit);
    let append = Callback::new(move |entries: Vec<crate::journal::Entry>| {
        if entries.is_empty() || viewing.get_untracked().is_some() {
            return;
        }
        shelf.get_value().borrow_mut().append(entries);
        set_problem.set(None);
        set_save_state.set(SaveState::Saving);
        show();
        flush();
    });
    let switch_to = move |target: store::Book, fresh_demo: bool| {
        let db = shelf.get_value().borrow().db.clone();
        leptos::task::spawn_local(async move {
            if fresh_demo {
                if let Err(e) = store::shelf::clear(store::Book::Demo, db.as_ref()).await {
                    return set_problem.set(Some(e.0));
                }
            }
            let (mut opened, notes) = store::shelf::open(target, db).await;
            if fresh_demo {
                // The invented history, kept current: its newest record minutes ago.
                let demo = crate::demo::demo_lab_before(Utc::now(), DEMO_LEAD);
                opened.found(&demo, Utc::now(), "DEMO");
            }
            let unsaved = !opened.unsaved.is_empty();
            shelf.set_value(std::rc::Rc::new(std::cell::RefCell::new(opened)));
            set_notes.set(notes);
            check_mirror_later(shelf, set_notes);
            set_book.set(target);
            if let Err(e) = store::set_open_book(target) {
                set_problem.set(Some(e.0));
            }
            set_problem.set(None);
            if unsaved {
                set_save_state.set(SaveState::Saving);
            }
            show();
            flush();
        });
    };
    let load_demo = Callback::new(move |()| switch_to(store::Book::Demo, true));
    let leave_demo = move |_| switch_to(store::Book::Lab, false);
    let remove_demo = move |_| {
        let db = shelf.get_value().borrow().db.clone();
        leptos::task::spawn_local(async move {
            if let Err(e) = store::shelf::clear(store::Book::Demo, db.as_ref()).await {
                set_problem.set(Some(e.0));
            }
            switch_to(store::Book::Lab, false);
        });
    };
    let on_initials = move |ev: leptos::ev::Event| {
        let v = event_target_value(&ev).trim().to_uppercase();
        match store::set_technician(&v) {
            Ok(()) => set_technician.set(v),
            Err(e) => set_problem.set(Some(e.0)),
        }
    };
    let view_archive = Callback::new(move |file: Option<(String, Lab)>| {
        viewing.set(file);
        set_problem.set(None);
        show();
    });
    let refresh = Callback::new(move |()| show());
    provide_context(Trail {
        amend,
        append,
        view_archive,
        refresh,
        history_of,
        revision,
        committed,
        shelf,
    });
    // Each view draws the lab, and follows the clock, only while it is shown.
    let clock_today = gated_clock(clock, active, View::Today);
    let clock_charts = gated_clock(clock, active, View::Charts);
    let clock_materials = gated_clock(clock, active, View::Materials);
    let clock_records = gated_clock(clock, active, View::Records);
    let lab_today = gated(lab, revision, active, View::Today);
    let lab_calibration = gated(lab, revision, active, View::Calibration);
    let lab_runs = gated(lab, revision, active, View::Runs);
    let lab_charts = gated(lab, revision, active, View::Charts);
    let lab_materials = gated(lab, revision, active, View::Materials);
    let lab_instrument = gated(lab, revision, active, View::Instrument);
    let lab_records = gated(lab, revision, active, View::Records);
    let lab_setup = gated(lab, revision, active, View::Setup);
    let in_demo = move || book.get() == store::Book::Demo;
    let lab_name = move || {
        lab.with(|l| {
            l.as_ref()
                .map_or("No lab set up yet".to_string(), |l| l.lab_name.clone())
        })
    };
    let retry = move |_| flush();
    // A full backup at once (the store is full or refused the save).
    let export_now = move |_| {
        if let Some(l) = lab.get_untracked() {
            let entries = shelf.get_value().borrow().entries_all();
            let file =
                crate::exchange::backup(&l, &entries, Utc::now(), &technician.get_untracked());
            let name =
                crate::export::file_name(&l.lab_name, "backup", Local::now().date_naive(), "json");
            if let Err(e) =
                store::download(&name, "application/json", &crate::exchange::to_text(&file))
            {
                set_problem.set(Some(e.0));
            }
        }
    };
    let state_line = move || match save_state.get() {
        SaveState::Opening => ("opening", "Opening the lab…".to_string()),
        SaveState::Saving => ("saving", "Saving…".to_string()),
        SaveState::Saved(t) => (
            "saved",
            format!("All saved {}", t.with_timezone(&Local).format("%H:%M:%S")),
        ),
        SaveState::DurableOnly(t) => (
            "saved-durable-only",
            format!(
                "Saved {} (second copy behind: storage full)",
                t.with_timezone(&Local).format("%H:%M:%S")
            ),
        ),
        SaveState::LocalOnly(t) => (
            "saved-local-only",
            format!(
                "Saved {} in localStorage only (not safe from a power cut)",
                t.with_timezone(&Local).format("%H:%M:%S")
            ),
        ),
        SaveState::NotSaved(_) => ("not-saved", "NOT SAVED".to_string()),
    };
    let trouble = move || {
        match save_state.get() {
        SaveState::NotSaved(why) => {
            let n = shelf.get_value().borrow().unsaved.len();
            Some(view! {
                <div class="problem" role="alert" data-testid="not-saved">
                    <p>{format!(
                        "{n} change(s) are shown but NOT SAVED: {why}. They are held on this screen \
                         only and are lost if this page is closed. Export your records to a file \
                         now, free space in the browser (or close private mode), then try again."
                    )}</p>
                    <button data-testid="export-now" on:click=export_now>"Export all records now"</button>
                    " "
                    <button data-testid="retry-save" on:click=retry>"Try saving again"</button>
                </div>
            }.into_any())
        }
        SaveState::DurableOnly(_) => Some(view! {
            <div class="problem" role="alert" data-testid="storage-full">
                <p>"Saved in the journal (IndexedDB), but the second copy in localStorage could \
                    not be written: the browser's storage for pages opened from files is full \
                    (other pages share it). Export all records now and free space."</p>
                <button data-testid="export-now" on:click=export_now>"Export all records now"</button>
            </div>
        }.into_any()),
        _ => None,
    }
    };

    view! {
        <div id="day-sheet-host"><exchange::DaySheet lab=lab sheet=sheet set_sheet=set_sheet /></div>
        <header class="top">
            <div class="brand">
                <span class="mark" aria-hidden="true"></span>
                <span class="name">"Cuvette"</span>
                <span class="lab" data-testid="lab-name">{lab_name}</span>
            </div>
            <span class="save-state" data-testid="save-state" data-state=move || state_line().0>
                {move || state_line().1}
            </span>
            <label class="initials">
                "Technician "
                <input
                    data-testid="initials"
                    maxlength="5"
                    size="5"
                    placeholder="initials"
                    prop:value=move || technician.get()
                    on:change=on_initials
                />
            </label>
        </header>
        {move || viewing.get().map(|(name, _)| view! {
            <p class="demo-banner archive-banner" data-testid="archive-banner">
                {format!("READ-ONLY: {name}, as it was written. Nothing here can be changed. ")}
                <button data-testid="close-archive" on:click=move |_| view_archive.run(None)>"Close it and return to the lab"</button>
            </p>
        })}
        <Show when=in_demo>
            <p class="demo-banner" data-testid="demo-banner">
                "DEMO LAB: invented data for practice. Nothing here is a patient result. "
                <button data-testid="leave-demo" on:click=leave_demo>"Back to my lab"</button>
                " "
                <button data-testid="remove-demo" on:click=remove_demo>"Remove the demo"</button>
            </p>
        </Show>
        <p class="caution">
            "Cuvette supports your lab's own QC policy, the maker's instructions for use and \
             local regulations; it does not replace them or the judgement of qualified staff. \
             Never release results of a rejected run."
        </p>
        {trouble}
        {move || problem.get().map(|p| view! { <p class="problem" role="alert" data-testid="problem">{p}</p> })}
        <records::StartReport notes=notes />
        <records::HistoryPanel />
        <nav class="views" aria-label="Views">
            {View::ALL
                .into_iter()
                .map(|v| {
                    view! {
                        <button
                            data-testid=format!("nav-{}", v.slug())
                            class:current=move || active.get() == v
                            on:click=move |_| choose(v)
                        >
                            {v.label()}
                        </button>
                    }
                })
                .collect_view()}
        </nav>
        <main>
            <ViewPanel view=View::Today active=active>
                <records::StorageWarning lab=lab_today clock=clock_today />
                <today::TodayBoard lab=lab_today clock=clock_today go=Callback::new(choose) last_seen=last_seen />
            </ViewPanel>
            <ViewPanel view=View::Calibration active=active>
                <calibration::CalibrationView lab=lab_calibration save=save technician=technician />
            </ViewPanel>
            <ViewPanel view=View::Runs active=active>
                <runs::RunsView lab=lab_runs save=save technician=technician />
            </ViewPanel>
            <ViewPanel view=View::Charts active=active>
                <control_charts::ControlCharts lab=lab_charts />
                <exchange::MonthlyReview lab=lab_charts clock=clock_charts sheet=set_sheet />
                <planning::PlanningPanel lab=lab_charts />
            </ViewPanel>
            <ViewPanel view=View::Materials active=active>
                <materials::MaterialsView lab=lab_materials save=save technician=technician clock=clock_materials />
            </ViewPanel>
            <ViewPanel view=View::Instrument active=active>
                <instrument::InstrumentView lab=lab_instrument save=save technician=technician />
            </ViewPanel>
            <ViewPanel view=View::Records active=active>
                <exchange::ExchangePanel lab=lab_records clock=clock_records sheet=set_sheet />
                <exchange::ArchivePanel lab=lab_records clock=clock_records />
                <records::StorageMeter lab=lab_records clock=clock_records />
                <records::DayTrail clock=clock_records lab=lab_records />
            </ViewPanel>
            <ViewPanel view=View::Setup active=active>
                <setup::SetupView lab=lab_setup save=save technician=technician load_demo=load_demo />
                <exchange::VerificationPanel sheet=set_sheet />
            </ViewPanel>
        </main>
    }
}

/// After the lab is shown: check the localStorage copy chunk by chunk, and add what
/// was found to the start-up report.
fn check_mirror_later(shelf: ShelfCell, set_notes: WriteSignal<Vec<String>>) {
    let cell = shelf.get_value();
    leptos::task::spawn_local(async move {
        let found = store::shelf::check_mirror(&cell).await;
        if !found.is_empty() {
            set_notes.update(|n| n.extend(found));
        }
    });
}

/// The lab as one view sees it: the bench's lab while the view is shown, and the lab as
/// it was when last shown while it is hidden, so a hidden view does no work on a change
/// (each change is drawn by the view on screen; another view catches up when opened).
fn gated(
    lab: ReadSignal<Option<SharedLab>>,
    revision: ReadSignal<u64>,
    active: ReadSignal<View>,
    view: View,
) -> ReadSignal<Option<SharedLab>> {
    let (seen, set_seen) = signal(lab.get_untracked());
    let shown = StoredValue::new(revision.get_untracked());
    Effect::new(move |_| {
        let now = revision.get();
        if active.get() == view && shown.get_value() != now {
            shown.set_value(now);
            set_seen.set(lab.get_untracked());
        }
    });
    seen
}

/// The clock as one view sees it: ticking while the view is shown, brought up to date
/// when it is opened, still while it is hidden.
fn gated_clock(
    clock: ReadSignal<chrono::DateTime<Utc>>,
    active: ReadSignal<View>,
    view: View,
) -> ReadSignal<chrono::DateTime<Utc>> {
    let (seen, set_seen) = signal(clock.get_untracked());
    Effect::new(move |_| {
        let now = clock.get();
        if active.get() == view {
            set_seen.set(now);
        }
    });
    seen
}

/// One view: always in the page (so tests and screen readers find it), shown when active.
#[component]
fn ViewPanel(
    /// Which view this panel is.
    view: View,
    /// The view currently shown.
    active: ReadSignal<View>,
    children: Children,
) -> impl IntoView {
    view! {
        <section
            class="view"
            data-testid=format!("view-{}", view.slug())
            hidden=move || active.get() != view
        >
            <h2>{view.label()}</h2>
            {children()}
        </section>
    }
}

/// What a view says when it has nothing to show yet.
#[component]
fn EmptyState(
    /// The sentence shown.
    text: &'static str,
) -> impl IntoView {
    view! { <p class="empty">{text}</p> }
}

const NO_LAB: &str = "No lab yet. Set up your tests, or load the demo lab from Set-up.";
