//! Stoichiometric matrix and conservation laws.
//!
//! The matrix N has one row per species and one column per reaction (products minus
//! reactants). A conservation law is a vector l with lᵀN = 0: the total lᵀc never changes,
//! whatever the rates. The laws are a basis of the left null space, found by sparse Gauss-Jordan
//! elimination of Nᵀ so that networks of thousands of species stay cheap.

use crate::network::Network;

/// Entries below this fraction of the largest entry in a row are rounding, not chemistry.
const DROP_TOL: f64 = 1e-12;

/// A linear combination of species whose total is constant.
#[derive(Debug, Clone, PartialEq)]
pub struct ConservationLaw {
    /// (species index, coefficient), coefficients scaled so the smallest magnitude is 1.
    pub coefficients: Vec<(usize, f64)>,
}

impl ConservationLaw {
    pub fn total(&self, y: &[f64]) -> f64 {
        self.coefficients.iter().map(|&(i, c)| c * y[i]).sum()
    }

    /// The size against which drift is judged: the sum of |l_i c_i|.
    pub fn magnitude(&self, y: &[f64]) -> f64 {
        self.coefficients.iter().map(|&(i, c)| (c * y[i]).abs()).sum()
    }

    /// Human-readable form, e.g. `A + 2 C`.
    pub fn describe(&self, names: &[String]) -> String {
        self.describe_within(names, usize::MAX)
    }

    /// As [`describe`](Self::describe), but a law of more than `terms` species shows its first
    /// terms and its last, e.g. `A0 + A1 + … + 70 A4999 (5000 species)`: a total over thousands
    /// of species is unreadable written out, and the summary JSON keeps it whole.
    pub fn describe_within(&self, names: &[String], terms: usize) -> String {
        let n = self.coefficients.len();
        let shown: Vec<usize> = if n <= terms.max(2) {
            (0..n).collect()
        } else {
            (0..terms.max(2) - 1).chain([n - 1]).collect()
        };
        let mut text = String::new();
        for (k, &at) in shown.iter().enumerate() {
            let (i, c) = self.coefficients[at];
            if k == 0 {
                if c < 0.0 {
                    text.push('-');
                }
            } else {
                if at != shown[k - 1] + 1 {
                    text.push_str(" + …");
                }
                text.push_str(if c < 0.0 { " - " } else { " + " });
            }
            if (c.abs() - 1.0).abs() > 1e-12 {
                text.push_str(&format!("{} ", crate::format::coefficient(c.abs())));
            }
            text.push_str(&names[i]);
        }
        if shown.len() < n {
            text.push_str(&format!(" ({n} species)"));
        }
        text
    }
}

/// The stoichiometry of a network.
#[derive(Debug, Clone)]
pub struct Stoichiometry {
    pub n_species: usize,
    /// Net coefficients of each reaction: (species index, products minus reactants), non-zero only.
    pub columns: Vec<Vec<(usize, f64)>>,
    /// A basis of the conservation laws written as totals where possible (for people).
    pub conservation: Vec<ConservationLaw>,
    /// The same span as the sparse basis elimination yields, before laws are combined into
    /// totals: each law touches as few species as it can, so a law among trace species is not
    /// mixed with abundant ones (for holding totals to rounding during integration).
    pub local_conservation: Vec<ConservationLaw>,
    /// The reactions independent of those before them in the file: a basis of N's columns
    /// (rank N of them), on which any change the network can make has unique extents.
    pub independent: Vec<usize>,
}

impl Stoichiometry {
    /// Rank of N: the number of independent reactions.
    pub fn rank(&self) -> usize {
        self.independent.len()
    }

    pub fn new(network: &Network) -> Stoichiometry {
        let n_species = network.n_species();
        let columns: Vec<Vec<(usize, f64)>> = network
            .reactions
            .iter()
            .map(|r| net_change(&r.reactants, &r.products))
            .collect();
        let (local, independent) = left_null_space(n_species, &columns);
        let mut polished: Vec<Row> = local.clone();
        fewer_negatives(&mut polished);
        let as_laws = |rows: Vec<Row>| -> Vec<ConservationLaw> {
            rows.into_iter()
                .map(|coefficients| ConservationLaw { coefficients })
                .collect()
        };
        Stoichiometry {
            n_species,
            columns,
            conservation: as_laws(polished),
            local_conservation: as_laws(local),
            independent,
        }
    }
}

