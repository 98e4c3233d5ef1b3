//! The guard between the client's byte stream and the protocol library: every message is
//! checked before the server sees it, so a client's mistake is answered, never fatal.
//!
//! Owns the base protocol's framing (`Content-Length: N` headers, a blank line, N bytes of
//! JSON). A frame whose header is missing or unreadable, whose length is over
//! [`MAX_MESSAGE_BYTES`], whose body is not JSON, or whose JSON is not an object is answered
//! with the JSON-RPC error the specification gives (-32700 parse error, -32600 invalid
//! request, `id` null) and dropped; the server goes on with the next frame. Left to the library,
//! any of these ended the server silently with exit code 0, and a length of 10^12 made it wait
//! for ever. Outgoing frames are passed through whole, with the error answers between them.
//!
//! Must not interpret the messages beyond that.

use serde_json::{json, Value};
use tokio::io::{AsyncBufReadExt, AsyncRead, AsyncReadExt, AsyncWrite, AsyncWriteExt, BufReader};
use tokio::sync::mpsc;

/// Largest message accepted: a whole problem file is a few hundred kilobytes; this leaves
/// room for any realistic edit and keeps a lying header from reserving memory.
pub const MAX_MESSAGE_BYTES: usize = 64 << 20;

/// One frame's header block, read up to its blank line.
enum Header {
    Length(usize),
    /// Unreadable or absent length, or one over the limit: the reason.
    Refused(String, Resync),
    End,
}

/// How to find the next frame after a refused header.
#[derive(Clone, Copy, PartialEq)]
enum Resync {
    /// The header block was complete: the next frame follows it.
    Next,
    /// A length too large to skip: lines are dropped up to the next `Content-Length:`.
    ScanForHeader,
}

/// An error answer with `id` null, framed.
fn error_frame(code: i64, message: &str) -> Vec<u8> {
    let body = json!({ "jsonrpc": "2.0", "id": Value::Null, "error": { "code": code, "message": message } })
        .to_string();
    format!("Content-Length: {}\r\n\r\n{body}", body.len()).into_bytes()
}

async fn read_header<R: AsyncRead + Unpin>(input: &mut BufReader<R>, scanning: bool) -> Header {
    let mut length: Option<Result<usize, String>> = None;
    let mut seen_any = false;
    let mut scanning = scanning;
    loop {
        let mut line = Vec::new();
        match input.read_until(b'\n', &mut line).await {
            Ok(0) | Err(_) => return Header::End,
            Ok(_) => {}
        }
        let text = String::from_utf8_lossy(&line);
        let text = text.trim_end_matches(['\r', '\n']);
        if scanning {
            if !text.to_ascii_lowercase().starts_with("content-length:") {
                continue;
            }
            scanning = false;
        }
        if text.is_empty() {
            if !seen_any {
                continue; // stray blank lines between frames
            }
            return match length {
                Some(Ok(n)) if n > MAX_MESSAGE_BYTES => Header::Refused(
                    format!(
                        "message of {n} bytes refused: at most {MAX_MESSAGE_BYTES} are accepted"
                    ),
                    Resync::ScanForHeader,
                ),
                Some(Ok(n)) => Header::Length(n),
                Some(Err(e)) => Header::Refused(e, Resync::Next),
                None => Header::Refused("a message without Content-Length".into(), Resync::Next),
            };
        }
        seen_any = true;
        if let Some((name, value)) = text.split_once(':') {
            if name.trim().eq_ignore_ascii_case("content-length") {
                length = Some(
                    value
                        .trim()
                        .parse::<usize>()
                        .map_err(|_| format!("invalid Content-Length `{}`", value.trim())),
                );
            }
        } else {
            length = Some(Err(format!("not a header line: `{}`", truncated(text))));
        }
    }
}

fn truncated(text: &str) -> String {
    text.chars().take(60).collect()
}

/// Copies well-formed frames from `input` to `to_server`; answers the others on `errors`.
async fn guard_input<R, W>(input: R, mut to_server: W, errors: mpsc::UnboundedSender<Vec<u8>>)
where
    R: AsyncRead + Unpin,
    W: AsyncWrite + Unpin,
{
    let mut input = BufReader::new(input);
    let mut scanning = false;
    loop {
        let length = match read_header(&mut input, scanning).await {
            Header::End => break,
            Header::Refused(reason, resync) => {
                let _ = errors.send(error_frame(-32700, &reason));
                scanning = resync == Resync::ScanForHeader;
                continue;
            }
            Header::Length(n) => n,
        };
        scanning = false;
        let mut body = vec![0; length];
        if input.read_exact(&mut body).await.is_err() {
            break;
        }
        match serde_json::from_slice::<Value>(&body) {
            Err(e) => {
                let _ = errors.send(error_frame(-32700, &format!("invalid JSON: {e}")));
                continue;
            }
            Ok(Value::Object(_)) => {}
            Ok(_) => {
                let _ = errors.send(error_frame(-32600, "a message must be a JSON object"));
                continue;
            }
        }
        let header = format!("Content-Length: {length}\r\n\r\n");
        if to_server.write_all(header.as_bytes()).await.is_err()
            || to_server.write_all(&body).await.is_err()
            || to_server.flush().await.is_err()
        {
            break;
        }
    }
    // Dropping the writer ends the server's input: it stops as it would at the client's EOF.
}

