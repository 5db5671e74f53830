//! Every setting of a bench scenario, with the defaults we ship.
//!
//! The defaults describe an engineering model on an air-bearing table in a
//! lab. Noise figures are rules of thumb of the trade (common practice, not
//! measured on any unit):
//!
//! | sensor | name | rate | σ | notes |
//! |---|---|---|---|---|
//! | star camera (star-field stimulator) | `star_cam` | 5 Hz frames | 20″ per star | 8 stars per frame, 20° half-cone, boresight body `[0, −0.5, 0.866]`, first frame at 20 ms |
//! | magnetometer (lab coils) | `mag` | 10 Hz | 0.7° | lab field `[0.25, 0.05, −0.97]` (normalised), first sample at 5 ms |
//! | fine sun sensor (lamp) | `sun` | 10 Hz | 0.05° | 60° half-cone, boresight body `+x`, lamp at azimuth 0°, elevation 15° in the lab, first sample at 7.5 ms |
//! | gyro | `gyro` | 100 Hz | angle random walk 1e-5 rad/√s (per-sample rate σ 1e-4 rad/s), no bias | first sample at 0 |
//! | truth (table encoder) | — | 10 Hz | exact | first sample at 0 |
//!
//! Duration 120 s, seed 1, initial attitude identity, the motion profile of
//! [`motion::default_profile`](super::motion::default_profile) (one 120 s cycle:
//! rest 10 s; yaw +27° in 10 s; rest 10 s; +18° about an axis tilted 10° in
//! 10 s; rest 10 s; back in 10 s; rest 5 s; yaw +57° in 20 s; rest 10 s with
//! the lamp out of the sun sensor's view; yaw −84° in 22 s; rest 3 s; every
//! slew with 1 s ramps), repeated when the duration is longer.
//!
//! The default fault timeline ([`default_faults`]):
//!
//! | fault | span (data s) | parameter |
//! |---|---|---|
//! | `false_stars` | 22–32 | share 0.4 (3 of 8 stars per frame) |
//! | `lamp_reflection` | 42–50 | reflection 10° below the lamp |
//! | `coil_transient` | 55–62 | field turned by 12° |
//! | `dropout` | 70–80 | `star_cam` sends nothing |
//!
//! [`Preset`] gives the fault-free run and one run per fault (same span as
//! in the timeline). In a scenario file every key is optional and falls back
//! to the default above; an absent `faults` key means the default timeline,
//! `faults = []` a fault-free run.

use nalgebra::{Quaternion, UnitQuaternion, Vector3};
use serde::{Deserialize, Serialize};

use super::faults::{
    Fault, FaultEffect, FaultKind, DEFAULT_COIL_BIAS_DEG, DEFAULT_FALSE_STAR_SHARE,
    DEFAULT_REFLECTION_OFFSET_DEG,
};
use super::motion::{default_profile, Segment};
use super::ScenarioError;

/// Longest scenario accepted, seconds (keeps every time well inside i64 ns).
pub const MAX_DURATION_S: f64 = 1e7;

/// All settings of a simulated bench run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Scenario {
    /// Length of the run, data seconds; samples have `0 <= t < duration`.
    pub duration_s: f64,
    /// Seed of every random draw (star field, noise, fault choices).
    pub seed: u64,
    /// Attitude at `t = 0`, `[w, x, y, z]` (normalised; sign free).
    pub initial_q: [f64; 4],
    /// The star camera.
    pub star_cam: StarCamConfig,
    /// The magnetometer.
    pub mag: MagConfig,
    /// The fine sun sensor.
    pub sun: SunConfig,
    /// The gyro.
    pub gyro: GyroConfig,
    /// The table encoder's truth messages.
    pub truth: TruthConfig,
    /// Motion profile, repeated until the end of the run.
    pub motion: Vec<Segment>,
    /// Fault timeline.
    pub faults: Vec<Fault>,
}

impl Default for Scenario {
    /// The default scenario, with the default fault timeline.
    fn default() -> Self {
        Scenario {
            duration_s: 120.0,
            seed: 1,
            initial_q: [1.0, 0.0, 0.0, 0.0],
            star_cam: StarCamConfig::default(),
            mag: MagConfig::default(),
            sun: SunConfig::default(),
            gyro: GyroConfig::default(),
            truth: TruthConfig::default(),
            motion: default_profile(),
            faults: default_faults(),
        }
    }
}

