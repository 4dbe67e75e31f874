//! Properties of the journal and its localStorage copy, over generated cases (proptest):
//! a journal read back from its stored text replays to the same lab, whatever numbers
//! the records hold; any sequence of creates, corrections and voids replays to the state
//! it was made from; any single changed character of a stored chunk is detected.

use chrono::{DateTime, Duration, Utc};
use cuvette::journal::{changes, entries_for, founding_entries, replay, Entry};
use cuvette::lab::{ControlLevel, ControlRun, Lab, RecordMeta};
use cuvette::mirror::{decode_chunk, encode_chunk};
use proptest::prelude::*;

fn demo() -> Lab {
    Lab::from_json(include_str!("../demo-data/demo-lab.json")).expect("demo lab")
}

fn t0() -> DateTime<Utc> {
    "2026-11-27T09:00:00Z".parse().expect("time")
}

/// Stored text → entries → hashes: the same as when they were made.
fn through_text(entries: &[Entry]) -> Vec<Entry> {
    entries
        .iter()
        .map(|e| serde_json::from_str(&serde_json::to_string(e).expect("write")).expect("read"))
        .collect()
}

#[derive(Debug, Clone)]
enum Step {
    AddRun(f64, f64),
    CorrectTarget(usize, f64, f64),
    VoidRun(usize),
}

fn step() -> impl Strategy<Value = Step> {
    prop_oneof![
        (any::<f64>(), -1e6..1e6f64).prop_map(|(a, b)| Step::AddRun(a, b)),
        (0..6usize, -1e4..1e4f64, 1e-6..1e3f64).prop_map(|(k, m, s)| Step::CorrectTarget(k, m, s)),
        (0..200usize).prop_map(Step::VoidRun),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    /// Computed numbers (any f64 within the plausible bounds a fit can give) survive the
    /// stored text exactly, so a genuine entry is never taken for a tampered one.
    #[test]
    fn any_numbers_survive_the_stored_text(a in -1e7..1e7f64, b in 1e-300..1e7f64, c in 1e-300..1e-290f64) {
        let mut lab = demo();
        lab.control_levels[0].mean = a;
        lab.control_levels[0].sd = b;
        lab.control_runs[0].values[0] = Some(c);
        let entries = founding_entries(&lab, t0(), "AK");
        let back = through_text(&entries);
        let r = replay(&back, None, &[]);
        prop_assert!(r.set_aside.is_empty(), "{:?}", r.set_aside);
    }

    /// A stored entry holding a number beyond the plausible bounds (a damaged store) is
    /// set aside and named at replay, never computed with; the rest replays.
    #[test]
    fn an_implausible_stored_number_is_set_aside(x in prop_oneof![1e7..f64::MAX, -f64::MAX..-1e7]) {
        let mut lab = demo();
        lab.control_levels[0].sd = x.abs();
        let entries = founding_entries(&lab, t0(), "AK");
        let r = replay(&through_text(&entries), None, &[]);
        prop_assert_eq!(r.set_aside.len(), 1);
        prop_assert!(r.set_aside[0].why.contains("holds a value no lab records"), "{}", r.set_aside[0].why);
        prop_assert_eq!(r.lab.control_levels.len(), demo().control_levels.len() - 1);
    }

    /// Any sequence of creates, corrections and voids, saved step by step and read back
    /// from text, replays to the lab it was made from.
    #[test]
    fn any_sequence_replays_to_the_same_state(steps in proptest::collection::vec(step(), 1..25)) {
        let mut entries = founding_entries(&demo(), t0(), "AK");
        let mut state = replay(&entries, None, &[]);
        let mut want = state.lab.clone();
        for (k, s) in steps.iter().enumerate() {
            let at = t0() + Duration::minutes(k as i64 + 1);
            let test_id = want.tests[0].meta.id.clone();
            match s {
                Step::AddRun(a, b) => {
                    let levels: Vec<String> = want.levels_of(&test_id).iter().map(|l| l.meta.id.clone()).collect();
                    want.control_runs.push(ControlRun {
                        meta: RecordMeta::new([k as u8 + 1; 16], at, "qa"),
                        test_id,
                        run_at: at,
                        level_ids: levels,
                        values: vec![Some(*a).filter(|v| v.is_finite()), Some(*b)],
                        after_action: None,
                        materials_used: Vec::new(),
                        acknowledged: Vec::new(),
                    });
                }
                Step::CorrectTarget(i, m, sd) => {
                    let n = want.control_levels.len();
                    let l: &mut ControlLevel = &mut want.control_levels[i % n];
                    l.mean = *m;
                    l.sd = *sd;
                }
                Step::VoidRun(i) => {
                    let n = want.control_runs.len();
                    if n > 0 {
                        want.control_runs.remove(i % n);
                    }
                }
            }
            let c = changes(&state.lab, &want);
            match entries_for(&c, &state.version_numbers(), &state.tip, at, "qa", Some("property test")) {
                Ok(new) => {
                    state.extend(&new, None, &[]);
                    entries.extend(new);
                }
                // A value beyond the plausible bounds is refused whole: nothing changes.
                Err(e) => {
                    prop_assert!(e.0.starts_with("not saved: "), "{}", e.0);
                    want = state.lab.clone();
                }
            }
        }
        let back = replay(&through_text(&entries), None, &[]);
        prop_assert!(back.set_aside.is_empty() && back.gaps.is_empty(), "{:?} {:?}", back.set_aside, back.gaps);
        // Meta (versions, change times) comes from the journal; compare the records' content.
        let strip = |l: &Lab| {
            let mut l = l.clone();
            l.control_runs.iter_mut().for_each(|r| r.meta = RecordMeta::new([0; 16], t0(), ""));
            l.control_levels.iter_mut().for_each(|r| r.meta = RecordMeta::new([0; 16], t0(), ""));
            l
        };
        prop_assert_eq!(strip(&back.lab), strip(&want));
        prop_assert_eq!(&back.lab, &state.lab);
    }

    /// Any single changed character of a stored chunk is detected: the chunk cannot be
    /// read, or an entry in it no longer matches its hash.
    #[test]
    fn any_changed_character_of_a_chunk_is_detected(pos in any::<proptest::sample::Index>(), delta in 1u32..0x8000) {
        let entries = founding_entries(&demo(), t0(), "AK");
        let text = encode_chunk(&entries[..40]);
        let mut chars: Vec<char> = text.chars().collect();
        let k = pos.index(chars.len());
        let base = 0x4E00u32;
        let v = (chars[k] as u32 - base + delta) % 0x8000;
        chars[k] = char::from_u32(base + v).expect("char");
        let changed: String = chars.into_iter().collect();
        prop_assert_ne!(&changed, &text);
        match decode_chunk(&changed) {
            Err(_) => {}
            Ok(read) => {
                let r = replay(&read, Some(&entries[39].hash), &[]);
                prop_assert!(read != entries[..40].to_vec(), "a change decoded to the same entries");
                prop_assert!(!r.set_aside.is_empty() || !r.gaps.is_empty(), "a change went unnoticed");
            }
        }
    }
}
