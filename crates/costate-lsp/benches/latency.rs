//! Benchmark (not a test) of the editor's waiting times on a generated 2,000-line problem,
//! through the whole server in process (JSON-RPC framing included):
//! - a change until its diagnostics arrive (target: under 50 ms);
//! - hover and completion requests (target: under 10 ms).
//!
//! Prints medians. Run with `cargo bench -p costate-lsp`.

#[path = "../tests/support/mod.rs"]
mod support;

#[path = "../../costate-check/benches/support/generated.rs"]
mod generated;

use std::time::{Duration, Instant};

use generated::generated;
use serde_json::json;
use support::{at, TestClient};

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
