//! Today's board: per test its calibration and today's QC decision, what is due today
//! and why (each line leads to its view), rejected runs awaiting a corrective action,
//! control lots changing over, failed photometer checks, a doubtful clock, and the
//! materials that need attention.

use chrono::{Local, Utc};
use leptos::prelude::*;

use super::{judged, materials, runs, EmptyState, View, NO_LAB};
use crate::engine::stability::{self, StabilityState, WarningWindow};
use crate::lab::Lab;

#[component]
pub(super) fn TodayBoard(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
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
        let verdicts = judged.get_untracked().0;
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
                                    crate::due::Task::Qc => (" QC", View::Runs),
                                    crate::due::Task::Calibration => (" calibration", View::Calibration),
                                    crate::due::Task::Instrument(_) => ("", View::Instrument),
                                };
                                let text = format!("{}{task}: {} — {}", d.test, d.state.code(), d.why);
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
                    {actions_view}
                    {due_view}
                    <section class="card wide">
                        <h3>{format!("Tests — {}", today.format("%Y-%m-%d"))}</h3>
                        <p data-testid="today-temperature">{temperature}</p>
                        {photometer_view}
                        <table data-testid="today-tests">
                            <thead><tr><th>"Test"</th><th>"Calibration in use"</th><th>"Latest QC run"</th><th>"Before patient samples"</th></tr></thead>
                            <tbody>{tests}</tbody>
                        </table>
                    </section>
                    {lots_view}
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
