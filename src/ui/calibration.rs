//! The calibration view: each test's calibration in use and its trend, and the form for
//! a new calibration with a live fit and verdict from the engine.

use chrono::Local;
use leptos::prelude::*;

use crate::engine::acceptance::{self, CalibrationReadings, Outcome, Verdict};
use crate::engine::calibration::{self, Fit, ModelKind, ReplicateUse, Weighting};
use crate::engine::charts::Trend;
use crate::engine::qcstats::summarize;
use crate::entry;
use crate::lab::{CalibrationRecord, CalibratorReading, Lab, TestSetup};

/// Everything the view shows for one test.
#[component]
pub fn CalibrationView(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// Saves a changed lab.
    save: Callback<Lab>,
    /// The technician's initials.
    technician: ReadSignal<String>,
) -> impl IntoView {
    super::per_test(lab, move |l, t| {
        view! { <TestCalibration lab=l.clone() test=t.clone() save=save technician=technician /> }
            .into_any()
    })
}

fn outcome_words(o: Outcome) -> &'static str {
    match o {
        Outcome::Accepted => "accepted",
        Outcome::AcceptedWithRemarks => "accepted with remarks",
        Outcome::Rejected => "rejected: do not use",
    }
}

fn outcome_class(o: Outcome) -> &'static str {
    match o {
        Outcome::Accepted => "outcome-ok",
        Outcome::AcceptedWithRemarks => "outcome-remark",
        Outcome::Rejected => "outcome-rejected",
    }
}

/// A test's calibration history (newest first) and the form for a new one.
#[component]
fn TestCalibration(
    lab: super::SharedLab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let history: Vec<CalibrationRecord> = lab
        .calibrations_of(&test.meta.id)
        .into_iter()
        .cloned()
        .collect();
    let rows = history
        .iter()
        .enumerate()
        .rev()
        .map(|(i, c)| {
            let blank = summarize(&c.blank).map_or("–".into(), |s| format!("{:.4}", s.mean));
            let top = c
                .calibrators
                .iter()
                .max_by(|a, b| a.conc.total_cmp(&b.conc))
                .and_then(|cal| summarize(&cal.absorbances))
                .map_or("–".into(), |s| format!("{:.4}", s.mean));
            let (value, what) = acceptance::sensitivity(&c.curve);
            let change = history[..i]
                .iter()
                .rev()
                .find(|p| p.usable())
                .and_then(|p| acceptance::change_pct(value, acceptance::sensitivity(&p.curve).0))
                .map_or("–".into(), |v| format!("{v:+.1} %"));
            view! {
                <tr data-testid="calibration-row">
                    <td>{c.performed_at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()}</td>
                    <td>{c.meta.by.clone()}</td>
                    <td>{blank}</td>
                    <td>{top}</td>
                    <td>{format!("{what} {value:.4}")}</td>
                    <td>{change}</td>
                    <td class=outcome_class(c.outcome)>{outcome_words(c.outcome)}
                        {(!c.acknowledged.is_empty()).then(|| view! {
                            <p class="problem" data-testid="calibration-acknowledged">
                                {format!("Used although warned (acknowledged by {}): {}", c.meta.by, c.acknowledged.join("; "))}
                            </p>
                        })}
                    </td>
                    <td class="no-print">
                        <super::records::HistoryButton id=c.meta.id.clone() />" "
                        <super::records::VoidButton id=c.meta.id.clone() />
                    </td>
                </tr>
            }
        })
        .collect_view();
    let empty = history.is_empty();
    let blanks: Vec<f64> = history
        .iter()
        .map(|c| summarize(&c.blank).map_or(f64::NAN, |s| s.mean))
        .collect();
    let blank_range = test
        .acceptance
        .blank_absorbance
        .map(|c| (c.limit.low, c.limit.high));
    let sensitivities: Vec<f64> = history
        .iter()
        .map(|c| acceptance::sensitivity(&c.curve).0)
        .collect();
    let what = history
        .first()
        .map_or("sensitivity", |c| acceptance::sensitivity(&c.curve).1);
    let trends: Vec<Trend> = [
        Trend::new("Reagent blank absorbance", &blanks, blank_range),
        Trend::new(&format!("Sensitivity ({what})"), &sensitivities, None),
    ]
    .into_iter()
    .flatten()
    .collect();
    view! {
        <section class="card wide" data-testid=format!("calibration-{}", test.code)>
            <h3>{format!("{} {} ({} nm, {})", test.code, test.name, test.wavelength_nm, test.unit)}</h3>
            <Show when=move || empty>
                <p class="empty">"No calibrations recorded yet."</p>
            </Show>
            {(!empty).then(|| view! {
                <table>
                    <thead>
                        <tr>
                            <th>"When"</th><th>"By"</th><th>"Reagent blank"</th>
                            <th>"Top calibrator"</th><th>"Sensitivity"</th><th>"Change"</th><th>"Verdict"</th>
                            <th class="no-print">"Record"</th>
                        </tr>
                    </thead>
                    <tbody>{rows}</tbody>
                </table>
            })}
            <div class="trends">
                {trends.into_iter().map(|t| view! { <super::chart::TrendChart series=t /> }).collect_view()}
            </div>
            <NewCalibration lab=lab.clone() test=test.clone() save=save technician=technician />
        </section>
    }
}

