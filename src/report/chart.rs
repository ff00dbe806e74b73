//! The charts of a run, as [`Figure`]s: concentrations, approach to equilibrium, forward and
//! reverse rates, and Q/K per step.

use crate::run::{noise_levels, RunResult};
use crate::units::TimeUnit;

use super::figure::{Band, Figure, Level, Mark, Pattern, Series};
use super::table::{busiest_steps, output_times, peak_forward_rates, step_rates};
use super::terminal_time;
use crate::format::{count, percent};

/// Most curves drawn on one chart; the species with the largest change are kept.
pub const MAX_CURVES: usize = 12;
/// Most steps on the rate and Q/K charts (two curves each on the rate chart).
const MAX_STEPS: usize = 6;
/// Style index of the grey reference lines: slate, the palette's neutral.
const GREY: usize = 9;

/// How the time axis is chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum TimeAxis {
    /// Logarithmic when the approach spans more than three decades, else linear.
    #[default]
    Auto,
    Linear,
    Log,
}

/// What the user asked of the charts.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ChartOptions {
    pub time_axis: TimeAxis,
    /// Species to plot; None picks those that change most.
    pub species: Option<Vec<usize>>,
}

/// Every chart of a run: (file stem, figure). The approach chart needs an equilibrium.
pub fn figures(result: &RunResult, options: &ChartOptions) -> Vec<(&'static str, Figure)> {
    let frame = Frame::new(result, options);
    let mut out = vec![("concentrations", concentrations(result, &frame))];
    if let Some(figure) = approach(result, &frame) {
        out.push(("approach", figure));
    }
    let step_rates = Rates::new(result, &frame);
    out.push(("rates", rates(result, &frame, &step_rates)));
    if let Some(figure) = quotients(result, &frame, &step_rates) {
        out.push(("quotients", figure));
    }
    if let Some(figure) = pressures(result, &frame) {
        out.push(("pressures", figure));
    }
    out
}

/// The bottom of a concentration axis: 0, unless a curve goes clearly below it (more than 0.1 %
/// of the top, beyond the solver's rounding), which then shows instead of running along the axis.
fn y_floor(series: &[Series], y_max: f64) -> f64 {
    let lowest = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .fold(0.0_f64, f64::min);
    if lowest < -1e-3 * y_max {
        1.05 * lowest
    } else {
        0.0
    }
}

/// Partial pressures (name, bar) and their total.
type Pressures = (Vec<(String, f64)>, f64);

/// Total and partial pressures of the gases (closed rigid vessel, p = cRT), for gas runs: the
/// gauge an operator watches.
fn pressures(result: &RunResult, frame: &Frame) -> Option<Figure> {
    let trajectory = &result.solution.trajectory;
    let at = |t: f64| result.pressures_bar(&trajectory.state_at(t));
    let (names, _) = at(0.0)?;
    let times: Vec<f64> = frame.plotted_times().collect();
    let samples: Vec<(f64, Pressures)> = times.iter().filter_map(|&t| Some((t, at(t)?))).collect();
    let mut series: Vec<Series> = vec![Series {
        name: "total".into(),
        points: samples
            .iter()
            .map(|(t, (_, total))| (frame.x(*t), *total))
            .collect(),
        style: 5,
        pattern: None,
    }];
    series.extend(names.iter().enumerate().map(|(k, (name, _))| {
        Series {
            name: name.clone(),
            points: samples
                .iter()
                .map(|(t, (partial, _))| (frame.x(*t), partial[k].1))
                .collect(),
            style: if k >= 5 { k + 1 } else { k },
            pattern: None,
        }
    }));
    let y_max = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .fold(0.0_f64, f64::max);
    Some(Figure {
        title: "Pressure (closed rigid vessel)".into(),
        x_label: frame.x_label(),
        y_label: "pressure [bar]".into(),
        x_log: frame.log_time,
        y_log: false,
        x_range: (frame.x(frame.x_start), frame.x(frame.x_end)),
        y_range: (0.0, if y_max > 0.0 { 1.05 * y_max } else { 1.0 }),
        series,
        notes: vec!["ideal gas, p = cRT at the run temperature".into()],
        ..Figure::default()
    })
}

