//! The set-up view: the lab's tests and their control levels, added through forms the
//! plain-Rust `entry` module checks; and the demo lab.

use leptos::prelude::*;

use crate::engine::calibration::ModelKind;
use crate::entry::{self, LevelForm, TestForm};
use crate::lab::Lab;

fn meta_or_message(technician: ReadSignal<String>) -> Result<crate::lab::RecordMeta, String> {
    super::new_record(technician).map(|(meta, _)| meta)
}

#[component]
pub fn SetupView(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
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
                        let levels = l
                            .levels_of(&t.meta.id)
                            .into_iter()
                            .map(|v| {
                                let text = format!("{} (lot {}): {} ± {} {}", v.name, v.lot, v.mean, v.sd, t.unit);
                                view! {
                                    <li data-testid="setup-level">
                                        {text}" "
                                        <super::records::HistoryButton id=v.meta.id.clone() />
                                        <CorrectLevel level=v.clone() />
                                    </li>
                                }
                            })
                            .collect_view();
                        view! {
                            <li data-testid="setup-test">
                                <strong>{format!("{} {}", t.code, t.name)}</strong>
                                {format!(" — {} nm, {}, {}", t.wavelength_nm, t.model.code(), t.unit)}" "
                                <super::records::HistoryButton id=t.meta.id.clone() />
                                <CorrectTest test=t.clone() />
                                <ul>{levels}</ul>
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
        let mut changed = lab
            .get_untracked()
            .map_or_else(|| Lab::empty(&name), |l| Lab::clone(&l));
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
        <Standards lab=lab save=save />
        <InstrumentChecks lab=lab save=save />
        <section class="card">
            <h3>"Demo lab"</h3>
            <p>
                "Load an invented hospital lab: ten tests (end-point, fixed-time and kinetic) with \
                 thirteen weeks of calibrations, QC runs, corrective actions, materials and \
                 instrument checks, ending this morning, to try every view. It is kept apart from your lab's own records: \
                 \"Back to my lab\" returns to them unchanged. Loading it again starts it afresh."
            </p>
            <button data-testid="load-demo" on:click=move |_| load_demo.run(())>"Load demo lab"</button>
        </section>
    }
}

/// The photometer's absorbance standards, as the lab's certificates give them.
/// How often each instrument check is due: days between checks, empty for none.
#[component]
fn InstrumentChecks(
    lab: ReadSignal<Option<super::SharedLab>>,
    save: Callback<Lab>,
) -> impl IntoView {
    use crate::lab::SCHEDULABLE_CHECKS;
    let stored = move |k: usize| {
        lab.with(|l| {
            l.as_ref()
                .and_then(|l| {
                    l.instrument_checks
                        .iter()
                        .find(|c| c.event == SCHEDULABLE_CHECKS[k] && c.every_days > 0)
                })
                .map(|c| c.every_days.to_string())
                .unwrap_or_default()
        })
    };
    let typed = RwSignal::new([None::<String>, None, None]);
    let (message, set_message) = signal(None::<String>);
    let save_checks = move |_| {
        let texts: Vec<String> = (0..SCHEDULABLE_CHECKS.len())
            .map(|k| {
                typed
                    .with_untracked(|t| t[k].clone())
                    .unwrap_or_else(|| stored(k))
            })
            .collect();
        match entry::check_schedule(&texts) {
            Ok(list) => {
                let Some(mut changed) = lab.get_untracked().map(|l| Lab::clone(&l)) else {
                    return set_message.set(Some("set up or load a lab first".into()));
                };
                changed.instrument_checks = list;
                save.run(changed);
                typed.set([None, None, None]);
                set_message.set(Some("check intervals saved".into()));
            }
            Err(e) => set_message.set(Some(e)),
        }
    };
    view! {
        <section class="card">
            <h3>"Instrument checks: how often"</h3>
            <p class="muted">"Days between checks (1 = every day; empty = not scheduled). Today's board \
                says which are due. The analyser's manual and the lab's policy decide the intervals."</p>
            <p class="form grid">
                {SCHEDULABLE_CHECKS.iter().enumerate().map(|(k, e)| view! {
                    <label>{format!("{} every ", e.words().split(" (").next().unwrap_or(e.words()))}
                        <input size="3" data-testid=format!("check-days-{}", e.code())
                            prop:value=move || typed.with(|t| t[k].clone()).unwrap_or_else(|| stored(k))
                            on:input=move |ev| typed.update(|t| t[k] = Some(event_target_value(&ev))) />
                        " days"
                    </label>
                }).collect_view()}
                <button data-testid="save-checks" on:click=save_checks>"Save intervals"</button>
            </p>
            {move || message.get().map(|m| view! { <p class="outcome" data-testid="checks-message">{m}</p> })}
        </section>
    }
}

