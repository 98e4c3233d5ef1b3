//! Hessian models for the SQP's QP subproblems: a structure-preserving damped BFGS
//! approximation (one dense block per variable block) and a convexifying diagonal shift of an
//! exact Lagrangian Hessian, chosen by testing positive definiteness with a sparse LDL'
//! factorisation.
//!
//! Owns [`BlockBfgs`] and [`convexify`]. Must not evaluate anything: it receives steps,
//! gradient differences and Hessian values from the SQP.

use std::ops::Range;

use clarabel::algebra::CscMatrix;
use clarabel::qdldl::{QDLDLFactorisation, QDLDLSettings};
use nalgebra::{DMatrix, DVector};

use crate::qp_legacy::Triplets;

/// Result of one BFGS update, for the iteration log.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct BfgsUpdate {
    /// Blocks whose update was damped (curvature condition enforced by Powell's rule).
    pub damped: u32,
    /// Blocks left unchanged because the step had no component in them.
    pub skipped: u32,
}

/// Block-diagonal damped BFGS: each block keeps its own dense approximation, so the sparsity
/// of the QP Hessian is fixed and coupling between blocks is never introduced.
///
/// Damping: M. J. D. Powell, "A fast algorithm for nonlinearly constrained optimization
/// calculations", 1978; as stated in J. Nocedal, S. J. Wright, "Numerical Optimization",
/// 2nd ed., 2006, Procedure 18.2. Each block starts as the identity and is rescaled on its
/// first update to the curvature `s'y / s's` measured along the step.
#[derive(Clone, Debug)]
pub struct BlockBfgs {
    blocks: Vec<Range<usize>>,
    matrices: Vec<DMatrix<f64>>,
    scaled: Vec<bool>,
}

impl BlockBfgs {
    /// Blocks must be disjoint ranges inside `0..n` (checked by the SQP); indices in no block
    /// are gathered into one extra block; no blocks means one dense block.
    pub fn new(n: usize, blocks: &[Range<usize>]) -> Self {
        let mut covered = vec![false; n];
        let mut all: Vec<Range<usize>> = Vec::new();
        for b in blocks.iter().filter(|b| !b.is_empty()) {
            covered[b.clone()].iter_mut().for_each(|c| *c = true);
            all.push(b.clone());
        }
        // Remaining indices form one block, stored as maximal runs of a single "gather" list.
        let rest: Vec<usize> = (0..n).filter(|&j| !covered[j]).collect();
        let mut bfgs = BlockBfgs { blocks: all, matrices: Vec::new(), scaled: Vec::new() };
        if !rest.is_empty() {
            if rest.len() == rest[rest.len() - 1] - rest[0] + 1 {
                bfgs.blocks.push(rest[0]..rest[rest.len() - 1] + 1);
            } else {
                // Non-contiguous leftovers: keep them as separate singletons. A dense block
                // over scattered indices would couple unrelated variables for no benefit.
                bfgs.blocks.extend(rest.iter().map(|&j| j..j + 1));
            }
        }
        bfgs.reset();
        bfgs
    }

    pub fn blocks(&self) -> &[Range<usize>] {
        &self.blocks
    }

    /// Back to the identity.
    pub fn reset(&mut self) {
        self.matrices = self.blocks.iter().map(|b| DMatrix::identity(b.len(), b.len())).collect();
        self.scaled = vec![false; self.blocks.len()];
    }

    /// Update with step `s` and Lagrangian-gradient difference `y`; `damping` in (0, 1) is the
    /// fraction of `s'Bs` that `s'r` must reach.
    pub fn update(&mut self, s: &[f64], y: &[f64], damping: f64) -> BfgsUpdate {
        let mut info = BfgsUpdate::default();
        for (k, range) in self.blocks.iter().enumerate() {
            let sb = DVector::from_column_slice(&s[range.clone()]);
            let yb = DVector::from_column_slice(&y[range.clone()]);
            let snorm = sb.amax();
            if snorm == 0.0 || !snorm.is_finite() || !yb.iter().all(|v| v.is_finite()) {
                info.skipped += 1;
                continue;
            }
            let b = &mut self.matrices[k];
            if !self.scaled[k] {
                // Start the block at the curvature measured along the first step. The textbook
                // choice y'y / s'y (Nocedal & Wright, eq. (6.20)) explodes when y is nearly
                // orthogonal to s, as in blocks with indefinite Lagrangian Hessians, and
                // Powell damping then only shrinks such a block by a factor of 5 per step
                // along s, stalling the iteration in the other directions.
                let sy = sb.dot(&yb);
                let ss = sb.dot(&sb);
                if sy > 0.0 {
                    let gamma = (sy / ss).clamp(1e-4, 1e4);
                    *b = DMatrix::identity(range.len(), range.len()) * gamma;
                }
                self.scaled[k] = true;
            }
            let bs = &*b * &sb;
            let sbs = sb.dot(&bs);
            if sbs <= f64::MIN_POSITIVE || !sbs.is_finite() {
                info.skipped += 1;
                continue;
            }
            let sy = sb.dot(&yb);
            let r = if sy >= damping * sbs {
                yb
            } else {
                info.damped += 1;
                let theta = (1.0 - damping) * sbs / (sbs - sy);
                &yb * theta + &bs * (1.0 - theta)
            };
            let sr = sb.dot(&r);
            if sr <= f64::MIN_POSITIVE {
                info.skipped += 1;
                continue;
            }
            *b -= &bs * bs.transpose() / sbs;
            *b += &r * r.transpose() / sr;
            // Keep exact symmetry against rounding drift.
            let sym = (&*b + b.transpose()) * 0.5;
            *b = sym;
        }
        info
    }