/// The star camera looking at the star-field stimulator.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct StarCamConfig {
    /// Whether the sensor is simulated at all.
    pub enabled: bool,
    /// Sensor id on the wire.
    pub name: String,
    /// Frame rate, Hz.
    pub rate_hz: f64,
    /// Time of the first frame, seconds, `0 <= offset < 1/rate`.
    pub offset_s: f64,
    /// 1-σ angular noise per star, arcseconds.
    pub sigma_arcsec: f64,
    /// Stars reported per frame (fewer when fewer are in view).
    pub stars_per_frame: u32,
    /// Field of view, half-cone angle about the boresight, degrees.
    pub half_cone_deg: f64,
    /// Boresight in body components (any non-zero length).
    pub boresight: [f64; 3],
}

impl Default for StarCamConfig {
    fn default() -> Self {
        StarCamConfig {
            enabled: true,
            name: "star_cam".into(),
            rate_hz: 5.0,
            offset_s: 0.02,
            sigma_arcsec: 20.0,
            stars_per_frame: 8,
            half_cone_deg: 20.0,
            boresight: [0.0, -0.5, 0.866],
        }
    }
}

/// The magnetometer in the field of the lab's coils.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MagConfig {
    /// Whether the sensor is simulated at all.
    pub enabled: bool,
    /// Sensor id on the wire.
    pub name: String,
    /// Sample rate, Hz.
    pub rate_hz: f64,
    /// Time of the first sample, seconds, `0 <= offset < 1/rate`.
    pub offset_s: f64,
    /// 1-σ angular noise, degrees.
    pub sigma_deg: f64,
    /// Direction of the coils' field in the lab frame (any non-zero length).
    pub field: [f64; 3],
}

impl Default for MagConfig {
    fn default() -> Self {
        MagConfig {
            enabled: true,
            name: "mag".into(),
            rate_hz: 10.0,
            offset_s: 0.005,
            sigma_deg: 0.7,
            field: [0.25, 0.05, -0.97],
        }
    }
}

/// The fine sun sensor lit by the lab's lamp.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SunConfig {
    /// Whether the sensor is simulated at all.
    pub enabled: bool,
    /// Sensor id on the wire.
    pub name: String,
    /// Sample rate, Hz.
    pub rate_hz: f64,
    /// Time of the first sample, seconds, `0 <= offset < 1/rate`.
    pub offset_s: f64,
    /// 1-σ angular noise, degrees.
    pub sigma_deg: f64,
    /// Field of view, half-cone angle about the boresight, degrees; no
    /// output while the lamp is outside it.
    pub half_cone_deg: f64,
    /// Boresight in body components (any non-zero length).
    pub boresight: [f64; 3],
    /// Direction from the table to the lamp, lab frame (any non-zero length).
    pub lamp: [f64; 3],
}

impl Default for SunConfig {
    fn default() -> Self {
        let elevation = 15f64.to_radians();
        SunConfig {
            enabled: true,
            name: "sun".into(),
            rate_hz: 10.0,
            offset_s: 0.0075,
            sigma_deg: 0.05,
            half_cone_deg: 60.0,
            boresight: [1.0, 0.0, 0.0],
            lamp: [elevation.cos(), 0.0, elevation.sin()],
        }
    }
}

/// The rate gyro.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct GyroConfig {
    /// Whether the sensor is simulated at all.
    pub enabled: bool,
    /// Sensor id on the wire.
    pub name: String,
    /// Sample rate, Hz.
    pub rate_hz: f64,
    /// Time of the first sample, seconds, `0 <= offset < 1/rate`.
    pub offset_s: f64,
    /// Angle random walk, rad/√s: white rate noise of σ `arw·√rate` per sample.
    pub arw_rad_sqrt_s: f64,
    /// Constant bias added to every sample, rad/s, body frame.
    pub bias_rad_s: [f64; 3],
}

impl Default for GyroConfig {
    fn default() -> Self {
        GyroConfig {
            enabled: true,
            name: "gyro".into(),
            rate_hz: 100.0,
            offset_s: 0.0,
            arw_rad_sqrt_s: 1e-5,
            bias_rad_s: [0.0; 3],
        }
    }
}

