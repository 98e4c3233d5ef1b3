//! Accuracy of the interval integrators on problems with known solutions: exact discrete maps
//! of linear problems, measured orders of convergence, quadratures, and a stiff problem.

mod integrate_support;

use costate_model::UnaryOp;
use costate_solve::integrate::{ControlShape, Integrator, Method};
use integrate_support::{ode, run, settings, Data};

fn decay_data(x0: f64, k: f64, t_start: f64, h: f64) -> Data {
    Data { x0: vec![x0], u_start: vec![], u_end: vec![], p: vec![k], t_start, h }
}

/// `x' = -k x` with `k = p0`, integrand `x^2`.
fn decay(method: Method, substeps: usize) -> Integrator {
    let (f, l, layout) = ode(
        1,
        0,
        1,
        |b| {
            let (k, x) = (b.p(0), b.x(0));
            let kx = b.mul(k, x);
            vec![b.neg(kx)]
        },
        |b| {
            let x = b.x(0);
            vec![b.mul(x, x)]
        },
    );
    Integrator::new(&f, &l, layout, settings(method, substeps, ControlShape::Constant)).unwrap()
}

/// Stability function of RK4, `R(z) = 1 + z + z^2/2 + z^3/6 + z^4/24` (E. Hairer, G. Wanner,
/// "Solving Ordinary Differential Equations II", 2nd ed., 1996, sec. IV.2).
fn r_rk4(z: f64) -> f64 {
    1.0 + z + z * z / 2.0 + z.powi(3) / 6.0 + z.powi(4) / 24.0
}

/// Stability function of 3-stage Radau IIA: the (2,3)-Padé approximation of `exp`,
/// `(1 + 2z/5 + z^2/20) / (1 - 3z/5 + 3z^2/20 - z^3/60)` (Hairer & Wanner 1996, sec. IV.5,
/// Theorem 5.11 with the Padé table of sec. IV.3).
fn r_radau(z: f64) -> f64 {
    (1.0 + 0.4 * z + z * z / 20.0) / (1.0 - 0.6 * z + 0.15 * z * z - z.powi(3) / 60.0)
}

/// On a linear problem the discrete map is `x0 R(hs λ)^M` exactly; this checks the tableaux
/// and the substep loop to round-off. Tolerance: 1e-13 relative, a few hundred ulps for 8
/// steps of a handful of operations each (and Newton converged to 1e-12 or better; for a
/// linear problem the second iteration already stalls at round-off).
#[test]
fn linear_decay_follows_the_stability_function() {
    let (x0, k, h, m) = (1.7, 2.3, 0.9, 8);
    let z = -k * h / m as f64;
    for (method, r) in [(Method::Rk4, r_rk4(z)), (Method::RadauIIA, r_radau(z))] {
        let mut integ = decay(method, m);
        let out = run(&mut integ, &decay_data(x0, k, 0.4, h), false).unwrap();
        let want = x0 * r.powi(m as i32);
        let rel = (out.x_end[0] - want).abs() / want.abs();
        assert!(rel < 1e-13, "{method:?}: {} vs {want} (rel {rel:e})", out.x_end[0]);
    }
}

/// Against the exact solution `x0 exp(-k h)`: with 20 substeps of `k hs = 0.1`, RK4's global
/// error is about `M (k hs)^5 / 120 ≈ 1.7e-6` relative and Radau IIA's about
/// `M (k hs)^6 / 7200 ≈ 2.8e-9` (leading error terms of the stability functions, independent
/// computation), so 1e-5 and 1e-8 leave a margin but would catch a lower order.
#[test]
fn decay_matches_the_exact_solution() {
    let (x0, k, h, m): (f64, f64, f64, usize) = (3.0, 2.0, 1.0, 20);
    let exact = x0 * (-k * h).exp();
    for (method, tol) in [(Method::Rk4, 1e-5), (Method::RadauIIA, 1e-8)] {
        let mut integ = decay(method, m);
        let out = run(&mut integ, &decay_data(x0, k, -0.3, h), false).unwrap();
        let rel = (out.x_end[0] - exact).abs() / exact;
        assert!(rel < tol, "{method:?}: rel error {rel:e}");
    }
}

/// `Q = ∫ x^2 = x0^2 (1 - exp(-2 k h)) / (2 k)` on the decay problem (closed form, independent
/// computation). The integrand decays at rate `2k`, `2k hs = 0.1`, so the error estimates of
/// `decay_matches_the_exact_solution` apply with M = 40: about 3.3e-6 and 5.6e-9 relative.
#[test]
fn quadrature_of_the_squared_decay() {
    let (x0, k, h, m): (f64, f64, f64, usize) = (1.5, 1.0, 2.0, 40);
    let exact = x0 * x0 * (1.0 - (-2.0 * k * h).exp()) / (2.0 * k);
    for (method, tol) in [(Method::Rk4, 1e-5), (Method::RadauIIA, 1e-8)] {
        let mut integ = decay(method, m);
        let out = run(&mut integ, &decay_data(x0, k, 0.0, h), false).unwrap();
        let rel = (out.q[0] - exact).abs() / exact;
        assert!(rel < tol, "{method:?}: rel error {rel:e}");
    }
}

