//! A study (sweep or uncertainty ensemble) as data: what was asked ([`Study`], saved as
//! `study.json`) and one table row per member ([`Table`]), from which every summary, chart and
//! report is derived. Shards write their rows and the same `Study`; merging them gives the very
//! table, and so the very files, of one unsharded run.
//!
//! Numbers in the table are written in Rust's shortest round-trip form, so a table read back
//! holds exactly the numbers computed.

use serde::{Deserialize, Serialize};

use crate::ensemble::{quantile, Outcome};

/// What a study asked for: enough to check that shards belong together and to render results.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Study {
    /// `sweep` or `uncertainty`.
    pub kind: String,
    pub title: String,
    /// The network file as given on the command line.
    pub case: String,
    /// SHA-256 of the network file's text: shards of different files never merge.
    pub case_sha256: String,
    pub temperature_k: f64,
    /// Tolerances (fractions of the total change) of the times to equilibrium.
    pub tolerances: Vec<f64>,
    /// Sweep axes as written (`temperature=40degC..80degC:9`).
    pub axes: Vec<String>,
    /// Column headers of the axes' values.
    pub axis_headers: Vec<String>,
    /// Uncertainty: the seed, and the hold time asked about (s).
    pub seed: Option<u64>,
    pub until: Option<f64>,
    /// Members in the whole study.
    pub total: usize,
    pub species: Vec<String>,
    /// What the user should know to read the results (e.g. a temperature sweep of constants
    /// that do not depend on temperature).
    pub notes: Vec<String>,
    /// This folder's share, `[i, n]`, or none for a whole study.
    pub shard: Option<[usize; 2]>,
}

/// One row per member: index, status, the member's varied values, then its outcome.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    pub header: Vec<String>,
    pub rows: Vec<Vec<String>>,
}

/// `x` in its shortest exact form, or an empty cell.
fn cell(x: Option<f64>) -> String {
    x.map(|v| format!("{v}")).unwrap_or_default()
}

/// The header of a tolerance's time column: `t_1pct_s` for 0.01.
pub fn time_header(tolerance: f64) -> String {
    format!("t_{}pct_s", crate::format::trim_percent(tolerance))
}

impl Table {
    /// The empty table of a study.
    pub fn new(study: &Study) -> Table {
        let mut header = vec!["index".to_string(), "status".to_string()];
        header.extend(study.axis_headers.iter().cloned());
        header.extend(study.tolerances.iter().map(|&t| time_header(t)));
        header.extend(study.species.iter().map(|s| format!("ceq_{s}_mol_per_L")));
        header.extend(study.species.iter().map(|s| format!("conversion_{s}")));
        header.extend(["slowest_tau_s".to_string(), "routes_agree".to_string()]);
        Table {
            header,
            rows: Vec::new(),
        }
    }

    /// Adds member `index`, with its varied values and its outcome (or why it failed).
    pub fn push(
        &mut self,
        index: usize,
        values: &[f64],
        outcome: &Result<Outcome, String>,
        n_species: usize,
    ) {
        let mut row = vec![index.to_string()];
        match outcome {
            Ok(o) => {
                row.push("ok".into());
                row.extend(values.iter().map(|&v| cell(Some(v))));
                row.extend(o.times.iter().map(|&t| cell(t)));
                match &o.equilibrium {
                    Some(c) => row.extend(c.iter().map(|&v| cell(Some(v)))),
                    None => row.extend((0..n_species).map(|_| String::new())),
                }
                row.extend(o.conversion.iter().map(|&v| cell(v)));
                row.push(cell(o.slowest_tau));
                row.push(o.routes_agree.map(|a| a.to_string()).unwrap_or_default());
            }
            Err(why) => {
                // A failed member keeps its row: counted and listed, never dropped.
                row.push(format!("failed: {}", why.replace(['\n', ','], " ")));
                row.extend(values.iter().map(|&v| cell(Some(v))));
                row.resize(self.header.len(), String::new());
            }
        }
        self.rows.push(row);
    }

