//! The self-contained HTML report: one file, charts inline as SVG, readable offline, and laid
//! out to print cleanly to PDF from a browser.

use std::fmt::Write;

use crate::run::RunResult;

use super::summary::{
    end_word, judged_on, nonlinear_approach_note, relaxation_estimates, stop_description, verdict_lines,
};
use super::CAUTIONS;
use crate::format::{count, number};

/// Everything the report needs beside the run itself.
pub struct ReportInputs<'a> {
    pub input_sha256: &'a str,
    /// UTC date and time of the run.
    pub date: &'a str,
    /// (title, SVG text) of each chart.
    pub charts: &'a [(String, String)],
    /// Names of the files written beside the report.
    pub files: &'a [String],
}

pub const STYLE: &str = r#"
body { font-family: "DejaVu Sans", Helvetica, Arial, sans-serif; color: #1a1a1a; max-width: 62em; margin: 2em auto; padding: 0 1em; line-height: 1.4; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.2em; border-bottom: 2px solid #1b4f9c; padding-bottom: 0.15em; margin-top: 1.6em; }
table { border-collapse: collapse; margin: 0.6em 0; font-size: 0.92em; }
th, td { border: 1px solid #c8c8c8; padding: 0.25em 0.6em; text-align: right; }
th { background: #eef2f8; }
td.text, th.text { text-align: left; }
.meta { color: #555; font-size: 0.9em; }
.caution { border: 2px solid #b51f3a; background: #fbf1f3; padding: 0.6em 1em; margin: 1em 0; }
.warning { color: #b51f3a; font-weight: bold; }
figure { margin: 1em 0; page-break-inside: avoid; break-inside: avoid; }
figure svg { width: 100%; height: auto; }
figcaption { font-size: 0.9em; color: #444; }
pre { background: #f6f6f6; border: 1px solid #ddd; padding: 0.6em; font-size: 0.85em; white-space: pre-wrap; }
code { font-size: 0.95em; }
@media print {
  body { max-width: none; margin: 0; font-size: 10.5pt; }
  h2 { page-break-after: avoid; break-after: avoid; }
  table, .caution, pre { page-break-inside: avoid; break-inside: avoid; }
  @page { size: A4; margin: 16mm 14mm; }
}
"#;

/// Escapes text for HTML.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            _ => out.push(c),
        }
    }
    out
}

pub fn render(result: &RunResult, inputs: &ReportInputs<'_>) -> String {
    let mut h = String::new();
    head(&mut h, result, inputs);
    conditions(&mut h, result);
    for caution in result.network.temperature_cautions() {
        let _ = writeln!(h, "<p class=\"warning\">Caution: {}.</p>", escape(&caution));
    }
    composition(&mut h, result);
    time_to_equilibrium(&mut h, result);
    relaxation(&mut h, result);
    audit(&mut h, result);
    charts(&mut h, inputs);
    solver(&mut h, result, inputs);
    input_file(&mut h, result);
    h
}

/// Title, provenance and cautions.
fn head(h: &mut String, result: &RunResult, inputs: &ReportInputs<'_>) {
    let net = &result.network;
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n",
        escape(&net.title)
    );
    let _ = writeln!(h, "<h1>{}</h1>", escape(&net.title));
    let _ = writeln!(
        h,
        "<p class=\"meta\">kinequil {} &middot; run {} &middot; input <code>{}</code> &middot; SHA-256 <code>{}</code></p>",
        env!("CARGO_PKG_VERSION"),
        escape(inputs.date),
        escape(&net.source.display().to_string()),
        inputs.input_sha256
    );
    let _ = writeln!(h, "<div class=\"caution\"><strong>Cautions.</strong><ul>");
    for c in CAUTIONS {
        let _ = writeln!(h, "<li>{}</li>", escape(c));
    }
    let _ = writeln!(h, "</ul></div>");
}

/// Temperature, species and steps as evaluated.
fn conditions(h: &mut String, result: &RunResult) {
    let net = &result.network;
    // Conditions.
    let _ = writeln!(h, "<h2>Conditions</h2>");
    let _ = writeln!(
        h,
        "<p>Temperature {} K (isothermal), constant volume, ideal mass-action kinetics. Integration tolerances: relative {:e}, absolute {:e} mol/L unless set per species.</p>",
        number(net.temperature),
        result.settings.rtol,
        result.settings.atol
    );
    let _ = writeln!(h, "<table><tr><th class=\"text\">species</th><th class=\"text\">phase</th><th>initial [mol/L]</th></tr>");
    for s in &net.species {
        let phase = match s.phase {
            crate::network::Phase::Dissolved => "solution",
            crate::network::Phase::Gas => "gas",
            crate::network::Phase::Pure => "pure solid/liquid",
        };
        let _ = writeln!(
            h,
            "<tr><td class=\"text\">{}</td><td class=\"text\">{phase}</td><td>{}</td></tr>",
            escape(&s.name),
            number(s.initial)
        );
    }
    let _ = writeln!(h, "</table>");
    let _ = writeln!(h, "<table><tr><th>step</th><th class=\"text\">equation</th><th>kf</th><th>kr</th><th class=\"text\">equilibrium constant</th></tr>");
    for (j, r) in net.reactions.iter().enumerate() {
        let kr = if r.reversible {
            number(r.kr)
        } else {
            "&ndash;".into()
        };
        let source = r.k_source.as_deref().map_or(String::new(), escape);
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td class=\"text\">{}</td><td>{}</td><td>{kr}</td><td class=\"text\">{source}</td></tr>",
            j + 1,
            escape(&r.equation),
            number(r.kf)
        );
    }
    let _ = writeln!(h, "</table><p class=\"meta\">Rate constants in mol/L and s units of their order, evaluated at the run temperature.</p>");
}

/// Initial, final and equilibrium compositions, and gas pressures.
fn composition(h: &mut String, result: &RunResult) {
    let names = result.species_names();
    // Results.
    let _ = writeln!(
        h,
        "<h2>Composition</h2><p>{}.</p>",
        escape(&stop_description(result))
    );
    let _ = writeln!(
        h,
        "<table><tr><th class=\"text\">species</th><th>initial [{u}]</th><th>at {} [{u}]</th><th>equilibrium, solved [{u}]</th><th>{end}, integrated [{u}]</th></tr>",
        escape(&result.time_text(result.final_time)),
        end = end_word(result),
        u = escape(result.settings.units.concentration.symbol())
    );
    let scale = result.settings.units.concentration.mol_per_l();
    let trajectory = &result.solution.trajectory;
    for (i, name) in names.iter().enumerate() {
        let solved = result
            .solved
            .as_ref()
            .map_or("&ndash;".to_string(), |e| number(e.concentrations[i] / scale));
        let integrated = result
            .equilibrium
            .as_ref()
            .map_or("&ndash;".to_string(), |e| number(e[i] / scale));
        let _ = writeln!(
            h,
            "<tr><td class=\"text\">{}</td><td>{}</td><td>{}</td><td>{solved}</td><td>{integrated}</td></tr>",
            escape(name),
            number(trajectory.states[0][i] / scale),
            number(result.final_state[i] / scale)
        );
    }
    let _ = writeln!(h, "</table>");
    let lines = verdict_lines(result);
    if !lines.is_empty() {
        let items: Vec<String> = lines
            .iter()
            .map(|l| format!("<li>{}</li>", escape(l.trim())))
            .collect();
        let _ = writeln!(h, "<h3>Verdict</h3><ul class=\"verdict\">{}</ul>", items.join(""));
    }
    match (&result.solved, result.disagreement) {
        (Ok(_), Some(d)) if result.disagrees => {
            let _ = writeln!(h, "<p class=\"warning\">The integrated end state and the solved equilibrium differ by up to {d:.2e} (relative), more than the tolerances allow.</p>");
        }
        (Ok(_), Some(d)) => {
            let _ = writeln!(h, "<p>The integrated end state agrees with the directly solved equilibrium to {d:.1e} (largest relative difference).</p>");
        }
        (Err(why), _) => {
            let _ = writeln!(h, "<p class=\"warning\">{}</p>", escape(&why.to_string()));
        }
        _ => {}
    }
    if let Some((partial, total)) = result.pressures_bar(&result.final_state) {
        let parts: Vec<String> = partial
            .iter()
            .map(|(n, p)| format!("{} {} bar", escape(n), number(*p)))
            .collect();
        let _ = writeln!(
            h,
            "<p>Gas (closed rigid vessel): total pressure {} bar; partial pressures {}.</p>",
            number(total),
            parts.join(", ")
        );
    }
}

/// Times to equilibrium, with the linear estimate and the hold-time table.
fn time_to_equilibrium(h: &mut String, result: &RunResult) {
    let names = result.species_names();
    let end = end_word(result);
    let _ = writeln!(h, "<h2>Time to {end}</h2>");
    let _ = writeln!(h, "<p>The earliest time after which every species{} stays within the given fraction of its total change from its {end} value.</p>", escape(&judged_on(result)));
    let estimates = relaxation_estimates(result);
    let _ = writeln!(h, "<table><tr><th>tolerance</th><th>time [s]</th><th class=\"text\">readable</th><th class=\"text\">last to settle</th><th>&tau;<sub>slowest</sub>&middot;ln(1/tol) [s]</th></tr>");
    for s in &result.settling {
        let estimate = estimates
            .iter()
            .find(|e| e.tolerance == s.tolerance)
            .map_or("&ndash;".to_string(), |e| number(e.seconds));
        let (seconds, readable) = match s.seconds {
            Some(t) => (number(t), escape(&result.time_text(t))),
            None => ("not reached".to_string(), String::new()),
        };
        let _ = writeln!(
            h,
            "<tr><td>{} %</td><td>{seconds}</td><td class=\"text\">{readable}</td><td class=\"text\">{}</td><td>{estimate}</td></tr>",
            s.tolerance * 100.0,
            escape(s.limiting_species.as_deref().unwrap_or(""))
        );
    }
    let _ = writeln!(h, "</table>");
    if let Some(note) = nonlinear_approach_note(result) {
        let _ = writeln!(h, "<p class=\"note\">Note: {}</p>", escape(&note));
    }
    if result.settings.until.is_some() {
        let parts: Vec<String> = names
            .iter()
            .zip(&result.progress)
            .map(|(n, p)| match p {
                Some(p) => format!("{} {:.1} %", escape(n), 100.0 * p),
                None => format!("{} &ndash;", escape(n)),
            })
            .collect();
        let _ = writeln!(
            h,
            "<p>Share of each species' total change completed at the requested time: {}.</p>",
            parts.join(", ")
        );
    }
}

/// Relaxation modes at equilibrium.
fn relaxation(h: &mut String, result: &RunResult) {
    let _ = writeln!(h, "<h2>Relaxation times</h2>");
    match &result.relaxation {
        Ok(modes) if !modes.is_empty() => {
            let _ = writeln!(h, "<table><tr><th>&tau; [s]</th><th class=\"text\">species that move</th><th class=\"text\">steps that set it (share of the rate)</th></tr>");
            for m in modes.iter().take(12) {
                let species: Vec<String> = m.species.iter().map(|s| escape(&s.name)).collect();
                let steps: Vec<String> = m
                    .steps
                    .iter()
                    .map(|s| format!("{} ({:.0} %)", escape(&s.name), 100.0 * s.share))
                    .collect();
                let _ = writeln!(
                    h,
                    "<tr><td>{}</td><td class=\"text\">{}</td><td class=\"text\">{}</td></tr>",
                    number(m.tau_seconds),
                    species.join(", "),
                    steps.join("; ")
                );
            }
            let _ = writeln!(h, "</table>");
        }
        Ok(_) => {
            let _ = writeln!(h, "<p>No relaxation modes.</p>");
        }
        Err(why) => {
            let _ = writeln!(h, "<p>Relaxation analysis: {}.</p>", escape(why));
        }
    }
}

/// The audit findings in brief.
fn audit(h: &mut String, result: &RunResult) {
    let _ = writeln!(h, "<h2>Audit of the rate constants</h2>");
    let findings = result.audit.brief();
    if findings.is_empty() {
        let _ = writeln!(
            h,
            "<p>No findings at a tolerance of {} kJ/mol.</p>",
            result.audit.tolerance_kj_per_mol
        );
    } else {
        let _ = writeln!(h, "<ul>");
        for f in findings {
            let _ = writeln!(h, "<li>{}</li>", escape(&f));
        }
        let _ = writeln!(h, "</ul><p class=\"meta\"><code>kinequil check</code> gives the full audit and a minimal correction.</p>");
    }
}

/// The charts, inline.
fn charts(h: &mut String, inputs: &ReportInputs<'_>) {
    let _ = writeln!(h, "<h2>Charts</h2>");
    for (title, svg) in inputs.charts {
        let _ = writeln!(
            h,
            "<figure>{svg}<figcaption>{}</figcaption></figure>",
            escape(title)
        );
    }
}

/// Solver statistics, conservation and tolerances.
fn solver(h: &mut String, result: &RunResult, inputs: &ReportInputs<'_>) {
    let names = result.species_names();
    let st = &result.solution.stats;
    let _ = writeln!(h, "<h2>Solver</h2>");
    let _ = writeln!(
        h,
        "<p>{} with {}: {} ({} rejected, {} for negative concentrations), {}, {}, {}, {}; {:.3} s.</p>",
        escape(&st.method),
        escape(&st.linear_solver),
        count(st.steps, "step"),
        st.rejected_steps,
        st.negative_rejections,
        count(st.rhs_evals, "rate evaluation"),
        count(st.jacobian_evals, "Jacobian"),
        count(st.lu_factorizations, "LU factorisation"),
        count(st.equilibrium_checks, "equilibrium check"),
        st.seconds
    );
    let laws: Vec<String> = result
        .stoichiometry
        .conservation
        .iter()
        .zip(&result.drift)
        .map(|(l, d)| format!("{} (drift {d:.1e})", escape(&l.describe_within(&names, 12))))
        .collect();
    if !laws.is_empty() {
        let _ = writeln!(h, "<p>Conserved totals: {}.</p>", laws.join("; "));
    }
    let _ = writeln!(
        h,
        "<p class=\"meta\">Files written with this report: {}.</p>",
        inputs
            .files
            .iter()
            .map(|f| escape(f))
            .collect::<Vec<_>>()
            .join(", ")
    );
}

/// The input file as read.
fn input_file(h: &mut String, result: &RunResult) {
    let net = &result.network;
    let _ = writeln!(h, "<h2>Input file</h2><pre>{}</pre>", escape(&net.source_text));
    let _ = writeln!(h, "</body>\n</html>");
}