#[component]
fn Standards(lab: ReadSignal<Option<super::SharedLab>>, save: Callback<Lab>) -> impl IntoView {
    let stored = move || {
        lab.with(|l| {
            l.as_ref()
                .map(|l| entry::absorbance_standards_text(&l.absorbance_standards))
                .unwrap_or_default()
        })
    };
    let (text, set_text) = signal(None::<String>);
    let (message, set_message) = signal(None::<String>);
    let shown = move || text.get().unwrap_or_else(stored);
    let save_standards = move |_| match entry::absorbance_standards(&shown()) {
        Ok(list) => {
            let Some(mut changed) = lab.get_untracked().map(|l| Lab::clone(&l)) else {
                return set_message.set(Some("set up or load a lab first".into()));
            };
            changed.absorbance_standards = list;
            save.run(changed);
            set_text.set(None);
            set_message.set(Some("standards saved".into()));
        }
        Err(e) => set_message.set(Some(e)),
    };
    view! {
        <section class="card">
            <h3>"Photometer check: absorbance standards"</h3>
            <p class="muted">"One per line: name; nm; expected absorbance; tolerance. \
                A reading outside expected ± tolerance fails the check and shows on the board."</p>
            <textarea rows="4" cols="48" data-testid="standards-text"
                prop:value=shown
                on:input=move |ev| set_text.set(Some(event_target_value(&ev)))></textarea>
            <p>
                <button data-testid="standards-example" on:click=move |_| {
                    set_text.set(Some(entry::absorbance_standards_text(&crate::lab::example_absorbance_standards())));
                    set_message.set(Some("Example values, from memory — verify against your certificate and replace them before saving.".into()));
                }>"Fill in an example set"</button>
                " "
                <button data-testid="save-standards" on:click=save_standards>"Save standards"</button>
            </p>
            {move || message.get().map(|m| view! { <p class="outcome" data-testid="standards-message">{m}</p> })}
        </section>
    }
}

