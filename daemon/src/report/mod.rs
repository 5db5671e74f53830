//! Renderers of a replay's results for people and for other tools.
//!
//! - [`svg`]: the replay report, a stacked SVG chart on one data-time axis
//!   (attitude error with its 3σ envelope, inlier fraction and alert level,
//!   per-sensor outlier marks, alert spans, status strip).
//! - [`aem`]: the attitude as a CCSDS Attitude Ephemeris Message (504.0-B,
//!   keyword = value form).
//!
//! Both take the protocol's `Solution` and `Alert` messages as a replay
//! collected them and return the file's text; writing it is the caller's job.

pub mod aem;
pub mod svg;

mod decimate;
mod spans;
mod utc;
