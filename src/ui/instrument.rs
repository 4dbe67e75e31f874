//! The instrument log: temperature and photometer checks, maintenance, lamp changes and
//! service visits, newest first, each with who and when; a temperature outside the
//! lab's limits is flagged.

use chrono::Local;
use leptos::prelude::*;

use crate::engine::readings::{flag, Limits, ResultFlag};
use crate::entry;
use crate::lab::{InstrumentEntry, InstrumentEvent, Lab};

#[component]
pub fn InstrumentView(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// Saves a changed lab.
    save: Callback<Lab>,
    /// The technician's initials.
    technician: ReadSignal<String>,
) -> impl IntoView {
    let (event, set_event) = signal(InstrumentEvent::TemperatureCheck);
    let (value, set_value) = signal(String::new());
    let (note, set_note) = signal(String::new());
    let (standard, set_standard) = signal(String::new());
    let (message, set_message) = signal::<Option<String>>(None);
    let rows = move || {
        lab.with(|l| {
            let Some(l) = l.as_ref().filter(|l| !l.instrument_log.is_empty()) else {
                return view! { <p class="empty">"No instrument checks or maintenance recorded yet."</p> }.into_any();
            };
            let mut entries: Vec<&InstrumentEntry> = l.instrument_log.iter().collect();
            entries.sort_by_key(|e| std::cmp::Reverse(e.at));
            let limits = l.temperature_limits;
            view! {
                <table>
                    <thead><tr><th>"When"</th><th>"By"</th><th>"What"</th><th>"Reading"</th><th>"Note"</th><th class="no-print">"Record"</th></tr></thead>
                    <tbody>
                        {entries.into_iter().map(|e| entry_row(e, limits, l.photometer_verdict(e))).collect_view()}
                    </tbody>
                </table>
            }
            .into_any()
        })
    };
    let add = move |_| {
        let (meta, now) = match super::new_record(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let value = match entry::numbers(&value.get_untracked(), "reading") {
            Ok(v) if v.len() <= 1 => v.first().copied(),
            Ok(_) => return set_message.set(Some("reading: one number only".into())),
            Err(e) => return set_message.set(Some(e)),
        };
        let event = event.get_untracked();
        if event == InstrumentEvent::TemperatureCheck && value.is_none() {
            return set_message.set(Some("reading: give the temperature in °C".into()));
        }
        let standard = Some(standard.get_untracked())
            .filter(|s| event == InstrumentEvent::PhotometerCheck && !s.is_empty());
        if standard.is_some() && value.is_none() {
            return set_message.set(Some(
                "reading: give the absorbance read on the standard".into(),
            ));
        }
        let mut changed = lab
            .get_untracked()
            .map_or_else(|| Lab::empty("My lab"), |l| Lab::clone(&l));
        let entry = InstrumentEntry {
            meta,
            at: now,
            event,
            value,
            note: note.get_untracked().trim().to_string(),
            standard,
        };
        let verdict = changed
            .photometer_verdict(&entry)
            .map(|(s, ok)| (s.clone(), ok));
        changed.instrument_log.push(entry);
        let limits = changed.temperature_limits;
        save.run(changed);
        let outside = event == InstrumentEvent::TemperatureCheck
            && value.is_some_and(|v| flag(v, limits, Limits::default()).is_some());
        set_message.set(Some(match verdict {
            Some((s, false)) => format!(
                "recorded. The photometer check FAILED on {} (expected {:.3} ± {:.3}): do not run tests at that wavelength until it is corrected.",
                s.name, s.expected, s.tolerance
            ),
            Some((s, true)) => format!("recorded. The photometer check passed on {}.", s.name),
            None if outside => "recorded. The temperature is outside the limits: do not run tests until it is corrected.".into(),
            None => "recorded.".into(),
        }));
    };
    view! {
        <section class="card wide">
            <div class="form grid">
                <label>
                    "What "
                    <select data-testid="instrument-event" on:change=move |ev| {
                        if let Some(e) = InstrumentEvent::from_code(&event_target_value(&ev)) {
                            set_event.set(e);
                        }
                    }>
                        {InstrumentEvent::ALL.into_iter().map(|e| view! { <option value=e.code()>{e.words()}</option> }).collect_view()}
                    </select>
                </label>
                {move || lab.with(|l| {
                    let names: Vec<String> = l.as_ref().map(|l| l.absorbance_standards.iter().map(|s| s.name.clone()).collect()).unwrap_or_default();
                    (event.get() == InstrumentEvent::PhotometerCheck).then(|| view! {
                        <label>"Standard "
                            <select data-testid="instrument-standard" on:change=move |ev| set_standard.set(event_target_value(&ev))>
                                <option value="">"— none (a blank or other check)"</option>
                                {names.into_iter().map(|n| view! { <option value=n.clone()>{n.clone()}</option> }).collect_view()}
                            </select>
                        </label>
                    })
                })}
                <label>"Reading " <input size="8" data-testid="instrument-value" on:input=move |ev| set_value.set(event_target_value(&ev)) /></label>
                <label>"Note " <input size="40" data-testid="instrument-note" on:input=move |ev| set_note.set(event_target_value(&ev)) /></label>
                <button data-testid="add-instrument-entry" on:click=add>"Record"</button>
                {move || message.get().map(|m| view! { <p class="outcome" data-testid="instrument-message">{m}</p> })}
            </div>
            {rows}
        </section>
    }
}

fn entry_row(
    e: &InstrumentEntry,
    limits: Limits,
    verdict: Option<(&crate::lab::AbsorbanceStandard, bool)>,
) -> impl IntoView {
    let out = (e.event == InstrumentEvent::TemperatureCheck
        && e.value
            .is_some_and(|v| flag(v, limits, Limits::default()).is_some()))
        || verdict.is_some_and(|(_, ok)| !ok);
    let reading = match (e.value, e.event) {
        (Some(v), InstrumentEvent::TemperatureCheck) => {
            let side = match e.value.and_then(|v| flag(v, limits, Limits::default())) {
                Some(ResultFlag::Low | ResultFlag::CriticalLow) => " (too low)",
                Some(ResultFlag::High | ResultFlag::CriticalHigh) => " (too high)",
                None => "",
            };
            format!("{v} °C{side}")
        }
        (Some(v), InstrumentEvent::PhotometerCheck) => {
            let shown = crate::engine::readings::absorbance_text(v);
            match verdict {
                Some((s, ok)) => format!(
                    "{shown} ({}: expected {:.3} ± {:.3}, {})",
                    s.name,
                    s.expected,
                    s.tolerance,
                    if ok { "passed" } else { "failed" }
                ),
                None => shown,
            }
        }
        (Some(v), _) => v.to_string(),
        (None, _) => String::new(),
    };
    view! {
        <tr class:state-expired=out data-testid="instrument-row">
            <td>{e.at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()}</td>
            <td>{e.meta.by.clone()}</td>
            <td>{e.event.words()}</td>
            <td>{reading}</td>
            <td>{e.note.clone()}</td>
            <td class="no-print">
                <super::records::HistoryButton id=e.meta.id.clone() />" "
                <super::records::VoidButton id=e.meta.id.clone() />
            </td>
        </tr>
    }
}