    /// The table as CSV text.
    pub fn csv(&self) -> String {
        let mut out = self.header.join(",") + "\n";
        for row in &self.rows {
            out += &(row.join(",") + "\n");
        }
        out
    }

    /// A table read back from its CSV text.
    pub fn parse(text: &str) -> Result<Table, String> {
        let mut lines = text.lines();
        let header: Vec<String> = lines
            .next()
            .ok_or("the table is empty")?
            .split(',')
            .map(String::from)
            .collect();
        let mut rows = Vec::new();
        for (k, line) in lines.enumerate() {
            let row: Vec<String> = line.split(',').map(String::from).collect();
            if row.len() != header.len() {
                return Err(format!(
                    "line {}: {} fields, the header has {}",
                    k + 2,
                    row.len(),
                    header.len()
                ));
            }
            rows.push(row);
        }
        Ok(Table { header, rows })
    }

    /// The values of a column as numbers (None for empty or failed cells).
    pub fn column(&self, name: &str) -> Vec<Option<f64>> {
        let Some(k) = self.header.iter().position(|h| h == name) else {
            return vec![None; self.rows.len()];
        };
        self.rows.iter().map(|r| r[k].parse().ok()).collect()
    }

    /// The rows that failed: (index, reason).
    pub fn failed(&self) -> Vec<(usize, String)> {
        self.rows
            .iter()
            .filter(|r| r[1] != "ok")
            .map(|r| {
                (
                    r[0].parse().unwrap_or(0),
                    r[1].trim_start_matches("failed: ").to_string(),
                )
            })
            .collect()
    }
}

/// Quantiles and mean of one quantity over the members that have it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spread {
    pub p05: Option<f64>,
    pub p50: Option<f64>,
    pub p95: Option<f64>,
    pub mean: Option<f64>,
    /// Members without a value (failed, or equilibrium not reached).
    pub missing: usize,
}

impl Spread {
    pub fn of(values: &[Option<f64>]) -> Spread {
        let mut v: Vec<f64> = values
            .iter()
            .flatten()
            .copied()
            .filter(|x| x.is_finite())
            .collect();
        v.sort_by(f64::total_cmp);
        Spread {
            p05: quantile(&v, 0.05),
            p50: quantile(&v, 0.50),
            p95: quantile(&v, 0.95),
            mean: (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64),
            missing: values.len() - v.len(),
        }
    }
}

/// The time to equilibrium at one tolerance over the ensemble.
#[derive(Debug, Clone, Serialize)]
pub struct TimeSpread {
    pub tolerance: f64,
    #[serde(flatten)]
    pub spread: Spread,
    /// With a hold time: the fraction of all members within this tolerance by then.
    pub probability_within_at_until: Option<f64>,
}

/// `uncertainty.json`.
#[derive(Debug, Clone, Serialize)]
pub struct UncertaintySummary {
    pub title: String,
    pub case: String,
    pub samples: usize,
    pub seed: u64,
    pub until: Option<f64>,
    /// Members that did not finish: counted and listed, never dropped silently.
    pub failed: Failed,
    pub time_to_equilibrium: Vec<TimeSpread>,
    /// Per species (in file order), the solved equilibrium concentration, mol/L.
    #[serde(serialize_with = "as_object")]
    pub equilibrium: Vec<(String, Spread)>,
    pub method: &'static str,
    pub cautions: Vec<String>,
}

/// (name, value) pairs as a JSON object keyed by name, in their order.
fn as_object<S: serde::Serializer>(pairs: &[(String, Spread)], serializer: S) -> Result<S::Ok, S::Error> {
    use serde::ser::SerializeMap;
    let mut map = serializer.serialize_map(Some(pairs.len()))?;
    for (name, spread) in pairs {
        map.serialize_entry(name, spread)?;
    }
    map.end()
}

#[derive(Debug, Clone, Serialize)]
pub struct Failed {
    pub count: usize,
    pub members: Vec<FailedMember>,
}

#[derive(Debug, Clone, Serialize)]
pub struct FailedMember {
    pub index: usize,
    pub reason: String,
}

