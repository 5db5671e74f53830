//! The simulator: a lazy, merged, deterministic stream of protocol messages.
//!
//! Each sensor (and the truth source) is a stream of samples at
//! `offset + k / rate`. The next message always comes from the stream with
//! the earliest pending sample, so data time never decreases; equal times
//! are broken by stream order: truth, gyro, star camera, magnetometer, sun
//! sensor. A star frame's obs share the frame time and come in catalogue
//! (brightness) order. Memory stays bounded: at most one frame is buffered,
//! and the fault log grows only while faults are active
//! ([`Simulator::take_fault_log`] drains it).
//!
//! Every sample draws its noise whether or not it is sent or corrupted, and
//! fault choices come from their own random stream, so a run with faults
//! equals the fault-free run of the same seed outside the faults' spans
//! (sequence numbers aside: they count messages sent).

use std::collections::VecDeque;

use nalgebra::{Unit, UnitQuaternion, Vector3};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use wahbad_protocol::message::{Message, Obs, Rate, Truth};

use super::faults::{FaultEffect, FaultKind, FaultRecord};
use super::motion::Motion;
use super::noise::{self, angle_between, perpendicular_basis};
use super::scenario::{arcsec_to_rad, Scenario, SensorSetting};
use super::sky::Catalogue;
use super::{seconds_to_ns, ScenarioError};

/// Smallest angle between a misidentified star's reference and the true one.
const FALSE_STAR_MIN_SEPARATION_DEG: f64 = 1.0;

/// Random streams of one seed, one per use.
#[derive(Debug, Clone, Copy)]
enum RandomStream {
    Catalogue = 0,
    StarNoise = 1,
    MagNoise = 2,
    SunNoise = 3,
    GyroNoise = 4,
    FaultChoices = 5,
}

fn rng_for(seed: u64, stream: RandomStream) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(stream as u64);
    rng
}

/// Which source a stream of samples is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Source {
    Truth,
    Gyro,
    StarCam,
    Mag,
    Sun,
}

/// One stream of samples.
#[derive(Debug, Clone)]
struct Stream {
    source: Source,
    offset_ns: i64,
    rate_hz: f64,
    /// Index of the next sample.
    sample_idx: u64,
    /// Time of the next sample, ns.
    next_t: i64,
    /// Next sequence number to send.
    seq: u64,
    rng: ChaCha8Rng,
}

impl Stream {
    fn new(source: Source, rate_hz: f64, offset_s: f64, rng: ChaCha8Rng) -> Self {
        let offset_ns = seconds_to_ns(offset_s);
        Stream {
            source,
            offset_ns,
            rate_hz,
            sample_idx: 0,
            next_t: offset_ns,
            seq: 0,
            rng,
        }
    }

    fn advance(&mut self) {
        self.sample_idx += 1;
        // From the index each time, so a long run does not accumulate rounding.
        self.next_t = self.offset_ns + (self.sample_idx as f64 * 1e9 / self.rate_hz).round() as i64;
    }

    fn take_seq(&mut self) -> u64 {
        let seq = self.seq;
        self.seq += 1;
        seq
    }
}

/// Fixed geometry of the run, unit vectors precomputed.
#[derive(Debug, Clone)]
struct Geometry {
    star_boresight: Vector3<f64>,
    star_half_cone: f64,
    star_sigma: f64,
    field: Vector3<f64>,
    /// Axis perpendicular to the field about which a coil transient turns it.
    coil_axis: Unit<Vector3<f64>>,
    mag_sigma: f64,
    sun_boresight: Vector3<f64>,
    sun_half_cone: f64,
    sun_sigma: f64,
    lamp: Vector3<f64>,
    /// Horizontal axis about which the lamp is turned down to its reflection.
    reflection_axis: Unit<Vector3<f64>>,
    /// Per-sample gyro noise σ, rad/s.
    gyro_sigma: f64,
    gyro_bias: Vector3<f64>,
}