pub use crate::network::net_change;

/// A sparse row: sorted (column, value) pairs.
pub type Row = Vec<(usize, f64)>;

/// What became of a row offered to an [`Echelon`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Insert {
    /// The row was independent of the earlier ones and is now a pivot row.
    Independent,
    /// The row was a combination of earlier ones; `residual` is what is left of its right-hand
    /// side (zero when the equations are consistent).
    Dependent { residual: f64 },
}

/// Incremental sparse Gauss-Jordan elimination: rows (with an optional right-hand side) are
/// offered one at a time; every pivot row is kept free of the other pivot columns, so a new row
/// is reduced in one pass. Used for conservation laws (null space) and for solving the
/// equilibrium-constant equations (consistency around cycles).
#[derive(Debug, Clone)]
pub struct Echelon {
    n_cols: usize,
    /// (pivot column, row with 1 at the pivot, right-hand side).
    pivots: Vec<(usize, Row, f64)>,
    pivot_of: Vec<usize>,
    /// For each column, the pivot rows that may hold it (a superset, in no order: entries that
    /// cancel stay listed), so that a new pivot is eliminated from those rows only and not
    /// searched for in every row (on a 5000-species network, most of the conservation laws'
    /// time).
    holders: Vec<Vec<usize>>,
}

impl Echelon {
    pub fn new(n_cols: usize) -> Echelon {
        Echelon {
            n_cols,
            pivots: Vec::new(),
            pivot_of: vec![usize::MAX; n_cols],
            holders: vec![Vec::new(); n_cols],
        }
    }

    pub fn rank(&self) -> usize {
        self.pivots.len()
    }

    pub fn insert(&mut self, row: &[(usize, f64)], rhs: f64) -> Insert {
        let mut row: Row = row.to_vec();
        row.sort_by_key(|e| e.0);
        let mut rhs = rhs;
        let scale = row.iter().fold(0.0_f64, |m, e| m.max(e.1.abs()));
        let hits: Vec<(usize, f64)> = row
            .iter()
            .filter(|(c, _)| self.pivot_of[*c] != usize::MAX)
            .copied()
            .collect();
        for (c, v) in hits {
            let (_, pivot_row, pivot_rhs) = &self.pivots[self.pivot_of[c]];
            row = axpy(&row, -v, pivot_row);
            rhs -= v * pivot_rhs;
        }
        drop_small(&mut row, scale);
        let Some(&(pivot, value)) = row.iter().max_by(|a, b| a.1.abs().total_cmp(&b.1.abs())) else {
            return Insert::Dependent { residual: rhs };
        };
        for entry in row.iter_mut() {
            entry.1 /= value;
        }
        rhs /= value;
        let mut holding = std::mem::take(&mut self.holders[pivot]);
        holding.sort_unstable();
        holding.dedup();
        for i in holding {
            let (_, other, other_rhs) = &mut self.pivots[i];
            if let Ok(k) = other.binary_search_by_key(&pivot, |e| e.0) {
                let v = other[k].1;
                let other_scale = other.iter().fold(0.0_f64, |m, e| m.max(e.1.abs()));
                let updated = axpy(other, -v, &row);
                for &(c, _) in &row {
                    if other.binary_search_by_key(&c, |e| e.0).is_err() {
                        self.holders[c].push(i);
                    }
                }
                *other = updated;
                *other_rhs -= v * rhs;
                drop_small(other, other_scale);
            }
        }
        let index = self.pivots.len();
        for &(c, _) in &row {
            self.holders[c].push(index);
        }
        self.pivot_of[pivot] = index;
        self.pivots.push((pivot, row, rhs));
        Insert::Independent
    }

    /// A basis of the vectors x with row·x = 0 for every row inserted.
    pub fn null_space(&self) -> Vec<Row> {
        (0..self.n_cols)
            .filter(|&f| self.pivot_of[f] == usize::MAX)
            .map(|free| {
                let mut x = vec![(free, 1.0)];
                for (pivot, row, _) in &self.pivots {
                    if let Ok(k) = row.binary_search_by_key(&free, |e| e.0) {
                        x.push((*pivot, -row[k].1));
                    }
                }
                x.sort_by_key(|e| e.0);
                x
            })
            .collect()
    }

