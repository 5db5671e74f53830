//! The streaming estimator: a deterministic state machine from inputs to solutions and alerts.
//!
//! Inputs arrive in (roughly) data-time order: observations, rate samples,
//! truth and clock ticks. [`Estimator::ingest`] appends what they cause to the
//! caller's vector. Nothing here reads a wall clock: the same inputs give
//! bit-identical outputs, which is what makes replays reproduce live runs.
//!
//! - [`config`]: [`EstimatorConfig`] and its parts, with units and defaults.
//! - [`window`]: the buffered observations and epoch arithmetic.
//! - [`propagate`]: rate integration carrying body vectors to the epoch.
//! - [`alert`]: the hysteresis-and-hold alert machines.
//!
//! # Epochs (protocol § Epochs) and the rules chosen where it is silent
//!
//! - Data time advances with every accepted observation and rate sample and
//!   with [`Input::Tick`]; it is the newest time seen. Truth never advances it
//!   and is otherwise ignored, so outputs do not depend on whether truth flowed.
//! - Epoch `E = kP` is solved once data time `>= E + L`, over the observations
//!   with `E - S < t <= E`. The first epoch is the first multiple of `P` at or
//!   after the first accepted observation's time; nothing is solved before it.
//! - An epoch whose window is empty is skipped: no solution is published and it
//!   is not counted. The next epoch tried is the first one whose window can hold
//!   a buffered observation, or, with none buffered, the first one still open.
//!   A jump in time therefore costs at most `ceil(S/P) + 1` solves, however long.
//!   The `stale` alerts report the silence.
//! - An observation with `t <= E₀ - S` for the oldest open epoch `E₀` is dropped
//!   and counted (`dropped_too_old`); a later one, even if late, is used.
//! - A rate component beyond [`MAX_RATE_RAD_S`] is rejected (it would turn
//!   the propagation into NaN).
//! - Per sensor, `t` must not decrease (equal times are allowed: several stars of
//!   one frame) and `seq` must increase; otherwise the message is rejected.
//!
//! # Solutions
//!
//! - Each observation is carried to `E` by the rates (see [`propagate`]) and its
//!   σ grows by `gyro_arw · √(E - t)` in quadrature. The gyro's random walk
//!   between a time and the epoch is shared by every observation of about that
//!   time, so averaging many of them does not shrink it: a solved epoch's
//!   covariance also carries the common-mode term `gyro_arw² · Δt̄ · I`, with
//!   `Δt̄` the information-weighted mean age `Σ σ_i⁻² (E − t_i) / Σ σ_i⁻²` of
//!   the inliers (conservative: the per-observation share is counted too). A window with no rate sample
//!   in `(E - S, E]` is treated as static, σ unchanged, and the solution carries
//!   `propagated: false`; when rates were used the key is absent.
//! - The previous epoch's estimate, carried by the rates, warm-starts the solver.
//!   A cold solve is forced at start-up, after skipped epochs, after an epoch
//!   without a usable estimate (insufficient, unobservable) and when the set of
//!   sensors in the window changed. `auto` itself falls back to a cold robust
//!   solve when the warm one explains too few observations.
//! - Status: `insufficient` (n < 2: `q` is the carried estimate or identity,
//!   `cov` = [`UNOBSERVABLE_VARIANCE`]·I, `method` = `"none"`), `unobservable`
//!   (the inliers span fewer than two directions or the solver found the geometry
//!   degenerate: `q` is the carried estimate or identity, `cov` from the verdict,
//!   huge on the undetermined axis), `degraded` (inlier fraction below
//!   `alerts.inlier_fraction.level`), `ok`.
//! - `verdicts` are always filled, in window (time) order; `sensors` lists the
//!   sensors present in the window in name order.
//!
//! # Alerts
//!
//! Epoch alerts are judged at each published epoch, with `t = E`:
//! `inlier_fraction` (value: the window's inlier fraction; not judged on
//! insufficient epochs), `sensor_inliers` (value: one sensor's inlier share, judged
//! when its window holds at least `alerts.sensor_min_obs` of its observations),
//! `unobservable` (value: independent inlier directions, 0, 1 or 2, threshold 2;
//! insufficient epochs count as unobservable). `stale` is judged whenever data
//! time advances, for configured enabled sensors: raised at the first data time
//! at which the sensor has been silent longer than its allowance (value: the
//! silence, s; threshold: the allowance, s), cleared at its next message (value:
//! the silence that ended). A sensor never heard from counts as silent since the
//! first data time. Alerts follow the solution of their epoch.

pub mod alert;
pub mod config;
pub mod propagate;
pub mod window;

use std::collections::BTreeMap;
use std::sync::Arc;

use nalgebra::{Matrix3, UnitQuaternion, Vector3};
use wahbad_protocol::{
    Alert, AlertState, SensorCount, SensorName, Solution, SolutionStatus, ValidObs, ValidRate,
    ValidTruth, VerdictEntry, VerdictList,
};

pub use alert::{LevelAlert, StaleAlert};
pub use config::{
    AlertsConfig, ConfigError, EstimatorConfig, LevelConfig, SensorConfig, SensorKind,
};

use crate::solve::{weigh_pair, weigh_variances, Pair, SolveError, Solver};
use crate::verdict::{
    assess_gated_into, assess_into, assess_loaded_into, Observability, Verdict,
    UNOBSERVABLE_VARIANCE,
};
use config::Checked;
use propagate::{RateBuffer, RateSample};
use window::{epoch_at_or_after, first_open_epoch, BufferedObs, ObsBuffer};

/// One input of the estimator.
#[derive(Debug, Clone, PartialEq)]
pub enum Input {
    /// A validated observation.
    Obs(ValidObs),
    /// A validated rate sample.
    Rate(ValidRate),
    /// A validated truth attitude (counted, never used).
    Truth(ValidTruth),
    /// Data time, ns on the bench clock, has reached this value (live mode sends
    /// it so epochs close and silence is seen when sources fall quiet).
    Tick(i64),
}

/// One output of the estimator, in the protocol's shapes.
#[derive(Debug, Clone, PartialEq)]
pub enum Output {
    /// The solution of one epoch.
    Solution(Solution),
    /// An alert raised or cleared.
    Alert(Alert),
}

