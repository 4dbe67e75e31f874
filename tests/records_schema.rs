//! Every records file Cuvette writes (a backup with corrections, voids and an import
//! event; a day file; a year's archive; the committed demo backup) is valid against
//! `docs/records-file.schema.json`, checked by the `jsonschema` reference validator
//! (PyPI, JSON Schema draft 2020-12); and files the schema must refuse are refused, so
//! the schema is not vacuous.

mod common;

use std::collections::HashMap;

use chrono::{DateTime, Duration, NaiveDate, Utc};
use cuvette::exchange;
use cuvette::journal::{self, founding_entries, replay};
use cuvette::lab::Lab;
use serde_json::{json, Value};

const VALIDATE: &str = r#"
import json, sys
from jsonschema import Draft202012Validator
req = json.load(sys.stdin)
v = Draft202012Validator(req["schema"])
print(json.dumps([sorted(e.message[:200] for e in v.iter_errors(f)) for f in req["files"]]))
"#;

fn t0() -> DateTime<Utc> {
    "2026-11-27T12:00:00Z".parse().unwrap()
}

fn errors(files: &[Value]) -> Vec<Vec<String>> {
    let schema: Value = serde_json::from_str(include_str!("../docs/records-file.schema.json"))
        .expect("the schema is JSON");
    let out = common::python_json(VALIDATE, &json!({"schema": schema, "files": files}));
    serde_json::from_value(out).expect("a list of error lists")
}

#[test]
fn every_file_cuvette_writes_is_valid_and_broken_ones_are_not() {
    let demo = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
    let mut entries = founding_entries(&demo, t0(), "DEMO");
    // A correction and a void, then an import event, so every action and kind appears.
    let state = replay(&entries, None, &[]);
    let mut lab = state.lab.clone();
    lab.control_levels[0].mean += 1.0;
    lab.control_runs.remove(0);
    let c = journal::changes(&state.lab, &lab);
    let at = t0() + Duration::hours(1);
    entries.extend(
        journal::entries_for(
            &c,
            &state.version_numbers(),
            &state.tip,
            at,
            "ak",
            Some("why"),
        )
        .unwrap(),
    );
    // The other PC has one instrument log entry this one lacks.
    let mut there = demo.clone();
    there.instrument_log[0].meta.id = "6f1c1a52-8d0e-4a5e-9a43-1f0b7a3c2d11".into();
    let other = exchange::to_text(&exchange::backup(
        &there,
        &founding_entries(&there, t0(), "X"),
        t0(),
        "X",
    ));
    let checked = exchange::read(&other, usize::MAX).unwrap();
    let plan = exchange::plan(&entries, &checked);
    let current = replay(&entries, None, &[]);
    let choices = plan
        .conflicts
        .iter()
        .map(|c| (c.id.clone(), exchange::Choice::Ours))
        .collect::<HashMap<_, _>>();
    entries.extend(exchange::apply(&plan, &choices, &current, at, "ak", "other.json").unwrap());
    assert!(entries.iter().any(|e| e.kind == journal::Kind::Event));
    let lab = replay(&entries, None, &[]).lab;
    let backup = serde_json::to_value(exchange::backup(&lab, &entries, at, "AK")).unwrap();
    let day = NaiveDate::from_ymd_opt(2026, 11, 27).unwrap();
    let day_file =
        serde_json::to_value(exchange::day_file(&lab, &entries, day, &Utc, at, "AK")).unwrap();
    let demo_backup: Value =
        serde_json::from_str(include_str!("../demo-data/demo-backup.json")).unwrap();
    let later: DateTime<Utc> = "2027-02-01T08:00:00Z".parse().unwrap();
    let chosen = exchange::archivable(&lab, &entries, 2026, later, &Utc);
    assert!(!chosen.is_empty());
    let archive = serde_json::to_value(exchange::year_file(
        &lab, &entries, 2026, &chosen, later, "AK",
    ))
    .unwrap();

    let mut extra = backup.clone();
    extra["entries"][0]["note"] = json!("added by hand");
    let mut zero_sd = backup.clone();
    let k = entries
        .iter()
        .position(|e| e.kind == journal::Kind::ControlLevel)
        .unwrap();
    zero_sd["entries"][k]["body"]["sd"] = json!(0);
    let mut huge = backup.clone();
    huge["entries"][k]["body"]["mean"] = json!(1e308);
    let mut no_day = day_file.clone();
    no_day.as_object_mut().unwrap().remove("day");
    let got = errors(&[
        backup,
        day_file,
        demo_backup,
        archive,
        extra,
        zero_sd,
        huge,
        no_day,
    ]);
    for (k, what) in ["backup", "day file", "demo backup", "year archive"]
        .iter()
        .enumerate()
    {
        assert!(got[k].is_empty(), "{what}: {:?}", got[k]);
    }
    for (k, what) in [
        "an added field",
        "an SD of 0",
        "a mean of 1e308",
        "a day file without its day",
    ]
    .iter()
    .enumerate()
    {
        assert!(!got[4 + k].is_empty(), "the schema accepts {what}");
    }
}
