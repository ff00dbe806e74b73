//! Sparse matrix structure and the LU solves the implicit integrator needs.
//!
//! Matrices are stored column-compressed (CSC) from the start; small systems are factored
//! densely (nalgebra), larger ones with faer's sparse LU, whose symbolic analysis is done once
//! per pattern and reused for every step.

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::sparse::linalg::lu::{factorize_symbolic_lu, LuRef, NumericLu, SymbolicLu};
use faer::sparse::{SparseColMatRef, SymbolicSparseColMatRef};
use faer::{Conj, Par};

/// Above this many unknowns the sparse LU is used (below it, dense LU is faster).
pub const DENSE_LIMIT: usize = 60;

/// Column-compressed sparsity pattern of a square matrix; row indices sorted within columns.
#[derive(Debug, Clone, PartialEq)]
pub struct Pattern {
    pub n: usize,
    pub col_ptr: Vec<usize>,
    pub row_idx: Vec<usize>,
}

impl Pattern {
    /// Builds a pattern from (row, col) entries; duplicates are merged.
    pub fn from_entries(n: usize, mut entries: Vec<(usize, usize)>) -> Pattern {
        entries.sort_by_key(|&(r, c)| (c, r));
        entries.dedup();
        let mut col_ptr = vec![0; n + 1];
        for &(_, c) in &entries {
            col_ptr[c + 1] += 1;
        }
        for c in 0..n {
            col_ptr[c + 1] += col_ptr[c];
        }
        Pattern {
            n,
            col_ptr,
            row_idx: entries.into_iter().map(|(r, _)| r).collect(),
        }
    }

    pub fn nnz(&self) -> usize {
        self.row_idx.len()
    }

    /// Position of entry (row, col) in the value array, if it is in the pattern.
    pub fn position(&self, row: usize, col: usize) -> Option<usize> {
        let range = self.col_ptr[col]..self.col_ptr[col + 1];
        self.row_idx[range.clone()]
            .binary_search(&row)
            .ok()
            .map(|k| range.start + k)
    }

    /// Positions of the diagonal entries (all must be present).
    pub fn diagonal_positions(&self) -> Vec<usize> {
        (0..self.n)
            .map(|i| self.position(i, i).expect("pattern includes the diagonal"))
            .collect()
    }

    /// y = A x for values `a` on this pattern.
    pub fn multiply(&self, a: &[f64], x: &[f64], y: &mut [f64]) {
        y.iter_mut().for_each(|v| *v = 0.0);
        for (col, &xc) in x.iter().enumerate().take(self.n) {
            for k in self.col_ptr[col]..self.col_ptr[col + 1] {
                y[self.row_idx[k]] += a[k] * xc;
            }
        }
    }
}

/// A reusable LU solver for matrices on one pattern.
pub struct LinearSolver {
    pattern: Pattern,
    kind: Kind,
}

enum Kind {
    Dense(DenseLu),
    /// faer's sparse LU with its numeric storage and workspaces kept between factorisations, so
    /// that a step allocates nothing.
    Sparse(Box<SparseLu>),
}

struct SparseLu {
    symbolic: SymbolicLu<usize>,
    numeric: NumericLu<usize, f64>,
    factor_work: MemBuffer,
    solve_work: MemBuffer,
    factored: bool,
}

/// The matrix could not be factored (singular to working precision).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Singular;

impl LinearSolver {
    /// Chooses dense or sparse by size; `force_dense` lets tests run both paths on one case.
    pub fn new(pattern: Pattern, force_dense: Option<bool>) -> LinearSolver {
        let dense = force_dense.unwrap_or(pattern.n <= DENSE_LIMIT);
        let kind = if dense {
            Kind::Dense(DenseLu::new(pattern.n))
        } else {
            let symbolic_matrix = SymbolicSparseColMatRef::new_checked(
                pattern.n,
                pattern.n,
                &pattern.col_ptr,
                None,
                &pattern.row_idx,
            );
            match factorize_symbolic_lu(symbolic_matrix, Default::default()) {
                Ok(symbolic) => {
                    // Kinetic networks give many modest factorisations: thread hand-offs cost more
                    // than they save there (2.6 s against 5.7 s on a 1000-species network).
                    let factor_work = MemBuffer::new(
                        symbolic.factorize_numeric_lu_scratch::<f64>(Par::Seq, Default::default()),
                    );
                    let solve_work = MemBuffer::new(symbolic.solve_in_place_scratch::<f64>(1, Par::Seq));
                    Kind::Sparse(Box::new(SparseLu {
                        symbolic,
                        numeric: NumericLu::new(),
                        factor_work,
                        solve_work,
                        factored: false,
                    }))
                }
                Err(_) => Kind::Dense(DenseLu::new(pattern.n)),
            }
        };
        LinearSolver { pattern, kind }
    }

    pub fn is_sparse(&self) -> bool {
        matches!(self.kind, Kind::Sparse(_))
    }

    /// Factors the matrix whose values (on the pattern) are given.
    pub fn factor(&mut self, values: &[f64]) -> Result<(), Singular> {
        let p = &self.pattern;
        match &mut self.kind {
            Kind::Dense(lu) => {
                lu.a.fill(0.0);
                for col in 0..p.n {
                    let range = p.col_ptr[col]..p.col_ptr[col + 1];
                    for (&row, &value) in p.row_idx[range.clone()].iter().zip(&values[range]) {
                        lu.a[row * p.n + col] = value;
                    }
                }
                lu.factor()?;
            }
            Kind::Sparse(lu) => {
                let symbolic_matrix =
                    SymbolicSparseColMatRef::new_checked(p.n, p.n, &p.col_ptr, None, &p.row_idx);
                let matrix = SparseColMatRef::new(symbolic_matrix, values);
                let SparseLu {
                    symbolic,
                    numeric,
                    factor_work,
                    factored,
                    ..
                } = lu.as_mut();
                *factored = false;
                let stack = MemStack::new(factor_work);
                symbolic
                    .factorize_numeric_lu(numeric, matrix, Par::Seq, stack, Default::default())
                    .map_err(|_| Singular)?;
                *factored = true;
            }
        }
        Ok(())
    }

