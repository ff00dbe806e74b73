//! A bounded fuzz run: randomly mutated versions of the bundled cases go through the whole
//! library (reader, equilibrium solve, audit, run with a wall-clock budget, terminal and JSON
//! reports), and random strings through the unit, equation and formula parsers. The goal is
//! zero panics, zero hangs and no `NaN` or `inf` in anything a person reads.
//!
//! In `cargo test` it runs for about 45 seconds (seeded, so a failure names the seed that
//! reproduces it). For a long campaign:
//!
//! ```sh
//! KINEQUIL_FUZZ_SECONDS=3600 cargo test --release --test main fuzz -- --nocapture
//! ```
//! (`KINEQUIL_FUZZ_SEED` starts from another seed.)

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::Path;
use std::time::{Duration, Instant};

use kinequil::parse_quantity;
use kinequil::Stoichiometry;
use kinequil::{parse_equation, parse_formula, Network};
use kinequil::{run, RunSettings};

use crate::util::SplitMix;

/// Values that have broken numerical code before, or sit at the edges of the ranges.
const EXTREMES: [&str; 24] = [
    "0",
    "-1",
    "1e308",
    "4.9e-324",
    "1e-30",
    "1e30",
    "1e4",
    "1e25",
    "1e-250",
    "nan",
    "inf",
    "-0.0",
    "1000000000000000000000000000000",
    "0.5",
    "2",
    "100",
    "1e-12",
    "\"1 h\"",
    "\"5 degC\"",
    "\"3 bar\"",
    "{ A = 1e300, Ea = 10 }",
    "{ dH = 5000, dS = 0 }",
    "{ dH = -5000, dS = 0 }",
    "\"1e400 L/(mol*s)\"",
];

const FRAGMENTS: [&str; 16] = [
    "<=>",
    "=>",
    " + ",
    "2 ",
    "0",
    "\n[[reaction]]\n",
    "\n[species]\n",
    "order_in = { A = 0 }\n",
    "phase = \"solid\"",
    "phase = \"gas\"",
    "=",
    "\"",
    "{",
    "}",
    "·",
    "K = 1e-300\n",
];

fn budget() -> Duration {
    let seconds = std::env::var("KINEQUIL_FUZZ_SECONDS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(45.0);
    Duration::from_secs_f64(seconds)
}

fn pick<'a>(rng: &mut SplitMix, items: &[&'a str]) -> &'a str {
    items[(rng.next_f64() * items.len() as f64) as usize % items.len()]
}

/// One to three mutations: a number replaced by an extreme, a line dropped or doubled, a
/// fragment inserted, a character deleted.
fn mutate(text: &str, rng: &mut SplitMix) -> String {
    let mut out = text.to_string();
    for _ in 0..1 + (rng.next_f64() * 3.0) as usize {
        let lines: Vec<&str> = out.lines().collect();
        let k = (rng.next_f64() * lines.len().max(1) as f64) as usize % lines.len().max(1);
        out = match (rng.next_f64() * 5.0) as usize {
            0 => {
                // Replace the value after `=` on a line with an extreme.
                let mut l: Vec<String> = lines.iter().map(|s| s.to_string()).collect();
                if let Some(line) = l.get_mut(k) {
                    if let Some(eq) = line.find('=') {
                        if !line.contains("equation") {
                            *line = format!("{}= {}", &line[..eq], pick(rng, &EXTREMES));
                        }
                    }
                }
                l.join("\n")
            }
            1 => lines
                .iter()
                .enumerate()
                .filter(|(i, _)| *i != k)
                .map(|(_, s)| *s)
                .collect::<Vec<_>>()
                .join("\n"),
            2 => {
                let mut l: Vec<&str> = lines.clone();
                if k < l.len() {
                    l.insert(k, lines[k]);
                }
                l.join("\n")
            }
            3 => {
                let at = floor_char(&out, (rng.next_f64() * out.len() as f64) as usize);
                format!("{}{}{}", &out[..at], pick(rng, &FRAGMENTS), &out[at..])
            }
            _ => {
                let at = floor_char(&out, (rng.next_f64() * out.len() as f64) as usize);
                let mut s = out.clone();
                if at < s.len() {
                    s.remove(at);
                }
                s
            }
        };
    }
    out
}

fn floor_char(s: &str, mut i: usize) -> usize {
    i = i.min(s.len());
    while !s.is_char_boundary(i) {
        i -= 1;
    }
    i
}

/// Words a person must never read in output: non-numbers.
fn has_non_number(text: &str) -> bool {
    text.split(|c: char| !(c.is_ascii_alphanumeric() || c == '.'))
        .any(|w| w.eq_ignore_ascii_case("nan") || w.eq_ignore_ascii_case("inf") || w == "infinity")
}