impl Geometry {
    fn new(scenario: &Scenario) -> Self {
        let field = Vector3::from(scenario.mag.field).normalize();
        let lamp = Vector3::from(scenario.sun.lamp).normalize();
        let horizontal = lamp.cross(&Vector3::z());
        // A lamp straight overhead has no "below"; any horizontal axis will do.
        let reflection_axis = if horizontal.norm() > 1e-9 {
            Unit::new_normalize(horizontal)
        } else {
            Vector3::x_axis()
        };
        Geometry {
            star_boresight: Vector3::from(scenario.star_cam.boresight).normalize(),
            star_half_cone: scenario.star_cam.half_cone_deg.to_radians(),
            star_sigma: arcsec_to_rad(scenario.star_cam.sigma_arcsec),
            field,
            coil_axis: Unit::new_normalize(perpendicular_basis(&field).0),
            mag_sigma: scenario.mag.sigma_deg.to_radians(),
            sun_boresight: Vector3::from(scenario.sun.boresight).normalize(),
            sun_half_cone: scenario.sun.half_cone_deg.to_radians(),
            sun_sigma: scenario.sun.sigma_deg.to_radians(),
            lamp,
            reflection_axis,
            gyro_sigma: scenario.gyro.arw_rad_sqrt_s * scenario.gyro.rate_hz.sqrt(),
            gyro_bias: Vector3::from(scenario.gyro.bias_rad_s),
        }
    }
}

/// A deterministic bench scenario as an iterator of protocol messages
/// (`obs`, `rate`, `truth`) in non-decreasing data time.
#[derive(Debug, Clone)]
pub struct Simulator {
    scenario: Scenario,
    motion: Motion,
    geometry: Geometry,
    catalogue: Catalogue,
    duration_ns: i64,
    /// Streams in tie-break order.
    streams: Vec<Stream>,
    fault_rng: ChaCha8Rng,
    pending: VecDeque<Message>,
    fault_log: Vec<FaultRecord>,
    /// Scratch list of visible star indices, reused for every frame.
    visible: Vec<usize>,
    /// Scratch list of a frame's stars: (star index, measured b).
    frame: Vec<(usize, Vector3<f64>)>,
}

impl Simulator {
    /// Validates `scenario` and prepares the run (draws the star field).
    pub fn new(scenario: &Scenario) -> Result<Self, ScenarioError> {
        scenario.validate()?;
        let motion = Motion::new(&scenario.motion, scenario.initial_attitude()?)?;
        let geometry = Geometry::new(scenario);
        let cam = &scenario.star_cam;
        let n_stars = Catalogue::size_for(cam.stars_per_frame, geometry.star_half_cone);
        let catalogue = Catalogue::generate(
            &mut rng_for(scenario.seed, RandomStream::Catalogue),
            n_stars,
        );
        let seed = scenario.seed;
        let mut streams = Vec::with_capacity(5);
        let truth = &scenario.truth;
        if truth.enabled {
            // Truth is exact: its generator is never drawn from.
            let rng = rng_for(seed, RandomStream::FaultChoices);
            streams.push(Stream::new(
                Source::Truth,
                truth.rate_hz,
                truth.offset_s,
                rng,
            ));
        }
        let gyro = &scenario.gyro;
        if gyro.enabled {
            let rng = rng_for(seed, RandomStream::GyroNoise);
            streams.push(Stream::new(Source::Gyro, gyro.rate_hz, gyro.offset_s, rng));
        }
        if cam.enabled {
            let rng = rng_for(seed, RandomStream::StarNoise);
            streams.push(Stream::new(Source::StarCam, cam.rate_hz, cam.offset_s, rng));
        }
        let mag = &scenario.mag;
        if mag.enabled {
            let rng = rng_for(seed, RandomStream::MagNoise);
            streams.push(Stream::new(Source::Mag, mag.rate_hz, mag.offset_s, rng));
        }
        let sun = &scenario.sun;
        if sun.enabled {
            let rng = rng_for(seed, RandomStream::SunNoise);
            streams.push(Stream::new(Source::Sun, sun.rate_hz, sun.offset_s, rng));
        }
        Ok(Simulator {
            scenario: scenario.clone(),
            motion,
            geometry,
            catalogue,
            duration_ns: seconds_to_ns(scenario.duration_s),
            streams,
            fault_rng: rng_for(seed, RandomStream::FaultChoices),
            pending: VecDeque::with_capacity(cam.stars_per_frame as usize),
            fault_log: Vec::new(),
            visible: Vec::with_capacity(cam.stars_per_frame as usize),
            frame: Vec::with_capacity(cam.stars_per_frame as usize),
        })
    }

