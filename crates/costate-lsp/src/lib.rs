//! costate-lsp: the costate language server (`costate lsp`), on `tower-lsp-server` and tokio.
//!
//! Owns the protocol: a guard on the byte stream (malformed frames answered, not fatal),
//! position conversion (UTF-16), incremental document sync applied in order,
//! analysis off the async threads, solve-on-save with progress and cancellation, writing the
//! solution files beside the problem, and the custom request `costate/solution`. Every editor
//! feature itself is a pure function of `costate-ide`; the solve and the solution documents
//! come from `costate-driver`, exactly as the CLI makes them.
//!
//! Architecture invariant: stdout is the protocol. Nothing here prints; logs go through
//! `tracing` to stderr.

#![deny(clippy::print_stdout)]

mod config;
mod convert;
mod documents;
mod framing;
pub mod io;
mod server;
mod solving;
mod summary;

pub use config::Config;
/// An open document with its edits applied (public for the `edit_apply` fuzz target).
pub use documents::Document;
pub use server::{Backend, SolutionParams, SOLUTION_REQUEST};

use tower_lsp_server::{ClientSocket, LspService, Server};

/// The service with every handler registered, including the custom request.
pub fn service() -> (LspService<Backend>, ClientSocket) {
    LspService::build(Backend::new).custom_method(SOLUTION_REQUEST, Backend::solution).finish()
}

/// Serve `input`/`output` until the client exits.
pub async fn serve<I, O>(input: I, output: O)
where
    I: tokio::io::AsyncRead + Unpin,
    O: tokio::io::AsyncWrite + Unpin,
{
    let (service, socket) = service();
    Server::new(input, output, socket).serve(service).await;
}

/// Run the server over standard input and output (blocking), logging to stderr.
pub fn run_stdio() -> Result<(), String> {
    // Editors file everything on a server's stderr under errors (Neovim's log does), so only
    // warnings and errors go there unless `COSTATE_LOG` asks for more (error, warn, info,
    // debug, trace). What a user should see after a solve goes through the protocol instead.
    let level = std::env::var("COSTATE_LOG")
        .ok()
        .and_then(|v| v.parse::<tracing::Level>().ok())
        .unwrap_or(tracing::Level::WARN);
    let _ = tracing_subscriber::fmt()
        .with_writer(std::io::stderr)
        .with_ansi(false)
        .with_max_level(level)
        .try_init();
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        // Analysis runs on the runtime's blocking threads and recurses over expressions.
        .thread_stack_size(costate_check::STACK_FOR_ANALYSIS)
        .build()
        .map_err(|e| format!("cannot start the language server: {e}"))?;
    runtime.block_on(framing::serve_guarded(tokio::io::stdin(), tokio::io::stdout()));
    // A read of stdin may still be pending on a blocking thread if the client keeps the pipe
    // open after `exit`: do not wait for it.
    runtime.shutdown_timeout(std::time::Duration::from_millis(200));
    Ok(())
}
