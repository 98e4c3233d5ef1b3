//! Large expressions compile quickly and without blow-up: a 2,000-operation random DAG over
//! ten inputs, its Jacobian and Hessian, checked for size and time, and spot-checked against
//! the graph's own evaluation.

use std::time::Instant;

use costate_model::{BinaryOp, Function, Graph, NodeId, UnaryOp};

/// A small deterministic generator (64-bit LCG, constants from Knuth, TAOCP vol. 2, 3.3.4),
/// so the test is reproducible without a dependency.
struct Lcg(u64);

impl Lcg {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        self.0 >> 33
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n as u64) as usize
    }
}

/// Builds `ops` operations, each on one or two earlier nodes (biased towards recent ones, as
/// in real right-hand sides), with safe shapes so the result can be evaluated.
fn random_dag(g: &mut Graph, n_inputs: usize, ops: usize, seed: u64) -> Vec<NodeId> {
    let mut rng = Lcg(seed);
    let mut pool: Vec<NodeId> = (0..n_inputs).map(|i| g.input(i)).collect();
    let half = g.constant(0.5);
    for _ in 0..ops {
        let pick = |rng: &mut Lcg, pool: &[NodeId]| {
            let window = pool.len().min(40);
            pool[pool.len() - 1 - rng.below(window)]
        };
        let a = pick(&mut rng, &pool);
        let b = pick(&mut rng, &pool);
        let n = match rng.below(8) {
            0 => g.binary(BinaryOp::Add, a, b),
            1 => g.binary(BinaryOp::Sub, a, b),
            2 => {
                let p = g.binary(BinaryOp::Mul, a, b);
                g.unary(UnaryOp::Tanh, p)
            }
            3 => g.unary(UnaryOp::Sin, a),
            4 => {
                let sq = g.binary(BinaryOp::Mul, a, a);
                let pos = g.binary(BinaryOp::Add, half, sq);
                g.binary(BinaryOp::Div, b, pos)
            }
            5 => g.unary(UnaryOp::Atan, a),
            6 => {
                let sq = g.binary(BinaryOp::Mul, b, b);
                let pos = g.binary(BinaryOp::Add, half, sq);
                g.unary(UnaryOp::Log, pos)
            }
            _ => g.binary(BinaryOp::Mul, half, a),
        };
        pool.push(n);
    }
    pool[pool.len() - 5..].to_vec()
}

#[test]
fn two_thousand_operations_compile_fast_and_linearly() {
    let n_inputs = 10;
    let mut g = Graph::new();
    let outs = random_dag(&mut g, n_inputs, 2000, 7);
    let before = g.len();
    let start = Instant::now();
    let f = Function::compile(&mut g, n_inputs, &outs);
    let elapsed = start.elapsed();
    let stats = f.stats();
    // Expected: a few milliseconds in an optimised build. The bound is generous for a shared,
    // busy test machine but still catches quadratic or exponential growth, which would take
    // seconds to minutes at this size.
    assert!(elapsed.as_secs_f64() < 1.0, "compile took {elapsed:?}");
    // The Jacobian costs a few nodes per (node, input) pair and the forward-over-reverse
    // Hessian a few per (gradient node, input) pair, so growth is about `n_inputs` times a
    // small constant: 18x measured here (independent computation). Differentiating every
    // Jacobian entry again (forward over forward) measured 40x, and exponential blow-up far
    // more; 30x separates them.
    let added = g.len() - before;
    assert!(added < before * 30, "graph grew from {before} by {added} nodes");
    assert!(stats.values <= before, "value tape {} for {before} nodes", stats.values);

    // Spot-check the compiled Jacobian and Hessian against the graph's own evaluator.
    let x: Vec<f64> = (0..n_inputs).map(|i| 0.3 + 0.1 * i as f64).collect();
    let mut ws = f.workspace();
    let mut jac = vec![0.0; f.jacobian_pattern().len()];
    f.eval_jacobian(&x, &mut jac, &mut ws);
    for (&(i, j), &v) in f.jacobian_pattern().iter().zip(&jac) {
        let d = g.derivative(outs[i], j);
        let want = g.evaluate(&[d], &x)[0];
        assert!((v - want).abs() <= 1e-12 * (1.0 + want.abs()), "J[{i}][{j}] {v} vs {want}");
    }
    let w = [1.0, -2.0, 0.5, 3.0, -1.0];
    let mut hess = vec![0.0; f.hessian_pattern().len()];
    f.eval_hessian(&x, &w, &mut hess, &mut ws);
    for (&(j, k), &v) in f.hessian_pattern().iter().zip(&hess) {
        let mut want = 0.0;
        for (i, &o) in outs.iter().enumerate() {
            let dj = g.derivative(o, j);
            let djk = g.derivative(dj, k);
            want += w[i] * g.evaluate(&[djk], &x)[0];
        }
        // Same nodes, summed in the same order: agreement to rounding (1e-12 relative).
        assert!((v - want).abs() <= 1e-12 * (1.0 + want.abs()), "H[{j}][{k}] {v} vs {want}");
    }
}
