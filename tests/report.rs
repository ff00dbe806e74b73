//! Charts, tables and the HTML report as files: every SVG parses, every PNG decodes and is not
//! blank, and the report holds the numbers of summary.json.

use std::path::Path;
use std::process::Command;

use kinequil::format_number as number;

fn kinequil(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_kinequil"))
        .args(args)
        .output()
        .expect("binary runs")
}

/// A chain of 14 isomers X0 <=> X1 <=> ... <=> X13 (more species than a chart shows).
fn chain() -> String {
    let mut text = String::from("title = \"Chain of isomers\"\n\n[species]\nX0 = 1.0\n");
    for i in 1..14 {
        text += &format!("X{i} = 0.0\n");
    }
    for i in 0..13 {
        text += &format!(
            "\n[[reaction]]\nscheme = \"X{i} <=> X{}\"\nkf = {}\nkr = 0.5\n",
            i + 1,
            1.0 + 0.1 * i as f64
        );
    }
    text
}

fn check_svg(path: &Path) -> String {
    let text = std::fs::read_to_string(path).unwrap();
    let doc = roxmltree::Document::parse(&text)
        .unwrap_or_else(|e| panic!("{} is not valid XML: {e}", path.display()));
    assert_eq!(doc.root_element().tag_name().name(), "svg");
    let texts: Vec<String> = doc
        .descendants()
        .filter(|n| n.has_tag_name("text"))
        .filter_map(|n| n.text().map(str::to_string))
        .collect();
    assert!(texts.len() > 10, "{} has too little text", path.display());
    texts.join("\n")
}

fn check_png(path: &Path) {
    let file = std::fs::File::open(path).unwrap();
    let mut reader = png::Decoder::new(std::io::BufReader::new(file))
        .read_info()
        .unwrap();
    let mut pixels = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut pixels).unwrap();
    assert_eq!((info.width, info.height), (1000, 620), "{}", path.display());
    let distinct: std::collections::HashSet<&[u8]> = pixels.chunks(3).collect();
    assert!(distinct.len() > 20, "{} looks blank", path.display());
    // Text is drawn: dark pixels (black labels) exist.
    assert!(
        pixels.chunks(3).filter(|p| p.iter().all(|&v| v < 60)).count() > 500,
        "{} has no text",
        path.display()
    );
}

#[test]
fn every_chart_parses_and_the_report_holds_the_summary_numbers() {
    let dir = tempfile::tempdir().unwrap();
    let case = dir.path().join("chain.toml");
    std::fs::write(&case, chain()).unwrap();
    let out = dir.path().join("out");
    let run = kinequil(&[
        "run",
        case.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--until",
        "20",
    ]);
    assert_eq!(
        run.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );

    for stem in ["concentrations", "approach", "rates", "quotients"] {
        check_svg(&out.join(format!("{stem}.svg")));
        check_png(&out.join(format!("{stem}.png")));
    }
    // 14 species, 12 drawn: the chart says which were left out.
    let text = check_svg(&out.join("concentrations.svg"));
    assert!(text.contains("2 species not shown"), "{text}");
    assert!(text.contains("concentration [mol/L]") && text.contains("time [s]"));

    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).unwrap()).unwrap();
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    let source = std::fs::read_to_string(&case).unwrap();
    let sha = {
        use sha2::Digest;
        sha2::Sha256::digest(source.as_bytes())
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect::<String>()
    };
    assert!(html.contains(&sha), "report lacks the input's SHA-256");
    assert!(html.contains(env!("CARGO_PKG_VERSION")));
    assert!(html.contains("process-safety review") && html.contains("Isothermal"));
    assert!(
        html.contains("X0 &lt;=&gt; X1"),
        "input and equations are echoed, escaped"
    );
    assert_eq!(html.matches("<svg").count(), 4, "four charts embedded");
    for (name, value) in summary["final"].as_object().unwrap() {
        let formatted = number(value.as_f64().unwrap());
        assert!(
            html.contains(&formatted),
            "final {name} = {formatted} missing from the report"
        );
    }
    for (name, value) in summary["equilibrium"].as_object().unwrap() {
        let formatted = number(value.as_f64().unwrap());
        assert!(
            html.contains(&formatted),
            "equilibrium {name} = {formatted} missing"
        );
    }
    for entry in summary["time_to_equilibrium"].as_array().unwrap() {
        let formatted = number(entry["seconds"].as_f64().unwrap());
        assert!(
            html.contains(&formatted),
            "time to equilibrium {formatted} missing"
        );
    }
    let tau = number(summary["relaxation"][0]["tau_seconds"].as_f64().unwrap());
    assert!(html.contains(&tau), "slowest relaxation time {tau} missing");
    let date = html.split("run ").nth(1).unwrap_or("");
    assert!(
        date.len() > 10 && date.as_bytes()[4] == b'-' && date.as_bytes()[7] == b'-',
        "report date"
    );

    let rows = std::fs::read_to_string(out.join("summary_row.csv")).unwrap();
    let lines: Vec<&str> = rows.lines().collect();
    assert_eq!(lines.len(), 2);
    let mut reader = csv::Reader::from_reader(rows.as_bytes());
    let header_len = reader.headers().unwrap().len();
    assert_eq!(reader.records().next().unwrap().unwrap().len(), header_len);

    let rates = std::fs::read_to_string(out.join("rates.csv")).unwrap();
    assert!(rates.lines().next().unwrap().contains("step 13 Q/K"));
}

