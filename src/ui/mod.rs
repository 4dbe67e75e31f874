//! The browser shell: leptos components for the bench's views.
//!
//! Components hold engine values in signals and call the engine for every number they
//! show; they do no arithmetic of their own. Storage goes through [`crate::store`],
//! drawing through [`chart`].

mod calibration;
pub(crate) mod chart;
mod exchange;
mod instrument;
mod materials;
mod planning;
mod records;
mod runs;
mod setup;

use chrono::{Local, Utc};
use leptos::prelude::*;

use crate::engine::charts::LeveyJennings;
use crate::engine::qcstats::{self, ControlResult, Summary, Target, TargetSource};
use crate::engine::stability::{self, StabilityState, WarningWindow};
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

/// One card per test, or the empty state: the shape of the Calibration and QC runs
/// views.
pub(super) fn per_test(
    lab: ReadSignal<Option<Lab>>,
    card: impl Fn(&Lab, &crate::lab::TestSetup) -> AnyView + Send + Sync + 'static,
) -> impl IntoView {
    move || {
        lab.with(|l| match l {
            None => view! { <EmptyState text=NO_LAB /> }.into_any(),
            Some(l) if l.tests.is_empty() => {
                view! { <EmptyState text="No tests set up yet: add them in Set-up." /> }.into_any()
            }
            Some(l) => l.tests.iter().map(|t| card(l, t)).collect_view().into_any(),
        })
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

/// The demo lab, embedded at build time from `demo-data/`.
pub const DEMO_LAB: &str = include_str!("../../demo-data/demo-lab.json");

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
    let (lab, set_lab) = signal::<Option<Lab>>(None);
    provide_context(Memo::new(move |_| {
        Judged(std::sync::Arc::new(lab.with(|l| {
            l.as_ref()
                .map(crate::verdicts::LabVerdicts::of)
                .unwrap_or_default()
        })))
    }));
    let (problem, set_problem) = signal::<Option<String>>(None);
    let (save_state, set_save_state) = signal(SaveState::Opening);
    let (notes, set_notes) = signal::<Vec<String>>(Vec::new());
    let (book, set_book) = signal(store::open_book());
    let (revision, set_revision) = signal(0u64);
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
            set_lab.set(Some(archive));
        } else {
            let cell = shelf.get_value();
            let s = cell.borrow();
            set_lab.set(s.lab());
        }
        set_revision.update(|r| *r += 1);
    };
    let tabs = StoredValue::new_local(None::<store::Tabs>);
    let flush = move || {
        let cell = shelf.get_value();
        leptos::task::spawn_local(async move {
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
            show();
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
        let (mut opened, notes) = store::shelf::open(book.get_untracked(), db.clone()).await;
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
                match Lab::from_json(DEMO_LAB) {
                    Ok(mut demo) => {
                        // Keep the invented history current: its newest record minutes ago.
                        demo.place_before(Utc::now(), DEMO_LEAD);
                        opened.found(&demo, Utc::now(), "DEMO");
                    }
                    Err(e) => {
                        return set_problem.set(Some(format!("the demo lab is damaged: {e}")))
                    }
                }
            }
            let unsaved = !opened.unsaved.is_empty();
            shelf.set_value(std::rc::Rc::new(std::cell::RefCell::new(opened)));
            set_notes.set(notes);
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
        shelf,
    });
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
                <records::StorageWarning lab=lab clock=clock />
                <TodayBoard lab=lab clock=clock go=Callback::new(choose) last_seen=last_seen />
            </ViewPanel>
            <ViewPanel view=View::Calibration active=active>
                <calibration::CalibrationView lab=lab save=save technician=technician />
            </ViewPanel>
            <ViewPanel view=View::Runs active=active>
                <runs::RunsView lab=lab save=save technician=technician />
            </ViewPanel>
            <ViewPanel view=View::Charts active=active>
                <ControlCharts lab=lab />
                <exchange::MonthlyReview lab=lab clock=clock sheet=set_sheet />
                <planning::PlanningPanel lab=lab />
            </ViewPanel>
            <ViewPanel view=View::Materials active=active>
                <materials::MaterialsView lab=lab save=save technician=technician clock=clock />
            </ViewPanel>
            <ViewPanel view=View::Instrument active=active>
                <instrument::InstrumentView lab=lab save=save technician=technician />
            </ViewPanel>
            <ViewPanel view=View::Records active=active>
                <exchange::ExchangePanel lab=lab clock=clock sheet=set_sheet />
                <exchange::ArchivePanel lab=lab clock=clock />
                <records::StorageMeter lab=lab clock=clock />
                <records::DayTrail clock=clock />
            </ViewPanel>
            <ViewPanel view=View::Setup active=active>
                <setup::SetupView lab=lab save=save technician=technician load_demo=load_demo />
                <exchange::VerificationPanel sheet=set_sheet />
            </ViewPanel>
        </main>
    }
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

