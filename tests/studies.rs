//! Sweeps, uncertainty ensembles, shards and merging, through the command line, against closed
//! forms.
//!
//! Sources: for A <=> B every concentration relaxes as one exponential with rate kf + kr, so the
//! time to come within a fraction tol of the total change is ln(1/tol)/(kf + kr) (textbook
//! first-order kinetics); Arrhenius k = A e^(−Ea/RT) and van 't Hoff ln K(T) = ln K(T0) −
//! (ΔH/R)(1/T − 1/T0) (any physical-chemistry text); R from CODATA 2018. For a log-normal
//! variable with median m and σ of its logarithm the q-quantile is m·e^(σ z_q) and the mean
//! m·e^(σ²/2), with z_0.95 = 1.6449 (standard normal table); the standard error of a sample
//! q-quantile is √(q(1−q)/N)/φ(z_q) in units of σ (large-sample theory of order statistics,
//! e.g. Cramér, Mathematical Methods of Statistics, 1946, §28.5).

use std::path::Path;

use crate::util::{kinequil, kinequil_ok as ok, rel, write_case};

const R: f64 = 8.314_462_618;

fn json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn time_to_equilibrium_is_log_normal_when_kf_is() {
    let dir = tempfile::tempdir().unwrap();
    let (kf, k) = (2e-3, 2.0);
    let case = write_case(
        dir.path(),
        "ab.toml",
        &format!(
            "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = {kf}\nK = {k}\nuncertainty = {{ kf = 2.0 }}\n"
        ),
    );
    let out = dir.path().join("u");
    let n = 4000;
    ok(&[
        "uncertainty",
        &case,
        "--samples",
        &n.to_string(),
        "--seed",
        "3",
        "--threads",
        "2",
        "--out",
        out.to_str().unwrap(),
    ]);
    let summary = json(&out.join("uncertainty.json"));
    assert_eq!(summary["samples"], n);
    assert_eq!(summary["failed"]["count"], 0);
    let sigma = 2f64.ln() / 1.959_964;
    let z95 = 1.644_854;
    for entry in summary["time_to_equilibrium"].as_array().unwrap() {
        let tol = entry["tolerance"].as_f64().unwrap();
        // K exact: kr = kf/K moves with kf, so t = ln(1/tol)/(kf (1 + 1/K)) ∝ 1/kf.
        let median = (1.0 / tol).ln() / (kf * (1.0 + 1.0 / k));
        let got = |key: &str| entry[key].as_f64().unwrap();
        // Four standard errors of the sample quantile (in ln t): p50 0.0198 σ, p05/p95 0.0334 σ
        // at N = 4000; the integration's own error (1e-3 relative) is well inside.
        let se = |q: f64, z: f64| {
            (q * (1.0 - q) / n as f64).sqrt()
                / ((-z * z / 2.0f64).exp() / (2.0 * std::f64::consts::PI).sqrt())
                * sigma
        };
        assert!(
            (got("p50") / median).ln().abs() < 4.0 * se(0.5, 0.0),
            "tol {tol}: p50 {}",
            got("p50")
        );
        assert!(
            (got("p95") / (median * (sigma * z95).exp())).ln().abs() < 4.0 * se(0.95, z95),
            "tol {tol}: p95 {}",
            got("p95")
        );
        assert!(
            (got("p05") / (median * (-sigma * z95).exp())).ln().abs() < 4.0 * se(0.05, z95),
            "tol {tol}: p05 {}",
            got("p05")
        );
        // The mean m e^(σ²/2): its standard error is m √((e^(σ²) − 1) e^(σ²) / N) ≈ 0.006 m.
        let mean = median * (sigma * sigma / 2.0).exp();
        assert!(
            rel(got("mean"), mean) < 0.025,
            "tol {tol}: mean {} vs {mean}",
            got("mean")
        );
    }
    // K exact: every member has [A]eq = 1/(1 + K) (closed form); the solve converges to 1e-13.
    let a_eq = &summary["equilibrium"]["A"];
    for key in ["p05", "p50", "p95"] {
        let got = a_eq[key].as_f64().unwrap();
        assert!(rel(got, 1.0 / (1.0 + k)) < 1e-10, "[A]eq {key} {got}");
    }
}

