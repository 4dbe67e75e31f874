//! Records to the USB stick and back: the day's records (JSON, CSV tables, the printed
//! day sheet), the full backup, and the import with its preview. The files and every
//! check are `crate::exchange` and `crate::export`; this view offers them.

use std::collections::HashMap;

use chrono::{Local, NaiveDate, Utc};
use leptos::prelude::*;

use super::Trail;
use crate::exchange::{self, Checked, Choice, Plan};
use crate::export;
use crate::journal::Entry;
use crate::lab::Lab;
use crate::store;

/// A printable sheet: one day's records, or a month's QC review.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Sheet {
    Day(NaiveDate),
    Month(i32, u32),
    /// The calculation verification report, run at this time.
    Verification(chrono::DateTime<Utc>),
}

/// The largest file an import reads, in bytes (a three-year backup is far smaller).
const LARGEST_IMPORT: usize = 100_000_000;

/// An import waiting for the user's confirmation.
#[derive(Clone)]
struct Pending {
    name: String,
    checked: std::sync::Arc<Checked>,
    plan: std::sync::Arc<Plan>,
}

/// The records' exchange card.
#[component]
pub fn ExchangePanel(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
    /// The sheet to print, when open.
    sheet: WriteSignal<Option<Sheet>>,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    let (outcome, set_outcome) = signal::<Option<String>>(None);
    let (refused, set_refused) = signal::<Option<String>>(None);
    let (day, set_day) = signal(None::<NaiveDate>);
    let (pending, set_pending) = signal::<Option<Pending>>(None);
    let choices = RwSignal::new(HashMap::<String, Choice>::new());
    let chosen_day = move || {
        day.get()
            .unwrap_or_else(|| clock.get().with_timezone(&Local).date_naive())
    };
    let entries = move || trail.shelf.get_value().borrow().entries_all();
    let offer = move |name: String, mime: &str, text: Result<String, String>| match text
        .and_then(|t| store::download(&name, mime, &t).map_err(|e| e.0))
    {
        Ok(()) => set_outcome.set(Some(format!("Offered {name}. Copy it to the USB stick."))),
        Err(e) => set_outcome.set(Some(e)),
    };
    let with_lab = move |f: &dyn Fn(&Lab)| match lab.get_untracked() {
        Some(l) => f(&l),
        None => set_outcome.set(Some(
            "nothing to export yet: set up the lab or load the demo".into(),
        )),
    };
    let by = move || store::technician();
    let day_json = move |_| {
        let d = chosen_day();
        with_lab(&|l| {
            let f = exchange::day_file(l, &entries(), d, &Local, Utc::now(), &by());
            offer(
                export::file_name(&l.lab_name, "day", d, "json"),
                "application/json",
                Ok(exchange::to_text(&f)),
            );
        })
    };
    let day_csv = move |_| {
        let d = chosen_day();
        with_lab(&|l| match export::day_tables(l, &entries(), d, &Local) {
            Ok(tables) => {
                for t in tables {
                    offer(
                        export::file_name(&l.lab_name, t.slug, d, "csv"),
                        "text/csv",
                        export::to_csv(&t),
                    );
                }
            }
            Err(e) => set_outcome.set(Some(e)),
        })
    };
    let backup = move |_| {
        with_lab(&|l| {
            let today = Utc::now().with_timezone(&Local).date_naive();
            let f = exchange::backup(l, &entries(), Utc::now(), &by());
            offer(
                export::file_name(&l.lab_name, "backup", today, "json"),
                "application/json",
                Ok(exchange::to_text(&f)),
            );
        })
    };
    let csv = move |which: &'static str| {
        with_lab(&|l| {
            let today = Utc::now().with_timezone(&Local).date_naive();
            let text = match which {
                "qc-results" => export::qc_results_csv(l, &Local),
                _ => export::calibrations_csv(l, &Local),
            };
            offer(
                export::file_name(&l.lab_name, which, today, "csv"),
                "text/csv",
                text,
            );
        })
    };
    // Read, check and plan; nothing changes until the user confirms.
    let take_file = move |file: web_sys::File| {
        set_refused.set(None);
        set_outcome.set(None);
        set_pending.set(None);
        let name = file.name();
        if file.size() > LARGEST_IMPORT as f64 {
            return set_refused.set(Some(format!(
                "{name}: the file is larger than 100 MB; this is not a Cuvette records file \
                 this browser can hold. Nothing was imported."
            )));
        }
        leptos::task::spawn_local(async move {
            let text = match store::read_text(file).await {
                Ok(t) => t,
                Err(e) => return set_refused.set(Some(format!("{e}. Nothing was imported."))),
            };
            match exchange::read(&text, LARGEST_IMPORT) {
                Ok(checked) => {
                    let plan = exchange::plan(&entries(), &checked);
                    choices.set(HashMap::new());
                    set_pending.set(Some(Pending {
                        name,
                        checked: std::sync::Arc::new(checked),
                        plan: std::sync::Arc::new(plan),
                    }));
                }
                Err(e) => set_refused.set(Some(format!("{name}: {e}. Nothing was imported."))),
            }
        });
    };
    let on_pick = move |ev: leptos::ev::Event| {
        let input: web_sys::HtmlInputElement = event_target(&ev);
        let file = input.files().and_then(|f| f.get(0));
        input.set_value("");
        if let Some(file) = file {
            take_file(file);
        }
    };
    let on_drop = move |ev: leptos::ev::DragEvent| {
        ev.prevent_default();
        if let Some(file) = ev
            .data_transfer()
            .and_then(|d| d.files())
            .and_then(|f| f.get(0))
        {
            take_file(file);
        }
    };
    let confirm = move |_| {
        let Some(p) = pending.get_untracked() else {
            return;
        };
        let cell = trail.shelf.get_value();
        let result = {
            let s = cell.borrow();
            exchange::apply(
                &p.plan,
                &choices.get_untracked(),
                &s.replay,
                Utc::now(),
                &by(),
                &p.name,
            )
        };
        match result {
            Ok(new) => {
                let n = new.len();
                trail.append.run(new);
                set_pending.set(None);
                set_outcome.set(Some(if n == 0 {
                    format!(
                        "{}: everything in it is already here; nothing changed.",
                        p.name
                    )
                } else {
                    format!(
                        "Imported {}: {} record(s) added, {} updated, {} conflict(s) resolved.",
                        p.name,
                        p.plan.added.len(),
                        p.plan.newer.len(),
                        p.plan.conflicts.len()
                    )
                }));
            }
            Err(e) => set_refused.set(Some(format!("{}: {e}", p.name))),
        }
    };
    let summary = move || {
        lab.with(|l| {
            l.as_ref().map_or("No records yet.".to_string(), |l| {
                format!(
                    "{} tests, {} control levels, {} QC runs, {} materials, {} calibrations, {} \
                     instrument log entries, {} patient results.",
                    l.tests.len(),
                    l.control_levels.len(),
                    l.control_runs.len(),
                    l.materials.len(),
                    l.calibrations.len(),
                    l.instrument_log.len(),
                    l.patient_results.len()
                )
            })
        })
    };
    let preview = move || {
        pending.get().map(|p| {
            let s = &p.checked.summary;
            let plan = p.plan.clone();
            let what = match s.scope {
                exchange::Scope::Backup => "a full backup".to_string(),
                exchange::Scope::Day => format!(
                    "the records of {}",
                    s.day.map_or(String::new(), |d| d.to_string())
                ),
                exchange::Scope::Year => format!(
                    "the archive of {}",
                    s.year.map_or(String::new(), |y| y.to_string())
                ),
            };
            let for_view = p.clone();
            let lines = |list: &[exchange::PlanLine]| {
                list.iter()
                    .take(50)
                    .map(|l| view! { <li>{l.label.clone()}</li> })
                    .collect_view()
            };
            let conflicts = plan
                .conflicts
                .iter()
                .map(|c| {
                    let id = c.id.clone();
                    let id2 = c.id.clone();
                    let ours = format!(
                        "this PC: {} by {} on {}",
                        export::entry_summary(&c.ours),
                        c.ours.by,
                        c.ours.at.with_timezone(&Local).format("%Y-%m-%d %H:%M")
                    );
                    let theirs = format!(
                        "the file: {} by {} on {}",
                        export::entry_summary(&c.theirs),
                        c.theirs.by,
                        c.theirs.at.with_timezone(&Local).format("%Y-%m-%d %H:%M")
                    );
                    view! {
                        <li data-testid="import-conflict">
                            <strong>{c.label.clone()}</strong>" was changed on both PCs. Keep:"
                            <label>
                                <input type="radio" name=format!("keep-{}", c.id) data-testid="keep-ours"
                                    on:change=move |_| choices.update(|m| { m.insert(id.clone(), Choice::Ours); }) />
                                {ours}
                            </label>
                            <label>
                                <input type="radio" name=format!("keep-{}", c.id) data-testid="keep-theirs"
                                    on:change=move |_| choices.update(|m| { m.insert(id2.clone(), Choice::Theirs); }) />
                                {theirs}
                            </label>
                            " Both versions stay in the record's history."
                        </li>
                    }
                })
                .collect_view();
            let undecided = {
                let plan = plan.clone();
                move || {
                    let c = choices.get();
                    plan.conflicts.iter().any(|x| !c.contains_key(&x.id))
                }
            };
            view! {
                <div class="import-preview" data-testid="import-preview">
                    <p>{format!(
                        "{}: {what} of {}{}, written {} by {}. Chain {}.",
                        p.name,
                        s.lab_name,
                        if s.demo { " (demo)" } else { "" },
                        s.made_at.with_timezone(&Local).format("%Y-%m-%d %H:%M"),
                        if s.made_by.is_empty() { "—" } else { &s.made_by },
                        s.chain
                    )}</p>
                    <p data-testid="import-counts">{format!(
                        "{} record(s) to add, {} to update, {} already here, {} conflict(s).",
                        plan.added.len(),
                        plan.newer.len(),
                        plan.same,
                        plan.conflicts.len()
                    )}</p>
                    {(!plan.added.is_empty()).then(|| view! { <details><summary>"To add"</summary><ul>{lines(&plan.added)}</ul></details> })}
                    {(!plan.newer.is_empty()).then(|| view! { <details><summary>"To update"</summary><ul>{lines(&plan.newer)}</ul></details> })}
                    <ul class="conflicts">{conflicts}</ul>
                    <p>
                        <button data-testid="import-confirm" on:click=confirm disabled=undecided>
                            {if plan.is_noop() { "Nothing to import: close" } else { "Import these records" }}
                        </button>
                        " "
                        <button data-testid="import-cancel" on:click=move |_| set_pending.set(None)>"Cancel"</button>
                        " "
                        <button data-testid="open-read-only" on:click=move |_| {
                            trail.view_archive.run(Some((for_view.name.clone(), for_view.checked.lab.clone())));
                            set_pending.set(None);
                        }>"Open it read-only instead"</button>
                    </p>
                </div>
            }
        })
    };
    view! {
        <section class="card" data-testid="records-exchange">
            <h3>"Carry the records to another PC"</h3>
            <p data-testid="records-summary">{summary}</p>
            <p>
                <label>
                    "Day "
                    <input type="date" data-testid="export-day"
                        prop:value=move || chosen_day().to_string()
                        on:change=move |ev| set_day.set(event_target_value(&ev).parse().ok()) />
                </label>
            </p>
            <p>
                <button data-testid="export-day-json" on:click=day_json>"The day's records (JSON)"</button>
                " "
                <button data-testid="export-day-csv" on:click=day_csv>"The day's tables (CSV)"</button>
                " "
                <button data-testid="print-day-sheet" on:click=move |_| sheet.set(Some(Sheet::Day(chosen_day())))>
                    "Print the day sheet"
                </button>
            </p>
            <p>
                <button data-testid="export-backup" on:click=backup>"Full backup (JSON, with the whole trail)"</button>
            </p>
            <p>
                "For a spreadsheet, everything: "
                <button data-testid="export-qc-csv" on:click=move |_| csv("qc-results")>"QC results (CSV)"</button>
                " "
                <button data-testid="export-calibrations-csv" on:click=move |_| csv("calibrations")>"Calibrations (CSV)"</button>
            </p>
            <div class="drop" data-testid="import-drop"
                on:dragover=move |ev: leptos::ev::DragEvent| ev.prevent_default()
                on:drop=on_drop>
                <label>
                    "Import a backup or a day's records (JSON), or drop the file here: "
                    <input type="file" accept=".json,application/json" data-testid="import-json" on:change=on_pick />
                </label>
            </div>
            <p class="muted">
                "The file is checked whole before anything changes (every entry's SHA-256, the \
                 chain, every value's range). A preview shows what will be added and what was \
                 changed on both PCs; nothing is deleted, and importing the same file again \
                 changes nothing."
            </p>
            {preview}
            {move || refused.get().map(|r| view! { <p class="problem" role="alert" data-testid="import-refused">{r}</p> })}
            {move || outcome.get().map(|o| view! { <p class="outcome" data-testid="records-outcome">{o}</p> })}
        </section>
    }
}

