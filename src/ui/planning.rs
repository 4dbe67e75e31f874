//! How well each test's QC rules catch an error: the probability that a run is rejected
//! with no error, with a systematic shift of 1–4 SD and with the random error 1.5–3
//! times the stable SD, drawn as two power curves, for the test's rejection rules
//! and its number of control levels. The numbers are `engine::planning`'s; a Monte
//! Carlo runs in slices between frames, with its progress and a cancel button.

use leptos::prelude::*;

use crate::engine::planning::{self, Error, Probability, Simulation};
use crate::engine::qc::{Action, Rule};

/// Simulated runs per shift (the standard error is then at most 0.0016).
const TRIALS: usize = 100_000;
/// Runs simulated between two frames.
const SLICE: usize = 2_000;
const SHIFTS: [f64; 5] = [0.0, 1.0, 2.0, 3.0, 4.0];
/// Random error as a multiple of the stable SD, with no shift.
const RANDOM: [f64; 4] = [1.5, 2.0, 2.5, 3.0];

/// Every error the card estimates: the shifts, then the larger random errors.
fn errors() -> Vec<Error> {
    SHIFTS
        .iter()
        .map(|&shift_sd| Error {
            shift_sd,
            random_factor: 1.0,
        })
        .chain(RANDOM.iter().map(|&random_factor| Error {
            shift_sd: 0.0,
            random_factor,
        }))
        .collect()
}