/// The time axis and species selection shared by the charts.
struct Frame {
    times: Vec<f64>,
    log_time: bool,
    x_start: f64,
    /// End of the time axis: the reported time, or on a linear axis after an automatic stop at
    /// equilibrium, twice the end of the action (the rest is a flat line).
    x_end: f64,
    time_unit: TimeUnit,
    chosen: Vec<usize>,
    left_out: Vec<String>,
}

impl Frame {
    fn new(result: &RunResult, options: &ChartOptions) -> Frame {
        let times = output_times(result);
        let end = result.final_time;
        let first_positive = times.iter().copied().find(|&t| t > 0.0).unwrap_or(end);
        let (active_start, active_end) = active_span(result, &times);
        let spans_decades = active_start > 0.0 && active_end / active_start > 1e3;
        let log_time = match options.time_axis {
            TimeAxis::Auto => spans_decades,
            TimeAxis::Linear => false,
            TimeAxis::Log => true,
        };
        let x_start = if log_time {
            (if active_start > 0.0 {
                active_start / 10.0
            } else {
                first_positive
            })
            .max(first_positive)
        } else {
            0.0
        };
        let x_end = if !log_time && result.settings.until.is_none() && active_end > 0.0 {
            (2.0 * active_end).min(end)
        } else {
            end
        };
        let chosen = match &options.species {
            Some(list) => list.clone(),
            None => largest_changes(result),
        };
        let left_out = (0..result.network.n_species())
            .filter(|i| !chosen.contains(i))
            .map(|i| result.network.species[i].name.clone())
            .collect();
        Frame {
            times,
            log_time,
            x_start,
            x_end,
            time_unit: result.settings.units.time,
            chosen,
            left_out,
        }
    }

    fn x(&self, t: f64) -> f64 {
        t / self.time_unit.seconds()
    }

    fn x_label(&self) -> String {
        format!(
            "time [{}]{}",
            self.time_unit.symbol(),
            if self.log_time { ", logarithmic" } else { "" }
        )
    }

    fn plotted_times(&self) -> impl Iterator<Item = f64> + '_ {
        self.times
            .iter()
            .copied()
            .filter(move |&t| (!self.log_time || t >= self.x_start) && t <= self.x_end)
    }

    /// On a logarithmic time axis t = 0 cannot be drawn: say where the curves start.
    fn log_start_note(&self) -> Option<String> {
        self.log_time.then(|| {
            format!(
                "log time: curves start at {}; the values at t = 0 are in the tables",
                terminal_time(self.x_start, self.time_unit)
            )
        })
    }

    fn left_out_note(&self) -> Option<String> {
        (!self.left_out.is_empty()).then(|| {
            let mut names = self
                .left_out
                .iter()
                .take(8)
                .cloned()
                .collect::<Vec<_>>()
                .join(", ");
            if self.left_out.len() > 8 {
                names += ", ...";
            }
            format!("{} species not shown: {names}", self.left_out.len())
        })
    }
}

/// The species with the largest change over the run, at most [`MAX_CURVES`], in file order.
fn largest_changes(result: &RunResult) -> Vec<usize> {
    let n = result.network.n_species();
    let mut low = vec![f64::INFINITY; n];
    let mut high = vec![f64::NEG_INFINITY; n];
    for state in &result.solution.trajectory.states {
        for (i, &c) in state.iter().enumerate() {
            low[i] = low[i].min(c);
            high[i] = high[i].max(c);
        }
    }
    let change: Vec<f64> = high.iter().zip(&low).map(|(h, l)| h - l).collect();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| change[b].total_cmp(&change[a]));
    order.truncate(MAX_CURVES);
    order.sort_unstable();
    order
}

