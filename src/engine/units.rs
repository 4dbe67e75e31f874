//! Unit conversion for common analytes: mass concentration (mg/dL, mg/L, g/L, µg/dL)
//! ↔ amount-of-substance concentration (mmol/L, µmol/L) through the molar mass.
//!
//! mmol/L = mg/dL × 10 / M, with M in g/mol. Unit codes follow UCUM ("mg/dL",
//! "mmol/L", "umol/L"; "µmol/L" is accepted too).

use serde::{Deserialize, Serialize};

/// An analyte with the molar mass used for conversion.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Analyte {
    pub code: &'static str,
    pub name: &'static str,
    /// g/mol, of the species the result is expressed as.
    pub molar_mass: f64,
}

/// Molar masses from the atomic weights (IUPAC) of the species as usually reported.
pub const ANALYTES: [Analyte; 12] = [
    Analyte {
        code: "GLU",
        name: "Glucose",
        molar_mass: 180.156,
    },
    Analyte {
        code: "CREA",
        name: "Creatinine",
        molar_mass: 113.12,
    },
    Analyte {
        code: "UREA",
        name: "Urea",
        molar_mass: 60.056,
    },
    // Urea nitrogen: two N atoms per urea molecule, so mmol/L of urea from mg/dL of N.
    Analyte {
        code: "BUN",
        name: "Urea nitrogen (as urea)",
        molar_mass: 28.014,
    },
    Analyte {
        code: "CHOL",
        name: "Cholesterol",
        molar_mass: 386.65,
    },
    Analyte {
        code: "TG",
        name: "Triglycerides (as triolein)",
        molar_mass: 885.43,
    },
    Analyte {
        code: "UA",
        name: "Uric acid",
        molar_mass: 168.11,
    },
    Analyte {
        code: "BIL",
        name: "Bilirubin",
        molar_mass: 584.66,
    },
    Analyte {
        code: "CA",
        name: "Calcium",
        molar_mass: 40.078,
    },
    Analyte {
        code: "MG",
        name: "Magnesium",
        molar_mass: 24.305,
    },
    Analyte {
        code: "PHOS",
        name: "Phosphate (as phosphorus)",
        molar_mass: 30.974,
    },
    Analyte {
        code: "FE",
        name: "Iron",
        molar_mass: 55.845,
    },
];

pub fn analyte(code: &str) -> Option<Analyte> {
    ANALYTES
        .iter()
        .copied()
        .find(|a| a.code.eq_ignore_ascii_case(code))
}

/// Mass per litre (g/L) of one unit, or amount per litre (mol/L) of one unit.
fn unit(u: &str) -> Option<(bool, f64)> {
    // (is_molar, size in g/L or mol/L)
    Some(match u.trim().replace('µ', "u").as_str() {
        "g/L" => (false, 1.0),
        "g/dL" => (false, 10.0),
        "mg/dL" => (false, 0.01),
        "mg/L" => (false, 0.001),
        "ug/dL" => (false, 1e-5),
        "ug/mL" => (false, 1e-3),
        "mol/L" => (true, 1.0),
        "mmol/L" => (true, 1e-3),
        "umol/L" => (true, 1e-6),
        _ => return None,
    })
}

/// Convert `value` of `analyte` from one unit to another.
pub fn convert(analyte_code: &str, value: f64, from: &str, to: &str) -> Result<f64, String> {
    let (fm, fs) =
        unit(from).ok_or_else(|| format!("unit {from:?} is not one this converter knows"))?;
    let (tm, ts) =
        unit(to).ok_or_else(|| format!("unit {to:?} is not one this converter knows"))?;
    let base = value * fs; // g/L or mol/L
    let converted = if fm == tm {
        base
    } else {
        let a = analyte(analyte_code).ok_or_else(|| {
            format!(
                "no molar mass for analyte {analyte_code:?}; known: {}",
                ANALYTES
                    .iter()
                    .map(|a| a.code)
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        })?;
        if fm {
            base * a.molar_mass
        } else {
            base / a.molar_mass
        }
    };
    Ok(converted / ts)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// SI conversion factors as tabulated in clinical chemistry handbooks and journal
    /// author guides (from memory; 3–4 significant figures), checked to 0.2 %.
    #[test]
    fn handbook_factors() {
        let cases = [
            ("GLU", "mg/dL", "mmol/L", 0.05551),
            ("CREA", "mg/dL", "umol/L", 88.4),
            ("BUN", "mg/dL", "mmol/L", 0.357),
            ("CHOL", "mg/dL", "mmol/L", 0.02586),
            ("TG", "mg/dL", "mmol/L", 0.01129),
            ("UA", "mg/dL", "umol/L", 59.48),
            ("BIL", "mg/dL", "µmol/L", 17.1),
            ("CA", "mg/dL", "mmol/L", 0.2495),
            ("MG", "mg/dL", "mmol/L", 0.4114),
            ("PHOS", "mg/dL", "mmol/L", 0.3229),
            ("FE", "ug/dL", "umol/L", 0.1791),
        ];
        for (code, from, to, factor) in cases {
            let got = convert(code, 1.0, from, to).unwrap();
            assert!(
                (got / factor - 1.0).abs() < 2e-3,
                "{code}: {got} vs {factor}"
            );
            let back = convert(code, got, to, from).unwrap();
            assert!((back - 1.0).abs() < 1e-12);
        }
        assert!((convert("GLU", 1.0, "g/L", "mg/dL").unwrap() - 100.0).abs() < 1e-12);
        assert!(convert("XYZ", 1.0, "mg/dL", "mmol/L")
            .unwrap_err()
            .contains("GLU"));
        assert!(convert("GLU", 1.0, "mg%", "mmol/L").is_err());
    }
}
