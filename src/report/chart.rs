//! Charts, drawn once per backend (SVG text and PNG pixels) from the same plotting code.
//!
//! Text in PNGs is rendered with the DejaVu Sans font compiled into the binary, so charts look
//! the same on a machine without any font packages.

use std::sync::Once;

use plotters::coord::Shift;
use plotters::prelude::*;

use crate::run::RunResult;

use super::table::output_times;

const SIZE: (u32, u32) = (1000, 620);
const LEGEND_WIDTH: u32 = 190;
/// Most curves drawn on one chart; the species with the largest change are kept.
const MAX_CURVES: usize = 12;
const FONT: &str = "sans-serif";

/// Our palette: twelve hues chosen to stay apart on screen and in greyscale print, with
/// lightness alternating between neighbours.
const PALETTE: [(u8, u8, u8); 12] = [
    (0x1b, 0x4f, 0x9c),
    (0xd9, 0x5f, 0x0e),
    (0x2a, 0x9d, 0x5c),
    (0xb5, 0x1f, 0x3a),
    (0x6a, 0x3d, 0x9a),
    (0x8c, 0x6d, 0x31),
    (0x0f, 0x9a, 0xb0),
    (0xe0, 0xa1, 0x00),
    (0x55, 0x55, 0x55),
    (0xd4, 0x4f, 0xa0),
    (0x1a, 0x1a, 0x1a),
    (0x7f, 0xa8, 0x1e),
];

static FONT_ONCE: Once = Once::new();

fn register_font() {
    FONT_ONCE.call_once(|| {
        // The font is bundled and valid; a failure here would only lose text, not data.
        let _ = plotters::style::register_font(FONT, FontStyle::Normal, dejavu::sans::regular());
        let _ = plotters::style::register_font(FONT, FontStyle::Bold, dejavu::sans::bold());
    });
}

/// Everything one concentration chart shows, in plotting coordinates.
struct Plot {
    title: String,
    time_unit: &'static str,
    concentration_unit: &'static str,
    log_time: bool,
    x_range: (f64, f64),
    y_range: (f64, f64),
    curves: Vec<Curve>,
    hidden: usize,
}

struct Curve {
    name: String,
    points: Vec<(f64, f64)>,
    equilibrium: Option<f64>,
}

/// Species to draw: those with the largest change over the run, in file order.
fn chosen_species(result: &RunResult) -> Vec<usize> {
    let states = &result.solution.trajectory.states;
    let change = |i: usize| {
        let (lo, hi) = states
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), s| {
                (lo.min(s[i]), hi.max(s[i]))
            });
        hi - lo
    };
    let mut order: Vec<usize> = (0..result.network.n_species()).collect();
    order.sort_by(|&a, &b| change(b).total_cmp(&change(a)));
    order.truncate(MAX_CURVES);
    order.sort_unstable();
    order
}

/// The span where the action is: from the first time any species has moved 1 % of its range to
/// the last time any is still more than 1 % of its range from its final value.
fn active_span(result: &RunResult, times: &[f64]) -> (f64, f64) {
    let trajectory = &result.solution.trajectory;
    let states: Vec<Vec<f64>> = times.iter().map(|&t| trajectory.state_at(t)).collect();
    let (first, last) = (&states[0], &states[states.len() - 1]);
    let n = first.len();
    let range: Vec<f64> = (0..n)
        .map(|i| {
            let (lo, hi) = states
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), s| {
                    (lo.min(s[i]), hi.max(s[i]))
                });
            hi - lo
        })
        .collect();
    let moved = |s: &Vec<f64>| (0..n).any(|i| range[i] > 0.0 && (s[i] - first[i]).abs() > 0.01 * range[i]);
    let unsettled = |s: &Vec<f64>| (0..n).any(|i| range[i] > 0.0 && (s[i] - last[i]).abs() > 0.01 * range[i]);
    let start = states.iter().position(moved).map_or(times[0], |k| times[k]);
    let end = states
        .iter()
        .rposition(unsettled)
        .map_or(times[times.len() - 1], |k| times[(k + 1).min(times.len() - 1)]);
    (start, end)
}

