//! Parsing of chemical equations such as `A + 2 B <=> C`, `2B => 0.5 O2` or `0 => A`.
//!
//! A species name starts with a letter or `(`/`[` and may end in a charge (`Fe3+`, `SCN-`). A `+`
//! separates two terms only when the next non-blank character can start a term (a letter, digit,
//! `(`, `[` or `.`), so `Fe3+ + SCN-` and `A+B` both read as intended.

/// One side of an equation: species names with their coefficients, in written order.
pub type Side = Vec<(String, f64)>;

/// A parsed equation, before species names are resolved against the network.
#[derive(Debug, Clone, PartialEq)]
pub struct ParsedEquation {
    pub reactants: Side,
    pub products: Side,
    pub reversible: bool,
}

/// Parses an equation; the error is a message for the user (the caller adds file, line, field).
pub fn parse_equation(text: &str) -> Result<ParsedEquation, String> {
    let (left, right, reversible) = if let Some((l, r)) = text.split_once("<=>") {
        (l, r, true)
    } else if let Some((l, r)) = text.split_once("=>") {
        (l, r, false)
    } else {
        return Err(format!(
            "no arrow in `{text}`: write `<=>` for a reversible step or `=>` for a one-way step"
        ));
    };
    if right.contains("=>") {
        return Err(format!("more than one arrow in `{text}`"));
    }
    let reactants = parse_side(left).map_err(|e| format!("left side of `{text}`: {e}"))?;
    let products = parse_side(right).map_err(|e| format!("right side of `{text}`: {e}"))?;
    if reactants.is_empty() && products.is_empty() {
        return Err(format!("both sides of `{text}` are empty"));
    }
    Ok(ParsedEquation {
        reactants,
        products,
        reversible,
    })
}

fn parse_side(side: &str) -> Result<Side, String> {
    let side = side.trim();
    if side.is_empty() {
        return Err("empty side: write `0` for nothing".into());
    }
    if side == "0" {
        return Ok(Vec::new());
    }
    let mut terms: Side = Vec::new();
    for term in split_terms(side) {
        let (coefficient, name) = parse_term(term)?;
        match terms.iter_mut().find(|(n, _)| *n == name) {
            Some(existing) => existing.1 += coefficient,
            None => terms.push((name, coefficient)),
        }
    }
    Ok(terms)
}

/// Splits a side at the `+` signs that separate terms (see the module comment).
fn split_terms(side: &str) -> Vec<&str> {
    let chars: Vec<(usize, char)> = side.char_indices().collect();
    let mut terms = Vec::new();
    let mut start = 0;
    for (pos, &(byte, c)) in chars.iter().enumerate() {
        if c != '+' {
            continue;
        }
        let before = side[start..byte].trim();
        let next = chars[pos + 1..]
            .iter()
            .map(|&(_, c)| c)
            .find(|c| !c.is_whitespace());
        let starts_term = matches!(next, Some(n) if n.is_alphanumeric() || matches!(n, '(' | '[' | '.'));
        if !before.is_empty() && starts_term {
            terms.push(&side[start..byte]);
            start = byte + 1;
        }
    }
    terms.push(&side[start..]);
    terms
}

fn parse_term(term: &str) -> Result<(f64, String), String> {
    let term = term.trim();
    if term.is_empty() {
        return Err("a `+` with no species after it".into());
    }
    let digits_end = term
        .char_indices()
        .find(|&(_, c)| !(c.is_ascii_digit() || c == '.'))
        .map_or(term.len(), |(i, _)| i);
    let (number, name) = term.split_at(digits_end);
    let name = name.trim();
    let coefficient = if number.is_empty() {
        1.0
    } else {
        number
            .parse::<f64>()
            .map_err(|_| format!("`{number}` is not a coefficient"))?
    };
    if !(coefficient > 0.0 && coefficient.is_finite()) {
        return Err(format!("coefficient of `{term}` must be positive"));
    }
    if name.is_empty() {
        return Err(format!("`{term}` has a coefficient but no species name"));
    }
    let first = name.chars().next().unwrap_or(' ');
    if !(first.is_alphabetic() || first == '(' || first == '[') {
        return Err(format!(
            "`{name}` is not a species name: names start with a letter"
        ));
    }
    if name.chars().any(char::is_whitespace) {
        return Err(format!("`{name}` has a space in it: separate terms with ` + `"));
    }
    Ok((coefficient, name.to_string()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn side(terms: &[(&str, f64)]) -> Side {
        terms.iter().map(|(n, c)| (n.to_string(), *c)).collect()
    }

    #[test]
    fn reads_common_forms() {
        let e = parse_equation("A + 2 B <=> C").unwrap();
        assert_eq!(e.reactants, side(&[("A", 1.0), ("B", 2.0)]));
        assert_eq!(e.products, side(&[("C", 1.0)]));
        assert!(e.reversible);
        let e = parse_equation("2B=>0.5 O2").unwrap();
        assert_eq!(e.reactants, side(&[("B", 2.0)]));
        assert_eq!(e.products, side(&[("O2", 0.5)]));
        assert!(!e.reversible);
        let e = parse_equation("0 => A").unwrap();
        assert!(e.reactants.is_empty());
        let e = parse_equation("A+B => C").unwrap();
        assert_eq!(e.reactants.len(), 2);
        let e = parse_equation("Fe3+ + SCN- <=> FeSCN2+").unwrap();
        assert_eq!(e.reactants, side(&[("Fe3+", 1.0), ("SCN-", 1.0)]));
        let e = parse_equation("A + A => B").unwrap();
        assert_eq!(e.reactants, side(&[("A", 2.0)]));
    }

    #[test]
    fn rejects_malformed() {
        for bad in [
            "A B",
            "A -> B",
            "A + => B",
            " => B",
            "2 => B",
            "A <=> B <=> C",
            "0 => 0",
            "-1 A => B",
        ] {
            assert!(parse_equation(bad).is_err(), "{bad} should be rejected");
        }
    }
}