/// Reads whole frames from the server and writes them, and the guard's error answers, to
/// `output`, never one inside another.
async fn merge_output<R, W>(
    from_server: R,
    mut output: W,
    mut errors: mpsc::UnboundedReceiver<Vec<u8>>,
) where
    R: AsyncRead + Unpin,
    W: AsyncWrite + Unpin,
{
    let mut from_server = BufReader::new(from_server);
    let mut errors_open = true;
    loop {
        tokio::select! {
            frame = read_frame(&mut from_server) => {
                let Some(frame) = frame else { break };
                if output.write_all(&frame).await.is_err() || output.flush().await.is_err() {
                    break;
                }
            }
            error = errors.recv(), if errors_open => {
                match error {
                    Some(frame) => {
                        if output.write_all(&frame).await.is_err() || output.flush().await.is_err() {
                            break;
                        }
                    }
                    None => errors_open = false,
                }
            }
        }
    }
}

/// One frame of the server's own (well-formed) output, header included.
async fn read_frame<R: AsyncRead + Unpin>(input: &mut BufReader<R>) -> Option<Vec<u8>> {
    let mut frame = Vec::new();
    let mut length = None;
    loop {
        let start = frame.len();
        if input.read_until(b'\n', &mut frame).await.ok()? == 0 {
            return None;
        }
        let line = String::from_utf8_lossy(&frame[start..]).trim_end().to_string();
        if line.is_empty() {
            break;
        }
        if let Some((name, value)) = line.split_once(':') {
            if name.trim().eq_ignore_ascii_case("content-length") {
                length = value.trim().parse::<usize>().ok();
            }
        }
    }
    let start = frame.len();
    frame.resize(start + length?, 0);
    input.read_exact(&mut frame[start..]).await.ok()?;
    Some(frame)
}

/// Runs the server behind the guard: `input` and `output` are the client's streams.
pub async fn serve_guarded<I, O>(input: I, output: O)
where
    I: AsyncRead + Unpin + Send + 'static,
    O: AsyncWrite + Unpin + Send + 'static,
{
    let (to_server, server_in) = tokio::io::duplex(1 << 16);
    let (server_out, from_server) = tokio::io::duplex(1 << 16);
    let (errors_tx, errors_rx) = mpsc::unbounded_channel();
    let guard = tokio::spawn(guard_input(input, to_server, errors_tx));
    let merge = tokio::spawn(merge_output(from_server, output, errors_rx));
    crate::serve(server_in, server_out).await;
    guard.abort();
    let _ = merge.await;
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The frames the guard passes on and the answers it gives, for `input`.
    async fn run(input: &[u8]) -> (Vec<u8>, Vec<Value>) {
        let (tx, mut rx) = mpsc::unbounded_channel();
        let mut passed = Vec::new();
        guard_input(input, &mut passed, tx).await;
        let mut answers = Vec::new();
        while let Ok(frame) = rx.try_recv() {
            let text = String::from_utf8(frame).unwrap();
            let body = text.split_once("\r\n\r\n").unwrap().1;
            answers.push(serde_json::from_str(body).unwrap());
        }
        (passed, answers)
    }

    fn frame(body: &str) -> String {
        format!("Content-Length: {}\r\n\r\n{body}", body.len())
    }

    #[tokio::test]
    async fn bad_frames_are_answered_and_good_ones_pass() {
        let good = r#"{"jsonrpc":"2.0","method":"initialized","params":{}}"#;
        let input = [
            frame("{not json"),
            frame("[1, 2]"),
            "Content-Length: many\r\n\r\n".to_string(),
            "X-Other: 1\r\n\r\n".to_string(),
            frame(good),
        ]
        .concat();
        let (passed, answers) = run(input.as_bytes()).await;
        assert_eq!(String::from_utf8(passed).unwrap(), frame(good));
        let codes: Vec<i64> =
            answers.iter().map(|a| a["error"]["code"].as_i64().unwrap()).collect();
        assert_eq!(codes, vec![-32700, -32600, -32700, -32700]);
        assert!(answers.iter().all(|a| a["id"].is_null()));
    }

    #[tokio::test]
    async fn an_oversized_length_is_refused_without_waiting_for_its_bytes() {
        let good = r#"{"jsonrpc":"2.0","method":"exit"}"#;
        let input = format!("Content-Length: 1000000000000\r\n\r\n{{\"partial\n{}", frame(good));
        let (passed, answers) = run(input.as_bytes()).await;
        assert_eq!(String::from_utf8(passed).unwrap(), frame(good));
        assert_eq!(answers.len(), 1);
        let message = answers[0]["error"]["message"].as_str().unwrap();
        assert!(message.contains("refused"), "{message}");
    }
}
