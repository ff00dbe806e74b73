//! The files of a study, rendered from its [`Study`] and [`Table`] alone (so a merged set of
//! shards renders exactly what one unsharded run does): the table, `study.json`, the summary
//! of an ensemble, charts and the one-file report. A shard writes only its table and study.

use std::fmt::Write;

use crate::error::Error;
use crate::format::number;
use crate::study::{time_header, Study, Table, UncertaintySummary};

use super::figure::{Figure, Mark, Series};
use super::html::{escape, STYLE};
use super::CAUTIONS;

/// Every file a study folder may hold (for the output-folder checks).
pub const STUDY_FILES: [&str; 11] = [
    "study.json",
    "sweep.csv",
    "samples.csv",
    "uncertainty.json",
    "sweep_times.svg",
    "sweep_times.png",
    "sweep_conversion.svg",
    "sweep_conversion.png",
    "uncertainty_times.svg",
    "uncertainty_times.png",
    "report.html",
];

/// The name of the table file of a study kind.
pub fn table_name(kind: &str) -> &'static str {
    match kind {
        "sweep" => "sweep.csv",
        _ => "samples.csv",
    }
}

/// Every file of a study folder as (name, bytes).
pub fn render_study(study: &Study, table: &Table) -> Result<Vec<(String, Vec<u8>)>, Error> {
    let compose = |what: &str, message: String| Error::Compose {
        what: what.into(),
        message,
    };
    let json = serde_json::to_string_pretty(study).map_err(|e| compose("study.json", e.to_string()))?;
    let mut files = vec![
        ("study.json".to_string(), (json + "\n").into_bytes()),
        (table_name(&study.kind).to_string(), table.csv().into_bytes()),
    ];
    if study.shard.is_some() {
        return Ok(files);
    }
    let mut sections = String::new();
    let figures = if study.kind == "sweep" {
        sweep_figures(study, table)
    } else {
        let summary = UncertaintySummary::of(study, table);
        let json =
            serde_json::to_string_pretty(&summary).map_err(|e| compose("uncertainty.json", e.to_string()))?;
        files.push(("uncertainty.json".into(), (json + "\n").into_bytes()));
        sections += &uncertainty_section(&summary);
        vec![("uncertainty_times", time_distribution(study, table))]
    };
    let mut charts = Vec::new();
    for (stem, figure) in figures {
        let (svg, png) = figure.render().map_err(|m| compose(stem, m))?;
        charts.push((figure.title.clone(), svg.clone()));
        files.push((format!("{stem}.svg"), svg.into_bytes()));
        files.push((format!("{stem}.png"), png));
    }
    files.push((
        "report.html".into(),
        page(study, table, &sections, &charts).into_bytes(),
    ));
    Ok(files)
}

/// The members that finished, as (value of the first axis, row).
fn by_first_axis<'a>(study: &Study, table: &'a Table) -> Vec<(f64, &'a Vec<String>)> {
    let Some(axis) = study.axis_headers.first() else {
        return Vec::new();
    };
    let k = table.header.iter().position(|h| h == axis).unwrap_or(2);
    table
        .rows
        .iter()
        .filter(|r| r[1] == "ok")
        .filter_map(|r| r[k].parse().ok().map(|x| (x, r)))
        .collect()
}

