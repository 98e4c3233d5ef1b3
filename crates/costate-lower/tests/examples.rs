//! The three examples lowered: sizes, SI bounds, scales, and every function evaluated at a
//! chosen point against a value computed by hand from the file's formulas (independent
//! computation: the formulas below are written from the example text, in SI).

mod support;

use costate_model::{Bounds, EndTime, EndpointLayout, FunctionKind, RunningLayout};
use costate_syntax::ast::Sense;
use support::{assert_close, eval, example, lower, span_of};

#[test]
fn crane_transfer_lowers_to_four_states_one_control_one_integral() {
    let text = example("crane_transfer");
    let l = lower(&text);
    let ocp = &l.ocp;
    assert_eq!(
        (ocp.states.len(), ocp.controls.len(), ocp.params.len(), ocp.n_integrals),
        (4, 1, 0, 1)
    );
    assert_eq!(ocp.dynamics.n_outputs(), 4);
    assert_eq!(ocp.integrands.n_outputs(), 1);
    assert_eq!((ocp.path.n_outputs(), ocp.boundary.n_outputs()), (1, 0));
    assert!(!ocp.maximize);

    // `time t [s]: start 0, end in 1 .. 60 guess 8`
    assert_eq!(ocp.horizon.start, 0.0);
    assert_eq!(ocp.horizon.end, EndTime::Free { bounds: Bounds { lo: 1.0, hi: 60.0 }, guess: 8.0 });

    // `x [m]: start 0, end 12`: free trajectory, fixed ends; scale 12 (largest stated value).
    let x = &ocp.states[0];
    assert_eq!(
        (x.bounds, x.start, x.end, x.guess, x.scale),
        (Bounds::FREE, Bounds::fixed(0.0), Bounds::fixed(12.0), None, 12.0)
    );
    // `v [m/s]: start 0, end 0, in -2 .. 2`
    assert_eq!(ocp.states[1].bounds, Bounds { lo: -2.0, hi: 2.0 });
    assert_eq!(ocp.states[1].scale, 2.0);
    // `theta [rad]: start 0, end 0`: nothing but zeros stated, so scale 1.
    assert_eq!(ocp.states[2].scale, 1.0);
    // `a [m/s^2]: in -1.5 .. 1.5, guess 0`
    let a = &ocp.controls[0];
    assert_eq!((a.bounds, a.guess, a.scale), (Bounds { lo: -1.5, hi: 1.5 }, Some(0.0), 1.5));

    // Running point: t = 2, x = 1, v = 0.5, theta = 0.05, omega = -0.1, a = 0.3.
    let rl = ocp.running_layout();
    let mut z = vec![0.0; rl.len()];
    z[RunningLayout::T] = 2.0;
    z[rl.x(0)] = 1.0;
    z[rl.x(1)] = 0.5;
    z[rl.x(2)] = 0.05;
    z[rl.x(3)] = -0.1;
    z[rl.u(0)] = 0.3;
    let f = eval(&ocp.dynamics, &z);
    assert_eq!(&f[..3], &[0.5, 0.3, -0.1]);
    // omega' = -(g / rope) sin(theta) - (a / rope) cos(theta), g = 9.81, rope = 6.
    assert_close(f[3], -(9.81 / 6.0) * 0.05_f64.sin() - (0.3 / 6.0) * 0.05_f64.cos());
    assert_close(eval(&ocp.integrands, &z)[0], 0.3 * 0.3);
    assert_eq!(eval(&ocp.path, &z), vec![0.05]);
    assert_eq!(ocp.path_bounds, vec![Bounds { lo: -0.08, hi: 0.08 }]);

    // Objective end(t) + 0.05 * q at tf = 9, q = 2: 9.1.
    let el = ocp.endpoint_layout();
    let mut e = vec![0.0; el.len()];
    e[EndpointLayout::TF] = 9.0;
    e[el.q(0)] = 2.0;
    assert_close(eval(&ocp.objective, &e)[0], 9.0 + 0.05 * 2.0);

    let sm = &l.source_map;
    assert_eq!(sm.problem_name, "crane_transfer");
    assert_eq!(sm.problem_span, span_of(&text, "crane_transfer", 0));
    assert_eq!(
        sm.states.iter().map(|s| s.name.as_str()).collect::<Vec<_>>(),
        ["x", "v", "theta", "omega"]
    );
    assert_eq!(sm.cost.sense, Sense::Minimize);
    assert_eq!(sm.cost.expr_span, span_of(&text, "end(t) + 0.05 * integral(a^2)", 0));
    assert_eq!(
        sm.locate(FunctionKind::Dynamics, 3),
        Some((
            span_of(&text, "omega' = pendulum_accel(theta, a)", 0),
            "dynamics of `omega`".to_string()
        ))
    );
    assert_eq!(
        sm.locate(FunctionKind::Path, 0),
        Some((
            span_of(&text, "sway: -sway_max <= theta <= sway_max", 0),
            "path constraint `sway`".to_string()
        ))
    );
    assert_eq!(
        sm.locate(FunctionKind::Integrands, 0),
        Some((span_of(&text, "integral(a^2)", 0), "integrand of `integral(a^2)`".to_string()))
    );
    assert_eq!(l.settings.intervals, 60);
}

