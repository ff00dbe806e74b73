//! Dense LU for the small systems of most networks.

use super::Singular;

/// Dense LU with partial pivoting (Golub & Van Loan, Matrix Computations, 4th ed., Alg. 3.4.1)
/// in one row-major buffer reused for every step: for the small systems of most networks this
/// is several times faster than a general-purpose LU that allocates per factorisation.
#[derive(Debug, Clone)]
pub struct DenseLu {
    n: usize,
    /// L (unit diagonal, below) and U (on and above) in place, row-major.
    pub(super) a: Vec<f64>,
    /// Row `k` of the factors is row `perm[k]` of the matrix.
    perm: Vec<usize>,
    pub(super) factored: bool,
    /// Scratch for the permuted right-hand side.
    work: Vec<f64>,
}

impl DenseLu {
    pub fn new(n: usize) -> DenseLu {
        DenseLu {
            n,
            a: vec![0.0; n * n],
            perm: (0..n).collect(),
            factored: false,
            work: vec![0.0; n],
        }
    }

    pub fn factor(&mut self) -> Result<(), Singular> {
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
    pub fn solve(&mut self, b: &mut [f64]) {
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