#[test]
fn a_temperature_sweep_follows_arrhenius_and_van_t_hoff() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(
        dir.path(),
        "ab.toml",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = { A = 1e6, Ea = \"50 kJ/mol\" }\nK = { value = 2.0, at = \"298.15 K\", dH = \"-10 kJ/mol\" }\n",
    );
    let out = dir.path().join("s");
    let printed = ok(&[
        "sweep",
        &case,
        "--vary",
        "temperature=300..360:4",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(!printed.contains("changes nothing"), "{printed}");
    let text = std::fs::read_to_string(out.join("sweep.csv")).unwrap();
    let table = kinequil::StudyTable::parse(&text).unwrap();
    let temperatures = table.column("temperature_K");
    assert_eq!(temperatures.len(), 4);
    for (row, t) in temperatures.iter().enumerate() {
        let t = t.unwrap();
        let kf = 1e6 * (-50e3 / (R * t)).exp();
        let k = (2.0f64.ln() + 10e3 / R * (1.0 / t - 1.0 / 298.15)).exp();
        for tol in [0.1f64, 0.01, 0.001] {
            let expected = (1.0 / tol).ln() / (kf * (1.0 + 1.0 / k));
            let got = table.column(&kinequil::time_header(tol))[row].unwrap();
            // Default rtol 1e-6: times to equilibrium hold to 1e-3 relative (tests/analytic.rs).
            assert!(rel(got, expected) < 1e-3, "T {t} tol {tol}: {got} vs {expected}");
        }
        // Conversion of A at equilibrium: 1 − [A]eq/[A]0 = K/(1 + K); the solve converges to 1e-13.
        let conversion = table.column("conversion_A")[row].unwrap();
        assert!(rel(conversion, k / (1.0 + k)) < 1e-9, "T {t}: {conversion}");
    }
    for file in [
        "sweep_times.svg",
        "sweep_conversion.png",
        "report.html",
        "study.json",
    ] {
        assert!(out.join(file).exists(), "{file}");
    }
}

fn folder_files(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut files: Vec<(String, Vec<u8>)> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap())
        .map(|e| {
            (
                e.file_name().to_string_lossy().into_owned(),
                std::fs::read(e.path()).unwrap(),
            )
        })
        .collect();
    files.sort();
    files
}

#[test]
fn shards_merge_into_the_unsharded_result_bit_for_bit_for_any_thread_count() {
    let dir = tempfile::tempdir().unwrap();
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("cases/demo.toml");
    let demo = demo.to_str().unwrap();
    let path = |name: &str| dir.path().join(name).to_string_lossy().into_owned();
    let common = [
        "uncertainty",
        demo,
        "--samples",
        "30",
        "--seed",
        "9",
        "--until",
        "30 h",
    ];
    ok(&[&common[..], &["--threads", "1", "--out", &path("one")]].concat());
    ok(&[&common[..], &["--threads", "2", "--out", &path("two")]].concat());
    for i in 1..=3 {
        let shard = format!("{i}/3");
        ok(&[
            &common[..],
            &["--shard", &shard, "--out", &path(&format!("part{i}"))],
        ]
        .concat());
    }
    // Given out of order: merging sorts the shards' members by index.
    ok(&[
        "merge",
        &path("part3"),
        &path("part1"),
        &path("part2"),
        "--out",
        &path("merged"),
    ]);
    let one = folder_files(&dir.path().join("one"));
    assert!(one.iter().any(|(n, _)| n == "uncertainty.json"));
    assert_eq!(
        one,
        folder_files(&dir.path().join("two")),
        "1 and 2 threads differ"
    );
    assert_eq!(
        one,
        folder_files(&dir.path().join("merged")),
        "merged shards differ"
    );

    // A sweep too, and a merge with a shard missing is refused.
    let sweep = [
        "sweep",
        demo,
        "--vary",
        "kf[1]=x0.5..x2:3",
        "--vary",
        "c0[acid]=1..2:2",
    ];
    ok(&[&sweep[..], &["--out", &path("sweep")]].concat());
    ok(&[&sweep[..], &["--shard", "1/2", "--out", &path("s1")]].concat());
    ok(&[&sweep[..], &["--shard", "2/2", "--out", &path("s2")]].concat());
    let missing = kinequil(&["merge", &path("s1"), "--out", &path("bad")]);
    assert_eq!(missing.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&missing.stderr).contains("missing"));
    assert!(
        !dir.path().join("bad").exists(),
        "nothing written on a refused merge"
    );
    ok(&["merge", &path("s1"), &path("s2"), "--out", &path("smerged")]);
    assert_eq!(
        folder_files(&dir.path().join("sweep")),
        folder_files(&dir.path().join("smerged"))
    );
}

