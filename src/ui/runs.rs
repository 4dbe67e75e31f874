//! The QC runs view: each test's runs, newest first, with the engine's decision, and
//! the form for a new run whose decision is shown before it is saved.

use chrono::Local;
use leptos::prelude::*;

use crate::corrective::{self, RerunGate};
use crate::engine::calibration::ReportableRange;
use crate::engine::qc::{self, Decision, RunVerdict};
use crate::engine::readings::{KineticPoint, KineticSettings};
use crate::engine::results::{sample_result, Disposition, SampleReading, SampleResult};
use crate::entry;
use crate::lab::{ControlRun, CorrectiveAction, Lab, ReadingMode, TestSetup};
use crate::period::Period;

#[component]
pub fn RunsView(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
    /// Saves a changed lab.
    save: Callback<Lab>,
    /// The technician's initials.
    technician: ReadSignal<String>,
) -> impl IntoView {
    // The period shown: this month until another is chosen.
    let period = RwSignal::new(Period::month_of(chrono::Utc::now(), &Local));
    view! {
        <super::PeriodPicker period=period testid="runs-period" />
        {super::per_test(lab, move |l, t| {
            view! { <TestRuns lab=l.clone() test=t.clone() save=save technician=technician period=period /> }
                .into_any()
        })}
    }
}

pub(super) fn decision_words(d: Decision) -> &'static str {
    match d {
        Decision::Accept => "accept",
        Decision::Warning => "warning: inspect before releasing",
        Decision::Reject => "reject: hold patient results",
    }
}

/// One test's QC runs, newest first, each with the engine's decision.
#[component]
fn TestRuns(
    lab: super::SharedLab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
    period: RwSignal<Period>,
) -> impl IntoView {
    let history = lab.control_history(&test.meta.id);
    let names: Vec<String> = history.levels.iter().map(|l| l.name.clone()).collect();
    let level_ids: Vec<String> = history.levels.iter().map(|l| l.meta.id.clone()).collect();
    // Run times, named as dates only where a reason cites them.
    let run_dates: Vec<chrono::DateTime<chrono::Utc>> =
        history.runs.iter().map(|r| r.run_at).collect();
    // Every run is judged with its whole history; only the chosen month's are drawn.
    let judged = super::judged().get_untracked().0;
    let test_id = test.meta.id.clone();
    let total = history.runs.len();
    let lab_for_rows = lab.clone();
    let targets = history.targets.clone();
    // Where the runs are in the shared lab (not copies of them), oldest first.
    let positions = history.positions.clone();
    let values = history.values.clone();
    drop(history);
    let names_for_rows = names.clone();
    let dates_for_rows = run_dates.clone();
    let rows = move || {
        let month = period.get();
        let within = in_period(month);
        let lab = &lab_for_rows;
        let (names, history_targets, run_dates) = (&names_for_rows, &targets, &dates_for_rows);
        match judged.verdicts(&test_id) {
        Err(e) => view! { <tr><td colspan="4">{format!("QC cannot be evaluated: {e}")}</td></tr> }.into_any(),
        Ok(verdicts) => positions
            .iter()
            .map(|&k| &lab.control_runs[k])
            .zip(&values)
            .zip(verdicts.iter().cloned())
            .filter(|((run, _), _)| within(run.run_at))
            .rev()
            .map(|((run, values), verdict)| {
                let shown = results_text(values, history_targets);
                let action = corrective_view(lab, run, verdict.decision, save, technician);
                view! {
                    <tr class=format!("decision-{}", verdict.decision.code()) data-testid="qc-run">
                        <td>{run.run_at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()}</td>
                        <td>{run.meta.by.clone()}</td>
                        <td>{shown}</td>
                        <td>{verdict_view(&verdict, names, run_dates)}{action}</td>
                        <td class="no-print">
                            <super::records::HistoryButton id=run.meta.id.clone() />
                            " "
                            <super::records::VoidButton id=run.meta.id.clone() />
                        </td>
                    </tr>
                }
            })
            .collect_view()
            .into_any(),
        }
    };
    let shown_count = {
        let runs = run_dates.clone();
        move || {
            let month = period.get();
            let within = in_period(month);
            let n = runs.iter().filter(|t| within(**t)).count();
            format!("{n} run(s) in {} of {total} recorded.", month.label())
        }
    };
    let rules: Vec<&str> = test.qc_rules.iter().map(|r| r.rule.code()).collect();
    let empty = total == 0;
    let summary = format!("Levels: {}. Rules: {}.", names.join(", "), rules.join(", "));
    view! {
        <section class="card wide" data-testid=format!("runs-{}", test.code)>
            <h3>{format!("{} {}", test.code, test.name)}</h3>
            <p class="muted">{summary}</p>
            <NewRun lab=lab.clone() test=test.clone() save=save technician=technician
                names=names.clone() level_ids=level_ids dates=run_dates />
            <SampleCalculator lab=lab.clone() test=test.clone() save=save technician=technician />
            <Show when=move || empty>
                <p class="empty">"No QC runs recorded yet."</p>
            </Show>
            <p class="muted" data-testid="runs-shown">{shown_count}</p>
            <table>
                <thead><tr><th>"Run"</th><th>"By"</th><th>"Control results"</th><th>"Decision"</th><th class="no-print">"Record"</th></tr></thead>
                <tbody>{rows}</tbody>
            </table>
        </section>
    }
}

