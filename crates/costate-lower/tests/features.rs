//! Lowering features on small problems of our own: integrals and their sharing, an
//! isoperimetric boundary, parameters, inlining, bare numbers and literal units, row splitting,
//! expectations, the free-end defaults and the source map. Expected values are independent
//! computations from the formulas in each source, in SI.

mod support;

use costate_lower::{ExpectTolerance, Target};
use costate_model::{Bounds, EndTime, EndpointLayout, FunctionKind, RunningLayout};
use support::{assert_close, eval, lower, span_of};

const ISOPERIMETRIC: &str = "problem hanging_chain
time s [m]: start 0, end 2
param {
  k [1/m]: in 0 .. 5, guess 1
}
state {
  y [m]: start 1, end 1
}
control {
  w [1]: in -3 .. 3
}
dynamics {
  y' = w
}
cost {
  minimize integral(y * sqrt(1 + w^2)) + 0.5 * integral(w^2) + 0.1 * k^2
}
boundary {
  length: integral(sqrt(1 + w^2)) == 3
  integral(w^2) <= 4 [m]
  end(y) - start(y) + k * end(s)^2 >= 0
}
";

#[test]
fn integrals_in_cost_and_boundary_become_q_inputs_and_identical_integrands_share_one() {
    let l = lower(ISOPERIMETRIC);
    let ocp = &l.ocp;
    // integral(y sqrt(1+w^2)), integral(w^2) (cost and second boundary row), integral(sqrt(1+w^2)).
    assert_eq!(ocp.n_integrals, 3);
    assert_eq!(l.source_map.integrals.len(), 3);
    assert_eq!(
        l.source_map.integrals[1].occurrences,
        vec![
            span_of(ISOPERIMETRIC, "integral(w^2)", 0),
            span_of(ISOPERIMETRIC, "integral(w^2)", 1)
        ]
    );

    let rl = ocp.running_layout();
    let mut z = vec![0.0; rl.len()];
    z[rl.x(0)] = 0.7;
    z[rl.u(0)] = 0.4;
    z[rl.p(0)] = 2.0;
    let q = eval(&ocp.integrands, &z);
    let arc = (1.0_f64 + 0.4 * 0.4).sqrt();
    assert_close(q[0], 0.7 * arc);
    assert_close(q[1], 0.4 * 0.4);
    assert_close(q[2], arc);

    // Endpoint point: t0 = 0, tf = 2, y0 = 1, yf = 1.5, k = 2, q = (10, 20, 30).
    let el = ocp.endpoint_layout();
    assert_eq!(el.len(), 2 + 2 + 1 + 3);
    let mut e = vec![0.0; el.len()];
    e[EndpointLayout::TF] = 2.0;
    e[el.x0(0)] = 1.0;
    e[el.xf(0)] = 1.5;
    e[el.p(0)] = 2.0;
    e[el.q(0)] = 10.0;
    e[el.q(1)] = 20.0;
    e[el.q(2)] = 30.0;
    // cost q0 + 0.5 q1 + 0.1 k^2
    assert_close(eval(&ocp.objective, &e)[0], 10.0 + 0.5 * 20.0 + 0.1 * 4.0);
    // rows: q2 == 3; q1 <= 4; yf - y0 + k tf^2 >= 0
    let b = eval(&ocp.boundary, &e);
    assert_close(b[0], 30.0);
    assert_close(b[1], 20.0);
    assert_close(b[2], 1.5 - 1.0 + 2.0 * 2.0 * 2.0);
    assert_eq!(
        ocp.boundary_bounds,
        vec![
            Bounds::fixed(3.0),
            Bounds { lo: f64::NEG_INFINITY, hi: 4.0 },
            Bounds { lo: 0.0, hi: f64::INFINITY }
        ]
    );

    // Parameters: bounds and guess, SI (1/m is SI).
    assert_eq!(ocp.params.len(), 1);
    assert_eq!(
        (ocp.params[0].bounds, ocp.params[0].guess, ocp.params[0].scale),
        (Bounds { lo: 0.0, hi: 5.0 }, Some(1.0), 5.0)
    );
    assert_eq!(l.source_map.params[0].name, "k");

    let sm = &l.source_map;
    assert_eq!(
        sm.locate(FunctionKind::Boundary, 0),
        Some((
            span_of(ISOPERIMETRIC, "length: integral(sqrt(1 + w^2)) == 3", 0),
            "boundary constraint `length`".to_string()
        ))
    );
    assert_eq!(
        sm.locate(FunctionKind::Boundary, 2).map(|(_, d)| d),
        Some("boundary constraint `end(y) - start(y) + k * end(s)^2 >= 0`".to_string())
    );
    assert_eq!(sm.locate(FunctionKind::Boundary, 3), None);
    assert_eq!(sm.row_count(FunctionKind::Integrands), 3);
    assert_eq!(sm.time.name, "s");
}

