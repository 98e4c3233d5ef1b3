//! Hessian models for the SQP's QP subproblems, block by block along the stages: a damped
//! BFGS approximation per block, and the projection of an exact Lagrangian Hessian's blocks
//! onto the positive definite matrices.
//!
//! Owns [`BlockBfgs`] and [`convexify_blocks`]. Must not evaluate anything: it receives steps,
//! gradient differences and Hessian blocks from the SQP. Works in place on the dense blocks
//! of a [`StageQp`](crate::qp::StageQp) (column-major, both triangles) and allocates nothing
//! after construction.

use crate::qp::StageLayout;

/// Result of one BFGS update, for the iteration log.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct BfgsUpdate {
    /// Blocks whose update was damped (curvature condition enforced by Powell's rule).
    pub damped: u32,
    /// Blocks left unchanged because the step had no component in them.
    pub skipped: u32,
}

/// Block-diagonal damped BFGS, one dense block per stage, stored like the QP's Hessian.
///
/// Damping: M. J. D. Powell, "A fast algorithm for nonlinearly constrained optimization
/// calculations", 1978; as stated in J. Nocedal, S. J. Wright, "Numerical Optimization",
/// 2nd ed., 2006, Procedure 18.2. Each block starts as the identity and is rescaled on its
/// first update to the curvature `s'y / s's` measured along the step.
#[derive(Clone, Debug)]
pub struct BlockBfgs {
    layout: StageLayout,
    blocks: Vec<f64>,
    scaled: Vec<bool>,
    bs: Vec<f64>,
    r: Vec<f64>,
}

impl BlockBfgs {
    pub fn new(layout: &StageLayout) -> Self {
        let max = (0..layout.stages()).map(|k| layout.stage_size(k)).max().unwrap_or(0);
        let mut b = BlockBfgs {
            blocks: vec![0.0; layout.hessian_len()],
            scaled: vec![false; layout.stages()],
            layout: layout.clone(),
            bs: vec![0.0; max],
            r: vec![0.0; max],
        };
        b.reset();
        b
    }

    /// Back to the identity.
    pub fn reset(&mut self) {
        self.blocks.fill(0.0);
        for k in 0..self.layout.stages() {
            let n = self.layout.stage_size(k);
            let h = &mut self.blocks[self.layout.hessian_block(k)];
            for i in 0..n {
                h[i + i * n] = 1.0;
            }
        }
        self.scaled.fill(false);
    }

    /// The blocks, laid out like [`crate::qp::StageQp::hessian`].
    pub fn blocks(&self) -> &[f64] {
        &self.blocks
    }

