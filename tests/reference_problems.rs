//! The reference problems of REFERENCES.md, solved end to end through the `costate` binary.
//!
//! Owns the suite over `tests/fixtures/references/*.costate`: every fixture checks clean, every
//! fixture's `expect` block holds under `costate test`, a finer mesh moves two optima toward
//! their references, the particle's steering follows the linear tangent law, the LQR costate
//! estimates follow the Riccati solution and Goddard's rocket also solves on a mesh twice as
//! fine as its file's. The reference values and their sources live in the fixtures (beside
//! each expectation) and beside the constants here; nothing in this file may be tuned to what
//! our solver happens to produce. It does not touch the CLI's code.

use std::path::{Path, PathBuf};

mod run;
use run::{costate, repo, stem, text};

use serde_json::Value;

const FIXTURES: &str = "tests/fixtures/references";

/// Fixtures our SQP does not yet solve to its tolerance within its iteration limit. They are
/// kept in the suite, unweakened: the test below requires them to keep failing, so whoever
/// makes one pass must take it off this list. Empty since the exact Lagrangian Hessian through
/// RK4 (Goddard's rocket and catalyst mixing end "solved to reduced accuracy": their singular
/// arcs keep the stationarity residual between 1e-6 and 1e-3).
const NOT_YET_SOLVED: &[&str] = &[];

/// Every fixture, as a path relative to the repository root, sorted.
fn fixtures() -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(repo().join(FIXTURES))
        .expect("the reference fixture folder exists")
        .map(|e| e.expect("a readable folder entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "costate"))
        .map(|p| format!("{FIXTURES}/{}", p.file_name().unwrap().to_string_lossy()))
        .collect();
    v.sort();
    // REFERENCES.md items 1-10 with four LQR and three double-integrator cases.
    assert!(v.len() >= 15, "expected the 15 reference fixtures, found {}: {v:?}", v.len());
    v
}

/// A fresh scratch folder for solution files, unique to this process and test.
fn temp_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("costate-ref-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("a scratch folder can be made");
    dir
}

/// `costate solve FILE --intervals N --format json --quiet --out DIR`, parsed; panics with the
/// command's output when it does not report a solved problem.
/// `costate solve --format json`, asserting that it solved.
fn solve_json(file: &str, intervals: usize, scratch: &Path) -> Value {
    let (doc, solved, message) = try_solve_json(file, intervals, scratch);
    assert!(solved, "{message}");
    doc
}

/// `costate solve --format json`: the summary, whether it solved, and what to say if not.
fn try_solve_json(file: &str, intervals: usize, scratch: &Path) -> (Value, bool, String) {
    let n = intervals.to_string();
    let out_dir = scratch.to_string_lossy().into_owned();
    let args = ["solve", file, "--intervals", &n, "--format", "json", "--quiet", "--out", &out_dir];
    let out = costate(&args);
    let stdout = text(&out.stdout);
    let doc: Value = serde_json::from_str(&stdout).unwrap_or_else(|e| {
        panic!(
            "`costate {}` printed no JSON summary ({e}):\n{stdout}\n{}",
            args.join(" "),
            text(&out.stderr)
        )
    });
    let solved = doc["solved"].as_bool().unwrap_or_else(|| {
        matches!(doc["status"].as_str(), Some(s) if s.contains("solved") || s.contains("optimal"))
    });
    let message = format!(
        "`costate {}` did not solve (exit {:?}, status {}):\n{}",
        args.join(" "),
        out.status.code(),
        doc["status"],
        text(&out.stderr)
    );
    (doc, out.status.success() && solved, message)
}

fn cost(doc: &Value) -> f64 {
    doc["cost"].as_f64().unwrap_or_else(|| panic!("no numeric `cost` in the summary: {doc}"))
}

fn numbers(v: &Value, what: &str) -> Vec<f64> {
    v.as_array()
        .unwrap_or_else(|| panic!("`{what}` is not an array"))
        .iter()
        .map(|x| x.as_f64().unwrap_or_else(|| panic!("`{what}` holds a non-number: {x}")))
        .collect()
}

/// The entry named `name` of the summary's list `list` (`states`, `controls`).
fn entry<'a>(doc: &'a Value, list: &str, name: &str) -> &'a Value {
    doc[list]
        .as_array()
        .and_then(|a| a.iter().find(|e| e["name"] == name))
        .unwrap_or_else(|| panic!("no `{name}` in `{list}` of the summary"))
}

