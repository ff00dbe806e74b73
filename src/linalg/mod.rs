//! Sparse matrix structure and the LU solves the implicit integrator needs.
//!
//! Matrices are stored column-compressed (CSC) from the start; small systems are factored
//! densely, larger ones by a multifrontal LU on a fill-reducing order fixed once per pattern
//! ([`frontal`]), with faer's sparse LU with partial pivoting as the fallback when a pivot of
//! that order proves unstable.

mod dense;
mod frontal;

use dense::DenseLu;
use frontal::FrontalLu;

use faer::dyn_stack::{MemBuffer, MemStack};
use faer::sparse::linalg::lu::{factorize_symbolic_lu, LuRef, NumericLu, SymbolicLu};
use faer::sparse::{SparseColMatRef, SymbolicSparseColMatRef};
use faer::{Conj, Par};

/// Above this many unknowns the sparse LU is used (below it, dense LU is faster).
pub const DENSE_LIMIT: usize = 60;

/// Factors of more entries than this (8 MB in double precision, more than a core's share of
/// the last-level cache on common machines) are kept in single precision by
/// [`LinearSolver::for_newton`]; below it the solve is not bound by memory traffic and gains
/// nothing.
pub const SINGLE_ABOVE: usize = 1 << 20;

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
    /// Multifrontal LU on an order fixed once for the pattern; replaced by `Pivoting` for good
    /// when one of its pivots proves unstable.
    Frontal(Box<FrontalLu>),
    /// faer's sparse LU with partial pivoting, its numeric storage and workspaces kept between
    /// factorisations so that a step allocates nothing.
    Pivoting(Box<SparseLu>),
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
        LinearSolver::build(pattern, force_dense, None, 1)
    }

    /// For the solves of a modified Newton iteration, whose residuals are computed in double
    /// precision: sparse factors of more than [`SINGLE_ABOVE`] entries are kept in single
    /// precision, which halves the time of each (memory-bound) solve and the factors' memory.
    /// Large factorisations, and the solves with large factors, are shared among `threads`.
    pub fn for_newton(pattern: Pattern, force_dense: Option<bool>, threads: usize) -> LinearSolver {
        LinearSolver::build(pattern, force_dense, Some(SINGLE_ABOVE), threads)
    }

    fn build(
        pattern: Pattern,
        force_dense: Option<bool>,
        single_above: Option<usize>,
        threads: usize,
    ) -> LinearSolver {
        let dense = force_dense.unwrap_or(pattern.n <= DENSE_LIMIT);
        let kind = if dense {
            Kind::Dense(DenseLu::new(pattern.n))
        } else {
            match FrontalLu::new(&pattern, single_above, threads) {
                Some(lu) => Kind::Frontal(Box::new(lu)),
                None => pivoting(&pattern),
            }
        };
        LinearSolver { pattern, kind }
    }

    /// Entries of the factors: n² when dense, L and U's when sparse (the pivoting fallback's
    /// fill is not known ahead, so its matrix's count stands in).
    pub fn factor_entries(&self) -> usize {
        match &self.kind {
            Kind::Dense(_) => self.pattern.n * self.pattern.n,
            Kind::Frontal(lu) => lu.entries(),
            Kind::Pivoting(_) => self.pattern.nnz(),
        }
    }

    pub fn is_sparse(&self) -> bool {
        !matches!(self.kind, Kind::Dense(_))
    }

    /// Factors the matrix whose values (on the pattern) are given.
    pub fn factor(&mut self, values: &[f64]) -> Result<(), Singular> {
        if let Kind::Frontal(lu) = &mut self.kind {
            if lu.factor(values).is_ok() {
                return Ok(());
            }
            self.kind = pivoting(&self.pattern);
        }
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
            Kind::Pivoting(lu) => {
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
            Kind::Frontal(_) => {
                unreachable!("an unstable fixed-order LU was replaced above")
            }
        }
        Ok(())
    }

    /// Solves A x = b in place with the last factorisation; non-finite results count as singular.
    pub fn solve(&mut self, b: &mut [f64]) -> Result<(), Singular> {
        match &mut self.kind {
            Kind::Dense(lu) if lu.factored => lu.solve(b),
            Kind::Frontal(lu) => {
                if !lu.solve(b) {
                    return Err(Singular);
                }
            }
            Kind::Pivoting(lu) if lu.factored => {
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

/// faer's sparse LU with partial pivoting for `pattern`, or the dense LU if its symbolic
/// analysis fails.
fn pivoting(pattern: &Pattern) -> Kind {
    let symbolic_matrix =
        SymbolicSparseColMatRef::new_checked(pattern.n, pattern.n, &pattern.col_ptr, None, &pattern.row_idx);
    match factorize_symbolic_lu(symbolic_matrix, Default::default()) {
        Ok(symbolic) => {
            // Kinetic networks give many modest factorisations: thread hand-offs cost more
            // than they save there (2.6 s against 5.7 s on a 1000-species network).
            let factor_work =
                MemBuffer::new(symbolic.factorize_numeric_lu_scratch::<f64>(Par::Seq, Default::default()));
            let solve_work = MemBuffer::new(symbolic.solve_in_place_scratch::<f64>(1, Par::Seq));
            Kind::Pivoting(Box::new(SparseLu {
                symbolic,
                numeric: NumericLu::new(),
                factor_work,
                solve_work,
                factored: false,
            }))
        }
        Err(_) => Kind::Dense(DenseLu::new(pattern.n)),
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

    /// A random sparse matrix: a ring plus random chords (both ways when `symmetric`), values
    /// in [-1, 1), and `diagonal` on the diagonal (SplitMix64 stream, so the case is fixed).
    fn random_system(n: usize, diagonal: f64, symmetric: bool) -> (Pattern, Vec<f64>) {
        let mut state = 7_u64;
        let mut next = move || {
            state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = state;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut entries: Vec<(usize, usize)> = (0..n).map(|i| (i, i)).collect();
        for i in 0..n {
            let chord = (next() * n as f64) as usize;
            for j in [(i + 1) % n, chord] {
                entries.push((i, j));
                if symmetric {
                    entries.push((j, i));
                }
            }
        }
        let pattern = Pattern::from_entries(n, entries);
        let mut values = vec![0.0; pattern.nnz()];
        for col in 0..n {
            let range = pattern.col_ptr[col]..pattern.col_ptr[col + 1];
            for (value, &row) in values[range.clone()].iter_mut().zip(&pattern.row_idx[range]) {
                *value = if row == col { diagonal } else { 2.0 * next() - 1.0 };
            }
        }
        (pattern, values)
    }

    /// Largest |A x - b| relative to the largest |b|.
    fn residual(pattern: &Pattern, values: &[f64], x: &[f64], b: &[f64]) -> f64 {
        let mut back = vec![0.0; b.len()];
        pattern.multiply(values, x, &mut back);
        let scale = b.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        back.iter().zip(b).fold(0.0_f64, |m, (y, v)| m.max((y - v).abs())) / scale
    }

    #[test]
    fn the_multifrontal_lu_solves_what_the_dense_lu_solves() {
        // Diagonal 6 against at most 4 off-diagonal entries of size < 1 per column: diagonally
        // dominant, condition number below 10, so both residuals sit near rounding (1e-15);
        // 1e-12 leaves room for the growth of a few hundred operations per entry.
        for (n, symmetric) in [(200, true), (200, false), (1500, true)] {
            let (pattern, values) = random_system(n, 6.0, symmetric);
            let b: Vec<f64> = (0..n).map(|i| (i as f64).sin()).collect();
            let mut frontal = LinearSolver::new(pattern.clone(), Some(false));
            assert!(
                matches!(frontal.kind, Kind::Frontal(_)),
                "a sparse system takes the fixed order"
            );
            if let Kind::Frontal(lu) = &frontal.kind {
                if n == 1500 {
                    assert!(
                        lu.widest() > frontal::BLOCK,
                        "the blocked pivot factorisation is exercised"
                    );
                }
            }
            let mut dense = LinearSolver::new(pattern.clone(), Some(true));
            for solver in [&mut frontal, &mut dense] {
                solver.factor(&values).unwrap();
                let mut x = b.clone();
                solver.solve(&mut x).unwrap();
                assert!(
                    residual(&pattern, &values, &x, &b) < 1e-12,
                    "n {n}, symmetric {symmetric}"
                );
            }
            assert!(
                matches!(frontal.kind, Kind::Frontal(_)),
                "no pivot failed on a dominant diagonal"
            );
        }
    }

    #[test]
    fn shared_between_threads_the_factors_and_solves_are_the_same() {
        // The factorisation shared between two threads does the same arithmetic on every
        // supernode as one thread, so its factors are identical; a shared solve merges the
        // parts' changes to the rows above them in another order, so the answers agree to
        // rounding (1e-13 against values of order 0.1-1; condition number below 10 as above).
        let n = 6000;
        let (pattern, values) = random_system(n, 6.0, true);
        let b: Vec<f64> = (0..n).map(|i| (i as f64).sin()).collect();
        let mut answers = Vec::new();
        for threads in [1, 2] {
            let mut solver = LinearSolver::build(pattern.clone(), Some(false), None, threads);
            let Kind::Frontal(lu) = &solver.kind else {
                panic!("a sparse system takes the fixed order");
            };
            assert_eq!(lu.parts(), if threads == 1 { 0 } else { 2 }, "the tree is shared");
            solver.factor(&values).unwrap();
            let mut x = b.clone();
            solver.solve(&mut x).unwrap();
            assert!(residual(&pattern, &values, &x, &b) < 1e-12);
            answers.push(x);
        }
        let worst = answers[0]
            .iter()
            .zip(&answers[1])
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(worst < 1e-13, "one thread and two differ by {worst:e}");
    }

    #[test]
    fn single_precision_factors_converge_under_refinement() {
        // Factors rounded to single precision solve to about 1e-7 (unit roundoff 6e-8 times the
        // condition number, below 10 here); the iteration that uses them computes residuals in
        // double precision, and each correction gains those seven digits again, so two
        // corrections reach the double-precision residual (1e-12 as above): the mixed-precision
        // refinement of Carson & Higham (2018).
        let n = 1500;
        let (pattern, values) = random_system(n, 6.0, false);
        let b: Vec<f64> = (0..n).map(|i| (i as f64).cos()).collect();
        let mut solver = LinearSolver::build(pattern.clone(), Some(false), Some(0), 1);
        solver.factor(&values).unwrap();
        let mut x = b.clone();
        solver.solve(&mut x).unwrap();
        let first = residual(&pattern, &values, &x, &b);
        assert!(first > 1e-12 && first < 1e-5, "single precision shows: {first}");
        for _ in 0..2 {
            let mut r = vec![0.0; n];
            pattern.multiply(&values, &x, &mut r);
            r.iter_mut().zip(&b).for_each(|(r, b)| *r = b - *r);
            solver.solve(&mut r).unwrap();
            x.iter_mut().zip(&r).for_each(|(x, d)| *x += d);
        }
        assert!(residual(&pattern, &values, &x, &b) < 1e-12);
    }

    #[test]
    fn a_zero_pivot_hands_over_to_the_pivoting_lu() {
        // A zero diagonal gives the fixed order a zero first pivot; the pivoting LU must take
        // over and still solve (the matrix is a permuted, well-conditioned one).
        let (pattern, values) = random_system(200, 0.0, true);
        let b: Vec<f64> = (0..200).map(|i| 1.0 + i as f64).collect();
        let mut solver = LinearSolver::new(pattern.clone(), Some(false));
        match solver.factor(&values) {
            Ok(()) => {
                assert!(
                    matches!(solver.kind, Kind::Pivoting(_)),
                    "the fixed order gave up"
                );
                let mut x = b.clone();
                solver.solve(&mut x).unwrap();
                assert!(residual(&pattern, &values, &x, &b) < 1e-8);
            }
            Err(Singular) => panic!("a random matrix with a zero diagonal is not singular"),
        }
    }
}
