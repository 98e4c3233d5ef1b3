//! An editor stand-in for the server tests: real JSON-RPC framing over in-memory pipes, the
//! server running in the same process. It answers the server's own requests (progress tokens,
//! refreshes) with `null` and records every message it receives.

#![allow(dead_code)] // each test file uses a different part of the helper

use std::time::Duration;

use serde_json::{json, Value};
use std::sync::Arc;
use tokio::io::{AsyncBufReadExt, AsyncReadExt, AsyncWriteExt, BufReader, DuplexStream, WriteHalf};
use tokio::sync::{mpsc, Mutex};

/// Longest wait for one answer; generous because CI machines are shared.
pub const TIMEOUT: Duration = Duration::from_secs(120);

pub struct TestClient {
    writer: Arc<Mutex<WriteHalf<DuplexStream>>>,
    incoming: mpsc::UnboundedReceiver<Value>,
    /// Messages received but not yet consumed by a `wait_*` call.
    pub seen: Vec<Value>,
    next_id: i64,
    /// The server's state, shared with the running server, for tests that look inside.
    pub backend: costate_lsp::Backend,
}

async fn write_message(writer: &Mutex<WriteHalf<DuplexStream>>, message: &Value) {
    let body = serde_json::to_vec(message).unwrap();
    let mut w = writer.lock().await;
    w.write_all(format!("Content-Length: {}\r\n\r\n", body.len()).as_bytes()).await.unwrap();
    w.write_all(&body).await.unwrap();
    w.flush().await.unwrap();
}

impl TestClient {
    /// Start a server in this process and connect to it.
    pub fn start() -> TestClient {
        let (client_side, server_side) = tokio::io::duplex(1 << 22);
        let (server_read, server_write) = tokio::io::split(server_side);
        let (service, socket) = costate_lsp::service();
        let backend = service.inner().clone();
        tokio::spawn(
            tower_lsp_server::Server::new(server_read, server_write, socket).serve(service),
        );
        let (read, write) = tokio::io::split(client_side);
        let writer = Arc::new(Mutex::new(write));
        let (tx, incoming) = mpsc::unbounded_channel();
        let answer = writer.clone();
        tokio::spawn(async move {
            let mut reader = BufReader::new(read);
            loop {
                let mut length = None;
                loop {
                    let mut line = String::new();
                    if reader.read_line(&mut line).await.unwrap_or(0) == 0 {
                        return;
                    }
                    let line = line.trim_end();
                    if line.is_empty() {
                        break;
                    }
                    if let Some(v) = line.strip_prefix("Content-Length: ") {
                        length = v.parse::<usize>().ok();
                    }
                }
                let mut body = vec![0; length.expect("a Content-Length header")];
                reader.read_exact(&mut body).await.unwrap();
                let message: Value = serde_json::from_slice(&body).expect("the server sends JSON");
                if message.get("method").is_some() && message.get("id").is_some() {
                    let reply = json!({ "jsonrpc": "2.0", "id": message["id"], "result": null });
                    write_message(&answer, &reply).await;
                }
                if tx.send(message).is_err() {
                    return;
                }
            }
        });
        TestClient { writer, incoming, seen: Vec::new(), next_id: 0, backend }
    }

    pub async fn notify(&mut self, method: &str, params: Value) {
        write_message(
            &self.writer,
            &json!({ "jsonrpc": "2.0", "method": method, "params": params }),
        )
        .await;
    }

    /// Send a request and wait for its response (`result` or `error` object).
    pub async fn request(&mut self, method: &str, params: Value) -> Value {
        self.next_id += 1;
        let id = self.next_id;
        write_message(
            &self.writer,
            &json!({ "jsonrpc": "2.0", "id": id, "method": method, "params": params }),
        )
        .await;
        let response = self.wait_for(|m| m.get("method").is_none() && m["id"] == id).await;
        if response.get("error").is_some() {
            json!({ "error": response["error"] })
        } else {
            response["result"].clone()
        }
    }

    /// The first message (already seen or still to come) that matches, removed from `seen`.
    pub async fn wait_for(&mut self, matches: impl Fn(&Value) -> bool) -> Value {
        if let Some(i) = self.seen.iter().position(&matches) {
            return self.seen.remove(i);
        }
        let found = tokio::time::timeout(TIMEOUT, async {
            loop {
                let message = self.incoming.recv().await.expect("the server is running");
                if matches(&message) {
                    return message;
                }
                self.seen.push(message);
            }
        })
        .await;
        found.unwrap_or_else(|_| {
            panic!("no matching message within {TIMEOUT:?}; seen: {:#?}", self.seen)
        })
    }

    /// The next `publishDiagnostics` for `uri` at `version`.
    pub async fn diagnostics(&mut self, uri: &str, version: i64) -> Vec<Value> {
        let m = self
            .wait_for(|m| {
                m["method"] == "textDocument/publishDiagnostics"
                    && m["params"]["uri"] == uri
                    && m["params"]["version"] == version
            })
            .await;
        m["params"]["diagnostics"].as_array().cloned().unwrap_or_default()
    }

    pub async fn initialize(&mut self, options: Value) -> Value {
        let capabilities = json!({
            "window": { "workDoneProgress": true },
            "workspace": {
                "codeLens": { "refreshSupport": true },
                "inlayHint": { "refreshSupport": true }
            }
        });
        self.initialize_with(capabilities, options).await
    }

    pub async fn initialize_with(&mut self, capabilities: Value, options: Value) -> Value {
        let result = self
            .request(
                "initialize",
                json!({
                    "processId": null,
                    "rootUri": null,
                    "capabilities": capabilities,
                    "initializationOptions": options,
                }),
            )
            .await;
        self.notify("initialized", json!({})).await;
        result
    }

    pub async fn open(&mut self, uri: &str, text: &str) {
        self.notify(
            "textDocument/didOpen",
            json!({ "textDocument": { "uri": uri, "languageId": "costate", "version": 1, "text": text } }),
        )
        .await;
    }

    pub async fn change(&mut self, uri: &str, version: i64, changes: Value) {
        self.notify(
            "textDocument/didChange",
            json!({ "textDocument": { "uri": uri, "version": version }, "contentChanges": changes }),
        )
        .await;
    }

    pub async fn save(&mut self, uri: &str) {
        self.notify("textDocument/didSave", json!({ "textDocument": { "uri": uri } })).await;
    }

    /// The `end` progress notification of the next solve that finishes.
    pub async fn solve_finished(&mut self) -> String {
        let m = self
            .wait_for(|m| m["method"] == "$/progress" && m["params"]["value"]["kind"] == "end")
            .await;
        m["params"]["value"]["message"].as_str().unwrap_or("").to_string()
    }
}

/// A position as the protocol writes it.
pub fn at(line: u32, character: u32) -> Value {
    json!({ "line": line, "character": character })
}

/// A fresh folder for files the server writes.
pub fn temp_dir(name: &str) -> std::path::PathBuf {
    let dir = std::env::temp_dir().join(format!("costate-lsp-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

pub fn file_uri(path: &std::path::Path) -> String {
    format!("file://{}", path.display())
}

/// A small problem that solves in well under a second.
pub const HOP: &str = "/// Move a unit mass one metre in one second with least effort.
problem hop

const {
  /// the distance to cover
  distance = 1 [m]
}

time t [s]: start 0, end 1

state {
  /// position
  x [m]: start 0, end distance
  v [m/s]: start 0, end 0
}

control {
  u [m/s^2]: in -10 .. 10
}

dynamics {
  x' = v
  v' = u
}

cost {
  minimize integral(u^2)
}

solve {
  intervals = 10
}
";
