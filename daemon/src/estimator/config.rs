//! Configuration of the streaming estimator: one documented struct with units and defaults.
//!
//! Maps onto a TOML table (the `[estimator]` table of the `serve --config`
//! file); every field may be omitted and then takes its documented default:
//!
//! ```toml
//! period_ms = 100
//! span_ms = 1000
//! method = "auto"
//! gyro_arw = 3e-5
//!
//! [alerts.inlier_fraction]
//! level = 0.6
//!
//! [sensors.st1]
//! kind = "star"
//! sigma = 1e-4
//! expected_rate_hz = 10
//! ```

use std::collections::BTreeMap;

use serde::{Deserialize, Deserializer};

use crate::solve::{Method, SolveParams};

/// Every tunable of the estimator. Times are integer milliseconds of data time.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct EstimatorConfig {
    /// Epoch period `P`, ms; epochs are the multiples of `P`. Default 100, must be > 0.
    pub period_ms: u64,
    /// Window span `S`, ms; epoch `E` uses observations with `E - S < t <= E`.
    /// Default 1000, must be > 0.
    pub span_ms: u64,
    /// Latency allowance `L`, ms: epoch `E` is solved once the newest data time
    /// seen is `>= E + L`. Default 50.
    pub latency_ms: u64,
    /// Most observations buffered for the open windows (so also the most in one
    /// window); beyond it the oldest is dropped and counted. Default 10000, must be >= 2.
    /// The buffer must hold `rate × (span + latency)` observations: the
    /// default fits a busy bench (2,000 obs/s: 2,100) with room up to about
    /// 9,500 obs/s at the default span; a smaller cap than that empties the
    /// windows, because the newest observations are kept (raise it, or
    /// shorten the span, for stress rates).
    pub max_window_obs: usize,
    /// Most rate samples buffered; beyond it the oldest is dropped and counted. Default 4000.
    pub max_rate_samples: usize,
    /// Solver method (`auto`, `lud`, `gnc-tls`, `consensus`, `svd`, ...). Default `auto`.
    #[serde(deserialize_with = "deserialize_method")]
    pub method: Method,
    /// χ² confidence of the inlier gate (2 degrees of freedom), in (0, 1).
    /// The gate is `k = sqrt(-2 ln(1 - level))`. Default 0.999 (`k ≈ 3.717`).
    pub chi2_level: f64,
    /// Iteration cap of the iterative solvers. Default 100.
    pub max_iterations: u32,
    /// Seed of the consensus sampler (results stay deterministic). Default 0.
    pub seed: u64,
    /// Gyro angle random walk, rad/√s: a vector carried over `Δt` seconds gets
    /// `gyro_arw · √Δt` added to its σ in quadrature. Default 3e-5
    /// (about 0.1 °/√h, common practice for a tactical-grade gyro). Must be >= 0.
    pub gyro_arw: f64,
    /// Most distinct sensor ids (configured or not) the estimator tracks. Default 64.
    pub max_sensors: usize,
    /// Alert levels, margins and hold times.
    pub alerts: AlertsConfig,
    /// Per-sensor settings, keyed by sensor id. Sensors not listed are accepted
    /// (up to `max_sensors`) but must carry `sigma` on every observation and
    /// get no staleness alert.
    pub sensors: BTreeMap<String, SensorConfig>,
}

impl Default for EstimatorConfig {
    fn default() -> Self {
        EstimatorConfig {
            period_ms: 100,
            span_ms: 1000,
            latency_ms: 50,
            max_window_obs: 10_000,
            max_rate_samples: 4000,
            method: Method::Auto,
            chi2_level: 0.999,
            max_iterations: 100,
            seed: 0,
            gyro_arw: 3e-5,
            max_sensors: 64,
            alerts: AlertsConfig::default(),
            sensors: BTreeMap::new(),
        }
    }
}

