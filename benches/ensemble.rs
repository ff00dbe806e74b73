//! Figures for the study engine (issue targets): a 10,000-member uncertainty ensemble of a
//! 20-species network on every core, the speed-up from 1 to 2 threads, and the cost of one
//! member against one full `kinequil run` of the same case (files and charts included).
//!
//! Run: `cargo bench --bench ensemble` (optionally `-- N` for another ensemble size). Figures
//! are printed, never asserted: the machines are shared and noisy; compare ratios within a run.

use std::time::Instant;

use kinequil::{evaluate_members, Network, NetworkBuilder, Outcome, RunSettings, Sampler};

/// Our own scenario: ten isomers A1..A10 in a chain, ten isomeric dimers B1..B10 in a chain, and
/// the dimerisation 2 A1 <=> B1; every kf known within a factor 2, every K within 1 kJ/mol.
fn twenty_species() -> Network {
    let mut b = NetworkBuilder::new("20 species: isomer chains and a dimerisation");
    for i in 1..=10 {
        b = b.species(&format!("A{i}"), if i == 1 { 1.0 } else { 0.0 });
    }
    for i in 1..=10 {
        b = b.species(&format!("B{i}"), 0.0);
    }
    for family in ["A", "B"] {
        for i in 1..10 {
            let kf = 1e-3 * (1.0 + 0.37 * i as f64);
            let k = 0.5 + 0.21 * i as f64;
            b = b
                .reaction(&format!("{family}{i} <=> {family}{}", i + 1), kf)
                .equilibrium_constant(k)
                .kf_uncertainty(2.0)
                .k_uncertainty_kj(1.0);
        }
    }
    b.reaction("2 A1 <=> B1", 5e-3)
        .equilibrium_constant(3.0)
        .kf_uncertainty(2.0)
        .k_uncertainty_kj(1.0)
        .build()
        .expect("valid network")
}

/// Seconds to run members 0..n on `threads` threads, and how many failed.
fn ensemble(sampler: &Sampler, n: usize, threads: usize) -> (f64, usize) {
    let settings = RunSettings::default();
    let indices: Vec<usize> = (0..n).collect();
    let started = Instant::now();
    let outcomes = evaluate_members(
        &indices,
        threads,
        |i| sampler.member(7, i).and_then(|m| Outcome::of(&m, &settings)),
        &|_| {},
    );
    (
        started.elapsed().as_secs_f64(),
        outcomes.iter().filter(|o| o.is_err()).count(),
    )
}

/// Wall-clock seconds of one full `kinequil run` of the case (best of three).
fn full_run(network: &Network) -> Option<f64> {
    let binary = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/release/kinequil");
    if !binary.exists() {
        return None;
    }
    let dir = tempfile::tempdir().ok()?;
    let mut text = String::from("[species]\n");
    for s in &network.species {
        text += &format!("{} = {}\n", s.name, s.initial);
    }
    for r in &network.reactions {
        text += &format!(
            "\n[[reaction]]\nscheme = \"{}\"\nkf = {}\nK = {}\n",
            r.equation,
            r.kf,
            r.kf / r.kr
        );
    }
    let case = dir.path().join("twenty.toml");
    std::fs::write(&case, text).ok()?;
    (0..3)
        .map(|k| {
            let started = Instant::now();
            let status = std::process::Command::new(&binary)
                .args(["run", case.to_str()?, "--out"])
                .arg(dir.path().join(format!("run{k}")))
                .output()
                .ok()?;
            status.status.success().then(|| started.elapsed().as_secs_f64())
        })
        .collect::<Option<Vec<f64>>>()
        .map(|t| t.into_iter().fold(f64::INFINITY, f64::min))
}

fn main() {
    let n: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(10_000);
    let network = twenty_species();
    let sampler = Sampler::new(&network).expect("uncertain network");
    let cores = std::thread::available_parallelism().map_or(1, |c| c.get());
    println!(
        "ensemble benchmark: {} species, {} steps, {cores} cores",
        network.n_species(),
        network.reactions.len()
    );

    let (all, failed) = ensemble(&sampler, n, cores);
    println!("  {n} members on {cores} threads: {all:.2} s ({failed} failed)   target < 10 s on 2 cores");

    let probe = (n / 5).max(200);
    let (one, _) = ensemble(&sampler, probe, 1);
    let (two, _) = ensemble(&sampler, probe, 2);
    println!(
        "  {probe} members: 1 thread {one:.2} s, 2 threads {two:.2} s: speed-up {:.2}   target ≥ 1.8",
        one / two
    );
    let member = one / probe as f64;
    match full_run(&network) {
        Some(run) => println!(
            "  one member {:.2} ms, one full `kinequil run` {:.1} ms: ratio 1/{:.0}   target ≤ 1/100",
            member * 1e3,
            run * 1e3,
            run / member
        ),
        None => println!(
            "  one member {:.2} ms (build --release for the full-run comparison)",
            member * 1e3
        ),
    }
}
