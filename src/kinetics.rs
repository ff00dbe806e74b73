//! Mass-action rate laws, the right-hand side dc/dt = N r(c), and its analytic Jacobian.
//!
//! The Jacobian is assembled on a fixed sparse pattern: entry (i, k) exists when species k
//! appears in the rate law of a step that changes species i. Each non-zero is a precomputed
//! list of contributions, so evaluation touches only what is there.

use crate::linalg::Pattern;
use crate::network::{Network, Phase};
use crate::stoich::net_change;

/// Concentrations below this are treated as this when a fractional order (< 1) would make the
/// derivative infinite at zero (mol/L).
const FRACTIONAL_ORDER_FLOOR: f64 = 1e-20;

/// Amount (mol/L) below which a pure solid or liquid counts as used up: the steps that consume
/// it are switched off by the factor n/(n + PRESENCE_SCALE), 1 to within 1e-12 relative for any
/// amount worth reporting and 0 when the phase is gone, so amounts never go negative.
const PRESENCE_SCALE: f64 = 1e-12;

/// One factor of a rate: a concentration to a power, or the presence switch of a pure phase that
/// the direction consumes.
#[derive(Debug, Clone, Copy)]
enum Factor {
    Power { species: usize, order: f64 },
    Presence { species: usize },
}

impl Factor {
    fn species(self) -> usize {
        match self {
            Factor::Power { species, .. } | Factor::Presence { species } => species,
        }
    }

    fn value(self, c: &[f64]) -> f64 {
        match self {
            Factor::Power { species, order } => power(c[species], order, false),
            Factor::Presence { species } => {
                let n = c[species].max(0.0);
                n / (n + PRESENCE_SCALE)
            }
        }
    }

    fn derivative(self, c: &[f64]) -> f64 {
        match self {
            Factor::Power { species, order } => order * power(c[species], order - 1.0, true),
            Factor::Presence { species } => {
                let n = c[species];
                if n < 0.0 {
                    0.0
                } else {
                    PRESENCE_SCALE / (n + PRESENCE_SCALE).powi(2)
                }
            }
        }
    }
}

/// The rate law of one step: rate = kf Π(forward factors) − kr Π(reverse factors).
#[derive(Debug, Clone)]
struct StepLaw {
    kf: f64,
    kr: f64,
    forward: Vec<Factor>,
    reverse: Vec<Factor>,
    net: Vec<(usize, f64)>,
}

/// dr_j/dc_k of one factor, spread over the species the step changes.
#[derive(Debug, Clone)]
struct JacobianTerm {
    step: usize,
    reverse: bool,
    factor: usize,
    /// (position in the Jacobian values, net coefficient of the changed species).
    targets: Vec<(usize, f64)>,
}

/// A step's rate law laid out flat for the right-hand side, which runs once or twice per
/// integration step: each direction's concentrations by index (at most two, a squared species
/// twice, an absent one as index n, where the right-hand side keeps a 1). Steps of other
/// orders or with a pure phase keep `general` and use their [`StepLaw`].
#[derive(Debug, Clone)]
struct FlatStep {
    kf: f64,
    kr: f64,
    forward: [u32; 2],
    reverse: [u32; 2],
    general: bool,
}

// Both rate forms are marked inline: left as calls (one per step and direction), the rate loop
// ran 1.5-2 times slower (syn_N100 rate evaluation ~2.5 against ~1.4 us, interleaved runs).
impl FlatStep {
    /// kf Π(forward factors), from the slots or, for a general step, from its law.
    #[inline]
    fn forward_rate(&self, step: &StepLaw, c: &[f64], padded: &[f64]) -> f64 {
        if self.general {
            step.kf * product(&step.forward, c, None)
        } else {
            self.kf * (padded[self.forward[0] as usize] * padded[self.forward[1] as usize])
        }
    }

    /// Forward minus reverse rate. Multiplying by an absent slot's 1 and taking off kr = 0
    /// times a product are exact, so the slots give the general form's value bit for bit.
    #[inline]
    fn net_rate(&self, step: &StepLaw, c: &[f64], padded: &[f64]) -> f64 {
        let forward = self.forward_rate(step, c, padded);
        if self.general {
            if step.kr == 0.0 {
                forward
            } else {
                forward - step.kr * product(&step.reverse, c, None)
            }
        } else {
            forward - self.kr * (padded[self.reverse[0] as usize] * padded[self.reverse[1] as usize])
        }
    }
}

thread_local! {
    /// The right-hand side's buffers, kept between calls: the concentrations with a 1 appended
    /// (what an absent slot of a [`FlatStep`] reads, so that no slot needs a branch: steps of
    /// different shapes in turn made such branches unpredictable), and every step's net rate.
    static RHS_BUFFERS: std::cell::RefCell<(Vec<f64>, Vec<f64>)> =
        const { std::cell::RefCell::new((Vec::new(), Vec::new())) };
}

