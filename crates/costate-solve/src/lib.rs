//! costate-solve: transcription by direct multiple shooting, integrators with exact
//! sensitivities, and our own SQP solver built on argmin.
//!
//! Architecture invariant: knows nothing of syntax, names, units or spans; sees only
//! `costate_model::Ocp`. Does no IO.
