//! Reading what a technologist types at the bench: lists of absorbances and calibrator
//! lines. Plain Rust, tested natively; the UI shows the messages as they are.
//!
//! Numbers are separated by spaces, semicolons or ", " (comma and space). A number
//! with a single comma and no point is read with a decimal comma ("0,512"), since
//! many labs write decimals that way; "0.1,0.2" is two numbers.

/// Numbers in `text`; `what` names the field in messages.
pub fn numbers(text: &str, what: &str) -> Result<Vec<f64>, String> {
    let mut out = Vec::new();
    for token in text
        .split(|c: char| c.is_whitespace() || c == ';')
        .filter(|t| !t.is_empty())
    {
        let parts: Vec<String> =
            if token.contains(',') && !token.contains('.') && token.matches(',').count() == 1 {
                vec![token.replace(',', ".")]
            } else {
                token
                    .split(',')
                    .filter(|p| !p.is_empty())
                    .map(str::to_string)
                    .collect()
            };
        for p in parts {
            let v: f64 = p.parse().map_err(|_| {
                format!(
                    "{what}: {p:?} is not a number; write numbers like 0.512 separated by spaces"
                )
            })?;
            if !v.is_finite() {
                return Err(format!("{what}: {p:?} is not a finite number"));
            }
            out.push(v);
        }
    }
    Ok(out)
}

/// Calibrator lines: "concentration  absorbance absorbance …", one calibrator per line
/// (a ':' after the concentration is allowed). Empty lines are skipped.
pub fn calibrator_lines(text: &str) -> Result<Vec<(f64, Vec<f64>)>, String> {
    let mut out = Vec::new();
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() {
            continue;
        }
        let what = format!("calibrator line {}", i + 1);
        let v = numbers(&line.replace(':', " "), &what)?;
        if v.len() < 2 {
            return Err(format!(
                "{what}: give the concentration, then at least one absorbance (e.g. \"100: 0.412 0.415\")"
            ));
        }
        if v[0] < 0.0 {
            return Err(format!("{what}: the concentration {} is below 0", v[0]));
        }
        out.push((v[0], v[1..].to_vec()));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_in_the_ways_people_write_them() {
        let cases: [(&str, &[f64]); 6] = [
            ("0.512 0.515", &[0.512, 0.515]),
            ("0,512; 0,515", &[0.512, 0.515]),
            ("0.1,0.2", &[0.1, 0.2]),
            ("0.1, 0.2\t0.3", &[0.1, 0.2, 0.3]),
            ("  ", &[]),
            ("1e-3", &[0.001]),
        ];
        for (text, want) in cases {
            assert_eq!(numbers(text, "x").unwrap(), want, "{text:?}");
        }
        let e = numbers("0.5 abc", "reagent blank").unwrap_err();
        assert!(
            e.starts_with("reagent blank") && e.contains("\"abc\""),
            "{e}"
        );
    }

    #[test]
    fn calibrator_lines_and_their_errors() {
        let c = calibrator_lines("0: 0.041 0.043\n\n100: 0,412 0,415\n").unwrap();
        assert_eq!(
            c,
            vec![(0.0, vec![0.041, 0.043]), (100.0, vec![0.412, 0.415])]
        );
        assert!(calibrator_lines("100").unwrap_err().contains("line 1"));
        assert!(calibrator_lines("1 0.1\n-5 0.2")
            .unwrap_err()
            .contains("line 2"));
    }
}
