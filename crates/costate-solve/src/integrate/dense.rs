//! A small dense LU factorisation with partial pivoting, in place on preallocated row-major
//! storage, for the Radau IIA stage systems (size `3 nx`).
//!
//! Owns nothing but its buffers. It exists (rather than calling `nalgebra::LU`) so the hot loop
//! neither allocates nor panics: a zero or non-finite pivot is reported as [`Singular`].

/// The matrix had a zero or non-finite pivot.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Singular;

#[derive(Clone, Debug)]
pub(crate) struct DenseLu {
    n: usize,
    /// Row-major `n x n`; after [`DenseLu::factor`] holds `L` (unit diagonal, below) and `U`.
    a: Vec<f64>,
    /// Row `i` of the factorised matrix is row `perm[i]` of the original.
    perm: Vec<usize>,
}

impl DenseLu {
    pub(crate) fn new(n: usize) -> Self {
        DenseLu { n, a: vec![0.0; n * n], perm: (0..n).collect() }
    }

    /// The matrix to be factorised, row-major; fill it, then call [`DenseLu::factor`].
    pub(crate) fn matrix_mut(&mut self) -> &mut [f64] {
        &mut self.a
    }

    pub(crate) fn factor(&mut self) -> Result<(), Singular> {
        let n = self.n;
        for (i, p) in self.perm.iter_mut().enumerate() {
            *p = i;
        }
        for k in 0..n {
            let mut piv = k;
            let mut best = self.a[k * n + k].abs();
            for r in (k + 1)..n {
                let v = self.a[r * n + k].abs();
                // `!(best >= v)` also moves a NaN pivot candidate out of the way.
                if v > best || best.is_nan() {
                    best = v;
                    piv = r;
                }
            }
            if best == 0.0 || !best.is_finite() {
                return Err(Singular);
            }
            if piv != k {
                for c in 0..n {
                    self.a.swap(k * n + c, piv * n + c);
                }
                self.perm.swap(k, piv);
            }
            let pivot = self.a[k * n + k];
            for r in (k + 1)..n {
                let m = self.a[r * n + k] / pivot;
                self.a[r * n + k] = m;
                if m != 0.0 {
                    for c in (k + 1)..n {
                        self.a[r * n + c] -= m * self.a[k * n + c];
                    }
                }
            }
        }
        Ok(())
    }

    /// Solve `A X = B` in place for `ncols` right-hand sides stored row-major (`n x ncols`) in
    /// `b`; `scratch` must hold `n * ncols` values.
    pub(crate) fn solve(&self, b: &mut [f64], ncols: usize, scratch: &mut [f64]) {
        let n = self.n;
        debug_assert_eq!(b.len(), n * ncols);
        let y = &mut scratch[..n * ncols];
        for i in 0..n {
            let src = self.perm[i];
            y[i * ncols..(i + 1) * ncols].copy_from_slice(&b[src * ncols..(src + 1) * ncols]);
        }
        // Forward substitution with the unit lower triangle.
        for i in 0..n {
            for k in 0..i {
                let m = self.a[i * n + k];
                if m != 0.0 {
                    let (head, tail) = y.split_at_mut(i * ncols);
                    let row_k = &head[k * ncols..(k + 1) * ncols];
                    for (yi, yk) in tail[..ncols].iter_mut().zip(row_k) {
                        *yi -= m * yk;
                    }
                }
            }
        }
        // Back substitution with the upper triangle.
        for i in (0..n).rev() {
            for k in (i + 1)..n {
                let m = self.a[i * n + k];
                if m != 0.0 {
                    let (head, tail) = y.split_at_mut(k * ncols);
                    let row_i = &mut head[i * ncols..(i + 1) * ncols];
                    for (yi, yk) in row_i.iter_mut().zip(&tail[..ncols]) {
                        *yi -= m * yk;
                    }
                }
            }
            let d = self.a[i * n + i];
            for v in &mut y[i * ncols..(i + 1) * ncols] {
                *v /= d;
            }
        }
        b.copy_from_slice(y);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Solves a permuted 3x3 system whose solution is known (independent computation: the
    /// right-hand side is built as `A * x` for a chosen `x`).
    #[test]
    fn solves_a_system_that_needs_pivoting() {
        let a = [0.0, 2.0, 1.0, 1.0, 1.0, 0.0, 3.0, 0.0, 4.0];
        let x = [1.0, -2.0, 0.5, 3.0, 0.25, -1.0];
        let mut b = [0.0; 6];
        for i in 0..3 {
            for c in 0..2 {
                b[i * 2 + c] = (0..3).map(|k| a[i * 3 + k] * x[k * 2 + c]).sum();
            }
        }
        let mut lu = DenseLu::new(3);
        lu.matrix_mut().copy_from_slice(&a);
        lu.factor().unwrap();
        let mut scratch = [0.0; 6];
        lu.solve(&mut b, 2, &mut scratch);
        for (got, want) in b.iter().zip(&x) {
            assert!((got - want).abs() < 1e-14, "{got} vs {want}");
        }
    }

    #[test]
    fn reports_a_singular_matrix() {
        let mut lu = DenseLu::new(2);
        lu.matrix_mut().copy_from_slice(&[1.0, 2.0, 2.0, 4.0]);
        assert_eq!(lu.factor(), Err(Singular));
        lu.matrix_mut().copy_from_slice(&[f64::NAN, 0.0, 0.0, 1.0]);
        assert_eq!(lu.factor(), Err(Singular));
    }
}