/// Counters since the estimator was made.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Stats {
    /// Observations and rate samples accepted into the buffers.
    pub accepted: u64,
    /// Messages rejected (see [`IngestError`]).
    pub rejected: u64,
    /// Valid observations and rate samples too old for any open window.
    pub dropped_too_old: u64,
    /// Observations and rate samples pushed out of a full buffer.
    pub dropped_overflow: u64,
    /// Epochs solved (solutions published).
    pub epochs: u64,
    /// Truth messages seen.
    pub truths: u64,
}

/// Why an input was rejected; the `Display` text is the `reject` reason.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[non_exhaustive]
pub enum IngestError {
    /// The sensor's time went backwards.
    #[error("sensor `{sensor}`: t={t} is before its previous t={prev_t}")]
    TimeBackwards {
        /// Sensor id.
        sensor: String,
        /// Time of the rejected message, ns.
        t: i64,
        /// Time of the sensor's previous message, ns.
        prev_t: i64,
    },
    /// The sensor's sequence number did not increase.
    #[error("sensor `{sensor}`: seq={seq} does not increase on its previous seq={prev_seq}")]
    SeqNotIncreasing {
        /// Sensor id.
        sensor: String,
        /// Sequence number of the rejected message.
        seq: u64,
        /// Sequence number of the sensor's previous message.
        prev_seq: u64,
    },
    /// A new sensor id arrived with the table full.
    #[error("sensor `{sensor}`: sensor table full ({max_sensors} sensors)")]
    TooManySensors {
        /// Sensor id.
        sensor: String,
        /// Configured `max_sensors`.
        max_sensors: usize,
    },
    /// An observation without `sigma` from a sensor without a configured default.
    #[error(
        "sensor `{sensor}`: observation has no sigma and the sensor has no configured default"
    )]
    NoSigma {
        /// Sensor id.
        sensor: String,
    },
    /// The sensor is disabled in the configuration.
    #[error("sensor `{sensor}` is disabled")]
    Disabled {
        /// Sensor id.
        sensor: String,
    },
    /// A rate component beyond [`MAX_RATE_RAD_S`]: finite, but no gyro
    /// measures it, and propagating with it overflows to NaN.
    #[error("sensor `{sensor}`: rate component beyond ±{MAX_RATE_RAD_S} rad/s")]
    RateTooLarge {
        /// Sensor id.
        sensor: String,
    },
}

/// Largest accepted rate component, rad/s (far beyond any gyro's range,
/// which is at most a few thousand deg/s: common practice).
pub const MAX_RATE_RAD_S: f64 = 1000.0;

impl IngestError {
    /// The sensor id the rejected message carried.
    pub fn sensor(&self) -> &str {
        match self {
            IngestError::TimeBackwards { sensor, .. }
            | IngestError::SeqNotIncreasing { sensor, .. }
            | IngestError::TooManySensors { sensor, .. }
            | IngestError::NoSigma { sensor }
            | IngestError::Disabled { sensor }
            | IngestError::RateTooLarge { sensor } => sensor,
        }
    }
}

/// What the estimator knows of one sensor id.
#[derive(Debug, Clone)]
struct SensorState {
    name: SensorName,
    sigma: Option<f64>,
    enabled: bool,
    last_t: Option<i64>,
    last_seq: Option<u64>,
    /// Only configured, enabled sensors are watched for silence.
    stale: Option<StaleAlert>,
    inliers: LevelAlert,
}

/// The last estimate and the epoch it belongs to.
#[derive(Debug, Clone, Copy)]
struct Estimate {
    t: i64,
    q: UnitQuaternion<f64>,
}

/// The streaming estimator. See the module documentation for its rules.
#[derive(Debug, Clone)]
pub struct Estimator {
    config: EstimatorConfig,
    checked: Checked,
    solver: Solver,
    sensors: Vec<SensorState>,
    /// The sensors' names by index, shared with every verdict list.
    sensor_names: Arc<[SensorName]>,
    sensor_by_name: BTreeMap<String, u16>,
    /// Sensor indices in name order.
    sensor_order: Vec<u16>,
    obs: ObsBuffer,
    rates: RateBuffer,
    /// Newest data time seen.
    newest_t: Option<i64>,
    /// First data time seen (silence of never-heard sensors counts from here).
    start_t: Option<i64>,
    /// The next epoch to solve, once the first observation arrived.
    next_epoch: Option<i64>,
    /// The last epoch solved: epochs only move forward, even where the
    /// epoch arithmetic saturates at the end of the i64 time line.
    last_solved: Option<i64>,
    estimate: Option<Estimate>,
    force_cold: bool,
    /// Whether solutions carry per-observation verdicts (see [`Estimator::set_verdicts`]).
    emit_verdicts: bool,
    inlier_alert: LevelAlert,
    unobservable_alert: LevelAlert,
    stats: Stats,
    // Scratch reused every epoch (the pairs live in the solver's buffer).
    counts: Vec<(u32, u32)>,
    present_before: Vec<bool>,
    verdict: Verdict,
}

/// Solution `q` for a unit quaternion: `[w, x, y, z]`, `w >= 0`.
fn wire_q(q: &UnitQuaternion<f64>) -> [f64; 4] {
    let c = q.quaternion();
    let sign = if c.w < 0.0 { -1.0 } else { 1.0 };
    [sign * c.w, sign * c.i, sign * c.j, sign * c.k]
}

/// Row-major copy of a 3×3 matrix.
fn wire_cov(m: &Matrix3<f64>) -> [f64; 9] {
    std::array::from_fn(|idx| m[(idx / 3, idx % 3)])
}

/// `v` (validated: finite, near unit) at unit length, kept as it is when it
/// is unit to rounding already (one division, not three).
fn unit(v: [f64; 3]) -> Vector3<f64> {
    let v = Vector3::from(v);
    let n2 = v.norm_squared();
    // A branch, not `unit_scale`'s select: one sensor's vectors are either
    // all unit already or all not, so it is predicted, and the unit ones
    // cost no square root and division (kept bit for bit, as there).
    if (n2 - 1.0).abs() <= 4.0 * f64::EPSILON {
        v
    } else {
        v * crate::solve::unit_scale(n2)
    }
}

