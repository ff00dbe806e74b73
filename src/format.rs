//! Numbers as people read them, in one place: every message, table and report formats through
//! these functions, and none of them prints `NaN` or `inf`.

/// A whole number without decimals, else the shortest form that reads back exactly.
pub fn whole_or_exact(x: f64) -> String {
    if (x - x.round()).abs() < 1e-12 && x.abs() < 1e15 {
        format!("{}", x.round() as i64)
    } else {
        format!("{x}")
    }
}

/// A coefficient: whole numbers as such, else four decimals.
pub fn coefficient(c: f64) -> String {
    if (c - c.round()).abs() < 1e-9 {
        format!("{}", c.round() as i64)
    } else {
        format!("{c:.4}")
    }
}

/// A fraction as a percentage with its sign: 0.05 → "5 %".
pub fn percent(fraction: f64) -> String {
    format!("{} %", trim_percent(fraction))
}

/// A fraction as a percentage without trailing zeros: 0.001 → "0.1".
pub fn trim_percent(fraction: f64) -> String {
    trim_zeros(format!("{:.4}", fraction * 100.0))
}

/// A fraction as a percentage with one decimal and no space: 0.3775 → "37.7%".
pub fn percent_one_decimal(fraction: f64) -> String {
    format!("{:.1}%", 100.0 * fraction)
}

/// A fixed-notation number without trailing zeros ("4.000" reads "4", "2.50" reads "2.5");
/// scientific and whole numbers are left as they are.
pub fn trim_zeros(text: String) -> String {
    if text.contains('.') && !text.contains('e') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

pub fn format_duration(seconds: f64) -> String {
    if !seconds.is_finite() {
        return "(out of range)".into();
    }
    let friendly = if seconds >= 86_400.0 * 2.0 {
        format!(" ({:.2} d)", seconds / 86_400.0)
    } else if seconds >= 3600.0 {
        format!(" ({:.2} h)", seconds / 3600.0)
    } else if seconds >= 120.0 {
        format!(" ({:.1} min)", seconds / 60.0)
    } else {
        String::new()
    };
    format!("{} s{friendly}", significant(seconds))
}

/// Four significant figures, fixed or scientific as fits.
pub fn significant(x: f64) -> String {
    with_digits(x, 4)
}

/// `digits` significant figures: fixed notation between 1e-3 and 1e6, otherwise scientific with
/// a signed two-digit exponent (2.083340e-08), which lines up in columns.
pub fn with_digits(x: f64, digits: usize) -> String {
    if x == 0.0 {
        return "0".into();
    }
    if !x.is_finite() {
        // Never print NaN or inf; the checks upstream should have stopped such a value.
        return "(out of range)".into();
    }
    if x.abs() >= 1e6 || x.abs() < 1e-3 {
        let text = format!("{x:.prec$e}", prec = digits - 1);
        let (mantissa, exponent) = text.split_once('e').unwrap_or((&text, "0"));
        let exponent: i32 = exponent.parse().unwrap_or(0);
        let sign = if exponent < 0 { '-' } else { '+' };
        format!("{mantissa}e{sign}{:02}", exponent.abs())
    } else {
        let decimals = (digits as i32 - 1 - x.abs().log10().floor() as i32).max(0) as usize;
        format!("{x:.decimals$}")
    }
}

pub fn trim_number(x: f64) -> String {
    if x == 0.0 {
        return "0".into();
    }
    if x.abs() >= 1e5 || x.abs() < 1e-3 {
        format!("{x:.2e}")
    } else {
        trim_zeros(format!("{x:.4}"))
    }
}

/// The number format the report uses (six significant figures).
pub fn number(x: f64) -> String {
    with_digits(x, 6)
}

/// A value for a message: overflow and underflow said in words, never `inf` or `NaN`.
pub fn finite_or_word(x: f64) -> String {
    if x.is_nan() {
        "no number (0/0 or ∞/∞)".into()
    } else if x.is_infinite() {
        "a number beyond 1e308 (overflow)".into()
    } else if x == 0.0 {
        "0 (underflow)".into()
    } else {
        format!("{x:e}")
    }
}

/// A count with its noun, singular for one: "1 finding", "3 findings" (nouns here all take -s).
pub fn count(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
    }
}