#[component]
fn TodayBoard(
    /// The lab being worked on.
    lab: ReadSignal<Option<Lab>>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
    /// Opens the view where a line is dealt with.
    go: Callback<View>,
    /// When this browser last ran Cuvette, before this sitting.
    last_seen: Option<chrono::DateTime<Utc>>,
) -> impl IntoView {
    // A long gap the technologist has confirmed (the lab was closed).
    let (gap_confirmed, set_gap_confirmed) = signal(false);
    let judged = judged();
    move || {
        let now = clock.get();
        let verdicts = judged.get().0;
        lab.with(|l| match l {
            None => view! { <EmptyState text=NO_LAB /> }.into_any(),
            Some(l) => {
                let today = now.with_timezone(&Local).date_naive();
                let tests = l.tests.iter().map(|t| today_row(l, &verdicts, t, today)).collect_view();
                let local = |t: chrono::DateTime<Utc>| t.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string();
                let clock_line = crate::board::clock_doubt(now, l.newest_time(), last_seen)
                    .filter(|d| !(matches!(d, crate::board::ClockDoubt::Gap { .. }) && gap_confirmed.get()))
                    .map(|d| {
                    let gap = matches!(d, crate::board::ClockDoubt::Gap { .. });
                    let text = match d {
                        crate::board::ClockDoubt::BehindRecords { newest } => format!(
                            "Check the PC's clock: it reads {}, earlier than a stored record ({}). \
                             Countdowns and today's QC depend on it: correct the clock before relying on them.",
                            local(now), local(newest)
                        ),
                        crate::board::ClockDoubt::WentBack { last_seen } => format!(
                            "Check the PC's clock: it reads {}, earlier than when Cuvette last ran here ({}). \
                             Correct the clock before relying on a countdown.",
                            local(now), local(last_seen)
                        ),
                        crate::board::ClockDoubt::Gap { last_seen } => format!(
                            "Cuvette last ran here {}; the clock now reads {}. If the lab was closed, carry on; \
                             otherwise correct the PC's clock before relying on a countdown.",
                            local(last_seen), local(now)
                        ),
                    };
                    view! {
                        <p class="problem" role="alert" data-testid="clock-doubt">
                            {text}
                            {gap.then(|| view! { " " <button data-testid="clock-right" on:click=move |_| set_gap_confirmed.set(true)>"The date is right"</button> })}
                        </p>
                    }
                });
                let attention: Vec<(String, String)> = l
                    .materials
                    .iter()
                    .filter(|m| m.in_use())
                    .filter_map(|m| {
                        let r = stability::evaluate(&m.stability, now, &Local, WarningWindow::default()).ok()?;
                        let mut lines = vec![(&r.material, None)];
                        lines.extend(r.analytes.iter().map(|(a, u)| (u, Some(a.clone()))));
                        let worst = lines.into_iter().filter(|(u, _)| u.state != StabilityState::Ok).min_by_key(|(u, _)| u.until)?;
                        let (u, analyte) = worst;
                        let what = match analyte {
                            Some(a) => format!("{} ({a})", m.name),
                            None => m.name.clone(),
                        };
                        Some((
                            what,
                            format!(
                                "{} — {} {}",
                                materials::state_word(u.state),
                                u.governed_by.describe(),
                                u.until.with_timezone(&Local).format("%Y-%m-%d %H:%M")
                            ),
                        ))
                    })
                    .collect();
                let no_attention = attention.is_empty();
                let temperature = l
                    .instrument_log
                    .iter()
                    .filter(|e| e.event == crate::lab::InstrumentEvent::TemperatureCheck)
                    .filter(|e| e.at.with_timezone(&Local).date_naive() == today)
                    .max_by_key(|e| e.at)
                    .and_then(|e| e.value)
                    .map_or("No temperature check recorded today: check the reaction temperature first (Instrument log).".to_string(), |v| {
                        let out = crate::engine::readings::flag(v, l.temperature_limits, Default::default()).is_some();
                        if out {
                            format!("Reaction temperature today: {v} °C, outside the limits: do not run tests until corrected.")
                        } else {
                            format!("Reaction temperature today: {v} °C, within the limits.")
                        }
                    });
                let photometer: Vec<String> = crate::board::failed_photometer_checks(l)
                    .into_iter()
                    .map(|(s, e)| {
                        format!(
                            "Photometer check FAILED on {} ({} nm) at {}: read {}, expected {:.3} ± {:.3}. \
                             Do not run tests at this wavelength until it is corrected and the check passes (Instrument log).",
                            s.name,
                            s.wavelength_nm,
                            e.at.with_timezone(&Local).format("%Y-%m-%d %H:%M"),
                            e.value.map_or(String::new(), crate::engine::readings::absorbance_text),
                            s.expected,
                            s.tolerance
                        )
                    })
                    .collect();
                let photometer_view = photometer
                    .into_iter()
                    .map(|line| view! {
                        <p class="problem" data-testid="photometer-failed">
                            <button class="link" on:click=move |_| go.run(View::Instrument)>{line}</button>
                        </p>
                    })
                    .collect_view();
                let print = |_| {
                    if let Some(w) = web_sys::window() {
                        let _ = w.print();
                    }
                };
                let lots: Vec<String> = crate::board::crossovers(l, &verdicts, now, &Local)
                    .into_iter()
                    .map(|c| {
                        let ends = c.old_runs_out.map_or(
                            " (its end is not in the materials list: record the opened vial)".to_string(),
                            |t| {
                                format!(
                                    " runs out {} ({})",
                                    t.with_timezone(&Local).format("%Y-%m-%d %H:%M"),
                                    stability::describe_left((t - now).num_minutes() as f64 / 60.0)
                                )
                            },
                        );
                        format!(
                            "{} {}: new lot {} has {} accepted result(s) toward its own target, {} \
                             still needed; old lot {}{ends}.",
                            c.test, c.level, c.new_lot, c.new_results, c.still_needed, c.old_lot
                        )
                    })
                    .collect();
                let lots_view = (!lots.is_empty()).then(|| view! {
                    <section class="card wide">
                        <h3>"Control lots changing over"</h3>
                        <ul>{lots.into_iter().map(|line| view! { <li data-testid="crossover-line">{line}</li> }).collect_view()}</ul>
                    </section>
                });
                let due_lines = crate::due::today(l, &verdicts, now, &Local);
                let due_view = (!due_lines.is_empty()).then(|| view! {
                    <section class="card wide" data-testid="due-today">
                        <h3>"What is due today"</h3>
                        <ul class="due">
                            {due_lines.into_iter().map(|d| {
                                let (task, place) = match d.task {
                                    crate::due::Task::Qc => ("QC", View::Runs),
                                    crate::due::Task::Calibration => ("calibration", View::Calibration),
                                };
                                let text = format!("{} {task}: {} — {}", d.test, d.state.code(), d.why);
                                view! {
                                    <li class=format!("due-{}", d.state.code())>
                                        <button class="link" data-testid="due-line" data-state=d.state.code()
                                            on:click=move |_| go.run(place)>{text}</button>
                                    </li>
                                }
                            }).collect_view()}
                        </ul>
                    </section>
                });
                let waiting = crate::corrective::awaiting_action(l, &verdicts);
                let actions_view = (!waiting.is_empty()).then(|| {
                    const SHOWN: usize = 10;
                    let earlier = waiting.len().saturating_sub(SHOWN);
                    view! {
                        <section class="card wide decision-reject" data-testid="awaiting-actions">
                            <h3>"Rejected QC runs without a corrective action"</h3>
                            <ul>
                                {waiting.into_iter().take(SHOWN).map(|w| {
                                    let line = format!(
                                        "{} — run of {} rejected ({}): record what was found and done, then re-run",
                                        w.test_code,
                                        w.run_at.with_timezone(&Local).format("%Y-%m-%d %H:%M"),
                                        w.rules.join(", ")
                                    );
                                    view! { <li><button class="link" data-testid="awaiting-action" on:click=move |_| go.run(View::Runs)>{line}</button></li> }
                                }).collect_view()}
                            </ul>
                            {(earlier > 0).then(|| view! { <p class="muted">{format!("and {earlier} earlier")}</p> })}
                        </section>
                    }
                });
                view! {
                    <p class="no-print">
                        <button data-testid="print-today" on:click=print>"Print today's sheet"</button>
                    </p>
                    {clock_line}
                    {lots_view}
                    <section class="card wide">
                        <h3>{format!("Tests — {}", today.format("%Y-%m-%d"))}</h3>
                        <p data-testid="today-temperature">{temperature}</p>
                        {photometer_view}
                        <table data-testid="today-tests">
                            <thead><tr><th>"Test"</th><th>"Calibration in use"</th><th>"Latest QC run"</th><th>"Before patient samples"</th></tr></thead>
                            <tbody>{tests}</tbody>
                        </table>
                    </section>
                    {due_view}
                    {actions_view}
                    <section class="card wide">
                        <h3>"Materials that need attention"</h3>
                        <Show when=move || no_attention>
                            <p class="empty">"Every material in use is within its stability."</p>
                        </Show>
                        <ul data-testid="today-materials">
                            {attention.into_iter().map(|(what, why)| view! { <li><strong>{what}</strong>": "{why}</li> }).collect_view()}
                        </ul>
                    </section>
                }
                .into_any()
            }
        })
    }
}