#[test]
fn failed_members_are_counted_and_kept() {
    let dir = tempfile::tempdir().unwrap();
    // kf × 100 = 1e26 is beyond the 1e25 limit: that point fails, the others run.
    let case = write_case(
        dir.path(),
        "ab.toml",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1e24\nkr = 1e24\n",
    );
    let out = dir.path().join("s");
    let printed = ok(&[
        "sweep",
        &case,
        "--vary",
        "kf[1]=x1..x100:3",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(printed.contains("failed members: 1"), "{printed}");
    let table =
        kinequil::StudyTable::parse(&std::fs::read_to_string(out.join("sweep.csv")).unwrap()).unwrap();
    assert_eq!(table.rows.len(), 3);
    assert!(table.rows[2][1].starts_with("failed:") && table.rows[0][1] == "ok");
}

#[test]
fn bad_study_options_are_refused_with_the_option_named() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "ab.toml", crate::util::ISOMERISATION);
    let out = dir.path().join("x");
    let out = out.to_str().unwrap();
    for (args, says) in [
        (
            vec!["sweep", &case, "--vary", "kf[2]=x1..x2:3", "--out", out],
            "--vary",
        ),
        (
            vec!["sweep", &case, "--vary", "pressure=1..2:3", "--out", out],
            "--vary",
        ),
        (
            vec![
                "sweep",
                &case,
                "--vary",
                "temperature=300..350:3",
                "--shard",
                "3/2",
                "--out",
                out,
            ],
            "--shard",
        ),
        (vec!["uncertainty", &case, "--out", out], "no uncertainty"),
        (
            vec!["uncertainty", &case, "--samples", "0", "--out", out],
            "--samples",
        ),
    ] {
        let run = kinequil(&args);
        let err = String::from_utf8_lossy(&run.stderr);
        assert_eq!(run.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.contains(says), "{args:?}: {err}");
    }
}

/// `sensitivity.json` of a network written to a temporary folder.
fn sensitivity_of(text: &str) -> serde_json::Value {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "case.toml", text);
    let out = dir.path().join("s");
    ok(&["sensitivity", &case, "--out", out.to_str().unwrap()]);
    assert!(out.join("sensitivity.svg").exists() && out.join("sensitivity.png").exists());
    json(&out.join("sensitivity.json"))
}

/// d ln t / d ln k of `name` at every tolerance.
fn time_sensitivity(report: &serde_json::Value, name: &str) -> Vec<f64> {
    let entry = report["constants"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["constant"] == name)
        .unwrap_or_else(|| panic!("{name} missing"));
    entry["time_to_equilibrium"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["d_ln_t_d_ln_k"].as_f64().unwrap())
        .collect()
}

// Probes are integrated at rtol 1e-9, so crossing times hold to about 1e-6 relative; the central
// difference divides by 2h = 0.02 and its truncation error is about h²/6 ≈ 2e-5: 1e-3 absolute
// leaves a wide margin and still tells −1 from −kf/(kf + kr).
const SENSITIVITY_TOL: f64 = 1e-3;

