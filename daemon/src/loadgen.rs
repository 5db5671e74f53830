//! The load generator behind `wahbad bench`: streams observations to a running
//! daemon over TCP at a set rate, subscribes to its feed on a second
//! connection, and measures what got through and how fast solutions came back.
//!
//! It runs in its own process (the bench command starts it beside `serve`), so
//! its CPU use and the daemon's are separate, as with a real bench client.
//!
//! # What is measured
//!
//! - Message `i` carries data time `t_i = i · 10⁹ / rate` ns and is written when
//!   the wall clock since the start reaches `t_i` (batched when the generator
//!   falls behind, so a slow daemon shows up as a lower achieved rate).
//! - Latency of epoch `E`: from the moment the generator hands the frame of the
//!   first message with `t ≥ E + latency allowance` (the one that closes `E`)
//!   to the kernel, to the moment the subscriber thread has read and decoded
//!   the solution with `t = E`. Both stamps come from one monotonic clock in
//!   this process, so the figure includes loopback transit both ways, the
//!   daemon's decode, queueing, solve, encode and fan-out. The generator
//!   stamps before its write, so the figure is an upper bound.
//! - Losses: messages sent minus the daemon's `status.accepted` once it has
//!   drained (it counts observations and rates the estimator accepted).
//!
//! Scene: one constant attitude, no motion; four vector sensors in turn (two
//! star-tracker heads over 64 catalogue directions, sun, magnetometer) with
//! small deterministic noise, and a gyro reading zero rate every 50th message.

use std::io::{self, Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

use nalgebra::{UnitQuaternion, Vector3};
use serde::Serialize;
use wahbad_protocol::{
    decode_body, encode_frame_into, FrameDecoder, Hello, Message, Obs, Rate, Role, Status,
    PROTOCOL_VERSION,
};

/// What to send.
#[derive(Debug, Clone)]
pub struct LoadSpec {
    /// The daemon's TCP address.
    pub addr: SocketAddr,
    /// Messages per second.
    pub rate: f64,
    /// Sending time.
    pub duration: Duration,
    /// Epoch period of the daemon, ns (to know which message closes an epoch).
    pub period_ns: i64,
    /// Latency allowance of the daemon, ns.
    pub latency_ns: i64,
    /// Whether the subscriber asks for per-observation verdicts.
    pub verdicts: bool,
}

/// Latency percentiles, µs.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Percentiles {
    /// Epochs measured.
    pub n: usize,
    /// Median.
    pub p50_us: f64,
    /// 99th percentile.
    pub p99_us: f64,
    /// 99.9th percentile.
    pub p999_us: f64,
    /// Largest.
    pub max_us: f64,
}

/// What a load run measured.
#[derive(Debug, Clone, Serialize)]
pub struct LoadReport {
    /// Target rate, messages/s.
    pub rate_target: f64,
    /// Messages sent (obs and rates).
    pub sent: u64,
    /// Wall time of sending, s.
    pub send_s: f64,
    /// Achieved send rate, messages/s.
    pub rate_achieved: f64,
    /// `status.accepted` once drained.
    pub accepted: u64,
    /// Accepted per second of sending.
    pub accepted_per_s: f64,
    /// `sent - accepted`.
    pub lost: i64,
    /// `status.rejected`.
    pub rejected: u64,
    /// `status.dropped`: estimator window overflow or too-old drops (by configuration, not transport).
    pub dropped: u64,
    /// Time after the last write until `accepted` reached `sent`, ms (`None`: not within the wait).
    pub drain_ms: Option<f64>,
    /// Solutions the subscriber received.
    pub solutions: usize,
    /// `lagged` messages the subscriber received.
    pub lagged: usize,
    /// Closing observation → solution received.
    pub latency: Option<Percentiles>,
}

/// Why a load run failed.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum LoadError {
    /// Socket trouble.
    #[error("load generator i/o: {0}")]
    Io(#[from] io::Error),
    /// The daemon did not speak the protocol as expected.
    #[error("load generator: {0}")]
    Protocol(String),
}

