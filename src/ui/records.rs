//! The records' own views: what the start-up found, a record's history, the day's
//! trail, the storage meter, voiding a record with a reason, and the recovery screen
//! shown when the last start failed. The journal is read through the open shelf; every
//! figure comes from `crate::journal` and `crate::store`.

use chrono::{Local, NaiveDate, Utc};
use leptos::prelude::*;

use super::{Change, Trail};
use crate::journal::{self, Action, Entry};
use crate::store;

/// What the start-up repaired or could not use, until dismissed.
#[component]
pub fn StartReport(
    /// The notes, in words.
    notes: ReadSignal<Vec<String>>,
) -> impl IntoView {
    let (hidden, set_hidden) = signal(false);
    move || {
        let list = notes.get();
        (!list.is_empty() && !hidden.get()).then(|| {
            view! {
                <section class="report" data-testid="start-report" role="status">
                    <strong>"Found when the lab was opened:"</strong>
                    <ul>{list.into_iter().map(|n| view! { <li>{n}</li> }).collect_view()}</ul>
                    <button on:click=move |_| set_hidden.set(true)>"Dismiss"</button>
                </section>
            }
        })
    }
}

fn entry_line(e: &Entry) -> String {
    format!(
        "{} {} {} {} (version {}){}",
        e.at.with_timezone(&Local).format("%Y-%m-%d %H:%M:%S"),
        e.by,
        e.action.words(),
        e.kind.words(),
        e.version,
        e.reason
            .as_ref()
            .map_or(String::new(), |r| format!(" — reason: {r}"))
    )
}

/// The history of the record chosen with a "history" button: every version, oldest
/// first, with who, when and why; printable.
#[component]
pub fn HistoryPanel() -> impl IntoView {
    let trail = expect_context::<Trail>();
    move || {
        trail.revision.track();
        let id = trail.history_of.get()?;
        let cell = trail.shelf.get_value();
        let s = cell.borrow();
        let all: Vec<&Entry> = s.entries.iter().chain(&s.unsaved).collect();
        let versions: Vec<(String, String, String)> = all
            .iter()
            .filter(|e| e.id == id)
            .map(|e| {
                (
                    entry_line(e),
                    crate::export::entry_summary(e),
                    journal::revision(e.version, &e.hash),
                )
            })
            .collect();
        let close = move |_| trail.history_of.set(None);
        let print = |_| {
            if let Some(w) = web_sys::window() {
                let _ = w.print();
            }
        };
        Some(view! {
            <section class="card wide history" data-testid="record-history">
                <h3>{format!("History of record {id}")}</h3>
                <ol>
                    {versions
                        .into_iter()
                        .map(|(line, summary, rev)| view! {
                            <li data-testid="history-version">
                                {line}<br/><span class="muted">{summary}" · revision "{rev}</span>
                            </li>
                        })
                        .collect_view()}
                </ol>
                <p class="no-print">
                    <button on:click=print>"Print"</button>" "
                    <button data-testid="close-history" on:click=close>"Close"</button>
                </p>
            </section>
        })
    }
}

/// A small button that shows a record's history.
#[component]
pub fn HistoryButton(
    /// The record's id.
    id: String,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    let show = move |_| trail.history_of.set(Some(id.clone()));
    view! { <button class="small" data-testid="show-history" on:click=show>"history"</button> }
}

/// Void a record: asks for the reason, then commits the lab without it (the journal
/// keeps every earlier version).
#[component]
pub fn VoidButton(
    /// The record's id.
    id: String,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    let (open, set_open) = signal(false);
    let (reason, set_reason) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let confirm = move |_| {
        let why = reason.get_untracked();
        if why.trim().is_empty() {
            return set_message.set(Some("say why this record is voided".into()));
        }
        let Some(mut changed) = trail.current_lab() else {
            return;
        };
        changed.remove_record(&id);
        trail.amend.run(Change {
            lab: changed,
            reason: Some(why),
        });
        set_open.set(false);
    };
    view! {
        <Show
            when=move || open.get()
            fallback=move || view! {
                <button class="small" data-testid="void" on:click=move |_| set_open.set(true)>"void"</button>
            }
        >
            <span class="void-form">
                <input data-testid="void-reason" placeholder="reason for voiding" size="24"
                    on:input=move |ev| set_reason.set(event_target_value(&ev)) />
                <button class="small" data-testid="confirm-void" on:click=confirm.clone()>"void it"</button>
                <button class="small" on:click=move |_| set_open.set(false)>"keep"</button>
                {move || message.get().map(|m| view! { <span class="message">{m}</span> })}
            </span>
        </Show>
    }
}

