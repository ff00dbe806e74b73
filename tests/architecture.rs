//! The module graph written in DEVELOPERS.md ("Allowed dependencies") is the one the code has:
//! every `crate::module` path in a file of `src/` must be allowed for that file's module.

use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// module → modules it may use, from the table between the dependency-graph markers.
fn allowed_graph() -> BTreeMap<String, BTreeSet<String>> {
    let guide = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("DEVELOPERS.md")).unwrap();
    let start = guide.find("<!-- dependency-graph").expect("graph start marker");
    let end = guide
        .find("<!-- end dependency-graph -->")
        .expect("graph end marker");
    let mut graph = BTreeMap::new();
    for line in guide[start..end].lines().filter(|l| l.starts_with('|')) {
        let cells: Vec<&str> = line.trim_matches('|').split('|').map(str::trim).collect();
        if cells.len() < 2 || cells[0] == "module" || cells[0].starts_with("---") {
            continue;
        }
        let uses = cells[1]
            .split(',')
            .map(str::trim)
            .filter(|s| !s.is_empty())
            .map(String::from)
            .collect();
        graph.insert(cells[0].to_string(), uses);
    }
    graph
}

/// The top-level modules a source text names through `crate::` paths (also in `crate::{a, b}`).
fn used_modules(text: &str) -> BTreeSet<String> {
    let mut used = BTreeSet::new();
    let mut rest = text;
    while let Some(at) = rest.find("crate::") {
        rest = &rest[at + "crate::".len()..];
        if let Some(group) = rest.strip_prefix('{') {
            let close = group.find('}').unwrap_or(group.len());
            for item in group[..close].split(',') {
                let name: String = item
                    .trim()
                    .chars()
                    .take_while(|c| c.is_alphanumeric() || *c == '_')
                    .collect();
                if !name.is_empty() {
                    used.insert(name);
                }
            }
        } else {
            let name: String = rest
                .chars()
                .take_while(|c| c.is_alphanumeric() || *c == '_')
                .collect();
            if !name.is_empty() {
                used.insert(name);
            }
        }
    }
    used
}

fn source_files(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            source_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

#[test]
fn the_code_keeps_the_documented_module_graph() {
    let graph = allowed_graph();
    assert!(
        graph.len() >= 15,
        "the table in DEVELOPERS.md was not found whole"
    );
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    source_files(&src, &mut files);
    let mut violations = Vec::new();
    for file in files {
        let relative = file.strip_prefix(&src).unwrap();
        let first = relative
            .components()
            .next()
            .unwrap()
            .as_os_str()
            .to_string_lossy()
            .into_owned();
        let module = first.trim_end_matches(".rs").to_string();
        if module == "lib" || module == "main" {
            continue;
        }
        let Some(allowed) = graph.get(&module) else {
            violations.push(format!(
                "module `{module}` ({}) is not in the table",
                relative.display()
            ));
            continue;
        };
        let text = std::fs::read_to_string(&file).unwrap();
        // A `CAUTIONS` constant and the like live in lib.rs itself; they are not modules.
        for used in used_modules(&text) {
            let is_module = graph.contains_key(&used);
            if is_module && used != module && !allowed.contains(&used) {
                violations.push(format!(
                    "{} uses `{used}`, which `{module}` may not use",
                    relative.display()
                ));
            }
        }
    }
    assert!(violations.is_empty(), "{}", violations.join("\n"));
}

#[test]
fn the_library_does_not_depend_on_the_command_line_parser() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    source_files(&src, &mut files);
    for file in files
        .iter()
        .filter(|f| !f.components().any(|c| c.as_os_str() == "cli") && !f.ends_with("main.rs"))
    {
        let text = std::fs::read_to_string(file).unwrap();
        assert!(
            !text.contains("clap::"),
            "{} uses the command-line parser",
            file.display()
        );
    }
}