/// Time to equilibrium and conversion against the first axis; with more axes, one curve per
/// combination of the others (the first twelve).
fn sweep_figures(study: &Study, table: &Table) -> Vec<(&'static str, Figure)> {
    let rows = by_first_axis(study, table);
    let others = |r: &Vec<String>| -> String {
        (1..study.axis_headers.len())
            .map(|a| {
                format!(
                    "{} {}",
                    study.axes[a].split('=').next().unwrap_or(""),
                    number(r[2 + a].parse().unwrap_or(0.0))
                )
            })
            .collect::<Vec<_>>()
            .join(", ")
    };
    let mut groups: Vec<String> = Vec::new();
    for (_, r) in &rows {
        let g = others(r);
        if !groups.contains(&g) && groups.len() < 12 {
            groups.push(g);
        }
    }
    let column = |name: &str| table.header.iter().position(|h| h == name);
    let curves = |names: &[(String, String)]| -> Vec<Series> {
        let mut series = Vec::new();
        for (label, name) in names {
            let Some(k) = column(name) else { continue };
            for g in &groups {
                let points: Vec<(f64, f64)> = rows
                    .iter()
                    .filter(|(_, r)| &others(r) == g)
                    .filter_map(|(x, r)| r[k].parse().ok().map(|y| (*x, y)))
                    .collect();
                if !points.is_empty() && series.len() < 12 {
                    let name = if g.is_empty() {
                        label.clone()
                    } else {
                        format!("{label} ({g})")
                    };
                    series.push(Series {
                        name,
                        style: series.len(),
                        points,
                        pattern: None,
                    });
                }
            }
        }
        series
    };
    let x_name = study
        .axes
        .first()
        .and_then(|a| a.split('=').next())
        .unwrap_or("point");
    let header = study.axis_headers.first().cloned().unwrap_or_default();
    let x_log = header.ends_with("_factor");
    let x_label = axis_label(&header);
    let times: Vec<(String, String)> = study
        .tolerances
        .iter()
        .map(|&t| {
            (
                format!("within {} %", crate::format::trim_percent(t)),
                time_header(t),
            )
        })
        .collect();
    let conversions: Vec<(String, String)> = study
        .species
        .iter()
        .map(|s| (s.clone(), format!("conversion_{s}")))
        // Species used up somewhere (conversion > 0); products that start present go negative.
        .filter(|(_, name)| table.column(name).iter().flatten().any(|&c| c > 0.0))
        .collect();
    let time_curves = curves(&times);
    // A log axis only when the times span more than a decade; within one it would show one tick.
    let (low, high) = time_curves
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .fold((f64::INFINITY, 0.0_f64), |(lo, hi), y| (lo.min(y), hi.max(y)));
    let y_log = low > 0.0 && high / low > 10.0;
    vec![
        (
            "sweep_times",
            figure(
                format!("Time to equilibrium against {x_name}"),
                &x_label,
                "time to equilibrium / s",
                x_log,
                y_log,
                time_curves,
            ),
        ),
        (
            "sweep_conversion",
            figure(
                format!("Equilibrium conversion against {x_name}"),
                &x_label,
                "conversion at equilibrium (1 − c_eq/c0)",
                x_log,
                false,
                curves(&conversions),
            ),
        ),
    ]
}

/// A column header as an axis label: `temperature_K` → "temperature / K".
fn axis_label(header: &str) -> String {
    if let Some(name) = header.strip_suffix("_mol_per_L") {
        format!("{name} / (mol/L)")
    } else if let Some(name) = header.strip_suffix("_factor") {
        format!("{name} multiplier")
    } else if let Some(name) = header.strip_suffix("_K") {
        format!("{name} / K")
    } else {
        header.to_string()
    }
}

/// The empirical distribution of the time to equilibrium at each tolerance (fraction of all
/// members within the tolerance by a given time), with the hold time marked.
fn time_distribution(study: &Study, table: &Table) -> Figure {
    let n = table.rows.len().max(1) as f64;
    let mut series = Vec::new();
    for &tolerance in &study.tolerances {
        let mut times: Vec<f64> = table
            .column(&time_header(tolerance))
            .into_iter()
            .flatten()
            .collect();
        times.sort_by(f64::total_cmp);
        let points = times
            .iter()
            .enumerate()
            .map(|(k, &t)| (t, (k + 1) as f64 / n))
            .collect();
        series.push(Series {
            name: format!("within {} %", crate::format::trim_percent(tolerance)),
            style: series.len(),
            points,
            pattern: None,
        });
    }
    let mut fig = figure(
        "Time to equilibrium over the ensemble".into(),
        "hold time / s",
        "fraction of members at equilibrium",
        true,
        false,
        series,
    );
    fig.y_range = (0.0, 1.0);
    if let Some(until) = study.until {
        fig.marks.push(Mark {
            x: until,
            label: "hold time".into(),
        });
    }
    fig
}