const UNITS: &str = "problem units_and_rows
time t [h]: start 0, end free
state {
  x [km]: start 0, end 12, in 0 .. 20
  y [km]: start 0
}
control {
  u [km/h]: in -30 .. 30, guess 5
}
fn twice(a) = 2 * a
fn quad(a, b) = twice(a) * b + twice(a)
dynamics {
  x' = u + 1
  y' = quad(u, 3) + 2 [km/h]
}
cost {
  minimize end(t)
}
path {
  x <= 15
  wide: y - 1 <= x <= y + 2
}
expect {
  end(x) == 12 within 0.5
  end(t) == 30 [min] within 10%
  cost == 2000 within 1%
}
";

#[test]
fn bare_numbers_adapt_literal_units_convert_and_functions_inline() {
    let l = lower(UNITS);
    let ocp = &l.ocp;
    let rl = ocp.running_layout();
    let mut z = vec![0.0; rl.len()];
    z[RunningLayout::T] = 100.0;
    z[rl.x(0)] = 3000.0;
    z[rl.x(1)] = 2500.0;
    z[rl.u(0)] = 5.0; // m/s
    let f = eval(&ocp.dynamics, &z);
    // x' = u + 1 km/h (the bare 1 adapts to u's unit) in m/s.
    assert_close(f[0], 5.0 + 1.0 / 3.6);
    // y' = quad(u, 3) + 2 km/h = (2u * 3 + 2u) + 2/3.6; arguments enter functions in SI.
    assert_close(f[1], 2.0 * 5.0 * 3.0 + 2.0 * 5.0 + 2.0 / 3.6);

    // `x <= 15` with x [km]: one row on x, bound 15 km. `y - 1 <= x <= y + 2`: two rows.
    let p = eval(&ocp.path, &z);
    assert_eq!(p.len(), 3);
    assert_close(p[0], 3000.0);
    assert_eq!(ocp.path_bounds[0], Bounds { lo: f64::NEG_INFINITY, hi: 15000.0 });
    // y - 1 km - x <= 0 and x - (y + 2 km) <= 0
    assert_close(p[1], 2500.0 - 1000.0 - 3000.0);
    assert_close(p[2], 3000.0 - (2500.0 + 2000.0));
    assert_eq!(ocp.path_bounds[1], Bounds { lo: f64::NEG_INFINITY, hi: 0.0 });
    let sm = &l.source_map;
    assert_eq!(
        sm.locate(FunctionKind::Path, 0).map(|(_, d)| d),
        Some("path constraint `x <= 15`".to_string())
    );
    assert_eq!(
        sm.locate(FunctionKind::Path, 2).map(|(_, d)| d),
        Some("path constraint `wide`, row 2 of 2".to_string())
    );
    assert_eq!(sm.path[1].label.as_deref(), Some("wide"));

    // `end free` on `time t [h]` with no bounds: [start, inf), guess one hour past the start.
    assert_eq!(
        ocp.horizon.end,
        EndTime::Free { bounds: Bounds { lo: 0.0, hi: f64::INFINITY }, guess: 3600.0 }
    );
    // States and controls in SI.
    assert_eq!(ocp.states[0].bounds, Bounds { lo: 0.0, hi: 20000.0 });
    assert_eq!(ocp.states[0].end, Bounds::fixed(12000.0));
    assert_eq!(ocp.states[0].scale, 20000.0);
    assert!(ocp.states[1].end.is_free());
    assert_close(ocp.controls[0].guess.unwrap_or(f64::NAN), 5.0 / 3.6);
}

#[test]
fn expectations_are_si_with_the_users_unit_for_reports() {
    let l = lower(UNITS);
    let x = &l.expectations;
    assert_eq!(x.len(), 3);

    // `end(x) == 12 within 0.5`: km.
    assert_eq!(x[0].text, "end(x)");
    assert_eq!(x[0].value_si, 12000.0);
    assert_eq!(x[0].tolerance, ExpectTolerance::Absolute(500.0));
    assert_eq!((x[0].display_scale, x[0].unit.as_deref()), (1000.0, Some("km")));
    assert_eq!(x[0].target_span, span_of(UNITS, "end(x)", 0));
    let el = l.ocp.endpoint_layout();
    let mut e = vec![0.0; el.len()];
    e[el.xf(0)] = 11800.0;
    e[EndpointLayout::TF] = 1500.0;
    match &x[0].target {
        Target::Expr(f) => assert_eq!(eval(f, &e), vec![11800.0]),
        Target::Cost => panic!("expected an expression target"),
    }
    assert!(x[0].tolerance.holds(x[0].value_si, 11800.0));
    assert!(!x[0].tolerance.holds(x[0].value_si, 11400.0));

    // `end(t) == 30 [min] within 10%`: 1800 s, relative 0.1, reported in hours.
    assert_close(x[1].value_si, 1800.0);
    assert_eq!(x[1].tolerance, ExpectTolerance::Relative(0.1));
    assert_eq!((x[1].display_scale, x[1].unit.as_deref()), (3600.0, Some("h")));
    match &x[1].target {
        Target::Expr(f) => assert_eq!(eval(f, &e), vec![1500.0]),
        Target::Cost => panic!("expected an expression target"),
    }

    // `cost == 2000 within 1%`: the cost is end(t), in SI seconds.
    assert!(matches!(x[2].target, Target::Cost));
    assert_eq!((x[2].value_si, x[2].tolerance), (2000.0, ExpectTolerance::Relative(0.01)));
    assert_eq!(
        (x[2].display_scale, x[2].unit.as_deref(), x[2].text.as_str()),
        (1.0, Some("s"), "cost")
    );
}

