//! The control charts view: a Levey–Jennings chart per control level for the chosen
//! period (each point explained in words), with the level's statistics for this month
//! and overall and whether the lab's own target is available yet.

use chrono::{Local, Utc};
use leptos::prelude::*;

use super::{chart, judged, EmptyState, PeriodPicker, NO_LAB};
use crate::engine::charts::LeveyJennings;
use crate::engine::qcstats::{self, ControlResult, Summary, Target, TargetSource};

#[component]
pub(super) fn ControlCharts(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
) -> impl IntoView {
    // The month charted: this month until another is chosen. Decisions come from the
    // whole history; the statistics below each chart are this month's and overall.
    let period = RwSignal::new(crate::period::Period::month_of(Utc::now(), &Local));
    let judged = judged();
    let charts = move || {
        let month = period.get();
        let verdicts = judged.get_untracked().0;
        lab.with(|l| {
            let Some(l) = l else {
                return view! { <EmptyState text=NO_LAB /> }.into_any();
            };
            let mut panels = Vec::new();
            for t in &l.tests {
                let h = l.control_history(&t.meta.id);
                let decisions: Vec<crate::engine::qc::Decision> = verdicts
                    .verdicts(&t.meta.id)
                    .map(|v| v.iter().map(|r| r.decision).collect())
                    .unwrap_or_default();
                let within = super::runs::in_period(month);
                let in_month: Vec<usize> = (0..h.runs.len())
                    .filter(|&i| within(h.runs[i].run_at))
                    .collect();
                let labels: Vec<String> = in_month
                    .iter()
                    .map(|&i| h.runs[i].run_at.with_timezone(&Local).format("%d %b").to_string())
                    .collect();
                let month_decisions: Vec<crate::engine::qc::Decision> =
                    in_month.iter().filter_map(|&i| decisions.get(i).copied()).collect();
                for k in 0..h.levels.len() {
                    let values: Vec<Option<f64>> = h.values.iter().map(|run| run[k]).collect();
                    let month_values: Vec<Option<f64>> = in_month.iter().map(|&i| values[i]).collect();
                    if month_values.iter().all(Option::is_none) {
                        continue;
                    }
                    let Some(series) = LeveyJennings::new(
                        &format!("{} {} ({}) — {}", t.code, h.levels[k].name, t.unit, month.label()),
                        h.targets[k].mean,
                        h.targets[k].sd,
                        &month_values,
                        &month_decisions,
                    ) else {
                        continue;
                    };
                    let level_names: Vec<String> = h.levels.iter().map(|l| l.name.clone()).collect();
                    let run_label = |r: usize| {
                        h.runs.get(r).map_or(format!("{}", r + 1), |run| {
                            run.run_at.with_timezone(&Local).format("%d %b %H:%M").to_string()
                        })
                    };
                    let all_verdicts = verdicts.verdicts(&t.meta.id).ok();
                    let notes: Vec<String> = in_month
                        .iter()
                        .map(|&i| match values[i] {
                            None => String::new(),
                            Some(v) => crate::engine::charts::point_note(
                                &h.runs[i].run_at.with_timezone(&Local).format("%Y-%m-%d %H:%M").to_string(),
                                v,
                                h.targets[k],
                                &t.unit,
                                all_verdicts.and_then(|all| all.get(i)),
                                &level_names,
                                &run_label,
                            ),
                        })
                        .collect();
                    let series = series.with_run_labels(labels.clone()).with_notes(&notes);
                    let results: Vec<ControlResult> = h
                        .runs
                        .iter()
                        .zip(&values)
                        .zip(&decisions)
                        .filter_map(|((run, v), d)| {
                            v.map(|value| ControlResult {
                                at: run.run_at,
                                value,
                                run_rejected: *d == crate::engine::qc::Decision::Reject,
                                excluded: false,
                            })
                        })
                        .collect();
                    panels.push((series, level_stats(&results, h.targets[k], &t.unit)));
                }
            }
            if panels.is_empty() {
                return view! { <EmptyState text="No control results to chart in this period: choose another above." /> }.into_any();
            }
            panels
                .into_iter()
                .map(|(series, stats)| {
                    view! {
                        <div class="chart-panel">
                            <chart::LeveyJenningsChart series=series />
                            {stats}
                        </div>
                    }
                })
                .collect_view()
                .into_any()
        })
    };
    view! {
        <PeriodPicker period=period testid="charts-period" />
        {charts}
    }
}

/// A level's statistics for the review: this month and all results that count (not
/// from rejected runs), and whether the lab's own target is available yet.
fn level_stats(
    results: &[ControlResult],
    insert: crate::engine::qc::LevelTarget,
    unit: &str,
) -> impl IntoView {
    let line = |label: &str, s: Option<Summary>| {
        let text = match s {
            None => "no results".to_string(),
            Some(s) => format!(
                "n {}, mean {:.3}, SD {}, CV {}",
                s.n,
                s.mean,
                s.sd.map_or("–".into(), |v| format!("{v:.3}")),
                s.cv_pct.map_or("–".into(), |v| format!("{v:.1} %"))
            ),
        };
        view! { <tr><td>{label.to_string()}</td><td>{text}</td></tr> }
    };
    let now = crate::period::Period::month_of(Utc::now(), &Local);
    let month = now.label();
    let this_month = now
        .instants(&Local)
        .and_then(|(from, to)| qcstats::between(results, from, to));
    let target = match qcstats::choose_target(Some(insert), results) {
        Some(Target { source: TargetSource::Lab { n }, mean, sd }) => format!(
            "the lab's own target is available from {n} accepted results: mean {mean:.3}, SD {sd:.3} {unit} \
             (in use: the insert's {} ± {})",
            insert.mean, insert.sd
        ),
        Some(Target { source: TargetSource::Insert { n }, .. }) => format!(
            "provisional target from the insert ({} ± {} {unit}); {n} of {} accepted results for the lab's own",
            insert.mean,
            insert.sd,
            qcstats::MIN_RESULTS_FOR_LAB_TARGET
        ),
        None => String::new(),
    };
    view! {
        <table class="stats" data-testid="level-stats">
            <tbody>
                {line(&format!("This month ({month})"), this_month)}
                {line("All accepted", qcstats::cumulative(results))}
                <tr><td>"Target"</td><td>{target}</td></tr>
            </tbody>
        </table>
    }
}
