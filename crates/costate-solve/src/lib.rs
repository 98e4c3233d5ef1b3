//! costate-solve: transcription by direct multiple shooting, integrators with exact
//! sensitivities, and our own SQP solver built on argmin.
//!
//! Architecture invariant: knows nothing of syntax, names, units or spans; sees only
//! `costate_model::Ocp`. Does no IO.
//!
//! Layers (each module's docs say what it owns):
//! - [`nlp`]: the sparse NLP interface the SQP solves;
//! - [`qp`]: convex QP subproblems on the stage structure behind a trait, solved by our
//!   stage-wise interior-point method ([`qp::StageIpm`]), with Clarabel as the reference;
//! - [`hessian`]: block BFGS and block-wise convexification of exact Hessians;
//! - [`settings`]: the SQP's settings;
//! - [`sqp`]: the SQP method as an argmin solver, its statuses, results and log rows.

// Numeric kernels walk several parallel arrays by one index; an iterator over one of them
// would hide that symmetry. Observer and evaluation signatures are spelled out where used.
#![allow(clippy::needless_range_loop, clippy::type_complexity)]

pub mod convexify;
pub mod hessian;
pub mod integrate;
pub mod nlp;
pub mod qp;
pub mod settings;
pub mod sqp;
pub mod transcribe;

pub use nlp::{EvalError, EvalFailure, EvalPart, Nlp, Pattern};
pub use qp::{
    ClarabelQp, ClarabelQpSettings, QpError, QpSolution, QpSolver, QpStatus, StageIpm,
    StageIpmSettings, StageLayout, StageQp,
};
pub use settings::{HessianMode, SettingsError, SqpSettings};
pub use sqp::{
    log_header, log_line, solve_nlp, Conflict, ConflictItem, IterationRow, Residuals, RowObserver,
    Scaling, SolveError, Sqp, SqpResult, SqpState, SqpStatus, StallReason, StepKind, Timing,
    ViolatedRow, STAGNATION_ITERATIONS,
};
pub use transcribe::{
    estimate_memory, solve_ocp, Conflicting, Finding, MemoryEstimate, MultipleShooting,
    OcpSettings, OcpSolution, OcpStatus, Trajectory, Violation, ViolationSource,
    DEFAULT_MEMORY_LIMIT,
};
