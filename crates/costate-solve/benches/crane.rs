//! Benchmark: the crane transfer of `examples/crane_transfer.costate` at 60 intervals, built
//! directly on the expression graph (this crate knows no syntax), solved with the default
//! settings. Prints the median wall time of several solves and the SQP iteration count.
//!
//! Run with `cargo bench -p costate-solve` (release profile). Timings are only ever measured
//! here, never asserted in tests.

use std::time::{Duration, Instant};

use costate_model::{
    BinaryOp, Bounds, ControlInfo, EndTime, EndpointLayout, Function, Graph, Horizon, Ocp,
    RunningLayout, StateInfo, UnaryOp,
};
use costate_solve::{solve_ocp, OcpSettings};

/// `examples/crane_transfer.costate` in SI units: x' = v, v' = a, theta' = omega,
/// omega' = -(g / rope) sin(theta) - (a / rope) cos(theta); |theta| <= 0.08 on the path;
/// minimise tf + 0.05 * integral(a^2) with tf free in [1, 60] (guess 8).
fn crane() -> Ocp {
    let (g, rope, sway) = (9.81, 6.0, 0.08);
    let rl = RunningLayout { nx: 4, nu: 1, np: 0 };
    let ep = EndpointLayout { nx: 4, np: 0, nq: 1 };
    let mut gr = Graph::new();
    let input = |gr: &mut Graph, k: usize| gr.input(k);
    let (v, th, om, a) = (
        input(&mut gr, rl.x(1)),
        input(&mut gr, rl.x(2)),
        input(&mut gr, rl.x(3)),
        input(&mut gr, rl.u(0)),
    );
    let s = gr.unary(UnaryOp::Sin, th);
    let c = gr.unary(UnaryOp::Cos, th);
    let k1 = gr.constant(-g / rope);
    let k2 = gr.constant(-1.0 / rope);
    let t1 = gr.binary(BinaryOp::Mul, k1, s);
    let ac = gr.binary(BinaryOp::Mul, a, c);
    let t2 = gr.binary(BinaryOp::Mul, k2, ac);
    let wd = gr.binary(BinaryOp::Add, t1, t2);
    let dynamics = Function::compile(&mut gr, rl.len(), &[v, a, om, wd]);
    let a2 = gr.binary(BinaryOp::Mul, a, a);
    let integrands = Function::compile(&mut gr, rl.len(), &[a2]);
    let path = Function::compile(&mut gr, rl.len(), &[th]);
    let tf = gr.input(EndpointLayout::TF);
    let q = gr.input(ep.q(0));
    let w = gr.constant(0.05);
    let wq = gr.binary(BinaryOp::Mul, w, q);
    let cost = gr.binary(BinaryOp::Add, tf, wq);
    let objective = Function::compile(&mut gr, ep.len(), &[cost]);
    let boundary = Function::compile(&mut gr, ep.len(), &[]);
    let rest = Bounds::fixed(0.0);
    let state = |start: Bounds, end: Bounds, bounds: Bounds| StateInfo {
        bounds,
        start,
        end,
        guess: None,
        scale: 1.0,
    };
    Ocp {
        horizon: Horizon {
            start: 0.0,
            end: EndTime::Free { bounds: Bounds { lo: 1.0, hi: 60.0 }, guess: 8.0 },
        },
        states: vec![
            state(rest, Bounds::fixed(12.0), Bounds::FREE),
            state(rest, rest, Bounds { lo: -2.0, hi: 2.0 }),
            state(rest, rest, Bounds::FREE),
            state(rest, rest, Bounds::FREE),
        ],
        controls: vec![ControlInfo {
            bounds: Bounds { lo: -1.5, hi: 1.5 },
            guess: Some(0.0),
            scale: 1.0,
        }],
        params: vec![],
        n_integrals: 1,
        dynamics,
        integrands,
        path,
        path_bounds: vec![Bounds { lo: -sway, hi: sway }],
        objective,
        maximize: false,
        boundary,
        boundary_bounds: vec![],
    }
}

fn main() {
    let ocp = crane();
    let settings = OcpSettings { intervals: 60, ..OcpSettings::default() };
    let runs = 9;
    let mut times: Vec<Duration> = Vec::with_capacity(runs);
    let mut last = None;
    // One unmeasured solve first (page faults, caches).
    let _ = solve_ocp(&ocp, &settings, None, None, &mut |_| {});
    for _ in 0..runs {
        let t = Instant::now();
        let sol = solve_ocp(&ocp, &settings, None, None, &mut |_| {}).expect("valid problem");
        times.push(t.elapsed());
        last = Some(sol);
    }
    times.sort();
    let sol = last.expect("at least one run");
    println!(
        "crane_transfer, 60 intervals: median {:.1} ms over {runs} solves (min {:.1}, max {:.1}); \
         {} SQP iterations, status {:?}, end time {:.5} s, objective {:.6}; last solve: \
         evaluation {:.1} ms, QP {:.1} ms, other {:.1} ms",
        times[runs / 2].as_secs_f64() * 1e3,
        times[0].as_secs_f64() * 1e3,
        times[runs - 1].as_secs_f64() * 1e3,
        sol.iterations,
        sol.status,
        sol.trajectory.end_time,
        sol.objective,
        sol.timing.evaluation.as_secs_f64() * 1e3,
        sol.timing.qp.as_secs_f64() * 1e3,
        sol.timing.other.as_secs_f64() * 1e3
    );
}