/// Everything done on one day, by whom; printable.
#[component]
pub fn DayTrail(
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
    /// The Records view's lab: set afresh on each change while the view is shown, so
    /// the trail is drawn again then, and not while the view is hidden.
    lab: ReadSignal<Option<super::SharedLab>>,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    let (day, set_day) = signal(None::<NaiveDate>);
    let chosen = move || {
        day.get()
            .unwrap_or_else(|| clock.get().with_timezone(&Local).date_naive())
    };
    let rows = move || {
        lab.track();
        let date = chosen();
        let cell = trail.shelf.get_value();
        let s = cell.borrow();
        // Committed entries, then those still being saved (drawn when they are made).
        let day: Vec<&Entry> = journal::day(&s.entries, date, &Local)
            .into_iter()
            .chain(journal::day(&s.unsaved, date, &Local))
            .collect();
        let lines: Vec<(String, String, String)> = day
            .iter()
            .map(|e| (entry_line(e), crate::export::entry_summary(e), e.id.clone()))
            .collect();
        let who: std::collections::BTreeSet<String> = day.iter().map(|e| e.by.clone()).collect();
        (lines, who.into_iter().collect::<Vec<_>>().join(", "))
    };
    let print = |_| {
        if let Some(w) = web_sys::window() {
            let _ = w.print();
        }
    };
    view! {
        <section class="card wide" data-testid="day-trail">
            <h3>"The day's trail"</h3>
            <p class="no-print">
                <label>"Day "
                    <input type="date" data-testid="trail-day"
                        prop:value=move || chosen().format("%Y-%m-%d").to_string()
                        on:change=move |ev| set_day.set(event_target_value(&ev).parse().ok()) />
                </label>
                " "<button on:click=print>"Print the trail"</button>
            </p>
            {move || {
                let (lines, who) = rows();
                if lines.is_empty() {
                    return view! { <p class="empty">"Nothing was recorded on this day."</p> }.into_any();
                }
                view! {
                    <p>{format!("{} — {} entries; who worked: {who}", chosen().format("%Y-%m-%d"), lines.len())}</p>
                    <ol data-testid="trail-entries">
                        {lines.into_iter().map(|(line, summary, id)| view! {
                            <li data-testid="trail-entry">{line}" "<span class="muted">{summary}</span>" "<HistoryButton id=id /></li>
                        }).collect_view()}
                    </ol>
                }.into_any()
            }}
        </section>
    }
}

/// Storage in use, the quota, and months left at the rate the lab has been adding.
fn storage_figures(
    now: chrono::DateTime<Utc>,
    first: Option<chrono::DateTime<Utc>>,
) -> (usize, usize, f64, Option<f64>) {
    let (all, ours) = store::local_usage();
    let quota = store::LOCAL_QUOTA_CHARS;
    let left = quota.saturating_sub(all) as f64 / quota as f64;
    let months = first.map(|f| ((now - f).num_seconds() as f64 / (30.44 * 86_400.0)).max(1.0));
    let rate = months.map(|m| ours as f64 / m);
    let months_left = rate
        .filter(|r| *r > 0.0)
        .map(|r| quota.saturating_sub(all) as f64 / r);
    (all, ours, left, months_left)
}

fn first_entry_time(trail: &Trail) -> Option<chrono::DateTime<Utc>> {
    let cell = trail.shelf.get_value();
    let s = cell.borrow();
    s.entries.iter().map(|e| e.at).min()
}

