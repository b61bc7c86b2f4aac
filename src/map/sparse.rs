//! Sparse symmetric positive definite solves for the mapper (Newton steps
//! and the layout's normal equations), on faer's sparse Cholesky.
//!
//! In: the lower triangle of a symmetric matrix as triplets. Out: the
//! solution of `A x = b`. What stays true: the symbolic analysis (fill-
//! reducing ordering, elimination tree) is reused while the sparsity
//! pattern is unchanged, and the factorisation runs sequentially, so the
//! result is bit-identical whatever the thread count. Cholesky
//! factorisation of the cotangent Laplacian is the linear algebra of the
//! Newton method in Springborn, Schröder, Pinkall, "Conformal equivalence
//! of triangle meshes", ACM Trans. Graph. 27(3) (2008) 77.

use crate::error::{Error, Result};
use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::cholesky::llt::factor::LltRegularization;
use faer::perm::PermRef;
use faer::sparse::linalg::cholesky::{
    factorize_symbolic_cholesky, LltRef, SymbolicCholesky, SymmetricOrdering,
};
use faer::sparse::{SparseColMatRef, SymbolicSparseColMatRef};
use faer::traits::ComplexField;
use faer::{c64, Conj, MatMut, Par, Side};
use std::ops::AddAssign;

/// Scalars of the solver: `f64` (Newton matrices) and `c64` (the layout's
/// Hermitian normal equations).
pub trait Scalar: ComplexField + Copy + AddAssign + Default {}
impl Scalar for f64 {}
impl Scalar for c64 {}

/// A reusable sparse Cholesky solver for symmetric (Hermitian) positive
/// definite matrices.
pub struct SparseSpd<T: Scalar = f64> {
    col_ptr: Vec<usize>,
    row_idx: Vec<usize>,
    values: Vec<T>,
    symbolic: Option<SymbolicCholesky<usize>>,
    factor: Vec<T>,
    /// Number of symbolic analyses performed (for the report).
    pub n_symbolic: usize,
    /// Number of numeric factorisations performed.
    pub n_numeric: usize,
    /// Seconds spent in assembly, symbolic analysis, numeric factorisation
    /// and solves.
    pub time_assemble: f64,
    pub time_symbolic: f64,
    pub time_numeric: f64,
    pub time_solve: f64,
    scratch: Vec<(u64, T)>,
    /// The fill-reducing ordering of the last analysis (forward, inverse),
    /// reused when the pattern changes but the size does not: flips change
    /// a few entries, and the ordering stays good.
    ordering: Option<(Vec<usize>, Vec<usize>)>,
    /// Nonzeros of the factor per nonzero of the matrix with a fresh ordering.
    fill_ratio: f64,
}

impl<T: Scalar> Default for SparseSpd<T> {
    fn default() -> Self {
        SparseSpd {
            col_ptr: Vec::new(),
            row_idx: Vec::new(),
            values: Vec::new(),
            symbolic: None,
            factor: Vec::new(),
            n_symbolic: 0,
            n_numeric: 0,
            time_assemble: 0.0,
            time_symbolic: 0.0,
            time_numeric: 0.0,
            time_solve: 0.0,
            scratch: Vec::new(),
            ordering: None,
            fill_ratio: 0.0,
        }
    }
}

impl<T: Scalar> std::fmt::Debug for SparseSpd<T> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SparseSpd")
            .field("n", &self.col_ptr.len().saturating_sub(1))
            .field("nnz", &self.row_idx.len())
            .finish()
    }
}