#[test]
fn every_reference_fixture_checks_clean() {
    let files = fixtures();
    let mut args = vec!["check"];
    args.extend(files.iter().map(String::as_str));
    let out = costate(&args);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", text(&out.stderr));
    // Zero warnings too: every fixture is written in a smooth form.
    let clean = format!("0 errors, 0 warnings in {} files", files.len());
    assert!(stdout.contains(&clean), "expected `{clean}`:\n{stdout}{}", text(&out.stderr));
}

/// Each fixture's `expect` block, through `costate test`. All fixtures run; the failures are
/// reported together so one hard problem does not hide the state of the others.
#[test]
fn every_reference_fixture_meets_its_expectations() {
    let mut failures = Vec::new();
    for file in fixtures() {
        let out = costate(&["test", &file]);
        let known = NOT_YET_SOLVED.contains(&stem(&file));
        if known && out.status.code() == Some(1) {
            continue;
        }
        if known && out.status.code() == Some(0) {
            failures.push(format!("--- {file} now passes: take it off NOT_YET_SOLVED"));
            continue;
        }
        if out.status.code() != Some(0) {
            failures.push(format!(
                "--- {file}: exit {:?}\n{}{}",
                out.status.code(),
                text(&out.stdout),
                text(&out.stderr)
            ));
        }
    }
    assert!(
        failures.is_empty(),
        "{} reference fixture(s) failed:\n{}",
        failures.len(),
        failures.join("\n")
    );
}

