//! The hard problems of `tests/fixtures/hard/`: problems of the kinds practitioners bring
//! (invented scenarios, independent references in `tests/fixtures/hard/reference/`), solved end
//! to end through the `costate` binary at 50 and 200 intervals from their default guesses.
//!
//! Owns the suite over those fixtures. Each fixture's first line states its expected status
//! (`// expected status: solved` or `// expected status: locally infeasible`). The target:
//! a feasible one solved in at most [`ITERATION_TARGET`] iterations at both meshes and its
//! `expect` block met (at the file's own intervals); an infeasible one called locally
//! infeasible, never solved. Cases that miss the target today are listed in [`NOT_YET_MET`],
//! unweakened: the test requires them to keep missing it, so whoever makes one pass must take
//! it off the list. Nothing here may be tuned to what our solver happens to produce.

mod run;
use run::{costate, repo, stem, text};

use serde_json::Value;

const FIXTURES: &str = "tests/fixtures/hard";

/// The most SQP iterations a feasible hard problem may take at each mesh.
const ITERATION_TARGET: u64 = 50;

/// The meshes every hard problem is solved at.
const MESHES: [usize; 2] = [50, 200];

/// Cases that miss the target today: (fixture stem, intervals), where intervals 0 stands for
/// the fixture's `expect` block at its own intervals. Measured when the list was written:
/// - cart-pole swing-up: elastic mode to the iteration limit at both meshes (violation about
///   0.05: the steering never raises the penalty enough);
/// - two-link arm: reaches its reference cost by iteration 70, then the line search cuts every
///   step to 1/512 with stationarity near 7e-3, to the iteration limit at both meshes;
/// - free-flying robot: solved at 50 intervals, but at a local optimum 4.6% above the best
///   known (5.342 against 5.105 N s); at 200 it finds the reference;
/// - river launch: the iteration limit at 50 intervals (cost 249 s against 237.18 s); solved
///   in 53 iterations at 200;
/// - stiff reactor (Radau, so block BFGS): a false "locally infeasible" at 50 intervals, the
///   iteration limit at 200;
/// - lander short of propellant: stalled at both meshes instead of locally infeasible (stuck
///   in elastic mode, the violation not stationary to the test's tolerance).
const NOT_YET_MET: &[(&str, usize)] = &[
    ("cart_pole_swing_up", 0),
    ("cart_pole_swing_up", 50),
    ("cart_pole_swing_up", 200),
    ("free_flying_robot_min_fuel", 0),
    ("lunar_landing_short_of_propellant", 50),
    ("lunar_landing_short_of_propellant", 200),
    ("river_launch_upstream_min_time", 0),
    ("river_launch_upstream_min_time", 50),
    ("river_launch_upstream_min_time", 200),
    ("stiff_reactor_temperature", 0),
    ("stiff_reactor_temperature", 50),
    ("stiff_reactor_temperature", 200),
    ("two_link_arm_min_time", 0),
    ("two_link_arm_min_time", 50),
    ("two_link_arm_min_time", 200),
];

/// Every fixture with its expected status, sorted by path.
fn fixtures() -> Vec<(String, Expected)> {
    let mut v: Vec<(String, Expected)> = std::fs::read_dir(repo().join(FIXTURES))
        .expect("the hard fixture folder exists")
        .map(|e| e.expect("a readable folder entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "costate"))
        .map(|p| {
            let source = std::fs::read_to_string(&p).expect("a readable fixture");
            let first = source.lines().next().unwrap_or_default();
            let expected = match first.trim() {
                "// expected status: solved" => Expected::Solved,
                "// expected status: locally infeasible" => Expected::Infeasible,
                other => {
                    panic!("{}: first line must state the expected status: {other}", p.display())
                }
            };
            (format!("{FIXTURES}/{}", p.file_name().unwrap().to_string_lossy()), expected)
        })
        .collect();
    v.sort();
    v
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
enum Expected {
    Solved,
    Infeasible,
}

/// `costate solve FILE --intervals N --format json --quiet`: (status, iterations).
fn solve(file: &str, intervals: usize) -> (String, u64) {
    let dir = std::env::temp_dir().join(format!(
        "costate-hard-{}-{intervals}-{}",
        stem(file),
        std::process::id()
    ));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("a scratch folder can be made");
    let n = intervals.to_string();
    let out_dir = dir.to_string_lossy().into_owned();
    let args = ["solve", file, "--intervals", &n, "--format", "json", "--quiet", "--out", &out_dir];
    let out = costate(&args);
    let stdout = text(&out.stdout);
    let doc: Value = serde_json::from_str(&stdout).unwrap_or_else(|e| {
        panic!(
            "`costate {}` printed no JSON summary ({e}):\n{stdout}{}",
            args.join(" "),
            text(&out.stderr)
        )
    });
    let _ = std::fs::remove_dir_all(&dir);
    let status = doc["status"].as_str().unwrap_or("no status").to_string();
    (status, doc["iterations"].as_u64().unwrap_or(u64::MAX))
}

/// Whether the case meets its target, and what happened.
fn outcome(file: &str, expected: Expected, intervals: usize) -> (bool, String) {
    let (status, iterations) = solve(file, intervals);
    let met = match expected {
        Expected::Solved => status == "solved" && iterations <= ITERATION_TARGET,
        Expected::Infeasible => status == "locally infeasible",
    };
    // Never "solved" for an infeasible problem, listed or not.
    assert!(
        !(expected == Expected::Infeasible && status.contains("solved")),
        "{file} at {intervals} intervals is infeasible but ended `{status}`"
    );
    (met, format!("{file} at {intervals} intervals: {status} in {iterations} iterations"))
}

#[test]
fn every_hard_problem_meets_its_target_or_is_listed() {
    let cases = fixtures();
    assert!(cases.len() >= 10, "expected at least ten hard fixtures, found {}", cases.len());
    assert!(cases.iter().filter(|c| c.1 == Expected::Infeasible).count() >= 2);
    let mut failures = Vec::new();
    let mut report = Vec::new();
    for (file, expected) in &cases {
        for intervals in MESHES {
            let (met, what) = outcome(file, *expected, intervals);
            report.push(what.clone());
            let listed = NOT_YET_MET.contains(&(stem(file), intervals));
            match (met, listed) {
                (true, true) => {
                    failures.push(format!("{what}: meets the target now, take it off NOT_YET_MET"))
                }
                (false, false) => failures.push(format!("{what}: misses the target")),
                _ => {}
            }
        }
        // The references: each feasible fixture's `expect` block at its own intervals.
        if *expected == Expected::Solved {
            let out = costate(&["test", file]);
            let met = out.status.code() == Some(0);
            let what = format!("{file}: `costate test` {}", if met { "passes" } else { "fails" });
            report.push(what.clone());
            match (met, NOT_YET_MET.contains(&(stem(file), 0))) {
                (true, true) => failures.push(format!("{what}: take it off NOT_YET_MET")),
                (false, false) => failures.push(format!("{what}:\n{}", text(&out.stdout))),
                _ => {}
            }
        }
    }
    assert!(failures.is_empty(), "{}\n\nall cases:\n{}", failures.join("\n"), report.join("\n"));
}
