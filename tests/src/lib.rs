//! Helpers shared by the cross-check and end-to-end tests in `tests/tests/`.
//!
//! - [`python`]: locating and running the Python reference scripts in
//!   `tests/python/` (MessagePack reference implementation, SciPy).
//! - [`random`]: seeded random geometry for the solver cross-checks.

pub mod python;
pub mod random;
