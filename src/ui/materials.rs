//! The materials view: every reagent, calibrator and control in use with its
//! usable-until (and each analyte's own), counting down, with its next step (open a
//! received lot, freeze aliquots, thaw one, discard with a reason); the discarded ones
//! apart; and the form that records a material received, opened or reconstituted now,
//! by whom.

use chrono::{Local, Utc};
use leptos::prelude::*;

use crate::engine::stability::{self, StabilityState, UsableUntil, WarningWindow};
use crate::entry::MaterialForm;
use crate::lab::Lab;

pub(super) fn state_word(s: StabilityState) -> &'static str {
    match s {
        StabilityState::Ok => "usable",
        StabilityState::Expiring => "expiring soon",
        StabilityState::Expired => "expired: do not use",
    }
}

/// One line of the table; `record` (the lab and the material's id) adds its history and
/// void buttons on the material's own line.
fn row(
    what: String,
    lot: String,
    by: String,
    u: &UsableUntil,
    record: Option<String>,
    actions: AnyView,
) -> impl IntoView {
    let class = match u.state {
        StabilityState::Ok => "state-ok",
        StabilityState::Expiring => "state-expiring",
        StabilityState::Expired => "state-expired",
    };
    view! {
        <tr class=class data-testid="material-row">
            <td>{what}</td>
            <td>{lot}</td>
            <td>{by}</td>
            <td>{u.until.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()}</td>
            <td>{stability::describe_left(u.hours_left)}</td>
            <td>{u.governed_by.describe()}</td>
            <td>{state_word(u.state)}{u.remarks.iter().map(|r| format!("; {r}")).collect::<String>()}</td>
            <td class="no-print">{record.map(|id| view! {
                <super::records::HistoryButton id=id.clone() />" "<super::records::VoidButton id=id />
            })}{actions}</td>
        </tr>
    }
}

#[component]
pub fn MaterialsView(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// Saves a changed lab.
    save: Callback<Lab>,
    /// The technician's initials.
    technician: ReadSignal<String>,
    /// The current time, ticking.
    clock: ReadSignal<chrono::DateTime<Utc>>,
) -> impl IntoView {
    let table = move || {
        let now = clock.get();
        lab.with(|l| {
            let Some(l) = l.as_ref().filter(|l| !l.materials.is_empty()) else {
                return view! { <p class="empty">"No reagents, calibrators or controls in use."</p> }.into_any();
            };
            let rows = l
                .materials
                .iter()
                .filter(|m| m.in_use())
                .map(|m| match stability::evaluate(&m.stability, now, &Local, WarningWindow::default()) {
                    Ok(r) => {
                        let actions = lifecycle_actions(m, technician);
                        let lot = lot_text(m);
                        let main = row(m.name.clone(), lot.clone(), m.meta.by.clone(), &r.material, Some(m.meta.id.clone()), actions);
                        let per_analyte = r
                            .analytes
                            .iter()
                            .map(|(a, u)| row(format!("  {} — {a}", m.name), lot.clone(), m.meta.by.clone(), u, None, ().into_any()))
                            .collect_view();
                        view! { {main}{per_analyte} }.into_any()
                    }
                    Err(e) => view! {
                        <tr><td>{m.name.clone()}</td><td colspan="6">{format!("check this record: {e}")}</td></tr>
                    }
                    .into_any(),
                })
                .collect_view();
            let discarded: Vec<_> = l.materials.iter().filter_map(|m| m.discarded.as_ref().map(|d| (m, d))).collect();
            let discarded_view = (!discarded.is_empty()).then(|| view! {
                <details class="discarded">
                    <summary data-testid="discarded-materials">{format!("Discarded materials ({})", discarded.len())}</summary>
                    <table>
                        <thead><tr><th>"Material"</th><th>"Lot"</th><th>"Discarded"</th><th>"By"</th><th>"Why"</th><th class="no-print">"Record"</th></tr></thead>
                        <tbody>
                            {discarded.into_iter().map(|(m, d)| view! {
                                <tr data-testid="discarded-row">
                                    <td>{m.name.clone()}</td>
                                    <td>{lot_text(m)}</td>
                                    <td>{d.at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()}</td>
                                    <td>{d.by.clone()}</td>
                                    <td>{d.reason.clone()}</td>
                                    <td class="no-print"><super::records::HistoryButton id=m.meta.id.clone() /></td>
                                </tr>
                            }).collect_view()}
                        </tbody>
                    </table>
                </details>
            });
            view! {
                <table>
                    <thead>
                        <tr>
                            <th>"Material"</th><th>"Lot"</th><th>"Opened by"</th><th>"Usable until"</th>
                            <th>"Time left"</th><th>"Set by"</th><th>"State"</th><th class="no-print">"Record"</th>
                        </tr>
                    </thead>
                    <tbody>{rows}</tbody>
                </table>
                {discarded_view}
            }
            .into_any()
        })
    };
    view! {
        <section class="card wide">
            {table}
            <NewMaterial lab=lab save=save technician=technician />
            <p class="muted">
                "The time left is brought up to date every 30 seconds. The maker's instructions \
                 for use decide every stability."
            </p>
        </section>
    }
}