#[test]
fn repeated_calls_of_a_user_function_share_one_node() {
    let text = "problem shared
time t [s]: start 0, end 1
state {
  a: start 0
  b: start 0
}
control { u }
fn bump(z) = exp(-z^2) * cos(z)
dynamics {
  a' = bump(u)
  b' = bump(u)
}
cost { minimize integral(bump(u)) + integral(exp(-u^2) * cos(u)) }
";
    let l = lower(text);
    let out = l.ocp.dynamics.outputs();
    assert_eq!(out[0], out[1], "both equations call bump(u): one node");
    // The integrand written out by hand is the same node as the call, so it shares one q.
    assert_eq!(l.ocp.n_integrals, 1);
    let rl = l.ocp.running_layout();
    let mut z = vec![0.0; rl.len()];
    z[rl.u(0)] = 0.5;
    let v = (-0.25_f64).exp() * 0.5_f64.cos();
    assert_eq!(eval(&l.ocp.dynamics, &z), vec![v, v]);
    // No unit declared anywhere: everything is taken as SI, scale 1.
    assert_eq!((l.source_map.states[0].unit.clone(), l.source_map.states[0].scale), (None, 1.0));
}

#[test]
fn maximize_negates_the_objective_and_keeps_the_sense_for_reports() {
    let text = "problem farthest
time t [s]: start 0, end 10
state { x [m]: start 0 }
control { v [m/s]: in 0 .. 3 }
dynamics { x' = v }
cost { maximize end(x) - 0.1 * integral(v^2) }
expect { cost == 25 within 1 }
";
    let l = lower(text);
    assert!(l.ocp.maximize);
    let el = l.ocp.endpoint_layout();
    let mut e = vec![0.0; el.len()];
    e[el.xf(0)] = 30.0;
    e[el.q(0)] = 50.0;
    // -(end(x) - 0.1 q) = -(30 - 5)
    assert_close(eval(&l.ocp.objective, &e)[0], -25.0);
    assert_eq!(
        l.source_map.locate(FunctionKind::Objective, 0).map(|(_, d)| d),
        Some("cost `maximize end(x) - 0.1 * integral(v^2)`".to_string())
    );
    assert_eq!(l.source_map.locate(FunctionKind::Objective, 1), None);
    // The expectation compares the user's (unnegated) cost.
    assert_eq!(l.expectations[0].tolerance, ExpectTolerance::Absolute(1.0));
    assert_eq!(l.expectations[0].value_si, 25.0);
}

#[test]
fn free_end_guess_defaults_follow_the_bounds() {
    let with = |end: &str| {
        let text = format!(
            "problem h\ntime t [min]: start 2, {end}\nstate {{ x: start 0 }}\ncontrol {{ u: in -1 .. 1 }}\ndynamics {{ x' = u }}\ncost {{ minimize end(t) }}\n"
        );
        lower(&text).ocp.horizon
    };
    let free = |h: costate_model::Horizon| match h.end {
        EndTime::Free { bounds, guess } => (bounds.lo, bounds.hi, guess),
        EndTime::Fixed(t) => panic!("expected a free end, found fixed {t}"),
    };
    // start 2 min = 120 s.
    assert_eq!(with("end 5").end, EndTime::Fixed(300.0));
    assert_eq!(with("end 5").start, 120.0);
    // both bounds: midpoint of 4 .. 10 min
    assert_eq!(free(with("end in 4 .. 10")), (240.0, 600.0, 420.0));
    // the user's guess wins
    assert_eq!(free(with("end in 4 .. 10 guess 9")), (240.0, 600.0, 540.0));
    // lower bound only: as far past it as it is past the start
    assert_eq!(free(with("end in 4 ..")), (240.0, f64::INFINITY, 360.0));
    // upper bound only: the lower bound becomes the start; midpoint of start and bound
    assert_eq!(free(with("end in .. 10")), (120.0, 600.0, 360.0));
}
