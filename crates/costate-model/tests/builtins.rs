//! Every built-in operation's first and second derivatives, checked at random points of its
//! domain against dual numbers, central finite differences and the graph's own evaluation.
//!
//! Tolerances (common practice for central differences, e.g. Nocedal & Wright, "Numerical
//! Optimization", 2nd ed. 2006, section 8.1): with step `h = 1e-6 * max(1, |x|)` the truncation
//! error is `h^2 |f'''| / 6 <= 1e-12 * |f'''|` and the rounding error about
//! `eps |f| / h ~ 2e-10 |f|`. On the domains below `|f| <= 25` and `|f'''|, |f''''| <= 1e4`, so
//! the error is below ~1e-8; we allow `1e-7 * (1 + scale) + 1e-6 * |value|`, a safety factor of
//! ten. Dual numbers and the graph's evaluation are exact up to rounding of differently ordered
//! formulas (a few ulps times the conditioning), hence `1e-11` relative.

mod support;

use costate_model::{BinaryOp, UnaryOp};
use proptest::prelude::*;
use support::{check_function, Expr, Tolerances};

const TOL: Tolerances = Tolerances {
    values: (1e-15, 1e-14),
    dual: (1e-13, 1e-11),
    finite_difference: (1e-7, 1e-6),
    graph: (1e-13, 1e-11),
    h_rel: 1e-6,
};

/// A point of `op`'s domain, from `u` in [0, 1) and a sign, kept away from singularities and
/// kinks so finite differences stay accurate.
fn unary_point(op: UnaryOp, u: f64, negative: bool) -> f64 {
    let (lo, hi) = match op {
        UnaryOp::Tan => (-1.2, 1.2),
        UnaryOp::Asin | UnaryOp::Acos => (-0.9, 0.9),
        UnaryOp::Log | UnaryOp::Sqrt => (0.1, 5.0),
        UnaryOp::Abs => {
            let m = 0.05 + 2.95 * u;
            return if negative { -m } else { m };
        }
        _ => (-3.0, 3.0),
    };
    lo + (hi - lo) * u
}

fn x(i: usize) -> Expr {
    Expr::X(i)
}

proptest! {
    /// `op(x0)` and `x1 * op(x0)` (product rule and a mixed second derivative) for every
    /// unary built-in.
    #[test]
    fn unary_builtins(u in 0.0..1.0f64, negative: bool, y in -2.0..2.0f64,
                      w0 in -2.0..2.0f64, w1 in -2.0..2.0f64) {
        for op in UnaryOp::ALL {
            let x0 = unary_point(op, u, negative);
            let exprs = [Expr::u(op, x(0)), Expr::b(BinaryOp::Mul, x(1), Expr::u(op, x(0)))];
            let r = check_function(&exprs, &[x0, y], &[w0, w1], &TOL, 25.0);
            prop_assert!(r.is_ok(), "{:?} at x0 = {}, x1 = {}: {}", op, x0, y, r.unwrap_err());
        }
    }

    /// Every binary built-in with both operands variable, at points inside its domain.
    #[test]
    fn binary_builtins(u in 0.0..1.0f64, v in 0.0..1.0f64, negative: bool, w in -2.0..2.0f64) {
        for op in BinaryOp::ALL {
            let (a, b) = match op {
                // Keep the divisor away from zero: |b| in [0.2, 3].
                BinaryOp::Div => (-3.0 + 6.0 * u, if negative { -0.2 - 2.8 * v } else { 0.2 + 2.8 * v }),
                // General power: positive base, moderate exponent.
                BinaryOp::Pow => (0.2 + 2.8 * u, -2.0 + 4.0 * v),
                // Radius in [0.3, 3], angle away from the branch cut at +-pi.
                BinaryOp::Atan2 => {
                    let (r, t) = (0.3 + 2.7 * u, -2.8 + 5.6 * v);
                    (r * t.sin(), r * t.cos())
                }
                // Keep |a - b| >= 0.05 so no difference step crosses the kink.
                BinaryOp::Min | BinaryOp::Max => {
                    let a = -3.0 + 6.0 * u;
                    let gap = 0.05 + 2.0 * v;
                    (a, if negative { a - gap } else { a + gap })
                }
                _ => (-3.0 + 6.0 * u, -3.0 + 6.0 * v),
            };
            let exprs = [Expr::b(op, x(0), x(1))];
            let r = check_function(&exprs, &[a, b], &[w], &TOL, 25.0);
            prop_assert!(r.is_ok(), "{:?} at ({}, {}): {}", op, a, b, r.unwrap_err());
        }
    }

    /// Powers with a constant exponent take the compiled fast paths (squaring, repeated
    /// multiplication, sqrt, powf); integer exponents also on negative bases.
    #[test]
    fn constant_exponent_powers(u in 0.0..1.0f64, negative: bool, w in -2.0..2.0f64) {
        let integers = [2.0, 3.0, 4.0, -1.0, -2.0, 7.0];
        let fractions = [0.5, 1.5, -0.5, 2.5, -1.25];
        for c in integers.iter().chain(&fractions) {
            let integer = integers.contains(c);
            let m = 0.2 + 2.3 * u;
            let a = if integer && negative { -m } else { m };
            let exprs = [Expr::b(BinaryOp::Pow, x(0), Expr::C(*c))];
            // powi and powf round differently: a few ulps relative on the values.
            let tol = Tolerances { values: (1e-15, 1e-13), ..TOL };
            let r = check_function(&exprs, &[a], &[w], &tol, 25.0);
            prop_assert!(r.is_ok(), "x^{} at {}: {}", c, a, r.unwrap_err());
        }
    }
}
