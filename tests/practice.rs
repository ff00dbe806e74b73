//! The practitioner's questions answered as asked: units on every option, verdicts at the hold
//! time, messages that point at the fix.

use crate::util::{kinequil, kinequil_ok, write_case, ISOMERISATION};

fn stderr_of(args: &[&str]) -> (Option<i32>, String) {
    let out = kinequil(args);
    (
        out.status.code(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn a_bare_temperature_is_refused_on_the_command_line_and_below_200_in_a_file() {
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "c.toml", ISOMERISATION);
    let (code, stderr) = stderr_of(&["equilibrium", &case, "--temperature", "60"]);
    assert_eq!(code, Some(2), "{stderr}");
    assert!(stderr.contains("\"60 degC\" or \"60 K\""), "{stderr}");
    let (code, _) = stderr_of(&["equilibrium", &case, "--temperature", "60 degC"]);
    assert_eq!(code, Some(0));
    let cold = write_case(
        dir.path(),
        "cold.toml",
        &format!("temperature = 25\n{ISOMERISATION}"),
    );
    let (code, stderr) = stderr_of(&["equilibrium", &cold]);
    assert_eq!(code, Some(2));
    assert!(
        stderr.contains("line 1, field `temperature`") && stderr.contains("write the unit"),
        "{stderr}"
    );
    let warm = write_case(
        dir.path(),
        "warm.toml",
        &format!("temperature = 298.15\n{ISOMERISATION}"),
    );
    assert_eq!(
        stderr_of(&["equilibrium", &warm]).0,
        Some(0),
        "a bare 298.15 is plainly kelvin"
    );
}

#[test]
fn until_takes_units_like_the_other_time_options() {
    // A <=> B, kf 2, kr 1 from A = 1: A(t) = 1/3 + 2/3 e^(−3t) (closed form), so the state at
    // 0.01 min = 0.6 s must be the same whichever way the hold time is written.
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "c.toml", ISOMERISATION);
    let mut tables: Vec<f64> = Vec::new();
    for (k, until) in ["0.6", "0.6 s", "0.01 min"].iter().enumerate() {
        let out_dir = dir.path().join(format!("o{k}"));
        kinequil_ok(&["run", &case, "--until", until, "--out", out_dir.to_str().unwrap()]);
        let summary: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(out_dir.join("summary.json")).unwrap()).unwrap();
        assert_eq!(summary["final_time"].as_f64(), Some(0.6));
        let a = summary["final"]["A"].as_f64().expect("A at the hold time");
        // RODAS4 at rtol 1e-6: the closed form within 1e-6 relative.
        let exact = 1.0 / 3.0 + 2.0 / 3.0 * (-3.0_f64 * 0.6).exp();
        assert!((a - exact).abs() < 1e-6 * exact, "{a} vs {exact}");
        tables.push(a);
    }
    assert!(tables.windows(2).all(|w| w[0] == w[1]), "{tables:?}");
    let (code, stderr) = stderr_of(&["run", &case, "--until", "4 kg"]);
    assert_eq!(code, Some(2));
    assert!(stderr.contains("--until"), "{stderr}");
}

#[test]
fn an_unknown_species_or_unit_names_the_nearest_name_and_the_units_known() {
    let dir = tempfile::tempdir().unwrap();
    let text =
        "[species]\nacid = 1.0\nester = 0.0\n\n[[reaction]]\nscheme = \"Acid <=> ester\"\nkf = 1\nkr = 1\n";
    let case = write_case(dir.path(), "typo.toml", text);
    let (code, stderr) = stderr_of(&["check", &case]);
    assert_eq!(code, Some(2));
    assert!(
        stderr.contains("unknown species `Acid`; did you mean `acid`?"),
        "{stderr}"
    );
    let good = write_case(dir.path(), "good.toml", &text.replace("Acid", "acid"));
    let (code, stderr) = stderr_of(&[
        "run",
        &good,
        "--species",
        "estr",
        "--out",
        dir.path().join("o").to_str().unwrap(),
    ]);
    assert_eq!(code, Some(2));
    assert!(stderr.contains("did you mean `ester`?"), "{stderr}");
    // A one-letter slip is not guessed at: any one-letter name is one edit away.
    let (_, stderr) = stderr_of(&[
        "run",
        &good,
        "--species",
        "Q",
        "--out",
        dir.path().join("o").to_str().unwrap(),
    ]);
    assert!(!stderr.contains("did you mean"), "{stderr}");
    let units = write_case(
        dir.path(),
        "units.toml",
        &text.replace("Acid", "acid").replace("kf = 1", "kf = \"1 per/s\""),
    );
    let (code, stderr) = stderr_of(&["check", &units]);
    assert_eq!(code, Some(2));
    assert!(stderr.contains("known units: time s, min, h, d"), "{stderr}");
}

