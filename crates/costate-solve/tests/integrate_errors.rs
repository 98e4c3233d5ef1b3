//! Failures are values, never panics: non-finite evaluations name the function and row,
//! unsolvable implicit stages are reported, bad arguments and settings are refused.

mod integrate_support;

use costate_model::UnaryOp;
use costate_solve::integrate::Method::{self, RadauIIA, Rk4};
use costate_solve::integrate::{
    ControlShape, IntegrationError, Integrator, IntegratorSettings, NewtonFailure, NonFinitePart,
    OdeFunction, SetupError,
};
use integrate_support::{ode, run, settings, Data};

fn scalar(x0: f64, t_start: f64, h: f64) -> Data {
    Data { x0: vec![x0], u_start: vec![], u_end: vec![], p: vec![], t_start, h }
}

/// `x1' = x2`, `x2' = sqrt(x1)`: started at `x1 = -1` the second dynamics row is NaN at the
/// very first evaluation, for both methods and with or without sensitivities; the error names
/// the row, the time and the graph node of the failing `sqrt`.
#[test]
fn sqrt_of_a_negative_state_names_the_dynamics_row() {
    let (f, l, layout) = ode(
        2,
        0,
        0,
        |b| {
            let (x1, x2) = (b.x(0), b.x(1));
            vec![x2, b.un(UnaryOp::Sqrt, x1)]
        },
        |_| vec![],
    );
    let sqrt_node = f.outputs()[1];
    let d = Data {
        x0: vec![-1.0, 0.5],
        u_start: vec![],
        u_end: vec![],
        p: vec![],
        t_start: 2.5,
        h: 1.0,
    };
    for method in [Rk4, RadauIIA] {
        for sens in [false, true] {
            let mut integ =
                Integrator::new(&f, &l, layout, settings(method, 4, ControlShape::Constant))
                    .unwrap();
            let err = run(&mut integ, &d, sens).unwrap_err();
            assert_eq!(
                err,
                IntegrationError::NotFinite {
                    function: OdeFunction::Dynamics,
                    row: 1,
                    time: 2.5,
                    part: NonFinitePart::Value,
                    origin: Some(sqrt_node),
                },
                "{method:?} sens={sens}"
            );
            assert_eq!(err.to_string(), "dynamics row 1 is not finite at t = 2.5");
        }
    }
}

/// `x' = -1` from `x = 0.5` with integrands `[x, log(x)]`: the state reaches 0 at `t = 0.5`
/// into the interval, where the second integrand becomes `-inf`.
#[test]
fn log_of_a_vanishing_state_names_the_integrand_row() {
    let (f, l, layout) = ode(
        1,
        0,
        0,
        |b| vec![b.c(-1.0)],
        |b| {
            let x = b.x(0);
            vec![x, b.un(UnaryOp::Log, x)]
        },
    );
    for method in [Rk4, RadauIIA] {
        let mut integ =
            Integrator::new(&f, &l, layout, settings(method, 4, ControlShape::Constant)).unwrap();
        match run(&mut integ, &scalar(0.5, 0.0, 1.0), true) {
            Err(IntegrationError::NotFinite {
                function: OdeFunction::Integrands,
                row: 1,
                time,
                part: NonFinitePart::Value,
                origin: Some(_),
            }) => assert!(time > 0.25 && time <= 1.0, "{method:?}: time {time}"),
            other => panic!("{method:?}: unexpected {other:?}"),
        }
    }
}

/// `x' = sqrt(x)` at `x = 0` has a finite value but an infinite derivative: values alone are
/// fine with RK4, sensitivities are not (Radau IIA needs the Jacobian for Newton in any case).
#[test]
fn infinite_derivative_is_reported_with_its_input() {
    let (f, l, layout) = ode(
        1,
        0,
        0,
        |b| {
            let x = b.x(0);
            vec![b.un(UnaryOp::Sqrt, x)]
        },
        |_| vec![],
    );
    let want = |time| IntegrationError::NotFinite {
        function: OdeFunction::Dynamics,
        row: 0,
        time,
        part: NonFinitePart::Derivative { input: 1 },
        origin: None,
    };
    let mut rk4 =
        Integrator::new(&f, &l, layout, settings(Rk4, 2, ControlShape::Constant)).unwrap();
    assert_eq!(run(&mut rk4, &scalar(0.0, 1.0, 1.0), false).unwrap().x_end, vec![0.0]);
    assert_eq!(run(&mut rk4, &scalar(0.0, 1.0, 1.0), true), Err(want(1.0)));
    let mut radau =
        Integrator::new(&f, &l, layout, settings(RadauIIA, 2, ControlShape::Constant)).unwrap();
    assert_eq!(run(&mut radau, &scalar(0.0, 1.0, 1.0), false), Err(want(1.0)));
}

fn blow_up() -> (costate_model::Function, costate_model::Function, costate_model::RunningLayout) {
    ode(
        1,
        0,
        0,
        |b| {
            let x = b.x(0);
            vec![b.mul(x, x)]
        },
        |_| vec![],
    )
}