/// The decision of a test's latest QC run if it was today, with its time; `None` when
/// no run was recorded today.
pub(super) fn qc_today(
    l: &Lab,
    verdicts: &crate::verdicts::LabVerdicts,
    t: &crate::lab::TestSetup,
    today: chrono::NaiveDate,
) -> Option<(chrono::DateTime<Local>, crate::engine::qc::Decision)> {
    let newest = l.runs_of(&t.meta.id);
    let (run, verdict) = newest.last().zip(verdicts.test(&t.meta.id)?.newest())?;
    let when = run.run_at.with_timezone(&Local);
    (when.date_naive() == today).then_some((when, verdict.decision))
}

/// One test on today's board.
fn today_row(
    l: &Lab,
    verdicts: &crate::verdicts::LabVerdicts,
    t: &crate::lab::TestSetup,
    today: chrono::NaiveDate,
) -> impl IntoView {
    let cal = l
        .current_calibration(&t.meta.id)
        .map_or("not calibrated".to_string(), |c| {
            c.performed_at
                .with_timezone(&Local)
                .format("%Y-%m-%d")
                .to_string()
        });
    let (latest, advice, class) = match qc_today(l, verdicts, t, today) {
        None => {
            let last = l
                .runs_of(&t.meta.id)
                .last()
                .map_or("none".to_string(), |r| {
                    r.run_at
                        .with_timezone(&Local)
                        .format("%Y-%m-%d %H:%M")
                        .to_string()
                });
            (
                last,
                "no QC run today: run the controls first".to_string(),
                "decision-none",
            )
        }
        Some((when, decision)) => (
            format!("{} {}", when.format("%Y-%m-%d %H:%M"), decision.code()),
            runs::decision_words(decision).to_string(),
            match decision {
                crate::engine::qc::Decision::Accept => "decision-accept",
                crate::engine::qc::Decision::Warning => "decision-warning",
                crate::engine::qc::Decision::Reject => "decision-reject",
            },
        ),
    };
    view! {
        <tr class=class data-testid="today-test">
            <td>{format!("{} {}", t.code, t.name)}</td>
            <td>{cal}</td>
            <td>{latest}</td>
            <td>{advice}</td>
        </tr>
    }
}