/// The lot, with how it was reconstituted (volume, diluent and its lot).
fn lot_text(m: &crate::lab::MaterialRecord) -> String {
    match &m.reconstitution {
        None => m.lot.clone(),
        Some(r) if r.diluent_lot.is_empty() => {
            format!("{} (made up with {} mL {})", m.lot, r.volume_ml, r.diluent)
        }
        Some(r) => format!(
            "{} (made up with {} mL {} lot {})",
            m.lot, r.volume_ml, r.diluent, r.diluent_lot
        ),
    }
}

/// On a material's line: open a received one; thaw a frozen aliquot (once), or freeze
/// aliquots of a material that is not itself an aliquot; discard it with a reason. The
/// lab is read when a button is used.
fn lifecycle_actions(m: &crate::lab::MaterialRecord, technician: ReadSignal<String>) -> AnyView {
    let id = m.meta.id.clone();
    let unopened = m.stability.opened_at.is_none() && m.stability.frozen.is_none();
    let middle = match &m.stability.frozen {
        _ if unopened => {
            view! { " " <OpenButton id=id.clone() technician=technician /> }.into_any()
        }
        Some(f) if f.thawed_at.is_none() && f.thaw_count == 0 => {
            view! { " " <ThawButton id=id.clone() technician=technician /> }.into_any()
        }
        Some(_) => ().into_any(),
        None => view! { " " <FreezeAliquots id=id.clone() technician=technician /> }.into_any(),
    };
    view! { {middle}" "<DiscardButton id=id technician=technician /> }.into_any()
}

/// Change one material now, by the technician on duty: `change` gets the material, the
/// time and the initials and returns the changed material and the trail's reason; a
/// refusal is shown through `set_message`. The lab is read when the button is used.
fn change_material(
    trail: &super::Trail,
    id: &str,
    technician: ReadSignal<String>,
    set_message: WriteSignal<Option<String>>,
    change: impl FnOnce(
        &crate::lab::MaterialRecord,
        chrono::DateTime<Utc>,
        &str,
    ) -> Result<(crate::lab::MaterialRecord, String), String>,
) {
    let initials = match super::new_record(technician) {
        Ok((meta, _)) => meta.by,
        Err(e) => return set_message.set(Some(e)),
    };
    let Some(mut lab) = trail.current_lab() else {
        return;
    };
    let Some(m) = lab.materials.iter_mut().find(|m| m.meta.id == id) else {
        return set_message.set(Some("this material is no longer in the list".into()));
    };
    match change(m, Utc::now(), &initials) {
        Ok((changed, reason)) => {
            *m = changed;
            trail.amend.run(super::Change {
                lab,
                reason: Some(reason),
            });
        }
        Err(e) => set_message.set(Some(e)),
    }
}

#[component]
fn OpenButton(id: String, technician: ReadSignal<String>) -> impl IntoView {
    let trail = expect_context::<super::Trail>();
    let (message, set_message) = signal(None::<String>);
    let open = move |_| {
        change_material(&trail, &id, technician, set_message, |m, now, _| {
            let reason = format!(
                "opened {}",
                now.with_timezone(&Local).format("%Y-%m-%d %H:%M")
            );
            m.opened(now).map(|opened| (opened, reason))
        })
    };
    view! {
        <button data-testid="open-material" on:click=open>"open now"</button>
        {move || message.get().map(|m| view! { <span class="problem" data-testid="open-message">{m}</span> })}
    }
}

#[component]
fn DiscardButton(id: String, technician: ReadSignal<String>) -> impl IntoView {
    let trail = expect_context::<super::Trail>();
    let (reason, set_reason) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let discard = move |_| {
        let why = reason.get_untracked();
        change_material(&trail, &id, technician, set_message, |m, now, initials| {
            m.discard(now, initials, &why)
                .map(|gone| (gone, format!("discarded: {}", why.trim())))
        })
    };
    view! {
        <details class="discard">
            <summary data-testid="discard-material">"discard"</summary>
            <label>"why "<input size="24" data-testid="discard-reason" placeholder="expired; contaminated; QC failure"
                on:input=move |ev| set_reason.set(event_target_value(&ev)) /></label>
            " "<button data-testid="discard-confirm" on:click=discard>"discard"</button>
            {move || message.get().map(|m| view! { <p class="problem" data-testid="discard-message">{m}</p> })}
        </details>
    }
}