fn figure(
    title: String,
    x_label: &str,
    y_label: &str,
    x_log: bool,
    y_log: bool,
    series: Vec<Series>,
) -> Figure {
    let usable = |v: f64, log: bool| v.is_finite() && (!log || v > 0.0);
    let xs = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.0))
        .filter(|&x| usable(x, x_log));
    let ys = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .filter(|&y| usable(y, y_log));
    let range = |values: Vec<f64>, log: bool| {
        let low = values.iter().copied().fold(f64::INFINITY, f64::min);
        let high = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        match (low.is_finite(), log) {
            (false, _) => (1.0, 10.0),
            // Whole decades, so every log axis has at least two labelled ticks.
            (true, true) => (
                10f64.powf(low.log10().floor()),
                10f64.powf(high.log10().ceil().max(low.log10().floor() + 1.0)),
            ),
            (true, false) => {
                let pad = ((high - low) * 0.05).max(1e-12 * high.abs().max(1.0));
                (low - pad, high + pad)
            }
        }
    };
    Figure {
        title,
        x_label: x_label.to_string(),
        y_label: y_label.to_string(),
        x_log,
        y_log,
        x_range: range(xs.collect(), x_log),
        y_range: range(ys.collect(), y_log),
        series,
        levels: Vec::new(),
        bands: Vec::new(),
        marks: Vec::new(),
        notes: Vec::new(),
        ..Figure::default()
    }
}

fn uncertainty_section(summary: &UncertaintySummary) -> String {
    let mut h = String::new();
    let _ = write!(
        h,
        "<h2>Time to equilibrium over {} members (seed {})</h2>\n<table><tr><th>within</th><th>p05 / s</th><th>p50 / s</th><th>p95 / s</th><th>mean / s</th><th>not reached</th>",
        summary.samples, summary.seed
    );
    if let Some(until) = summary.until {
        let _ = write!(h, "<th>P(within at {} s)</th>", number(until));
    }
    h += "</tr>\n";
    let show = |x: Option<f64>| x.map(number).unwrap_or_else(|| "–".into());
    for t in &summary.time_to_equilibrium {
        let _ = write!(
            h,
            "<tr><td>{} %</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>",
            crate::format::trim_percent(t.tolerance),
            show(t.spread.p05),
            show(t.spread.p50),
            show(t.spread.p95),
            show(t.spread.mean),
            t.spread.missing
        );
        if let Some(p) = t.probability_within_at_until {
            let _ = write!(h, "<td>{}</td>", crate::format::percent(p));
        }
        h += "</tr>\n";
    }
    h += "</table>\n";
    let _ = writeln!(
        h,
        "<p>Failed members: {} (listed in uncertainty.json).</p>",
        summary.failed.count
    );
    h
}