/// A table on screen or on the printed sheet.
fn table_view(t: export::Table) -> AnyView {
    if t.rows.is_empty() {
        return view! { <p class="empty">"None in this period."</p> }.into_any();
    }
    view! {
        <table data-testid=format!("table-{}", t.slug)>
            // The CSV column names, read as words on screen and paper.
            <thead><tr>{t.headers.iter().map(|h| view! { <th>{h.replace("_pct", " %").replace('_', " ")}</th> }).collect_view()}</tr></thead>
            <tbody>{t.rows.into_iter().map(|r| view! {
                <tr>{r.into_iter().map(|c| view! { <td>{c}</td> }).collect_view()}</tr>
            }).collect_view()}</tbody>
        </table>
    }
    .into_any()
}

/// The printable sheet: one page per table, each with the lab, the period, who worked
/// and a line for a signature.
#[component]
pub fn DaySheet(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// The sheet shown, when open.
    sheet: ReadSignal<Option<Sheet>>,
    set_sheet: WriteSignal<Option<Sheet>>,
) -> impl IntoView {
    let trail = expect_context::<Trail>();
    Effect::new(move |_| {
        let open = sheet.get().is_some();
        if let Some(body) = web_sys::window()
            .and_then(|w| w.document())
            .and_then(|d| d.body())
        {
            let _ = if open {
                body.class_list().add_1("sheet-open")
            } else {
                body.class_list().remove_1("sheet-open")
            };
        }
    });
    let print = |_| {
        if let Some(w) = web_sys::window() {
            let _ = w.print();
        }
    };
    move || {
        let which = sheet.get()?;
        let l = match (lab.get(), which) {
            (Some(l), _) => l,
            // The verification report needs no records.
            (None, Sheet::Verification(_)) => {
                super::SharedLab::new(Lab::empty("No lab set up yet"))
            }
            (None, _) => return None,
        };
        let entries: Vec<Entry> = trail.shelf.get_value().borrow().entries_all();
        let (period, tables, who) = match which {
            Sheet::Day(day) => (
                day.to_string(),
                export::day_tables(&l, &entries, day, &Local),
                Some(export::who_worked(&entries, day, &Local).join(", ")),
            ),
            Sheet::Month(y, m) => (
                format!("{y:04}-{m:02}"),
                export::monthly_review(&l, &super::judged().get_untracked().0, y, m, &Local)
                    .map(|t| vec![t]),
                None,
            ),
            Sheet::Verification(at) => (
                format!(
                    "Cuvette {}, run {}",
                    crate::verification::VERSION,
                    at.with_timezone(&Local).format("%Y-%m-%d %H:%M")
                ),
                Ok(vec![crate::verification::table(
                    &crate::verification::run_all(),
                )]),
                None,
            ),
        };
        let tables = match tables {
            Ok(t) => t,
            Err(e) => return Some(view! { <p class="problem">{e}</p> }.into_any()),
        };
        let head = {
            let name = l.lab_name.clone();
            let demo = l.demo;
            let period = period.clone();
            move |title: &str| {
                let who = who.clone().map(|w| {
                    format!(
                        "Who worked: {}",
                        if w.is_empty() {
                            "nobody recorded anything"
                        } else {
                            &w
                        }
                    )
                });
                view! {
                    <header class="sheet-head">
                        <strong>{name.clone()}</strong>
                        {demo.then_some(" — DEMO LAB, invented data")}
                        <span>{format!(" — {title} — {period}")}</span>
                        {who.map(|w| view! { <div>{w}</div> })}
                    </header>
                }
            }
        };
        let parts = tables
            .into_iter()
            .map(|t| {
                let title = t.title;
                view! {
                    <section class="sheet-part" data-testid="sheet-part">
                        {head(title)}
                        <h3>{title}</h3>
                        {table_view(t)}
                        <p class="signature">"Reviewed by (name, signature): ______________________________   Date: ____________"</p>
                    </section>
                }
            })
            .collect_view();
        Some(
            view! {
                <div id="day-sheet" class="day-sheet" data-testid="day-sheet">
                    <p class="no-print">
                        <button data-testid="sheet-print" on:click=print>"Print or save as PDF"</button>
                        " "
                        <button data-testid="sheet-close" on:click=move |_| set_sheet.set(None)>"Close the sheet"</button>
                    </p>
                    <p class="caution">"Cuvette supports the lab's own QC policy and the maker's instructions; \
                        a released result is the responsibility of qualified staff."</p>
                    {parts}
                </div>
            }
            .into_any(),
        )
    }
}

