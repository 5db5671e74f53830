//! Helpers shared by the cross-check and end-to-end tests in `tests/tests/`.
//!
//! - [`python`]: locating and running the Python reference scripts in
//!   `tests/python/` (MessagePack reference implementation, SciPy).

pub mod python;