/// The ODE system of a network: right-hand side and Jacobian.
#[derive(Debug, Clone)]
pub struct RateModel {
    n: usize,
    steps: Vec<StepLaw>,
    flat: Vec<FlatStep>,
    /// The stoichiometric matrix by species: each species' (step, net coefficient) pairs in
    /// step order, at `row_entries[start..end]` for `rows`' (species, start, end), which are
    /// sorted by length so that the loop over a row ends predictably.
    rows: Vec<(usize, usize, usize)>,
    row_entries: Vec<(u32, f64)>,
    pattern: Pattern,
    terms: Vec<JacobianTerm>,
}

impl RateModel {
    pub fn new(network: &Network) -> RateModel {
        let n = network.n_species();
        let steps: Vec<StepLaw> = network
            .reactions
            .iter()
            .map(|r| StepLaw {
                kf: r.kf,
                kr: if r.reversible { r.kr } else { 0.0 },
                forward: factors(&r.forward_orders, &r.reactants, network),
                reverse: if r.reversible {
                    factors(&r.reverse_orders, &r.products, network)
                } else {
                    Vec::new()
                },
                net: net_change(&r.reactants, &r.products),
            })
            .collect();
        let mut entries: Vec<(usize, usize)> = (0..n).map(|i| (i, i)).collect();
        for step in &steps {
            for k in step.forward.iter().chain(&step.reverse).map(|f| f.species()) {
                entries.extend(step.net.iter().map(|&(i, _)| (i, k)));
            }
        }
        let pattern = Pattern::from_entries(n, entries);
        let mut terms = Vec::new();
        for (j, step) in steps.iter().enumerate() {
            for (reverse, factors) in [(false, &step.forward), (true, &step.reverse)] {
                for (factor, k) in factors.iter().map(|f| f.species()).enumerate() {
                    let targets = step
                        .net
                        .iter()
                        .map(|&(i, nu)| (pattern.position(i, k).expect("entry in pattern"), nu))
                        .collect();
                    terms.push(JacobianTerm {
                        step: j,
                        reverse,
                        factor,
                        targets,
                    });
                }
            }
        }
        let flat = steps
            .iter()
            .map(|step| {
                // With kr = 0 the reverse factors are not read (as in the general form, where
                // 0 times an overflowed product would be NaN).
                let none: &[Factor] = &[];
                let reverse = if step.kr == 0.0 { none } else { &step.reverse };
                let (forward, reverse) = (slots(&step.forward, n), slots(reverse, n));
                FlatStep {
                    kf: step.kf,
                    kr: step.kr,
                    forward: forward.unwrap_or([n as u32; 2]),
                    reverse: reverse.unwrap_or([n as u32; 2]),
                    general: forward.is_none() || reverse.is_none(),
                }
            })
            .collect();
        let mut row_start = vec![0; n + 1];
        for step in &steps {
            step.net.iter().for_each(|&(i, _)| row_start[i + 1] += 1);
        }
        for i in 0..n {
            row_start[i + 1] += row_start[i];
        }
        let mut row_entries = vec![(0, 0.0); row_start[n]];
        let mut next = row_start.clone();
        for (j, step) in steps.iter().enumerate() {
            for &(i, nu) in &step.net {
                row_entries[next[i]] = (j as u32, nu);
                next[i] += 1;
            }
        }
        let mut rows: Vec<(usize, usize, usize)> =
            (0..n).map(|i| (i, row_start[i], row_start[i + 1])).collect();
        rows.sort_by_key(|&(_, start, end)| end - start);
        RateModel {
            n,
            steps,
            flat,
            rows,
            row_entries,
            pattern,
            terms,
        }
    }

    pub fn n_species(&self) -> usize {
        self.n
    }

    pub fn n_steps(&self) -> usize {
        self.steps.len()
    }

    /// Sparsity pattern of the Jacobian (diagonal always included).
    pub fn pattern(&self) -> &Pattern {
        &self.pattern
    }

    /// Forward rate of every step, mol/(L s) (what ranks the steps for tables and charts).
    pub fn forward_rates(&self, c: &[f64], forward: &mut [f64]) {
        with_padded(c, |padded, _| {
            for ((rate, flat), step) in forward.iter_mut().zip(&self.flat).zip(&self.steps) {
                *rate = flat.forward_rate(step, c, padded);
            }
        });
    }