/// The table encoder's `truth` messages.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct TruthConfig {
    /// Whether truth messages are sent.
    pub enabled: bool,
    /// Sample rate, Hz.
    pub rate_hz: f64,
    /// Time of the first sample, seconds, `0 <= offset < 1/rate`.
    pub offset_s: f64,
}

impl Default for TruthConfig {
    fn default() -> Self {
        TruthConfig {
            enabled: true,
            rate_hz: 10.0,
            offset_s: 0.0,
        }
    }
}

/// The default fault timeline (see the module doc).
pub fn default_faults() -> Vec<Fault> {
    vec![
        Fault {
            start_s: 22.0,
            end_s: 32.0,
            effect: FaultEffect::FalseStars {
                share: DEFAULT_FALSE_STAR_SHARE,
            },
        },
        Fault {
            start_s: 42.0,
            end_s: 50.0,
            effect: FaultEffect::LampReflection {
                offset_deg: DEFAULT_REFLECTION_OFFSET_DEG,
            },
        },
        Fault {
            start_s: 55.0,
            end_s: 62.0,
            effect: FaultEffect::CoilTransient {
                bias_deg: DEFAULT_COIL_BIAS_DEG,
            },
        },
        Fault {
            start_s: 70.0,
            end_s: 80.0,
            effect: FaultEffect::Dropout {
                sensor: StarCamConfig::default().name,
            },
        },
    ]
}

/// Ready-made scenarios.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Preset {
    /// No fault.
    Nominal,
    /// Only the `false_stars` fault of the default timeline.
    FalseStars,
    /// Only the `lamp_reflection` fault of the default timeline.
    LampReflection,
    /// Only the `coil_transient` fault of the default timeline.
    CoilTransient,
    /// Only the `dropout` fault of the default timeline.
    Dropout,
    /// The whole default timeline; the same as `Scenario::default()`.
    AllFaults,
}

impl Preset {
    /// Every preset, in documentation order.
    pub const ALL: [Preset; 6] = [
        Preset::Nominal,
        Preset::FalseStars,
        Preset::LampReflection,
        Preset::CoilTransient,
        Preset::Dropout,
        Preset::AllFaults,
    ];

    /// The preset's name (`"nominal"`, `"false_stars"`, ..., `"all_faults"`).
    pub fn as_str(self) -> &'static str {
        match self {
            Preset::Nominal => "nominal",
            Preset::FalseStars => "false_stars",
            Preset::LampReflection => "lamp_reflection",
            Preset::CoilTransient => "coil_transient",
            Preset::Dropout => "dropout",
            Preset::AllFaults => "all_faults",
        }
    }

    /// The single fault kind this preset keeps, if it keeps exactly one.
    fn only_kind(self) -> Option<FaultKind> {
        match self {
            Preset::FalseStars => Some(FaultKind::FalseStars),
            Preset::LampReflection => Some(FaultKind::LampReflection),
            Preset::CoilTransient => Some(FaultKind::CoilTransient),
            Preset::Dropout => Some(FaultKind::Dropout),
            Preset::Nominal | Preset::AllFaults => None,
        }
    }
}

impl std::fmt::Display for Preset {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl std::str::FromStr for Preset {
    type Err = ScenarioError;

    fn from_str(name: &str) -> Result<Self, Self::Err> {
        Preset::ALL
            .into_iter()
            .find(|preset| preset.as_str() == name)
            .ok_or_else(|| ScenarioError::UnknownPreset(name.to_owned()))
    }
}

/// What kind of sensor a stream is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SensorKind {
    /// Star camera: several `obs` per frame.
    Star,
    /// Magnetometer: one `obs` per sample.
    Magnetometer,
    /// Sun sensor: one `obs` per sample while the lamp is in view.
    Sun,
    /// Gyro: one `rate` per sample.
    Gyro,
}

/// What the estimator needs to know of one simulated sensor.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SensorSetting {
    /// Sensor id on the wire.
    pub name: String,
    /// Kind of sensor.
    pub kind: SensorKind,
    /// Default 1-σ noise: radians for vector sensors; rad/s per sample for
    /// the gyro (`arw·√rate`).
    pub sigma: f64,
    /// Expected sample (frame) rate, Hz.
    pub rate_hz: f64,
    /// Messages per sample at most (stars per frame for the star camera, else 1).
    pub obs_per_sample: u32,
}

