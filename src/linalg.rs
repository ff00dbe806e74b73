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
    Dense(Option<Box<nalgebra::LU<f64, nalgebra::Dyn, nalgebra::Dyn>>>),
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
            Kind::Dense(None)
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
                Err(_) => Kind::Dense(None),
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
            Kind::Dense(slot) => {
                let mut m = nalgebra::DMatrix::<f64>::zeros(p.n, p.n);
                for col in 0..p.n {
                    for k in p.col_ptr[col]..p.col_ptr[col + 1] {
                        m[(p.row_idx[k], col)] = values[k];
                    }
                }
                let lu = m.lu();
                if !lu.is_invertible() {
                    *slot = None;
                    return Err(Singular);
                }
                *slot = Some(Box::new(lu));
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
            Kind::Dense(Some(lu)) => {
                let mut v = nalgebra::DVectorViewMut::from_slice(b, b.len());
                if !lu.solve_mut(&mut v) {
                    return Err(Singular);
                }
            }
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