/// From the first time any species has moved 1 % of its range to the last time any is still
/// more than 1 % of its range from its final value.
fn active_span(result: &RunResult, times: &[f64]) -> (f64, f64) {
    // Two passes over the times, one state at a time (a large network's states at every
    // output time would not fit in a modest memory), shared between threads: the ranges first,
    // then the span.
    let trajectory = &result.solution.trajectory;
    let n = result.network.n_species();
    let first = trajectory.state_at(times[0]);
    let last = trajectory.state_at(times[times.len() - 1]);
    let (low, high) = trajectory.fold_states(
        times,
        || (vec![f64::INFINITY; n], vec![f64::NEG_INFINITY; n]),
        |(low, high), _, state| {
            for (i, &c) in state.iter().enumerate() {
                low[i] = low[i].min(c);
                high[i] = high[i].max(c);
            }
        },
        |(mut low, mut high), (other_low, other_high)| {
            low.iter_mut().zip(&other_low).for_each(|(a, b)| *a = a.min(*b));
            high.iter_mut().zip(&other_high).for_each(|(a, b)| *a = a.max(*b));
            (low, high)
        },
    );
    let range: Vec<f64> = high.iter().zip(&low).map(|(h, l)| h - l).collect();
    let away = |s: &[f64], from: &[f64]| {
        (0..s.len()).any(|i| range[i] > 0.0 && (s[i] - from[i]).abs() > 0.01 * range[i])
    };
    // The first time away from the start, and the last still away from the end.
    let (start, last_unsettled) = trajectory.fold_states(
        times,
        || (None, None),
        |(start, last_unsettled): &mut (Option<usize>, Option<usize>), k, state| {
            if start.is_none() && away(state, &first) {
                *start = Some(k);
            }
            if away(state, &last) {
                *last_unsettled = Some(k);
            }
        },
        |(start, last_unsettled), (later_start, later_unsettled)| {
            (start.or(later_start), later_unsettled.or(last_unsettled))
        },
    );
    let end = last_unsettled.map_or(times[times.len() - 1], |k| times[(k + 1).min(times.len() - 1)]);
    (start.map_or(times[0], |k| times[k]), end)
}

fn concentrations(result: &RunResult, frame: &Frame) -> Figure {
    let c_unit = result.settings.units.concentration;
    let c_scale = c_unit.mol_per_l();
    let trajectory = &result.solution.trajectory;
    let series: Vec<Series> = frame
        .chosen
        .iter()
        .enumerate()
        .map(|(k, &i)| Series {
            name: result.network.species[i].name.clone(),
            points: frame
                .plotted_times()
                .map(|t| (frame.x(t), trajectory.value_at(i, t) / c_scale))
                .collect(),
            style: k,
            pattern: None,
        })
        .collect();
    let mut levels = Vec::new();
    let mut bands = Vec::new();
    let mut notes = Vec::new();
    let tolerance = result.settings.tolerances.first().copied();
    if let Some(eq) = &result.equilibrium {
        let noise = noise_levels(eq, &result.atol, result.settings.rtol);
        let scales = crate::analysis::change_scales(trajectory, eq, &noise);
        for (k, &i) in frame.chosen.iter().enumerate() {
            levels.push(Level {
                y: eq[i] / c_scale,
                style: k,
            });
            if let (Some(tol), Some(s)) = (tolerance, scales[i]) {
                bands.push(Band {
                    low: (eq[i] - tol * s) / c_scale,
                    high: (eq[i] + tol * s) / c_scale,
                    style: k,
                });
            }
        }
        notes.push("thin dashed lines: equilibrium".into());
        if let Some(tol) = tolerance {
            notes.push(format!(
                "shaded: within {} of each species' total change",
                percent(tol)
            ));
        }
    }
    notes.extend(frame.log_start_note());
    notes.extend(frame.left_out_note());
    let y_max = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .chain(levels.iter().map(|l| l.y))
        .fold(0.0_f64, f64::max);
    Figure {
        title: short_title(&result.network.title),
        x_label: frame.x_label(),
        y_label: format!("concentration [{}]", c_unit.symbol()),
        x_log: frame.log_time,
        y_log: false,
        x_range: (frame.x(frame.x_start), frame.x(frame.x_end)),
        y_range: (
            y_floor(&series, y_max),
            if y_max > 0.0 { 1.05 * y_max } else { 1.0 },
        ),
        series,
        levels,
        bands,
        marks: result
            .settings
            .until
            .map(|t| Mark {
                x: frame.x(t),
                label: format!("hold time {}", terminal_time(t, frame.time_unit)),
            })
            .into_iter()
            .collect(),
        notes,
        ..Figure::default()
    }
}

/// The case title cut to fit above a chart.
fn short_title(title: &str) -> String {
    const WIDTH: usize = 64;
    if title.chars().count() <= WIDTH {
        title.to_string()
    } else {
        title.chars().take(WIDTH - 1).collect::<String>() + "…"
    }
}