impl Scenario {
    /// The preset `preset`: the default scenario with its fault timeline cut down.
    pub fn preset(preset: Preset) -> Scenario {
        let mut scenario = Scenario::default();
        match (preset, preset.only_kind()) {
            (Preset::Nominal, _) => scenario.faults.clear(),
            (_, Some(kind)) => scenario.faults.retain(|fault| fault.effect.kind() == kind),
            (_, None) => {}
        }
        scenario
    }

    /// The fault-free default scenario.
    pub fn nominal() -> Scenario {
        Scenario::preset(Preset::Nominal)
    }

    /// The enabled sensors, in the order their ties are broken (gyro, star
    /// camera, magnetometer, sun sensor).
    pub fn sensor_settings(&self) -> Vec<SensorSetting> {
        let mut settings = Vec::with_capacity(4);
        if self.gyro.enabled {
            settings.push(SensorSetting {
                name: self.gyro.name.clone(),
                kind: SensorKind::Gyro,
                sigma: self.gyro.arw_rad_sqrt_s * self.gyro.rate_hz.sqrt(),
                rate_hz: self.gyro.rate_hz,
                obs_per_sample: 1,
            });
        }
        if self.star_cam.enabled {
            settings.push(SensorSetting {
                name: self.star_cam.name.clone(),
                kind: SensorKind::Star,
                sigma: arcsec_to_rad(self.star_cam.sigma_arcsec),
                rate_hz: self.star_cam.rate_hz,
                obs_per_sample: self.star_cam.stars_per_frame,
            });
        }
        if self.mag.enabled {
            settings.push(SensorSetting {
                name: self.mag.name.clone(),
                kind: SensorKind::Magnetometer,
                sigma: self.mag.sigma_deg.to_radians(),
                rate_hz: self.mag.rate_hz,
                obs_per_sample: 1,
            });
        }
        if self.sun.enabled {
            settings.push(SensorSetting {
                name: self.sun.name.clone(),
                kind: SensorKind::Sun,
                sigma: self.sun.sigma_deg.to_radians(),
                rate_hz: self.sun.rate_hz,
                obs_per_sample: 1,
            });
        }
        settings
    }

    /// The initial attitude, normalised with `w >= 0`.
    pub fn initial_attitude(&self) -> Result<UnitQuaternion<f64>, ScenarioError> {
        let [w, x, y, z] = self.initial_q;
        let q = Quaternion::new(w, x, y, z);
        if !(self.initial_q.iter().all(|c| c.is_finite()) && q.norm() > 1e-12) {
            return Err(ScenarioError::InitialAttitude);
        }
        Ok(UnitQuaternion::from_quaternion(q))
    }