/// The storage meter on the records view (drawn again on a change and after each
/// commit reached the stores).
#[component]
pub fn StorageMeter(
    /// The lab being worked on (redraws on change).
    lab: ReadSignal<Option<super::SharedLab>>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    move || {
        lab.track();
        trail.committed.track();
        let (all, ours, left, months) = storage_figures(clock.get(), first_entry_time(&trail));
        let results: usize = lab.with(|l| l.as_ref().map_or(0, |l| l.qc_result_count()));
        let per = (results > 0).then(|| ours as f64 / results as f64);
        view! {
            <section class="card" data-testid="storage-meter">
                <h3>"Storage in this browser"</h3>
                <meter min="0" max="1" prop:value=1.0 - left></meter>
                <p>{format!(
                    "{all} of {} characters used ({:.0} % left); Cuvette's records take {ours}{}.",
                    store::LOCAL_QUOTA_CHARS,
                    left * 100.0,
                    per.map_or(String::new(), |p| format!(", {p:.0} per QC result"))
                )}</p>
                <p>{months.map_or("Not enough history yet to say how many months are left.".to_string(), |m| {
                    format!("At the rate records were added so far, about {m:.0} months are left.")
                })}</p>
                <p class="muted">"Every page opened from a file shares this space. The records are \
                    also kept in IndexedDB; export them regularly to a USB stick."</p>
            </section>
        }
    }
}

/// A warning on today's board when less than a fifth of the storage is left.
#[component]
pub fn StorageWarning(
    /// The lab being worked on (re-checks on change).
    lab: ReadSignal<Option<super::SharedLab>>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    move || {
        lab.track();
        trail.committed.track();
        let (_, _, left, _) = storage_figures(clock.get(), first_entry_time(&trail));
        (left < 0.2).then(|| view! {
            <p class="problem" data-testid="storage-low">{format!(
                "Only {:.0} % of this browser's storage is left. Export all records (Records) and \
                 archive old ones before it fills.", left * 100.0)}</p>
        })
    }
}

/// Shown instead of the bench when the last start failed: what failed, the stored data
/// for download as it is, and a way into the lab without the records it cannot use.
#[component]
pub fn RecoveryScreen(
    /// What went wrong last time.
    why: String,
) -> impl IntoView {
    let (message, set_message) = signal(None::<String>);
    let download = move |_| {
        leptos::task::spawn_local(async move {
            let text = store::everything_stored().await;
            let name = format!(
                "cuvette-stored-data-{}.json",
                Local::now().format("%Y-%m-%d-%H%M")
            );
            match store::download(&name, "application/json", &text) {
                Ok(()) => set_message.set(Some(format!("Offered {name} for download."))),
                Err(e) => set_message.set(Some(e.0)),
            }
        });
    };
    let reopen = |_| {
        store::start_finished();
        if let Some(w) = web_sys::window() {
            let _ = w.location().reload();
        }
    };
    let without = move |_| {
        leptos::task::spawn_local(async move {
            let db = store::idb::Db::open().await.ok();
            let mut total = 0;
            for book in [store::Book::Lab, store::Book::Demo] {
                let (shelf, _) = store::shelf::open(book, db.clone()).await;
                let bad = shelf.replay.lab.implausible_records();
                let mut seqs = store::set_aside(book);
                for (id, _) in &bad {
                    seqs.extend(
                        shelf
                            .entries
                            .iter()
                            .filter(|e| &e.id == id && e.action != Action::Void)
                            .map(|e| e.seq),
                    );
                }
                seqs.sort_unstable();
                seqs.dedup();
                total += bad.len();
                if let Err(e) = store::set_set_aside(book, &seqs) {
                    return set_message.set(Some(e.0));
                }
            }
            store::start_finished();
            set_message.set(Some(format!(
                "{total} record(s) set aside; opening the lab."
            )));
            if let Some(w) = web_sys::window() {
                let _ = w.location().reload();
            }
        });
    };
    view! {
        <section class="card wide recovery" data-testid="recovery">
            <h2>"Cuvette did not start properly last time"</h2>
            <p data-testid="recovery-why">{format!("What failed: {why}.")}</p>
            <p>"Your records are still stored in this browser; nothing has been deleted. First \
                download everything as it is stored (keep the file), then open the lab."</p>
            <p>
                <button data-testid="recovery-download" on:click=download>"Download the stored data as it is"</button>
            </p>
            <p>
                <button data-testid="recovery-open-without" on:click=without>
                    "Open the lab without the records that cannot be used"
                </button>
                " (they are kept aside and listed, never deleted)"
            </p>
            <p><button data-testid="recovery-open" on:click=reopen>"Try to open the lab as it is"</button></p>
            {move || message.get().map(|m| view! { <p class="outcome">{m}</p> })}
        </section>
    }
}