#[test]
fn old_key_names_point_to_the_new_ones() {
    let dir = tempfile::tempdir().unwrap();
    let text = "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nequation = \"A <=> B\"\nkf = 1\nkr = 1\n";
    let case = write_case(dir.path(), "old.toml", text);
    let (code, stderr) = stderr_of(&["check", &case]);
    assert_eq!(code, Some(2));
    assert!(
        stderr.contains("line 6, field `reaction[1].equation`") && stderr.contains("goes under `scheme`"),
        "{stderr}"
    );
}

#[test]
fn the_hold_time_verdict_conversion_and_yield_follow_the_closed_form() {
    // A <=> B, kf 2, kr 1 from A = 1 (textbook closed form): A(t) − A_eq = (2/3) e^(−3t), so at
    // the hold time t a share e^(−3t) of every species' change remains; conversion of A is
    // 1 − A(t) and the yield of B the same; both 2/3 at equilibrium. RODAS4 at rtol 1e-8: the
    // shares within 1e-6 of the closed form.
    let t = 0.5;
    let result = crate::util::run_with(ISOMERISATION, 1e-8, 1e-14, Some(t));
    let verdict = result.verdict.as_ref().expect("a verdict at the hold time");
    assert_eq!(verdict.time, t);
    assert!((verdict.remaining - (-3.0 * t).exp()).abs() < 1e-6, "{verdict:?}");
    let conversion = result.conversion.as_ref().expect("A is the limiting reagent");
    assert_eq!(conversion.reagent, "A");
    let exact = 2.0 / 3.0 * (1.0 - (-3.0 * t).exp());
    assert!((conversion.at_final - exact).abs() < 1e-6);
    assert!((conversion.at_equilibrium.unwrap() - 2.0 / 3.0).abs() < 1e-9);
    assert_eq!(conversion.yields[0].product, "B");
    assert!((conversion.yields[0].at_final - exact).abs() < 1e-6);
    assert!(
        result.peaks.is_empty(),
        "a first-order approach has no maximum: {:?}",
        result.peaks
    );
}

#[test]
fn an_intermediate_maximum_is_found_where_the_closed_form_puts_it() {
    // A => B => C, k1 = 2, k2 = 1, A0 = 1 (consecutive first-order reactions, textbook closed
    // form): B(t) = 2 (e^(−t) − e^(−2t)), largest at t = ln 2 with B = 1/2. The time within
    // 0.5 % (the maximum is flat: the interpolant is sampled 64 times per step), the value
    // within 1e-6.
    let text = "[species]\nA = 1.0\nB = 0.0\nC = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = 2.0\n\n[[reaction]]\nscheme = \"B => C\"\nkf = 1.0\n";
    let result = crate::util::run_with(text, 1e-8, 1e-14, None);
    let peak = result.peaks.iter().find(|p| p.species == "B").expect("B peaks");
    assert!((peak.time - 2f64.ln()).abs() < 5e-3 * 2f64.ln(), "{peak:?}");
    assert!((peak.value - 0.5).abs() < 1e-6, "{peak:?}");
    assert_eq!(result.peaks.len(), 1, "only the intermediate: {:?}", result.peaks);
}

#[test]
fn a_trace_side_product_need_not_set_the_hold_time() {
    // A <=> B fast (kf 2, kr 1) and A <=> D slow (kf 1e-6, K 1e-3, so kr 1e-3): D ends at a
    // trace (3e-4) and settles on a time scale of 1000 s, a thousand times later; judged on A and B only, time to equilibrium is
    // that of the fast pair, whose closed form (the slow step barely touches it at 1 % and
    // 10 %) gives ln(1/tol)/3 within 2 %.
    let text = "[species]\nA = 1.0\nB = 0.0\nD = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 2.0\nkr = 1.0\n\n[[reaction]]\nscheme = \"A <=> D\"\nkf = 1e-6\nK = 1e-3\n";
    let every = crate::util::run_with(text, 1e-8, 1e-14, None);
    let settings = kinequil::RunSettings {
        rtol: 1e-8,
        atol: 1e-14,
        settle_on: Some(vec![0, 1]),
        ..kinequil::RunSettings::default()
    };
    let judged = kinequil::run(crate::util::network(text), &settings).unwrap();
    for (all, pair) in every.settling.iter().zip(&judged.settling).take(2) {
        let (all, pair) = (all.seconds.unwrap(), pair.seconds.unwrap());
        let exact = (1.0 / pair_tolerance(&judged, pair)).ln() / 3.0;
        assert!((pair - exact).abs() < 0.02 * exact, "{pair} vs {exact}");
        assert!(
            all > 100.0 * pair,
            "the trace sets the all-species time: {all} vs {pair}"
        );
    }
}