/// REFERENCES.md asks, for at least two problems, that a finer mesh move the optimum toward
/// the reference. The coarse meshes divide the fine ones, and the coarse error is well above
/// the fixture's tolerance (independent computation, SciPy L-BFGS-B on piecewise-constant
/// controls with RK4: catalyst mixing -0.0480498400 at 25 intervals, -0.0480556681 at 200;
/// LQR a = 1: 0.8460142658 at 10 intervals, 0.8447618386 at 100).
#[test]
fn a_finer_mesh_moves_the_optimum_toward_the_reference() {
    let cases: [(&str, f64, usize, usize); 2] = [
        // Riccati closed form, Anderson & Moore, "Optimal Control: Linear Quadratic Methods",
        // 1990, ch. 2, evaluated in REFERENCES.md item 6 for a = 0. (Catalyst mixing, the
        // other case REFERENCES.md suggests, joins once it leaves NOT_YET_SOLVED; independent
        // computation for it: -0.0480498400 at 25 intervals, -0.0480556681 at 200.)
        ("scalar_lqr_a0", 0.3807970780, 10, 100),
        // Riccati closed form, Anderson & Moore, "Optimal Control: Linear Quadratic Methods",
        // 1990, ch. 2, evaluated in REFERENCES.md item 6 for a = 1.
        ("scalar_lqr_a1", 0.8447491958, 10, 100),
    ];
    let mut failures = Vec::new();
    for (name, reference, coarse, fine) in cases {
        let file = format!("{FIXTURES}/{name}.costate");
        let scratch = temp_dir(name);
        let coarse_cost = cost(&solve_json(&file, coarse, &scratch));
        let fine_cost = cost(&solve_json(&file, fine, &scratch));
        let (e_coarse, e_fine) = ((coarse_cost - reference).abs(), (fine_cost - reference).abs());
        // A NaN error counts as not improving.
        let improves = e_fine < e_coarse;
        if !improves {
            failures.push(format!(
                "{name}: {coarse} intervals give {coarse_cost} (error {e_coarse:.3e}), {fine} give \
                 {fine_cost} (error {e_fine:.3e}); reference {reference}"
            ));
        }
        let _ = std::fs::remove_dir_all(&scratch);
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

/// REFERENCES.md item 2: the optimal steering obeys the linear tangent law (Bryson & Ho,
/// "Applied Optimal Control", 1975, ch. 2), [C] tan(u) = 1.40850836 - 5.07963332 t
/// (independent computation), within 1e-2 rad. A piecewise-constant control holds one value
/// per interval, which approximates the law at the interval's middle (at the node the slope
/// of u, up to 5 rad per time unit, would alone cost 0.014 rad at 100 intervals); a
/// piecewise-linear control is compared at the nodes.
#[test]
fn particle_steering_follows_the_linear_tangent_law() {
    let scratch = temp_dir("particle_steering");
    let (doc, solved, _) =
        try_solve_json(&format!("{FIXTURES}/particle_steering.costate"), 100, &scratch);
    let _ = std::fs::remove_dir_all(&scratch);
    if !solved {
        // The shape can only be judged on a solution; while the solve stalls, the fixture must
        // be listed as not yet solved (checked here so the list cannot silently go stale).
        assert!(
            NOT_YET_SOLVED.contains(&"particle_steering"),
            "particle steering: {}",
            doc["status"]
        );
        return;
    }
    let times = numbers(&doc["time"]["values"], "time.values");
    let u = numbers(&entry(&doc, "controls", "u")["values"], "controls.u.values");
    let law = |t: f64| (1.40850836 - 5.07963332 * t).atan();
    let linear = doc["settings"]["control_shape"] == "linear";
    let n = times.len() - 1;
    assert!(u.len() >= n, "{} control values for {n} intervals", u.len());
    let mut worst = (0.0_f64, 0.0_f64);
    for k in 0..n {
        let t = if linear { times[k] } else { 0.5 * (times[k] + times[k + 1]) };
        let err = (u[k] - law(t)).abs();
        if err > worst.0 {
            worst = (err, t);
        }
    }
    assert!(
        worst.0 <= 1e-2,
        "steering departs from the linear tangent law by {:.4} rad at t = {:.4}",
        worst.0,
        worst.1
    );
}

/// REFERENCES.md item 6: the exact costate of the LQR is p(t) x(t). For the terminal case
/// (a = 0, b = q = r = 1, s = 2, T = 1) p(t) = coth(1 - t + ln(3) / 2) (derivation and
/// independent computation in tests/fixtures/references/scalar_lqr_terminal.costate). The
/// solver's estimates are derivatives of the discretised cost, so they agree up to the
/// discretisation error; 1e-3 of the costate's size at 100 intervals is our tolerance.
#[test]
fn lqr_costate_estimates_follow_the_riccati_solution() {
    let scratch = temp_dir("scalar_lqr_terminal");
    let doc = solve_json(&format!("{FIXTURES}/scalar_lqr_terminal.costate"), 100, &scratch);
    let _ = std::fs::remove_dir_all(&scratch);
    let times = numbers(&doc["time"]["values"], "time.values");
    let x = entry(&doc, "states", "x");
    let xs = numbers(&x["values"], "states.x.values");
    let lambda = numbers(&x["costate"], "states.x.costate");
    assert_eq!(lambda.len(), times.len(), "one costate estimate per node");
    let p = |t: f64| 1.0 / (1.0 - t + 0.5 * 3.0_f64.ln()).tanh();
    let exact: Vec<f64> = times.iter().zip(&xs).map(|(&t, &x)| p(t) * x).collect();
    let size = exact.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let mut worst = (0.0_f64, 0usize);
    for (k, (l, e)) in lambda.iter().zip(&exact).enumerate() {
        let err = (l - e).abs();
        if err > worst.0 {
            worst = (err, k);
        }
    }
    let k = worst.1;
    assert!(
        worst.0 <= 1e-3 * size,
        "costate estimate {} at node {k} (t = {}) differs from p(t) x(t) = {} by {:.3e}",
        lambda[k],
        times[k],
        exact[k],
        worst.0
    );
}

/// Goddard's rocket on a finer mesh than its file's: at 200 intervals it must be solved (not
/// reduced accuracy) in at most 50 iterations, at the published optimum. Its first step
/// needs the chain convexification with a raise of about 2 on the singular arc; the blocks
/// made convex one by one instead ran to the iteration limit (500) when this test was
/// written. Reference: E. D. Dolan, J. J. More, T. S. Munson, "Benchmarking Optimization
/// Software with COPS 3.0", ANL/MCS-TM-273, 2004, sec. 10: final height 1.01283 for
/// nh = 400 .. 1600 (the fixture's tolerance, 2e-4 relative).
#[test]
fn goddard_rocket_solves_at_200_intervals() {
    let file = format!("{FIXTURES}/goddard_rocket.costate");
    let scratch = temp_dir("goddard-200");
    let doc = solve_json(&file, 200, &scratch);
    let _ = std::fs::remove_dir_all(&scratch);
    assert_eq!(doc["status"].as_str(), Some("solved"), "{doc}");
    let iterations = doc["iterations"].as_u64().unwrap_or(u64::MAX);
    assert!(iterations <= 50, "{iterations} iterations");
    let height = cost(&doc);
    assert!((height - 1.01283).abs() <= 2e-4 * 1.01283, "final height {height}");
}
