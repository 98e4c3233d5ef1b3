//! The built `costate lsp` binary over standard input and output: initialize, open a file with
//! an error, receive its diagnostic, hover, shut down and exit cleanly. Proves that nothing but
//! the protocol reaches stdout.

use std::io::{BufRead, BufReader, Read, Write};
use std::process::{ChildStdin, Command, Stdio};
use std::sync::mpsc;
use std::time::Duration;

use serde_json::{json, Value};

fn send(stdin: &mut ChildStdin, message: Value) {
    let body = message.to_string();
    write!(stdin, "Content-Length: {}\r\n\r\n{body}", body.len()).unwrap();
    stdin.flush().unwrap();
}

/// Reads framed messages on a thread; every message must be well-framed JSON-RPC.
fn reader(stdout: impl Read + Send + 'static) -> mpsc::Receiver<Value> {
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        let mut reader = BufReader::new(stdout);
        loop {
            let mut length = None;
            loop {
                let mut line = String::new();
                if reader.read_line(&mut line).unwrap_or(0) == 0 {
                    return;
                }
                let line = line.trim_end();
                if line.is_empty() {
                    break;
                }
                let value = line.strip_prefix("Content-Length: ");
                assert!(
                    value.is_some() || line.starts_with("Content-Type"),
                    "stdout carries only the protocol, got `{line}`"
                );
                length = value.and_then(|v| v.parse::<usize>().ok()).or(length);
            }
            let mut body = vec![0; length.expect("Content-Length")];
            reader.read_exact(&mut body).unwrap();
            let message: Value = serde_json::from_slice(&body).expect("JSON-RPC body");
            assert_eq!(message["jsonrpc"], "2.0");
            if tx.send(message).is_err() {
                return;
            }
        }
    });
    rx
}

fn wait(rx: &mpsc::Receiver<Value>, matches: impl Fn(&Value) -> bool) -> Value {
    loop {
        let message = rx.recv_timeout(Duration::from_secs(60)).expect("the server answers");
        if matches(&message) {
            return message;
        }
    }
}

#[test]
fn the_binary_speaks_the_protocol_on_stdio() {
    let mut child = Command::new(env!("CARGO_BIN_EXE_costate"))
        .arg("lsp")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("costate lsp starts");
    let mut stdin = child.stdin.take().unwrap();
    let rx = reader(child.stdout.take().unwrap());
    send(
        &mut stdin,
        json!({ "jsonrpc": "2.0", "id": 1, "method": "initialize", "params": { "processId": null, "rootUri": null, "capabilities": {} } }),
    );
    let init = wait(&rx, |m| m["id"] == 1);
    assert_eq!(init["result"]["serverInfo"]["name"], "costate");
    assert_eq!(init["result"]["capabilities"]["textDocumentSync"]["change"], 2, "incremental sync");
    send(&mut stdin, json!({ "jsonrpc": "2.0", "method": "initialized", "params": {} }));
    let uri = "file:///virtual/broken.costate";
    let text = "problem broken\ntime t [s]: start 0, end 1\nstate {\n  x [m]: start 0\n}\ncontrol { u }\ndynamics {\n  x' = speed\n}\ncost { minimize integral(u^2) }\n";
    send(
        &mut stdin,
        json!({ "jsonrpc": "2.0", "method": "textDocument/didOpen", "params": { "textDocument": { "uri": uri, "languageId": "costate", "version": 1, "text": text } } }),
    );
    let published = wait(&rx, |m| m["method"] == "textDocument/publishDiagnostics");
    let diagnostics = published["params"]["diagnostics"].as_array().unwrap();
    assert_eq!(diagnostics.len(), 1, "{diagnostics:?}");
    assert_eq!(diagnostics[0]["code"], "E0201");
    assert_eq!(diagnostics[0]["range"]["start"], json!({ "line": 7, "character": 7 }));
    send(
        &mut stdin,
        json!({ "jsonrpc": "2.0", "id": 2, "method": "textDocument/hover", "params": { "textDocument": { "uri": uri }, "position": { "line": 3, "character": 2 } } }),
    );
    let hover = wait(&rx, |m| m["id"] == 2);
    assert_eq!(hover["result"]["contents"]["value"], "**state** `x` [m]\n\nstart 0 m");
    send(&mut stdin, json!({ "jsonrpc": "2.0", "id": 3, "method": "shutdown", "params": null }));
    wait(&rx, |m| m["id"] == 3);
    send(&mut stdin, json!({ "jsonrpc": "2.0", "method": "exit", "params": null }));
    drop(stdin);
    let status = child.wait().unwrap();
    assert!(status.success(), "exit after shutdown is a clean exit: {status}");
}

#[test]
fn malformed_messages_are_answered_and_the_server_goes_on() {
    // Found by fuzzing: any of these made the server exit silently (code 0), and the huge
    // length made it wait for ever.
    let mut child = Command::new(env!("CARGO_BIN_EXE_costate"))
        .arg("lsp")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("costate lsp starts");
    let mut stdin = child.stdin.take().unwrap();
    let rx = reader(child.stdout.take().unwrap());
    let raw = |stdin: &mut ChildStdin, bytes: &str| {
        stdin.write_all(bytes.as_bytes()).unwrap();
        stdin.flush().unwrap();
    };
    raw(&mut stdin, "Content-Length: 9\r\n\r\n{not json");
    let parse = wait(&rx, |m| m["error"].is_object());
    assert_eq!(parse["error"]["code"], -32700);
    assert!(parse["id"].is_null());
    raw(&mut stdin, "Content-Length: 2\r\n\r\n[]");
    assert_eq!(wait(&rx, |m| m["error"].is_object())["error"]["code"], -32600);
    raw(&mut stdin, "Content-Type: text/plain\r\n\r\n");
    assert_eq!(wait(&rx, |m| m["error"].is_object())["error"]["code"], -32700);
    raw(&mut stdin, "Content-Length: 1000000000000\r\n\r\n{\"never\"\n");
    let refused = wait(&rx, |m| m["error"].is_object());
    assert!(refused["error"]["message"].as_str().unwrap().contains("refused"), "{refused}");
    // Still serving.
    send(
        &mut stdin,
        json!({ "jsonrpc": "2.0", "id": 1, "method": "initialize", "params": { "processId": null, "rootUri": null, "capabilities": {} } }),
    );
    let init = wait(&rx, |m| m["id"] == 1);
    assert_eq!(init["result"]["serverInfo"]["name"], "costate");
    send(&mut stdin, json!({ "jsonrpc": "2.0", "id": 2, "method": "shutdown", "params": null }));
    wait(&rx, |m| m["id"] == 2);
    send(&mut stdin, json!({ "jsonrpc": "2.0", "method": "exit", "params": null }));
    drop(stdin);
    let status = child.wait().unwrap();
    assert!(status.success(), "exit after shutdown is a clean exit: {status}");
}