/// The monthly QC review on screen, as CSV, and as a printed sheet.
#[component]
pub fn MonthlyReview(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
    /// Where the printed sheet opens.
    sheet: WriteSignal<Option<Sheet>>,
) -> impl IntoView {
    use chrono::Datelike;
    let (chosen, set_chosen) = signal(None::<(i32, u32)>);
    let month = move || {
        chosen.get().unwrap_or_else(|| {
            let now = clock.get().with_timezone(&Local);
            (now.year(), now.month())
        })
    };
    let (message, set_message) = signal(None::<String>);
    let table = move || {
        let (y, m) = month();
        // The view's lab is tracked; the shared verdicts are those of that same lab
        // (a hidden view's lab does not change, so it does no work).
        let judged = super::judged().get_untracked().0;
        lab.with(|l| {
            l.as_ref()
                .map(|l| export::monthly_review(l, &judged, y, m, &Local))
        })
    };
    let csv = move |_| {
        let (y, m) = month();
        let Some(l) = lab.get_untracked() else { return };
        let name = export::file_name(
            &l.lab_name,
            "qc-review",
            NaiveDate::from_ymd_opt(y, m, 1).unwrap_or_default(),
            "csv",
        );
        let judged = super::judged().get_untracked().0;
        let text =
            export::monthly_review(&l, &judged, y, m, &Local).and_then(|t| export::to_csv(&t));
        match text.and_then(|t| store::download(&name, "text/csv", &t).map_err(|e| e.0)) {
            Ok(()) => set_message.set(Some(format!("Offered {name}."))),
            Err(e) => set_message.set(Some(e)),
        }
    };
    view! {
        <section class="card wide" data-testid="monthly-review">
            <h3>"Monthly QC review"</h3>
            <p>
                <label>
                    "Month "
                    <input type="month" data-testid="review-month"
                        prop:value=move || { let (y, m) = month(); format!("{y:04}-{m:02}") }
                        on:change=move |ev| {
                            let parsed = crate::period::Month::parse(&event_target_value(&ev));
                            set_chosen.set(parsed.map(|m| (m.year, m.month)));
                        } />
                </label>
                " "
                <button data-testid="export-review-csv" on:click=csv>"CSV"</button>
                " "
                <button data-testid="print-month-sheet" on:click=move |_| { let (y, m) = month(); sheet.set(Some(Sheet::Month(y, m))); }>
                    "Print the month's sheet"
                </button>
            </p>
            {move || match table() {
                None => ().into_any(),
                Some(Ok(t)) => table_view(t),
                Some(Err(e)) => view! { <p class="problem">{e}</p> }.into_any(),
            }}
            {move || message.get().map(|m| view! { <p class="outcome">{m}</p> })}
        </section>
    }
}