/// One level alert: raised when the value stays below `level` for `hold_ms`,
/// cleared when it stays at or above `level + margin` for `hold_ms`.
#[derive(Debug, Clone, Copy, PartialEq, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct LevelConfig {
    /// Level, a fraction in [0, 1].
    pub level: f64,
    /// Hysteresis margin, >= 0: clears only at `level + margin`.
    pub margin: f64,
    /// Hold time, ms of data time, for raising and for clearing.
    pub hold_ms: u64,
}

impl Default for LevelConfig {
    fn default() -> Self {
        LevelConfig {
            level: 0.6,
            margin: 0.05,
            hold_ms: 1000,
        }
    }
}

/// Alert settings.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct AlertsConfig {
    /// `inlier_fraction` (whole window). Also the `ok`/`degraded` boundary of a
    /// solution's status. Default level 0.6, margin 0.05, hold 1000 ms.
    pub inlier_fraction: LevelConfig,
    /// `sensor_inliers` (each sensor's share of inliers in the window). A healthy
    /// sensor passes the 99.9 % gate almost always, so the level is higher than the
    /// window's. Default level 0.8, margin 0.05, hold 1000 ms.
    pub sensor_inliers: LevelConfig,
    /// A sensor's fraction is only judged in windows holding at least this many of
    /// its observations. Default 3.
    pub sensor_min_obs: u32,
    /// `unobservable`: hold time, ms, for which epochs must be unobservable or
    /// insufficient before it raises, and observable before it clears. Default 1000.
    pub unobservable_hold_ms: u64,
    /// `stale`: allowance, ms, for a configured sensor with neither `stale_ms`
    /// nor `expected_rate_hz`. Default 1000.
    pub stale_default_ms: u64,
}

impl Default for AlertsConfig {
    fn default() -> Self {
        AlertsConfig {
            inlier_fraction: LevelConfig::default(),
            sensor_inliers: LevelConfig {
                level: 0.8,
                ..LevelConfig::default()
            },
            sensor_min_obs: 3,
            unobservable_hold_ms: 1000,
            stale_default_ms: 1000,
        }
    }
}

/// What a sensor measures (informational; the estimator treats all vector kinds alike).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SensorKind {
    /// Star tracker / star-field stimulator directions.
    Star,
    /// Magnetometer in the field coils.
    Magnetometer,
    /// Sun sensor under the sun lamp.
    Sun,
    /// Rate gyro (sends `rate`, not `obs`).
    Gyro,
    /// Anything else.
    #[default]
    Other,
}

/// Settings of one sensor.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct SensorConfig {
    /// What it measures. Default `other`.
    pub kind: SensorKind,
    /// Default 1-σ angular noise, rad, for observations without `sigma`;
    /// `0 < sigma < π`. Default none (observations must carry `sigma`).
    pub sigma: Option<f64>,
    /// Expected message rate, Hz (> 0). Default none.
    pub expected_rate_hz: Option<f64>,
    /// Staleness allowance, ms: silence longer than this raises `stale`.
    /// Default `3 / expected_rate_hz` s when that is given, else
    /// `alerts.stale_default_ms`.
    pub stale_ms: Option<u64>,
    /// A disabled sensor's messages are rejected. Default true.
    pub enabled: bool,
}

impl Default for SensorConfig {
    fn default() -> Self {
        SensorConfig {
            kind: SensorKind::Other,
            sigma: None,
            expected_rate_hz: None,
            stale_ms: None,
            enabled: true,
        }
    }
}

/// A configuration that cannot be used.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum ConfigError {
    /// A field is out of its range.
    #[error("estimator config: `{field}` {problem}")]
    Invalid {
        /// Dotted field name, e.g. `alerts.inlier_fraction.level`.
        field: String,
        /// What is wrong, e.g. "must be > 0".
        problem: String,
    },
}

fn invalid(field: impl Into<String>, problem: impl Into<String>) -> ConfigError {
    ConfigError::Invalid {
        field: field.into(),
        problem: problem.into(),
    }
}

fn deserialize_method<'de, D: Deserializer<'de>>(deserializer: D) -> Result<Method, D::Error> {
    let name = String::deserialize(deserializer)?;
    name.parse().map_err(serde::de::Error::custom)
}