impl<T: Scalar> SparseSpd<T> {
    /// Assemble the lower triangle from triplets `(row, col, value)` with
    /// `row >= col` (duplicates are summed; for a Hermitian matrix the
    /// entries must be those of the lower triangle), factorise, and keep the
    /// factor. `entries` is consumed as scratch.
    pub fn factorize(&mut self, n: usize, entries: &mut Vec<(u32, u32, T)>) -> Result<()> {
        let t0 = std::time::Instant::now();
        // Sort by (col, row) through a packed key; sums are formed in a fixed
        // order, so the result does not depend on anything but the input.
        self.scratch.clear();
        if let Some(&(r, c, _)) = entries.iter().find(|e| e.0 < e.1) {
            return Err(Error::Algorithm {
                stage: "map: sparse assembly",
                message: format!("entry ({r}, {c}) above the diagonal"),
            });
        }
        self.scratch.extend(
            entries
                .iter()
                .map(|&(r, c, v)| (((c as u64) << 32) | r as u64, v)),
        );
        self.scratch.sort_unstable_by_key(|x| x.0);
        let mut col_ptr = Vec::with_capacity(n + 1);
        let mut row_idx = Vec::with_capacity(self.scratch.len());
        let mut values = Vec::with_capacity(self.scratch.len());
        col_ptr.push(0usize);
        let mut col = 0usize;
        let mut last = u64::MAX;
        for &(k, v) in &self.scratch {
            let c = (k >> 32) as usize;
            let r = (k & 0xffff_ffff) as usize;
            if c >= n || r >= n {
                return Err(Error::Algorithm {
                    stage: "map: sparse assembly",
                    message: format!("entry ({r}, {c}) outside a {n} x {n} matrix"),
                });
            }
            while col < c {
                col_ptr.push(row_idx.len());
                col += 1;
            }
            if k == last {
                if let Some(x) = values.last_mut() {
                    *x += v;
                }
            } else {
                row_idx.push(r);
                values.push(v);
                last = k;
            }
        }
        while col < n {
            col_ptr.push(row_idx.len());
            col += 1;
        }
        entries.clear();
        let same = self.symbolic.is_some() && col_ptr == self.col_ptr && row_idx == self.row_idx;
        self.col_ptr = col_ptr;
        self.row_idx = row_idx;
        self.values = values;
        let pattern =
            SymbolicSparseColMatRef::new_checked(n, n, &self.col_ptr, None, &self.row_idx);
        self.time_assemble += t0.elapsed().as_secs_f64();
        let t0 = std::time::Instant::now();
        if !same {
            let analyse = |ordering: SymmetricOrdering<'_, usize>| {
                factorize_symbolic_cholesky(pattern, Side::Lower, ordering, Default::default())
                    .map_err(|e| Error::Algorithm {
                        stage: "map: sparse Cholesky (symbolic)",
                        message: format!("{e:?}"),
                    })
            };
            // Reuse the last fill-reducing ordering while the fill it gives
            // stays within 25% of what a fresh ordering gave (scaled by the
            // matrix size); flips can change the graph a lot, and a stale
            // ordering then costs far more in the numeric factorisation.
            let mut sym = None;
            if let Some((fwd, inv)) = self.ordering.as_ref().filter(|(f, _)| f.len() == n) {
                let cand = analyse(SymmetricOrdering::Custom(PermRef::new_checked(fwd, inv, n)))?;
                let budget = 1.25 * self.fill_ratio * self.row_idx.len() as f64;
                if (cand.len_val() as f64) <= budget {
                    sym = Some(cand);
                }
            }
            let sym = match sym {
                Some(s) => s,
                None => {
                    let fresh = analyse(SymmetricOrdering::Amd)?;
                    self.ordering = fresh.perm().map(|p| {
                        let (f, i) = p.arrays();
                        (f.to_vec(), i.to_vec())
                    });
                    self.fill_ratio = fresh.len_val() as f64 / self.row_idx.len().max(1) as f64;
                    fresh
                }
            };
            self.factor.clear();
            self.factor.resize(sym.len_val(), T::default());
            self.symbolic = Some(sym);
            self.n_symbolic += 1;
        }
        self.time_symbolic += t0.elapsed().as_secs_f64();
        let t0 = std::time::Instant::now();
        let Some(sym) = self.symbolic.as_ref() else {
            return Err(Error::Algorithm {
                stage: "map: sparse Cholesky",
                message: "no symbolic factorisation".into(),
            });
        };
        let mat = SparseColMatRef::new(pattern, &self.values);
        let par = Par::Seq;
        let req = sym.factorize_numeric_llt_scratch::<T>(par, Default::default());
        let mut mem = MemBuffer::try_new(req).map_err(|_| Error::Algorithm {
            stage: "map: sparse Cholesky",
            message: "out of memory".into(),
        })?;
        sym.factorize_numeric_llt::<T>(
            &mut self.factor,
            mat,
            Side::Lower,
            LltRegularization::default(),
            par,
            MemStack::new(&mut mem),
            Default::default(),
        )
        .map_err(|e| Error::Algorithm {
            stage: "map: sparse Cholesky",
            message: format!("matrix not positive definite: {e:?}"),
        })?;
        self.n_numeric += 1;
        self.time_numeric += t0.elapsed().as_secs_f64();
        Ok(())
    }

    /// Solve `A x = b` in place with the last factorisation.
    pub fn solve(&mut self, b: &mut [T]) -> Result<()> {
        let t0 = std::time::Instant::now();
        let r = self.solve_inner(b);
        self.time_solve += t0.elapsed().as_secs_f64();
        r
    }

    fn solve_inner(&self, b: &mut [T]) -> Result<()> {
        let Some(sym) = self.symbolic.as_ref() else {
            return Err(Error::Algorithm {
                stage: "map: sparse solve",
                message: "no factorisation".into(),
            });
        };
        if b.len() != sym.nrows() {
            return Err(Error::Algorithm {
                stage: "map: sparse solve",
                message: format!(
                    "right-hand side of length {} for {} unknowns",
                    b.len(),
                    sym.nrows()
                ),
            });
        }
        let par = Par::Seq;
        let llt = LltRef::<usize, T>::new(sym, &self.factor);
        let req = sym.solve_in_place_scratch::<T>(1, par);
        let mut mem = MemBuffer::try_new(req).map_err(|_| Error::Algorithm {
            stage: "map: sparse solve",
            message: "out of memory".into(),
        })?;
        let n = b.len();
        let rhs = MatMut::from_column_major_slice_mut(b, n, 1);
        llt.solve_in_place_with_conj(Conj::No, rhs, par, MemStack::new(&mut mem));
        Ok(())
    }
}

