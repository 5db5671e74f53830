//! The fault timeline: named faults, each active over a span of data time.
//!
//! A fault is active for samples with `start_s <= t < end_s` (data seconds
//! from the scenario start). Faults of different kinds may overlap; when two
//! faults of the same kind on the same sensor overlap, the first listed
//! applies. A dropout on a sensor wins over any other fault on it.
//!
//! In a scenario file (TOML shown; JSON has the same keys):
//!
//! ```toml
//! [[faults]]
//! kind = "false_stars"
//! start_s = 22.0
//! end_s = 32.0
//! share = 0.4
//! ```

use serde::{Deserialize, Serialize};

use super::seconds_to_ns;

/// Default share of a frame's stars that are misidentified.
pub const DEFAULT_FALSE_STAR_SHARE: f64 = 0.4;
/// Default angle of the lamp's reflection below the lamp, degrees.
pub const DEFAULT_REFLECTION_OFFSET_DEG: f64 = 10.0;
/// Default magnetometer bias of a coil-current transient, degrees.
pub const DEFAULT_COIL_BIAS_DEG: f64 = 12.0;
/// Default sensor of a dropout.
pub const DEFAULT_DROPOUT_SENSOR: &str = "star_cam";

/// One fault of the timeline.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Fault {
    /// Start of the fault, data seconds from the scenario start (inclusive).
    pub start_s: f64,
    /// End of the fault, data seconds (exclusive).
    pub end_s: f64,
    /// What goes wrong, with its parameters.
    #[serde(flatten)]
    pub effect: FaultEffect,
}

impl Fault {
    /// Whether data time `t_ns` lies inside the fault's span.
    pub fn active_at(&self, t_ns: i64) -> bool {
        // Compared in whole nanoseconds so a sample exactly at a bound is not
        // at the mercy of rounding 1e-9.
        seconds_to_ns(self.start_s) <= t_ns && t_ns < seconds_to_ns(self.end_s)
    }
}

/// What a fault does, tagged by its name (`kind`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum FaultEffect {
    /// Misidentified stars: in each star-camera frame, `share` of the stars
    /// (rounded, at least one) carry the reference direction of another
    /// catalogue star at least 1° away.
    FalseStars {
        /// Share of each frame's stars misidentified, `0 < share <= 1`.
        #[serde(default = "default_false_star_share")]
        share: f64,
    },
    /// The sun sensor sees a reflection of the lamp `offset_deg` below it
    /// (fixed in the lab frame) instead of the lamp, while the reflection is
    /// in its field of view; `r` stays the lamp direction.
    LampReflection {
        /// Angle between lamp and reflection, degrees, `0 < offset < 180`.
        #[serde(default = "default_reflection_offset_deg")]
        offset_deg: f64,
    },
    /// A coil-current transient turns the lab field by `bias_deg` (a step,
    /// constant over the fault); the magnetometer's `r` stays the nominal field.
    CoilTransient {
        /// Field turn, degrees, `0 < bias < 180`.
        #[serde(default = "default_coil_bias_deg")]
        bias_deg: f64,
    },
    /// The named sensor sends nothing.
    Dropout {
        /// Sensor name (one of the scenario's sensors).
        #[serde(default = "default_dropout_sensor")]
        sensor: String,
    },
}

fn default_false_star_share() -> f64 {
    DEFAULT_FALSE_STAR_SHARE
}
fn default_reflection_offset_deg() -> f64 {
    DEFAULT_REFLECTION_OFFSET_DEG
}
fn default_coil_bias_deg() -> f64 {
    DEFAULT_COIL_BIAS_DEG
}
fn default_dropout_sensor() -> String {
    DEFAULT_DROPOUT_SENSOR.to_owned()
}

impl FaultEffect {
    /// The fault's name.
    pub fn kind(&self) -> FaultKind {
        match self {
            FaultEffect::FalseStars { .. } => FaultKind::FalseStars,
            FaultEffect::LampReflection { .. } => FaultKind::LampReflection,
            FaultEffect::CoilTransient { .. } => FaultKind::CoilTransient,
            FaultEffect::Dropout { .. } => FaultKind::Dropout,
        }
    }
}

