//! Bad input is reported with the file, the line and the field, never with a panic.

use std::path::Path;

use kinequil::Network;

/// (case, network text, expected line, expected field, a phrase the message must contain)
const CASES: &[(&str, &str, Option<usize>, &str, &str)] = &[
    (
        "uncertainty factor below 1",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\nK = 2.0\nuncertainty = { kf = 0.5 }\n",
        Some(9),
        "reaction[1].uncertainty.kf",
        "a factor from 1 to 1000",
    ),
    (
        "uncertainty on a constant the step does not give",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\nkr = 2.0\nuncertainty = { K = \"1 kJ/mol\" }\n",
        Some(9),
        "reaction[1].uncertainty.K",
        "does not give this constant",
    ),
    (
        "relative uncertainty of an amount above 1",
        "[species]\nA = { initial = 1.0, uncertainty = 1.5 }\nB = 0.0\n",
        Some(2),
        "species.A.uncertainty",
        "relative standard deviation",
    ),
    (
        "unknown species",
        "[species]\nA = 1.0\n\n[[reaction]]\nscheme = \"A <=> Q\"\nkf = 1.0\nkr = 1.0\n",
        Some(5),
        "reaction[1].scheme",
        "unknown species `Q`",
    ),
    (
        "species listed twice",
        "[species]\nA = 1.0\nA = 2.0\n",
        Some(3),
        "",
        "duplicate key",
    ),
    (
        "malformed equation",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A -> B\"\nkf = 1.0\n",
        Some(6),
        "reaction[1].scheme",
        "no arrow",
    ),
    (
        "negative constant",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = -2.0\n",
        Some(7),
        "reaction[1].kf",
        "must not be negative",
    ),
    (
        "NaN constant",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = nan\n",
        Some(7),
        "reaction[1].kf",
        "finite",
    ),
    (
        "infinite constant",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\nkr = inf\n",
        Some(8),
        "reaction[1].kr",
        "finite",
    ),
    (
        "reversible step without kr or K",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 1.0\n",
        Some(6),
        "reaction[1]",
        "either kr or the equilibrium constant K",
    ),
    (
        "no species",
        "[species]\n\n[[reaction]]\nscheme = \"0 => A\"\nkf = 1.0\n",
        Some(1),
        "species",
        "no species",
    ),
    (
        "no reactions",
        "[species]\nA = 1.0\n",
        None,
        "reaction",
        "missing",
    ),
    (
        "not TOML",
        "this is not a network file\n",
        Some(1),
        "",
        "not a valid TOML file",
    ),
    (
        "negative initial concentration",
        "[species]\nA = -1.0\n\n[[reaction]]\nscheme = \"A => 0\"\nkf = 1.0\n",
        Some(2),
        "species.A",
        "must not be negative",
    ),
    (
        "text where a number belongs",
        "[species]\nA = 1.0\n\n[[reaction]]\nscheme = \"A => 0\"\nkf = \"fast\"\n",
        Some(6),
        "reaction[1].kf",
        "is not a number with units",
    ),
    (
        "misspelt key",
        "[species]\nA = 1.0\n\n[[reaction]]\nscheme = \"A => 0\"\nkff = 1.0\n",
        Some(6),
        "reaction[1].kff",
        "unknown key",
    ),
    (
        "kr on a one-way step",
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A => B\"\nkf = 1.0\nkr = 1.0\n",
        Some(8),
        "reaction[1].kr",
        "one-way",
    ),
];

#[test]
fn every_bad_input_names_file_line_and_field() {
    for (case, text, line, field, phrase) in CASES {
        let err = Network::from_text(text, Path::new("cases/bad.toml")).expect_err(case);
        assert_eq!(err.file, Path::new("cases/bad.toml"), "{case}");
        assert_eq!(err.line, *line, "{case}: {err}");
        assert_eq!(err.field, *field, "{case}: {err}");
        assert!(
            err.message.contains(phrase),
            "{case}: message was `{}`",
            err.message
        );
        let shown = err.to_string();
        assert!(shown.starts_with("cases/bad.toml"), "{case}: {shown}");
    }
}

#[test]
fn networks_built_in_code_are_checked_like_files() {
    use kinequil::NetworkBuilder;
    let err = |b: NetworkBuilder| b.build().unwrap_err().to_string();
    let two = || NetworkBuilder::new("t").species("A", 1.0).species("B", 0.0);
    assert!(err(two().species("A", 2.0).reaction("A <=> B", 1.0).kr(1.0)).contains("listed twice"));
    assert!(err(two().reaction("A <=> C", 1.0).kr(1.0)).contains("unknown species `C`"));
    assert!(err(two().reaction("A <=> B", 1.0)).contains("needs either kr"));
    assert!(err(two().reaction("A => B", 1.0).kr(1.0)).contains("takes only kf"));
    assert!(err(two().reaction("A <=> B", -1.0).kr(1.0)).contains("reaction[1].kf"));
    assert!(err(two().reaction("A <=> B", 1e30).kr(1.0)).contains("outside"));
    assert!(err(two().reaction("A <=> B", 1.0).kr(1.0).temperature(20.0)).contains("outside"));
    // The same network from a file and from the builder is the same engine input.
    let built = two()
        .reaction("A <=> B", 2.0)
        .equilibrium_constant(4.0)
        .build()
        .unwrap();
    let read = crate::util::network(
        "[species]\nA = 1.0\nB = 0.0\n\n[[reaction]]\nscheme = \"A <=> B\"\nkf = 2.0\nK = 4.0\n",
    );
    assert_eq!(
        (built.reactions[0].kf, built.reactions[0].kr),
        (read.reactions[0].kf, read.reactions[0].kr)
    );
    assert_eq!(built.initial_state(), read.initial_state());
}
