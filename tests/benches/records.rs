//! Records at scale: a synthetic lab of 20 tests × 2 control levels run daily for three
//! years (21,900 QC runs, 43,800 results), built as a journal. Prints the localStorage
//! characters per QC result, how many years of such a lab the file:// quota holds, and
//! the native time of a save (diff + entries + mirror write) and of the start-up replay,
//! as a ratio of one to the other, measured in one run. Writes the stored keys to
//! `target/bench-records-store.json` for `tools/bench-save.mjs` (the same in Chromium).
//! Invented data for measuring only.

use std::time::Instant;

use chrono::{DateTime, Duration, Utc};
use cuvette::exchange;
use cuvette::journal::{changes, entries_for, founding_entries, replay};
use cuvette::lab::{ControlLevel, ControlRun, Lab, RecordMeta};
use cuvette::mirror::{KeyValue, MemoryStore, Mirror};
use rand::{Rng, SeedableRng};

const QUOTA: f64 = 5_242_880.0;

fn synthetic_lab(days: i64) -> Lab {
    let mut rng = rand::rngs::StdRng::seed_from_u64(20261202);
    let mut id = || {
        let mut b = [0u8; 16];
        rng.fill(&mut b);
        b
    };
    let start: DateTime<Utc> = "2023-12-01T07:30:00Z".parse().expect("time");
    let mut lab = Lab::from_json(include_str!("../../demo-data/demo-lab.json")).expect("demo");
    lab.demo = false;
    lab.lab_name = "Synthetic lab for measuring".into();
    let template = lab.tests[0].clone();
    lab.tests.clear();
    lab.control_levels.clear();
    lab.control_runs.clear();
    for t in 0..20 {
        let mut test = template.clone();
        test.meta = RecordMeta::new(id(), start, "BM");
        test.code = format!("T{t:02}");
        for (name, mean, sd) in [("Normal", 95.0, 2.8), ("High", 265.0, 6.5)] {
            lab.control_levels.push(ControlLevel {
                meta: RecordMeta::new(id(), start, "BM"),
                test_id: test.meta.id.clone(),
                name: name.into(),
                lot: "L-1".into(),
                mean,
                sd,
            });
        }
        lab.tests.push(test);
    }
    let mut rng = rand::rngs::StdRng::seed_from_u64(7);
    for day in 0..days {
        for t in 0..20 {
            let at = start + Duration::days(day) + Duration::minutes(t);
            let levels = [
                &lab.control_levels[2 * t as usize],
                &lab.control_levels[2 * t as usize + 1],
            ];
            let values = levels
                .iter()
                .map(|l| {
                    Some(((l.mean + l.sd * (rng.gen::<f64>() - 0.5) * 3.0) * 10.0).round() / 10.0)
                })
                .collect();
            let mut b = [0u8; 16];
            rng.fill(&mut b);
            lab.control_runs.push(ControlRun {
                meta: RecordMeta::new(b, at, "BM"),
                test_id: lab.tests[t as usize].meta.id.clone(),
                run_at: at,
                level_ids: levels.iter().map(|l| l.meta.id.clone()).collect(),
                values,
                after_action: None,
                materials_used: Vec::new(),
                acknowledged: Vec::new(),
            });
        }
    }
    lab
}

fn main() {
    // BENCH_DAYS sets the size (default 1095: the three years).
    let days: i64 = std::env::var("BENCH_DAYS")
        .ok()
        .and_then(|y| y.parse().ok())
        .unwrap_or(1095)
        .max(1);
    let years = days as f64 / 365.0;
    let lab = synthetic_lab(days);
    let now: DateTime<Utc> = "2026-12-01T08:00:00Z".parse().expect("time");
    let entries = founding_entries(&lab, now, "BM");
    let results: usize = lab.qc_result_count();
    let mut kv = MemoryStore::default();
    let mirror = Mirror::new("cuvette.lab.");
    let pointer = mirror.write(&mut kv, &entries, None).expect("write");
    let chars = mirror.size(&kv) as f64;
    let per_result = chars / results as f64;
    println!("synthetic lab: 20 tests x 2 levels daily, {years:.2} years: {} runs, {results} QC results, {} entries", lab.control_runs.len(), entries.len());
    println!("localStorage: {chars:.0} characters, {per_result:.1} per QC result (trail included)");
    println!(
        "years of such a lab in the {QUOTA:.0}-character file:// quota: {:.1}",
        QUOTA / (chars / 3.0)
    );

    let t = Instant::now();
    let state = replay(&entries, Some(&pointer.head), &[]);
    let replay_time = t.elapsed();
    assert!(state.set_aside.is_empty());
    // One save: a new QC run on top of three years.
    let mut saves = Vec::new();
    let mut kv2 = kv.clone();
    let mut state = state;
    let mut all = entries.clone();
    let mut pointer = pointer;
    for k in 0..50u8 {
        let t = Instant::now();
        let mut next = state.lab.clone();
        let mut run = next.control_runs[0].clone();
        run.meta = RecordMeta::new([k; 16], now, "BM");
        next.control_runs.push(run);
        let c = changes(&state.lab, &next);
        let new = entries_for(&c, &state.version_numbers(), &state.tip, now, "BM", None)
            .expect("entries");
        state.extend(&new, None, &[]);
        all.extend(new);
        pointer = mirror.write(&mut kv2, &all, Some(&pointer)).expect("write");
        saves.push(t.elapsed());
    }
    saves.sort();
    let save = saves[saves.len() / 2];
    println!("native, one run: start-up replay {replay_time:?}; one save on top of it (diff, entries, mirror) median {save:?} of 50; replay/save = {:.1}", replay_time.as_secs_f64() / save.as_secs_f64());
    // The three years as a backup file, imported into an empty PC and again into one
    // that has it all (read and check, plan, apply), against one start-up replay.
    let backup = exchange::to_text(&exchange::backup(&state.lab, &entries, now, "BM"));
    let t = Instant::now();
    let checked = exchange::read(&backup, usize::MAX).expect("the backup checks");
    let plan = exchange::plan(&[], &checked);
    let into_empty = exchange::apply(
        &plan,
        &Default::default(),
        &replay(&[], None, &[]),
        now,
        "BM",
        "b.json",
    )
    .expect("applied");
    let import_empty = t.elapsed();
    let t = Instant::now();
    let checked = exchange::read(&backup, usize::MAX).expect("the backup checks");
    let again = exchange::plan(&entries, &checked);
    let import_again = t.elapsed();
    assert!(again.is_noop() && into_empty.len() == entries.len() + 1);
    let out = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/target/bench-backup-3-years.json"
    );
    std::fs::write(out, &backup).expect("write backup");
    println!(
        "native, one run: a {:.1} MB backup imported into an empty lab {import_empty:?}, the same \
         file into the lab that has it {import_again:?}; import/replay = {:.1} (written to {out})",
        backup.len() as f64 / 1e6,
        import_empty.as_secs_f64() / replay_time.as_secs_f64()
    );
    let store: serde_json::Map<String, serde_json::Value> = kv
        .keys()
        .into_iter()
        .map(|k| {
            let v = kv.get(&k).unwrap_or_default();
            (k, serde_json::Value::String(v))
        })
        .collect();
    let out = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/target/bench-records-store.json"
    );
    std::fs::write(out, serde_json::Value::Object(store).to_string()).expect("write store");
    println!("stored keys written to {out}");
}