    /// Checks every setting; [`Simulator::new`](super::Simulator::new) calls it.
    pub fn validate(&self) -> Result<(), ScenarioError> {
        if !(self.duration_s.is_finite()
            && self.duration_s > 0.0
            && self.duration_s <= MAX_DURATION_S)
        {
            return Err(ScenarioError::Duration(self.duration_s));
        }
        self.initial_attitude()?;
        let sensor = |name: &str, reason: &'static str| ScenarioError::Sensor {
            sensor: name.to_owned(),
            reason,
        };
        let streams = [
            (
                self.star_cam.enabled,
                &self.star_cam.name,
                self.star_cam.rate_hz,
                self.star_cam.offset_s,
            ),
            (
                self.mag.enabled,
                &self.mag.name,
                self.mag.rate_hz,
                self.mag.offset_s,
            ),
            (
                self.sun.enabled,
                &self.sun.name,
                self.sun.rate_hz,
                self.sun.offset_s,
            ),
            (
                self.gyro.enabled,
                &self.gyro.name,
                self.gyro.rate_hz,
                self.gyro.offset_s,
            ),
        ];
        let mut names: Vec<&str> = Vec::new();
        for (enabled, name, rate_hz, offset_s) in streams {
            if !valid_sensor_id(name) {
                return Err(sensor(name, "name must be 1-64 chars of [A-Za-z0-9_.-]"));
            }
            if names.contains(&name.as_str()) {
                return Err(ScenarioError::DuplicateSensor(name.clone()));
            }
            names.push(name);
            if enabled {
                check_timing(rate_hz, offset_s).map_err(|reason| sensor(name, reason))?;
            }
        }
        if self.truth.enabled {
            check_timing(self.truth.rate_hz, self.truth.offset_s)
                .map_err(|reason| sensor("truth", reason))?;
        }
        let cam = &self.star_cam;
        check_sigma(arcsec_to_rad(cam.sigma_arcsec)).map_err(|reason| sensor(&cam.name, reason))?;
        if cam.stars_per_frame == 0 || cam.stars_per_frame > 1000 {
            return Err(sensor(&cam.name, "stars_per_frame must be 1-1000"));
        }
        check_cone(cam.half_cone_deg).map_err(|reason| sensor(&cam.name, reason))?;
        check_direction(&cam.boresight).map_err(|reason| sensor(&cam.name, reason))?;
        check_sigma(self.mag.sigma_deg.to_radians())
            .map_err(|reason| sensor(&self.mag.name, reason))?;
        check_direction(&self.mag.field).map_err(|reason| sensor(&self.mag.name, reason))?;
        let sun = &self.sun;
        check_sigma(sun.sigma_deg.to_radians()).map_err(|reason| sensor(&sun.name, reason))?;
        check_cone(sun.half_cone_deg).map_err(|reason| sensor(&sun.name, reason))?;
        check_direction(&sun.boresight).map_err(|reason| sensor(&sun.name, reason))?;
        check_direction(&sun.lamp).map_err(|reason| sensor(&sun.name, reason))?;
        let gyro = &self.gyro;
        if !(gyro.arw_rad_sqrt_s.is_finite() && gyro.arw_rad_sqrt_s >= 0.0) {
            return Err(sensor(&gyro.name, "arw_rad_sqrt_s must be finite and >= 0"));
        }
        if !gyro.bias_rad_s.iter().all(|c| c.is_finite()) {
            return Err(sensor(&gyro.name, "bias_rad_s must be finite"));
        }
        for (fault_idx, fault) in self.faults.iter().enumerate() {
            self.check_fault(fault)
                .map_err(|reason| ScenarioError::Fault { fault_idx, reason })?;
        }
        Ok(())
    }

    fn check_fault(&self, fault: &Fault) -> Result<(), String> {
        if !(fault.start_s.is_finite() && fault.end_s.is_finite() && fault.start_s < fault.end_s) {
            return Err("start_s and end_s must be finite with start_s < end_s".into());
        }
        let angle_ok = |deg: f64| deg.is_finite() && deg > 0.0 && deg < 180.0;
        match &fault.effect {
            FaultEffect::FalseStars { share }
                if !(share.is_finite() && *share > 0.0 && *share <= 1.0) =>
            {
                Err("share must be in (0, 1]".into())
            }
            FaultEffect::LampReflection { offset_deg } if !angle_ok(*offset_deg) => {
                Err("offset_deg must be in (0, 180)".into())
            }
            FaultEffect::CoilTransient { bias_deg } if !angle_ok(*bias_deg) => {
                Err("bias_deg must be in (0, 180)".into())
            }
            FaultEffect::Dropout { sensor } => {
                let known = self
                    .sensor_settings()
                    .iter()
                    .any(|setting| &setting.name == sensor);
                if known {
                    Ok(())
                } else {
                    Err(format!(
                        "dropout names `{sensor}`, which is not an enabled sensor"
                    ))
                }
            }
            _ => Ok(()),
        }
    }
}

/// Arcseconds to radians.
pub fn arcsec_to_rad(arcsec: f64) -> f64 {
    (arcsec / 3600.0).to_radians()
}

/// Protocol rule for sensor ids: 1–64 chars of `[A-Za-z0-9_.-]`.
fn valid_sensor_id(name: &str) -> bool {
    (1..=64).contains(&name.len())
        && name
            .bytes()
            .all(|c| c.is_ascii_alphanumeric() || matches!(c, b'_' | b'.' | b'-'))
}

fn check_timing(rate_hz: f64, offset_s: f64) -> Result<(), &'static str> {
    if !(rate_hz.is_finite() && rate_hz > 0.0 && rate_hz <= 1e6) {
        return Err("rate_hz must be in (0, 1e6]");
    }
    if !(offset_s.is_finite() && offset_s >= 0.0 && offset_s < 1.0 / rate_hz) {
        return Err("offset_s must be >= 0 and less than one period");
    }
    Ok(())
}

fn check_sigma(sigma: f64) -> Result<(), &'static str> {
    // Same range as the protocol's `sigma` key.
    if sigma.is_finite() && sigma > 0.0 && sigma < std::f64::consts::PI {
        Ok(())
    } else {
        Err("sigma must be > 0 and below 180°")
    }
}