const SENSORS: [&str; 4] = ["st_a", "st_b", "sun", "mag"];
const GYRO: &str = "gyro";

/// Deterministic message source of the scene (see the module doc).
struct Scene {
    attitude: UnitQuaternion<f64>,
    catalogue: Vec<Vector3<f64>>,
    seqs: [u64; 5],
    lcg: u64,
}

impl Scene {
    fn new() -> Self {
        // Catalogue: a golden-angle spiral over the sphere.
        let n = 64;
        let catalogue = (0..n)
            .map(|k| {
                let z = 1.0 - 2.0 * (k as f64 + 0.5) / n as f64;
                let rho = (1.0 - z * z).sqrt();
                let phi = k as f64 * 2.399_963_229_728_653;
                Vector3::new(rho * phi.cos(), rho * phi.sin(), z)
            })
            .collect();
        Scene {
            attitude: UnitQuaternion::from_scaled_axis(Vector3::new(0.3, -0.2, 0.5)),
            catalogue,
            seqs: [0; 5],
            lcg: 0x2545_f491_4f6c_dd1d,
        }
    }

    /// Uniform in [-1, 1).
    fn jitter(&mut self) -> f64 {
        self.lcg = self
            .lcg
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        ((self.lcg >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
    }

    fn message(&mut self, idx: u64, t: i64) -> Message {
        if idx % 50 == 0 {
            let seq = self.seqs[4];
            self.seqs[4] += 1;
            return Message::Rate(Rate {
                sensor: GYRO.into(),
                seq,
                t,
                w: [0.0; 3],
                token: None,
            });
        }
        let sensor_idx = (idx % 4) as usize;
        let seq = self.seqs[sensor_idx];
        self.seqs[sensor_idx] += 1;
        let r = self.catalogue[(idx / 4 % 64) as usize];
        let sigma = 1e-3;
        let noise = Vector3::new(self.jitter(), self.jitter(), self.jitter()) * (0.5 * sigma);
        let b = (self.attitude * r + noise).normalize();
        Message::Obs(Obs {
            sensor: SENSORS[sensor_idx].into(),
            seq,
            t,
            b: [b.x, b.y, b.z],
            r: [r.x, r.y, r.z],
            sigma: Some(sigma),
            token: None,
        })
    }
}

fn connect(
    addr: SocketAddr,
    role: Role,
    verdicts: Option<bool>,
) -> Result<(TcpStream, FrameDecoder), LoadError> {
    let mut stream = TcpStream::connect(addr)?;
    stream.set_nodelay(true)?;
    let hello = Message::Hello(Hello {
        version: PROTOCOL_VERSION,
        role,
        name: Some("wahbad-bench".into()),
        token: None,
        verdicts,
    });
    let mut buf = Vec::new();
    encode_frame_into(&hello, &mut buf);
    stream.write_all(&buf)?;
    let mut decoder = FrameDecoder::new();
    match read_message(&mut stream, &mut decoder, Duration::from_secs(5))? {
        Some(Message::Welcome(_)) => Ok((stream, decoder)),
        other => Err(LoadError::Protocol(format!(
            "expected welcome, got {other:?}"
        ))),
    }
}

/// The next message, waiting at most `wait`; `None` on timeout.
fn read_message(
    stream: &mut TcpStream,
    decoder: &mut FrameDecoder,
    wait: Duration,
) -> Result<Option<Message>, LoadError> {
    let deadline = Instant::now() + wait;
    let mut chunk = [0u8; 64 * 1024];
    loop {
        if let Some(body) = decoder
            .next_frame()
            .map_err(|e| LoadError::Protocol(e.to_string()))?
        {
            let msg = decode_body(body).map_err(|e| LoadError::Protocol(e.to_string()))?;
            return Ok(Some(msg));
        }
        let left = deadline.saturating_duration_since(Instant::now());
        if left.is_zero() {
            return Ok(None);
        }
        stream.set_read_timeout(Some(left.max(Duration::from_millis(1))))?;
        match stream.read(&mut chunk) {
            Ok(0) => {
                return Err(LoadError::Protocol(
                    "the daemon closed the connection".into(),
                ))
            }
            Ok(n) => decoder.push(&chunk[..n]),
            Err(e)
                if matches!(
                    e.kind(),
                    io::ErrorKind::WouldBlock | io::ErrorKind::TimedOut
                ) =>
            {
                return Ok(None)
            }
            Err(e) => return Err(e.into()),
        }
    }
}

/// What the subscriber thread saw.
#[derive(Default)]
struct Received {
    solutions: Vec<(i64, Instant)>,
    lagged: usize,
}

fn subscribe(
    mut stream: TcpStream,
    mut decoder: FrameDecoder,
    stop: Arc<AtomicBool>,
) -> Result<Received, LoadError> {
    let mut got = Received::default();
    while !stop.load(Ordering::Relaxed) {
        match read_message(&mut stream, &mut decoder, Duration::from_millis(100))? {
            Some(Message::Solution(s)) => got.solutions.push((s.t, Instant::now())),
            Some(Message::Lagged(_)) => got.lagged += 1,
            _ => {}
        }
    }
    Ok(got)
}

/// Percentiles of `samples_us` (sorted here), nearest-rank.
pub fn percentiles(samples_us: &mut [f64]) -> Option<Percentiles> {
    if samples_us.is_empty() {
        return None;
    }
    samples_us.sort_by(f64::total_cmp);
    let at = |p: f64| {
        let rank = ((p * samples_us.len() as f64).ceil() as usize).clamp(1, samples_us.len());
        samples_us[rank - 1]
    };
    Some(Percentiles {
        n: samples_us.len(),
        p50_us: at(0.5),
        p99_us: at(0.99),
        p999_us: at(0.999),
        max_us: samples_us[samples_us.len() - 1],
    })
}

/// Polls `status` on the source connection until `accepted + rejected >= sent` or `wait` passes.
fn drained_status(
    stream: &mut TcpStream,
    decoder: &mut FrameDecoder,
    sent: u64,
    wait: Duration,
) -> Result<(wahbad_protocol::StatusReport, Option<Duration>), LoadError> {
    let start = Instant::now();
    let mut buf = Vec::new();
    loop {
        buf.clear();
        encode_frame_into(&Message::Status(Status::request()), &mut buf);
        stream.write_all(&buf)?;
        let report = loop {
            match read_message(stream, decoder, Duration::from_secs(5))? {
                Some(Message::Status(Status { report: Some(r) })) => break r,
                Some(_) => continue, // rejects: counted by the daemon
                None => return Err(LoadError::Protocol("no status answer".into())),
            }
        };
        let done = report.accepted + report.rejected >= sent;
        if done || start.elapsed() >= wait {
            return Ok((report, done.then(|| start.elapsed())));
        }
        std::thread::sleep(Duration::from_millis(2));
    }
}

/// Runs one load: connect source and subscriber, send for `spec.duration`, measure.
pub fn run(spec: &LoadSpec) -> Result<LoadReport, LoadError> {
    let (sub_stream, sub_decoder) = connect(spec.addr, Role::Subscriber, Some(spec.verdicts))?;
    let stop = Arc::new(AtomicBool::new(false));
    let subscriber = {
        let stop = stop.clone();
        std::thread::spawn(move || subscribe(sub_stream, sub_decoder, stop))
    };
    let (mut source, mut src_decoder) = connect(spec.addr, Role::Source, None)?;

    let mut scene = Scene::new();
    let ns_per_msg = 1e9 / spec.rate;
    let total = (spec.rate * spec.duration.as_secs_f64()).round() as u64;
    // Cap a batch so one write stays a few hundred kB at most.
    let max_batch = 4096u64;
    let mut buf = Vec::with_capacity(1 << 20);
    // Epoch closing stamps: (epoch, write time of its closing message).
    let mut closings: Vec<(i64, Instant)> = Vec::new();
    // The first message has t = 0, so epochs are the multiples of the period from 0.
    let mut next_close_epoch = 0i64;
    let start = Instant::now();
    let mut sent = 0u64;
    while sent < total {
        let elapsed_ns = start.elapsed().as_nanos() as f64;
        let due = ((elapsed_ns / ns_per_msg) as u64 + 1).min(total);
        if due <= sent {
            let next_at = Duration::from_nanos((sent as f64 * ns_per_msg) as u64);
            let wait = next_at.saturating_sub(start.elapsed());
            if wait > Duration::from_micros(80) {
                std::thread::sleep(wait - Duration::from_micros(60));
            } else {
                std::hint::spin_loop();
            }
            continue;
        }
        buf.clear();
        let mut closes = Vec::new();
        let end = due.min(sent + max_batch);
        for idx in sent..end {
            let t = (idx as f64 * ns_per_msg) as i64;
            while t >= next_close_epoch + spec.latency_ns {
                closes.push(next_close_epoch);
                next_close_epoch += spec.period_ns;
            }
            encode_frame_into(&scene.message(idx, t), &mut buf);
        }
        let stamp = Instant::now();
        source.write_all(&buf)?;
        closings.extend(closes.into_iter().map(|e| (e, stamp)));
        sent = end;
    }
    let send_s = start.elapsed().as_secs_f64();
    let (report, drain) =
        drained_status(&mut source, &mut src_decoder, sent, Duration::from_secs(30))?;
    // Time for the last solution to come back, then stop the subscriber.
    std::thread::sleep(Duration::from_millis(300));
    stop.store(true, Ordering::Relaxed);
    let received = subscriber
        .join()
        .map_err(|_| LoadError::Protocol("subscriber thread panicked".into()))??;

    let closing_at: std::collections::HashMap<i64, Instant> = closings.into_iter().collect();
    let mut latencies: Vec<f64> = received
        .solutions
        .iter()
        .filter_map(|(t, at)| {
            closing_at
                .get(t)
                .map(|sent_at| at.saturating_duration_since(*sent_at).as_secs_f64() * 1e6)
        })
        .collect();
    Ok(LoadReport {
        rate_target: spec.rate,
        sent,
        send_s,
        rate_achieved: sent as f64 / send_s,
        accepted: report.accepted,
        accepted_per_s: report.accepted as f64 / send_s,
        lost: sent as i64 - report.accepted as i64,
        rejected: report.rejected,
        dropped: report.dropped,
        drain_ms: drain.map(|d| d.as_secs_f64() * 1e3),
        solutions: received.solutions.len(),
        lagged: received.lagged,
        latency: percentiles(&mut latencies),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nearest_rank_percentiles() {
        // Nearest-rank definition (common practice): p-th percentile is the
        // value at rank ceil(p·n) of the sorted samples.
        let mut xs: Vec<f64> = (1..=1000).rev().map(f64::from).collect();
        let p = percentiles(&mut xs).unwrap();
        assert_eq!(p.n, 1000);
        assert_eq!(p.p50_us, 500.0);
        assert_eq!(p.p99_us, 990.0);
        assert_eq!(p.p999_us, 999.0);
        assert_eq!(p.max_us, 1000.0);
        assert!(percentiles(&mut []).is_none());
    }

    #[test]
    fn scene_messages_validate_and_keep_per_sensor_order() {
        let mut scene = Scene::new();
        let mut last: std::collections::HashMap<wahbad_protocol::SensorName, (u64, i64)> =
            Default::default();
        for idx in 0..500u64 {
            let t = idx as i64 * 1000;
            let (sensor, seq) = match scene.message(idx, t) {
                Message::Obs(obs) => {
                    wahbad_protocol::validate_obs(&obs).expect("valid obs");
                    (obs.sensor, obs.seq)
                }
                Message::Rate(rate) => {
                    wahbad_protocol::validate_rate(&rate).expect("valid rate");
                    (rate.sensor, rate.seq)
                }
                other => panic!("unexpected {other:?}"),
            };
            if let Some(&(prev_seq, prev_t)) = last.get(&sensor) {
                assert!(seq > prev_seq && t >= prev_t);
            }
            last.insert(sensor, (seq, t));
        }
        assert_eq!(last.len(), 5);
    }
}