#[component]
fn ThawButton(id: String, technician: ReadSignal<String>) -> impl IntoView {
    let trail = expect_context::<super::Trail>();
    let (message, set_message) = signal(None::<String>);
    let thaw = move |_| {
        change_material(&trail, &id, technician, set_message, |m, now, _| {
            let mut thawed = m.clone();
            thawed.stability = stability::thaw(&m.stability, now).map_err(|e| e.0)?;
            let reason = format!(
                "aliquot thawed {}",
                now.with_timezone(&Local).format("%Y-%m-%d %H:%M")
            );
            Ok((thawed, reason))
        })
    };
    view! {
        <button data-testid="thaw" on:click=thaw>"thaw now"</button>
        {move || message.get().map(|m| view! { <span class="problem" data-testid="thaw-message">{m}</span> })}
    }
}

#[component]
fn FreezeAliquots(id: String, technician: ReadSignal<String>) -> impl IntoView {
    let trail = expect_context::<super::Trail>();
    let (count, set_count) = signal(String::new());
    let (frozen_days, set_frozen_days) = signal(String::new());
    let (thaw_hours, set_thaw_hours) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let make = move |_| {
        let parsed = crate::entry::aliquot_plan(
            &count.get_untracked(),
            &frozen_days.get_untracked(),
            &thaw_hours.get_untracked(),
        );
        let (n, frozen_hours, after_thaw_hours) = match parsed {
            Ok(p) => p,
            Err(e) => return set_message.set(Some(e)),
        };
        let Some(mut lab) = trail.current_lab() else {
            return;
        };
        let Some(source) = lab.materials.iter().find(|m| m.meta.id == id).cloned() else {
            return set_message.set(Some("this material is no longer in the list".into()));
        };
        let made = match stability::aliquots(
            &source.stability,
            n,
            frozen_hours,
            after_thaw_hours,
            Utc::now(),
        ) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e.0)),
        };
        for (k, st) in made.into_iter().enumerate() {
            let (meta, _) = match super::new_record(technician) {
                Ok(m) => m,
                Err(e) => return set_message.set(Some(e)),
            };
            lab.materials.push(crate::lab::MaterialRecord {
                meta,
                kind: source.kind,
                name: format!("{}, frozen aliquot {}/{n}", source.name, k + 1),
                lot: source.lot.clone(),
                stability: st,
                reconstitution: None,
                discarded: None,
            });
        }
        trail.amend.run(super::Change { lab, reason: None });
    };
    view! {
        <details class="freeze">
            <summary data-testid="freeze-aliquots">"freeze aliquots"</summary>
            <label>"aliquots "<input size="3" data-testid="aliquot-count" on:input=move |ev| set_count.set(event_target_value(&ev)) /></label>
            " "<label>"stable frozen (days) "<input size="4" data-testid="aliquot-frozen-days" on:input=move |ev| set_frozen_days.set(event_target_value(&ev)) /></label>
            " "<label>"after thawing (hours) "<input size="4" data-testid="aliquot-thaw-hours" on:input=move |ev| set_thaw_hours.set(event_target_value(&ev)) /></label>
            " "<button data-testid="make-aliquots" on:click=make>"freeze"</button>
            {move || message.get().map(|m| view! { <p class="problem" data-testid="aliquot-message">{m}</p> })}
        </details>
    }
}