    /// The scenario being run.
    pub fn scenario(&self) -> &Scenario {
        &self.scenario
    }

    /// The enabled sensors (see [`Scenario::sensor_settings`]).
    pub fn sensor_settings(&self) -> Vec<SensorSetting> {
        self.scenario.sensor_settings()
    }

    /// Length of the run, ns; every message has `0 <= t < duration_ns`.
    pub fn duration_ns(&self) -> i64 {
        self.duration_ns
    }

    /// True attitude at data time `t_ns` (`w >= 0`), maps reference to body.
    pub fn truth_at(&self, t_ns: i64) -> UnitQuaternion<f64> {
        canonical(self.motion.attitude_at(t_ns))
    }

    /// True body angular velocity at data time `t_ns`, rad/s, body frame.
    pub fn body_rate_at(&self, t_ns: i64) -> Vector3<f64> {
        self.motion.body_rate_at(t_ns)
    }

    /// Direction of every star of the stimulator's field, reference frame.
    pub fn star_field(&self) -> impl ExactSizeIterator<Item = &Vector3<f64>> + '_ {
        (0..self.catalogue.len()).map(|star_idx| self.catalogue.star(star_idx))
    }

    /// Corrupted or suppressed samples so far (ground truth for tests), in
    /// the order they were generated (messages already generated may still
    /// be buffered, see [`Self::buffered`]).
    pub fn fault_log(&self) -> &[FaultRecord] {
        &self.fault_log
    }

    /// Takes the fault log so far, leaving it empty (for long streaming runs).
    pub fn take_fault_log(&mut self) -> Vec<FaultRecord> {
        std::mem::take(&mut self.fault_log)
    }

    /// Messages generated and not yet returned (at most one star frame).
    pub fn buffered(&self) -> usize {
        self.pending.len()
    }

    /// The first active fault of `kind` at `t_ns`, with its index.
    fn active_fault(&self, kind: FaultKind, t_ns: i64) -> Option<(usize, &FaultEffect)> {
        self.scenario
            .faults
            .iter()
            .enumerate()
            .find(|(_, fault)| fault.effect.kind() == kind && fault.active_at(t_ns))
            .map(|(fault_idx, fault)| (fault_idx, &fault.effect))
    }

    /// The index of an active dropout of `sensor` at `t_ns`.
    fn dropout(&self, sensor: &str, t_ns: i64) -> Option<usize> {
        self.scenario.faults.iter().position(|fault| {
            matches!(&fault.effect, FaultEffect::Dropout { sensor: s } if s == sensor)
                && fault.active_at(t_ns)
        })
    }

    fn log(&mut self, fault_idx: usize, kind: FaultKind, sensor: &str, seq: Option<u64>, t: i64) {
        self.fault_log.push(FaultRecord {
            fault_idx,
            kind,
            sensor: sensor.to_owned(),
            seq,
            t,
        });
    }

    /// Generates the sample of `streams[stream_idx]` at `t` into `pending`.
    fn sample(&mut self, stream_idx: usize, t: i64) {
        match self.streams[stream_idx].source {
            Source::Truth => self.sample_truth(t),
            Source::Gyro => self.sample_gyro(stream_idx, t),
            Source::StarCam => self.sample_star_cam(stream_idx, t),
            Source::Mag => self.sample_mag(stream_idx, t),
            Source::Sun => self.sample_sun(stream_idx, t),
        }
    }

    fn sample_truth(&mut self, t: i64) {
        let q = self.truth_at(t);
        self.pending.push_back(Message::Truth(Truth {
            t,
            q: [q.w, q.i, q.j, q.k],
            token: None,
        }));
    }

    fn sample_gyro(&mut self, stream_idx: usize, t: i64) {
        let stream = &mut self.streams[stream_idx];
        let noise = Vector3::new(
            stream.rng.sample::<f64, _>(StandardNormal),
            stream.rng.sample::<f64, _>(StandardNormal),
            stream.rng.sample::<f64, _>(StandardNormal),
        );
        let w = self.motion.body_rate_at(t)
            + self.geometry.gyro_bias
            + noise * self.geometry.gyro_sigma;
        let name = self.scenario.gyro.name.clone();
        if let Some(fault_idx) = self.dropout(&name, t) {
            self.log(fault_idx, FaultKind::Dropout, &name, None, t);
            return;
        }
        let seq = self.streams[stream_idx].take_seq();
        self.pending.push_back(Message::Rate(Rate {
            sensor: name.into(),
            seq,
            t,
            w: w.into(),
            token: None,
        }));
    }

    fn sample_star_cam(&mut self, stream_idx: usize, t: i64) {
        let q = self.motion.attitude_at(t);
        let g = &self.geometry;
        let axis_ref = q.inverse_transform_vector(&g.star_boresight);
        let max_stars = self.scenario.star_cam.stars_per_frame as usize;
        self.visible.clear();
        self.catalogue
            .visible(&axis_ref, g.star_half_cone, max_stars, &mut self.visible);
        self.frame.clear();
        let rng = &mut self.streams[stream_idx].rng;
        for &star_idx in &self.visible {
            let b_true = q.transform_vector(self.catalogue.star(star_idx));
            let b = noise::apply(&b_true, noise::draw(rng), g.star_sigma);
            // A star whose measured image falls off the detector is not reported.
            if angle_between(&b, &g.star_boresight) <= g.star_half_cone {
                self.frame.push((star_idx, b));
            }
        }
        let name = self.scenario.star_cam.name.clone();
        if let Some(fault_idx) = self.dropout(&name, t) {
            self.log(fault_idx, FaultKind::Dropout, &name, None, t);
            return;
        }
        // Misidentified stars: pick which ones, then a wrong reference for each.
        let mut wrong: Vec<(usize, Vector3<f64>)> = Vec::new();
        let mut false_fault = None;
        if let Some((fault_idx, FaultEffect::FalseStars { share })) =
            self.active_fault(FaultKind::FalseStars, t)
        {
            let n_frame = self.frame.len();
            let n_wrong = ((share * n_frame as f64).round() as usize)
                .clamp(1, n_frame.max(1))
                .min(n_frame);
            let mut order: Vec<usize> = (0..n_frame).collect();
            // Partial Fisher-Yates: the first n_wrong entries are a uniform choice.
            for slot in 0..n_wrong {
                let pick = self.fault_rng.random_range(slot..n_frame);
                order.swap(slot, pick);
            }
            order.truncate(n_wrong);
            order.sort_unstable();
            let min_separation = FALSE_STAR_MIN_SEPARATION_DEG.to_radians();
            for frame_idx in order {
                let true_r = self.catalogue.star(self.frame[frame_idx].0);
                let r = self
                    .catalogue
                    .wrong_star(&mut self.fault_rng, true_r, min_separation);
                wrong.push((frame_idx, r));
            }
            false_fault = Some(fault_idx);
        }
        let sigma = self.geometry.star_sigma;
        let mut wrong_iter = wrong.into_iter().peekable();
        for frame_idx in 0..self.frame.len() {
            let (star_idx, b) = self.frame[frame_idx];
            let seq = self.streams[stream_idx].take_seq();
            let r = match wrong_iter.next_if(|(idx, _)| *idx == frame_idx) {
                Some((_, r)) => {
                    let fault_idx =
                        false_fault.expect("wrong stars only under a false_stars fault");
                    self.log(fault_idx, FaultKind::FalseStars, &name, Some(seq), t);
                    r
                }
                None => *self.catalogue.star(star_idx),
            };
            self.pending.push_back(obs(&name, seq, t, b, r, sigma));
        }
    }

    fn sample_mag(&mut self, stream_idx: usize, t: i64) {
        let q = self.motion.attitude_at(t);
        let g = &self.geometry;
        let draw = noise::draw(&mut self.streams[stream_idx].rng);
        let name = self.scenario.mag.name.clone();
        if let Some(fault_idx) = self.dropout(&name, t) {
            self.log(fault_idx, FaultKind::Dropout, &name, None, t);
            return;
        }
        let mut field_now = g.field;
        let mut transient = None;
        if let Some((fault_idx, FaultEffect::CoilTransient { bias_deg })) =
            self.active_fault(FaultKind::CoilTransient, t)
        {
            field_now = noise::rotate(&g.field, &g.coil_axis, bias_deg.to_radians());
            transient = Some(fault_idx);
        }
        let b = noise::apply(&q.transform_vector(&field_now), draw, g.mag_sigma);
        let (r, sigma) = (g.field, g.mag_sigma);
        let seq = self.streams[stream_idx].take_seq();
        if let Some(fault_idx) = transient {
            self.log(fault_idx, FaultKind::CoilTransient, &name, Some(seq), t);
        }
        self.pending.push_back(obs(&name, seq, t, b, r, sigma));
    }

    fn sample_sun(&mut self, stream_idx: usize, t: i64) {
        let q = self.motion.attitude_at(t);
        let g = &self.geometry;
        let draw = noise::draw(&mut self.streams[stream_idx].rng);
        let in_view = |b: &Vector3<f64>| angle_between(b, &g.sun_boresight) <= g.sun_half_cone;
        let mut seen = None;
        if let Some((fault_idx, FaultEffect::LampReflection { offset_deg })) =
            self.active_fault(FaultKind::LampReflection, t)
        {
            let reflection = noise::rotate(&g.lamp, &g.reflection_axis, -offset_deg.to_radians());
            let b = noise::apply(&q.transform_vector(&reflection), draw, g.sun_sigma);
            if in_view(&b) {
                seen = Some((b, Some(fault_idx)));
            }
        }
        if seen.is_none() {
            let b = noise::apply(&q.transform_vector(&g.lamp), draw, g.sun_sigma);
            if in_view(&b) {
                seen = Some((b, None));
            }
        }
        let (r, sigma) = (g.lamp, g.sun_sigma);
        let name = self.scenario.sun.name.clone();
        let Some((b, reflection)) = seen else {
            return;
        };
        if let Some(fault_idx) = self.dropout(&name, t) {
            self.log(fault_idx, FaultKind::Dropout, &name, None, t);
            return;
        }
        let seq = self.streams[stream_idx].take_seq();
        if let Some(fault_idx) = reflection {
            self.log(fault_idx, FaultKind::LampReflection, &name, Some(seq), t);
        }
        self.pending.push_back(obs(&name, seq, t, b, r, sigma));
    }
}