/// Under a run's decision: the corrective action recorded for a rejected run, or the
/// form to record it; and for a re-run, the action it follows.
fn corrective_view(
    lab: &super::SharedLab,
    run: &ControlRun,
    decision: Decision,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let when = |t: chrono::DateTime<chrono::Utc>| {
        t.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()
    };
    let follows = run.after_action.as_ref().and_then(|id| {
        lab.corrective_actions.iter().find(|a| &a.meta.id == id).map(|a| {
            view! { <p class="muted" data-testid="rerun-after">{format!("re-run after the corrective action of {}", when(a.at))}</p> }
        })
    });
    let answer = (decision == Decision::Reject).then(|| match corrective::action_for(lab, &run.meta.id) {
        Some(a) => view! {
            <p class="action-taken" data-testid="action-taken">
                {format!("Corrective action ({}, {}): found: {} — done: {}", a.meta.by, when(a.at), a.found, a.done)}
            </p>
        }
        .into_any(),
        None => view! {
            <ActionForm lab=lab.clone() test_id=run.test_id.clone() run_id=run.meta.id.clone() save=save technician=technician />
        }
        .into_any(),
    });
    let acknowledged = (!run.acknowledged.is_empty()).then(|| {
        view! {
            <p class="problem" data-testid="run-acknowledged">
                {format!("Used although warned (acknowledged by {}): {}", run.meta.by, run.acknowledged.join("; "))}
            </p>
        }
    });
    (follows, answer, acknowledged)
}

