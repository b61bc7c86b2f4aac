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
use faer::sparse::linalg::cholesky::{
    factorize_symbolic_cholesky, LltRef, SymbolicCholesky, SymmetricOrdering,
};
use faer::sparse::{SparseColMatRef, SymbolicSparseColMatRef};
use faer::{Conj, MatMut, Par, Side};

/// A reusable sparse Cholesky solver.
#[derive(Default)]
pub struct SparseSpd {
    col_ptr: Vec<usize>,
    row_idx: Vec<usize>,
    values: Vec<f64>,
    symbolic: Option<SymbolicCholesky<usize>>,
    factor: Vec<f64>,
    /// Number of symbolic analyses performed (for the report).
    pub n_symbolic: usize,
    /// Number of numeric factorisations performed.
    pub n_numeric: usize,
    scratch: Vec<(u64, f64)>,
}

impl std::fmt::Debug for SparseSpd {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SparseSpd")
            .field("n", &self.col_ptr.len().saturating_sub(1))
            .field("nnz", &self.row_idx.len())
            .finish()
    }
}

impl SparseSpd {
    /// Assemble the lower triangle from triplets `(row, col, value)` with
    /// `row >= col` (duplicates are summed), factorise, and keep the factor.
    /// `entries` is consumed as scratch.
    pub fn factorize(&mut self, n: usize, entries: &mut Vec<(u32, u32, f64)>) -> Result<()> {
        // Sort by (col, row) through a packed key; sums are formed in a fixed
        // order, so the result does not depend on anything but the input.
        self.scratch.clear();
        self.scratch.extend(entries.iter().map(|&(r, c, v)| {
            let (r, c) = if r >= c { (r, c) } else { (c, r) };
            (((c as u64) << 32) | r as u64, v)
        }));
        self.scratch.sort_by_key(|x| x.0);
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
        let pattern = SymbolicSparseColMatRef::new_checked(n, n, &self.col_ptr, None, &self.row_idx);
        if !same {
            let sym = factorize_symbolic_cholesky(
                pattern,
                Side::Lower,
                SymmetricOrdering::Amd,
                Default::default(),
            )
            .map_err(|e| Error::Algorithm {
                stage: "map: sparse Cholesky (symbolic)",
                message: format!("{e:?}"),
            })?;
            self.factor.clear();
            self.factor.resize(sym.len_val(), 0.0);
            self.symbolic = Some(sym);
            self.n_symbolic += 1;
        }
        let Some(sym) = self.symbolic.as_ref() else {
            return Err(Error::Algorithm {
                stage: "map: sparse Cholesky",
                message: "no symbolic factorisation".into(),
            });
        };
        let mat = SparseColMatRef::new(pattern, &self.values);
        let par = Par::Seq;
        let req = sym.factorize_numeric_llt_scratch::<f64>(par, Default::default());
        let mut mem = MemBuffer::try_new(req).map_err(|_| Error::Algorithm {
            stage: "map: sparse Cholesky",
            message: "out of memory".into(),
        })?;
        sym.factorize_numeric_llt::<f64>(
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
        Ok(())
    }

    /// Solve `A x = b` in place with the last factorisation.
    pub fn solve(&self, b: &mut [f64]) -> Result<()> {
        let Some(sym) = self.symbolic.as_ref() else {
            return Err(Error::Algorithm {
                stage: "map: sparse solve",
                message: "no factorisation".into(),
            });
        };
        if b.len() != sym.nrows() {
            return Err(Error::Algorithm {
                stage: "map: sparse solve",
                message: format!("right-hand side of length {} for {} unknowns", b.len(), sym.nrows()),
            });
        }
        let par = Par::Seq;
        let llt = LltRef::<usize, f64>::new(sym, &self.factor);
        let req = sym.solve_in_place_scratch::<f64>(1, par);
        let mut mem = MemBuffer::try_new(req).map_err(|_| Error::Algorithm {
            stage: "map: sparse solve",
            message: "out of memory".into(),
        })?;
        let n = b.len();
        let rhs = MatMut::from_column_major_slice_mut(b, n, 1);
        llt.solve_in_place_with_conj(Conj::No, rhs, par, MemStack::new(&mut mem));
        Ok(())
    }

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
