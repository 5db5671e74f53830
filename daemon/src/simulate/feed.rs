//! Where a simulated run goes: into a log in the recorder's format, or into
//! a running daemon as a TCP source.
//!
//! - [`estimator_table`]: the `[estimator]` table that matches a scenario
//!   (per-sensor kind, σ and expected rate from
//!   [`Scenario::sensor_settings`], a staleness allowance of three samples
//!   but at least [`MIN_STALE_MS`], the gyro's angle random walk), so a
//!   replay of the log, or a daemon given it, uses the simulator's own noise.
//! - [`write_log`]: the run as the core thread would have recorded it had a
//!   daemon received it without delay: one `F` record per message (the frame
//!   body the protocol encoder makes), receive time = log creation time +
//!   data time, then the final tick that closes the last epoch, then `E`.
//! - [`stream_to`]: `hello` as a source, then every message paced on data
//!   time (`speed` 1 = real time), counting the `reject`s that come back.

use std::io::{BufWriter, Read, Write};
use std::net::{Shutdown, SocketAddr, TcpStream};
use std::path::Path;
use std::sync::mpsc;
use std::time::{Duration, Instant};

use wahbad_protocol::{
    encode_body, encode_frame_into, FrameDecoder, Hello, Message, Role, Status, StatusReport,
    PROTOCOL_VERSION,
};

use super::{Scenario, SensorKind, Simulator};
use crate::record::{LogHeader, LogWriter, RecordError};
use crate::settings::{estimator_config, SettingsError};

/// Messages of each type a run produced (or sent).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct MessageCounts {
    /// `obs` messages.
    pub obs: u64,
    /// `rate` messages.
    pub rates: u64,
    /// `truth` messages.
    pub truths: u64,
}

impl MessageCounts {
    fn count(&mut self, msg: &Message) {
        match msg {
            Message::Obs(_) => self.obs += 1,
            Message::Rate(_) => self.rates += 1,
            Message::Truth(_) => self.truths += 1,
            _ => {}
        }
    }

    /// Observations and rates: what a daemon counts as `accepted` when it takes them all.
    pub fn inputs(&self) -> u64 {
        self.obs + self.rates
    }
}

/// What [`write_log`] wrote.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct LogReport {
    /// Messages recorded.
    pub counts: MessageCounts,
    /// Records in the file, header and end included.
    pub records: u64,
    /// Bench time of the final tick, ns.
    pub final_tick_ns: i64,
}

/// What [`stream_to`] did.
#[derive(Debug, Clone, PartialEq)]
pub struct StreamReport {
    /// Messages sent.
    pub sent: MessageCounts,
    /// `reject` answers received.
    pub rejected: u64,
    /// The first few reject reasons, for the operator.
    pub reject_reasons: Vec<String>,
    /// The daemon's counters once it had taken everything sent.
    pub status: Option<StatusReport>,
    /// Wall-clock time of the run.
    pub elapsed: Duration,
}