#[test]
fn shuttle_eco_drive_converts_kmh_and_kn_to_si() {
    let text = example("shuttle_eco_drive");
    let l = lower(&text);
    let ocp = &l.ocp;
    assert_eq!((ocp.states.len(), ocp.controls.len(), ocp.n_integrals), (2, 1, 1));
    assert_eq!(ocp.horizon.end, EndTime::Fixed(90.0));

    // `v [km/h]: start 0, end 0, in 0 .. 40`: 40 km/h = 40 / 3.6 m/s.
    let v = &ocp.states[1];
    assert_close(v.bounds.hi, 40.0 / 3.6);
    assert_eq!((v.bounds.lo, v.start, v.end), (0.0, Bounds::fixed(0.0), Bounds::fixed(0.0)));
    assert_close(v.scale, 40.0 / 3.6);
    // `s [m]: start 0, end 800`
    assert_eq!(ocp.states[0].end, Bounds::fixed(800.0));
    // `force [kN]: in -6 .. 4, guess 0.5`
    let force = &ocp.controls[0];
    assert_close(force.bounds.lo, -6000.0);
    assert_close(force.bounds.hi, 4000.0);
    assert_close(force.guess.unwrap_or(f64::NAN), 500.0);
    assert_close(force.scale, 6000.0);

    // Point: s = 100 m, v = 10 m/s, force = 1000 N.
    let rl = ocp.running_layout();
    let mut z = vec![0.0; rl.len()];
    z[rl.x(0)] = 100.0;
    z[rl.x(1)] = 10.0;
    z[rl.u(0)] = 1000.0;
    let f = eval(&ocp.dynamics, &z);
    assert_eq!(f[0], 10.0);
    // v' = (force - mass g rolling - drag v^2) / mass with mass 4200 kg, g 9.81, rolling 0.011,
    // drag = 0.5 * 1.2 kg/m^3 * 3.1 m^2 = 1.86 kg/m.
    let drag = 0.5 * 1.2 * 3.1;
    assert_close(f[1], (1000.0 - 4200.0 * 9.81 * 0.011 - drag * 10.0 * 10.0) / 4200.0);
    // Integrand force v + loss force^2 with loss = 5e-4 W/N^2: 10000 + 500 W.
    assert_close(eval(&ocp.integrands, &z)[0], 1000.0 * 10.0 + 5.0e-4 * 1000.0 * 1000.0);
    // comfort_limit: -comfort <= force / mass <= comfort, comfort = 1.2 m/s^2.
    assert_close(eval(&ocp.path, &z)[0], 1000.0 / 4200.0);
    assert_eq!(ocp.path_bounds, vec![Bounds { lo: -1.2, hi: 1.2 }]);
    // The objective is q itself.
    let el = ocp.endpoint_layout();
    let mut e = vec![0.0; el.len()];
    e[el.q(0)] = 123.0;
    assert_eq!(eval(&ocp.objective, &e), vec![123.0]);

    let sm = &l.source_map;
    assert_eq!(sm.states[1].unit.as_deref(), Some("km/h"));
    assert_close(sm.states[1].to_user(10.0), 36.0);
    assert_eq!(sm.controls[0].unit.as_deref(), Some("kN"));
    assert_close(sm.controls[0].to_user(1500.0), 1.5);
    assert_eq!(sm.time.unit.as_deref(), Some("s"));
}