/// One test's rejection probabilities.
#[component]
fn TestPlanning(
    /// The test's code, for the selectors.
    code: String,
    /// The rules that reject a run in this test.
    rules: Vec<Rule>,
    /// Control results per run (its levels).
    n_per_run: usize,
) -> impl IntoView {
    let (rows, set_rows) = signal(Vec::<(Error, Probability)>::new());
    let (progress, set_progress) = signal(None::<f64>);
    let (message, set_message) = signal(None::<String>);
    let cancel = RwSignal::new(false);
    let names = rules
        .iter()
        .map(|r| r.code())
        .collect::<Vec<_>>()
        .join(", ");
    let start = {
        let rules = rules.clone();
        move |_| {
            if progress.get_untracked().is_some() {
                return;
            }
            cancel.set(false);
            set_rows.set(Vec::new());
            set_message.set(None);
            set_progress.set(Some(0.0));
            let rules = rules.clone();
            leptos::task::spawn_local(async move {
                let all = errors();
                for (k, &error) in all.iter().enumerate() {
                    let shift = error.shift_sd;
                    let p = if let [single] = rules[..] {
                        match planning::rejection_probability(
                            &[single],
                            n_per_run,
                            error,
                            TRIALS,
                            1,
                        ) {
                            Ok(p) if p.std_error == 0.0 => Some(p),
                            _ => None,
                        }
                    } else {
                        None
                    };
                    let p = match p {
                        Some(p) => p,
                        None => {
                            let mut sim = Simulation::new(&rules, n_per_run, error, 1 + k as u64);
                            while sim.done < TRIALS {
                                if cancel.get_untracked() {
                                    set_progress.set(None);
                                    set_message.set(Some(format!(
                                        "Cancelled after {} simulated runs (at a shift of {shift} SD, random error × {}).",
                                        k * TRIALS + sim.done,
                                        error.random_factor
                                    )));
                                    return;
                                }
                                if let Err(e) = sim.run(SLICE.min(TRIALS - sim.done)) {
                                    set_progress.set(None);
                                    return set_message.set(Some(e));
                                }
                                set_progress.set(Some(
                                    (k * TRIALS + sim.done) as f64 / (all.len() * TRIALS) as f64,
                                ));
                                crate::store::next_task().await;
                            }
                            sim.result()
                        }
                    };
                    set_rows.update(|r| r.push((error, p)));
                }
                set_progress.set(None);
            });
        }
    };
    view! {
        <div class="planning" data-testid=format!("planning-{code}")>
            <p>
                <strong>{code.clone()}</strong>
                {format!(": rejecting rules {names}; {n_per_run} control result(s) per run. ")}
                <button data-testid=format!("plan-run-{code}") on:click=start>"Estimate"</button>
                {move || progress.get().map(|p| view! {
                    " "
                    <progress data-testid="plan-progress" max="1" value=p></progress>
                    " "
                    <button data-testid="plan-cancel" on:click=move |_| cancel.set(true)>"Cancel"</button>
                })}
            </p>
            {move || (!rows.get().is_empty()).then(|| view! {
                <table class="stats" data-testid="plan-table">
                    <thead><tr><th>"Error in the run"</th><th>"Chance the run is rejected"</th><th>"±"</th></tr></thead>
                    <tbody>
                        {rows.get().into_iter().map(|(e, p)| view! {
                            <tr data-testid="plan-row">
                                <td>{if e.random_factor > 1.0 {
                                    format!("random error × {} (SD {} times the stable SD)", e.random_factor, e.random_factor)
                                } else if e.shift_sd == 0.0 {
                                    "none (false rejection)".to_string()
                                } else {
                                    format!("systematic shift of {} SD", e.shift_sd)
                                }}</td>
                                <td>{format!("{:.3}", p.p)}</td>
                                <td>{if p.std_error == 0.0 { "exact".to_string() } else { format!("{:.4}", p.std_error) }}</td>
                            </tr>
                        }).collect_view()}
                    </tbody>
                </table>
            })}
            {move || {
                let r = rows.get();
                (r.len() >= SHIFTS.len())
                    .then(|| {
                        crate::engine::charts::Trend::from_points(
                            "Chance of rejection against the systematic shift (SD)",
                            r.iter()
                                .filter(|(e, _)| e.random_factor == 1.0)
                                .map(|(e, p)| (e.shift_sd, p.p))
                                .collect(),
                            Some((0.0, 1.0)),
                        )
                    })
                    .flatten()
                    .map(|t| view! { <super::chart::TrendChart series=t /> })
            }}
            {move || {
                let r = rows.get();
                // The no-error row is the random-error curve's first point (× 1).
                (r.len() > SHIFTS.len())
                    .then(|| {
                        crate::engine::charts::Trend::from_points(
                            "Chance of rejection against the random error (SD × factor)",
                            r.iter()
                                .filter(|(e, _)| e.shift_sd == 0.0)
                                .map(|(e, p)| (e.random_factor, p.p))
                                .collect(),
                            Some((0.0, 1.0)),
                        )
                    })
                    .flatten()
                    .map(|t| view! { <super::chart::TrendChart series=t /> })
            }}
            {move || message.get().map(|m| view! { <p class="outcome" data-testid="plan-message">{m}</p> })}
        </div>
    }
}

/// The planning card of the control-charts view.
#[component]
pub fn PlanningPanel(
    /// The lab being worked on.
    lab: ReadSignal<Option<super::SharedLab>>,
) -> impl IntoView {
    move || {
        lab.with(|l| {
            let l = l.as_ref()?;
            let tests = l
                .tests
                .iter()
                .filter_map(|t| {
                    let rules: Vec<Rule> = t
                        .qc_rules
                        .iter()
                        .filter(|r| r.action == Action::Reject)
                        .map(|r| r.rule)
                        .collect();
                    let n = l.levels_of(&t.meta.id).len();
                    (!rules.is_empty() && (1..=6).contains(&n)).then(|| {
                        view! { <TestPlanning code=t.code.clone() rules=rules n_per_run=n /> }
                    })
                })
                .collect_view();
            Some(view! {
                <section class="card wide" data-testid="planning">
                    <h3>"How well the rules catch an error"</h3>
                    <p class="muted">
                        "The chance that a run is rejected by the test's rejecting rules, with no \
                         error, with a shift of 1 to 4 SD, and with the random error 1.5 to 3 \
                         times the stable SD, from 100 000 simulated runs per \
                         case through the same rule engine that judges the bench's runs (12 \
                         runs in control before each). A planning aid: the lab's QC policy \
                         decides the rules."
                    </p>
                    {tests}
                </section>
            })
        })
    }
}
