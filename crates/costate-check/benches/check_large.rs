//! Benchmark (not a test): parse and check a generated problem of about 2,000 lines.
//! Target from the language issue: the checker answers in under 50 ms.
//! Run with `cargo bench -p costate-check`.

use std::time::{Duration, Instant};

fn generated(states: usize) -> String {
    let mut s = String::from("problem big\nconst {\n  g = 9.81 [m/s^2]\n  k = 0.5 [1/s]\n}\n");
    s.push_str("fn damp(a, b) = -k * a + b\n");
    s.push_str("time t [s]: start 0, end in 1 .. 60 guess 10\n");
    s.push_str("state {\n");
    for i in 0..states {
        s.push_str(&format!("  x{i} [m]: start 0, end in -1 .. 1, in -10 .. 10\n"));
        s.push_str(&format!("  v{i} [m/s]: start 0, end 0, in -2 .. 2, scale 1\n"));
    }
    s.push_str("}\ncontrol {\n");
    for i in 0..states {
        s.push_str(&format!("  a{i} [m/s^2]: in -1 .. 1, guess 0\n"));
    }
    s.push_str("}\ndynamics {\n");
    for i in 0..states {
        s.push_str(&format!("  x{i}' = v{i}\n"));
        s.push_str(&format!("  v{i}' = damp(v{i}, a{i}) - g * sin(x{i} / 1 [m]) * 0.01\n"));
    }
    s.push_str("}\ncost {\n  minimize end(t) + 0.01 * integral(");
    let terms: Vec<String> = (0..states).map(|i| format!("a{i}^2")).collect();
    s.push_str(&terms.join(" + "));
    s.push_str(")\n}\npath {\n");
    for i in 0..states {
        s.push_str(&format!("  c{i}: -3 <= x{i} + v{i} * 1 [s] <= 3\n"));
    }
    s.push_str("}\n");
    s
}

fn median(mut samples: Vec<Duration>) -> Duration {
    samples.sort();
    samples[samples.len() / 2]
}

fn main() {
    let text = generated(330);
    let lines = text.lines().count();
    let runs = 21;
    let (mut parse_only, mut parse_and_check) = (Vec::new(), Vec::new());
    let mut found = (0, 0);
    for _ in 0..runs {
        let start = Instant::now();
        let parse = costate_syntax::parse(&text);
        parse_only.push(start.elapsed());
        let analysis = costate_check::check(&parse.file);
        parse_and_check.push(start.elapsed());
        found = (parse.diagnostics.len(), analysis.diagnostics.len());
    }
    let min = parse_and_check.iter().min().copied().unwrap_or_default();
    let max = parse_and_check.iter().max().copied().unwrap_or_default();
    println!(
        "{lines} lines, {runs} runs: parse median {:?}; parse + check median {:?} (min {min:?}, \
         max {max:?}); target < 50 ms; {} parser and {} checker diagnostics",
        median(parse_only),
        median(parse_and_check.clone()),
        found.0,
        found.1
    );
}
