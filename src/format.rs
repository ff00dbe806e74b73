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

/// Appends `x` with ten significant figures in scientific notation, exactly as `{:.9e}` writes
/// it (`1.234567890e-5`), about twenty times faster: the tables of a large network hold
/// millions of numbers, and the standard library's exact decimal conversion falls back to
/// big-number arithmetic on many of them.
///
/// The decade comes from the binary exponent; the mantissa is scaled to ten digits by one or two
/// products with exact powers of ten (error under 4e-6 of its last digit) and rounded; where it
/// lies within 1e-4 of a rounding tie, and for zero, non-finite and very large or small values,
/// the standard conversion decides.
pub fn push_scientific(out: &mut Vec<u8>, x: f64) {
    use std::io::Write;
    /// 10^0 ..= 10^22, every one exact in double precision.
    const POWERS: [f64; 23] = [
        1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17,
        1e18, 1e19, 1e20, 1e21, 1e22,
    ];
    let scaled = |a: f64, k: i32| -> f64 {
        // a / 10^k
        match k {
            0..=22 => a / POWERS[k as usize],
            23..=44 => a / 1e22 / POWERS[(k - 22) as usize],
            -22..=-1 => a * POWERS[(-k) as usize],
            _ => a * 1e22 * POWERS[(-k - 22) as usize],
        }
    };
    let a = x.abs();
    // floor(log10 a) from the binary exponent e (2^e ≤ a < 2^(e+1)): floor(e log10 2) is the
    // decade or one below it, which the rescaling below corrects; no logarithm needed. In
    // integers, (e · 78913) >> 18 (78913 / 2^18 = 0.3010299...; the form of U. Adams' Ryu, PLDI
    // 2018; checked equal to the floating-point form for every e in -1100..1100; the shift rounds
    // down, negative e included).
    let exponent = ((a.to_bits() >> 52) & 0x7ff) as i32 - 1023;
    let decade = if a.is_finite() && a != 0.0 {
        (exponent * 78_913) >> 18
    } else {
        i32::MAX
    };
    if !(-30..=50).contains(&decade) {
        write!(out, "{x:.9e}").expect("writing to memory");
        return;
    }
    let (mut decade, mut m) = (decade, scaled(a, decade - 9));
    // The estimate may be one decade low; rounding in the scaling may cross a power of ten.
    if m >= 1e10 {
        decade += 1;
        m = scaled(a, decade - 9);
    } else if m < 1e9 {
        decade -= 1;
        m = scaled(a, decade - 9);
    }
    // m is positive: the cast rounds down (and stays clear of the library's floor and round,
    // which without SSE4.1 are calls).
    let whole = m as u64;
    let fraction = m - whole as f64;
    if (fraction - 0.5).abs() < 1e-4 || !(1e9..1e10).contains(&m) {
        write!(out, "{x:.9e}").expect("writing to memory");
        return;
    }
    let mut digits = whole + u64::from(fraction > 0.5);
    if digits == 10_000_000_000 {
        digits = 1_000_000_000;
        decade += 1;
    }
    // Sign, ten digits with the point after the first, 'e', sign and up to two exponent digits.
    let mut text = [0u8; 16];
    let mut len = 0;
    if x < 0.0 {
        text[0] = b'-';
        len = 1;
    }
    let mantissa = &mut text[len..len + 11];
    mantissa[1] = b'.';
    for k in (0..11).rev().filter(|&k| k != 1) {
        mantissa[k] = b'0' + (digits % 10) as u8;
        digits /= 10;
    }
    len += 11;
    text[len] = b'e';
    len += 1;
    if decade < 0 {
        text[len] = b'-';
        len += 1;
    }
    let decade = decade.unsigned_abs();
    if decade >= 10 {
        text[len] = b'0' + (decade / 10) as u8;
        len += 1;
    }
    text[len] = b'0' + (decade % 10) as u8;
    len += 1;
    out.extend_from_slice(&text[..len]);
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Against the standard library's exact conversion (the reference): identical text for
    /// random values over the whole range the fast path takes and beyond, and for the edges
    /// (powers of ten, values rounding up to the next decade, exact ties, zero, non-finite).
    #[test]
    fn scientific_text_is_what_the_standard_conversion_writes() {
        let mut state = 0x9e37_79b9_7f4a_7c15_u64;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state
        };
        let mut values: Vec<f64> = (0..400_000)
            .map(|_| {
                let u = (next() >> 11) as f64 / (1u64 << 53) as f64;
                let sign = if next() % 2 == 0 { 1.0 } else { -1.0 };
                sign * 10f64.powf(-40.0 + 100.0 * u)
            })
            .collect();
        values.extend((0..400_000).map(|_| f64::from_bits(next() >> 2)));
        for e in -35..=55 {
            let p = 10f64.powi(e);
            values.extend([
                p,
                p.next_up(),
                p.next_down(),
                9.9999999995 * p,
                1.2345678905 * p,
                0.5 * p,
            ]);
        }
        values.extend([
            0.0,
            -0.0,
            f64::NAN,
            f64::INFINITY,
            f64::MIN_POSITIVE,
            1.25,
            2.5e-7,
        ]);
        let mut fast = Vec::new();
        for x in values {
            fast.clear();
            push_scientific(&mut fast, x);
            assert_eq!(fast, format!("{x:.9e}").into_bytes(), "bits {:#x}", x.to_bits());
        }
    }
}