const NS_PER_S: f64 = 1e9;
const S_PER_NS: f64 = 1e-9;

/// Up to this many sensors [`Estimator::find_sensor`] scans them in order.
const SCANNED_SENSORS: usize = 8;

impl Estimator {
    /// An estimator for `config`, after checking it.
    pub fn new(config: EstimatorConfig) -> Result<Estimator, ConfigError> {
        let checked = config.check()?;
        let alerts = &config.alerts;
        let mut estimator = Estimator {
            solver: Solver::new(checked.solve.clone()),
            sensors: Vec::with_capacity(config.max_sensors),
            sensor_names: Arc::from(Vec::new()),
            sensor_by_name: BTreeMap::new(),
            sensor_order: Vec::with_capacity(config.max_sensors),
            obs: ObsBuffer::with_capacity(config.max_window_obs),
            rates: RateBuffer::with_capacity(config.max_rate_samples),
            newest_t: None,
            start_t: None,
            next_epoch: None,
            last_solved: None,
            estimate: None,
            force_cold: true,
            emit_verdicts: true,
            inlier_alert: LevelAlert::from_config(&alerts.inlier_fraction),
            unobservable_alert: LevelAlert::new(
                2.0,
                0.0,
                alerts.unobservable_hold_ms as i64 * 1_000_000,
            ),
            stats: Stats::default(),
            counts: Vec::with_capacity(config.max_sensors),
            present_before: Vec::with_capacity(config.max_sensors),
            verdict: Verdict::default(),
            checked,
            config,
        };
        let configured: Vec<(String, SensorConfig)> = estimator
            .config
            .sensors
            .iter()
            .map(|(k, v)| (k.clone(), v.clone()))
            .collect();
        for (name, sensor) in configured {
            estimator.register(name, Some(&sensor));
        }
        Ok(estimator)
    }

    /// The configuration in force.
    pub fn config(&self) -> &EstimatorConfig {
        &self.config
    }

    /// Whether solutions carry their per-observation verdicts (default on).
    /// Off, `Solution::verdicts` is `None` and the epoch skips building them;
    /// estimates, counts and alerts are unchanged. For runs whose outputs
    /// drop the verdicts anyway (a replay writing only a summary).
    pub fn set_verdicts(&mut self, on: bool) {
        self.emit_verdicts = on;
    }

    /// Counters since start.
    pub fn stats(&self) -> Stats {
        self.stats
    }

    /// Newest data time seen, ns.
    pub fn data_time(&self) -> Option<i64> {
        self.newest_t
    }

    /// The next epoch that will be solved, ns, once the first observation arrived.
    pub fn next_epoch(&self) -> Option<i64> {
        self.next_epoch
    }

    /// Feeds one input; solutions and alerts it causes are appended to `out`.
    /// A rejected input changes nothing but the `rejected` counter.
    pub fn ingest(&mut self, input: Input, out: &mut Vec<Output>) -> Result<(), IngestError> {
        let result = match input {
            Input::Obs(obs) => self.ingest_obs(obs, out),
            Input::Rate(rate) => self.ingest_rate(rate, out),
            Input::Truth(_) => {
                self.stats.truths += 1;
                Ok(())
            }
            Input::Tick(t) => {
                self.advance(t, out);
                Ok(())
            }
        };
        if result.is_err() {
            self.stats.rejected += 1;
        }
        result
    }

    fn register(&mut self, name: String, config: Option<&SensorConfig>) -> u16 {
        let idx = self.sensors.len() as u16;
        let default_stale_ms = self.config.alerts.stale_default_ms;
        let state = SensorState {
            sigma: config.and_then(|c| c.sigma),
            enabled: config.is_none_or(|c| c.enabled),
            last_t: None,
            last_seq: None,
            stale: config
                .filter(|c| c.enabled)
                .map(|c| StaleAlert::new(c.stale_allowance_ns(default_stale_ms))),
            inliers: LevelAlert::from_config(&self.config.alerts.sensor_inliers),
            name: SensorName::from(name.as_str()),
        };
        let at = self
            .sensor_order
            .partition_point(|&i| self.sensors[i as usize].name < name);
        self.sensor_order.insert(at, idx);
        self.sensors.push(state);
        // Rebuilt per new sensor (a handful per run); lists already out keep theirs.
        self.sensor_names = self.sensors.iter().map(|s| s.name.clone()).collect();
        self.sensor_by_name.insert(name, idx);
        idx
    }

    /// The index of sensor `name`, if known: a scan of the few sensors of a
    /// usual bench (cheaper than the map's string comparisons down a tree),
    /// the map beyond.
    #[inline]
    fn find_sensor(&self, name: &str) -> Option<u16> {
        if self.sensors.len() <= SCANNED_SENSORS {
            (0u16..)
                .zip(&self.sensors)
                .find_map(|(idx, state)| (state.name == name).then_some(idx))
        } else {
            self.sensor_by_name.get(name).copied()
        }
    }