    /// Update with step `s` and Lagrangian-gradient difference `y`; `damping` in (0, 1) is the
    /// fraction of `s'Bs` that `s'r` must reach.
    pub fn update(&mut self, s: &[f64], y: &[f64], damping: f64) -> BfgsUpdate {
        let mut info = BfgsUpdate::default();
        for k in 0..self.layout.stages() {
            let vars = self.layout.vars(k);
            let n = vars.len();
            let (sb, yb) = (&s[vars.clone()], &y[vars]);
            let snorm = sb.iter().fold(0.0_f64, |a, v| a.max(v.abs()));
            if snorm == 0.0 || !snorm.is_finite() || !yb.iter().all(|v| v.is_finite()) {
                info.skipped += 1;
                continue;
            }
            let h = &mut self.blocks[self.layout.hessian_block(k)];
            let sy: f64 = sb.iter().zip(yb).map(|(a, b)| a * b).sum();
            if !self.scaled[k] {
                // Start the block at the curvature measured along the first step. The textbook
                // choice y'y / s'y (Nocedal & Wright, eq. (6.20)) explodes when y is nearly
                // orthogonal to s, as in blocks with indefinite Lagrangian Hessians.
                let ss: f64 = sb.iter().map(|a| a * a).sum();
                if sy > 0.0 {
                    let gamma = (sy / ss).clamp(1e-4, 1e4);
                    h.iter_mut().for_each(|v| *v *= gamma);
                }
                self.scaled[k] = true;
            }
            let bs = &mut self.bs[..n];
            for i in 0..n {
                bs[i] = (0..n).map(|j| h[i + j * n] * sb[j]).sum();
            }
            let sbs: f64 = sb.iter().zip(bs.iter()).map(|(a, b)| a * b).sum();
            if sbs <= f64::MIN_POSITIVE || !sbs.is_finite() {
                info.skipped += 1;
                continue;
            }
            let r = &mut self.r[..n];
            if sy >= damping * sbs {
                r.copy_from_slice(yb);
            } else {
                info.damped += 1;
                let theta = (1.0 - damping) * sbs / (sbs - sy);
                for i in 0..n {
                    r[i] = theta * yb[i] + (1.0 - theta) * bs[i];
                }
            }
            let sr: f64 = sb.iter().zip(r.iter()).map(|(a, b)| a * b).sum();
            if sr <= f64::MIN_POSITIVE {
                info.skipped += 1;
                continue;
            }
            for j in 0..n {
                for i in 0..n {
                    h[i + j * n] += r[i] * r[j] / sr - bs[i] * bs[j] / sbs;
                }
            }
            // Keep exact symmetry against rounding drift.
            for j in 0..n {
                for i in j + 1..n {
                    let v = 0.5 * (h[i + j * n] + h[j + i * n]);
                    h[i + j * n] = v;
                    h[j + i * n] = v;
                }
            }
        }
        info
    }
}

/// What [`convexify_blocks`] changed, for the iteration log.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Convexified {
    /// Blocks that were not positive definite.
    pub blocks: u32,
    /// Largest amount by which an eigenvalue was raised.
    pub largest_raise: f64,
}

/// Workspace of [`convexify_blocks`] for the blocks of one layout.
#[derive(Clone, Debug)]
pub struct Convexifier {
    pub(crate) a: Vec<f64>,
    pub(crate) v: Vec<f64>,
    pub(crate) d: Vec<f64>,
}

impl Convexifier {
    pub fn new(layout: &StageLayout) -> Self {
        let max = (0..layout.stages()).map(|k| layout.stage_size(k)).max().unwrap_or(0);
        Convexifier { a: vec![0.0; max * max], v: vec![0.0; max * max], d: vec![0.0; max] }
    }
}

/// Make every Hessian block of `layout` in `hessian` positive definite on its own: blocks
/// with a Cholesky factorisation are kept; in the others each eigenvalue below `floor` (`floor
/// = relative_floor * max(1, largest |eigenvalue|)`) is replaced by `max(|eigenvalue|,
/// floor)`, the "absolute value" modification of J. Nocedal, S. J. Wright, "Numerical
/// Optimization", 2nd ed., 2006, Section 3.4: directions of negative curvature keep their
/// magnitude, good directions are left alone, and no global factorisation or trial shift is
/// needed since the blocks are independent.
pub fn convexify_blocks(
    layout: &StageLayout,
    hessian: &mut [f64],
    relative_floor: f64,
    ws: &mut Convexifier,
) -> Convexified {
    let mut out = Convexified::default();
    for k in 0..layout.stages() {
        let n = layout.stage_size(k);
        let c = convexify_dense(&mut hessian[layout.hessian_block(k)], n, relative_floor, ws);
        out.blocks += c.blocks;
        out.largest_raise = out.largest_raise.max(c.largest_raise);
    }
    out
}

