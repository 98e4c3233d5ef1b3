//! Benchmark (not a test): parse and check a generated problem of about 2,000 lines.
//! Target from the language issue: the checker answers in under 50 ms.
//! Run with `cargo bench -p costate-check`.

#[path = "support/generated.rs"]
mod generated;

use std::time::{Duration, Instant};

use generated::generated;

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
