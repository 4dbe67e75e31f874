//! The set-up view: the lab's tests and their control levels, added through forms the
//! plain-Rust `entry` module checks; and the demo lab.

use leptos::prelude::*;

use crate::engine::calibration::ModelKind;
use crate::entry::{LevelForm, TestForm};
use crate::lab::Lab;

fn meta_or_message(technician: ReadSignal<String>) -> Result<crate::lab::RecordMeta, String> {
    super::new_record(technician).map(|(meta, _)| meta)
}

#[component]
pub fn SetupView(
    /// The lab being worked on.
    lab: ReadSignal<Option<Lab>>,
    /// Saves a changed lab.
    save: Callback<Lab>,
    /// The technician's initials.
    technician: ReadSignal<String>,
    /// Loads the demo lab.
    load_demo: Callback<()>,
) -> impl IntoView {
    let tests = move || {
        lab.with(|l| {
            l.as_ref().map(|l| {
                l.tests
                    .iter()
                    .map(|t| {
                        let levels: Vec<String> = l
                            .levels_of(&t.meta.id)
                            .iter()
                            .map(|v| format!("{} (lot {}): {} ± {} {}", v.name, v.lot, v.mean, v.sd, t.unit))
                            .collect();
                        view! {
                            <li data-testid="setup-test">
                                <strong>{format!("{} {}", t.code, t.name)}</strong>
                                {format!(" — {} nm, {}, {}", t.wavelength_nm, t.model.code(), t.unit)}
                                <ul>{levels.into_iter().map(|v| view! { <li>{v}</li> }).collect_view()}</ul>
                                <NewLevel lab=lab save=save technician=technician test_id=t.meta.id.clone() code=t.code.clone() />
                            </li>
                        }
                    })
                    .collect_view()
            })
        })
    };
    let rename = move |ev: leptos::ev::Event| {
        let name = event_target_value(&ev).trim().to_string();
        if name.is_empty() {
            return;
        }
        let mut changed = lab.get_untracked().unwrap_or_else(|| Lab::empty(&name));
        changed.lab_name = name;
        save.run(changed);
    };
    let lab_name = move || lab.with(|l| l.as_ref().map(|l| l.lab_name.clone()).unwrap_or_default());
    view! {
        <section class="card wide">
            <label>
                "Lab name "
                <input size="40" data-testid="lab-name-input" placeholder="District hospital laboratory"
                    prop:value=lab_name on:change=rename />
            </label>
            <h3>"Tests"</h3>
            <ul class="setup-tests">{tests}</ul>
            <NewTest lab=lab save=save technician=technician />
        </section>
        <section class="card">
            <h3>"Demo lab"</h3>
            <p>
                "Load an invented district-hospital lab with three tests, calibrations, QC history \
                 and materials, to try every view. It replaces the lab saved in this browser."
            </p>
            <button data-testid="load-demo" on:click=move |_| load_demo.run(())>"Load demo lab"</button>
        </section>
    }
}

#[component]
fn NewTest(
    lab: ReadSignal<Option<Lab>>,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let (form, set_form) = signal(TestForm {
        mode: "end-point".into(),
        model: "factor".into(),
        ..Default::default()
    });
    let (message, set_message) = signal::<Option<String>>(None);
    let field = move |name: &'static str, label: &'static str, placeholder: &'static str| {
        view! {
            <label>
                {label}
                <input
                    data-testid=format!("test-{name}")
                    placeholder=placeholder
                    prop:value=move || form.with(|f| match name {
                        "code" => f.code.clone(),
                        "name" => f.name.clone(),
                        "unit" => f.unit.clone(),
                        "wavelength" => f.wavelength_nm.clone(),
                        _ => f.linearity_limit.clone(),
                    })
                    on:input=move |ev| {
                        let v = event_target_value(&ev);
                        set_form.update(|f| match name {
                            "code" => f.code = v,
                            "name" => f.name = v,
                            "unit" => f.unit = v,
                            "wavelength" => f.wavelength_nm = v,
                            _ => f.linearity_limit = v,
                        })
                    }
                />
            </label>
        }
    };
    let add = move |_| {
        let meta = match meta_or_message(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let mut changed = lab.get_untracked().unwrap_or_else(|| Lab::empty("My lab"));
        match form.get_untracked().into_test(&changed, meta) {
            Ok(t) => {
                let code = t.code.clone();
                changed.tests.push(t);
                save.run(changed);
                set_form.set(TestForm {
                    mode: "end-point".into(),
                    model: "factor".into(),
                    ..Default::default()
                });
                set_message.set(Some(format!("{code} added. Now add its control levels.")));
            }
            Err(e) => set_message.set(Some(e)),
        }
    };
    view! {
        <details class="new-test">
            <summary data-testid="new-test">"Add a test"</summary>
            <div class="form grid">
                {field("code", "Code ", "GLU")}
                {field("name", "Name ", "Glucose (GOD-PAP)")}
                {field("unit", "Unit ", "mg/dL")}
                {field("wavelength", "Wavelength, nm ", "505")}
                {field("linearity", "Linearity limit ", "400")}
                <label>
                    "Reading "
                    <select data-testid="test-mode" on:change=move |ev| set_form.update(|f| f.mode = event_target_value(&ev))>
                        <option value="end-point">"end-point"</option>
                        <option value="fixed-time">"fixed-time"</option>
                        <option value="kinetic">"kinetic"</option>
                    </select>
                </label>
                <label>
                    "Calibration "
                    <select data-testid="test-model" on:change=move |ev| set_form.update(|f| f.model = event_target_value(&ev))>
                        {ModelKind::ALL.into_iter().map(|m| view! { <option value=m.code()>{m.code()}</option> }).collect_view()}
                    </select>
                </label>
                <button data-testid="add-test" on:click=add>"Add test"</button>
                {move || message.get().map(|m| view! { <p class="outcome" data-testid="setup-message">{m}</p> })}
            </div>
        </details>
    }
}

#[component]
fn NewLevel(
    lab: ReadSignal<Option<Lab>>,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
    test_id: String,
    code: String,
) -> impl IntoView {
    let (form, set_form) = signal(LevelForm::default());
    let (message, set_message) = signal::<Option<String>>(None);
    let add = move |_| {
        let meta = match meta_or_message(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let Some(mut changed) = lab.get_untracked() else {
            return;
        };
        match form.get_untracked().into_level(&test_id, meta) {
            Ok(level) => {
                changed.control_levels.push(level);
                save.run(changed);
            }
            Err(e) => set_message.set(Some(e)),
        }
    };
    let input = move |name: &'static str, placeholder: &'static str| {
        view! {
            <input
                size="9"
                placeholder=placeholder
                data-testid=format!("level-{name}")
                on:input=move |ev| {
                    let v = event_target_value(&ev);
                    set_form.update(|f| match name {
                        "name" => f.name = v,
                        "lot" => f.lot = v,
                        "mean" => f.mean = v,
                        _ => f.sd = v,
                    })
                }
            />
        }
    };
    view! {
        <details class="new-level">
            <summary data-testid=format!("new-level-{code}")>"Add a control level"</summary>
            <div class="form">
                {input("name", "Normal")}" "{input("lot", "lot")}" mean "{input("mean", "95")}" SD "{input("sd", "2.8")}" "
                <button data-testid="add-level" on:click=add>"Add level"</button>
                {move || message.get().map(|m| view! { <p class="problem" data-testid="level-message">{m}</p> })}
            </div>
        </details>
    }
}