#[test]
fn hold_time_sensitivities_match_first_order_closed_forms() {
    // K given: kr = kf/K moves with kf, t = ln(1/tol)/(kf (1 + 1/K)), so d ln t/d ln kf = −1 and
    // d ln t/d ln K = 1/(K + 1).
    let with_k = sensitivity_of(
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 2e-3\nK = 2.0\n",
    );
    assert_eq!(
        with_k["constants"][0]["constant"], "kf[1]",
        "the dominant constant ranks first"
    );
    for s in time_sensitivity(&with_k, "kf[1]") {
        assert!((s + 1.0).abs() < SENSITIVITY_TOL, "{s}");
    }
    for s in time_sensitivity(&with_k, "K[1]") {
        assert!((s - 1.0 / 3.0).abs() < SENSITIVITY_TOL, "{s}");
    }
    // kr given: t = ln(1/tol)/(kf + kr), so d ln t/d ln kf = −kf/(kf + kr) = −2/3 and −1/3 for kr.
    let with_kr = sensitivity_of(
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 2e-3\nkr = 1e-3\n",
    );
    for s in time_sensitivity(&with_kr, "kf[1]") {
        assert!((s + 2.0 / 3.0).abs() < SENSITIVITY_TOL, "{s}");
    }
    for s in time_sensitivity(&with_kr, "kr[1]") {
        assert!((s + 1.0 / 3.0).abs() < SENSITIVITY_TOL, "{s}");
    }
}

#[test]
fn equilibrium_sensitivities_match_the_closed_form_quadratic() {
    // A + B <=> C with totals a = A + C, b = B + C: x = [C]eq solves K(a − x)(b − x) = x, so
    // dx/dK = (a − x)(b − x)/(1 + K(a + b − 2x)) by implicit differentiation.
    let (kf, kr) = (3.0, 0.2);
    let text = format!("[species]\nA = 0.8\nB = 0.5\nC = 0.1\n\n[[reaction]]\nscheme = \"A + B <=> C\"\nkf = {kf}\nkr = {kr}\n");
    let report = sensitivity_of(&text);
    let k: f64 = kf / kr;
    let (a, b): (f64, f64) = (0.9, 0.6);
    let p = k * (a + b) + 1.0;
    let x = (p - (p * p - 4.0 * k * k * a * b).sqrt()) / (2.0 * k);
    let dx = (a - x) * (b - x) / (1.0 + k * (a + b - 2.0 * x));
    let expected = [-k * dx / (a - x), -k * dx / (b - x), k * dx / x];
    // kf of a step given with kr raises K = kf/kr: its d ln c_eq/d ln kf is d ln c_eq/d ln K.
    let entry = report["constants"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["constant"] == "kf[1]")
        .unwrap();
    for (name, want) in ["A", "B", "C"].iter().zip(expected) {
        let got = entry["equilibrium"][name].as_f64().unwrap();
        // Analytic at a state solved to 1e-13; the closed form's cancellation allows 1e-9.
        assert!(
            (got - want).abs() < 1e-9 * want.abs().max(1.0),
            "{name}: {got} vs {want}"
        );
    }
    let kr_entry = report["constants"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["constant"] == "kr[1]")
        .unwrap();
    assert!((kr_entry["equilibrium"]["C"].as_f64().unwrap() + expected[2]).abs() < 1e-9);
}

#[test]
fn analytic_equilibrium_sensitivities_agree_with_differences_of_the_solve() {
    // The independent route: solve again at K·e^(±0.001); central-difference truncation is
    // about h²/6 ≈ 2e-7 of the third derivative, so 1e-5 absolute.
    let demo =
        kinequil::Network::from_file(&Path::new(env!("CARGO_MANIFEST_DIR")).join("cases/demo.toml")).unwrap();
    let (analytic, route) = kinequil::equilibrium_by_step(&demo).unwrap();
    assert_eq!(route, kinequil::EquilibriumRoute::Analytic);
    let solved = kinequil::solve_equilibrium(&demo, &kinequil::Stoichiometry::new(&demo)).unwrap();
    let differences = kinequil::differences_of_the_solve(&demo, &solved.concentrations);
    for (j, (a, d)) in analytic.iter().zip(&differences).enumerate() {
        let (a, d) = (a.as_ref().unwrap(), d.as_ref().unwrap());
        for (i, (x, y)) in a.iter().zip(d).enumerate() {
            assert!((x - y).abs() < 1e-5, "step {j} species {i}: {x} vs {y}");
        }
    }
}