/// [`convexify_blocks`] for one symmetric `n x n` column-major block `h` (`ws` sized for at
/// least `n`).
pub fn convexify_dense(
    h: &mut [f64],
    n: usize,
    relative_floor: f64,
    ws: &mut Convexifier,
) -> Convexified {
    let mut out = Convexified::default();
    if n == 0 {
        return out;
    }
    let scale = h.iter().fold(0.0_f64, |a, v| a.max(v.abs())).max(1.0);
    let a = &mut ws.a[..n * n];
    a.copy_from_slice(h);
    if cholesky_in_place(a, n, relative_floor * scale) {
        return out;
    }
    a.copy_from_slice(h);
    let (v, d) = (&mut ws.v[..n * n], &mut ws.d[..n]);
    symmetric_eigen(a, n, v, d);
    let largest = d.iter().fold(0.0_f64, |m, x| m.max(x.abs())).max(1.0);
    let floor = relative_floor * largest;
    for e in d.iter_mut() {
        if *e < floor {
            let new = e.abs().max(floor);
            out.largest_raise = out.largest_raise.max(new - *e);
            *e = new;
            out.blocks = 1;
        }
    }
    // h = V diag(d) V'.
    for j in 0..n {
        for i in 0..n {
            let mut s = 0.0;
            for p in 0..n {
                s += v[i + p * n] * d[p] * v[j + p * n];
            }
            h[i + j * n] = s;
        }
    }
    out
}

/// Whether the symmetric `n x n` column-major `a` has a Cholesky factor with every pivot
/// above `floor` (overwrites `a`).
fn cholesky_in_place(a: &mut [f64], n: usize, floor: f64) -> bool {
    for j in 0..n {
        let mut d = a[j + j * n];
        for p in 0..j {
            d -= a[j + p * n] * a[j + p * n];
        }
        if d.is_nan() || d <= floor || !d.is_finite() {
            return false;
        }
        let r = d.sqrt();
        a[j + j * n] = r;
        for i in j + 1..n {
            let mut s = a[i + j * n];
            for p in 0..j {
                s -= a[i + p * n] * a[j + p * n];
            }
            a[i + j * n] = s / r;
        }
    }
    true
}