fn check_cone(half_cone_deg: f64) -> Result<(), &'static str> {
    if half_cone_deg.is_finite() && half_cone_deg > 0.0 && half_cone_deg <= 180.0 {
        Ok(())
    } else {
        Err("half_cone_deg must be in (0, 180]")
    }
}

fn check_direction(v: &[f64; 3]) -> Result<(), &'static str> {
    let v = Vector3::from(*v);
    if v.iter().all(|c| c.is_finite()) && v.norm() > 1e-12 {
        Ok(())
    } else {
        Err("direction must be finite and non-zero")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_validate_and_presets_cut_the_timeline() {
        for preset in Preset::ALL {
            let scenario = Scenario::preset(preset);
            scenario.validate().unwrap();
            let kinds: Vec<FaultKind> = scenario.faults.iter().map(|f| f.effect.kind()).collect();
            match preset.only_kind() {
                Some(kind) => assert_eq!(kinds, vec![kind]),
                None if preset == Preset::Nominal => assert!(kinds.is_empty()),
                None => assert_eq!(kinds, FaultKind::ALL.to_vec()),
            }
            assert_eq!(preset.as_str().parse::<Preset>().unwrap(), preset);
        }
        assert!("gremlins".parse::<Preset>().is_err());
        assert_eq!(Scenario::preset(Preset::AllFaults), Scenario::default());
    }

    #[test]
    fn sensor_settings_of_the_defaults() {
        let settings = Scenario::default().sensor_settings();
        let names: Vec<&str> = settings.iter().map(|s| s.name.as_str()).collect();
        assert_eq!(names, ["gyro", "star_cam", "mag", "sun"]);
        let star = &settings[1];
        assert_eq!(star.kind, SensorKind::Star);
        assert_eq!(star.obs_per_sample, 8);
        assert!((star.sigma - 20.0 / 206_264.806).abs() < 1e-12);
        assert!((settings[0].sigma - 1e-4).abs() < 1e-15);
    }

    #[test]
    fn scenario_file_with_partial_keys() {
        let text = r#"
            duration_s = 30
            seed = 9
            faults = []
            [star_cam]
            stars_per_frame = 40
        "#;
        let scenario: Scenario = toml::from_str(text).unwrap();
        assert_eq!(scenario.duration_s, 30.0);
        assert_eq!(scenario.star_cam.stars_per_frame, 40);
        assert_eq!(scenario.star_cam.rate_hz, 5.0);
        assert!(scenario.faults.is_empty());
        assert!(toml::from_str::<Scenario>("durration_s = 3").is_err());
        // The whole default scenario survives a TOML round trip, exactly
        // (serde_json without its `float_roundtrip` feature may lose the last
        // bit of a float, so JSON is not used for this check).
        let text = toml::to_string(&Scenario::default()).unwrap();
        assert_eq!(
            toml::from_str::<Scenario>(&text).unwrap(),
            Scenario::default()
        );
    }

    #[test]
    fn validation_catches_bad_settings() {
        let scenario = Scenario {
            duration_s: -1.0,
            ..Scenario::default()
        };
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::Duration(_))
        ));

        let mut scenario = Scenario::default();
        scenario.mag.name = "star_cam".into();
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::DuplicateSensor(_))
        ));

        let mut scenario = Scenario::default();
        scenario.sun.name = "sun sensor".into();
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::Sensor { .. })
        ));

        let mut scenario = Scenario::default();
        scenario.gyro.offset_s = 0.02;
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::Sensor { .. })
        ));

        let mut scenario = Scenario::default();
        scenario.star_cam.boresight = [0.0; 3];
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::Sensor { .. })
        ));

        let scenario = Scenario {
            initial_q: [0.0; 4],
            ..Scenario::default()
        };
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::InitialAttitude)
        ));

        let mut scenario = Scenario::default();
        scenario.star_cam.enabled = false;
        // The default timeline's dropout names the disabled star camera.
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::Fault { fault_idx: 3, .. })
        ));

        let mut scenario = Scenario::default();
        scenario.faults[0].end_s = scenario.faults[0].start_s;
        assert!(matches!(
            scenario.validate(),
            Err(ScenarioError::Fault { fault_idx: 0, .. })
        ));
    }
}