/// Why a simulated run could not be written or sent.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum FeedError {
    /// The log could not be written.
    #[error(transparent)]
    Record(#[from] RecordError),
    /// The estimator table made from the scenario is refused.
    #[error(transparent)]
    Settings(#[from] SettingsError),
    /// The connection failed.
    #[error("connection to the daemon: {0}")]
    Io(#[from] std::io::Error),
    /// The daemon answered `error`.
    #[error("the daemon refused the source ({code}): {message}")]
    Refused {
        /// The error code.
        code: String,
        /// The daemon's message.
        message: String,
    },
    /// The daemon said something the protocol does not allow here.
    #[error("protocol: {0}")]
    Protocol(String),
    /// `speed` is not a positive finite number.
    #[error("speed must be finite and > 0, got {0}")]
    Speed(f64),
}

/// The `[estimator]` table matching `scenario` (defaults for everything else).
pub fn estimator_table(scenario: &Scenario) -> toml::Table {
    let mut sensors = toml::Table::new();
    for setting in scenario.sensor_settings() {
        let mut sensor = toml::Table::new();
        let kind = match setting.kind {
            SensorKind::Star => "star",
            SensorKind::Magnetometer => "magnetometer",
            SensorKind::Sun => "sun",
            SensorKind::Gyro => "gyro",
        };
        sensor.insert("kind".into(), kind.into());
        // The gyro's σ is a rate noise; the estimator's `sigma` is angular.
        if setting.kind != SensorKind::Gyro {
            sensor.insert("sigma".into(), setting.sigma.into());
        }
        sensor.insert("expected_rate_hz".into(), setting.rate_hz.into());
        sensor.insert("stale_ms".into(), stale_ms(setting.rate_hz).into());
        sensors.insert(setting.name.clone(), sensor.into());
    }
    let mut table = toml::Table::new();
    if scenario.gyro.enabled {
        table.insert("gyro_arw".into(), scenario.gyro.arw_rad_sqrt_s.into());
    }
    table.insert("sensors".into(), sensors.into());
    table
}

/// Shortest staleness allowance written, ms. The closing tick of a run
/// lands up to one period plus the latency allowance (150 ms with the
/// defaults) after the newest data; 3 samples of a 100 Hz gyro (30 ms)
/// would raise `stale` at every clean end.
pub const MIN_STALE_MS: i64 = 200;

/// Staleness allowance of a sensor sampling at `rate_hz`: three sample
/// periods (the estimator's own rule), at least [`MIN_STALE_MS`].
fn stale_ms(rate_hz: f64) -> i64 {
    ((3000.0 / rate_hz).ceil() as i64).max(MIN_STALE_MS)
}

/// `estimator` as the TOML text of a config file (`[estimator]` table).
pub fn config_file_text(estimator: &toml::Table) -> String {
    let mut file = toml::Table::new();
    file.insert("estimator".into(), estimator.clone().into());
    toml::to_string(&file).unwrap_or_default()
}

/// Writes the whole run of `sim` to a log at `path`, with `estimator` as
/// the recorded configuration and `created_ns` (Unix ns) as creation time.
pub fn write_log(
    sim: Simulator,
    path: &Path,
    estimator: &toml::Table,
    created_ns: i64,
) -> Result<LogReport, FeedError> {
    let config = estimator_config(estimator)?;
    let header = LogHeader {
        created_ns,
        program: format!("wahbad {}", env!("CARGO_PKG_VERSION")),
        protocol: PROTOCOL_VERSION,
        origin: "simulate".into(),
        config: toml::to_string(estimator)
            .map_err(|err| SettingsError::Estimator(err.to_string()))?,
    };
    let mut writer = LogWriter::create(path, &header)?;
    let mut counts = MessageCounts::default();
    let mut newest_t = i64::MIN;
    for msg in sim {
        counts.count(&msg);
        let t = data_time(&msg).unwrap_or(newest_t);
        newest_t = newest_t.max(t);
        writer.write_frame(created_ns.saturating_add(t), &encode_body(&msg))?;
    }
    // The core thread's closing tick: the epoch holding the newest data, plus L.
    let period_ns = config.period_ms as i64 * 1_000_000;
    let latency_ns = config.latency_ms as i64 * 1_000_000;
    let mut final_tick_ns = i64::MIN;
    if newest_t != i64::MIN {
        let epoch = newest_t.div_euclid(period_ns) + i64::from(newest_t.rem_euclid(period_ns) != 0);
        final_tick_ns = (epoch * period_ns).saturating_add(latency_ns);
        writer.write_tick(created_ns.saturating_add(final_tick_ns), final_tick_ns)?;
    }
    let records = writer.n_records() + 1;
    let end_ns = created_ns.saturating_add(final_tick_ns.max(0));
    writer.close("finished", end_ns)?;
    Ok(LogReport {
        counts,
        records,
        final_tick_ns,
    })
}

fn data_time(msg: &Message) -> Option<i64> {
    match msg {
        Message::Obs(obs) => Some(obs.t),
        Message::Rate(rate) => Some(rate.t),
        Message::Truth(truth) => Some(truth.t),
        _ => None,
    }
}

/// Most reject reasons kept for the report.
const REASONS_KEPT: usize = 5;
/// Longest wait for the daemon to take what was sent, at the end.
const SETTLE_LIMIT: Duration = Duration::from_secs(5);
/// Pacing slack: sleep only when this far ahead of the schedule.
const PACE_SLACK: Duration = Duration::from_millis(2);

/// What the reader thread passes back.
enum Heard {
    Status(StatusReport),
    Rejects(u64, Vec<String>),
}

/// Streams the whole run of `sim` to the daemon at `addr` as a TCP source.
///
/// Data time `t` is sent at wall time `start + (t − t_first) / speed`.
/// At the end it asks the daemon for `status` until the counters stop
/// moving, so every reject the daemon sent has arrived.
pub fn stream_to(
    sim: Simulator,
    addr: SocketAddr,
    speed: f64,
    token: Option<&str>,
) -> Result<StreamReport, FeedError> {
    if !(speed.is_finite() && speed > 0.0) {
        return Err(FeedError::Speed(speed));
    }
    let started = Instant::now();
    let stream = TcpStream::connect(addr)?;
    stream.set_nodelay(true)?;
    let mut read_half = stream.try_clone()?;
    let mut out = BufWriter::with_capacity(64 * 1024, stream);
    let mut frame = Vec::with_capacity(1024);
    let hello = Message::Hello(Hello {
        version: PROTOCOL_VERSION,
        role: Role::Source,
        name: Some("wahbad simulate".into()),
        token: token.map(str::to_owned),
        verdicts: None,
    });
    encode_frame_into(&hello, &mut frame);
    out.write_all(&frame)?;
    out.flush()?;
    let mut decoder = FrameDecoder::new();
    match read_message(&mut read_half, &mut decoder)? {
        Some(Message::Welcome(_)) => {}
        Some(Message::Error(err)) => {
            return Err(FeedError::Refused {
                code: err.code,
                message: err.message,
            })
        }
        Some(other) => {
            return Err(FeedError::Protocol(format!(
                "expected welcome, got {}",
                other.type_name()
            )))
        }
        None => return Err(FeedError::Protocol("closed before welcome".into())),
    }
    let (heard_tx, heard_rx) = mpsc::channel();
    let reader = std::thread::Builder::new()
        .name("wahbad-sim-reader".into())
        .spawn(move || listen(read_half, decoder, heard_tx))?;

    let mut sent = MessageCounts::default();
    let mut t_first = None;
    let pace_start = Instant::now();
    for msg in sim {
        if let Some(t) = data_time(&msg) {
            let t0 = *t_first.get_or_insert(t);
            let due = Duration::from_secs_f64(((t - t0) as f64 * 1e-9 / speed).max(0.0));
            let now = pace_start.elapsed();
            if due > now + PACE_SLACK {
                out.flush()?;
                std::thread::sleep(due - now);
            }
        }
        frame.clear();
        encode_frame_into(&msg, &mut frame);
        out.write_all(&frame)?;
        sent.count(&msg);
    }
    out.flush()?;

    // Settle: ask for status until the daemon's counters stop moving.
    let mut status = None;
    let settle_start = Instant::now();
    let mut last_total = None;
    let mut tally = None;
    loop {
        frame.clear();
        encode_frame_into(&Message::Status(Status::request()), &mut frame);
        out.write_all(&frame)?;
        out.flush()?;
        let report = match heard_rx.recv_timeout(SETTLE_LIMIT) {
            Ok(Heard::Status(report)) => Some(report),
            Ok(Heard::Rejects(n, reasons)) => {
                tally = Some((n, reasons));
                None
            }
            Err(_) => None,
        };
        let Some(report) = report else { break };
        let total = report.accepted + report.rejected + report.dropped;
        status = Some(report);
        if last_total == Some(total) || settle_start.elapsed() > SETTLE_LIMIT {
            break;
        }
        last_total = Some(total);
        std::thread::sleep(Duration::from_millis(20));
    }
    out.get_ref().shutdown(Shutdown::Write)?;
    // The reader ends at the daemon's close and hands over its tally last.
    for heard in heard_rx.iter() {
        if let Heard::Rejects(n, reasons) = heard {
            tally = Some((n, reasons));
        }
    }
    let (rejected, reject_reasons) = tally.unwrap_or_default();
    let _ = reader.join();
    Ok(StreamReport {
        sent,
        rejected,
        reject_reasons,
        status,
        elapsed: started.elapsed(),
    })
}

/// Reader thread: counts rejects, passes status answers on, tallies at the end.
fn listen(mut stream: TcpStream, mut decoder: FrameDecoder, heard: mpsc::Sender<Heard>) {
    let (mut rejected, mut reasons) = (0u64, Vec::new());
    while let Ok(Some(msg)) = read_message(&mut stream, &mut decoder) {
        match msg {
            Message::Reject(reject) => {
                rejected += 1;
                if reasons.len() < REASONS_KEPT {
                    reasons.push(reject.reason);
                }
            }
            Message::Status(Status {
                report: Some(report),
            }) => {
                let _ = heard.send(Heard::Status(report));
            }
            Message::Error(err) => {
                tracing::warn!(code = %err.code, "daemon closed the source: {}", err.message);
                break;
            }
            _ => {}
        }
    }
    let _ = heard.send(Heard::Rejects(rejected, reasons));
}

/// The next message on a blocking stream; `None` at a clean close.
fn read_message(
    stream: &mut TcpStream,
    decoder: &mut FrameDecoder,
) -> Result<Option<Message>, FeedError> {
    let mut buf = [0u8; 8192];
    loop {
        if let Some(msg) = decoder
            .next_message()
            .map_err(|err| FeedError::Protocol(err.to_string()))?
        {
            return Ok(Some(msg));
        }
        let n_read = stream.read(&mut buf)?;
        if n_read == 0 {
            return Ok(None);
        }
        decoder.push(&buf[..n_read]);
    }
}
