//! Random composite expressions over three inputs: the compiled values, Jacobian and Hessian
//! against the recursive evaluator, dual numbers, central differences and the graph's own
//! evaluation; and compiled evaluation against the plain recursive evaluator on bigger trees.
//!
//! Domain-restricted operations are wrapped so that every random tree is defined everywhere
//! (`log(0.5 + a^2)`, `asin(0.9 tanh a)`, `a / (0.5 + b^2)` ...). Points too close to a kink
//! (abs, min, max, the atan2 cut) or with huge intermediate values are skipped, because there
//! finite differences, not the code under test, lose accuracy.

mod support;

use costate_model::{BinaryOp, Function, Graph, NodeId, UnaryOp};
use proptest::prelude::*;
use support::{check_function, eval, eval_watch_dual, scale_of, Dual, Expr, Tolerances, Watch};

const N_SHAPES: usize = 26;

fn c(v: f64) -> Expr {
    Expr::C(v)
}

/// `0.5 + a^2`: a positive argument for the operations that need one.
fn positive(a: Expr) -> Expr {
    Expr::b(BinaryOp::Add, c(0.5), Expr::b(BinaryOp::Mul, a.clone(), a))
}

fn shape(k: usize, a: Expr, b: Expr) -> Expr {
    use BinaryOp::*;
    use UnaryOp::*;
    let tanh = |a: Expr| Expr::u(Tanh, a);
    match k {
        0 => Expr::u(Neg, a),
        1 => Expr::u(Sin, a),
        2 => Expr::u(Cos, a),
        3 => Expr::u(Atan, a),
        4 => tanh(a),
        5 => Expr::u(Abs, a),
        6 => Expr::u(Tan, tanh(a)),
        7 => Expr::u(Asin, Expr::b(Mul, c(0.9), tanh(a))),
        8 => Expr::u(Acos, Expr::b(Mul, c(0.9), tanh(a))),
        9 => Expr::u(Exp, a),
        10 => Expr::u(Sinh, a),
        11 => Expr::u(Cosh, a),
        12 => Expr::u(Log, positive(a)),
        13 => Expr::u(Sqrt, positive(a)),
        14 => Expr::b(Add, a, b),
        15 => Expr::b(Sub, a, b),
        16 => Expr::b(Mul, a, b),
        17 => Expr::b(Div, a, positive(b)),
        18 => Expr::b(Pow, positive(a), tanh(b)),
        19 => Expr::b(Pow, a, c(2.0)),
        20 => Expr::b(Pow, a, c(3.0)),
        21 => Expr::b(Pow, positive(a), c(-1.5)),
        22 => Expr::b(Pow, positive(a), c(0.5)),
        23 => Expr::b(Atan2, a, b),
        24 => Expr::b(Min, a, b),
        _ => Expr::b(Max, a, b),
    }
}

fn tree(depth: u32, size: u32) -> impl Strategy<Value = Expr> {
    let leaf = prop_oneof![(0..3usize).prop_map(Expr::X), (-2.0..2.0f64).prop_map(Expr::C)];
    leaf.prop_recursive(depth, size, 2, |inner| {
        (0..N_SHAPES, inner.clone(), inner).prop_map(|(k, a, b)| shape(k, a, b))
    })
}

/// Kink margin and largest intermediate over all outputs and all seed directions.
fn watch(exprs: &[Expr], x: &[f64]) -> Watch {
    let mut w = Watch::default();
    for k in 0..x.len() {
        let seeded: Vec<Dual> =
            (0..x.len()).map(|i| Dual::new(x[i], if i == k { 1.0 } else { 0.0 })).collect();
        for e in exprs {
            eval_watch_dual(e, &seeded, &mut w);
        }
    }
    w
}

/// Composite trees mix many operations, so rounding is amplified more than for one built-in:
/// with `h = 1e-6` and intermediates up to `M <= 1e4` the difference quotient's rounding error
/// is about `eps * M / h * (amplification) ~ 2e-10 * M * 100`, inside `1e-6 * (1 + M)`;
/// truncation `h^2 |f'''| / 6` is negligible at these scales. Symbolic and dual derivatives
/// differ only by rounding in differently arranged formulas: `1e-9` relative, `1e-11 (1 + M)`
/// absolute (common practice: a few hundred ulps of the largest intermediate).
const TOL: Tolerances = Tolerances {
    values: (1e-13, 1e-12),
    dual: (1e-11, 1e-9),
    finite_difference: (1e-6, 1e-5),
    graph: (1e-12, 1e-10),
    h_rel: 1e-6,
};

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, max_global_rejects: 4096, ..ProptestConfig::default() })]

    #[test]
    fn composite_derivatives_match_references(
        e0 in tree(4, 24),
        e1 in tree(4, 24),
        x in proptest::collection::vec(-1.5..1.5f64, 3),
        w in proptest::collection::vec(-2.0..2.0f64, 2),
    ) {
        let exprs = [e0, e1];
        let seen = watch(&exprs, &x);
        // A step of ~1e-6 must not reach a kink: require 1e-3 of input change to get there.
        prop_assume!(seen.kink_margin > 1e-3);
        prop_assume!(seen.max_abs < 1e4);
        let mut g = Graph::new();
        let outs: Vec<NodeId> = exprs.iter().map(|e| e.build(&mut g)).collect();
        let f = Function::compile(&mut g, 3, &outs);
        let scale = scale_of(&f, &x, &w).max(seen.max_abs);
        prop_assume!(scale < 1e4);
        let r = check_function(&exprs, &x, &w, &TOL, scale);
        prop_assert!(r.is_ok(), "at {:?}: {}", x, r.unwrap_err());
    }

    /// Compiled evaluation (shared nodes, folding, fast powers) agrees with a plain recursive
    /// walk of the same tree, and with the graph's own evaluator.
    #[test]
    fn compiled_evaluation_matches_recursive_evaluation(
        exprs in proptest::collection::vec(tree(7, 64), 1..4),
        x in proptest::collection::vec(-1.5..1.5f64, 3),
    ) {
        let mut g = Graph::new();
        let outs: Vec<NodeId> = exprs.iter().map(|e| e.build(&mut g)).collect();
        let f = Function::compile(&mut g, 3, &outs);
        let mut ws = f.workspace();
        let mut got = vec![0.0; outs.len()];
        f.eval(&x, &mut got, &mut ws);
        let direct = g.evaluate(&outs, &x);
        for (i, e) in exprs.iter().enumerate() {
            let seen = watch(std::slice::from_ref(e), &x);
            let want = eval::<f64>(e, &x);
            if !want.is_finite() || seen.max_abs > 1e12 {
                continue;
            }
            // Folding reorders constant factors (c * (k * y) -> (c k) * y), so results agree
            // to rounding relative to the largest intermediate: 1e-12 * (1 + M).
            let tol = 1e-12 * (1.0 + seen.max_abs);
            prop_assert!((got[i] - want).abs() <= tol, "output {}: {} vs {}", i, got[i], want);
            prop_assert!((got[i] - direct[i]).abs() <= tol, "output {}: {} vs graph {}", i, got[i], direct[i]);
        }
    }
}
