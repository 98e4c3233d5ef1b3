//! End-to-end tests of the `costate` binary: exit codes, rendering, formatting, solving and
//! the expectation runner, on the shipped examples and small files written here.

use std::path::PathBuf;

mod run;
use run::{costate, repo, text};

fn examples() -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(repo().join("examples"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "costate"))
        .map(|p| format!("examples/{}", p.file_name().unwrap().to_string_lossy()))
        .collect();
    v.sort();
    assert!(v.len() >= 3, "expected at least three examples");
    v
}

fn temp_dir(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("costate-cli-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

#[test]
fn every_example_checks_clean() {
    let files = examples();
    let mut args = vec!["check"];
    args.extend(files.iter().map(String::as_str));
    let out = costate(&args);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", text(&out.stderr));
    assert!(stdout.contains(&format!("0 errors, 0 warnings in {} files", files.len())), "{stdout}");
}

#[test]
fn every_example_is_formatted() {
    let files = examples();
    let mut args = vec!["fmt", "--check"];
    args.extend(files.iter().map(String::as_str));
    let out = costate(&args);
    assert_eq!(out.status.code(), Some(0), "{}{}", text(&out.stdout), text(&out.stderr));
}

#[test]
fn errors_exit_1_with_a_rendered_report() {
    let dir = temp_dir("errors");
    let file = dir.join("bad.costate");
    std::fs::write(&file, "problem bad\ntime t [s]: start 0, end 1\nstate { x: start 0 }\ndynamics { x' = y }\ncost { minimize end(x) }\n").unwrap();
    let out = costate(&["check", file.to_str().unwrap()]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{stdout}");
    assert!(stdout.contains("`y`"), "the unknown name is named: {stdout}");
    assert!(stdout.contains("bad.costate:4:"), "the report points at line 4: {stdout}");
    assert!(!stdout.contains('\u{1b}'), "no colour when NO_COLOR is set or not a terminal");
}

#[test]
fn json_format_for_machines() {
    let dir = temp_dir("json");
    let file = dir.join("bad.costate");
    std::fs::write(&file, "problem bad\ntime t [s]: start 0, end 1\nstate { x: start 0 }\ndynamics { x' = y }\ncost { minimize end(x) }\n").unwrap();
    let out = costate(&["check", "--format", "json", file.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(1));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("valid JSON");
    let d = &doc["files"][0]["diagnostics"][0];
    assert_eq!(d["severity"], "error");
    assert_eq!(d["span"]["from"]["line"], 4);
    assert!(doc["errors"].as_u64().unwrap() >= 1);
}

#[test]
fn a_missing_file_is_a_one_line_usage_error() {
    let out = costate(&["check", "no/such/file.costate"]);
    assert_eq!(out.status.code(), Some(2));
    let stderr = text(&out.stderr);
    assert_eq!(stderr.trim(), "error: cannot read `no/such/file.costate`: no such file or folder");
    // The summary never reads as a clean check of a file it could not read.
    check_summary_of_unreadable(&["check", "no/such/file.costate"]);
}

fn check_summary_of_unreadable(args: &[&str]) {
    let out = costate(args);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(2), "{stdout}");
    assert_eq!(stdout.trim(), "0 errors, 0 warnings in 0 files; 1 file could not be read");
    let mut json_args = args.to_vec();
    json_args.extend(["--format", "json"]);
    let out = costate(&json_args);
    let doc: serde_json::Value = serde_json::from_str(&text(&out.stdout)).unwrap();
    assert_eq!(doc["unreadable"], 1, "{doc}");
    assert!(doc["files"][0]["error"].as_str().unwrap().starts_with("cannot read"), "{doc}");
}

#[test]
fn a_file_that_is_not_utf8_is_not_reported_as_clean() {
    let dir = temp_dir("utf8");
    let file = dir.join("bytes.costate");
    std::fs::write(&file, [0xff, 0xfe, 0x00, 0x41]).unwrap();
    check_summary_of_unreadable(&["check", file.to_str().unwrap()]);
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn fmt_rewrites_atomically_and_check_reports() {
    let dir = temp_dir("fmt");
    let file = dir.join("messy.costate");
    let messy = "problem   messy\ntime t [s] : start 0 , end 1\nstate {\n    x:start 0   // kept\n}\ndynamics { x'=-x }\ncost { minimize end( x )^2 }\n";
    std::fs::write(&file, messy).unwrap();
    let out = costate(&["fmt", "--check", file.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(1));
    assert_eq!(std::fs::read_to_string(&file).unwrap(), messy, "--check changes nothing");
    let out = costate(&["fmt", file.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let formatted = std::fs::read_to_string(&file).unwrap();
    assert!(formatted.contains("// kept"), "comments are kept: {formatted}");
    assert!(formatted.contains("x' = -x"), "{formatted}");
    let out = costate(&["fmt", "--check", file.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(0), "formatting is idempotent");
}

#[test]
fn fmt_refuses_a_file_with_syntax_errors_and_keeps_it() {
    let dir = temp_dir("fmt-bad");
    let file = dir.join("broken.costate");
    let broken = "problem broken\nstate { x: start ( }\n";
    std::fs::write(&file, broken).unwrap();
    let out = costate(&["fmt", file.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(1));
    assert_eq!(std::fs::read_to_string(&file).unwrap(), broken);
}

#[test]
fn every_example_solves_and_meets_its_expectations() {
    let out = costate(&["test", "examples"]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", text(&out.stderr));
    assert!(stdout.contains("3 passed, 0 failed"), "{stdout}");
}

#[test]
fn solve_writes_the_solution_files_and_a_summary() {
    let dir = temp_dir("solve");
    let out =
        costate(&["solve", "examples/crane_transfer.costate", "--out", dir.to_str().unwrap()]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", text(&out.stderr));
    assert!(stdout.contains("status      solved"), "{stdout}");
    assert!(text(&out.stderr).contains("stationarity"), "the iteration log goes to stderr");
    let doc: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(dir.join("crane_transfer.solution.json")).unwrap(),
    )
    .unwrap();
    assert_eq!(doc["solved"], true);
    assert_eq!(doc["states"].as_array().unwrap().len(), 4);
    let x = &doc["states"][0]["values"];
    assert_eq!(x.as_array().unwrap().len(), 61, "one value per node at 60 intervals");
    assert!((x[60].as_f64().unwrap() - 12.0).abs() < 1e-6, "the load ends at 12 m");
    let csv = std::fs::read_to_string(dir.join("crane_transfer.csv")).unwrap();
    assert!(csv.starts_with("t [s],x [m],v [m/s],theta [rad],omega [rad/s],a [m/s^2]\n"), "{csv}");
    assert_eq!(csv.lines().count(), 62);
}

#[test]
fn a_failed_solve_keeps_the_last_good_solution_files() {
    let dir = temp_dir("keep");
    let file = dir.join("hop.costate");
    let good = "problem hop\ntime t [s]: start 0, end 2\nstate {\n  x [m]: start 0, end 1\n  v [m/s]: start 0, end 0\n}\ncontrol { a [m/s^2]: in -1 .. 1 }\ndynamics {\n  x' = v\n  v' = a\n}\ncost { minimize integral(a^2) }\nsolve { intervals = 20 }\n";
    std::fs::write(&file, good).unwrap();
    let args = ["solve", file.to_str().unwrap(), "--quiet", "--out", dir.to_str().unwrap()];
    let out = costate(&args);
    assert_eq!(out.status.code(), Some(0), "{}{}", text(&out.stdout), text(&out.stderr));
    let (json_path, csv_path) = (dir.join("hop.solution.json"), dir.join("hop.csv"));
    let before = (std::fs::read(&json_path).unwrap(), std::fs::read(&csv_path).unwrap());
    // 5 m in 2 s from rest with at most 1 m/s^2 cannot be done (at most 1 m).
    std::fs::write(&file, good.replace("end 1\n", "end 5\n")).unwrap();
    let out = costate(&args);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{stdout}{}", text(&out.stderr));
    assert!(stdout.contains("locally infeasible"), "{stdout}");
    assert!(stdout.contains("hop.failed.json"), "{stdout}");
    assert!(stdout.contains("kept"), "{stdout}");
    assert_eq!(std::fs::read(&json_path).unwrap(), before.0, "the solution file was replaced");
    assert_eq!(std::fs::read(&csv_path).unwrap(), before.1, "the table was replaced");
    let failed: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("hop.failed.json")).unwrap())
            .unwrap();
    assert_eq!(failed["solved"], false);
    assert_eq!(failed["status"], "locally infeasible");
    let findings = failed["findings"].as_array().unwrap();
    assert!(!findings.is_empty(), "the record says why");
    assert!(findings.iter().all(|f| f["span"]["from"]["line"].as_u64().is_some()), "{findings:?}");
    // Nothing of the writing is left behind.
    let hidden: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().starts_with('.'))
        .collect();
    assert!(hidden.is_empty(), "{hidden:?}");
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_function_undefined_at_the_guess_is_reported_on_its_line() {
    let dir = temp_dir("nan");
    let file = dir.join("nan.costate");
    std::fs::write(
        &file,
        "problem nan\ntime t [s]: start 0, end 1\nstate {\n  x: start -1, end free\n}\ncontrol { u: in -1 .. 1 }\ndynamics {\n  x' = sqrt(x) + u\n}\ncost { minimize integral(u^2) }\n",
    )
    .unwrap();
    let out =
        costate(&["solve", file.to_str().unwrap(), "--quiet", "--out", dir.to_str().unwrap()]);
    let stderr = text(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{}{stderr}", text(&out.stdout));
    assert!(stderr.contains("E1001"), "{stderr}");
    assert!(stderr.contains("nan.costate:8:"), "points at the dynamics line: {stderr}");
}

/// Writes `source` to a scratch file and solves it; returns (exit code, stderr, stdout).
fn solve_text(name: &str, source: &str, extra: &[&str]) -> (Option<i32>, String, String) {
    let dir = temp_dir(name);
    let file = dir.join(format!("{name}.costate"));
    std::fs::write(&file, source).unwrap();
    let mut args = vec!["solve", file.to_str().unwrap(), "--quiet", "--out", dir.to_str().unwrap()];
    args.extend_from_slice(extra);
    let out = costate(&args);
    let _ = std::fs::remove_dir_all(&dir);
    (out.status.code(), text(&out.stderr), text(&out.stdout))
}

#[test]
fn inconsistent_boundary_conditions_are_reported_once_on_the_boundary_line() {
    // The state ends at 1 m, the boundary relation demands 3 m: no trajectory meets both.
    let (code, stderr, stdout) = solve_text(
        "inconsistent",
        "problem inconsistent\ntime t [s]: start 0, end 2\nstate {\n  x [m]: start 0, end 1\n  v [m/s]: start 0, end 0\n}\ncontrol { a [m/s^2]: in -1 .. 1 }\ndynamics {\n  x' = v\n  v' = a\n}\ncost { minimize integral(a^2) }\nboundary {\n  arrive_far: end(x) == 3 [m]\n}\n",
        &[],
    );
    assert_eq!(code, Some(1), "{stdout}{stderr}");
    assert!(stdout.contains("locally infeasible"), "{stdout}");
    assert!(stderr.contains("inconsistent.costate:14:"), "points at the boundary line: {stderr}");
    assert!(stderr.contains("`arrive_far` stays violated by up to 2"), "{stderr}");
    // Rounding-level leftovers elsewhere are not reported as causes.
    assert_eq!(stderr.matches("[E1002]").count(), 1, "{stderr}");
}

#[test]
fn an_unreachable_end_names_the_bounds_in_conflict_in_declared_units() {
    // 200 m in 60 s at no more than 7.2 km/h (2 m/s) is 80 m out of reach: the end value and
    // the speed bound must both be named, in the units they were written in.
    let (code, stderr, stdout) = solve_text(
        "unreachable",
        "problem unreachable\ntime t [s]: start 0, end 60\nstate {\n  x [m]: start 0, end 200\n  v [km/h]: start 0, end 0, in -7.2 .. 7.2\n}\ncontrol { a [m/s^2]: in -1 .. 1 }\ndynamics {\n  x' = v\n  v' = a\n}\ncost { minimize integral(a^2) }\nsolve { intervals = 40 }\n",
        &[],
    );
    assert_eq!(code, Some(1), "{stdout}{stderr}");
    assert!(stdout.contains("locally infeasible"), "{stdout}");
    assert!(stderr.contains("the end value 200 m of the bounds of state `x`"), "{stderr}");
    assert!(stderr.contains("the upper bound 7.2 km/h of the bounds of state `v`"), "{stderr}");
    // Amounts measured on a state are in its declared unit.
    let amounts: Vec<&str> = stderr
        .lines()
        .filter(|l| l.contains("of `x`") && l.contains("violated by up to"))
        .collect();
    assert!(!amounts.is_empty() && amounts.iter().all(|l| l.contains(" m ")), "{stderr}");
}

#[test]
fn an_unbounded_cost_names_the_variable_without_a_bound() {
    let (code, stderr, stdout) = solve_text(
        "runaway",
        "problem runaway\ntime t [s]: start 0, end 1\nstate {\n  x: start 0, end free\n}\ncontrol { u }\ndynamics {\n  x' = u\n}\ncost { maximize end(x) }\n",
        &[],
    );
    assert_eq!(code, Some(1), "{stdout}{stderr}");
    assert!(!stdout.contains("status      solved"), "{stdout}");
    assert!(stderr.contains("[E1003]"), "{stderr}");
    assert!(stderr.contains("control `u` grew to"), "{stderr}");
    assert!(stderr.contains("runaway.costate:6:"), "points at the control: {stderr}");
}

#[test]
fn a_problem_too_large_for_memory_is_refused_with_its_size() {
    // 20 states and 10 controls on 100,000 intervals: tens of GiB of derivatives and QP
    // factors, far above the default limit; refused before anything is allocated.
    let (code, stderr, stdout) = solve_text(
        "huge",
        "problem huge\ntime t [s]: start 0, end 1\nstate {\n  x0: start 0, end 1\n  x1: start 0, end 1\n  x2: start 0, end 1\n  x3: start 0, end 1\n  x4: start 0, end 1\n  x5: start 0, end 1\n  x6: start 0, end 1\n  x7: start 0, end 1\n  x8: start 0, end 1\n  x9: start 0, end 1\n  x10: start 0, end 1\n  x11: start 0, end 1\n  x12: start 0, end 1\n  x13: start 0, end 1\n  x14: start 0, end 1\n  x15: start 0, end 1\n  x16: start 0, end 1\n  x17: start 0, end 1\n  x18: start 0, end 1\n  x19: start 0, end 1\n}\ncontrol {\n  u0: in -1 .. 1\n  u1: in -1 .. 1\n  u2: in -1 .. 1\n  u3: in -1 .. 1\n  u4: in -1 .. 1\n  u5: in -1 .. 1\n  u6: in -1 .. 1\n  u7: in -1 .. 1\n  u8: in -1 .. 1\n  u9: in -1 .. 1\n}\ndynamics {\n  x0' = x1 * u0\n  x1' = x2 * u1\n  x2' = x3 * u2\n  x3' = x4 * u3\n  x4' = x5 * u4\n  x5' = x6 * u5\n  x6' = x7 * u6\n  x7' = x8 * u7\n  x8' = x9 * u8\n  x9' = x10 * u9\n  x10' = x11 * u0\n  x11' = x12 * u1\n  x12' = x13 * u2\n  x13' = x14 * u3\n  x14' = x15 * u4\n  x15' = x16 * u5\n  x16' = x17 * u6\n  x17' = x18 * u7\n  x18' = x19 * u8\n  x19' = x0 * u9\n}\ncost { minimize integral(u0^2 + u1^2 + u2^2 + u3^2 + u4^2 + u5^2 + u6^2 + u7^2 + u8^2 + u9^2) }\n",
        &["--intervals", "100000"],
    );
    assert_ne!(code, Some(0), "{stdout}{stderr}");
    assert!(stderr.contains("memory"), "names the memory limit: {stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
}

#[test]
fn extreme_numbers_end_with_a_clear_status_never_an_internal_error_or_a_false_solved() {
    // Found by fuzzing the crane example: each of these ended in an internal error (exit 2)
    // or in "solved" with the end missed by 12 m or 1e23 m.
    let crane = std::fs::read_to_string(repo().join("examples/crane_transfer.costate")).unwrap();
    let cases = [
        ("a [m/s^2]: in -1.5 .. 1.5, guess 0", "a [m/s^2]: in -1.5 .. 1.5, guess 1e300"),
        ("theta [rad]: start 0, end 0", "theta [rad]: start 0, end 5e-324"),
        ("x [m]: start 0, end 12", "x [m]: start 0, end 1e23"),
        ("x [m]: start 0, end 12", "x [m]: start 0, end 12, guess 1e300"),
        ("v [m/s]: start 0, end 0, in -2 .. 2", "v [m/s]: start 0, end 0, in -1e300 .. 2"),
        ("rope = 6 [m]", "rope = 6e200 [m]"),
    ];
    for (from, to) in cases {
        assert!(crane.contains(from), "{from}");
        let text = crane.replace(from, to);
        let (code, stderr, stdout) = solve_text("extreme", &text, &[]);
        assert!(matches!(code, Some(0) | Some(1)), "`{to}`: exit {code:?}\n{stderr}{stdout}");
        assert!(!stderr.contains("internal"), "`{to}`: {stderr}");
        if stdout.contains("status      solved") {
            let violation: f64 = stdout
                .lines()
                .find_map(|l| l.strip_prefix("violation   "))
                .and_then(|v| v.trim().parse().ok())
                .unwrap_or_else(|| panic!("no violation line: {stdout}"));
            assert!(violation <= 1e-5, "`{to}`: solved with violation {violation}\n{stdout}");
        }
    }
}

#[test]
fn a_flood_of_errors_is_cut_to_a_few_hundred_with_a_count() {
    let dir = temp_dir("flood");
    let file = dir.join("flood.costate");
    std::fs::write(&file, format!("problem flood\n{}", "(\n".repeat(1000))).unwrap();
    let out = costate(&["check", file.to_str().unwrap()]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(1));
    assert_eq!(stdout.matches("[E0").count(), costate_syntax::MAX_SHOWN_DIAGNOSTICS, "{stdout}");
    assert!(stdout.contains("more in"), "{stdout}");
    // The count still covers every error found.
    let total: usize = stdout
        .lines()
        .last()
        .and_then(|l| l.split_whitespace().next())
        .and_then(|n| n.parse().ok())
        .unwrap();
    assert!(total > costate_syntax::MAX_SHOWN_DIAGNOSTICS, "{stdout}");
    let out = costate(&["check", "--format", "json", file.to_str().unwrap()]);
    let doc: serde_json::Value = serde_json::from_str(&text(&out.stdout)).unwrap();
    let listed = doc["files"][0]["diagnostics"].as_array().unwrap().len();
    assert_eq!(listed, costate_syntax::MAX_SHOWN_DIAGNOSTICS);
    assert_eq!(doc["files"][0]["omitted"].as_u64().unwrap() as usize + listed, total);
    let _ = std::fs::remove_dir_all(&dir);
}