impl UncertaintySummary {
    pub fn of(study: &Study, table: &Table) -> UncertaintySummary {
        let failed = table.failed();
        let time_to_equilibrium = study
            .tolerances
            .iter()
            .map(|&tolerance| {
                let times = table.column(&time_header(tolerance));
                let within = study.until.map(|until| {
                    let n = times.iter().filter(|t| t.is_some_and(|t| t <= until)).count();
                    n as f64 / table.rows.len().max(1) as f64
                });
                TimeSpread {
                    tolerance,
                    spread: Spread::of(&times),
                    probability_within_at_until: within,
                }
            })
            .collect();
        let equilibrium = study
            .species
            .iter()
            .map(|s| {
                (
                    s.clone(),
                    Spread::of(&table.column(&format!("ceq_{s}_mol_per_L"))),
                )
            })
            .collect();
        UncertaintySummary {
            title: study.title.clone(),
            case: study.case.clone(),
            samples: table.rows.len(),
            seed: study.seed.unwrap_or(0),
            until: study.until,
            failed: Failed {
                count: failed.len(),
                members: failed
                    .into_iter()
                    .map(|(index, reason)| FailedMember { index, reason })
                    .collect(),
            },
            time_to_equilibrium,
            equilibrium,
            method: "Monte Carlo: log-normal constants (factor f: 95 % within k/f..k·f), ln K normal from a ΔG° standard deviation, ln K changes projected to keep detailed balance round cycles; quantiles by linear interpolation between order statistics",
            cautions: crate::CAUTIONS.iter().map(|c| c.to_string()).collect(),
        }
    }
}

/// The table of `indices` (all members, or one shard's), each member evaluated by `member`
/// as (its varied values, its outcome), on `threads` threads; rows in index order.
pub fn tabulate<F>(
    study: &Study,
    indices: &[usize],
    threads: usize,
    member: F,
    progress: &(dyn Fn(usize) + Sync),
) -> Table
where
    F: Fn(usize) -> (Vec<f64>, Result<Outcome, String>) + Sync,
{
    let outcomes = crate::ensemble::evaluate(indices, threads, member, progress);
    let mut table = Table::new(study);
    for (&index, (values, outcome)) in indices.iter().zip(&outcomes) {
        table.push(index, values, outcome, study.species.len());
    }
    table
}

/// One study from the tables of its shards: every shard of the same study exactly once, rows
/// back in index order. The result is the table an unsharded run writes.
pub fn merge(parts: Vec<(Study, Table)>) -> Result<(Study, Table), String> {
    let Some((first, _)) = parts.first() else {
        return Err("no shard folders given".into());
    };
    let whole = Study {
        shard: None,
        ..first.clone()
    };
    let n = first.shard.map_or(1, |[_, n]| n);
    let mut seen = vec![false; n];
    let mut rows = Vec::new();
    let mut header = None;
    for (study, table) in parts {
        if (Study {
            shard: None,
            ..study.clone()
        }) != whole
        {
            return Err(format!(
                "shard {:?} belongs to another study (case, settings or seed differ)",
                study.shard
            ));
        }
        let Some([i, m]) = study.shard else {
            return Err("a folder is a whole study, not a shard".into());
        };
        if m != n || i == 0 || i > n || seen[i - 1] {
            return Err(format!("shard {i}/{m} is repeated or does not fit {n} shards"));
        }
        seen[i - 1] = true;
        header.get_or_insert(table.header);
        rows.extend(table.rows);
    }
    if let Some(missing) = seen.iter().position(|s| !s) {
        return Err(format!("shard {}/{n} is missing", missing + 1));
    }
    rows.sort_by_key(|r| r[0].parse::<usize>().unwrap_or(usize::MAX));
    if rows.len() != whole.total {
        return Err(format!(
            "the shards hold {} members, the study has {}",
            rows.len(),
            whole.total
        ));
    }
    let header = header.unwrap_or_default();
    Ok((whole, Table { header, rows }))
}