/// The tolerance whose settling time is `seconds`.
fn pair_tolerance(result: &kinequil::RunResult, seconds: f64) -> f64 {
    result
        .settling
        .iter()
        .find(|s| s.seconds == Some(seconds))
        .unwrap()
        .tolerance
}

#[test]
fn far_extrapolation_and_a_title_naming_another_temperature_are_flagged() {
    // The bundled demo gives K by van 't Hoff at 60 degC and says 60 degC in its title.
    let case = concat!(env!("CARGO_MANIFEST_DIR"), "/cases/demo.toml");
    let at = |t: &str| {
        kinequil::Network::from_file_at(std::path::Path::new(case), Some(t.parse::<f64>().unwrap())).unwrap()
    };
    assert!(
        at("333.15").temperature_cautions().is_empty(),
        "at its own temperature nothing to say"
    );
    let near = at("353.15").temperature_cautions();
    assert_eq!(near.len(), 1, "20 K away: only the title: {near:?}");
    assert!(near[0].contains("title names 333.15 K"), "{near:?}");
    let far = at("393.15").temperature_cautions();
    assert!(
        far.iter()
            .any(|c| c.contains("van 't Hoff from 333.15 K to 393.15 K, 60 K away")),
        "{far:?}"
    );
}

#[test]
fn charts_mark_the_hold_time_and_keep_the_limiting_step() {
    // Seven fast isomerisations in a chain and one slow one at the end: the slow step sets the
    // slowest relaxation and carries the smallest rates, so the six busiest would leave it out.
    let mut text = String::from("[species]\nS0 = 1.0\n");
    for k in 1..=8 {
        text += &format!("S{k} = 0.0\n");
    }
    for k in 1..=8 {
        let kf = if k == 8 { 1e-3 } else { 1.0 + k as f64 };
        text += &format!(
            "\n[[reaction]]\nscheme = \"S{} <=> S{k}\"\nkf = {kf}\nK = 1.0\n",
            k - 1
        );
    }
    let dir = tempfile::tempdir().unwrap();
    let case = write_case(dir.path(), "chain.toml", &text);
    let out_dir = dir.path().join("o");
    kinequil_ok(&[
        "run",
        &case,
        "--until",
        "2 h",
        "--time-unit",
        "h",
        "--out",
        out_dir.to_str().unwrap(),
    ]);
    let quotients = std::fs::read_to_string(out_dir.join("quotients.svg")).unwrap();
    assert!(
        quotients.contains("step 8: S7 &lt;=&gt; S8"),
        "the limiting step is shown"
    );
    assert!(
        quotients.contains("2 slower steps not shown"),
        "six shown of eight"
    );
    let concentrations = std::fs::read_to_string(out_dir.join("concentrations.svg")).unwrap();
    assert!(
        concentrations.contains("hold time 2 h"),
        "the hold time is marked"
    );
}

#[test]
fn the_corrected_file_keeps_units_comments_and_layout() {
    // A cycle of our own (tests/data/cycle_with_units.toml) whose constants break detailed
    // balance: K1·K2 = 2·3 = 6 against K3 = 10.
    let dir = tempfile::tempdir().unwrap();
    let case = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/cycle_with_units.toml");
    let fixed = dir.path().join("fixed.toml");
    let out = kinequil(&["check", case, "--write-corrected", fixed.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(1), "inconsistent constants exit 1");
    let text = std::fs::read_to_string(&fixed).unwrap();
    for kept in [
        "temperature = \"25 degC\"",
        "A = \"1 mol/L\"   # start",
        "kf = \"2.0 1/s\"     # measured",
        "kf = { A = \"1e6 1/s\", Ea = \"40 kJ/mol\" }   # Arrhenius fit",
        "at = \"25 degC\", dH = \"-5 kJ/mol\" }   # from the literature; kinequil check: K ×",
    ] {
        assert!(text.contains(kept), "lost `{kept}`:\n{text}");
    }
    assert!(
        text.contains(" 1/s\"  # kinequil check: kr ×"),
        "kr keeps its unit:\n{text}"
    );
    let again = kinequil(&["check", case, "--write-corrected", fixed.to_str().unwrap()]);
    assert_eq!(again.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&again.stderr).contains("exists; give another file name or pass --force"));
    let recheck = kinequil(&["check", fixed.to_str().unwrap()]);
    assert_eq!(
        recheck.status.code(),
        Some(0),
        "the corrected file passes the audit"
    );
}