#[component]
fn NewMaterial(
    lab: ReadSignal<Option<super::SharedLab>>,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let (form, set_form) = signal(MaterialForm {
        kind: "reagent".into(),
        ..Default::default()
    });
    let (message, set_message) = signal::<Option<String>>(None);
    let input = move |name: &'static str, label: &'static str, placeholder: &'static str| {
        view! {
            <label>
                {label}
                <input
                    placeholder=placeholder
                    data-testid=format!("material-{name}")
                    on:input=move |ev| {
                        let v = event_target_value(&ev);
                        set_form.update(|f| match name {
                            "name" => f.name = v,
                            "lot" => f.lot = v,
                            "expiry" => f.expiry = v,
                            "days" => f.in_use_days = v,
                            "volume" => f.volume_ml = v,
                            "diluent" => f.diluent = v,
                            "diluent-lot" => f.diluent_lot = v,
                            _ => f.analytes = v,
                        })
                    }
                />
            </label>
        }
    };
    let add = move |_| {
        let (meta, now) = match super::new_record(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let initials = meta.by.clone();
        match form.get_untracked().into_material(meta, now) {
            Ok(m) => {
                let mut changed = lab
                    .get_untracked()
                    .map_or_else(|| Lab::empty("My lab"), |l| Lab::clone(&l));
                let name = m.name.clone();
                let what = match (m.stability.opened_at, &m.reconstitution) {
                    (None, _) => "received (not opened) now",
                    (Some(_), Some(_)) => "reconstituted now",
                    (Some(_), None) => "opened now",
                };
                changed.materials.push(m);
                save.run(changed);
                set_message.set(Some(format!("{name}: {what} by {initials}.")));
            }
            Err(e) => set_message.set(Some(e)),
        }
    };
    view! {
        <details class="new-material">
            <summary data-testid="new-material">"Record a material received, opened or reconstituted now"</summary>
            <div class="form grid">
                <label>
                    "Now "
                    <select data-testid="material-state" on:change=move |ev| set_form.update(|f| f.received_only = event_target_value(&ev) == "received")>
                        <option value="opened">"opened or reconstituted"</option>
                        <option value="received">"received, not opened yet"</option>
                    </select>
                </label>
                <label>
                    "Kind "
                    <select data-testid="material-kind" on:change=move |ev| set_form.update(|f| f.kind = event_target_value(&ev))>
                        <option value="reagent">"reagent"</option>
                        <option value="calibrator">"calibrator"</option>
                        <option value="control">"control"</option>
                    </select>
                </label>
                {input("name", "Name ", "Glucose reagent R1")}
                {input("lot", "Lot ", "DG-4471")}
                {input("expiry", "Maker's expiry ", "2027-05 or 2027-05-31")}
                {input("days", "Stable after opening, days ", "30")}
                {input("analytes", "Analytes with shorter stability ", "ALT 5; Bilirubin 2")}
                {input("volume", "Reconstituted with, mL ", "5")}
                {input("diluent", "Diluent ", "distilled water")}
                {input("diluent-lot", "Diluent lot ", "W-2611")}
                <button data-testid="add-material" on:click=add>"Record"</button>
                {move || message.get().map(|m| view! { <p class="outcome" data-testid="material-message">{m}</p> })}
            </div>
        </details>
    }
}

/// The materials an entry uses (of the given kinds), with the warnings for any past its
/// stability — for the material or for the test's analyte in it — and the box that
/// acknowledges them. The form that holds it checks again when it saves
/// (`crate::usage::warnings`) and keeps what was acknowledged on the entry.
#[component]
pub(super) fn MaterialsUsed(
    lab: super::SharedLab,
    test: crate::lab::TestSetup,
    kinds: Vec<crate::lab::MaterialKind>,
    chosen: RwSignal<Vec<String>>,
    acknowledged: RwSignal<bool>,
) -> impl IntoView {
    let offered: Vec<(String, String)> = lab
        .materials
        .iter()
        .filter(|m| kinds.contains(&m.kind) && m.in_use())
        .map(|m| (m.meta.id.clone(), format!("{} lot {}", m.name, m.lot)))
        .collect();
    if offered.is_empty() {
        return ().into_any();
    }
    let warnings = Memo::new(move |_| {
        let ids = chosen.get();
        crate::usage::warnings(&lab, &ids, &test, Utc::now(), &Local)
    });
    view! {
        <fieldset class="materials-used" data-testid="materials-used">
            <legend>"Materials used"</legend>
            {offered.into_iter().map(|(id, text)| {
                let for_check = id.clone();
                view! {
                    <label>
                        <input type="checkbox" data-testid="material-used"
                            prop:checked=move || chosen.with(|c| c.contains(&for_check))
                            on:change=move |ev| {
                                let on = event_target_checked(&ev);
                                let id = id.clone();
                                chosen.update(|c| {
                                    c.retain(|x| *x != id);
                                    if on {
                                        c.push(id);
                                    }
                                });
                                acknowledged.set(false);
                            } />
                        " "{text}
                    </label>
                    " "
                }
            }).collect_view()}
            {move || {
                let w = warnings.get();
                (!w.is_empty()).then(|| view! {
                    <div class="problem" data-testid="material-warnings" role="alert">
                        <ul>{w.into_iter().map(|line| view! { <li>{line}</li> }).collect_view()}</ul>
                        <label>
                            <input type="checkbox" data-testid="acknowledge-materials"
                                prop:checked=move || acknowledged.get()
                                on:change=move |ev| acknowledged.set(event_target_checked(&ev)) />
                            " I have read this and use them anyway (kept on this entry, with my initials)"
                        </label>
                    </div>
                })
            }}
        </fieldset>
    }
    .into_any()
}
