//! End-to-end tests of the `costate` binary: exit codes, rendering, formatting, solving and
//! the expectation runner, on the shipped examples and small files written here.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn costate(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_costate"))
        .args(args)
        .current_dir(repo())
        .env("NO_COLOR", "1")
        .output()
        .expect("the binary runs")
}

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

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