fn page(study: &Study, table: &Table, sections: &str, charts: &[(String, String)]) -> String {
    let mut h = String::new();
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<h1>{} of {}</h1>\n<p class=\"meta\">kinequil {} · input {} (SHA-256 {}) · {} K · {} members</p>\n<div class=\"caution\"><strong>Cautions</strong><ul>",
        escape(&study.title),
        escape(&study.kind),
        escape(&study.title),
        env!("CARGO_PKG_VERSION"),
        escape(&study.case),
        study.case_sha256,
        number(study.temperature_k),
        study.total
    );
    for c in CAUTIONS {
        let _ = write!(h, "<li>{}</li>", escape(c));
    }
    h += "</ul></div>\n";
    if !study.axes.is_empty() {
        let _ = writeln!(h, "<p>Varied: {}</p>", escape(&study.axes.join("; ")));
    }
    for note in &study.notes {
        let _ = writeln!(h, "<p class=\"warning\">{}</p>", escape(note));
    }
    h += sections;
    for (title, svg) in charts {
        let _ = writeln!(
            h,
            "<figure>{svg}<figcaption>{}</figcaption></figure>",
            escape(title)
        );
    }
    let shown = table.rows.len().min(500);
    let _ = writeln!(
        h,
        "<h2>Members ({} of {} shown)</h2>\n<table>",
        shown,
        table.rows.len()
    );
    let _ = writeln!(
        h,
        "<tr>{}</tr>",
        table
            .header
            .iter()
            .map(|c| format!("<th>{}</th>", escape(c)))
            .collect::<String>()
    );
    for row in table.rows.iter().take(shown) {
        let cells: String = row
            .iter()
            .map(|c| match c.parse::<f64>() {
                Ok(x) if c.contains('.') || c.contains('e') => format!("<td>{}</td>", number(x)),
                _ => format!("<td class=\"text\">{}</td>", escape(c)),
            })
            .collect();
        let _ = writeln!(h, "<tr>{cells}</tr>");
    }
    h += "</table>\n</body>\n</html>\n";
    h
}

/// What the terminal shows after a study: what ran, the headline figures, the files.
pub fn terminal_text(study: &Study, table: &Table, written: &[std::path::PathBuf]) -> String {
    let mut t = String::new();
    let failed = table.failed();
    let share = match study.shard {
        Some([i, n]) => format!(
            " (shard {i}/{n}: {} members; join the shards with `kinequil merge`)",
            table.rows.len()
        ),
        None => String::new(),
    };
    let _ = writeln!(
        t,
        "{} of {}: {} members{share}",
        study.kind, study.title, study.total
    );
    for note in &study.notes {
        let _ = writeln!(t, "note: {note}");
    }
    let _ = writeln!(t, "failed members: {}", failed.len());
    for (index, reason) in failed.iter().take(5) {
        let _ = writeln!(t, "  member {index}: {reason}");
    }
    if study.shard.is_none() && study.kind == "uncertainty" {
        let summary = UncertaintySummary::of(study, table);
        let show = |x: Option<f64>| x.map(super::format_duration).unwrap_or_else(|| "–".into());
        let _ = writeln!(t, "time to equilibrium (p05 / p50 / p95):");
        for s in &summary.time_to_equilibrium {
            let _ = write!(
                t,
                "  within {:>5} %: {} / {} / {}",
                crate::format::trim_percent(s.tolerance),
                show(s.spread.p05),
                show(s.spread.p50),
                show(s.spread.p95)
            );
            if let Some(p) = s.probability_within_at_until {
                let _ = write!(
                    t,
                    "; {} of members within it by the hold time",
                    crate::format::percent(p)
                );
            }
            t.push('\n');
        }
    }
    if study.shard.is_none() && study.kind == "sweep" {
        let k = study
            .tolerances
            .iter()
            .position(|&x| (x - 0.01).abs() < 1e-12)
            .unwrap_or(0);
        let tol = study.tolerances.get(k).copied().unwrap_or(0.01);
        let times = table.column(&time_header(tol));
        let _ = writeln!(
            t,
            "time to equilibrium within {} % at each point:",
            crate::format::trim_percent(tol)
        );
        for (row, time) in table.rows.iter().zip(&times).take(25) {
            let point: Vec<String> = study
                .axis_headers
                .iter()
                .enumerate()
                .map(|(a, h)| format!("{h} = {}", row[2 + a]))
                .collect();
            let shown = time
                .map(super::format_duration)
                .unwrap_or_else(|| "not reached".into());
            let _ = writeln!(t, "  {}: {shown}", point.join(", "));
        }
        if table.rows.len() > 25 {
            let _ = writeln!(t, "  … {} more rows in sweep.csv", table.rows.len() - 25);
        }
    }
    t + &super::files_and_cautions(written)
}