/// Fraction of the way still to go, |c − c_eq| / (total change), on a log scale against linear
/// time: exponential relaxation is a straight line. Times to equilibrium are marked.
fn approach(result: &RunResult, frame: &Frame) -> Option<Figure> {
    let eq = result.equilibrium.as_ref()?;
    let trajectory = &result.solution.trajectory;
    let noise = noise_levels(eq, &result.atol, result.settings.rtol);
    let scales = crate::analysis::change_scales(trajectory, eq, &noise);
    let smallest_tol = result.settings.tolerances.iter().copied().fold(1.0, f64::min);
    let last_settling = result
        .settling
        .iter()
        .filter_map(|s| s.seconds)
        .fold(0.0, f64::max);
    let end = if last_settling > 0.0 {
        (1.5 * last_settling).min(result.solution.trajectory.end_time())
    } else {
        result.final_time
    };
    let floor = smallest_tol / 100.0;
    let times: Vec<f64> = (0..=400).map(|k| end * k as f64 / 400.0).collect();
    let series: Vec<Series> = frame
        .chosen
        .iter()
        .enumerate()
        .filter_map(|(k, &i)| {
            let s = scales[i]?;
            Some(Series {
                name: result.network.species[i].name.clone(),
                points: times
                    .iter()
                    .map(|&t| {
                        (
                            frame.x(t),
                            ((trajectory.value_at(i, t) - eq[i]).abs() / s).max(floor),
                        )
                    })
                    .collect(),
                style: k,
                pattern: None,
            })
        })
        .collect();
    let marks = result
        .settling
        .iter()
        .filter_map(|s| {
            s.seconds.map(|t| Mark {
                x: frame.x(t),
                label: format!("{}: {}", percent(s.tolerance), terminal_time(t, frame.time_unit)),
            })
        })
        .collect();
    let levels = result
        .settings
        .tolerances
        .iter()
        .map(|&tol| Level { y: tol, style: GREY })
        .collect();
    let mut notes = vec!["grey dashed: tolerances and the times every species stays within them".to_string()];
    notes.extend(frame.left_out_note());
    Some(Figure {
        title: "Approach to equilibrium".into(),
        x_label: format!("time [{}]", frame.time_unit.symbol()),
        y_label: "fraction of the change still to go".into(),
        x_log: false,
        y_log: true,
        x_range: (0.0, frame.x(end)),
        y_range: (floor, 2.0),
        series,
        levels,
        bands: Vec::new(),
        marks,
        notes,
        ..Figure::default()
    })
}

/// Forward and reverse rates at the frame's times of the steps either chart shows, computed once
/// for both the rate and the Q/K chart, and every step's peak forward rate (which picks them).
struct Rates {
    times: Vec<f64>,
    peaks: Vec<f64>,
    forward: Vec<Vec<f64>>,
    reverse: Vec<Vec<f64>>,
}

impl Rates {
    fn new(result: &RunResult, frame: &Frame) -> Rates {
        let times: Vec<f64> = frame.plotted_times().collect();
        let peaks = peak_forward_rates(result, &times);
        let mut shown = busiest_steps(&peaks, MAX_STEPS, |_| true);
        shown.extend(busiest_steps(&peaks, MAX_STEPS, |j| {
            result.network.reactions[j].runs_both_ways()
        }));
        shown.extend(limiting_step(result));
        shown.sort_unstable();
        shown.dedup();
        let (forward, reverse) = step_rates(result, &times, &shown);
        Rates {
            times,
            peaks,
            forward,
            reverse,
        }
    }
}

