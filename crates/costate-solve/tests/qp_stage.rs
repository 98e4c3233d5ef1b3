//! The stage-structured interior-point QP solver against the reference (Clarabel) and against
//! QPs whose solution is known by construction.
//!
//! Each random QP is built from its own optimality conditions: pick a primal point `x*`, an
//! active set and multipliers of the right signs, then set the gradient so that
//! `H x* + g + A' lambda* + nu* = 0` (J. Nocedal, S. J. Wright, "Numerical Optimization",
//! 2nd ed., 2006, Theorem 16.4: for a strictly convex QP these conditions are sufficient, and
//! the multipliers are unique when the active constraint gradients are linearly independent).
//! Cases are drawn from a fixed seed so a failure repeats.

// Random cases walk several parallel arrays by one index.
#![allow(clippy::needless_range_loop)]

use std::sync::Arc;

use costate_solve::{
    ClarabelQp, ClarabelQpSettings, QpSolution, QpSolver, QpStatus, StageIpm, StageIpmSettings,
    StageLayout, StageQp,
};
use nalgebra::DMatrix;

const INF: f64 = f64::INFINITY;

struct Lcg(u64);

impl Lcg {
    fn next(&mut self) -> f64 {
        self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
    fn range(&mut self, a: f64, b: f64) -> f64 {
        a + (b - a) * self.next()
    }
    fn int(&mut self, n: usize) -> usize {
        ((self.next() * n as f64) as usize).min(n.saturating_sub(1))
    }
}

/// A QP with its known solution; `unique_multipliers` when the active gradients are
/// linearly independent.
struct Case {
    qp: StageQp,
    x: Vec<f64>,
    lambda: Vec<f64>,
    nu: Vec<f64>,
    unique_multipliers: bool,
}

fn random_case(rng: &mut Lcg, redundant: bool, degenerate: bool) -> Case {
    let stages = 1 + rng.int(5);
    let n: Vec<usize> = (0..stages).map(|_| 1 + rng.int(5)).collect();
    let local: Vec<usize> = (0..stages).map(|_| rng.int(4)).collect();
    let coupling: Vec<usize> = (0..stages)
        .map(|k| if k + 1 < stages { rng.int(n[k + 1].min(3) + 1) } else { 0 })
        .collect();
    let layout = Arc::new(StageLayout::new(&n, &local, &coupling).unwrap());
    let mut qp = StageQp::zeros(layout.clone());
    let (nv, m) = (layout.num_variables(), layout.num_rows());
    for k in 0..stages {
        let nk = n[k];
        let r: Vec<f64> = (0..nk * nk).map(|_| rng.range(-1.0, 1.0)).collect();
        let v0 = layout.vars(k).start;
        for i in 0..nk {
            for j in 0..=i {
                let mut v: f64 = (0..nk).map(|p| r[p * nk + i] * r[p * nk + j]).sum();
                if i == j {
                    v += 0.1;
                }
                qp.add_hessian(v0 + i, v0 + j, v).unwrap();
            }
        }
    }
    for i in 0..m {
        let (w, first) = layout.row_span(i);
        for c in 0..w {
            if rng.next() < 0.8 {
                qp.set_jacobian(i, first + c, rng.range(-2.0, 2.0)).unwrap();
            }
        }
    }
    if redundant && m > 0 {
        // A local equality row repeated: its multipliers are no longer unique.
        for k in 0..stages {
            let rows = layout.local_rows(k);
            if rows.len() >= 2 {
                let (a, b) = (rows.start, rows.start + 1);
                let ra = qp.jacobian[layout.row_block(a)].to_vec();
                let rb = layout.row_block(b);
                qp.jacobian[rb].copy_from_slice(&ra);
                break;
            }
        }
    }
    let x: Vec<f64> = (0..nv).map(|_| rng.range(-2.0, 2.0)).collect();
    let mut ax = vec![0.0; m];
    qp.mul_jacobian(&x, &mut ax);
    let mut lambda = vec![0.0; m];
    let mut nu = vec![0.0; nv];
    // Active gradients (rows of the dense active Jacobian) for the LICQ check.
    let mut active: Vec<Vec<f64>> = Vec::new();
    let dense_row = |qp: &StageQp, i: usize| {
        let mut d = vec![0.0; nv];
        let (row, first) = qp.row(i);
        d[first..first + row.len()].copy_from_slice(row);
        d
    };
    let mut redundant_pair: Option<usize> = None;
    for i in 0..m {
        let (_, coupling_row) = layout.stage_of_row(i);
        let mut t = if coupling_row { 0 } else { rng.int(7) };
        if t == 4 && !degenerate {
            t = 3;
        }
        let v = ax[i];
        let gap = rng.range(0.1, 2.0);
        let mult = rng.range(0.2, 2.0);
        let (lo, hi, l) = match t {
            0 => (v, v, rng.range(-2.0, 2.0)),
            1 => (v - gap, v, mult),
            2 => (v, INF, -mult),
            3 => (v - gap, v + gap, 0.0),
            // Weakly active: on its bound with a zero multiplier (degenerate).
            4 => (-INF, v, 0.0),
            5 => (-INF, INF, 0.0),
            _ => (v, v + gap, -mult),
        };
        qp.row_lower[i] = lo;
        qp.row_upper[i] = hi;
        lambda[i] = l;
        if matches!(t, 0 | 1 | 2 | 4 | 6) {
            active.push(dense_row(&qp, i));
        }
    }
    if redundant {
        // Make the repeated row an equality with the same value, multipliers split.
        for k in 0..stages {
            let rows = layout.local_rows(k);
            if rows.len() >= 2 {
                let (a, b) = (rows.start, rows.start + 1);
                qp.row_lower[a] = ax[a];
                qp.row_upper[a] = ax[a];
                qp.row_lower[b] = ax[a];
                qp.row_upper[b] = ax[a];
                lambda[a] = 0.7;
                lambda[b] = 0.3;
                redundant_pair = Some(a);
                break;
            }
        }
    }
    for j in 0..nv {
        let mut t = rng.int(7);
        if t == 4 && !degenerate {
            t = 3;
        }
        let v = x[j];
        let gap = rng.range(0.1, 2.0);
        let mult = rng.range(0.2, 2.0);
        let (lo, hi, n_) = match t {
            0 => (v, v, rng.range(-2.0, 2.0)),
            1 => (v - gap, v, mult),
            2 => (v, v + gap, -mult),
            3 => (v - gap, v + gap, 0.0),
            // Weakly active bound.
            4 => (v, INF, 0.0),
            _ => (-INF, INF, 0.0),
        };
        qp.var_lower[j] = lo;
        qp.var_upper[j] = hi;
        nu[j] = n_;
        if matches!(t, 0 | 1 | 2 | 4) {
            let mut e = vec![0.0; nv];
            e[j] = 1.0;
            active.push(e);
        }
    }
    // g = -(H x + A' lambda + nu).
    let mut g = vec![0.0; nv];
    qp.mul_hessian(&x, &mut g);
    qp.mul_jacobian_transpose_add(&lambda, &mut g);
    for j in 0..nv {
        g[j] = -(g[j] + nu[j]);
    }
    qp.gradient = g;
    let unique_multipliers = redundant_pair.is_none() && {
        if active.is_empty() {
            true
        } else if active.len() > nv {
            false
        } else {
            let a = DMatrix::from_fn(active.len(), nv, |r, c| active[r][c]);
            let sv = a.svd(false, false).singular_values;
            let (max, min) = sv.iter().fold((0.0_f64, INF), |(a, b), &v| (a.max(v), b.min(v)));
            min > 1e-2 * max
        }
    };
    Case { qp, x, lambda, nu, unique_multipliers }
}

fn solve(solver: &mut dyn QpSolver, qp: &StageQp) -> QpSolution {
    let mut out = QpSolution::new(qp.num_variables(), qp.num_rows());
    solver.solve(qp, &mut out).expect("a valid QP");
    out
}

fn rel(a: &[f64], b: &[f64]) -> f64 {
    let scale = b.iter().fold(1.0_f64, |s, v| s.max(v.abs()));
    a.iter().zip(b).fold(0.0_f64, |m, (x, y)| m.max((x - y).abs())) / scale
}

fn reference() -> ClarabelQp {
    ClarabelQp::new(ClarabelQpSettings { tolerance: 1e-12, max_iterations: 400 })
}

/// Ours at the same tight tolerance as the reference: the comparison is of solutions, not of
/// where each method chooses to stop.
fn ours() -> StageIpm {
    StageIpm::new(StageIpmSettings { tolerance: 1e-11, ..StageIpmSettings::default() })
}

/// Solution and (where unique) multipliers of both solvers within 1e-7 relative of the known
/// ones and of each other: both stop at relative residuals of 1e-11 to 1e-12 on QPs whose
/// curvature is at least 0.1 and whose active gradients have singular values within a
/// factor 100 of each other. Degenerate cases (a constraint on its bound with a zero
/// multiplier) are held to 1e-4 (solution) and 1e-2 (multipliers): without strict
/// complementarity an interior-point iterate is only about the square root of its residuals
/// away from the solution (S. J. Wright, "Primal-Dual Interior-Point Methods", SIAM, 1997,
/// ch. 7, recalled from memory), so 1e-10 residuals leave errors of order 1e-5 times the
/// problem's conditioning; both solvers show it.
#[test]
fn random_feasible_qps_match_the_reference_and_the_known_solution() {
    let mut rng = Lcg(20261202);
    let mut ipm = ours();
    let mut clarabel = reference();
    let mut checked_multipliers = 0;
    for case_no in 0..400 {
        let redundant = case_no % 10 == 9;
        let degenerate = case_no % 4 == 3;
        let tol = if degenerate { 1e-4 } else { 1e-7 };
        // A weakly active constraint's multiplier is zero and approached like mu / s with
        // s ~ sqrt(mu): the square root again, with a constant.
        let mtol = if degenerate { 1e-2 } else { 1e-7 };
        // Cases without independent active gradients, unless made so on purpose, are drawn
        // again: their multipliers form an unbounded set, not a test of either solver.
        let case = loop {
            let c = random_case(&mut rng, redundant, degenerate);
            if c.unique_multipliers || redundant {
                break c;
            }
        };
        let mine = solve(&mut ipm, &case.qp);
        let theirs = solve(&mut clarabel, &case.qp);
        let what = format!("case {case_no} (layout {:?})", case.qp.layout);
        assert_eq!(mine.status, QpStatus::Solved, "{what}: ipm");
        assert!(theirs.status.has_solution(), "{what}: clarabel {:?}", theirs.status);
        assert!(rel(&mine.step, &case.x) < tol, "{what}: x {:?} vs {:?}", mine.step, case.x);
        assert!(rel(&mine.step, &theirs.step) < tol, "{what}: x vs clarabel");
        if case.unique_multipliers {
            checked_multipliers += 1;
            assert!(
                rel(&mine.row_multipliers, &case.lambda) < mtol,
                "{what}: lambda {:?} vs {:?}",
                mine.row_multipliers,
                case.lambda
            );
            assert!(
                rel(&mine.bound_multipliers, &case.nu) < mtol,
                "{what}: nu {:?} vs {:?} (clarabel {:?})",
                mine.bound_multipliers,
                case.nu,
                theirs.bound_multipliers
            );
            assert!(rel(&mine.row_multipliers, &theirs.row_multipliers) < mtol, "{what}");
            assert!(rel(&mine.bound_multipliers, &theirs.bound_multipliers) < mtol, "{what}");
        } else {
            // Stationarity still holds with whatever multipliers were found.
            let mut r = vec![0.0; case.qp.num_variables()];
            case.qp.mul_hessian(&mine.step, &mut r);
            case.qp.mul_jacobian_transpose_add(&mine.row_multipliers, &mut r);
            for j in 0..r.len() {
                r[j] += case.qp.gradient[j] + mine.bound_multipliers[j];
            }
            let scale = case.qp.gradient.iter().fold(1.0_f64, |a, v| a.max(v.abs()));
            assert!(r.iter().all(|v| v.abs() < 1e-7 * scale), "{what}: stationarity {r:?}");
        }
    }
    assert!(checked_multipliers > 200, "only {checked_multipliers} cases with unique multipliers");
}

/// Penalised rows (the elastic form): a row penalised with a weight above its multiplier
/// keeps the solution (an exact penalty, Nocedal and Wright, op. cit., Theorem 17.3), and a
/// row whose bounds are moved away from the solution is violated there with its multiplier
/// at plus or minus the weight (the subgradient of the weight times the distance); the
/// gradient is set from those multipliers. Same tolerances as the hard QPs.
#[test]
fn random_penalised_qps_match_the_reference_and_the_known_solution() {
    let mut rng = Lcg(5150);
    let mut ipm = ours();
    let mut clarabel = reference();
    let mut violated = 0;
    for case_no in 0..200 {
        let mut case = loop {
            let c = random_case(&mut rng, false, false);
            if c.unique_multipliers {
                break c;
            }
        };
        let l = case.qp.layout.clone();
        let m = l.num_rows();
        let mut ax = vec![0.0; m];
        case.qp.mul_jacobian(&case.x, &mut ax);
        for i in 0..m {
            if rng.next() < 0.4 {
                continue;
            }
            let (_, coupling) = l.stage_of_row(i);
            let old = case.lambda[i];
            let (v, gap, weight) = (ax[i], rng.range(0.1, 1.0), rng.range(0.5, 2.0));
            let new = match rng.int(3) {
                0 => {
                    case.qp.row_penalty[i] = old.abs() + weight;
                    continue;
                }
                1 => {
                    // Violated below: a'x < lower.
                    let hi = if coupling || rng.next() < 0.3 { v + gap } else { INF };
                    case.qp.row_lower[i] = v + gap;
                    case.qp.row_upper[i] = hi;
                    -weight
                }
                _ => {
                    let lo = if coupling || rng.next() < 0.3 { v - gap } else { -INF };
                    case.qp.row_lower[i] = lo;
                    case.qp.row_upper[i] = v - gap;
                    weight
                }
            };
            violated += 1;
            case.qp.row_penalty[i] = weight;
            case.lambda[i] = new;
            // g -= a_i (new - old): stationarity with the new multiplier.
            let (row, first) = case.qp.row(i);
            let shift: Vec<(usize, f64)> =
                row.iter().enumerate().map(|(c, a)| (first + c, a * (new - old))).collect();
            for (j, d) in shift {
                case.qp.gradient[j] -= d;
            }
        }
        let mine = solve(&mut ipm, &case.qp);
        let theirs = solve(&mut clarabel, &case.qp);
        let what = format!("case {case_no} (layout {:?})", case.qp.layout);
        assert_eq!(mine.status, QpStatus::Solved, "{what}: ipm");
        assert!(theirs.status.has_solution(), "{what}: clarabel {:?}", theirs.status);
        let tol = 1e-7;
        assert!(rel(&mine.step, &case.x) < tol, "{what}: x {:?} vs {:?}", mine.step, case.x);
        assert!(rel(&theirs.step, &case.x) < tol, "{what}: clarabel x");
        assert!(rel(&mine.row_multipliers, &case.lambda) < tol, "{what}: lambda");
        assert!(rel(&mine.bound_multipliers, &case.nu) < tol, "{what}: nu");
        assert!(rel(&mine.row_multipliers, &theirs.row_multipliers) < tol, "{what}");
        assert!(rel(&mine.bound_multipliers, &theirs.bound_multipliers) < tol, "{what}");
    }
    assert!(violated > 150, "only {violated} violated rows");
}

/// Contradictory rows (the same row bounded above by c and below by c + 1) or an equality
/// outside the box its variables allow: both solvers must say infeasible.
#[test]
fn random_infeasible_qps_are_called_infeasible_by_both() {
    let mut rng = Lcg(7);
    let mut ipm = StageIpm::default();
    let mut clarabel = reference();
    let mut tried = 0;
    for case_no in 0..200 {
        let mut case = random_case(&mut rng, false, false);
        let l = case.qp.layout.clone();
        // Find a stage with two local rows, or a stage whose variables are all boxed.
        let Some(k) = (0..l.stages()).find(|&k| l.local_rows(k).len() >= 2) else {
            continue;
        };
        let rows = l.local_rows(k);
        let (a, b) = (rows.start, rows.start + 1);
        let ra = case.qp.jacobian[l.row_block(a)].to_vec();
        if ra.iter().all(|v| *v == 0.0) {
            continue;
        }
        let rb = l.row_block(b);
        case.qp.jacobian[rb].copy_from_slice(&ra);
        let c = ra.iter().zip(&case.x[l.vars(k)]).map(|(p, q)| p * q).sum::<f64>();
        if case_no % 2 == 0 {
            case.qp.row_lower[a] = -INF;
            case.qp.row_upper[a] = c;
            case.qp.row_lower[b] = c + 1.0;
            case.qp.row_upper[b] = INF;
        } else {
            case.qp.row_lower[a] = c;
            case.qp.row_upper[a] = c;
            case.qp.row_lower[b] = c + 1.0;
            case.qp.row_upper[b] = c + 1.0;
        }
        tried += 1;
        let mine = solve(&mut ipm, &case.qp);
        let theirs = solve(&mut clarabel, &case.qp);
        assert_eq!(theirs.status, QpStatus::Infeasible, "case {case_no}: clarabel");
        assert_eq!(mine.status, QpStatus::Infeasible, "case {case_no}: ipm");
    }
    assert!(tried > 50, "only {tried} infeasible cases");
}

/// min -x subject to x >= 0 and nothing else: the objective falls without bound.
#[test]
fn an_unbounded_qp_is_called_unbounded() {
    let layout = Arc::new(StageLayout::single(2, 1));
    let mut qp = StageQp::zeros(layout);
    qp.add_hessian(1, 1, 1.0).unwrap();
    qp.gradient = vec![-1.0, 0.0];
    qp.var_lower[0] = 0.0;
    qp.set_jacobian(0, 1, 1.0).unwrap();
    qp.row_lower[0] = 1.0;
    qp.row_upper[0] = 1.0;
    let mine = solve(&mut StageIpm::default(), &qp);
    let theirs = solve(&mut reference(), &qp);
    assert_eq!(theirs.status, QpStatus::Unbounded);
    assert_eq!(mine.status, QpStatus::Unbounded);
}

/// The example of J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., 2006,
/// Example 16.4 (problem and solution recalled from memory, checked by hand):
/// min (x1 - 1)^2 + (x2 - 2.5)^2 subject to x1 - 2 x2 + 2 >= 0, -x1 - 2 x2 + 6 >= 0,
/// -x1 + 2 x2 + 2 >= 0, x >= 0; solution (1.4, 1.7) with only the first row active: there
/// the objective gradient (0.8, -1.6) is 0.8 times that row's gradient (1, -2), so the
/// multiplier is -0.8 in our convention (lower side active).
#[test]
fn textbook_example_16_4() {
    let layout = Arc::new(StageLayout::single(2, 3));
    let mut qp = StageQp::zeros(layout);
    qp.add_hessian(0, 0, 2.0).unwrap();
    qp.add_hessian(1, 1, 2.0).unwrap();
    qp.gradient = vec![-2.0, -5.0];
    for (i, (a, b, lo)) in
        [(1.0, -2.0, -2.0), (-1.0, -2.0, -6.0), (-1.0, 2.0, -2.0)].into_iter().enumerate()
    {
        qp.set_jacobian(i, 0, a).unwrap();
        qp.set_jacobian(i, 1, b).unwrap();
        qp.row_lower[i] = lo;
    }
    qp.var_lower = vec![0.0, 0.0];
    let sol = solve(&mut StageIpm::default(), &qp);
    assert_eq!(sol.status, QpStatus::Solved);
    // Tolerance 1e-8: the method stops at relative residuals of 1e-10.
    assert!((sol.step[0] - 1.4).abs() < 1e-8 && (sol.step[1] - 1.7).abs() < 1e-8, "{sol:?}");
    assert!((sol.row_multipliers[0] + 0.8).abs() < 1e-8, "{:?}", sol.row_multipliers);
    assert!(sol.row_multipliers[1].abs() < 1e-8 && sol.row_multipliers[2].abs() < 1e-8);
}