#[component]
fn NewTest(
    lab: ReadSignal<Option<super::SharedLab>>,
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
        let mut changed = lab
            .get_untracked()
            .map_or_else(|| Lab::empty("My lab"), |l| Lab::clone(&l));
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
    lab: ReadSignal<Option<super::SharedLab>>,
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
        let Some(mut changed) = lab.get_untracked().map(|l| Lab::clone(&l)) else {
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

/// The reason line and buttons shared by the correction forms.
fn reason_line(
    set_reason: WriteSignal<String>,
    on_save: impl Fn(leptos::ev::MouseEvent) + 'static,
    message: ReadSignal<Option<String>>,
) -> impl IntoView {
    view! {
        <label>"Reason "<input data-testid="correction-reason" size="30"
            placeholder="why it is corrected"
            on:input=move |ev| set_reason.set(event_target_value(&ev)) /></label>
        " "<button data-testid="save-correction" on:click=on_save>"Save correction"</button>
        {move || message.get().map(|m| view! { <p class="problem" data-testid="correction-message">{m}</p> })}
    }
}

/// Correct a control level's name, lot or target; the reason is kept with the new
/// version and the earlier one stays in the record's history.
#[component]
fn CorrectLevel(level: crate::lab::ControlLevel) -> impl IntoView {
    let trail = expect_context::<super::Trail>();
    let (form, set_form) = signal(LevelForm {
        name: level.name.clone(),
        lot: level.lot.clone(),
        mean: level.mean.to_string(),
        sd: level.sd.to_string(),
    });
    let (reason, set_reason) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let save = move |_| {
        let why = reason.get_untracked();
        if why.trim().is_empty() {
            return set_message.set(Some("reason: say why the level is corrected".into()));
        }
        match form
            .get_untracked()
            .into_level(&level.test_id, level.meta.clone())
        {
            Ok(corrected) => {
                let Some(mut changed) = trail.current_lab() else {
                    return;
                };
                if let Some(l) = changed
                    .control_levels
                    .iter_mut()
                    .find(|l| l.meta.id == corrected.meta.id)
                {
                    *l = corrected;
                }
                set_message.set(None);
                trail.amend.run(super::Change {
                    lab: changed,
                    reason: Some(why),
                });
            }
            Err(e) => set_message.set(Some(e)),
        }
    };
    let input = move |name: &'static str| {
        view! {
            <input size="9" data-testid=format!("correct-level-{name}")
                prop:value=move || form.with(|f| match name {
                    "name" => f.name.clone(),
                    "lot" => f.lot.clone(),
                    "mean" => f.mean.clone(),
                    _ => f.sd.clone(),
                })
                on:input=move |ev| {
                    let v = event_target_value(&ev);
                    set_form.update(|f| match name {
                        "name" => f.name = v,
                        "lot" => f.lot = v,
                        "mean" => f.mean = v,
                        _ => f.sd = v,
                    })
                } />
        }
    };
    view! {
        <details class="correct">
            <summary data-testid="correct-level">"correct"</summary>
            <div class="form">
                {input("name")}" lot "{input("lot")}" mean "{input("mean")}" SD "{input("sd")}<br/>
                {reason_line(set_reason, save, message)}
            </div>
        </details>
    }
}

/// Correct a test's name, unit, wavelength or linearity limit, with a reason.
#[component]
fn CorrectTest(test: crate::lab::TestSetup) -> impl IntoView {
    let trail = expect_context::<super::Trail>();
    let (form, set_form) = signal(TestForm {
        code: test.code.clone(),
        name: test.name.clone(),
        unit: test.unit.clone(),
        mode: match test.mode {
            crate::lab::ReadingMode::EndPoint => "end-point",
            crate::lab::ReadingMode::FixedTime => "fixed-time",
            crate::lab::ReadingMode::Kinetic => "kinetic",
        }
        .into(),
        model: test.model.code().into(),
        wavelength_nm: test.wavelength_nm.to_string(),
        linearity_limit: test
            .linearity_limit
            .map(|v| v.to_string())
            .unwrap_or_default(),
        allowable_error_pct: test
            .allowable_error_pct
            .map(|v| v.to_string())
            .unwrap_or_default(),
        external_bias_pct: test
            .external_bias_pct
            .map(|v| v.to_string())
            .unwrap_or_default(),
        calibration_valid_days: test
            .calibration_valid_days
            .map(|v| v.to_string())
            .unwrap_or_default(),
        qc_runs_per_day: test
            .qc_runs_per_day
            .map(|v| v.to_string())
            .unwrap_or_default(),
    });
    let (reason, set_reason) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let save = move |_| {
        let why = reason.get_untracked();
        if why.trim().is_empty() {
            return set_message.set(Some("reason: say why the test is corrected".into()));
        }
        // Checked as a new test against the others (its own code is not a clash).
        let Some(lab) = trail.current_lab() else {
            return;
        };
        let mut others = lab.clone();
        others.tests.retain(|t| t.meta.id != test.meta.id);
        match form.get_untracked().into_test(&others, test.meta.clone()) {
            Ok(parsed) => {
                let mut corrected = test.clone();
                corrected.code = parsed.code;
                corrected.name = parsed.name;
                corrected.unit = parsed.unit;
                corrected.wavelength_nm = parsed.wavelength_nm;
                corrected.linearity_limit = parsed.linearity_limit;
                corrected.allowable_error_pct = parsed.allowable_error_pct;
                corrected.external_bias_pct = parsed.external_bias_pct;
                corrected.calibration_valid_days = parsed.calibration_valid_days;
                corrected.qc_runs_per_day = parsed.qc_runs_per_day;
                let mut changed = lab.clone();
                if let Some(t) = changed
                    .tests
                    .iter_mut()
                    .find(|t| t.meta.id == corrected.meta.id)
                {
                    *t = corrected;
                }
                set_message.set(None);
                trail.amend.run(super::Change {
                    lab: changed,
                    reason: Some(why),
                });
            }
            Err(e) => set_message.set(Some(e)),
        }
    };
    let input = move |name: &'static str| {
        view! {
            <input size="12" data-testid=format!("correct-test-{name}")
                prop:value=move || form.with(|f| match name {
                    "name" => f.name.clone(),
                    "unit" => f.unit.clone(),
                    "wavelength" => f.wavelength_nm.clone(),
                    "tea" => f.allowable_error_pct.clone(),
                    "bias" => f.external_bias_pct.clone(),
                    "valid-days" => f.calibration_valid_days.clone(),
                    "qc-per-day" => f.qc_runs_per_day.clone(),
                    _ => f.linearity_limit.clone(),
                })
                on:input=move |ev| {
                    let v = event_target_value(&ev);
                    set_form.update(|f| match name {
                        "name" => f.name = v,
                        "unit" => f.unit = v,
                        "wavelength" => f.wavelength_nm = v,
                        "tea" => f.allowable_error_pct = v,
                        "bias" => f.external_bias_pct = v,
                        "valid-days" => f.calibration_valid_days = v,
                        "qc-per-day" => f.qc_runs_per_day = v,
                        _ => f.linearity_limit = v,
                    })
                } />
        }
    };
    view! {
        <details class="correct">
            <summary data-testid="correct-test">"correct"</summary>
            <div class="form">
                "name "{input("name")}" unit "{input("unit")}" nm "{input("wavelength")}
                " linearity limit "{input("linearity")}<br/>
                "allowable total error, % "{input("tea")}" external scheme bias, % "{input("bias")}<br/>
                "a calibration is valid for (days) "{input("valid-days")}
                " QC runs a day "{input("qc-per-day")}
                <span class="muted">" (from the maker's instructions and the lab's QC policy; empty: no limit, once a day)"</span>
                <br/><label>"start from a published figure "
                    <select data-testid="correct-test-tea-suggestion" on:change=move |ev| {
                        let pick = event_target_value(&ev);
                        if let Some(s) = pick
                            .parse::<usize>()
                            .ok()
                            .and_then(|i| crate::engine::planning::ALLOWABLE_ERROR_SUGGESTIONS.get(i))
                        {
                            set_form.update(|f| f.allowable_error_pct = s.tea_pct.to_string());
                        }
                    }>
                        <option value="">"—"</option>
                        {crate::engine::planning::ALLOWABLE_ERROR_SUGGESTIONS
                            .iter()
                            .enumerate()
                            .map(|(i, s)| view! {
                                <option value=i.to_string()>
                                    {format!("{} {} % — {}", s.analyte, s.tea_pct, s.source)}
                                </option>
                            })
                            .collect_view()}
                    </select></label>
                <p class="muted">"Allowable total error is the lab's choice: a suggestion only fills \
                    the field, which stays editable. Check each figure against its current source."</p>
                {reason_line(set_reason, save, message)}
            </div>
        </details>
    }
}