#[test]
fn chosen_species_units_axis_and_output_times() {
    let dir = tempfile::tempdir().unwrap();
    let case = dir.path().join("ab.toml");
    std::fs::write(
        &case,
        "[species]\nA = 1.0\nB = 0.0\nC = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 2.0\nkr = 1.0\n",
    )
    .unwrap();
    let out = dir.path().join("out");
    let run = kinequil(&[
        "run",
        case.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--species",
        "A",
        "--time-axis",
        "linear",
        "--time-unit",
        "min",
        "--conc-unit",
        "mmol/L",
        "--times",
        "0.01, 30 s",
        "--every",
        "1 s",
    ]);
    assert_eq!(
        run.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let text = check_svg(&out.join("concentrations.svg"));
    assert!(text.contains("time [min]") && !text.contains("logarithmic"));
    assert!(text.contains("concentration [mmol/L]"));
    assert!(text.contains("2 species not shown: B, C"), "{text}");

    // A(t) = 1/3 + 2/3 exp(−3t) mol/L (closed form); the table is in min and mmol/L. 1e-3 mmol/L
    // is the default tolerance (rtol 1e-6 on 1000 mmol/L) with margin.
    let table = std::fs::read_to_string(out.join("table_at_times.csv")).unwrap();
    let mut reader = csv::Reader::from_reader(table.as_bytes());
    assert_eq!(&reader.headers().unwrap()[0], "time [min]");
    let mut seconds = Vec::new();
    for record in reader.records() {
        let record = record.unwrap();
        let t = record[0].parse::<f64>().unwrap() * 60.0;
        let a: f64 = record[1].parse().unwrap();
        let exact = 1000.0 * (1.0 / 3.0 + 2.0 / 3.0 * (-3.0 * t).exp());
        assert!((a - exact).abs() < 1e-3, "A at {t} s: {a} vs {exact}");
        seconds.push(t);
    }
    // 0.01 min = 0.6 s and 30 s, plus every second up to the end of the run.
    assert!(
        seconds.iter().any(|t| (t - 0.6).abs() < 1e-9) && seconds.iter().any(|t| (t - 30.0).abs() < 1e-9)
    );
    assert!(seconds.iter().filter(|t| (*t - t.round()).abs() < 1e-9).count() > 5);

    let bad = kinequil(&[
        "run",
        case.to_str().unwrap(),
        "--out",
        dir.path().join("o2").to_str().unwrap(),
        "--species",
        "Z",
    ]);
    assert_eq!(bad.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&bad.stderr).contains("unknown species `Z`"));
}

#[test]
fn summary_carries_stable_tags_beside_the_sentences() {
    use kinequil::Summary;
    let case = |name: &str| {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("cases")
            .join(name);
        let net = kinequil::Network::from_file(&path).unwrap();
        let result = kinequil::run(net, &kinequil::RunSettings::default()).unwrap();
        serde_json::to_value(Summary::from_result(&result)).unwrap()
    };
    let demo = case("demo.toml");
    assert_eq!(demo["stop_tag"], "equilibrium_detected");
    assert_eq!(demo["equilibrium_tag"], "solved");
    assert!(demo["stop_reason"]
        .as_str()
        .unwrap()
        .starts_with("the solver ran to "));
    let robertson = case("robertson.toml");
    assert_eq!(robertson["stop_tag"], "horizon_reached");
    assert_eq!(robertson["equilibrium_tag"], "one_way_steps");
}
