//! Mass-action rate laws, the right-hand side dc/dt = N r(c), and its analytic Jacobian.
//!
//! The Jacobian is assembled on a fixed sparse pattern: entry (i, k) exists when species k
//! appears in the rate law of a step that changes species i. Each non-zero is a precomputed
//! list of contributions, so evaluation touches only what is there.

use crate::linalg::Pattern;
use crate::network::Network;
use crate::stoich::net_change;

/// Concentrations below this are treated as this when a fractional order (< 1) would make the
/// derivative infinite at zero (mol/L).
const FRACTIONAL_ORDER_FLOOR: f64 = 1e-20;

/// The rate law of one step: rate = kf Π c^a − kr Π c^b.
#[derive(Debug, Clone)]
struct StepLaw {
    kf: f64,
    kr: f64,
    forward: Vec<(usize, f64)>,
    reverse: Vec<(usize, f64)>,
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

/// The ODE system of a network: right-hand side and Jacobian.
#[derive(Debug, Clone)]
pub struct RateModel {
    n: usize,
    steps: Vec<StepLaw>,
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
                forward: r.forward_orders.clone(),
                reverse: r.reverse_orders.clone(),
                net: net_change(&r.reactants, &r.products),
            })
            .collect();
        let mut entries: Vec<(usize, usize)> = (0..n).map(|i| (i, i)).collect();
        for step in &steps {
            for &(k, _) in step.forward.iter().chain(&step.reverse) {
                entries.extend(step.net.iter().map(|&(i, _)| (i, k)));
            }
        }
        let pattern = Pattern::from_entries(n, entries);
        let mut terms = Vec::new();
        for (j, step) in steps.iter().enumerate() {
            for (reverse, factors) in [(false, &step.forward), (true, &step.reverse)] {
                for (factor, &(k, _)) in factors.iter().enumerate() {
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
        RateModel {
            n,
            steps,
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

    /// Forward and reverse rates of every step, mol/(L s).
    pub fn step_rates(&self, c: &[f64], forward: &mut [f64], reverse: &mut [f64]) {
        for (j, step) in self.steps.iter().enumerate() {
            forward[j] = step.kf * product(&step.forward, c, None);
            reverse[j] = if step.kr == 0.0 {
                0.0
            } else {
                step.kr * product(&step.reverse, c, None)
            };
        }
    }

    /// dc/dt.
    pub fn rhs(&self, c: &[f64], dcdt: &mut [f64]) {
        dcdt.iter_mut().for_each(|v| *v = 0.0);
        for step in &self.steps {
            let mut rate = step.kf * product(&step.forward, c, None);
            if step.kr != 0.0 {
                rate -= step.kr * product(&step.reverse, c, None);
            }
            for &(i, nu) in &step.net {
                dcdt[i] += nu * rate;
            }
        }
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

/// Π c_s^a over the factors; with `differentiate = Some(f)`, the derivative with respect to
/// the concentration of factor f instead.
fn product(factors: &[(usize, f64)], c: &[f64], differentiate: Option<usize>) -> f64 {
    let mut p = 1.0;
    for (f, &(s, a)) in factors.iter().enumerate() {
        let x = c[s];
        p *= if Some(f) == differentiate {
            a * power(x, a - 1.0, true)
        } else {
            power(x, a, false)
        };
    }
    p
}

/// x^a. Integer orders keep the sign of a slightly negative x (smooth through zero, as the
/// integrator expects); fractional orders use max(x, 0), floored for negative exponents.
fn power(x: f64, a: f64, derivative: bool) -> f64 {
    if a == 0.0 {
        return 1.0;
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