/// An archive being made: the file written, waiting for its copy to be checked.
#[derive(Clone)]
struct Archiving {
    name: String,
    file: std::sync::Arc<exchange::RecordsFile>,
    chosen: std::sync::Arc<std::collections::HashSet<String>>,
    verified: bool,
}

/// Archive a year: write its records to a file, check the copy read back from the
/// stick, and only then remove them from the browser (the trail keeps a line).
#[component]
pub fn ArchivePanel(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
) -> impl IntoView {
    use chrono::Datelike;
    let trail = expect_context::<Trail>();
    let (year, set_year) = signal(None::<i32>);
    let (state, set_state) = signal(None::<Archiving>);
    let (message, set_message) = signal(None::<String>);
    let last_year = move || clock.get().with_timezone(&Local).year() - 1;
    let chosen_year = move || year.get().unwrap_or_else(last_year);
    // Follows the view's own lab, which is set afresh on every change while the view
    // is shown (and not while it is hidden: the entries are cloned to count).
    let count = move || {
        let y = chosen_year();
        lab.with(|l| {
            l.as_ref().map_or(0, |l| {
                let entries = trail.shelf.get_value().borrow().entries_all();
                exchange::archivable(l, &entries, y, clock.get(), &Local).len()
            })
        })
    };
    let write = move |_| {
        let Some(l) = lab.get_untracked() else { return };
        let y = chosen_year();
        let entries = trail.shelf.get_value().borrow().entries_all();
        let chosen = exchange::archivable(&l, &entries, y, Utc::now(), &Local);
        if chosen.is_empty() {
            return set_message.set(Some(format!(
                "nothing to archive for {y}: only records of a year that is over, not in use \
                 (the newest calibration of each test and materials still usable stay)"
            )));
        }
        let f = exchange::year_file(&l, &entries, y, &chosen, Utc::now(), &store::technician());
        let name = export::file_name(
            &l.lab_name,
            &format!("archive-{y}"),
            Utc::now().with_timezone(&Local).date_naive(),
            "json",
        );
        match store::download(&name, "application/json", &exchange::to_text(&f)) {
            Ok(()) => {
                set_message.set(Some(format!(
                    "Wrote {name} ({} records of {y}). Now pick that file on the USB stick below, \
                     so Cuvette can check the copy before removing anything.",
                    chosen.len()
                )));
                set_state.set(Some(Archiving {
                    name,
                    file: std::sync::Arc::new(f),
                    chosen: std::sync::Arc::new(chosen),
                    verified: false,
                }));
            }
            Err(e) => set_message.set(Some(e.0)),
        }
    };
    let verify = move |ev: leptos::ev::Event| {
        let input: web_sys::HtmlInputElement = event_target(&ev);
        let file = input.files().and_then(|f| f.get(0));
        input.set_value("");
        let (Some(file), Some(a)) = (file, state.get_untracked()) else {
            return;
        };
        leptos::task::spawn_local(async move {
            let name = file.name();
            let text = match store::read_text(file).await {
                Ok(t) => t,
                Err(e) => return set_message.set(Some(e.0)),
            };
            match exchange::verify_copy(&text, &a.file) {
                Ok(_) => {
                    set_message.set(Some(format!(
                        "{name} is a complete, intact copy of the archive. The records can now be \
                         removed from this browser."
                    )));
                    set_state.set(Some(Archiving {
                        verified: true,
                        ..a
                    }));
                }
                Err(e) => set_message.set(Some(format!("{name}: {e}. Nothing was removed."))),
            }
        });
    };
    let remove = move |_| {
        let Some(a) = state.get_untracked().filter(|a| a.verified) else {
            return;
        };
        let cell = trail.shelf.get_value();
        let entries = cell.borrow().entries_all();
        let by = store::technician();
        let new =
            match exchange::after_archive(&entries, &a.file, &a.chosen, Utc::now(), &by, &a.name) {
                Ok(n) => n,
                Err(e) => return set_message.set(Some(e.0)),
            };
        leptos::task::spawn_local(async move {
            match store::shelf::replace(&cell, new).await {
                Ok(()) => {
                    // The lab first, then the message that says it is done.
                    trail.refresh.run(());
                    set_state.set(None);
                    set_message.set(Some(format!(
                        "{} records of {} were removed from this browser; {} keeps them. The \
                         trail says so.",
                        a.chosen.len(),
                        a.file.year.unwrap_or_default(),
                        a.name
                    )));
                }
                Err(e) => set_message.set(Some(format!("{e}. Nothing was removed."))),
            }
        });
    };
    view! {
        <section class="card" data-testid="archive">
            <h3>"Archive a year"</h3>
            <p>
                <label>
                    "Year "
                    <input type="number" data-testid="archive-year" min="2000" max="2100"
                        prop:value=move || chosen_year().to_string()
                        on:change=move |ev| {
                            set_state.set(None);
                            set_year.set(event_target_value(&ev).trim().parse().ok().filter(|y| (2000..=2100).contains(y)))
                        } />
                </label>
                " "
                <span data-testid="archive-count">{move || format!("{} record(s) can be archived", count())}</span>
            </p>
            <p>
                <button data-testid="archive-write" on:click=write>"1. Write the year's archive file"</button>
            </p>
            <Show when=move || state.get().is_some()>
                <p>
                    <label>
                        "2. Pick the copy on the USB stick to check it: "
                        <input type="file" accept=".json,application/json" data-testid="archive-verify" on:change=verify />
                    </label>
                </p>
                <p>
                    <button data-testid="archive-remove" on:click=remove
                        disabled=move || !state.get().is_some_and(|a| a.verified)>
                        "3. Remove the archived records from this browser"
                    </button>
                </p>
            </Show>
            <p class="muted">"An archive file opens read-only from the import above, with its charts and records."</p>
            {move || message.get().map(|m| view! { <p class="outcome" data-testid="archive-message">{m}</p> })}
        </section>
    }
}

