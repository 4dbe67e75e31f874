//! What must not be used: the materials chosen for a QC run or a calibration, checked
//! against their stability at the moment of use — the material itself (maker's expiry,
//! after opening, on board, frozen, thawed) and, in a multi-analyte material, the
//! analyte the test measures. Each problem is a sentence the technologist must
//! acknowledge before the entry is saved; the acknowledged sentences are kept on the
//! entry. Plain Rust; the stability arithmetic is `engine::stability`.

use chrono::{DateTime, TimeZone, Utc};

use crate::engine::stability::{self, StabilityState, WarningWindow};
use crate::lab::{Lab, MaterialRecord, TestSetup};

/// Whether an analyte named inside a material is the one the test measures: the same
/// code, or the test's name begins with it (case and spacing ignored).
pub fn measures(test: &TestSetup, analyte: &str) -> bool {
    let norm = |s: &str| s.trim().to_lowercase();
    let a = norm(analyte);
    !a.is_empty() && (norm(&test.code) == a || norm(&test.name).starts_with(&a))
}

fn label(m: &MaterialRecord) -> String {
    format!("{} lot {}", m.name, m.lot)
}

/// The warnings for using `chosen` (material ids) with `test` at `now`; empty when
/// every one is within its stability. An id no longer in the lab is a warning too.
pub fn warnings<Tz: TimeZone>(
    lab: &Lab,
    chosen: &[String],
    test: &TestSetup,
    now: DateTime<Utc>,
    tz: &Tz,
) -> Vec<String>
where
    Tz::Offset: std::fmt::Display,
{
    let when = |t: DateTime<Utc>| t.with_timezone(tz).format("%Y-%m-%d %H:%M").to_string();
    let mut out = Vec::new();
    for id in chosen {
        let Some(m) = lab.materials.iter().find(|m| &m.meta.id == id) else {
            out.push(format!(
                "a chosen material ({id}) is no longer in the materials list"
            ));
            continue;
        };
        if let Some(d) = &m.discarded {
            out.push(format!(
                "{}: discarded {} ({}): do not use",
                label(m),
                when(d.at),
                d.reason
            ));
            continue;
        }
        // A frozen aliquot is thawed, not opened (its own countdown says so).
        if m.stability.opened_at.is_none() && m.stability.frozen.is_none() {
            out.push(format!(
                "{}: not recorded as opened: open it in Materials first, so its stability \
                 after opening counts",
                label(m)
            ));
        }
        let report = match stability::evaluate(&m.stability, now, tz, WarningWindow::default()) {
            Ok(r) => r,
            Err(e) => {
                out.push(format!(
                    "{}: its stability cannot be worked out ({e}); check it in Materials",
                    label(m)
                ));
                continue;
            }
        };
        if report.material.state == StabilityState::Expired {
            out.push(format!(
                "{}: past its {} ({})",
                label(m),
                report.material.governed_by.describe(),
                when(report.material.until)
            ));
        }
        for (analyte, u) in &report.analytes {
            if u.state == StabilityState::Expired && measures(test, analyte) {
                out.push(format!(
                    "{}: {analyte} is past its {} in this material ({})",
                    label(m),
                    u.governed_by.describe(),
                    when(u.until)
                ));
            }
        }
    }
    out
}

/// Why a save is refused: warnings the technologist has not acknowledged.
pub fn refusal(warnings: &[String], acknowledged: bool) -> Option<&'static str> {
    (!warnings.is_empty() && !acknowledged).then_some(
        "a material chosen is past its stability, not opened or discarded: read the warning \
         and tick the box, or choose another material",
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::Duration;

    fn demo() -> Lab {
        Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap()
    }

    /// The demo's multi-analyte control names ALT with its own in-use stability: a day
    /// past that, using it for ALT asks for an acknowledgement naming ALT; for
    /// creatinine it does not (until the material itself runs out).
    #[test]
    fn an_analyte_past_its_stability_warns_only_for_its_own_test() {
        let lab = demo();
        let control = lab
            .materials
            .iter()
            .find(|m| !m.stability.analytes.is_empty())
            .unwrap();
        let alt = lab.tests.iter().find(|t| t.code == "ALT").unwrap();
        let crea = lab.tests.iter().find(|t| t.code == "CREA").unwrap();
        let r = stability::evaluate(
            &control.stability,
            lab.newest_time().unwrap(),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap();
        let (_, alt_until) = r.analytes.iter().find(|(a, _)| a == "ALT").unwrap();
        let later = alt_until.until + Duration::hours(1);
        assert!(later < r.material.until, "the material outlives its ALT");
        let ids = vec![control.meta.id.clone()];
        let w = warnings(&lab, &ids, alt, later, &Utc);
        assert_eq!(w.len(), 1, "{w:?}");
        assert!(w[0].contains("ALT is past its"), "{}", w[0]);
        assert!(warnings(&lab, &ids, crea, later, &Utc).is_empty());
        assert!(warnings(&lab, &ids, alt, alt_until.until - Duration::hours(1), &Utc).is_empty());
    }

    /// Past the material's own limit, every test is warned; a vanished id is named.
    #[test]
    fn a_material_past_its_limit_or_gone_warns() {
        let lab = demo();
        let reagent = &lab.materials[0];
        let glu = &lab.tests[0];
        let r = stability::evaluate(
            &reagent.stability,
            lab.newest_time().unwrap(),
            &Utc,
            WarningWindow::default(),
        )
        .unwrap();
        let ids = vec![reagent.meta.id.clone(), "gone".to_string()];
        let w = warnings(
            &lab,
            &ids,
            glu,
            r.material.until + Duration::minutes(1),
            &Utc,
        );
        assert_eq!(w.len(), 2, "{w:?}");
        assert!(
            w[0].starts_with(&format!("{} lot {}: past its", reagent.name, reagent.lot)),
            "{}",
            w[0]
        );
        assert!(w[1].contains("no longer in the materials list"));
    }

    /// A discarded material, or one received but never opened, asks for an
    /// acknowledgement naming why.
    #[test]
    fn a_discarded_or_unopened_material_warns() {
        let mut lab = demo();
        let now = lab.newest_time().unwrap();
        let glu = lab.tests[0].clone();
        let ids = vec![lab.materials[0].meta.id.clone()];
        assert!(warnings(&lab, &ids, &glu, now, &Utc).is_empty());
        lab.materials[0].stability.opened_at = None;
        let w = warnings(&lab, &ids, &glu, now, &Utc);
        assert!(
            w.len() == 1 && w[0].contains("not recorded as opened"),
            "{w:?}"
        );
        lab.materials[0] = lab.materials[0].discard(now, "AK", "contaminated").unwrap();
        let w = warnings(&lab, &ids, &glu, now, &Utc);
        assert!(
            w.len() == 1 && w[0].contains("discarded") && w[0].contains("contaminated"),
            "{w:?}"
        );
        assert!(refusal(&w, false).is_some() && refusal(&w, true).is_none());
    }

    #[test]
    fn an_analyte_is_matched_by_code_or_the_start_of_the_name() {
        let lab = demo();
        let alt = lab.tests.iter().find(|t| t.code == "ALT").unwrap();
        assert!(measures(alt, " alt "));
        assert!(!measures(alt, "Bilirubin"));
        assert!(!measures(alt, ""));
    }
}