    /// Checks the per-sensor rules and records the message; returns the sensor index.
    fn admit(
        &mut self,
        sensor: &str,
        seq: u64,
        t: i64,
        needs_sigma: bool,
        out: &mut Vec<Output>,
    ) -> Result<u16, IngestError> {
        let idx = match self.find_sensor(sensor) {
            Some(idx) => idx,
            None => {
                if needs_sigma {
                    return Err(IngestError::NoSigma {
                        sensor: sensor.to_string(),
                    });
                }
                if self.sensors.len() >= self.config.max_sensors {
                    return Err(IngestError::TooManySensors {
                        sensor: sensor.to_string(),
                        max_sensors: self.config.max_sensors,
                    });
                }
                self.register(sensor.to_string(), None)
            }
        };
        let state = &self.sensors[idx as usize];
        if !state.enabled {
            return Err(IngestError::Disabled {
                sensor: sensor.to_string(),
            });
        }
        if let Some(prev_t) = state.last_t.filter(|&prev_t| t < prev_t) {
            return Err(IngestError::TimeBackwards {
                sensor: sensor.to_string(),
                t,
                prev_t,
            });
        }
        if let Some(prev_seq) = state.last_seq.filter(|&prev_seq| seq <= prev_seq) {
            return Err(IngestError::SeqNotIncreasing {
                sensor: sensor.to_string(),
                seq,
                prev_seq,
            });
        }
        if needs_sigma && state.sigma.is_none() {
            return Err(IngestError::NoSigma {
                sensor: sensor.to_string(),
            });
        }
        let start_t = self.start_t.unwrap_or(t);
        let state = &mut self.sensors[idx as usize];
        let silent_since = state.last_t.unwrap_or(start_t.min(t));
        state.last_t = Some(t);
        state.last_seq = Some(seq);
        if let Some(stale) = state.stale.as_mut() {
            if let Some(change) = stale.on_message() {
                let silence_s = t.saturating_sub(silent_since) as f64 / NS_PER_S;
                let threshold = stale.allowance_ns() as f64 / NS_PER_S;
                out.push(Output::Alert(Alert {
                    t,
                    kind: "stale".into(),
                    state: change,
                    value: silence_s,
                    threshold,
                    sensor: Some(state.name.to_string()),
                    message: format!(
                        "sensor `{}` is sending again after {silence_s:.3} s of silence",
                        state.name
                    ),
                }));
            }
        }
        Ok(idx)
    }

    fn ingest_obs(&mut self, obs: ValidObs, out: &mut Vec<Output>) -> Result<(), IngestError> {
        let idx = self.admit(&obs.sensor, obs.seq, obs.t, obs.sigma.is_none(), out)?;
        let sigma = obs
            .sigma
            .or(self.sensors[idx as usize].sigma)
            .expect("admit checked sigma");
        let too_old = self
            .next_epoch
            .is_some_and(|e| obs.t <= e.saturating_sub(self.checked.span_ns));
        if too_old {
            self.stats.dropped_too_old += 1;
        } else {
            let buffered = BufferedObs {
                t: obs.t,
                seq: obs.seq,
                sensor_idx: idx,
                b: unit(obs.b),
                r: unit(obs.r),
                sigma,
                anchored_b: Vector3::zeros(),
                anchored_gen: 0,
            };
            if self.obs.insert(buffered, self.config.max_window_obs) {
                self.stats.dropped_overflow += 1;
            }
            self.stats.accepted += 1;
            if self.next_epoch.is_none() {
                self.next_epoch = Some(epoch_at_or_after(obs.t, self.checked.period_ns));
            }
        }
        self.advance(obs.t, out);
        Ok(())
    }

    fn ingest_rate(&mut self, rate: ValidRate, out: &mut Vec<Output>) -> Result<(), IngestError> {
        if rate.w.iter().any(|w| w.abs() > MAX_RATE_RAD_S) {
            return Err(IngestError::RateTooLarge {
                sensor: rate.sensor.to_string(),
            });
        }
        self.admit(&rate.sensor, rate.seq, rate.t, false, out)?;
        let cutoff = self
            .next_epoch
            .map(|e| e.saturating_sub(self.checked.span_ns));
        if cutoff.is_some_and(|cutoff| self.rates.is_obsolete(rate.t, cutoff)) {
            self.stats.dropped_too_old += 1;
        } else {
            let sample = RateSample {
                t: rate.t,
                w: Vector3::from(rate.w),
            };
            if self.rates.insert(sample, self.config.max_rate_samples) {
                self.stats.dropped_overflow += 1;
            }
            self.stats.accepted += 1;
        }
        self.advance(rate.t, out);
        Ok(())
    }

    /// Data time reached `t`: judge silence, then close every closable epoch.
    fn advance(&mut self, t: i64, out: &mut Vec<Output>) {
        let start_t = *self.start_t.get_or_insert(t);
        let newest = self.newest_t.map_or(t, |n| n.max(t));
        self.newest_t = Some(newest);
        for &idx in &self.sensor_order {
            let state = &mut self.sensors[idx as usize];
            let Some(stale) = state.stale.as_mut() else {
                continue;
            };
            let last = state.last_t.unwrap_or(start_t);
            if let Some(change) = stale.on_clock(newest, last) {
                let silence_s = newest.saturating_sub(last) as f64 / NS_PER_S;
                let threshold = stale.allowance_ns() as f64 / NS_PER_S;
                out.push(Output::Alert(Alert {
                    t: newest,
                    kind: "stale".into(),
                    state: change,
                    value: silence_s,
                    threshold,
                    sensor: Some(state.name.to_string()),
                    message: format!(
                        "sensor `{}` silent for {silence_s:.3} s, allowance {threshold:.3} s",
                        state.name
                    ),
                }));
            }
        }
        self.close_epochs(newest, out);
    }

    fn close_epochs(&mut self, newest: i64, out: &mut Vec<Output>) {
        let Some(mut epoch) = self.next_epoch else {
            return;
        };
        let Checked {
            period_ns,
            span_ns,
            latency_ns,
            ..
        } = self.checked;
        while epoch.saturating_add(latency_ns) <= newest
            && self.last_solved.is_none_or(|last| epoch > last)
        {
            self.obs.prune(epoch.saturating_sub(span_ns));
            self.rates
                .prune(epoch.saturating_sub(span_ns.max(period_ns)));
            let range = self.obs.range(epoch.saturating_sub(span_ns), epoch);
            if range.is_empty() {
                // Empty window: skip to the first epoch that can hold a buffered
                // observation (all buffered ones are later than `epoch`).
                self.force_cold = true;
                let next = match self.obs.first_t() {
                    Some(t) => epoch_at_or_after(t, period_ns).max(epoch.saturating_add(period_ns)),
                    None => first_open_epoch(newest, period_ns, latency_ns),
                };
                if next <= epoch {
                    break; // saturated: no later epoch exists
                }
                epoch = next;
                continue;
            }
            self.solve_epoch(epoch, range, out);
            self.last_solved = Some(epoch);
            epoch = epoch.saturating_add(period_ns);
        }
        self.next_epoch = Some(epoch);
    }

