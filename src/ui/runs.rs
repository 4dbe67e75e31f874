//! The QC runs view: each test's runs, newest first, with the engine's decision, and
//! the form for a new run whose decision is shown before it is saved.

use chrono::{Local, Utc};
use leptos::prelude::*;

use crate::engine::qc::{self, Decision, RunVerdict};
use crate::entry;
use crate::lab::{ControlRun, Lab, RecordMeta, TestSetup};
use crate::store;

#[component]
pub fn RunsView(
    /// The lab being worked on.
    lab: ReadSignal<Option<Lab>>,
    /// Saves a changed lab.
    save: Callback<Lab>,
    /// The technician's initials.
    technician: ReadSignal<String>,
) -> impl IntoView {
    move || {
        lab.with(|l| match l {
            None => view! { <p class="empty">{super::NO_LAB}</p> }.into_any(),
            Some(l) if l.tests.is_empty() => view! { <p class="empty">"No tests set up yet."</p> }.into_any(),
            Some(l) => l
                .tests
                .iter()
                .map(|t| view! { <TestRuns lab=l.clone() test=t.clone() save=save technician=technician /> })
                .collect_view()
                .into_any(),
        })
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
    lab: Lab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let history = lab.control_history(&test.meta.id);
    let names: Vec<String> = history.levels.iter().map(|l| l.name.clone()).collect();
    let run_dates: Vec<String> = history
        .runs
        .iter()
        .map(|r| r.run_at.with_timezone(&Local).format("%d %b").to_string())
        .collect();
    let rows = match qc::evaluate(&history.targets, &history.values, &test.qc_rules) {
        Err(e) => view! { <tr><td colspan="4">{format!("QC cannot be evaluated: {e}")}</td></tr> }.into_any(),
        Ok(verdicts) => history
            .runs
            .iter()
            .zip(&history.values)
            .zip(verdicts)
            .rev()
            .map(|((run, values), verdict)| {
                let shown = results_text(values, &history.targets);
                view! {
                    <tr class=format!("decision-{}", verdict.decision.code()) data-testid="qc-run">
                        <td>{run.run_at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string()}</td>
                        <td>{run.meta.by.clone()}</td>
                        <td>{shown}</td>
                        <td>{verdict_view(&verdict, &names, &run_dates)}</td>
                    </tr>
                }
            })
            .collect_view()
            .into_any(),
    };
    let rules: Vec<&str> = test.qc_rules.iter().map(|r| r.rule.code()).collect();
    let empty = history.runs.is_empty();
    let summary = format!("Levels: {}. Rules: {}.", names.join(", "), rules.join(", "));
    view! {
        <section class="card wide" data-testid=format!("runs-{}", test.code)>
            <h3>{format!("{} {}", test.code, test.name)}</h3>
            <p class="muted">{summary}</p>
            <NewRun lab=lab.clone() test=test.clone() save=save technician=technician />
            <Show when=move || empty>
                <p class="empty">"No QC runs recorded yet."</p>
            </Show>
            <table>
                <thead><tr><th>"Run"</th><th>"By"</th><th>"Control results"</th><th>"Decision"</th></tr></thead>
                <tbody>{rows}</tbody>
            </table>
        </section>
    }
}

fn results_text(values: &[Option<f64>], targets: &[qc::LevelTarget]) -> String {
    values
        .iter()
        .zip(targets)
        .map(|(v, t)| match v {
            Some(v) => format!("{v} ({:+.1} SD)", qc::z_score(*v, *t)),
            None => "not run".into(),
        })
        .collect::<Vec<_>>()
        .join(" · ")
}

fn verdict_view(verdict: &RunVerdict, names: &[String], run_dates: &[String]) -> impl IntoView {
    let why: Vec<String> = verdict
        .violations
        .iter()
        .map(|v| {
            v.explain(names, |r| {
                run_dates
                    .get(r)
                    .cloned()
                    .unwrap_or_else(|| "this run".into())
            })
        })
        .collect();
    view! {
        <strong data-testid="qc-decision">{decision_words(verdict.decision)}</strong>
        <ul>{why.into_iter().map(|w| view! { <li>{w}</li> }).collect_view()}</ul>
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

#[component]
fn NewRun(
    lab: Lab,
    test: TestSetup,
    save: Callback<Lab>,
    technician: ReadSignal<String>,
) -> impl IntoView {
    let snapshot = lab.clone();
    let history = snapshot.control_history(&test.meta.id);
    let names: Vec<String> = history.levels.iter().map(|l| l.name.clone()).collect();
    let level_ids: Vec<String> = history.levels.iter().map(|l| l.meta.id.clone()).collect();
    let targets = history.targets.clone();
    let past = history.values.clone();
    let (texts, set_texts) = signal(vec![String::new(); names.len()]);
    let (message, set_message) = signal::<Option<String>>(None);
    let rules = test.qc_rules.clone();
    let names_for_preview = names.clone();
    // The new run judged with the history before it.
    let preview = Memo::new(move |_| {
        let t = texts.get();
        if t.iter().all(|s| s.trim().is_empty()) {
            return None;
        }
        Some(parse_run(&t, &names_for_preview).and_then(|values| {
            let mut all = past.clone();
            all.push(values.clone());
            qc::evaluate(&targets, &all, &rules)
                .map_err(|e| e.0)
                .and_then(|v| v.last().cloned().ok_or_else(|| "no verdict".to_string()))
                .map(|verdict| (values, verdict))
        }))
    });
    let test_id = test.meta.id.clone();
    let on_save = move |_| {
        let initials = technician.get_untracked();
        if initials.trim().is_empty() {
            set_message.set(Some(
                "enter your initials (top right) before saving: every record says who did it"
                    .into(),
            ));
            return;
        }
        let Some(Ok((values, verdict))) = preview.get_untracked() else {
            set_message.set(Some("enter at least one control result first".into()));
            return;
        };
        let now = Utc::now();
        let mut changed = lab.clone();
        changed.control_runs.push(ControlRun {
            meta: RecordMeta::new(store::random_bytes(), now, &initials),
            test_id: test_id.clone(),
            run_at: now,
            level_ids: level_ids.clone(),
            values,
        });
        save.run(changed);
        set_message.set(Some(format!(
            "run saved: {}",
            decision_words(verdict.decision)
        )));
    };
    let names_for_inputs = names.clone();
    let names_for_verdict = names.clone();
    let mut dates: Vec<String> = history
        .runs
        .iter()
        .map(|r| r.run_at.with_timezone(&Local).format("%d %b").to_string())
        .collect();
    dates.push("this run".into());
    let code = test.code.clone();
    let unit = test.unit.clone();
    view! {
        <details class="new-run">
            <summary data-testid=format!("new-run-{code}")>"New QC run"</summary>
            <div class="form">
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
                <button data-testid="save-run" on:click=on_save>"Save run"</button>
                {move || message.get().map(|m| view! { <p class="outcome" data-testid="run-message">{m}</p> })}
            </div>
        </details>
    }
}