/// The calculation verification report: reference cases run on this build's engine.
#[component]
pub fn VerificationPanel(
    /// Where the printed sheet opens.
    sheet: WriteSignal<Option<Sheet>>,
) -> impl IntoView {
    let (report, set_report) =
        signal(None::<(chrono::DateTime<Utc>, Vec<crate::verification::Case>)>);
    let run = move |_| set_report.set(Some((Utc::now(), crate::verification::run_all())));
    view! {
        <section class="card wide" data-testid="verification">
            <h3>"Calculation verification"</h3>
            <p class="muted">
                "Runs published reference cases on this copy of Cuvette (NIST regression sets, \
                 normal-table rejection probabilities, enzyme-factor arithmetic, rule sequences, \
                 stability edge cases) and lists each with its source, the expected and the \
                 obtained value. Print it and file it with the lab's software validation."
            </p>
            <p>
                <button data-testid="verify-run" on:click=run>"Run the checks"</button>
                " "
                <button data-testid="verify-print" on:click=move |_| sheet.set(Some(Sheet::Verification(Utc::now())))>
                    "Print the report"
                </button>
            </p>
            {move || report.get().map(|(at, cases)| {
                let failed = cases.iter().filter(|c| !c.pass).count();
                view! {
                    <p data-testid="verify-summary" class=if failed == 0 { "outcome" } else { "problem" }>
                        {format!(
                            "Cuvette {}, {}: {} of {} checks passed{}.",
                            crate::verification::VERSION,
                            at.with_timezone(&Local).format("%Y-%m-%d %H:%M"),
                            cases.len() - failed,
                            cases.len(),
                            if failed == 0 { String::new() } else { format!("; {failed} FAILED — do not rely on this copy, report it") }
                        )}
                    </p>
                    {table_view(crate::verification::table(&cases))}
                }
            })}
        </section>
    }
}