    fn solve_epoch(&mut self, epoch: i64, range: std::ops::Range<usize>, out: &mut Vec<Output>) {
        let Checked {
            period_ns,
            span_ns,
            gate_k,
            ..
        } = self.checked;
        let propagated = self.rates.any_in(epoch.saturating_sub(span_ns), epoch);
        // The previous estimate is carried by the rates only from the epoch just before.
        let consecutive = self
            .estimate
            .filter(|e| e.t == epoch.saturating_sub(period_ns));
        let carried = self.estimate.map(|e| match consecutive {
            Some(_) if propagated => self.rates.carry(e.t, epoch) * e.q,
            _ => e.q,
        });

        self.load_window(epoch, range.clone(), propagated);
        let n = range.len();
        let geometry_changed = self.present_before.len() != self.counts.len()
            || self
                .present_before
                .iter()
                .zip(&self.counts)
                .any(|(&was, &(n, _))| was != (n > 0));
        self.present_before.clear();
        self.present_before
            .extend(self.counts.iter().map(|&(n, _)| n > 0));

        let fallback_q = carried.unwrap_or_else(UnitQuaternion::identity);
        let warm = if self.force_cold || geometry_changed || consecutive.is_none() {
            None
        } else {
            carried
        };
        let configured_method = self.config.method;
        let level = self.config.alerts.inlier_fraction.level;
        let huge = Matrix3::identity() * UNOBSERVABLE_VARIANCE;
        // Residual angles are for the verdicts only.
        let residuals = self.emit_verdicts;
        // A full solve gets the gyro's common drift added to its covariance
        // (zero without propagation, added all the same: `+ 0` turns `-0` into `0`).
        let mut full = false;
        let mut aged = false;
        // (status, q, cov, method, iterations, independent inlier directions)
        let (status, q, mut cov, method, iterations, directions) = if n < 2 {
            self.assess_unsolved(&fallback_q, gate_k, residuals);
            let directions = n as f64;
            (
                SolutionStatus::Insufficient,
                fallback_q,
                huge,
                "none",
                0,
                directions,
            )
        } else {
            match self.solver.solve_weighed(configured_method, warm.as_ref()) {
                Ok(outcome) => {
                    // A robust solve's final gate is the verdict's gate: no
                    // pair is gated twice.
                    match self.solver.final_gate() {
                        Some(gate) => assess_gated_into(
                            &mut self.verdict,
                            &self.solver.loaded(),
                            &gate,
                            residuals,
                        ),
                        None => assess_loaded_into(
                            &mut self.verdict,
                            &self.solver.loaded(),
                            &outcome.q,
                            residuals,
                        ),
                    }
                    let verdict = &self.verdict;
                    let (method, iterations) = (outcome.method.as_str(), outcome.iterations);
                    match verdict.observability {
                        Observability::Full => {
                            let status = if verdict.inlier_fraction < level {
                                SolutionStatus::Degraded
                            } else {
                                SolutionStatus::Ok
                            };
                            // The gyro's common drift is added below, with
                            // the inliers' mean age (see `InlierAge`).
                            full = true;
                            aged = propagated;
                            (
                                status,
                                outcome.q,
                                verdict.covariance,
                                method,
                                iterations,
                                2.0,
                            )
                        }
                        Observability::Unobservable { .. } => {
                            let cov = verdict.covariance;
                            (
                                SolutionStatus::Unobservable,
                                fallback_q,
                                cov,
                                method,
                                iterations,
                                1.0,
                            )
                        }
                        Observability::Insufficient => {
                            let directions = verdict.n_inliers.min(1) as f64;
                            let status = SolutionStatus::Unobservable;
                            (status, fallback_q, huge, method, iterations, directions)
                        }
                    }
                }
                Err(err) => {
                    self.assess_unsolved(&fallback_q, gate_k, residuals);
                    let status = match err {
                        SolveError::Insufficient { .. } => SolutionStatus::Insufficient,
                        _ => SolutionStatus::Unobservable,
                    };
                    (status, fallback_q, huge, configured_method.as_str(), 0, 1.0)
                }
            }
        };
        let solved = matches!(status, SolutionStatus::Ok | SolutionStatus::Degraded);
        self.force_cold = !solved;
        self.estimate = Some(Estimate {
            t: epoch,
            q: if solved { q } else { fallback_q },
        });

        // Per-sensor inlier counts and the inliers' mean age, then the verdicts.
        let fused = (aged && self.emit_verdicts)
            .then(|| self.tally_with_verdicts(epoch, range.clone()))
            .flatten();
        let (age, verdicts) = match fused {
            Some((age, verdicts)) => (age, Some(verdicts)),
            None => {
                let age = self.tally_inliers(epoch, range.clone(), aged);
                (age, self.emit_verdicts.then(|| self.verdict_list(range)))
            }
        };
        if full {
            let arw2 = self.config.gyro_arw * self.config.gyro_arw;
            let common = if aged { arw2 * age.mean_s() } else { 0.0 };
            cov += Matrix3::identity() * common;
        }
        let n_inliers: u32 = self.counts.iter().map(|c| c.1).sum();
        let inlier_fraction = n_inliers as f64 / n as f64;
        let sensors: Vec<SensorCount> = self
            .sensor_order
            .iter()
            .filter_map(|&idx| {
                let (n, n_inliers) = self.counts[idx as usize];
                (n > 0).then(|| SensorCount {
                    sensor: self.sensors[idx as usize].name.clone(),
                    n,
                    n_inliers,
                })
            })
            .collect();
        out.push(Output::Solution(Solution {
            t: epoch,
            q: wire_q(&q),
            cov: wire_cov(&cov),
            status,
            inlier_fraction,
            n: n as u32,
            n_inliers,
            method: method.to_string(),
            iterations,
            sensors,
            verdicts,
            propagated: (!propagated).then_some(false),
        }));
        self.stats.epochs += 1;
        self.judge_epoch_alerts(epoch, status, inlier_fraction, directions, out);
    }