fn rates(result: &RunResult, frame: &Frame, rates: &Rates) -> Figure {
    let Rates {
        times,
        peaks,
        forward,
        reverse,
    } = rates;
    let shown = busiest_steps(peaks, MAX_STEPS, |_| true);
    let mut series = Vec::new();
    for (k, &j) in shown.iter().enumerate() {
        let label = step_label(j);
        series.push(Series {
            name: format!("{label} fwd"),
            points: times
                .iter()
                .zip(&forward[j])
                .map(|(&t, &v)| (frame.x(t), v))
                .collect(),
            style: k,
            pattern: Some(Pattern::Solid),
        });
        if result.network.reactions[j].reversible {
            series.push(Series {
                name: format!("{label} rev"),
                points: times
                    .iter()
                    .zip(&reverse[j])
                    .map(|(&t, &v)| (frame.x(t), v))
                    .collect(),
                style: k,
                pattern: Some(Pattern::Dashed),
            });
        }
    }
    let positive = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .filter(|v| *v > 0.0);
    let (lo, hi) = positive.fold((f64::INFINITY, 0.0_f64), |(lo, hi), v| (lo.min(v), hi.max(v)));
    let (lo, hi) = if hi > 0.0 {
        (lo.max(hi * 1e-12), hi * 2.0)
    } else {
        (1e-12, 1.0)
    };
    let mut notes = vec![
        "solid: forward rate; dashed: reverse rate; where they meet the step is at equilibrium".to_string(),
    ];
    notes.extend(step_key(result, &shown));
    Figure {
        title: "Forward and reverse rates of the steps".into(),
        x_label: frame.x_label(),
        y_label: "rate [mol/(L s)]".into(),
        x_log: frame.log_time,
        y_log: true,
        x_range: (frame.x(frame.x_start), frame.x(frame.x_end)),
        y_range: (lo, hi),
        series,
        levels: Vec::new(),
        bands: Vec::new(),
        marks: Vec::new(),
        notes,
        ..Figure::default()
    }
}

/// Q/K of each reversible step over time (the ratio of reverse to forward rate for mass
/// action); 1 is equilibrium.
fn quotients(result: &RunResult, frame: &Frame, rates: &Rates) -> Option<Figure> {
    let Rates {
        times,
        peaks,
        forward,
        reverse,
    } = rates;
    let reversible = |j: usize| {
        let r = &result.network.reactions[j];
        r.runs_both_ways()
    };
    let mut shown = busiest_steps(peaks, MAX_STEPS, reversible);
    // The step that sets the slowest relaxation is the one a hold time waits for: it is always
    // shown, in place of the least busy one if need be.
    if let Some(limiting) = limiting_step(result).filter(|&j| reversible(j) && !shown.contains(&j)) {
        if shown.len() == MAX_STEPS {
            shown.pop();
        }
        shown.push(limiting);
        shown.sort_unstable();
    }
    if shown.is_empty() {
        return None;
    }
    let series: Vec<Series> = shown
        .iter()
        .enumerate()
        .map(|(k, &j)| Series {
            name: step_label(j),
            points: times
                .iter()
                .zip(forward[j].iter().zip(&reverse[j]))
                .filter(|(_, (f, r))| **f > 0.0 && **r > 0.0)
                .map(|(&t, (f, r))| (frame.x(t), r / f))
                .collect(),
            style: k,
            pattern: None,
        })
        .collect();
    let (lo, hi) = series
        .iter()
        .flat_map(|s| s.points.iter().map(|p| p.1))
        .fold((1.0_f64, 1.0_f64), |(lo, hi), v| (lo.min(v), hi.max(v)));
    let mut notes = vec!["Q/K = reverse rate / forward rate; 1 (grey) is equilibrium".to_string()];
    notes.extend(step_key(result, &shown));
    Some(Figure {
        title: "Q/K of each step".into(),
        x_label: frame.x_label(),
        y_label: "Q/K".into(),
        x_log: frame.log_time,
        y_log: true,
        x_range: (frame.x(frame.x_start), frame.x(frame.x_end)),
        y_range: ((lo / 2.0).max(1e-8), (hi * 2.0).min(1e8)),
        series,
        levels: vec![Level { y: 1.0, style: GREY }],
        bands: Vec::new(),
        marks: Vec::new(),
        notes,
        ..Figure::default()
    })
}

/// The step with the largest share of the slowest relaxation mode.
fn limiting_step(result: &RunResult) -> Option<usize> {
    let mode = result.relaxation.as_ref().ok()?.first()?;
    let name = &mode.steps.first()?.name;
    result.network.reactions.iter().position(|r| &r.equation == name)
}

fn step_label(j: usize) -> String {
    format!("step {}", j + 1)
}

/// Legend notes that spell out the numbered steps.
fn step_key(result: &RunResult, shown: &[usize]) -> Vec<String> {
    let mut notes: Vec<String> = shown
        .iter()
        .map(|&j| format!("step {}: {}", j + 1, result.network.reactions[j].equation))
        .collect();
    let hidden = result.network.reactions.len() - shown.len();
    if hidden > 0 {
        notes.push(format!("{} not shown", count(hidden, "slower step")));
    }
    notes
}