fn build_plot(result: &RunResult) -> Plot {
    let times = output_times(result);
    let end = result.final_time;
    let first_positive = times.iter().copied().find(|&t| t > 0.0).unwrap_or(end);
    // A logarithmic time axis when the approach spans more than three decades.
    let (active_start, active_end) = active_span(result, &times);
    let log_time = active_start > 0.0 && active_end / active_start > 1e3;
    let x_start = if log_time {
        (active_start / 10.0).max(first_positive)
    } else {
        0.0
    };
    let units = result.settings.units;
    let (t_scale, c_scale) = (units.time.seconds(), units.concentration.mol_per_l());
    let x_of = |t: f64| {
        if log_time {
            (t.max(x_start) / t_scale).log10()
        } else {
            t / t_scale
        }
    };
    let chosen = chosen_species(result);
    let trajectory = &result.solution.trajectory;
    let curves: Vec<Curve> = chosen
        .iter()
        .map(|&i| Curve {
            name: result.network.species[i].name.clone(),
            points: times
                .iter()
                .filter(|&&t| !log_time || t >= x_start)
                .map(|&t| (x_of(t), trajectory.value_at(i, t) / c_scale))
                .collect(),
            equilibrium: result.equilibrium.as_ref().map(|eq| eq[i] / c_scale),
        })
        .collect();
    let y_max = curves
        .iter()
        .flat_map(|c| c.points.iter().map(|p| p.1).chain(c.equilibrium))
        .fold(0.0_f64, f64::max);
    let y_max = if y_max > 0.0 { y_max * 1.05 } else { 1.0 };
    Plot {
        title: result.network.title.clone(),
        time_unit: units.time.symbol(),
        concentration_unit: units.concentration.symbol(),
        log_time,
        x_range: (x_of(x_start), x_of(end)),
        y_range: (0.0, y_max),
        curves,
        hidden: result.network.n_species() - chosen.len(),
    }
}

fn colour(k: usize) -> RGBColor {
    let (r, g, b) = PALETTE[k % PALETTE.len()];
    RGBColor(r, g, b)
}

/// Tick label for a time axis position: on a log axis only whole decades are labelled.
fn time_label(x: f64, log_time: bool) -> String {
    if !log_time {
        return trim_number(x);
    }
    if (x - x.round()).abs() > 1e-6 {
        return String::new();
    }
    let decade = x.round() as i32;
    if (-3..=4).contains(&decade) {
        trim_number(10f64.powi(decade))
    } else {
        format!("1e{decade}")
    }
}