fn obs(sensor: &str, seq: u64, t: i64, b: Vector3<f64>, r: Vector3<f64>, sigma: f64) -> Message {
    Message::Obs(Obs {
        sensor: sensor.into(),
        seq,
        t,
        b: b.into(),
        r: r.into(),
        sigma: Some(sigma),
        token: None,
    })
}

/// `q` with the protocol's sign: `w >= 0`.
fn canonical(q: UnitQuaternion<f64>) -> UnitQuaternion<f64> {
    if q.w < 0.0 {
        UnitQuaternion::new_unchecked(-q.into_inner())
    } else {
        q
    }
}

impl Iterator for Simulator {
    type Item = Message;

    fn next(&mut self) -> Option<Message> {
        loop {
            if let Some(message) = self.pending.pop_front() {
                return Some(message);
            }
            // Earliest pending sample; `min_by_key` keeps the first of equals,
            // which is the tie-break order.
            let (stream_idx, t) = self
                .streams
                .iter()
                .enumerate()
                .map(|(stream_idx, stream)| (stream_idx, stream.next_t))
                .filter(|&(_, t)| t < self.duration_ns)
                .min_by_key(|&(_, t)| t)?;
            self.streams[stream_idx].advance();
            self.sample(stream_idx, t);
        }
    }
}