/// Integrands that are polynomials in `t` and in a linear control are integrated exactly up to
/// the degree of the underlying quadrature: RK4 reduces to Simpson's rule (exact for cubics),
/// 3-stage Radau IIA to the Radau quadrature (exact to degree `2s - 2 = 4`) (Hairer & Wanner
/// 1996, sec. IV.5; Simpson: common knowledge). One step, so nothing hides behind substeps.
/// `∫ u^2` with `u` linear from `a` to `b` is `h (a^2 + a b + b^2) / 3`.
#[test]
fn polynomial_integrands_are_exact_to_the_quadrature_degree() {
    let (ts, h, a, b) = (0.7, 1.3, -0.4, 2.1);
    let t_end: f64 = ts + h;
    for (method, degree) in [(Method::Rk4, 3), (Method::RadauIIA, 4)] {
        let (f, l, layout) = ode(
            1,
            1,
            0,
            |bld| vec![bld.c(0.0)],
            |bld| {
                let (t, u) = (bld.t(), bld.u(0));
                let mut tp = bld.c(1.0);
                for _ in 0..degree {
                    tp = bld.mul(tp, t);
                }
                vec![tp, bld.mul(u, u)]
            },
        );
        let mut integ =
            Integrator::new(&f, &l, layout, settings(method, 1, ControlShape::Linear)).unwrap();
        let data =
            Data { x0: vec![0.0], u_start: vec![a], u_end: vec![b], p: vec![], t_start: ts, h };
        let out = run(&mut integ, &data, false).unwrap();
        let d = degree + 1;
        let want_t = (t_end.powi(d) - ts.powi(d)) / d as f64;
        let want_u = h * (a * a + a * b + b * b) / 3.0;
        // Round-off only: a few ulps of values of order 10.
        assert!((out.q[0] - want_t).abs() < 1e-13 * want_t.abs(), "{method:?} t^{degree}");
        assert!((out.q[1] - want_u).abs() < 1e-13, "{method:?} u^2");
    }
}

/// Global error of one interval for `substeps` steps on three problems with closed-form
/// solutions: the harmonic oscillator, a driven scalar problem with a linear control, and the
/// quadrature of the squared decay.
fn errors(method: Method, substeps: usize) -> [f64; 3] {
    // Harmonic oscillator x1' = x2, x2' = -w^2 x1 with w = p0.
    let (f, l, layout) = ode(
        2,
        0,
        1,
        |b| {
            let (x1, x2, w) = (b.x(0), b.x(1), b.p(0));
            let w2 = b.mul(w, w);
            let a = b.mul(w2, x1);
            vec![x2, b.neg(a)]
        },
        |_| vec![],
    );
    let mut osc =
        Integrator::new(&f, &l, layout, settings(method, substeps, ControlShape::Constant))
            .unwrap();
    let (w, h, ts) = (1.5, 2.0, 0.25);
    let (a0, b0) = (1.0, -0.5);
    let data =
        Data { x0: vec![a0, b0], u_start: vec![], u_end: vec![], p: vec![w], t_start: ts, h };
    let out = run(&mut osc, &data, false).unwrap();
    let x1 = a0 * (w * h).cos() + b0 / w * (w * h).sin();
    let x2 = -a0 * w * (w * h).sin() + b0 * (w * h).cos();
    let e_osc = (out.x_end[0] - x1).hypot(out.x_end[1] - x2);

    // x' = cos(t) - x + u, u linear: exact solution by variation of constants (independent
    // computation): x(t) = e^{-(t-ts)} x0 + ∫ e^{-(t-s)} (cos s + u(s)) ds.
    let (f, l, layout) = ode(
        1,
        1,
        0,
        |b| {
            let (t, x, u) = (b.t(), b.x(0), b.u(0));
            let c = b.un(UnaryOp::Cos, t);
            let d = b.sub(c, x);
            vec![b.add(d, u)]
        },
        |_| vec![],
    );
    let mut driven =
        Integrator::new(&f, &l, layout, settings(method, substeps, ControlShape::Linear)).unwrap();
    let (x0, ua, ub) = (0.3, 1.0, -2.0);
    let data = Data { x0: vec![x0], u_start: vec![ua], u_end: vec![ub], p: vec![], t_start: ts, h };
    let out = run(&mut driven, &data, false).unwrap();
    let te = ts + h;
    let e = (-h).exp();
    // ∫_ts^te e^{-(te-s)} cos s ds = [(cos s + sin s) e^{s-te} / 2]_ts^te
    let cos_part = 0.5 * ((te.cos() + te.sin()) - (ts.cos() + ts.sin()) * e);
    // u(s) = ua + (ub - ua)(s - ts)/h; ∫ e^{-(te-s)} u(s) ds = ub - (ub-ua)/h (1 - e) - ua e
    let slope = (ub - ua) / h;
    let u_part = ub - slope * (1.0 - e) - ua * e;
    let x_exact = x0 * e + cos_part + u_part;
    let e_driven = (out.x_end[0] - x_exact).abs();

    let mut dec = decay(method, substeps);
    let (x0, k) = (1.5, 1.0);
    let out = run(&mut dec, &decay_data(x0, k, 0.0, h), false).unwrap();
    let q_exact = x0 * x0 * (1.0 - (-2.0 * k * h).exp()) / (2.0 * k);
    let e_quad = (out.q[0] - q_exact).abs();
    [e_osc, e_driven, e_quad]
}

