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

use crate::util::{kinequil, rel, write_case};

const R: f64 = 8.314_462_618;

fn json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn ok(args: &[&str]) -> String {
    let out = kinequil(args);
    assert!(
        out.status.success(),
        "{args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

#[test]
fn time_to_equilibrium_is_log_normal_when_kf_is() {
    let dir = tempfile::tempdir().unwrap();
    let (kf, k) = (2e-3, 2.0);
    let case = write_case(
        dir.path(),
        "ab.toml",
        &format!(
            "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nequation = \"A <=> B\"\nkf = {kf}\nK = {k}\nuncertainty = {{ kf = 2.0 }}\n"
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
}

#[test]
fn a_temperature_sweep_follows_arrhenius_and_van_t_hoff() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(
        dir.path(),
        "ab.toml",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nequation = \"A <=> B\"\nkf = { A = 1e6, Ea = \"50 kJ/mol\" }\nK = { value = 2.0, at = \"298.15 K\", dH = \"-10 kJ/mol\" }\n",
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
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nequation = \"A <=> B\"\nkf = 1e24\nkr = 1e24\n",
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
