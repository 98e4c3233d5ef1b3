//! costate-lower: checked problem -> numeric model (SI units) plus a source map back to spans.
//!
//! Architecture invariant: pure (no IO, no async); never solves.
