//! 100 000 mutated and truncated records files (seeded, so every run tries the same
//! ones): reading never panics; a refused file changes nothing (reading is pure and
//! the import only appends what `apply` returns); an accepted mutation (one that only
//! touched what no check covers, such as spacing or the file's own note of who wrote
//! it) imports into a lab that still replays with nothing set aside.

use std::collections::HashMap;
use std::panic::{catch_unwind, AssertUnwindSafe};

use chrono::{DateTime, Duration, Utc};
use cuvette::exchange::{self, Choice};
use cuvette::journal::{founding_entries, replay, Entry};
use cuvette::lab::Lab;
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

const CASES: usize = 100_000;

fn t0() -> DateTime<Utc> {
    "2026-11-27T12:00:00Z".parse().expect("time")
}

/// A small lab from the demo (one test with its levels, a few runs, one of each other
/// kind), so that 100 000 files take seconds, not minutes.
fn small_lab() -> Lab {
    let mut lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
    let test = lab.tests[0].meta.id.clone();
    lab.tests.truncate(1);
    lab.control_levels.retain(|l| l.test_id == test);
    lab.control_runs.retain(|r| r.test_id == test);
    lab.control_runs.truncate(4);
    lab.calibrations.retain(|c| c.test_id == test);
    lab.calibrations.truncate(1);
    lab.materials.truncate(2);
    lab.instrument_log.truncate(2);
    lab
}

const EXTREMES: [&str; 12] = [
    "1e308",
    "-1e308",
    "18446744073709551616",
    "3e9",
    "0",
    "-1",
    "null",
    "\"\"",
    "[]",
    "{}",
    "true",
    "1e-320",
];

fn mutate(base: &str, rng: &mut StdRng) -> String {
    let bytes = base.as_bytes();
    let n = bytes.len();
    let at = rng.gen_range(0..n);
    match rng.gen_range(0..9) {
        // Truncated (a USB stick pulled out while writing).
        0 => String::from_utf8_lossy(&bytes[..at]).into_owned(),
        // One byte changed.
        1 => {
            let mut b = bytes.to_vec();
            b[at] = rng.gen();
            String::from_utf8_lossy(&b).into_owned()
        }
        // A run of bytes removed.
        2 => {
            let end = (at + rng.gen_range(1..200)).min(n);
            String::from_utf8_lossy(&[&bytes[..at], &bytes[end..]].concat()).into_owned()
        }
        // A number replaced by an extreme or a value of another type.
        3 | 4 => {
            let starts: Vec<usize> = base
                .match_indices(':')
                .map(|(i, _)| i + 1)
                .filter(|&i| {
                    bytes
                        .get(i)
                        .is_some_and(|c| c.is_ascii_digit() || *c == b'-')
                })
                .collect();
            if starts.is_empty() {
                return base.to_string();
            }
            let s = starts[rng.gen_range(0..starts.len())];
            let end = s + base[s..]
                .find(|c: char| !(c.is_ascii_digit() || "-+.eE".contains(c)))
                .unwrap_or(0);
            let with = EXTREMES[rng.gen_range(0..EXTREMES.len())];
            format!("{}{with}{}", &base[..s], &base[end..])
        }
        // A field added or a key renamed.
        5 => base.replacen(
            "\"by\":",
            "\"by\":\"x\",\"extra\":",
            1 + rng.gen_range(0..3),
        ),
        // A text replaced by something hostile.
        6 => {
            let hostile = [
                "<script>alert(1)</script>",
                "=cmd|' /C calc'!A0",
                "\u{202e}x",
                &"x".repeat(3000),
            ];
            base.replacen(
                "\"lot\":\"",
                &format!("\"lot\":\"{}", hostile[rng.gen_range(0..4)]),
                1,
            )
        }
        // Deep nesting spliced in.
        7 => {
            let depth = rng.gen_range(1..400);
            format!(
                "{}{}{}{}",
                &base[..at.min(base.len())].trim_end_matches(|c: char| !c.is_ascii()),
                "[".repeat(depth),
                "]".repeat(depth),
                ""
            )
        }
        // Two entries swapped or one repeated.
        _ => {
            let mut f: serde_json::Value = serde_json::from_str(base).unwrap();
            if let Some(list) = f["entries"].as_array_mut() {
                let i = rng.gen_range(0..list.len());
                let j = rng.gen_range(0..list.len());
                if rng.gen() {
                    list.swap(i, j);
                } else {
                    let e = list[i].clone();
                    list.insert(j, e);
                }
            }
            f.to_string()
        }
    }
}

#[test]
fn mutated_and_truncated_files_never_panic_and_a_refusal_changes_nothing() {
    let lab = small_lab();
    let theirs = founding_entries(&lab, t0(), "DEMO");
    let base = exchange::to_text(&exchange::backup(&lab, &theirs, t0(), "AK"));
    // This PC already has part of it, and changed one record since.
    let ours: Vec<Entry> = theirs[..theirs.len() / 2].to_vec();
    let current = replay(&ours, None, &[]);
    let mut rng = StdRng::seed_from_u64(7);
    let (mut refused, mut accepted) = (0usize, 0usize);
    for k in 0..CASES {
        let text = mutate(&base, &mut rng);
        let outcome = catch_unwind(AssertUnwindSafe(|| {
            let Ok(checked) = exchange::read(&text, 50_000_000) else {
                return false;
            };
            let plan = exchange::plan(&ours, &checked);
            let choices: HashMap<String, Choice> = plan
                .conflicts
                .iter()
                .map(|c| (c.id.clone(), Choice::Theirs))
                .collect();
            if let Ok(new) = exchange::apply(
                &plan,
                &choices,
                &current,
                t0() + Duration::hours(1),
                "fz",
                "f",
            ) {
                let mut all = ours.clone();
                all.extend(new);
                let r = replay(&all, None, &[]);
                assert!(r.set_aside.is_empty(), "case {k}: {:?}", r.set_aside);
            }
            true
        }));
        match outcome {
            Ok(true) => accepted += 1,
            Ok(false) => refused += 1,
            Err(_) => panic!(
                "case {k} panicked on: {}",
                text.chars().take(300).collect::<String>()
            ),
        }
    }
    println!("{CASES} mutated files: {refused} refused, {accepted} accepted");
    assert_eq!(refused + accepted, CASES);
    assert!(
        refused > CASES / 2,
        "most mutations must be refused ({refused})"
    );
}