/// `x' = x^2`, `x(0) = 1` blows up at `t = 1` (closed form `1 / (1 - t)`); one Radau IIA step
/// of length 2 across the singularity has stage equations Newton cannot solve from `Z = 0`
/// (observed: the increments stall near 1). The failure is a value naming the step.
#[test]
fn newton_failure_is_reported() {
    let (f, l, layout) = blow_up();
    let mut integ =
        Integrator::new(&f, &l, layout, settings(RadauIIA, 1, ControlShape::Constant)).unwrap();
    match run(&mut integ, &scalar(1.0, 0.0, 2.0), true) {
        Err(IntegrationError::Newton { time, failure: NewtonFailure::NotConverged { .. } }) => {
            assert_eq!(time, 0.0)
        }
        other => panic!("unexpected {other:?}"),
    }
    // Before the singularity the same problem is solved: 1/(1 - 0.5) = 2 to the method's
    // accuracy (one step of 0.5 on a solution with large derivatives: 1e-3 is ample).
    let out = run(&mut integ, &scalar(1.0, 0.0, 0.5), true).unwrap();
    assert!((out.x_end[0] - 2.0).abs() < 1e-3, "{}", out.x_end[0]);
}

/// A single Newton iteration cannot reach the 1e-12 tolerance on a nonlinear problem, so both
/// attempts fail deterministically and the first step (starting at the interval start) is
/// reported.
#[test]
fn iteration_limit_is_reported_with_the_step_time() {
    let (f, l, layout) = blow_up();
    let mut s = settings(RadauIIA, 4, ControlShape::Constant);
    s.newton_max_iterations = 1;
    let mut integ = Integrator::new(&f, &l, layout, s).unwrap();
    // Any first step of x' = x^2 needs more than one iteration; with x0 = 0 the first step is
    // trivially solved (Z = 0 is exact), so feed a state where it is not.
    match run(&mut integ, &scalar(0.3, 1.0, 0.4), false) {
        Err(IntegrationError::Newton {
            time,
            failure: NewtonFailure::NotConverged { iterations: 1, .. },
        }) => assert_eq!(time, 1.0),
        other => panic!("unexpected {other:?}"),
    }
    let mut zero = Integrator::new(&f, &l, layout, s).unwrap();
    assert_eq!(run(&mut zero, &scalar(0.0, 1.0, 0.4), false).unwrap().x_end, vec![0.0]);
}

#[test]
fn wrong_argument_lengths_and_times_are_refused() {
    let (f, l, layout) = ode(
        2,
        1,
        1,
        |b| {
            let (x2, u, p) = (b.x(1), b.u(0), b.p(0));
            vec![x2, b.mul(u, p)]
        },
        |b| vec![b.x(0)],
    );
    let good = Data {
        x0: vec![1.0, 0.0],
        u_start: vec![0.5],
        u_end: vec![0.7],
        p: vec![2.0],
        t_start: 0.0,
        h: 1.0,
    };
    let mut lin = Integrator::new(&f, &l, layout, settings(Rk4, 2, ControlShape::Linear)).unwrap();
    assert!(run(&mut lin, &good, true).is_ok());

    let mut bad = good.clone();
    bad.x0.push(3.0);
    assert_eq!(
        run(&mut lin, &bad, true),
        Err(IntegrationError::Dimension { argument: "x0", expected: 2, found: 3 })
    );
    let mut bad = good.clone();
    bad.u_end.clear();
    assert_eq!(
        run(&mut lin, &bad, true),
        Err(IntegrationError::Dimension { argument: "u_end", expected: 1, found: 0 })
    );
    let mut bad = good.clone();
    bad.h = f64::NAN;
    assert!(matches!(run(&mut lin, &bad, true), Err(IntegrationError::NonFiniteInterval { .. })));

    // An output buffer made for another control shape has the wrong number of columns.
    let cst = Integrator::new(&f, &l, layout, settings(Rk4, 2, ControlShape::Constant)).unwrap();
    let mut foreign = cst.new_output();
    assert_eq!(
        lin.integrate(&good.input(), &mut foreign, true),
        Err(IntegrationError::Dimension {
            argument: "out.sensitivities columns",
            expected: 7,
            found: 6
        })
    );
}

#[test]
fn invalid_settings_and_function_shapes_are_refused() {
    let (f, l, layout) = blow_up();
    let base = IntegratorSettings::default();
    let cases: [(IntegratorSettings, &str); 4] = [
        (IntegratorSettings { substeps: 0, ..base }, "substeps"),
        (IntegratorSettings { newton_tolerance: 0.0, ..base }, "newton_tolerance"),
        (IntegratorSettings { newton_tolerance: f64::NAN, ..base }, "newton_tolerance"),
        (IntegratorSettings { newton_max_iterations: 0, ..base }, "newton_max_iterations"),
    ];
    for (s, field) in cases {
        match Integrator::new(&f, &l, layout, s) {
            Err(SetupError::InvalidSetting { name, .. }) => assert_eq!(name, field),
            other => panic!("{field}: unexpected {other:?}"),
        }
    }
    assert_eq!(base.validate(), Ok(()));
    assert_eq!(
        (base.method, base.substeps, base.controls),
        (Method::Rk4, 4, ControlShape::Constant)
    );

    // Dynamics with two outputs for one state.
    let (f2, l2, _) = ode(1, 0, 0, |b| vec![b.x(0), b.c(1.0)], |_| vec![]);
    match Integrator::new(&f2, &l2, layout, base) {
        Err(e @ SetupError::FunctionShape { function: OdeFunction::Dynamics, .. }) => {
            assert_eq!(
                e.to_string(),
                "dynamics function has 2 inputs and 2 outputs, expected 2 inputs and 1 outputs"
            )
        }
        other => panic!("unexpected {other:?}"),
    }
}