/// Eigenvalues `d` and eigenvectors (columns of `v`) of the symmetric `n x n` column-major `a`
/// by the cyclic Jacobi method (G. H. Golub, C. F. Van Loan, "Matrix Computations", 4th ed.,
/// 2013, Section 8.5): accurate to rounding for the small blocks here and free of allocation.
/// `a` is destroyed.
pub(crate) fn symmetric_eigen(a: &mut [f64], n: usize, v: &mut [f64], d: &mut [f64]) {
    v.fill(0.0);
    for i in 0..n {
        v[i + i * n] = 1.0;
    }
    for _sweep in 0..50 {
        let mut off = 0.0;
        let mut total = 0.0;
        for j in 0..n {
            for i in 0..n {
                let x = a[i + j * n] * a[i + j * n];
                total += x;
                if i != j {
                    off += x;
                }
            }
        }
        if off <= 1e-30 * total || off == 0.0 {
            break;
        }
        for p in 0..n {
            for q in p + 1..n {
                let apq = a[p + q * n];
                if apq == 0.0 {
                    continue;
                }
                let (app, aqq) = (a[p + p * n], a[q + q * n]);
                let tau = (aqq - app) / (2.0 * apq);
                let t = tau.signum() / (tau.abs() + (1.0 + tau * tau).sqrt());
                let t = if tau == 0.0 { 1.0 } else { t };
                let c = 1.0 / (1.0 + t * t).sqrt();
                let s = t * c;
                for k in 0..n {
                    let (akp, akq) = (a[k + p * n], a[k + q * n]);
                    a[k + p * n] = c * akp - s * akq;
                    a[k + q * n] = s * akp + c * akq;
                }
                for k in 0..n {
                    let (apk, aqk) = (a[p + k * n], a[q + k * n]);
                    a[p + k * n] = c * apk - s * aqk;
                    a[q + k * n] = s * apk + c * aqk;
                }
                for k in 0..n {
                    let (vkp, vkq) = (v[k + p * n], v[k + q * n]);
                    v[k + p * n] = c * vkp - s * vkq;
                    v[k + q * n] = s * vkp + c * vkq;
                }
            }
        }
    }
    for i in 0..n {
        d[i] = a[i + i * n];
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dense(l: &StageLayout, h: &[f64]) -> nalgebra::DMatrix<f64> {
        let n = l.num_variables();
        let mut m = nalgebra::DMatrix::zeros(n, n);
        for k in 0..l.stages() {
            let r = l.vars(k);
            let nk = r.len();
            let b = &h[l.hessian_block(k)];
            for j in 0..nk {
                for i in 0..nk {
                    m[(r.start + i, r.start + j)] = b[i + j * nk];
                }
            }
        }
        m
    }

    #[test]
    fn secant_condition_holds_per_block_and_blocks_stay_uncoupled() {
        let l = StageLayout::new(&[2, 2], &[0, 0], &[0, 0]).unwrap();
        let mut bfgs = BlockBfgs::new(&l);
        let s = [1.0, 0.5, -0.3, 0.2];
        let y = [2.0, 0.7, -0.9, 0.4];
        let info = bfgs.update(&s, &y, 0.2);
        assert_eq!(info, BfgsUpdate::default());
        let b = dense(&l, bfgs.blocks());
        // Secant condition B s = y holds exactly for an undamped update (Nocedal & Wright,
        // eq. (6.6)); 1e-12 covers rounding.
        let bs = &b * nalgebra::DVector::from_column_slice(&s);
        for i in 0..4 {
            assert!((bs[i] - y[i]).abs() < 1e-12, "{bs}");
        }
        assert_eq!(b[(0, 2)], 0.0);
        assert!(b.clone().cholesky().is_some());
    }

    #[test]
    fn negative_curvature_is_damped_and_stays_positive_definite() {
        let l = StageLayout::single(2, 0);
        let mut bfgs = BlockBfgs::new(&l);
        bfgs.update(&[1.0, 0.0], &[1.0, 0.0], 0.2);
        let info = bfgs.update(&[0.0, 1.0], &[0.0, -3.0], 0.2);
        assert_eq!(info.damped, 1);
        assert!(dense(&l, bfgs.blocks()).cholesky().is_some());
    }

    /// [[1, 2], [2, 1]] has eigenvalues 3 and -1 with eigenvectors (1, 1) and (1, -1) / sqrt 2
    /// (by hand); the absolute-value modification gives [[2, 1], [1, 2]]. A positive definite
    /// block is left exactly as it was.
    #[test]
    fn indefinite_blocks_are_mirrored_and_definite_ones_kept() {
        let l = StageLayout::new(&[2, 2], &[0, 0], &[0, 0]).unwrap();
        let mut h = vec![1.0, 2.0, 2.0, 1.0, 3.0, 1.0, 1.0, 2.0];
        let before = h.clone();
        let mut ws = Convexifier::new(&l);
        let c = convexify_blocks(&l, &mut h, 1e-8, &mut ws);
        assert_eq!(c.blocks, 1);
        assert!((c.largest_raise - 2.0).abs() < 1e-12, "{c:?}");
        for (got, want) in h[..4].iter().zip([2.0, 1.0, 1.0, 2.0]) {
            assert!((got - want).abs() < 1e-12, "{h:?}");
        }
        assert_eq!(h[4..], before[4..]);
    }

    /// Jacobi eigenvalues of a random symmetric 6x6 against nalgebra's.
    #[test]
    fn jacobi_eigenvalues_match_nalgebra() {
        let n = 6;
        let mut seed = 5_u64;
        let mut rand = || {
            seed = seed.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
            (seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let m = nalgebra::DMatrix::from_fn(n, n, |_, _| rand());
        let m = &m + m.transpose();
        let mut a: Vec<f64> = m.iter().copied().collect();
        let (mut v, mut d) = (vec![0.0; n * n], vec![0.0; n]);
        symmetric_eigen(&mut a, n, &mut v, &mut d);
        let mut mine = d.clone();
        mine.sort_by(f64::total_cmp);
        let mut theirs: Vec<f64> = m.symmetric_eigenvalues().iter().copied().collect();
        theirs.sort_by(f64::total_cmp);
        for (x, y) in mine.iter().zip(&theirs) {
            assert!((x - y).abs() < 1e-12, "{mine:?} vs {theirs:?}");
        }
    }
}
