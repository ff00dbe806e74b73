//! Sparse LU without row exchanges on a fill-reducing symmetric ordering.
//!
//! The Jacobian of a reversible mass-action network is structurally symmetric (a species that
//! enters a step's rate is changed by it, and the other way round), and the matrices the
//! integrators factor, I − hγJ, are close to the identity on every step that is not huge. So
//! the elimination order can be chosen once, from the structure alone, by approximate minimum
//! degree (Amestoy, Davis & Duff, SIAM J. Matrix Anal. Appl. 17 (1996) 886), and the factors'
//! structure is then that of the Cholesky factor of the symmetrised pattern (George & Liu,
//! Computer Solution of Large Sparse Positive Definite Systems, 1981). Each factorisation is a
//! left-looking elimination (Gilbert & Peierls, SIAM J. Sci. Stat. Comput. 9 (1988) 862) over
//! that fixed structure: no pivot search, no allocation, no symbolic work per step.
//!
//! Without row exchanges a small pivot can spoil the factors, so every pivot is compared with
//! the entries below it (threshold pivoting's test, Duff, Erisman & Reid, Direct Methods for
//! Sparse Matrices, 2nd ed., §5.4); a pivot that fails is reported and the caller falls back to
//! an LU with partial pivoting.

use faer::sparse::linalg::cholesky::{
    factorize_symbolic_cholesky, CholeskySymbolicParams, SymbolicCholeskyRaw, SymmetricOrdering,
};
use faer::sparse::linalg::SupernodalThreshold;
use faer::sparse::SymbolicSparseColMatRef;
use faer::Side;

use super::Pattern;

/// A pivot smaller than this fraction of the largest entry below it in its column is refused:
/// the element growth it allows (at most 1/PIVOT_THRESHOLD per step) would cost digits the
/// Newton iteration needs. 1e-3 is a loose form of the 0.1-0.01 customary for threshold pivoting
/// (common practice), loose because the factors only feed a modified Newton iteration.
const PIVOT_THRESHOLD: f64 = 1e-3;

/// A pivot failed the threshold test or was not finite.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct UnstablePivot;

pub struct OrderedLu {
    n: usize,
    /// `order[new] = old`: the elimination order.
    order: Vec<usize>,
    /// `position[old] = new`.
    position: Vec<usize>,
    /// Strictly lower factor by columns (new numbering), rows ascending; unit diagonal implied.
    lower_ptr: Vec<usize>,
    lower_row: Vec<usize>,
    lower: Vec<f64>,
    /// Strictly upper factor by columns, rows ascending: column j has the rows k < j whose
    /// lower column holds j.
    upper_ptr: Vec<usize>,
    upper_row: Vec<usize>,
    upper: Vec<f64>,
    diagonal: Vec<f64>,
    /// Dense scratch column, all zeros between uses.
    work: Vec<f64>,
    factored: bool,
}

impl OrderedLu {
    /// Orders the symmetrised pattern and lays out the factors' structure; `None` when the
    /// symbolic analysis fails (the caller then uses a pivoting LU).
    pub fn new(pattern: &Pattern) -> Option<OrderedLu> {
        let n = pattern.n;
        let symmetric = symmetrised(pattern);
        let structure =
            SymbolicSparseColMatRef::new_checked(n, n, &symmetric.col_ptr, None, &symmetric.row_idx);
        let params = CholeskySymbolicParams {
            supernodal_flop_ratio_threshold: SupernodalThreshold::FORCE_SIMPLICIAL,
            ..Default::default()
        };
        let symbolic =
            factorize_symbolic_cholesky(structure, Side::Lower, SymmetricOrdering::Amd, params).ok()?;
        let SymbolicCholeskyRaw::Simplicial(factor) = symbolic.raw() else {
            return None;
        };
        let (order, position) = match symbolic.perm() {
            Some(perm) => {
                let (forward, inverse) = perm.arrays();
                (forward.to_vec(), inverse.to_vec())
            }
            None => ((0..n).collect(), (0..n).collect()),
        };
        // Strict lower part of the Cholesky structure (faer stores the diagonal too).
        let (col_ptr, row_idx) = (factor.col_ptr(), factor.row_idx());
        let mut lower_ptr = Vec::with_capacity(n + 1);
        let mut lower_row = Vec::with_capacity(row_idx.len());
        lower_ptr.push(0);
        for j in 0..n {
            let mut rows: Vec<usize> = row_idx[col_ptr[j]..col_ptr[j + 1]]
                .iter()
                .copied()
                .filter(|&i| i > j)
                .collect();
            rows.sort_unstable();
            lower_row.extend(rows);
            lower_ptr.push(lower_row.len());
        }
        let (upper_ptr, upper_row) = transpose(n, &lower_ptr, &lower_row);
        Some(OrderedLu {
            n,
            order,
            position,
            lower: vec![0.0; lower_row.len()],
            upper: vec![0.0; upper_row.len()],
            lower_ptr,
            lower_row,
            upper_ptr,
            upper_row,
            diagonal: vec![0.0; n],
            work: vec![0.0; n],
            factored: false,
        })
    }