#[test]
fn a_cycle_without_detailed_balance_reports_its_steady_flux() {
    // A <=> B (1, 1), B <=> C (1, 1), C <=> A (1, 2): K1·K2·K3 = 1/2, so no equilibrium. The
    // steady state of these linear rate equations (solved by hand from dA/dt = dB/dt = 0 and
    // A + B + C = 1) is A = 1/4, B = 1/3, C = 5/12, and every step carries the same net rate,
    // the cycle flux −1/12 mol/(L s). Within 1e-6 relative (integration to rtol 1e-8).
    let text = "[species]\nA = 1.0\nB = 0.0\nC = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\nkr = 1.0\n\n[[reaction]]\nscheme = \"B <=> C\"\nkf = 1.0\nkr = 1.0\n\n[[reaction]]\nscheme = \"C <=> A\"\nkf = 1.0\nkr = 2.0\n";
    let result = crate::util::run_with(text, 1e-8, 1e-14, None);
    assert!(result.solved.is_err(), "no equilibrium exists");
    assert_eq!(result.net_fluxes.len(), 3, "{:?}", result.net_fluxes);
    for flux in &result.net_fluxes {
        assert!((flux.net_rate + 1.0 / 12.0).abs() < 1e-6 / 12.0, "{flux:?}");
    }
    let lines = kinequil::Summary::from_result(&result);
    assert_eq!(
        serde_json::to_value(&lines).unwrap()["net_fluxes"]
            .as_array()
            .unwrap()
            .len(),
        3
    );
}

#[test]
fn a_gas_run_charts_its_pressures() {
    // The bundled N2O4 <=> 2 NO2 case starts at 1 bar of N2O4 at 320 K; at equilibrium the total
    // is 1 bar times (1 + conversion), the conversion being that of the solved equilibrium
    // (stoichiometry: each N2O4 dissociated adds one mole of gas).
    let dir = tempfile::tempdir().unwrap();
    let case = concat!(env!("CARGO_MANIFEST_DIR"), "/cases/gas_dissociation.toml");
    let out_dir = dir.path().join("o");
    kinequil_ok(&["run", case, "--out", out_dir.to_str().unwrap()]);
    let svg = std::fs::read_to_string(out_dir.join("pressures.svg")).unwrap();
    assert!(
        svg.contains("pressure [bar]") && svg.contains("total"),
        "a pressure chart"
    );
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out_dir.join("summary.json")).unwrap()).unwrap();
    let conversion = summary["conversion"]["at_equilibrium"].as_f64().unwrap();
    let (p0, p1) = (
        summary["initial_total_pressure_bar"].as_f64().unwrap(),
        summary["final_total_pressure_bar"].as_f64().unwrap(),
    );
    // Both from the same solve: agreement to the integration's tolerance (1e-5 relative).
    assert!(
        (p1 - p0 * (1.0 + conversion)).abs() < 1e-5 * p1,
        "{p0} {p1} {conversion}"
    );
    let liquid = dir.path().join("l");
    kinequil(&[
        "run",
        concat!(env!("CARGO_MANIFEST_DIR"), "/cases/demo.toml"),
        "--out",
        liquid.to_str().unwrap(),
    ]);
    assert!(
        !liquid.join("pressures.svg").exists(),
        "no pressure chart without gases"
    );
}

#[test]
fn a_sweep_judges_on_the_same_species_as_a_run() {
    // One sweep point at the demo's own temperature with `--settle-on conversion` must give the
    // run's time to 1 % judged on the limiting reagent, to the digit (both are the same run).
    let dir = tempfile::tempdir().unwrap();
    let case = concat!(env!("CARGO_MANIFEST_DIR"), "/cases/demo.toml");
    let sweep_dir = dir.path().join("s");
    kinequil_ok(&[
        "sweep",
        case,
        "--vary",
        "temperature=60degC..60degC:1",
        "--settle-on",
        "conversion",
        "--threads",
        "1",
        "--out",
        sweep_dir.to_str().unwrap(),
    ]);
    let table = std::fs::read_to_string(sweep_dir.join("sweep.csv")).unwrap();
    let mut lines = table.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let row: Vec<&str> = lines.next().unwrap().split(',').collect();
    let column = header.iter().position(|h| *h == "t_1pct_s").unwrap();
    let swept: f64 = row[column].parse().unwrap();
    let run_dir = dir.path().join("r");
    kinequil_ok(&[
        "run",
        case,
        "--settle-on",
        "conversion",
        "--out",
        run_dir.to_str().unwrap(),
    ]);
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(run_dir.join("summary.json")).unwrap()).unwrap();
    assert_eq!(summary["judged_species"], serde_json::json!(["acid"]));
    let ran = summary["time_to_equilibrium"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["tolerance"] == 0.01)
        .unwrap()["seconds"]
        .as_f64()
        .unwrap();
    assert!((swept - ran).abs() <= 1e-9 * ran, "{swept} vs {ran}");
}