/// Measured order `log2(e(M) / e(2M))` on four step sizes. RK4 has order 4 (J. C. Butcher,
/// "Numerical Methods for Ordinary Differential Equations", 2nd ed., 2008, ch. 3), so the error
/// falls ~16x per halving; 3-stage Radau IIA has order 2s - 1 = 5 at step ends (Hairer &
/// Wanner 1996, sec. IV.5, Theorem 5.3), ~32x. Accepted band ±0.35 around the order: the
/// steps (hs from 0.25 to 0.03 for RK4, 0.5 to 0.06 for Radau IIA) are in the asymptotic
/// range but not far into it (measured: 4.04..4.17 and 4.90..5.01), and all errors stay above
/// 1e-11, far from round-off.
#[test]
fn measured_orders_of_convergence() {
    for (method, order, ms) in
        [(Method::Rk4, 4.0, [8, 16, 32, 64]), (Method::RadauIIA, 5.0, [4, 8, 16, 32])]
    {
        let errs: Vec<[f64; 3]> = ms.iter().map(|&m| errors(method, m)).collect();
        for problem in 0..3 {
            for pair in errs.windows(2) {
                let (coarse, fine) = (pair[0][problem], pair[1][problem]);
                assert!(fine > 1e-13, "{method:?} problem {problem}: error {fine:e} at round-off");
                let measured = (coarse / fine).log2();
                assert!(
                    (measured - order).abs() < 0.35,
                    "{method:?} problem {problem}: measured order {measured:.3}, errors {:?}",
                    errs.iter().map(|e| e[problem]).collect::<Vec<_>>()
                );
            }
        }
    }
}

/// `x' = -λ (x - cos t)`, `λ = 1000`, from `x(0) = 0.5` over `[0, 1]` with 10 steps, so
/// `hs λ = 100`. Exact solution (independent computation):
/// `x = A cos t + B sin t + (x0 - A) e^{-λ t}`, `A = λ²/(1+λ²)`, `B = λ/(1+λ²)`.
/// Radau IIA is L-stable (Hairer & Wanner 1996, sec. IV.5): the transient is damped by
/// `|R(-100)|^10 < 1e-15` and the smooth part is followed with the stiff order (stage order 3),
/// so the error at `t = 1` is small (measured 7e-9; 1e-6 asserted). RK4's stability region ends near
/// `hs λ ≈ 2.8`; at 100 its amplification `R(-100) ≈ 4e6` per step blows the solution up.
#[test]
fn stiff_problem_radau_stays_accurate_rk4_explodes() {
    let lambda = 1000.0;
    let (f, l, layout) = ode(
        1,
        0,
        0,
        |b| {
            let (t, x) = (b.t(), b.x(0));
            let c = b.un(UnaryOp::Cos, t);
            let d = b.sub(x, c);
            vec![b.scale(-lambda, d)]
        },
        |_| vec![],
    );
    let a = lambda * lambda / (1.0 + lambda * lambda);
    let bb = lambda / (1.0 + lambda * lambda);
    let x0 = 0.5;
    let exact = a * 1f64.cos() + bb * 1f64.sin() + (x0 - a) * (-lambda).exp();
    let data =
        Data { x0: vec![x0], u_start: vec![], u_end: vec![], p: vec![], t_start: 0.0, h: 1.0 };

    let mut radau =
        Integrator::new(&f, &l, layout, settings(Method::RadauIIA, 10, ControlShape::Constant))
            .unwrap();
    let out = run(&mut radau, &data, true).unwrap();
    let err = (out.x_end[0] - exact).abs();
    assert!(err < 1e-6, "Radau IIA error {err:e}");
    // The sensitivity to x0 is the damped transient: |R(-100)|^10, tiny (see above).
    assert!(out.sensitivities[(0, 0)].abs() < 1e-12);

    let mut rk4 =
        Integrator::new(&f, &l, layout, settings(Method::Rk4, 10, ControlShape::Constant)).unwrap();
    match run(&mut rk4, &data, false) {
        Ok(out) => assert!((out.x_end[0] - exact).abs() > 1e3, "RK4 unexpectedly stable"),
        Err(e) => assert!(e.to_string().contains("not finite"), "unexpected error {e}"),
    }
}