    /// Forward and reverse rate of step j alone (for tables of a few steps of a large network).
    pub fn step_rate(&self, j: usize, c: &[f64]) -> (f64, f64) {
        let step = &self.steps[j];
        let reverse = if step.kr == 0.0 {
            0.0
        } else {
            step.kr * product(&step.reverse, c, None)
        };
        (step.kf * product(&step.forward, c, None), reverse)
    }

    /// dc/dt: every step's net rate, then each species' sum over the steps that change it
    /// (in step order, so the sums are those of adding step by step; gathering by species keeps
    /// each sum in a register, where adding into dc/dt step by step waited on its own stores).
    pub fn rhs(&self, c: &[f64], dcdt: &mut [f64]) {
        with_padded(c, |padded, rates| {
            rates.clear();
            rates.extend(
                self.flat
                    .iter()
                    .zip(&self.steps)
                    .map(|(flat, step)| flat.net_rate(step, c, padded)),
            );
            for &(i, start, end) in &self.rows {
                let row = &self.row_entries[start..end];
                dcdt[i] = row.iter().fold(0.0, |sum, &(j, nu)| sum + nu * rates[j as usize]);
            }
        });
    }

    /// Values of ∂(dc/dt)/∂c on [`RateModel::pattern`].
    pub fn jacobian(&self, c: &[f64], values: &mut [f64]) {
        values.iter_mut().for_each(|v| *v = 0.0);
        for term in &self.terms {
            let step = &self.steps[term.step];
            let (k, factors, sign) = if term.reverse {
                (step.kr, &step.reverse, -1.0)
            } else {
                (step.kf, &step.forward, 1.0)
            };
            if k == 0.0 {
                continue;
            }
            let d = sign * k * product(factors, c, Some(term.factor));
            for &(pos, nu) in &term.targets {
                values[pos] += nu * d;
            }
        }
    }
}

/// The factors of one direction: the rate-law orders, then a presence switch for every pure
/// phase the direction consumes.
fn factors(orders: &[(usize, f64)], consumed: &[(usize, f64)], network: &Network) -> Vec<Factor> {
    let mut out: Vec<Factor> = orders
        .iter()
        .map(|&(species, order)| Factor::Power { species, order })
        .collect();
    out.extend(
        consumed
            .iter()
            .filter(|(i, _)| network.species[*i].phase == Phase::Pure)
            .map(|&(species, _)| Factor::Presence { species }),
    );
    out
}

/// Runs `f` on the concentrations with a 1 appended (what a [`FlatStep`]'s absent slot reads)
/// and on the buffer for step rates, both this thread's, kept between calls.
fn with_padded<R>(c: &[f64], f: impl FnOnce(&[f64], &mut Vec<f64>) -> R) -> R {
    RHS_BUFFERS.with_borrow_mut(|(padded, rates)| {
        padded.clear();
        padded.extend_from_slice(c);
        padded.push(1.0);
        f(padded, rates)
    })
}

/// A direction's factors as the two slots of a [`FlatStep`] (`n` for an absent one), when they
/// are mass action of total order at most two (orders 1 and 2 only, no pure phase).
fn slots(factors: &[Factor], n: usize) -> Option<[u32; 2]> {
    let mut slots = [n as u32; 2];
    let mut used = 0;
    for factor in factors {
        let Factor::Power { species, order } = *factor else {
            return None;
        };
        let copies = if order == 1.0 {
            1
        } else if order == 2.0 {
            2
        } else {
            return None;
        };
        for _ in 0..copies {
            *slots.get_mut(used)? = species as u32;
            used += 1;
        }
    }
    Some(slots)
}

/// Π of the factors; with `differentiate = Some(f)`, the derivative with respect to the
/// concentration behind factor f instead.
fn product(factors: &[Factor], c: &[f64], differentiate: Option<usize>) -> f64 {
    factors
        .iter()
        .enumerate()
        .map(|(f, factor)| {
            if Some(f) == differentiate {
                factor.derivative(c)
            } else {
                factor.value(c)
            }
        })
        .product()
}

/// x^a. Integer orders keep the sign of a slightly negative x (smooth through zero, as the
/// integrator expects); fractional orders use max(x, 0), floored for negative exponents.
fn power(x: f64, a: f64, derivative: bool) -> f64 {
    // Orders 0, 1 and 2 are nearly all of mass action: spare them the general power.
    if a == 0.0 {
        return 1.0;
    }
    if a == 1.0 {
        return x;
    }
    if a == 2.0 {
        return x * x;
    }
    if a.fract() == 0.0 && a.abs() < 64.0 {
        return x.powi(a as i32);
    }
    let base = if derivative && a < 0.0 {
        x.max(FRACTIONAL_ORDER_FLOOR)
    } else {
        x.max(0.0)
    };
    base.powf(a)
}