    /// One solution of row·x = rhs for every independent row, with the free columns at zero.
    pub fn particular_solution(&self) -> Vec<f64> {
        let mut x = vec![0.0; self.n_cols];
        for (pivot, _, rhs) in &self.pivots {
            x[*pivot] = *rhs;
        }
        x
    }
}

/// Basis of {l : lᵀN = 0} from the rows of Nᵀ (one per reaction), each law scaled to small
/// whole numbers. Returns the basis and the reactions independent of the earlier ones.
fn left_null_space(n_species: usize, columns: &[Row]) -> (Vec<Row>, Vec<usize>) {
    let mut echelon = Echelon::new(n_species);
    let independent = columns
        .iter()
        .enumerate()
        .filter(|(_, column)| echelon.insert(column, 0.0) == Insert::Independent)
        .map(|(j, _)| j)
        .collect();
    let rows: Vec<Row> = echelon.null_space().into_iter().map(tidy).collect();
    (rows, independent)
}

/// Most bases this size are worth polishing; beyond it the quadratic search is skipped.
const POLISH_LIMIT: usize = 200;

/// Adds multiples of one law to another while that removes negative coefficients, so that laws
/// read as totals of moieties (`acid + ester`) rather than differences (`ester - water`). The
/// span is unchanged: each law only gains multiples of the others.
fn fewer_negatives(laws: &mut [Row]) {
    let negatives = |row: &Row| row.iter().filter(|e| e.1 < 0.0).count();
    if laws.len() > POLISH_LIMIT {
        return;
    }
    for _pass in 0..10 {
        let mut improved = false;
        for i in 0..laws.len() {
            for j in 0..laws.len() {
                if i == j || negatives(&laws[i]) == 0 {
                    continue;
                }
                // The smallest multiple of law j that lifts every negative entry of law i it can.
                let alpha = laws[i]
                    .iter()
                    .filter(|e| e.1 < 0.0)
                    .filter_map(|e| {
                        laws[j]
                            .iter()
                            .find(|f| f.0 == e.0 && f.1 > 0.0)
                            .map(|f| -e.1 / f.1)
                    })
                    .fold(0.0_f64, f64::max);
                if alpha == 0.0 {
                    continue;
                }
                let mut candidate = axpy(&laws[i], alpha, &laws[j]);
                drop_small(&mut candidate, 1.0);
                if !candidate.is_empty() && negatives(&candidate) < negatives(&laws[i]) {
                    laws[i] = tidy(candidate);
                    improved = true;
                }
            }
        }
        if !improved {
            break;
        }
    }
}

/// a + s·b for sorted sparse rows.
fn axpy(a: &Row, s: f64, b: &Row) -> Row {
    let mut out = Vec::with_capacity(a.len() + b.len());
    let (mut i, mut j) = (0, 0);
    while i < a.len() || j < b.len() {
        if j == b.len() || (i < a.len() && a[i].0 < b[j].0) {
            out.push(a[i]);
            i += 1;
        } else if i == a.len() || b[j].0 < a[i].0 {
            out.push((b[j].0, s * b[j].1));
            j += 1;
        } else {
            out.push((a[i].0, a[i].1 + s * b[j].1));
            i += 1;
            j += 1;
        }
    }
    out
}

/// Drops entries that are rounding left over from cancellation, judged against the row's
/// scale before the elimination.
fn drop_small(row: &mut Row, scale: f64) {
    row.retain(|e| e.1.abs() > DROP_TOL * scale);
}

/// Scales a law so its smallest coefficient has magnitude 1 and the leading one is positive,
/// and snaps near-integers, so that `A + B + 2 C` reads as a chemist would write it.
fn tidy(mut coefficients: Row) -> Row {
    let smallest = coefficients.iter().fold(f64::INFINITY, |m, e| m.min(e.1.abs()));
    let sign = if coefficients.iter().all(|e| e.1 <= 0.0) {
        -1.0
    } else {
        1.0
    };
    for entry in coefficients.iter_mut() {
        let v = sign * entry.1 / smallest;
        entry.1 = if (v - v.round()).abs() < 1e-9 {
            v.round()
        } else {
            v
        };
    }
    coefficients
}