/// Record what was found and what was done after a rejected run.
#[component]
fn ActionForm(
    lab: super::SharedLab,
    test_id: String,
    run_id: String,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let (found, set_found) = signal(String::new());
    let (done, set_done) = signal(String::new());
    let (message, set_message) = signal(None::<String>);
    let on_save = move |_| {
        let (meta, now) = match super::new_record(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let action = CorrectiveAction {
            meta,
            test_id: test_id.clone(),
            run_id: run_id.clone(),
            at: now,
            found: found.get_untracked().trim().to_string(),
            done: done.get_untracked().trim().to_string(),
        };
        if let Err(e) = crate::lab::check_record(&action) {
            return set_message.set(Some(e));
        }
        let mut changed = super::lab_to_change(&lab);
        changed.corrective_actions.push(action);
        save.run(changed);
    };
    view! {
        <details class="corrective" open>
            <summary data-testid="action-open">"No corrective action recorded: record one before the re-run"</summary>
            <div class="form">
                <label>"What was found "<input size="30" data-testid="action-found"
                    placeholder="cause, or what was checked"
                    on:input=move |ev| set_found.set(event_target_value(&ev)) /></label>
                " "
                <label>"What was done "<input size="30" data-testid="action-done"
                    placeholder="e.g. new reagent bottle, recalibrated"
                    on:input=move |ev| set_done.set(event_target_value(&ev)) /></label>
                " "
                <button data-testid="save-action" on:click=on_save>"Save corrective action"</button>
                {move || message.get().map(|m| view! { <p class="problem" data-testid="action-message">{m}</p> })}
            </div>
        </details>
    }
}

fn results_text(values: &[Option<f64>], targets: &[qc::LevelTarget]) -> String {
    values
        .iter()
        .zip(targets)
        .map(|(v, t)| match v {
            Some(v) => format!(
                "{v} ({} SD)",
                crate::engine::readings::fixed(qc::z_score(*v, *t), 1, true)
            ),
            None => "not run".into(),
        })
        .collect::<Vec<_>>()
        .join(" · ")
}

/// Whether an instant falls in the period (in the PC's zone), by comparing instants.
pub(super) fn in_period(p: Period) -> impl Fn(chrono::DateTime<chrono::Utc>) -> bool {
    let window = p.instants(&Local);
    move |t| window.is_some_and(|(from, to)| from <= t && t < to)
}

/// The decision and its reasons; a run the reasons cite is named by its date (`runs[r]`),
/// or "this run" past the history (a new run not saved yet).
fn verdict_view(
    verdict: &RunVerdict,
    names: &[String],
    runs: &[chrono::DateTime<chrono::Utc>],
) -> impl IntoView {
    let why: Vec<String> = verdict
        .violations
        .iter()
        .map(|v| {
            v.explain(names, |r| {
                runs.get(r).map_or_else(
                    || "this run".into(),
                    |t| t.with_timezone(&Local).format("%d %b").to_string(),
                )
            })
        })
        .collect();
    view! {
        <strong data-testid="qc-decision">{decision_words(verdict.decision)}</strong>
        {(!why.is_empty()).then(|| view! {
            <ul>{why.into_iter().map(|w| view! { <li>{w}</li> }).collect_view()}</ul>
        })}
    }
}

/// Values typed for a new run, one text per level; empty = level not run.
fn parse_run(texts: &[String], names: &[String]) -> Result<Vec<Option<f64>>, String> {
    texts
        .iter()
        .zip(names)
        .map(|(t, n)| {
            let v = entry::numbers(t, n)?;
            match v.as_slice() {
                [] => Ok(None),
                [x] => Ok(Some(*x)),
                _ => Err(format!("{n}: one result per level and run")),
            }
        })
        .collect()
}

/// The form for a new run of one test, its decision shown before it is saved.
#[component]
fn NewRun(
    lab: super::SharedLab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
    /// The test's control levels (names and ids, in set-up order).
    names: Vec<String>,
    level_ids: Vec<String>,
    /// The times of the test's runs, oldest first (a reason names a run by its date).
    dates: Vec<chrono::DateTime<chrono::Utc>>,
) -> impl IntoView {
    let lab_for_materials = lab.clone();
    let (texts, set_texts) = signal(vec![String::new(); names.len()]);
    // Held here, not only in the page: a redraw after any save starts the form closed
    // and empty (a re-run after a corrective action is measured afresh).
    let (open, set_open) = signal(false);
    let (message, set_message) = signal::<Option<String>>(None);
    let judged = super::judged().get_untracked().0;
    let (judged_for_preview, test_for_preview) = (judged.clone(), test.meta.id.clone());
    let names_for_preview = names.clone();
    // The new run judged with the history before it.
    let preview = Memo::new(move |_| {
        let t = texts.get();
        if t.iter().all(|s| s.trim().is_empty()) {
            return None;
        }
        Some(parse_run(&t, &names_for_preview).and_then(|values| {
            let verdict = match judged_for_preview.test(&test_for_preview) {
                Some(judge) => judge.judge_next(&values),
                None => Err(qc::QcError("the test is not in this lab".into())),
            };
            verdict.map_err(|e| e.0).map(|verdict| (values, verdict))
        }))
    });
    let test_id = test.meta.id.clone();
    let chosen = RwSignal::new(Vec::<String>::new());
    let acknowledged = RwSignal::new(false);
    let test_for_check = test.clone();
    let gate = corrective::rerun_gate(&lab, &judged, &test.meta.id);
    let blocked = gate.refusal();
    let on_save = move |_| {
        if let Some(refused) = gate.refusal() {
            return set_message.set(Some(refused));
        }
        let (meta, now) = match super::new_record(technician) {
            Ok(m) => m,
            Err(e) => return set_message.set(Some(e)),
        };
        let Some(Ok((values, verdict))) = preview.get_untracked() else {
            set_message.set(Some("enter at least one control result first".into()));
            return;
        };
        let used = chosen.get_untracked();
        let warned = crate::usage::warnings(&lab, &used, &test_for_check, now, &Local);
        if let Some(refused) = crate::usage::refusal(&warned, acknowledged.get_untracked()) {
            return set_message.set(Some(refused.into()));
        }
        let mut changed = super::lab_to_change(&lab);
        changed.control_runs.push(ControlRun {
            meta,
            test_id: test_id.clone(),
            run_at: now,
            level_ids: level_ids.clone(),
            values,
            after_action: match &gate {
                RerunGate::After { action_id } => Some(action_id.clone()),
                _ => None,
            },
            materials_used: used,
            acknowledged: warned,
        });
        save.run(changed);
        set_message.set(Some(format!(
            "run saved: {}",
            decision_words(verdict.decision)
        )));
    };
    let names_for_inputs = names.clone();
    let names_for_verdict = names.clone();
    let code = test.code.clone();
    let unit = test.unit.clone();
    view! {
        <details class="new-run" prop:open=move || open.get()
            on:toggle=move |ev| set_open.set(event_target::<web_sys::Element>(&ev).has_attribute("open"))>
            <summary data-testid=format!("new-run-{code}")>"New QC run"</summary>
            <div class="form">
                {blocked.map(|b| view! { <p class="problem" data-testid="rerun-blocked">{format!("Not yet: {b}.")}</p> })}
                {names_for_inputs
                    .into_iter()
                    .enumerate()
                    .map(|(k, n)| {
                        view! {
                            <label>
                                {format!("{n} ({unit}) ")}
                                <input
                                    size="8"
                                    data-testid=format!("run-value-{k}")
                                    prop:value=move || texts.with(|t| t.get(k).cloned().unwrap_or_default())
                                    on:input=move |ev| set_texts.update(|t| t[k] = event_target_value(&ev))
                                />
                                " "
                            </label>
                        }
                    })
                    .collect_view()}
                {move || preview.with(|p| match p {
                    None => ().into_any(),
                    Some(Err(e)) => view! { <p class="problem">{e.clone()}</p> }.into_any(),
                    Some(Ok((_, verdict))) => view! {
                        <div class=format!("run-preview decision-{}", verdict.decision.code())>
                            {verdict_view(verdict, &names_for_verdict, &dates)}
                        </div>
                    }
                    .into_any(),
                })}
                <super::materials::MaterialsUsed lab=lab_for_materials test=test.clone()
                    kinds=vec![crate::lab::MaterialKind::Control, crate::lab::MaterialKind::Reagent]
                    chosen=chosen acknowledged=acknowledged />
                <button data-testid="save-run" on:click=on_save>"Save run"</button>
                {move || message.get().map(|m| view! { <p class="outcome" data-testid="run-message">{m}</p> })}
            </div>
        </details>
    }
}

/// Patient samples of one test through the calibration in use, gated by today's QC.
#[component]
fn SampleCalculator(
    lab: super::SharedLab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let Some(cal) = lab.current_calibration(&test.meta.id).cloned() else {
        return view! { <p class="muted">"Patient samples: no accepted calibration yet; calibrate first."</p> }.into_any();
    };
    let range = ReportableRange::from_calibrators(
        cal.calibrators.iter().map(|c| c.conc),
        test.linearity_limit,
    );
    let judged = super::judged().get_untracked().0;
    let gate =
        super::today::qc_today(&lab, &judged, &test, Local::now().date_naive()).map(|(_, d)| d);
    let (gate_text, gate_class) = match gate {
        None => (
            "No QC run today: run the controls first. Results below are held.",
            "decision-reject",
        ),
        Some(Decision::Reject) => (
            "QC rejected today: hold these results, troubleshoot, rerun the controls.",
            "decision-reject",
        ),
        Some(Decision::Warning) => (
            "QC warning today: inspect the controls before releasing.",
            "decision-warning",
        ),
        Some(Decision::Accept) => ("QC accepted today.", "decision-accept"),
    };
    let (blank_text, set_blank_text) = signal(String::new());
    let (lines, set_lines) = signal(String::new());
    let (interval, set_interval) = signal("60".to_string());
    let mode = test.mode;
    let t = test.clone();
    let rows = move || -> Result<Vec<(String, SampleResult)>, String> {
        let samples = entry::sample_lines(&lines.get())?;
        let blank = entry::numbers(&blank_text.get(), "reagent blank")?;
        let step = entry::numbers(&interval.get(), "interval")?
            .first()
            .copied()
            .unwrap_or(60.0);
        samples
            .into_iter()
            .map(|(id, v)| {
                let reading = match mode {
                    ReadingMode::EndPoint => SampleReading::EndPoint {
                        sample: v[0],
                        reagent_blank: blank.first().copied().unwrap_or(0.0),
                        sample_blank: v.get(1).copied(),
                    },
                    ReadingMode::FixedTime => {
                        let [a_t1, a_t2] = v[..] else {
                            return Err(format!("{id}: give A(t1) and A(t2)"));
                        };
                        SampleReading::FixedTime {
                            a_t1,
                            a_t2,
                            direction: t.direction,
                        }
                    }
                    ReadingMode::Kinetic => SampleReading::Kinetic {
                        points: v
                            .iter()
                            .enumerate()
                            .map(|(i, &a)| KineticPoint {
                                t_s: i as f64 * step,
                                a,
                            })
                            .collect(),
                        settings: KineticSettings {
                            direction: Some(t.direction),
                            ..Default::default()
                        },
                    },
                };
                sample_result(&reading, &cal.curve, range, t.reference, t.critical)
                    .map(|r| (id.clone(), r))
                    .map_err(|e| format!("{id}: {e}"))
            })
            .collect()
    };
    let unit = test.unit.clone();
    let held = gate != Some(Decision::Accept) && gate != Some(Decision::Warning);
    let hint = match mode {
        ReadingMode::EndPoint => "one sample per line: id, absorbance (and a sample blank if read)",
        ReadingMode::FixedTime => "one sample per line: id, A(t1), A(t2)",
        ReadingMode::Kinetic => "one sample per line: id, then the absorbances at each interval",
    };
    let code = test.code.clone();
    let (recorded, set_recorded) = signal(None::<String>);
    let test_id = test.meta.id.clone();
    let cal_id = cal.meta.id.clone();
    let lab_now = lab.clone();
    let rows_now = rows;
    let record = move |_| {
        let list = match rows_now() {
            Ok(l) if !l.is_empty() => l,
            Ok(_) => return set_recorded.set(Some("type the samples first".into())),
            Err(e) => return set_recorded.set(Some(e)),
        };
        let mut changed = super::lab_to_change(&lab_now);
        for (sample_id, r) in &list {
            let (meta, at) = match super::new_record(technician) {
                Ok(m) => m,
                Err(e) => return set_recorded.set(Some(e)),
            };
            changed.patient_results.push(crate::lab::PatientResult {
                meta,
                test_id: test_id.clone(),
                calibration_id: cal_id.clone(),
                at,
                sample_id: sample_id.clone(),
                signal: r.signal,
                result: r.conc.filter(|_| r.disposition == Disposition::Report),
                disposition: r.disposition,
                flag: r.flag,
                held,
            });
        }
        save.run(changed);
        set_recorded.set(Some(format!(
            "{} result(s) recorded{}.",
            list.len(),
            if held {
                ", held until QC is accepted"
            } else {
                ""
            }
        )));
    };
    // What was recorded today for this test (shown outside the form, which is drawn
    // afresh when the lab changes).
    let today = Local::now().date_naive();
    let recorded_today: Vec<String> = lab
        .patient_results
        .iter()
        .filter(|r| r.test_id == test.meta.id && r.at.with_timezone(&Local).date_naive() == today)
        .map(|r| format!("{}{}", r.sample_id, if r.held { " (held)" } else { "" }))
        .collect();
    let recorded_line = (!recorded_today.is_empty()).then(|| {
        view! {
            <p class="muted" data-testid="recorded-results">{format!(
                "Patient results recorded today: {} — {}",
                recorded_today.len(),
                recorded_today.join(", ")
            )}</p>
        }
    });
    view! {
        {recorded_line}
        <details class="samples">
            <summary data-testid=format!("samples-{code}")>"Patient samples"</summary>
            <p class=format!("gate {gate_class}") data-testid="qc-gate">{gate_text}</p>
            <div class="form">
                <Show when=move || mode == ReadingMode::EndPoint>
                    <label>"Reagent blank absorbance "
                        <input size="8" data-testid="samples-blank" on:input=move |ev| set_blank_text.set(event_target_value(&ev)) />
                    </label>
                </Show>
                <Show when=move || mode == ReadingMode::Kinetic>
                    <label>"Interval, s "
                        <input size="5" data-testid="samples-interval" prop:value=move || interval.get()
                            on:input=move |ev| set_interval.set(event_target_value(&ev)) />
                    </label>
                </Show>
                <label class="block">{hint}
                    <textarea rows="4" data-testid="samples-lines" on:input=move |ev| set_lines.set(event_target_value(&ev))></textarea>
                </label>
            </div>
            {move || match rows() {
                Err(e) => view! { <p class="problem" data-testid="samples-problem">{e}</p> }.into_any(),
                Ok(rows) if rows.is_empty() => ().into_any(),
                Ok(rows) => view! {
                    <table data-testid="samples-table">
                        <thead><tr><th>"Sample"</th><th>"Signal"</th><th>{format!("Result ({unit})")}</th><th>"Flag"</th><th>"What to do"</th></tr></thead>
                        <tbody>
                            {rows.into_iter().map(|(id, r)| sample_row(id, r, held)).collect_view()}
                        </tbody>
                    </table>
                    <p><button data-testid="record-samples" on:click=record.clone()>"Record these results"</button></p>
                }.into_any(),
            }}
            {move || recorded.get().map(|m| view! { <p class="outcome" data-testid="samples-recorded">{m}</p> })}
        </details>
    }
    .into_any()
}

fn sample_row(id: String, r: SampleResult, held: bool) -> impl IntoView {
    let result = match (r.disposition, r.conc) {
        (Disposition::Report, Some(c)) => format!("{c:.4}"),
        (Disposition::BelowRange, _) => "below the lowest calibrator".to_string(),
        (Disposition::DiluteAndRepeat, Some(c)) => format!("at least about {c:.0}"),
        _ => "–".to_string(),
    };
    let mut todo = match r.disposition {
        Disposition::Report if held => "held until QC is accepted".to_string(),
        Disposition::Report => "may be released per the lab's procedure".to_string(),
        Disposition::BelowRange => {
            "report as below the measuring range, per the lab's policy".to_string()
        }
        Disposition::DiluteAndRepeat => match r.dilution {
            Some(d) => format!(
                "dilute 1:{} (1 part sample + {} parts diluent) and repeat",
                d.factor,
                d.factor - 1
            ),
            None => "dilute and repeat".to_string(),
        },
        Disposition::Repeat => "repeat the measurement".to_string(),
    };
    if !r.notes.is_empty() {
        todo = format!("{todo}. {}", r.notes.join("; "));
    }
    view! {
        <tr data-testid="sample-row">
            <td>{id}</td>
            <td>{format!("{:.4}", r.signal)}</td>
            <td>{result}</td>
            <td>{r.flag.map(|f| f.letter()).unwrap_or("")}</td>
            <td>{todo}</td>
        </tr>
    }
}