fn trim_number(x: f64) -> String {
    if x == 0.0 {
        return "0".into();
    }
    if x.abs() >= 1e5 || x.abs() < 1e-3 {
        format!("{x:.2e}")
    } else {
        let s = format!("{x:.4}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

fn draw<DB: DrawingBackend>(root: &DrawingArea<DB, Shift>, plot: &Plot) -> Result<(), String> {
    let fail = |e: DrawingAreaErrorKind<DB::ErrorType>| e.to_string();
    root.fill(&WHITE).map_err(fail)?;
    let (plot_area, legend_area) = root.split_horizontally(SIZE.0 - LEGEND_WIDTH);
    let x_axis = if plot.log_time {
        format!("time [{}], logarithmic", plot.time_unit)
    } else {
        format!("time [{}]", plot.time_unit)
    };
    let y_axis = format!("concentration [{}]", plot.concentration_unit);
    let mut chart = ChartBuilder::on(&plot_area)
        .caption(&plot.title, (FONT, 22).into_font())
        .margin(16)
        .x_label_area_size(48)
        .y_label_area_size(78)
        .build_cartesian_2d(plot.x_range.0..plot.x_range.1, plot.y_range.0..plot.y_range.1)
        .map_err(fail)?;
    let log_time = plot.log_time;
    chart
        .configure_mesh()
        .x_desc(x_axis)
        .y_desc(y_axis)
        .axis_desc_style((FONT, 16))
        .label_style((FONT, 14))
        .light_line_style(RGBColor(0xee, 0xee, 0xee))
        .bold_line_style(RGBColor(0xd0, 0xd0, 0xd0))
        .x_label_formatter(&|x| time_label(*x, log_time))
        .y_label_formatter(&|y| trim_number(*y))
        .draw()
        .map_err(fail)?;
    for (k, curve) in plot.curves.iter().enumerate() {
        let style = colour(k).stroke_width(2);
        chart
            .draw_series(LineSeries::new(curve.points.iter().copied(), style))
            .map_err(fail)?;
        if let Some(eq) = curve.equilibrium {
            let line = [(plot.x_range.0, eq), (plot.x_range.1, eq)];
            chart
                .draw_series(DashedLineSeries::new(
                    line,
                    6,
                    6,
                    colour(k).mix(0.6).stroke_width(1),
                ))
                .map_err(fail)?;
        }
    }
    // The legend sits in its own panel, so it never covers data.
    let text = |size: u32| TextStyle::from((FONT, size).into_font()).color(&BLACK);
    legend_area
        .draw(&Text::new("species", (12, 40), text(15)))
        .map_err(fail)?;
    for (k, curve) in plot.curves.iter().enumerate() {
        let y = 70 + 24 * k as i32;
        legend_area
            .draw(&PathElement::new(
                vec![(12, y), (44, y)],
                colour(k).stroke_width(3),
            ))
            .map_err(fail)?;
        legend_area
            .draw(&Text::new(curve.name.clone(), (52, y - 8), text(14)))
            .map_err(fail)?;
    }
    let mut y = 70 + 24 * plot.curves.len() as i32 + 12;
    if plot.curves.iter().any(|c| c.equilibrium.is_some()) {
        legend_area
            .draw(&PathElement::new(
                vec![(12, y), (20, y)],
                RGBColor(0x77, 0x77, 0x77).stroke_width(1),
            ))
            .map_err(fail)?;
        legend_area
            .draw(&PathElement::new(
                vec![(26, y), (34, y)],
                RGBColor(0x77, 0x77, 0x77).stroke_width(1),
            ))
            .map_err(fail)?;
        legend_area
            .draw(&Text::new("equilibrium", (52, y - 8), text(13)))
            .map_err(fail)?;
        y += 24;
    }
    if plot.hidden > 0 {
        let note = format!("{} more not shown", plot.hidden);
        legend_area
            .draw(&Text::new(note, (12, y), text(13)))
            .map_err(fail)?;
    }
    root.present().map_err(fail)
}

/// The concentration-vs-time chart as SVG text and PNG bytes.
pub fn concentrations(result: &RunResult) -> Result<(String, Vec<u8>), String> {
    register_font();
    let plot = build_plot(result);
    let mut svg = String::new();
    draw(
        &SVGBackend::with_string(&mut svg, SIZE).into_drawing_area(),
        &plot,
    )?;
    let mut pixels = vec![0u8; (SIZE.0 * SIZE.1 * 3) as usize];
    draw(
        &BitMapBackend::with_buffer(&mut pixels, SIZE).into_drawing_area(),
        &plot,
    )?;
    Ok((svg, encode_png(&pixels, SIZE)?))
}

fn encode_png(rgb: &[u8], (width, height): (u32, u32)) -> Result<Vec<u8>, String> {
    let mut bytes = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut bytes, width, height);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder.write_header().map_err(|e| e.to_string())?;
        writer.write_image_data(rgb).map_err(|e| e.to_string())?;
    }
    Ok(bytes)
}
