//! costate-check: names, units and well-posedness of a parsed problem file.
//!
//! Architecture invariant: pure (no IO, no async); never solves; knows nothing of the numeric
//! model. Depends only on `costate-syntax`.