#[component]
fn ControlCharts(
    /// The lab being worked on.
    lab: ReadSignal<Option<Lab>>,
) -> impl IntoView {
    // The month charted: this month until another is chosen. Decisions come from the
    // whole history; the statistics below each chart are this month's and overall.
    let period = RwSignal::new(crate::period::Period::month_of(Utc::now(), &Local));
    let judged = judged();
    let charts = move || {
        let month = period.get();
        let verdicts = judged.get().0;
        lab.with(|l| {
            let Some(l) = l else {
                return view! { <EmptyState text=NO_LAB /> }.into_any();
            };
            let mut panels = Vec::new();
            for t in &l.tests {
                let h = l.control_history(&t.meta.id);
                let decisions: Vec<crate::engine::qc::Decision> = verdicts
                    .verdicts(&t.meta.id)
                    .map(|v| v.iter().map(|r| r.decision).collect())
                    .unwrap_or_default();
                let in_month: Vec<usize> = (0..h.runs.len())
                    .filter(|&i| month.contains(h.runs[i].run_at, &Local))
                    .collect();
                let labels: Vec<String> = in_month
                    .iter()
                    .map(|&i| h.runs[i].run_at.with_timezone(&Local).format("%d %b").to_string())
                    .collect();
                let month_decisions: Vec<crate::engine::qc::Decision> =
                    in_month.iter().filter_map(|&i| decisions.get(i).copied()).collect();
                for k in 0..h.levels.len() {
                    let values: Vec<Option<f64>> = h.values.iter().map(|run| run[k]).collect();
                    let month_values: Vec<Option<f64>> = in_month.iter().map(|&i| values[i]).collect();
                    if month_values.iter().all(Option::is_none) {
                        continue;
                    }
                    let Some(series) = LeveyJennings::new(
                        &format!("{} {} ({}) — {}", t.code, h.levels[k].name, t.unit, month.label()),
                        h.targets[k].mean,
                        h.targets[k].sd,
                        &month_values,
                        &month_decisions,
                    ) else {
                        continue;
                    };
                    let level_names: Vec<String> = h.levels.iter().map(|l| l.name.clone()).collect();
                    let run_label = |r: usize| {
                        h.runs.get(r).map_or(format!("{}", r + 1), |run| {
                            run.run_at.with_timezone(&Local).format("%d %b %H:%M").to_string()
                        })
                    };
                    let all_verdicts = verdicts.verdicts(&t.meta.id).ok();
                    let notes: Vec<String> = in_month
                        .iter()
                        .map(|&i| match values[i] {
                            None => String::new(),
                            Some(v) => crate::engine::charts::point_note(
                                &h.runs[i].run_at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string(),
                                v,
                                h.targets[k],
                                &t.unit,
                                all_verdicts.and_then(|all| all.get(i)),
                                &level_names,
                                &run_label,
                            ),
                        })
                        .collect();
                    let series = series.with_run_labels(labels.clone()).with_notes(&notes);
                    let results: Vec<ControlResult> = h
                        .runs
                        .iter()
                        .zip(&values)
                        .zip(&decisions)
                        .filter_map(|((run, v), d)| {
                            v.map(|value| ControlResult {
                                at: run.run_at,
                                value,
                                run_rejected: *d == crate::engine::qc::Decision::Reject,
                                excluded: false,
                            })
                        })
                        .collect();
                    panels.push((series, level_stats(&results, h.targets[k], &t.unit)));
                }
            }
            if panels.is_empty() {
                return view! { <EmptyState text="No control results to chart in this period: choose another above." /> }.into_any();
            }
            panels
                .into_iter()
                .map(|(series, stats)| {
                    view! {
                        <div class="chart-panel">
                            <chart::LeveyJenningsChart series=series />
                            {stats}
                        </div>
                    }
                })
                .collect_view()
                .into_any()
        })
    };
    view! {
        <PeriodPicker period=period testid="charts-period" />
        {charts}
    }
}

