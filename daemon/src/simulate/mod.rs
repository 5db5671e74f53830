//! Bench-scenario simulator: an engineering model on an air-bearing table.
//!
//! A [`Scenario`] holds every setting (sensors, motion profile, fault
//! timeline; defaults in [`scenario`]); [`Simulator`] turns it into a lazy,
//! seeded, deterministic stream of protocol messages (`obs`, `rate`,
//! `truth`) in data-time order, with ground truth for tests
//! ([`Simulator::truth_at`], [`Simulator::fault_log`]). No I/O outside [`feed`]: the
//! `simulate` and `demo` commands write or stream the messages.
//!
//! - [`scenario`]: settings, defaults, presets, per-sensor settings for the estimator.
//! - [`motion`]: rests and slews about body axes, closed-form truth and body rate.
//! - [`faults`]: the named faults and the fault log records.
//! - [`simulator`]: the merged message stream.
//! - [`feed`]: a run into a log (`simulate --out`) or into a daemon (`--to`).
//! - `sky`, `noise`: the stimulator's star field; angular noise on directions.

pub mod faults;
pub mod feed;
pub mod motion;
mod noise;
pub mod scenario;
pub mod simulator;
mod sky;

pub use faults::{Fault, FaultEffect, FaultKind, FaultRecord};
pub use motion::Segment;
pub use scenario::{Preset, Scenario, SensorKind, SensorSetting};
pub use simulator::Simulator;

/// Why a scenario cannot be run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ScenarioError {
    /// `duration_s` is not finite, not positive or too long.
    #[error("duration_s must be finite, > 0 and at most {max} s, got {0}", max = scenario::MAX_DURATION_S)]
    Duration(f64),
    /// `initial_q` is not finite or is zero.
    #[error("initial_q must be a finite, non-zero quaternion [w, x, y, z]")]
    InitialAttitude,
    /// The motion profile has no segment.
    #[error("the motion profile has no segment")]
    EmptyMotion,
    /// A motion segment is invalid.
    #[error("motion segment {segment_idx}: {reason}")]
    Segment {
        /// Index of the segment in `motion`.
        segment_idx: usize,
        /// What is wrong.
        reason: &'static str,
    },
    /// A sensor setting is invalid.
    #[error("sensor `{sensor}`: {reason}")]
    Sensor {
        /// Sensor name (`truth` for the truth source).
        sensor: String,
        /// What is wrong.
        reason: &'static str,
    },
    /// Two sensors share a name.
    #[error("two sensors are named `{0}`")]
    DuplicateSensor(String),
    /// A fault of the timeline is invalid.
    #[error("fault {fault_idx}: {reason}")]
    Fault {
        /// Index of the fault in `faults`.
        fault_idx: usize,
        /// What is wrong.
        reason: String,
    },
    /// No preset has this name.
    #[error("unknown scenario preset `{0}` (known: nominal, false_stars, lamp_reflection, coil_transient, dropout, all_faults)")]
    UnknownPreset(String),
}

/// Seconds to whole nanoseconds on the bench clock.
pub(crate) fn seconds_to_ns(seconds: f64) -> i64 {
    (seconds * 1e9).round() as i64
}