/// The result of the form so far.
#[derive(Clone, PartialEq)]
struct Preview {
    readings: CalibrationReadings,
    fit: Result<Fit, String>,
    verdict: Option<Verdict>,
    /// The curve in use, drawn beside the new one.
    previous: Option<crate::engine::calibration::Curve>,
}

fn preview(
    lab: &Lab,
    test: &TestSetup,
    model: ModelKind,
    weighting: Weighting,
    replicates: ReplicateUse,
    blank_text: &str,
    cal_text: &str,
) -> Result<Preview, String> {
    let blank = entry::numbers(blank_text, "reagent blank")?;
    let calibrators = entry::calibrator_lines(cal_text)?;
    if calibrators.is_empty() {
        return Err(
            "enter the calibrator readings: one line per calibrator, \"conc: abs abs\"".into(),
        );
    }
    let points = calibration::blank_corrected(&blank, &calibrators);
    let fit = calibration::fit(model, weighting, replicates, &points);
    let readings = CalibrationReadings { blank, calibrators };
    let previous = lab.current_calibration(&test.meta.id).map(|c| c.curve);
    let verdict = Some(acceptance::judge(
        &readings,
        fit.as_ref(),
        previous.as_ref(),
        &test.acceptance,
    ));
    Ok(Preview {
        readings,
        fit: fit.map_err(|e| e.message),
        verdict,
        previous,
    })
}