const NS_PER_MS: i64 = 1_000_000;

fn ms_to_ns(field: &str, ms: u64) -> Result<i64, ConfigError> {
    i64::try_from(ms)
        .ok()
        .and_then(|ms| ms.checked_mul(NS_PER_MS))
        .ok_or_else(|| invalid(field, "is too large"))
}

impl LevelConfig {
    fn check(&self, field: &str) -> Result<(), ConfigError> {
        if !(0.0..=1.0).contains(&self.level) {
            return Err(invalid(format!("{field}.level"), "must be in [0, 1]"));
        }
        if !(self.margin.is_finite() && self.margin >= 0.0) {
            return Err(invalid(
                format!("{field}.margin"),
                "must be finite and >= 0",
            ));
        }
        ms_to_ns(&format!("{field}.hold_ms"), self.hold_ms)?;
        Ok(())
    }
}

impl SensorConfig {
    /// Staleness allowance in ns (see [`SensorConfig::stale_ms`]).
    pub fn stale_allowance_ns(&self, default_ms: u64) -> i64 {
        match (self.stale_ms, self.expected_rate_hz) {
            (Some(ms), _) => ms as i64 * NS_PER_MS,
            (None, Some(hz)) => (3.0e9 / hz).round() as i64,
            (None, None) => default_ms as i64 * NS_PER_MS,
        }
    }
}

/// The configuration in the units the estimator works in (ns, gate multiplier).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Checked {
    pub period_ns: i64,
    pub span_ns: i64,
    pub latency_ns: i64,
    pub gate_k: f64,
    pub solve: SolveParams,
}

impl EstimatorConfig {
    /// Checks every field's range and converts to working units.
    pub(crate) fn check(&self) -> Result<Checked, ConfigError> {
        let period_ns = ms_to_ns("period_ms", self.period_ms)?;
        if period_ns <= 0 {
            return Err(invalid("period_ms", "must be > 0"));
        }
        let span_ns = ms_to_ns("span_ms", self.span_ms)?;
        if span_ns <= 0 {
            return Err(invalid("span_ms", "must be > 0"));
        }
        let latency_ns = ms_to_ns("latency_ms", self.latency_ms)?;
        if self.max_window_obs < 2 {
            return Err(invalid("max_window_obs", "must be >= 2"));
        }
        if self.max_rate_samples < 1 {
            return Err(invalid("max_rate_samples", "must be >= 1"));
        }
        if !(self.chi2_level > 0.0 && self.chi2_level < 1.0) {
            return Err(invalid("chi2_level", "must be in (0, 1)"));
        }
        if self.max_iterations == 0 {
            return Err(invalid("max_iterations", "must be >= 1"));
        }
        if !(self.gyro_arw.is_finite() && self.gyro_arw >= 0.0) {
            return Err(invalid("gyro_arw", "must be finite and >= 0"));
        }
        if self.max_sensors == 0 || self.max_sensors > u16::MAX as usize {
            return Err(invalid("max_sensors", "must be in 1..=65535"));
        }
        if self.sensors.len() > self.max_sensors {
            return Err(invalid(
                "sensors",
                format!("lists more than max_sensors = {}", self.max_sensors),
            ));
        }
        self.alerts
            .inlier_fraction
            .check("alerts.inlier_fraction")?;
        self.alerts.sensor_inliers.check("alerts.sensor_inliers")?;
        ms_to_ns(
            "alerts.unobservable_hold_ms",
            self.alerts.unobservable_hold_ms,
        )?;
        ms_to_ns("alerts.stale_default_ms", self.alerts.stale_default_ms)?;
        for (id, sensor) in &self.sensors {
            let field = |name: &str| format!("sensors.{id}.{name}");
            if !valid_sensor_id(id) {
                return Err(invalid(
                    format!("sensors.{id}"),
                    "is not 1-64 chars of [A-Za-z0-9_.-]",
                ));
            }
            if let Some(sigma) = sensor.sigma {
                if !(sigma > 0.0 && sigma < std::f64::consts::PI) {
                    return Err(invalid(field("sigma"), "must be in (0, π) rad"));
                }
            }
            if let Some(hz) = sensor.expected_rate_hz {
                if !(hz.is_finite() && hz > 0.0) {
                    return Err(invalid(field("expected_rate_hz"), "must be finite and > 0"));
                }
            }
            if let Some(ms) = sensor.stale_ms {
                ms_to_ns(&field("stale_ms"), ms)?;
            }
        }
        let gate_k = (-2.0 * (1.0 - self.chi2_level).ln()).sqrt();
        let solve = SolveParams {
            gate_k,
            max_iterations: self.max_iterations,
            seed: self.seed,
            ..SolveParams::default()
        };
        Ok(Checked {
            period_ns,
            span_ns,
            latency_ns,
            gate_k,
            solve,
        })
    }
}