    /// Writes the window's pairs at `epoch` into the solver's buffers
    /// (weighed, see [`Solver::solve_weighed`]) and counts each sensor's
    /// observations into `counts`. Each observation's `b` at the rates'
    /// anchor time is kept between epochs while it is settled, so an epoch
    /// costs one rotation `K(E)` and a matrix product per pair.
    #[inline(never)]
    fn load_window(&mut self, epoch: i64, range: std::ops::Range<usize>, propagated: bool) {
        self.counts.clear();
        self.counts.resize(self.sensors.len(), (0, 0));
        let arw2 = self.config.gyro_arw * self.config.gyro_arw;
        let to_epoch = propagated.then(|| self.rates.anchored(epoch).to_rotation_matrix());
        let (generation, settled_before) = (self.rates.generation(), self.rates.settled_before());
        // Written straight into the solver's buffers, sized first (no
        // capacity check per pair, no copy of the window).
        let (rates, counts) = (&self.rates, &mut self.counts);
        // Each pair is weighed as it is written (σ, `σ⁻²` and gate in the
        // same pass): the solver does not weigh the window again.
        let buf = self.solver.weighed_buffer();
        let solver_gate_k = buf.gate_k;
        let len = range.len();
        let blank = Pair {
            b: Vector3::zeros(),
            r: Vector3::zeros(),
            sigma: 0.0,
        };
        // Every entry is written below: only a longer window fills the new part.
        buf.pairs.resize(len, blank);
        buf.inv_var.resize(len, 0.0);
        buf.gate_chord2.resize(len, 0.0);
        // New observations come in time order: each hold search starts at the last one's.
        let mut hold = usize::MAX;
        let mut weigh = |obs: &mut [BufferedObs],
                         pairs: &mut [Pair],
                         inv_var: &mut [f64],
                         gate: &mut [f64],
                         counts: &mut [(u32, u32)]| {
            let slots = pairs
                .iter_mut()
                .zip(inv_var.iter_mut().zip(gate.iter_mut()));
            // The stars of one frame share their time, and so their `K(t)`.
            let mut last_k: Option<(i64, UnitQuaternion<f64>)> = None;
            for (obs, (slot, (inv_var, gate))) in obs.iter_mut().zip(slots) {
                counts[obs.sensor_idx as usize].0 += 1;
                let (b, sigma) = match &to_epoch {
                    Some(k_epoch) => {
                        if obs.anchored_gen != generation {
                            let k = match last_k {
                                Some((t, k)) if t == obs.t => k,
                                _ => {
                                    let k = rates.anchored_from(obs.t, &mut hold);
                                    last_k = Some((obs.t, k));
                                    k
                                }
                            };
                            obs.anchored_b = k.inverse_transform_vector(&obs.b);
                            // Kept for later epochs only where `K` is settled.
                            obs.anchored_gen = if obs.t < settled_before {
                                generation
                            } else {
                                0
                            };
                        }
                        let dt_s = (epoch - obs.t) as f64 * S_PER_NS;
                        (
                            k_epoch * obs.anchored_b,
                            // The variance for now: see `weigh_variances` below.
                            obs.sigma * obs.sigma + arw2 * dt_s,
                        )
                    }
                    None => (obs.b, obs.sigma),
                };
                *slot = Pair { b, r: obs.r, sigma };
                if !propagated {
                    (*inv_var, *gate) = weigh_pair(sigma, solver_gate_k);
                }
            }
        };
        // The ring's two parts, each a plain loop.
        let (first, second) = self.obs.slices_mut(range);
        let split = first.len();
        let (pairs, inv_var, gate) = (buf.pairs, buf.inv_var, buf.gate_chord2);
        let (p1, p2) = pairs.split_at_mut(split);
        let (w1, w2) = inv_var.split_at_mut(split);
        let (g1, g2) = gate.split_at_mut(split);
        weigh(first, p1, w1, g1, counts);
        weigh(second, p2, w2, g2, counts);
        if propagated {
            // σ from the variances, weights and gates: packed, in a loop of its own.
            weigh_variances(pairs, inv_var, gate, solver_gate_k);
        }
    }

    /// Adds each sensor's inliers of the window `range` (the epoch's pairs,
    /// in order) to `counts`, and returns their information-weighted mean
    /// age when `aged` (after a successful solve, whose `σ⁻²` the solver kept).
    #[inline(never)]
    fn tally_inliers(
        &mut self,
        epoch: i64,
        range: std::ops::Range<usize>,
        aged: bool,
    ) -> InlierAge {
        let mut age = InlierAge::default();
        // Fewer than two pairs are never solved: no inliers.
        if range.len() < 2 {
            return age;
        }
        let (first, second) = self.obs.slices(range);
        let (inliers, counts) = (&self.verdict.inliers[..], &mut self.counts);
        // A flag past the verdict's end is an outlier (`zip` stops there).
        let split = first.len().min(inliers.len());
        let parts = [(first, &inliers[..split]), (second, &inliers[split..])];
        if aged {
            let inv_var = self.solver.loaded().inv_var;
            let split = split.min(inv_var.len());
            let weights = [&inv_var[..split], &inv_var[split..]];
            for ((obs, inliers), inv_var) in parts.into_iter().zip(weights) {
                for ((obs, &inlier), &w) in obs.iter().zip(inliers).zip(inv_var) {
                    counts[obs.sensor_idx as usize].1 += inlier as u32;
                    // Branch-free: an outlier adds weight 0, which leaves the sums as they are.
                    age.add(if inlier { w } else { 0.0 }, epoch - obs.t);
                }
            }
        } else {
            for (obs, inliers) in parts {
                for (obs, &inlier) in obs.iter().zip(inliers) {
                    counts[obs.sensor_idx as usize].1 += inlier as u32;
                }
            }
        }
        age
    }