#[test]
fn batch_reactor_is_in_seconds_and_mol_per_cubic_metre_and_maximizes() {
    let text = example("batch_reactor_temperature");
    let l = lower(&text);
    let ocp = &l.ocp;
    assert_eq!((ocp.states.len(), ocp.controls.len(), ocp.n_integrals), (2, 1, 0));
    // `time t [min]: start 0, end 120`: 7200 s.
    assert_eq!(ocp.horizon.start, 0.0);
    match ocp.horizon.end {
        EndTime::Fixed(tf) => assert_close(tf, 7200.0),
        other => panic!("expected a fixed end, found {other:?}"),
    }
    // `cA [mol/L]: start 1.0, end free, guess 0.5`: 1 mol/L = 1000 mol/m^3, no bounds.
    let ca = &ocp.states[0];
    assert_close(ca.start.lo, 1000.0);
    assert!(ca.start.is_fixed());
    assert!(ca.end.is_free());
    assert_eq!(ca.bounds, Bounds { lo: f64::NEG_INFINITY, hi: f64::INFINITY });
    assert_close(ca.guess_at(0.5), 500.0);
    assert_close(ca.scale, 1000.0);
    // `T [K]: in 310 .. 370, guess 340`
    assert_eq!(ocp.controls[0].bounds, Bounds { lo: 310.0, hi: 370.0 });
    assert_eq!(ocp.controls[0].guess, Some(340.0));

    // Dynamics at cA = 800, cB = 100 mol/m^3, T = 350 K, in mol/m^3 per second:
    // rate(k, E, T) = k exp(-E / R (1/T - 1/T_ref)), k1 = 0.04/min = 0.04/60 1/s, k2 = 0.01/60,
    // E1 = 50000, E2 = 80000 J/mol, R = 8.314 J/(mol K), T_ref = 340 K.
    let rl = ocp.running_layout();
    let mut z = vec![0.0; rl.len()];
    z[RunningLayout::T] = 600.0;
    z[rl.x(0)] = 800.0;
    z[rl.x(1)] = 100.0;
    z[rl.u(0)] = 350.0;
    let rate = |k: f64, e: f64| k * (-e / 8.314 * (1.0 / 350.0 - 1.0 / 340.0)).exp();
    let (k1, k2) = (rate(0.04 / 60.0, 50000.0), rate(0.01 / 60.0, 80000.0));
    let f = eval(&ocp.dynamics, &z);
    assert_close(f[0], -k1 * 800.0);
    assert_close(f[1], k1 * 800.0 - k2 * 100.0);

    // maximize end(cB): minimised as -end(cB).
    assert!(ocp.maximize);
    let el = ocp.endpoint_layout();
    let mut e = vec![0.0; el.len()];
    e[el.xf(1)] = 300.0;
    assert_eq!(eval(&ocp.objective, &e), vec![-300.0]);
    assert_eq!(l.source_map.cost.sense, Sense::Maximize);
    assert_eq!(l.source_map.time.unit.as_deref(), Some("min"));
    assert_eq!(l.source_map.time.scale, 60.0);
    assert_eq!(l.settings.intervals, 50);
}
