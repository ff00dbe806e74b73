//! Chemical formulas such as `C2H6O`, `Ca(OH)2` or `CuSO4·5H2O`, read into element counts for
//! the element-balance audit. Charges are given separately (`charge = -2`).

/// Element symbol → count, in order of first appearance.
#[derive(Debug, Clone, PartialEq)]
pub struct Formula {
    pub elements: Vec<(String, f64)>,
}

impl Formula {
    pub fn count(&self, element: &str) -> f64 {
        self.elements
            .iter()
            .find(|(e, _)| e == element)
            .map_or(0.0, |e| e.1)
    }
}

/// Parses a formula; the error is a message for the user.
pub fn parse_formula(text: &str) -> Result<Formula, String> {
    let mut elements: Vec<(String, f64)> = Vec::new();
    // Hydrates and adducts: `CuSO4·5H2O` (or `.` / `*` as the dot).
    let dotted = hydrate_dots(text);
    for (k, part) in dotted.split(['·', '*']).enumerate() {
        let part = part.trim();
        if part.is_empty() {
            return Err(format!("empty part in formula `{text}`"));
        }
        let chars: Vec<char> = part.chars().collect();
        let mut pos = 0;
        let multiplier = if k > 0 {
            read_number(&chars, &mut pos).unwrap_or(1.0)
        } else {
            1.0
        };
        let counts = read_group(&chars, &mut pos, text)?;
        if pos != chars.len() {
            return Err(format!("unexpected `{}` in formula `{text}`", chars[pos]));
        }
        for (element, n) in counts {
            add(&mut elements, &element, n * multiplier);
        }
    }
    if elements.is_empty() {
        return Err(format!("formula `{text}` names no element"));
    }
    Ok(Formula { elements })
}

/// A `.` is the hydrate dot (`CuSO4.5H2O`), except directly after a lone `0`, where it is a
/// decimal point (`Fe0.95O`): a count that starts with 0 can only be a fraction.
fn hydrate_dots(text: &str) -> String {
    let chars: Vec<char> = text.chars().collect();
    let mut out = String::with_capacity(text.len());
    for (i, &c) in chars.iter().enumerate() {
        let after_lone_zero = i >= 1
            && chars[i - 1] == '0'
            && (i < 2 || !chars[i - 2].is_ascii_digit())
            && chars.get(i + 1).is_some_and(|d| d.is_ascii_digit());
        out.push(if c == '.' && !after_lone_zero { '·' } else { c });
    }
    out
}

fn add(elements: &mut Vec<(String, f64)>, element: &str, n: f64) {
    match elements.iter_mut().find(|(e, _)| e == element) {
        Some(entry) => entry.1 += n,
        None => elements.push((element.to_string(), n)),
    }
}

fn read_number(chars: &[char], pos: &mut usize) -> Option<f64> {
    let start = *pos;
    while *pos < chars.len() && (chars[*pos].is_ascii_digit() || chars[*pos] == '.') {
        *pos += 1;
    }
    (start < *pos)
        .then(|| chars[start..*pos].iter().collect::<String>().parse().ok())
        .flatten()
}

/// Reads elements and bracketed groups until a closing bracket or the end.
fn read_group(chars: &[char], pos: &mut usize, text: &str) -> Result<Vec<(String, f64)>, String> {
    let mut counts: Vec<(String, f64)> = Vec::new();
    while *pos < chars.len() {
        let c = chars[*pos];
        if c == '(' || c == '[' {
            let close = if c == '(' { ')' } else { ']' };
            *pos += 1;
            let inner = read_group(chars, pos, text)?;
            if *pos >= chars.len() || chars[*pos] != close {
                return Err(format!("unclosed `{c}` in formula `{text}`"));
            }
            *pos += 1;
            let n = read_number(chars, pos).unwrap_or(1.0);
            for (element, m) in inner {
                add(&mut counts, &element, m * n);
            }
        } else if c == ')' || c == ']' {
            break;
        } else if c.is_ascii_uppercase() {
            let mut symbol = c.to_string();
            *pos += 1;
            while *pos < chars.len() && chars[*pos].is_ascii_lowercase() {
                symbol.push(chars[*pos]);
                *pos += 1;
            }
            let n = read_number(chars, pos).unwrap_or(1.0);
            add(&mut counts, &symbol, n);
        } else {
            return Err(format!(
                "unexpected `{c}` in formula `{text}`: write elements as symbols (C2H6O), give charges as `charge`"
            ));
        }
    }
    Ok(counts)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reads_formulas() {
        let f = parse_formula("C2H6O").unwrap();
        assert_eq!(
            f.elements,
            vec![("C".into(), 2.0), ("H".into(), 6.0), ("O".into(), 1.0)]
        );
        let f = parse_formula("Ca(OH)2").unwrap();
        assert_eq!((f.count("Ca"), f.count("O"), f.count("H")), (1.0, 2.0, 2.0));
        let f = parse_formula("CuSO4·5H2O").unwrap();
        assert_eq!((f.count("O"), f.count("H")), (9.0, 10.0));
        // The ASCII hydrate dot, and a decimal count after a lone 0.
        let f = parse_formula("CuSO4.5H2O").unwrap();
        assert_eq!((f.count("Cu"), f.count("O"), f.count("H")), (1.0, 9.0, 10.0));
        let f = parse_formula("Fe0.95O").unwrap();
        assert_eq!((f.count("Fe"), f.count("O")), (0.95, 1.0));
        let f = parse_formula("[Fe(CN)6]").unwrap();
        assert_eq!((f.count("Fe"), f.count("C"), f.count("N")), (1.0, 6.0, 6.0));
        for bad in ["", "c2h6o", "Ca(OH", "Fe3+", "H2O·"] {
            assert!(parse_formula(bad).is_err(), "{bad}");
        }
    }
}
