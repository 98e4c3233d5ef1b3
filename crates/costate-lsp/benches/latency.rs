//! Benchmark (not a test) of the editor's waiting times on a generated 2,000-line problem,
//! through the whole server in process (JSON-RPC framing included):
//! - a change until its diagnostics arrive (target: under 50 ms);
//! - hover and completion requests (target: under 10 ms).
//!
//! Prints medians. Run with `cargo bench -p costate-lsp`.

#[path = "../tests/support/mod.rs"]
mod support;

use std::time::{Duration, Instant};

use serde_json::json;
use support::{at, TestClient};

/// About 2,000 lines: `states` pairs of states with a control, dynamics and a path constraint.
fn generated(states: usize) -> String {
    let mut s = String::from("problem big\nconst {\n  g = 9.81 [m/s^2]\n  k = 0.5 [1/s]\n}\n");
    s.push_str("fn damp(a, b) = -k * a + b\n");
    s.push_str("time t [s]: start 0, end in 1 .. 60 guess 10\nstate {\n");
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

#[tokio::main]
async fn main() {
    let text = generated(330);
    let lines = text.lines().count();
    let uri = "file:///virtual/big.costate";
    let mut client = TestClient::start();
    client.initialize(json!({ "solveOnSave": false })).await;
    client.open(uri, &text).await;
    client.diagnostics(uri, 1).await;
    let dynamics = text.lines().position(|l| l.starts_with("  v100' =")).unwrap() as u32;

    let mut diagnostics = Vec::new();
    for version in 2..=33i64 {
        // Alternately break (`qv100'`: no such state) and repair one line mid-file.
        let change = if version % 2 == 0 {
            json!([{ "range": { "start": at(dynamics, 2), "end": at(dynamics, 2) }, "text": "q" }])
        } else {
            json!([{ "range": { "start": at(dynamics, 2), "end": at(dynamics, 3) }, "text": "" }])
        };
        let start = Instant::now();
        client.change(uri, version, change).await;
        client.diagnostics(uri, version).await;
        diagnostics.push(start.elapsed());
        client.seen.clear();
    }

    let mut hovers = Vec::new();
    let mut completions = Vec::new();
    for _ in 0..51 {
        let position = json!({ "textDocument": { "uri": uri }, "position": at(dynamics, 12) });
        let start = Instant::now();
        let hover = client.request("textDocument/hover", position.clone()).await;
        hovers.push(start.elapsed());
        assert!(hover["contents"]["value"].is_string(), "{hover}");
        let start = Instant::now();
        let items = client.request("textDocument/completion", position).await;
        completions.push(start.elapsed());
        assert!(items.as_array().is_some_and(|a| a.len() > 1000), "every name is offered");
    }
    println!("{lines} lines");
    println!("change -> diagnostics: median {:?} (target 50 ms)", median(diagnostics));
    println!("hover:                 median {:?} (target 10 ms)", median(hovers));
    println!("completion:            median {:?} (target 10 ms)", median(completions));
}