/// The fault names.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum FaultKind {
    /// Misidentified stars.
    FalseStars,
    /// Lamp reflection seen by the sun sensor.
    LampReflection,
    /// Coil-current transient biasing the magnetometer.
    CoilTransient,
    /// A sensor sends nothing.
    Dropout,
}

impl FaultKind {
    /// Every kind, in documentation order.
    pub const ALL: [FaultKind; 4] = [
        FaultKind::FalseStars,
        FaultKind::LampReflection,
        FaultKind::CoilTransient,
        FaultKind::Dropout,
    ];

    /// The name as written in scenario files and logs.
    pub fn as_str(self) -> &'static str {
        match self {
            FaultKind::FalseStars => "false_stars",
            FaultKind::LampReflection => "lamp_reflection",
            FaultKind::CoilTransient => "coil_transient",
            FaultKind::Dropout => "dropout",
        }
    }
}

impl std::fmt::Display for FaultKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Ground truth of one corrupted or suppressed sample.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct FaultRecord {
    /// Index of the fault in the scenario's `faults`.
    pub fault_idx: usize,
    /// Its kind.
    pub kind: FaultKind,
    /// Sensor concerned.
    pub sensor: String,
    /// Sequence number of the corrupted message; `None` for a sample a
    /// dropout suppressed (nothing was sent, so no number was used).
    pub seq: Option<u64>,
    /// Data time of the sample, ns.
    pub t: i64,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Deserialize)]
    struct Timeline {
        faults: Vec<Fault>,
    }

    #[test]
    fn parses_toml_with_defaults() {
        let text = r#"
            [[faults]]
            kind = "false_stars"
            start_s = 22
            end_s = 32.5
            [[faults]]
            kind = "dropout"
            sensor = "mag"
            start_s = 1.0
            end_s = 2.0
            [[faults]]
            kind = "coil_transient"
            start_s = 3.0
            end_s = 4.0
            bias_deg = 8.0
        "#;
        let timeline: Timeline = toml::from_str(text).unwrap();
        assert_eq!(timeline.faults.len(), 3);
        assert_eq!(timeline.faults[0].start_s, 22.0);
        assert_eq!(
            timeline.faults[0].effect,
            FaultEffect::FalseStars {
                share: DEFAULT_FALSE_STAR_SHARE
            }
        );
        assert_eq!(
            timeline.faults[1].effect,
            FaultEffect::Dropout {
                sensor: "mag".into()
            }
        );
        assert_eq!(
            timeline.faults[2].effect,
            FaultEffect::CoilTransient { bias_deg: 8.0 }
        );
    }

    #[test]
    fn json_round_trip_and_unknown_kind() {
        let fault = Fault {
            start_s: 1.0,
            end_s: 2.0,
            effect: FaultEffect::LampReflection { offset_deg: 5.0 },
        };
        let json = serde_json::to_string(&fault).unwrap();
        assert_eq!(
            json,
            r#"{"start_s":1.0,"end_s":2.0,"kind":"lamp_reflection","offset_deg":5.0}"#
        );
        assert_eq!(serde_json::from_str::<Fault>(&json).unwrap(), fault);
        assert!(
            serde_json::from_str::<Fault>(r#"{"start_s":1,"end_s":2,"kind":"gremlins"}"#).is_err()
        );
    }

    #[test]
    fn span_is_half_open() {
        let fault = Fault {
            start_s: 1.0,
            end_s: 2.0,
            effect: FaultEffect::Dropout {
                sensor: "sun".into(),
            },
        };
        assert!(!fault.active_at(999_999_999));
        assert!(fault.active_at(1_000_000_000));
        assert!(fault.active_at(1_999_999_999));
        assert!(!fault.active_at(2_000_000_000));
    }
}