    /// Multiply-adds of one factorisation: column k of L meets row k of U, both of the same
    /// length.
    pub fn multiply_adds(&self) -> usize {
        self.lower_ptr.windows(2).map(|w| (w[1] - w[0]).pow(2)).sum()
    }

    /// Factors the matrix with `values` on `pattern` (the pattern this was built from).
    pub fn factor(&mut self, pattern: &Pattern, values: &[f64]) -> Result<(), UnstablePivot> {
        self.factored = false;
        let work = &mut self.work;
        for j in 0..self.n {
            let old = self.order[j];
            for p in pattern.col_ptr[old]..pattern.col_ptr[old + 1] {
                work[self.position[pattern.row_idx[p]]] = values[p];
            }
            // Upper part of column j, in ascending row order: each finished row k feeds the
            // rows below it through column k of L.
            for q in self.upper_ptr[j]..self.upper_ptr[j + 1] {
                let k = self.upper_row[q];
                let u = std::mem::take(&mut work[k]);
                self.upper[q] = u;
                if u != 0.0 {
                    let range = self.lower_ptr[k]..self.lower_ptr[k + 1];
                    for (&i, &l) in self.lower_row[range.clone()].iter().zip(&self.lower[range]) {
                        work[i] -= l * u;
                    }
                }
            }
            let pivot = std::mem::take(&mut work[j]);
            let column = self.lower_ptr[j]..self.lower_ptr[j + 1];
            let largest_below = self.lower_row[column.clone()]
                .iter()
                .fold(0.0_f64, |m, &i| m.max(work[i].abs()));
            if !pivot.is_finite() || pivot == 0.0 || pivot.abs() < PIVOT_THRESHOLD * largest_below {
                work.iter_mut().for_each(|w| *w = 0.0);
                return Err(UnstablePivot);
            }
            self.diagonal[j] = pivot;
            for p in column {
                self.lower[p] = std::mem::take(&mut work[self.lower_row[p]]) / pivot;
            }
        }
        self.factored = true;
        Ok(())
    }

    /// Solves A x = b in place with the last factorisation; false when there is none.
    pub fn solve(&mut self, b: &mut [f64]) -> bool {
        if !self.factored {
            return false;
        }
        let x = &mut self.work;
        for (new, &old) in self.order.iter().enumerate() {
            x[new] = b[old];
        }
        for k in 0..self.n {
            let xk = x[k];
            if xk != 0.0 {
                for p in self.lower_ptr[k]..self.lower_ptr[k + 1] {
                    x[self.lower_row[p]] -= self.lower[p] * xk;
                }
            }
        }
        for j in (0..self.n).rev() {
            let xj = x[j] / self.diagonal[j];
            x[j] = xj;
            if xj != 0.0 {
                for q in self.upper_ptr[j]..self.upper_ptr[j + 1] {
                    x[self.upper_row[q]] -= self.upper[q] * xj;
                }
            }
        }
        for (new, &old) in self.order.iter().enumerate() {
            b[old] = std::mem::take(&mut x[new]);
        }
        true
    }
}

/// The pattern of A + Aᵀ with the full diagonal.
fn symmetrised(pattern: &Pattern) -> Pattern {
    let mut entries = Vec::with_capacity(2 * pattern.nnz() + pattern.n);
    for col in 0..pattern.n {
        entries.push((col, col));
        for &row in &pattern.row_idx[pattern.col_ptr[col]..pattern.col_ptr[col + 1]] {
            entries.push((row, col));
            entries.push((col, row));
        }
    }
    Pattern::from_entries(pattern.n, entries)
}

/// Column pointers and ascending row indices of the transpose of a column-compressed structure.
fn transpose(n: usize, col_ptr: &[usize], row_idx: &[usize]) -> (Vec<usize>, Vec<usize>) {
    let mut counts = vec![0; n + 1];
    for &i in row_idx {
        counts[i + 1] += 1;
    }
    for i in 0..n {
        counts[i + 1] += counts[i];
    }
    let mut next = counts.clone();
    let mut rows = vec![0; row_idx.len()];
    for j in 0..n {
        for &i in &row_idx[col_ptr[j]..col_ptr[j + 1]] {
            rows[next[i]] = j;
            next[i] += 1;
        }
    }
    (counts, rows)
}