    /// [`Self::tally_inliers`] (aged) and [`Self::verdict_list`] in one pass
    /// over the window, which both read: the same counts, the same age
    /// sums in the same order, the same list. `None` (nothing done) off the
    /// usual case: fewer than two pairs, or a verdict or weight list
    /// shorter than the window.
    #[inline(never)]
    fn tally_with_verdicts(
        &mut self,
        epoch: i64,
        range: std::ops::Range<usize>,
    ) -> Option<(InlierAge, VerdictList)> {
        let n = range.len();
        let (verdict, inv_var) = (&self.verdict, self.solver.loaded().inv_var);
        if n < 2 || verdict.residuals.len() < n || verdict.inliers.len() < n || inv_var.len() < n {
            return None;
        }
        let counts = &mut self.counts;
        let (first, second) = self.obs.slices(range);
        let mut age = InlierAge::default();
        let mut verdicts = VerdictList::with_names(self.sensor_names.clone(), n);
        for (obs, offset) in [(first, 0), (second, first.len())] {
            let end = offset + obs.len();
            let marks = verdict.residuals[offset..end]
                .iter()
                .zip(&verdict.inliers[offset..end])
                .zip(&inv_var[offset..end]);
            // One `extend` per part writes the entries in place (a `push`
            // per entry measured slower).
            let entries = obs
                .iter()
                .zip(marks)
                .map(|(obs, ((&residual, &inlier), &w))| {
                    counts[obs.sensor_idx as usize].1 += inlier as u32;
                    // Branch-free: an outlier adds weight 0, which leaves the sums as they are.
                    age.add(if inlier { w } else { 0.0 }, epoch - obs.t);
                    VerdictEntry {
                        seq: obs.seq,
                        residual,
                        sensor: obs.sensor_idx as u32,
                        inlier,
                    }
                });
            // The indices are the sensor table's own: a refusal would be a
            // bug, said aloud (the counts above are kept, so no fallback).
            if let Err(err) = verdicts.extend_indexed(entries) {
                tracing::error!(%err, "verdicts left out of a solution");
            }
        }
        Some((age, verdicts))
    }

    /// The per-observation verdicts of the window `range`, in order.
    #[inline(never)]
    fn verdict_list(&self, range: std::ops::Range<usize>) -> VerdictList {
        let n = range.len();
        let verdict = &self.verdict;
        let (first, second) = self.obs.slices(range);
        let mut verdicts = VerdictList::with_names(self.sensor_names.clone(), n);
        // Fewer than two pairs are never solved: no inliers. A verdict
        // shorter than the window (not expected) marks the rest as outliers at `π`.
        let solved = n >= 2;
        let flag = |i: usize| solved && verdict.inliers.get(i).copied().unwrap_or(false);
        let angle = |i: usize| {
            verdict
                .residuals
                .get(i)
                .copied()
                .unwrap_or(std::f64::consts::PI)
        };
        let entry = |obs: &BufferedObs, residual: f64, inlier: bool| VerdictEntry {
            seq: obs.seq,
            residual,
            sensor: obs.sensor_idx as u32,
            inlier,
        };
        // The indices are the sensor table's own: a refusal would be a bug, said aloud.
        let mut add = |entries: &mut dyn Iterator<Item = VerdictEntry>| {
            if let Err(err) = verdicts.extend_indexed(entries) {
                tracing::error!(%err, "verdicts left out of a solution");
            }
        };
        if verdict.residuals.len() >= n && verdict.inliers.len() >= n {
            // The usual case: zipped slices, no index checks.
            let split = first.len();
            for (obs, offset) in [(first, 0), (second, split)] {
                let end = offset + obs.len();
                let residuals = &verdict.residuals[offset..end];
                let inliers = &verdict.inliers[offset..end];
                add(&mut obs
                    .iter()
                    .zip(residuals)
                    .zip(inliers)
                    .map(|((obs, &residual), &inlier)| entry(obs, residual, solved && inlier)));
            }
        } else {
            add(&mut first
                .iter()
                .chain(second)
                .enumerate()
                .map(|(i, obs)| entry(obs, angle(i), flag(i))));
        }
        verdicts
    }

    /// The verdict of the fallback attitude when no solve gave one (no solver gates).
    fn assess_unsolved(&mut self, q: &UnitQuaternion<f64>, gate_k: f64, residuals: bool) {
        // The solver's buffer holds the epoch's pairs even when it refused them.
        assess_into(
            &mut self.verdict,
            self.solver.loaded().pairs,
            q,
            gate_k,
            residuals,
        );
    }

    fn judge_epoch_alerts(
        &mut self,
        epoch: i64,
        status: SolutionStatus,
        inlier_fraction: f64,
        directions: f64,
        out: &mut Vec<Output>,
    ) {
        if status != SolutionStatus::Insufficient {
            let level = self.inlier_alert.level();
            if let Some(change) = self.inlier_alert.update(epoch, inlier_fraction) {
                let message = match change {
                    AlertState::Raised => {
                        format!("window inlier fraction {inlier_fraction:.3} is below {level:.3}")
                    }
                    AlertState::Cleared => {
                        format!(
                            "window inlier fraction {inlier_fraction:.3} is back above {level:.3}"
                        )
                    }
                };
                out.push(alert(
                    epoch,
                    "inlier_fraction",
                    change,
                    inlier_fraction,
                    level,
                    None,
                    message,
                ));
            }
        }
        let min_obs = self.config.alerts.sensor_min_obs.max(1);
        for &idx in &self.sensor_order {
            let (n, n_inliers) = self.counts[idx as usize];
            if n < min_obs {
                continue;
            }
            let state = &mut self.sensors[idx as usize];
            let share = n_inliers as f64 / n as f64;
            let level = state.inliers.level();
            if let Some(change) = state.inliers.update(epoch, share) {
                let name = &state.name;
                let message = match change {
                    AlertState::Raised => {
                        format!("sensor `{name}`: inlier share {share:.3} is below {level:.3}")
                    }
                    AlertState::Cleared => {
                        format!("sensor `{name}`: inlier share {share:.3} is back above {level:.3}")
                    }
                };
                out.push(alert(
                    epoch,
                    "sensor_inliers",
                    change,
                    share,
                    level,
                    Some(name.to_string()),
                    message,
                ));
            }
        }
        if let Some(change) = self.unobservable_alert.update(epoch, directions) {
            let message = match change {
                AlertState::Raised => format!(
                    "attitude unobservable: inliers span {directions} independent directions, need 2"
                ),
                AlertState::Cleared => "attitude observable again on all three axes".to_string(),
            };
            out.push(alert(
                epoch,
                "unobservable",
                change,
                directions,
                2.0,
                None,
                message,
            ));
        }
    }
}