/// A level's statistics for the review: this month and all results that count (not
/// from rejected runs), and whether the lab's own target is available yet.
fn level_stats(
    results: &[ControlResult],
    insert: crate::engine::qc::LevelTarget,
    unit: &str,
) -> impl IntoView {
    let line = |label: &str, s: Option<Summary>| {
        let text = match s {
            None => "no results".to_string(),
            Some(s) => format!(
                "n {}, mean {:.3}, SD {}, CV {}",
                s.n,
                s.mean,
                s.sd.map_or("–".into(), |v| format!("{v:.3}")),
                s.cv_pct.map_or("–".into(), |v| format!("{v:.1} %"))
            ),
        };
        view! { <tr><td>{label.to_string()}</td><td>{text}</td></tr> }
    };
    let month = Local::now().format("%Y-%m").to_string();
    let this_month = qcstats::by_month(results, &Local)
        .into_iter()
        .find(|(m, _)| *m == month)
        .map(|(_, s)| s);
    let target = match qcstats::choose_target(Some(insert), results) {
        Some(Target { source: TargetSource::Lab { n }, mean, sd }) => format!(
            "the lab's own target is available from {n} accepted results: mean {mean:.3}, SD {sd:.3} {unit} \
             (in use: the insert's {} ± {})",
            insert.mean, insert.sd
        ),
        Some(Target { source: TargetSource::Insert { n }, .. }) => format!(
            "provisional target from the insert ({} ± {} {unit}); {n} of {} accepted results for the lab's own",
            insert.mean,
            insert.sd,
            qcstats::MIN_RESULTS_FOR_LAB_TARGET
        ),
        None => String::new(),
    };
    view! {
        <table class="stats" data-testid="level-stats">
            <tbody>
                {line(&format!("This month ({month})"), this_month)}
                {line("All accepted", qcstats::cumulative(results))}
                <tr><td>"Target"</td><td>{target}</td></tr>
            </tbody>
        </table>
    }
}
