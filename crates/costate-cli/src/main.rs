//! The `costate` command-line tool: a thin shell over the analysis core and the solver.
//!
//! Owns argument parsing, file IO (atomic writes), terminal and JSON rendering and exit codes.
//! It holds no language or numeric logic of its own.

mod check_cmd;
mod files;
mod fmt_cmd;
mod pipeline;
mod render;
mod run;
mod solve_cmd;
mod test_cmd;

use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};

/// Exit codes shared by every command.
pub mod exit {
    /// Success (warnings allowed).
    pub const OK: u8 = 0;
    /// The input has errors, a check failed, or an expectation did not hold.
    pub const FAILED: u8 = 1;
    /// Usage or IO error.
    pub const USAGE: u8 = 2;
    /// An internal error (a bug in costate; the message says where).
    pub const INTERNAL: u8 = 101;
}

#[derive(Parser)]
#[command(name = "costate", version, about = "State, check and solve optimal-control problems")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Parse and check problem files and report diagnostics.
    Check {
        /// Problem files (`*.costate`).
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Output format.
        #[arg(long, value_enum, default_value_t = Format::Text)]
        format: Format,
    },
    /// Rewrite problem files in the canonical layout.
    Fmt {
        /// Problem files (`*.costate`).
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Report files that are not formatted, without changing them (exit 1 if any).
        #[arg(long)]
        check: bool,
    },
    /// Solve a problem: iteration log, summary, and the solution files.
    Solve {
        /// The problem file (`*.costate`).
        file: PathBuf,
        /// Number of shooting intervals (overrides the file's `solve` block).
        #[arg(long, value_parser = clap::value_parser!(u32).range(1..=100_000))]
        intervals: Option<u32>,
        /// Folder for `NAME.solution.json` and `NAME.csv`.
        #[arg(long, default_value = ".")]
        out: PathBuf,
        /// Summary format on standard output.
        #[arg(long, value_enum, default_value_t = Format::Text)]
        format: Format,
        /// No iteration log.
        #[arg(long)]
        quiet: bool,
        /// Start from a previous solution file of the same problem.
        #[arg(long, value_name = "SOLUTION_JSON")]
        warm: Option<PathBuf>,
    },
    /// Solve every problem file with an `expect` block and compare the results.
    Test {
        /// Files or folders (searched recursively for `*.costate`); default: the current folder.
        paths: Vec<PathBuf>,
    },
    /// Run the language server over standard input and output (for editors).
    Lsp,
}

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Format {
    Text,
    Json,
}

/// Colour only for a terminal, and never when `NO_COLOR` is set (https://no-color.org).
pub fn use_color(stream_is_terminal: bool) -> bool {
    stream_is_terminal && std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty())
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let code = if e.use_stderr() { exit::USAGE } else { exit::OK };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    // The checker, the lowering and the formatter walk expressions by recursion; the input
    // bounds its depth (parser and checker limits), and this stack holds the deepest it
    // allows with room to spare. Only the pages used are ever committed.
    let worker = std::thread::Builder::new()
        .name("costate".into())
        .stack_size(costate_check::STACK_FOR_ANALYSIS)
        .spawn(move || run_command(cli));
    match worker.map(|w| w.join()) {
        Ok(Ok(code)) => ExitCode::from(code),
        Ok(Err(_)) => ExitCode::from(exit::INTERNAL),
        Err(e) => {
            eprintln!("error: cannot start: {e}");
            ExitCode::from(exit::INTERNAL)
        }
    }
}

fn run_command(cli: Cli) -> u8 {
    let color = use_color(std::io::stdout().is_terminal());
    match cli.command {
        Command::Check { files, format } => check_cmd::run(&files, format, color),
        Command::Fmt { files, check } => fmt_cmd::run(&files, check),
        Command::Solve { file, intervals, out, format, quiet, warm } => {
            let overrides = costate_driver::Overrides { intervals: intervals.map(|n| n as usize) };
            solve_cmd::run(
                &solve_cmd::SolveArgs { file, overrides, out, format, quiet, warm },
                color,
            )
        }
        Command::Test { paths } => {
            let paths = if paths.is_empty() { vec![PathBuf::from(".")] } else { paths };
            test_cmd::run(&paths, color)
        }
        Command::Lsp => match costate_lsp::run_stdio() {
            Ok(()) => exit::OK,
            Err(e) => {
                eprintln!("error: {e}");
                exit::USAGE
            }
        },
    }
}