/// Everything the library does with one input; Err(message) for a panic or a non-number.
fn exercise(text: &str) -> Result<(), String> {
    let outcome = catch_unwind(AssertUnwindSafe(|| -> Result<(), String> {
        let Ok(net) = Network::from_text(text, Path::new("fuzz.toml")) else {
            return Ok(()); // a clean refusal is the right answer to bad input
        };
        if net.n_species() > 40 {
            return Ok(());
        }
        let stoich = Stoichiometry::new(&net);
        if let Ok(solved) = kinequil::solve_equilibrium(&net, &stoich) {
            let c0 = net.initial_state();
            let extents = kinequil::extents(&stoich, &c0, &solved.concentrations);
            let table = kinequil::EquilibriumTable::new(&net, &c0, &solved, extents.as_deref());
            if has_non_number(&table.text()) {
                return Err(format!("equilibrium table holds a non-number:\n{}", table.text()));
            }
        }
        let audit = kinequil::audit(&net, 0.1, kinequil::Adjust::Kr);
        let audit_text = kinequil::audit_text(&net, &audit);
        if has_non_number(&audit_text) {
            return Err(format!("audit report holds a non-number:\n{audit_text}"));
        }
        let settings = RunSettings {
            max_seconds: Some(2.0),
            ..RunSettings::default()
        };
        if let Ok(result) = run(net, &settings) {
            let terminal = kinequil::terminal_text(&result, &[]);
            if has_non_number(&terminal) {
                return Err(format!("terminal output holds a non-number:\n{terminal}"));
            }
            let summary = kinequil::Summary::from_result(&result);
            serde_json::to_string(&summary).map_err(|e| e.to_string())?;
        }
        Ok(())
    }));
    match outcome {
        Ok(r) => r,
        Err(payload) => Err(format!(
            "panic: {}",
            payload
                .downcast_ref::<String>()
                .cloned()
                .or_else(|| payload.downcast_ref::<&str>().map(|s| s.to_string()))
                .unwrap_or_default()
        )),
    }
}

#[test]
fn fuzz_whole_runs_of_mutated_cases() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("cases");
    let mut cases: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| std::fs::read_to_string(e.unwrap().path()).unwrap())
        .collect();
    cases.sort();
    let first: u64 = std::env::var("KINEQUIL_FUZZ_SEED")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(1);
    let started = Instant::now();
    let (mut runs, mut parsed) = (0u64, 0u64);
    let mut seed = first;
    // Panics are caught and reported with their seed (the panic hook is left alone: other
    // tests run beside this one and need their messages).
    let mut failures = Vec::new();
    while started.elapsed() < budget() {
        let mut rng = SplitMix(seed);
        let base = &cases[(rng.next_f64() * cases.len() as f64) as usize % cases.len()];
        let text = mutate(base, &mut rng);
        if Network::from_text(&text, Path::new("fuzz.toml")).is_ok() {
            parsed += 1;
        }
        if let Err(why) = exercise(&text) {
            failures.push(format!("seed {seed}: {why}\n--- input ---\n{text}"));
            if failures.len() >= 3 {
                break;
            }
        }
        runs += 1;
        seed += 1;
    }
    eprintln!(
        "fuzz: {runs} mutated inputs ({parsed} valid networks) in {:.1} s, {:.0} per second, seeds {first}..{seed}",
        started.elapsed().as_secs_f64(),
        runs as f64 / started.elapsed().as_secs_f64()
    );
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
    // The mutator must reach the engine, not only the reader's refusals.
    assert!(
        parsed * 10 >= runs,
        "only {parsed} of {runs} mutated inputs were valid networks"
    );
}

#[test]
fn fuzz_parsers_with_random_strings() {
    const ALPHABET: &[char] = &[
        'A', 'B', 'C', 'H', 'O', 'a', 'e', 'l', 'm', 'o', 's', 'L', '0', '1', '2', '9', '.', '-', '+', '*',
        '/', '^', '(', ')', '[', ']', ' ', '·', '<', '=', '>', 'µ', 'E', 'K', 'd', 'g',
    ];
    let mut rng = SplitMix(7);
    let mut failures = Vec::new();
    for _ in 0..20_000 {
        let len = (rng.next_f64() * 16.0) as usize;
        let text: String = (0..len)
            .map(|_| ALPHABET[(rng.next_f64() * ALPHABET.len() as f64) as usize % ALPHABET.len()])
            .collect();
        let outcome = catch_unwind(|| {
            if let Ok(q) = parse_quantity(&text) {
                assert!(q.value.is_finite(), "`{text}` parsed to {}", q.value);
            }
            let _ = parse_equation(&text);
            if let Ok(f) = parse_formula(&text) {
                assert!(f.elements.iter().all(|e| e.1.is_finite()));
            }
        });
        if outcome.is_err() {
            failures.push(text);
        }
    }
    assert!(failures.is_empty(), "panics on: {failures:?}");
}