fn alert(
    t: i64,
    kind: &str,
    state: AlertState,
    value: f64,
    threshold: f64,
    sensor: Option<String>,
    message: String,
) -> Output {
    Output::Alert(Alert {
        t,
        kind: kind.to_string(),
        state,
        value,
        threshold,
        sensor,
        message,
    })
}

/// Information-weighted mean age of the inliers at the epoch, seconds:
/// `Σ σ_i⁻² (E − t_i) / Σ σ_i⁻²` over the pairs added (0 with none).
#[derive(Debug, Clone, Copy, Default)]
struct InlierAge {
    /// `Σ σ_i⁻² (E − t_i)`, ns.
    weighted: f64,
    total: f64,
}

impl InlierAge {
    /// Adds a pair of weight `w = σ⁻²` (propagated σ) measured `age_ns` before the epoch.
    #[inline]
    fn add(&mut self, w: f64, age_ns: i64) {
        // In ns: one division at the end, not one per pair.
        self.weighted += w * age_ns as f64;
        self.total += w;
    }

    fn mean_s(&self) -> f64 {
        if self.total > 0.0 {
            self.weighted / self.total / NS_PER_S
        } else {
            0.0
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A steady scene: a star camera (5 stars every 100 ms) and a
    /// magnetometer (100 Hz, every seventh sample a stray field), a gyro at
    /// 100 Hz, a slow constant slew; inputs in time order up to `end_ms`.
    fn slewing_scene(end_ms: i64) -> Vec<Input> {
        const MS: i64 = 1_000_000;
        let w = Vector3::new(0.01, -0.02, 0.015);
        let q0 = UnitQuaternion::from_scaled_axis(Vector3::new(0.2, -0.1, 0.4));
        let attitude = |ms: i64| UnitQuaternion::from_scaled_axis(-w * (ms as f64 * 1e-3)) * q0;
        let star = |k: i64| {
            let x = k as f64;
            Vector3::new((1.3 * x).sin(), (0.7 * x).cos(), 0.4 + 0.1 * x.sin()).normalize()
        };
        let mag = Vector3::new(0.2, 0.9, -0.4).normalize();
        let obs = |sensor: &str, seq: u64, ms: i64, b: Vector3<f64>, r: Vector3<f64>, sigma| {
            Input::Obs(ValidObs {
                sensor: sensor.into(),
                seq,
                t: ms * MS,
                b: b.into(),
                r: r.into(),
                sigma: Some(sigma),
            })
        };
        let mut inputs = Vec::new();
        let (mut star_seq, mut mag_seq) = (0u64, 0u64);
        for ms in 0..end_ms {
            let a = attitude(ms);
            if ms % 10 == 0 {
                inputs.push(Input::Rate(wahbad_protocol::ValidRate {
                    sensor: "gyro".into(),
                    seq: (ms / 10) as u64,
                    t: ms * MS,
                    w: w.into(),
                }));
            }
            if ms % 100 == 3 {
                for k in 0..5 {
                    let r = star(ms / 100 * 5 + k);
                    inputs.push(obs("st", star_seq, ms, a * r, r, 2e-4));
                    star_seq += 1;
                }
            }
            if ms % 10 == 5 {
                let b = if mag_seq % 7 == 0 {
                    Vector3::x()
                } else {
                    a * mag
                };
                inputs.push(obs("mag", mag_seq, ms, b, mag, 3e-3));
                mag_seq += 1;
            }
        }
        inputs
    }

    #[test]
    fn one_pass_tally_and_verdicts_match_the_two_passes() {
        // Derived in the test: after each epoch, the fused pass must give the
        // counts, the age sums (to the bit: the same sums in the same order)
        // and the verdict list of `tally_inliers` followed by `verdict_list`,
        // also on windows that straddle the ring's end (a small ring wraps
        // every few seconds).
        let config = EstimatorConfig {
            max_window_obs: 300,
            ..EstimatorConfig::default()
        };
        let mut est = Estimator::new(config).unwrap();
        est.set_verdicts(true);
        let (mut out, mut checked, mut straddling, mut outliers) = (Vec::new(), 0, 0, 0);
        for input in slewing_scene(8_000) {
            est.ingest(input, &mut out).unwrap();
            let Some(epoch) = out.iter().rev().find_map(|o| match o {
                Output::Solution(s) if s.status == SolutionStatus::Ok => Some(s.t),
                _ => None,
            }) else {
                out.clear();
                continue;
            };
            out.clear();
            let range = est.obs.range(epoch - est.checked.span_ns, epoch);
            let (first, second) = est.obs.slices(range.clone());
            straddling += (!first.is_empty() && !second.is_empty()) as usize;
            let mut two_pass = est.clone();
            let (age, list) = est
                .tally_with_verdicts(epoch, range.clone())
                .expect("a solved window is the usual case");
            let want_age = two_pass.tally_inliers(epoch, range.clone(), true);
            let want_list = two_pass.verdict_list(range);
            assert_eq!(est.counts, two_pass.counts, "epoch {epoch}");
            assert_eq!(
                age.weighted.to_bits(),
                want_age.weighted.to_bits(),
                "epoch {epoch}"
            );
            assert_eq!(
                age.total.to_bits(),
                want_age.total.to_bits(),
                "epoch {epoch}"
            );
            assert_eq!(list, want_list, "epoch {epoch}");
            outliers += list.iter().filter(|v| !v.inlier).count();
            checked += 1;
        }
        assert!(checked > 50, "{checked} epochs checked");
        assert!(straddling > 0, "no window straddled the ring's end");
        assert!(outliers > 0, "the stray fields were all let in");
    }

    #[test]
    fn inlier_age_weights_by_information() {
        // Derived in the test: σ = 1 at age 1 s and σ = 2 at age 2 s give
        // weights 1 and 1/4, so (1·1 + 0.25·2) / 1.25 = 1.2 s; outliers are
        // never added (the epoch's loop adds inliers only).
        let mut age = InlierAge::default();
        assert_eq!(age.mean_s(), 0.0, "no inliers");
        age.add(1.0, 1_000_000_000);
        age.add(0.25, 2_000_000_000);
        let mean = age.mean_s();
        assert!((mean - 1.2).abs() < 1e-12, "{mean}");
    }
}