impl SparseSpd<f64> {
    /// `y = A x` with the assembled matrix (lower triangle stored).
    pub fn mul(&self, x: &[f64], y: &mut [f64]) {
        y.iter_mut().for_each(|v| *v = 0.0);
        let n = self.col_ptr.len().saturating_sub(1);
        for c in 0..n.min(x.len()).min(y.len()) {
            for k in self.col_ptr[c]..self.col_ptr[c + 1] {
                let r = self.row_idx[k];
                let v = self.values[k];
                if r < y.len() {
                    y[r] += v * x[c];
                    if r != c {
                        y[c] += v * x[r];
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_a_path_laplacian() {
        // Tridiagonal (2, -1) matrix of size 50: A x = b with x known.
        let n = 50;
        let x: Vec<f64> = (0..n).map(|i| (i as f64 * 0.37).sin()).collect();
        let mut entries = Vec::new();
        for i in 0..n as u32 {
            entries.push((i, i, 2.0));
            if i > 0 {
                entries.push((i, i - 1, -1.0));
            }
        }
        let mut s = SparseSpd::default();
        s.factorize(n, &mut entries.clone()).unwrap();
        let mut b = vec![0.0; n];
        s.mul(&x, &mut b);
        s.solve(&mut b).unwrap();
        for i in 0..n {
            assert!((b[i] - x[i]).abs() < 1e-12);
        }
        // Same pattern: the symbolic analysis is reused.
        s.factorize(n, &mut entries).unwrap();
        assert_eq!(s.n_symbolic, 1);
        assert_eq!(s.n_numeric, 2);
    }
}