    /// Solves A x = b in place with the last factorisation; non-finite results count as singular.
    pub fn solve(&mut self, b: &mut [f64]) -> Result<(), Singular> {
        match &mut self.kind {
            Kind::Dense(lu) if lu.factored => lu.solve(b),
            Kind::Sparse(lu) if lu.factored => {
                let n = b.len();
                let SparseLu {
                    symbolic,
                    numeric,
                    solve_work,
                    ..
                } = lu.as_mut();
                let rhs = faer::MatMut::from_column_major_slice_mut(b, n, 1);
                LuRef::new_unchecked(symbolic, numeric).solve_in_place_with_conj(
                    Conj::No,
                    rhs,
                    Par::Seq,
                    MemStack::new(solve_work),
                );
            }
            _ => return Err(Singular),
        }
        if b.iter().all(|v| v.is_finite()) {
            Ok(())
        } else {
            Err(Singular)
        }
    }
}

/// Dense LU with partial pivoting (Golub & Van Loan, Matrix Computations, 4th ed., Alg. 3.4.1)
/// in one row-major buffer reused for every step: for the small systems of most networks this
/// is several times faster than a general-purpose LU that allocates per factorisation.
#[derive(Debug, Clone)]
struct DenseLu {
    n: usize,
    /// L (unit diagonal, below) and U (on and above) in place, row-major.
    a: Vec<f64>,
    /// Row `k` of the factors is row `perm[k]` of the matrix.
    perm: Vec<usize>,
    factored: bool,
    /// Scratch for the permuted right-hand side.
    work: Vec<f64>,
}

impl DenseLu {
    fn new(n: usize) -> DenseLu {
        DenseLu {
            n,
            a: vec![0.0; n * n],
            perm: (0..n).collect(),
            factored: false,
            work: vec![0.0; n],
        }
    }

    fn factor(&mut self) -> Result<(), Singular> {
        let n = self.n;
        self.factored = false;
        self.perm.iter_mut().enumerate().for_each(|(k, p)| *p = k);
        for k in 0..n {
            let pivot = (k..n)
                .max_by(|&i, &j| self.a[i * n + k].abs().total_cmp(&self.a[j * n + k].abs()))
                .unwrap_or(k);
            let pivot_value = self.a[pivot * n + k];
            if pivot_value == 0.0 || !pivot_value.is_finite() {
                return Err(Singular);
            }
            if pivot != k {
                for c in 0..n {
                    self.a.swap(k * n + c, pivot * n + c);
                }
                self.perm.swap(k, pivot);
            }
            let (upper, lower) = self.a.split_at_mut((k + 1) * n);
            let row_k = &upper[k * n..];
            for row in lower.chunks_exact_mut(n) {
                let factor = row[k] / pivot_value;
                row[k] = factor;
                if factor != 0.0 {
                    for (x, &u) in row[k + 1..].iter_mut().zip(&row_k[k + 1..]) {
                        *x -= factor * u;
                    }
                }
            }
        }
        self.factored = true;
        Ok(())
    }

    /// Solves in place: permute, forward substitution with L, back substitution with U.
    fn solve(&mut self, b: &mut [f64]) {
        let n = self.n;
        for (w, &p) in self.work.iter_mut().zip(&self.perm) {
            *w = b[p];
        }
        b.copy_from_slice(&self.work);
        for i in 0..n {
            let row = &self.a[i * n..i * n + i];
            let sum: f64 = row.iter().zip(&b[..i]).map(|(l, x)| l * x).sum();
            b[i] -= sum;
        }
        for i in (0..n).rev() {
            let row = &self.a[i * n..(i + 1) * n];
            let sum: f64 = row[i + 1..].iter().zip(&b[i + 1..]).map(|(u, x)| u * x).sum();
            b[i] = (b[i] - sum) / row[i];
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dense_and_sparse_agree_on_a_small_system() {
        // [[4,1,0],[1,3,1],[0,1,2]] x = [1,2,3]; checked by recomposition (A x = b to 1e-12).
        let entries = vec![(0, 0), (1, 0), (0, 1), (1, 1), (2, 1), (1, 2), (2, 2)];
        let pattern = Pattern::from_entries(3, entries);
        let mut values = vec![0.0; pattern.nnz()];
        for (r, c, v) in [
            (0, 0, 4.0),
            (1, 0, 1.0),
            (0, 1, 1.0),
            (1, 1, 3.0),
            (2, 1, 1.0),
            (1, 2, 1.0),
            (2, 2, 2.0),
        ] {
            values[pattern.position(r, c).unwrap()] = v;
        }
        for dense in [true, false] {
            let mut solver = LinearSolver::new(pattern.clone(), Some(dense));
            solver.factor(&values).unwrap();
            let mut x = vec![1.0, 2.0, 3.0];
            solver.solve(&mut x).unwrap();
            let mut back = vec![0.0; 3];
            pattern.multiply(&values, &x, &mut back);
            for (got, want) in back.iter().zip([1.0, 2.0, 3.0]) {
                assert!((got - want).abs() < 1e-12);
            }
        }
    }
}