    /// Append the upper triangle of the block-diagonal matrix.
    pub fn push_upper(&self, out: &mut Triplets) {
        for (range, b) in self.blocks.iter().zip(&self.matrices) {
            for c in 0..range.len() {
                for r in 0..=c {
                    out.push(range.start + r, range.start + c, b[(r, c)]);
                }
            }
        }
    }
}

/// Outcome of [`convexify`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Convexified {
    /// Diagonal shift added (0 when the Hessian was already positive definite).
    pub shift: f64,
    /// Whether positive definiteness was reached within `max_shift`.
    pub ok: bool,
}

/// Add `shift * I` to the symmetric matrix `upper` (upper triangle, `n x n`) with the smallest
/// `shift` from the sequence `0, start, start * growth, ...` that makes it positive definite,
/// judged by the signs of `D` in a sparse `LDL'` factorisation without pivot regularisation.
/// The shift is added to `upper` in place (diagonal entries are appended).
pub fn convexify(
    upper: &mut Triplets,
    start: f64,
    growth: f64,
    max_shift: f64,
    try_zero: bool,
) -> Convexified {
    let n = upper.nrows;
    let mut rows = upper.rows.clone();
    let mut cols = upper.cols.clone();
    let mut vals = upper.values.clone();
    // Every diagonal entry present, so the factorisation never meets an empty column.
    let diag_start = rows.len();
    rows.extend(0..n);
    cols.extend(0..n);
    vals.extend(std::iter::repeat_n(0.0, n));
    let scale = upper.values.iter().fold(1.0_f64, |a, v| a.max(v.abs()));

    let mut shift = if try_zero { 0.0 } else { start };
    loop {
        for v in &mut vals[diag_start..] {
            *v = shift;
        }
        let m = CscMatrix::new_from_triplets(n, n, rows.clone(), cols.clone(), vals.clone());
        let settings =
            QDLDLSettings::<f64> { regularize_enable: false, ..QDLDLSettings::default() };
        let pd = match QDLDLFactorisation::new(&m, Some(settings)) {
            Ok(f) => f.D.iter().all(|&d| d.is_finite() && d > 1e-12 * scale),
            Err(_) => false,
        };
        if pd {
            if shift > 0.0 {
                for j in 0..n {
                    upper.push(j, j, shift);
                }
            }
            return Convexified { shift, ok: true };
        }
        if shift >= max_shift {
            return Convexified { shift, ok: false };
        }
        shift = if shift == 0.0 { start } else { (shift * growth).min(max_shift) };
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dense(bfgs: &BlockBfgs, n: usize) -> DMatrix<f64> {
        let mut t = Triplets::new(n, n);
        bfgs.push_upper(&mut t);
        let mut m = DMatrix::zeros(n, n);
        for k in 0..t.nnz() {
            m[(t.rows[k], t.cols[k])] += t.values[k];
            if t.rows[k] != t.cols[k] {
                m[(t.cols[k], t.rows[k])] += t.values[k];
            }
        }
        m
    }

    #[test]
    fn secant_condition_holds_per_block_and_blocks_stay_uncoupled() {
        let mut bfgs = BlockBfgs::new(4, std::slice::from_ref(&(0..2)));
        assert_eq!(bfgs.blocks(), &[0..2, 2..4]);
        let s = [1.0, 0.5, -0.3, 0.2];
        let y = [2.0, 0.7, -0.9, 0.4];
        let info = bfgs.update(&s, &y, 0.2);
        assert_eq!(info, BfgsUpdate::default());
        let b = dense(&bfgs, 4);
        // Secant condition B s = y holds exactly for an undamped update (Nocedal & Wright,
        // eq. (6.6)); 1e-12 covers rounding.
        let bs = &b * DVector::from_column_slice(&s);
        for i in 0..4 {
            assert!((bs[i] - y[i]).abs() < 1e-12, "{bs}");
        }
        assert_eq!(b[(0, 2)], 0.0);
        assert!(b.clone().cholesky().is_some());
    }

    #[test]
    fn negative_curvature_is_damped_and_stays_positive_definite() {
        let mut bfgs = BlockBfgs::new(2, &[]);
        bfgs.update(&[1.0, 0.0], &[1.0, 0.0], 0.2);
        let info = bfgs.update(&[0.0, 1.0], &[0.0, -3.0], 0.2);
        assert_eq!(info.damped, 1);
        assert!(dense(&bfgs, 2).cholesky().is_some());
    }

    #[test]
    fn convexify_finds_a_shift_for_an_indefinite_matrix() {
        // [[1, 2], [2, 1]] has eigenvalues 3 and -1, so the shift must exceed 1.
        let mut t = Triplets::new(2, 2);
        t.push(0, 0, 1.0);
        t.push(0, 1, 2.0);
        t.push(1, 1, 1.0);
        let c = convexify(&mut t, 1e-4, 10.0, 1e8, true);
        assert!(c.ok && c.shift > 1.0 && c.shift <= 10.0, "{c:?}");
        let mut pd = Triplets::new(2, 2);
        pd.push(0, 0, 2.0);
        pd.push(1, 1, 3.0);
        let c = convexify(&mut pd, 1e-4, 10.0, 1e8, true);
        assert_eq!(c, Convexified { shift: 0.0, ok: true });
    }
}