#[cfg(test)]
mod tests {
    use super::*;

    fn polished(n: usize, columns: &[Row]) -> (Vec<ConservationLaw>, usize) {
        let (mut rows, independent) = left_null_space(n, columns);
        fewer_negatives(&mut rows);
        let laws = rows
            .into_iter()
            .map(|coefficients| ConservationLaw { coefficients })
            .collect();
        (laws, independent.len())
    }

    /// Checks lᵀN = 0 for every law (by recomposition; tolerance 1e-12, rounding only).
    fn assert_laws_annihilate(columns: &[Row], laws: &[ConservationLaw]) {
        for law in laws {
            for column in columns {
                let dot: f64 = column
                    .iter()
                    .map(|&(i, v)| v * law.coefficients.iter().find(|e| e.0 == i).map_or(0.0, |e| e.1))
                    .sum();
                assert!(dot.abs() < 1e-12, "law {law:?} does not annihilate {column:?}");
            }
        }
    }

    #[test]
    fn a_plus_b_to_c_conserves_two_totals() {
        // A + B <=> C: A + C and B + C are conserved (common practice; by inspection).
        let columns = vec![net_change(&[(0, 1.0), (1, 1.0)], &[(2, 1.0)])];
        let (laws, rank) = polished(3, &columns);
        assert_eq!(rank, 1);
        assert_eq!(laws.len(), 2);
        assert_laws_annihilate(&columns, &laws);
    }

    #[test]
    fn robertson_conserves_total_mass() {
        // A -> B, B + C -> A + C, 2 B -> B + C: only A + B + C is conserved.
        let columns = vec![
            net_change(&[(0, 1.0)], &[(1, 1.0)]),
            net_change(&[(1, 1.0), (2, 1.0)], &[(0, 1.0), (2, 1.0)]),
            net_change(&[(1, 2.0)], &[(1, 1.0), (2, 1.0)]),
        ];
        let (laws, rank) = polished(3, &columns);
        assert_eq!(rank, 2);
        assert_eq!(laws.len(), 1);
        assert_eq!(laws[0].coefficients, vec![(0, 1.0), (1, 1.0), (2, 1.0)]);
    }

    #[test]
    fn feed_breaks_conservation() {
        let columns = vec![net_change(&[], &[(0, 1.0)]), net_change(&[(0, 1.0)], &[(1, 1.0)])];
        let (laws, rank) = polished(2, &columns);
        assert_eq!((laws.len(), rank), (0, 2));
    }

    #[test]
    fn laws_read_as_totals_where_they_can() {
        // acid + alcohol <=> ester + water: the basis can be written without minus signs, e.g.
        // acid + ester, alcohol + ester, acid + water (common practice: moiety totals).
        let columns = vec![net_change(&[(0, 1.0), (1, 1.0)], &[(2, 1.0), (3, 1.0)])];
        let (laws, _) = polished(4, &columns);
        assert_eq!(laws.len(), 3);
        assert_laws_annihilate(&columns, &laws);
        for law in &laws {
            assert!(law.coefficients.iter().all(|e| e.1 > 0.0), "{law:?}");
        }
    }

    #[test]
    fn long_laws_are_shortened_to_their_first_and_last_terms() {
        let names: Vec<String> = (0..6).map(|i| format!("X{i}")).collect();
        let law = ConservationLaw {
            coefficients: (0..6).map(|i| (i, if i == 5 { -2.0 } else { 1.0 })).collect(),
        };
        assert_eq!(law.describe(&names), "X0 + X1 + X2 + X3 + X4 - 2 X5");
        assert_eq!(law.describe_within(&names, 3), "X0 + X1 + … - 2 X5 (6 species)");
        assert_eq!(law.describe_within(&names, 6), law.describe(&names));
    }

    #[test]
    fn dimerisation_weights_monomer_twice() {
        // 2 A <=> B: A + 2 B is conserved.
        let columns = vec![net_change(&[(0, 2.0)], &[(1, 1.0)])];
        let (laws, _) = polished(2, &columns);
        assert_eq!(laws[0].coefficients, vec![(0, 1.0), (1, 2.0)]);
    }
}