#[component]
fn NewCalibration(
    lab: super::SharedLab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let (model, set_model) = signal(test.model);
    let (weighting, set_weighting) = signal(test.weighting);
    let (blank_text, set_blank_text) = signal(String::new());
    let (cal_text, set_cal_text) = signal(String::new());
    let (message, set_message) = signal::<Option<String>>(None);
    let replicates = test.replicates;
    let lab_for_preview = lab.clone();
    let test_for_preview = test.clone();
    let result = Memo::new(move |_| {
        let (b, c) = (blank_text.get(), cal_text.get());
        if b.trim().is_empty() && c.trim().is_empty() {
            return None;
        }
        Some(preview(
            &lab_for_preview,
            &test_for_preview,
            model.get(),
            weighting.get(),
            replicates,
            &b,
            &c,
        ))
    });
    let test_id = test.meta.id.clone();
    let chosen = RwSignal::new(Vec::<String>::new());
    let acknowledged = RwSignal::new(false);
    let test_for_check = test.clone();
    let lab_for_materials = lab.clone();
    let on_save = move |_| {
        let (meta, now) = match super::new_record(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let Some(Ok(p)) = result.get_untracked() else {
            set_message.set(Some(
                "nothing to save: enter readings that can be fitted".into(),
            ));
            return;
        };
        let (Ok(fit), Some(verdict)) = (p.fit, p.verdict) else {
            set_message.set(Some(
                "the curve could not be fitted, so there is nothing to save".into(),
            ));
            return;
        };
        let used = chosen.get_untracked();
        let warned = crate::usage::warnings(&lab, &used, &test_for_check, now, &chrono::Local);
        if let Some(refused) = crate::usage::refusal(&warned, acknowledged.get_untracked()) {
            return set_message.set(Some(refused.into()));
        }
        let record = CalibrationRecord {
            meta,
            test_id: test_id.clone(),
            performed_at: now,
            model: model.get_untracked(),
            weighting: weighting.get_untracked(),
            replicates,
            blank: p.readings.blank,
            calibrators: p
                .readings
                .calibrators
                .into_iter()
                .map(|(conc, absorbances)| CalibratorReading { conc, absorbances })
                .collect(),
            curve: fit.curve,
            outcome: verdict.outcome,
            findings: verdict.findings.iter().map(|f| f.message.clone()).collect(),
            materials_used: used,
            acknowledged: warned,
        };
        let mut changed = super::lab_to_change(&lab);
        changed.calibrations.push(record);
        save.run(changed);
        set_message.set(Some(format!("saved: {}", outcome_words(verdict.outcome))));
    };
    let code = test.code.clone();
    let shown = move || {
        result.with(|r| match r {
            None => {
                view! { <p class="muted">"Enter the reagent blank and calibrator absorbances."</p> }
                    .into_any()
            }
            Some(Err(e)) => {
                view! { <p class="problem" data-testid="calibration-input-problem">{e.clone()}</p> }
                    .into_any()
            }
            Some(Ok(p)) => preview_view(p).into_any(),
        })
    };
    view! {
        <details class="new-calibration">
            <summary data-testid=format!("new-calibration-{code}")>"New calibration"</summary>
            <div class="form">
                <label>
                    "Model "
                    <select on:change=move |ev| {
                        if let Some(m) = ModelKind::from_code(&event_target_value(&ev)) {
                            set_model.set(m);
                        }
                    }>
                        {ModelKind::ALL
                            .into_iter()
                            .map(|m| view! { <option value=m.code() selected=move || model.get() == m>{m.code()}</option> })
                            .collect_view()}
                    </select>
                </label>
                <label>
                    " Weighting "
                    <select on:change=move |ev| {
                        if let Some(w) = Weighting::from_code(&event_target_value(&ev)) {
                            set_weighting.set(w);
                        }
                    }>
                        {[Weighting::None, Weighting::InvX, Weighting::InvX2, Weighting::InvY, Weighting::InvY2]
                            .into_iter()
                            .map(|w| view! { <option value=w.code() selected=move || weighting.get() == w>{w.code()}</option> })
                            .collect_view()}
                    </select>
                </label>
                <label class="block">
                    "Reagent blank absorbances"
                    <input data-testid="calibration-blank" placeholder="0.045 0.046"
                        on:input=move |ev| set_blank_text.set(event_target_value(&ev)) />
                </label>
                <label class="block">
                    "Calibrators, one per line: concentration, then absorbances"
                    <textarea data-testid="calibration-readings" rows="4" placeholder="100: 0.465 0.462"
                        on:input=move |ev| set_cal_text.set(event_target_value(&ev))></textarea>
                </label>
                {shown}
                <super::materials::MaterialsUsed lab=lab_for_materials test=test.clone()
                    kinds=vec![crate::lab::MaterialKind::Calibrator, crate::lab::MaterialKind::Reagent]
                    chosen=chosen acknowledged=acknowledged />
                <button data-testid="save-calibration" on:click=on_save>"Save calibration"</button>
                {move || message.get().map(|m| view! { <p class="outcome" data-testid="calibration-message">{m}</p> })}
            </div>
        </details>
    }
}

fn preview_view(p: &Preview) -> impl IntoView {
    let fit_part = match &p.fit {
        Err(e) => {
            view! { <p class="problem">{format!("The curve cannot be fitted: {e}")}</p> }.into_any()
        }
        Ok(f) => {
            let params: Vec<String> = f
                .model
                .param_names()
                .iter()
                .zip(f.curve.param_values())
                .zip(&f.std_errors)
                .map(|((n, v), se)| match se {
                    Some(se) => format!("{n} = {v:.6} (SE {se:.2e})"),
                    None => format!("{n} = {v:.6}"),
                })
                .collect();
            let r2 = f
                .r_squared
                .map_or(String::new(), |r| format!(", R² {r:.5}"));
            let rows = f
                .points
                .iter()
                .map(|pt| {
                    view! {
                        <tr>
                            <td>{pt.conc}</td>
                            <td>{format!("{:.4}", pt.signal)}</td>
                            <td>{pt.back_calculated.map_or("–".into(), |b| format!("{b:.3}"))}</td>
                            <td>{pt.recovery_pct.map_or("–".into(), |r| format!("{r:.1} %"))}</td>
                        </tr>
                    }
                })
                .collect_view();
            let plot = crate::engine::charts::CurvePlot::new(
                "This calibration, before it is saved",
                f,
                p.previous.as_ref(),
            );
            view! {
                {plot.map(|series| view! { <super::chart::CurveChart series=series /> })}
                <p data-testid="calibration-params">{format!("{}{r2}", params.join(", "))}</p>
                <table>
                    <thead><tr><th>"Conc"</th><th>"Net signal"</th><th>"Back-calculated"</th><th>"Recovery"</th></tr></thead>
                    <tbody>{rows}</tbody>
                </table>
            }
            .into_any()
        }
    };
    let verdict = p.verdict.as_ref().map(|v| {
        let outcome = v.outcome;
        view! {
            <p class=outcome_class(outcome)>
                <strong data-testid="calibration-verdict">{outcome_words(outcome)}</strong>
            </p>
            <ul>{v.findings.iter().map(|f| view! { <li>{f.message.clone()}</li> }).collect_view()}</ul>
        }
    });
    view! {
        {fit_part}
        {verdict}
    }
}