/// The protocol's sensor id rule: 1–64 chars of `[A-Za-z0-9_.-]`.
fn valid_sensor_id(id: &str) -> bool {
    (1..=64).contains(&id.len())
        && id
            .bytes()
            .all(|c| c.is_ascii_alphanumeric() || b"_.-".contains(&c))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_check_and_gate_matches_chi2_quantile() {
        let checked = EstimatorConfig::default().check().unwrap();
        assert_eq!(checked.period_ns, 100_000_000);
        assert_eq!(checked.span_ns, 1_000_000_000);
        assert_eq!(checked.latency_ns, 50_000_000);
        // χ² with 2 dof has CDF 1 - exp(-x/2), so the 99.9 % quantile is
        // -2 ln(0.001) = 13.8155 (derived here; design.md quotes k ≈ 3.72).
        assert!((checked.gate_k - 13.815_510_557_964_274f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn toml_table_maps_onto_config() {
        let text = r#"
            period_ms = 50
            method = "gnc-tls"
            gyro_arw = 1e-4
            [alerts.inlier_fraction]
            level = 0.7
            [sensors.st1]
            kind = "star"
            sigma = 1e-4
            expected_rate_hz = 10
            [sensors.mag]
            kind = "magnetometer"
            enabled = false
        "#;
        let config: EstimatorConfig = toml::from_str(text).unwrap();
        assert_eq!(config.period_ms, 50);
        assert_eq!(config.span_ms, 1000);
        assert_eq!(config.method, Method::GncTls);
        assert_eq!(config.alerts.inlier_fraction.level, 0.7);
        assert_eq!(config.alerts.inlier_fraction.margin, 0.05);
        assert_eq!(config.sensors["st1"].kind, SensorKind::Star);
        assert_eq!(config.sensors["st1"].stale_allowance_ns(1000), 300_000_000);
        assert!(!config.sensors["mag"].enabled);
        assert!(config.check().is_ok());
    }

    #[test]
    fn bad_values_are_refused_with_the_field_name() {
        let bad = |edit: fn(&mut EstimatorConfig), field: &str| {
            let mut config = EstimatorConfig::default();
            edit(&mut config);
            let err = config.check().unwrap_err();
            assert!(err.to_string().contains(field), "{err}");
        };
        bad(|c| c.period_ms = 0, "period_ms");
        bad(|c| c.span_ms = 0, "span_ms");
        bad(|c| c.chi2_level = 1.0, "chi2_level");
        bad(|c| c.max_window_obs = 1, "max_window_obs");
        bad(|c| c.gyro_arw = f64::NAN, "gyro_arw");
        bad(
            |c| c.alerts.sensor_inliers.level = 1.5,
            "alerts.sensor_inliers.level",
        );
        bad(
            |c| {
                c.sensors.insert(
                    "x".into(),
                    SensorConfig {
                        sigma: Some(4.0),
                        ..SensorConfig::default()
                    },
                );
            },
            "sensors.x.sigma",
        );
        assert!(toml::from_str::<EstimatorConfig>("method = \"fastest\"").is_err());
        assert!(toml::from_str::<EstimatorConfig>("perid_ms = 3").is_err());
    }
}
