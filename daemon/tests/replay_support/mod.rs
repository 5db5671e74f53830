//! Shared by the `replay_*` system tests: logs of simulated bench runs written
//! with the library's own [`LogWriter`], the estimator configuration that
//! matches a scenario, and running the real `wahbad replay` binary.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use wahbad::record::{LogHeader, LogWriter};
use wahbad::simulate::{Scenario, SensorKind, Simulator};
use wahbad_protocol::encode_frame;

/// A throwaway directory, removed on drop.
pub struct TempDir(PathBuf);

impl TempDir {
    pub fn new(tag: &str) -> TempDir {
        use std::sync::atomic::{AtomicU32, Ordering};
        static NEXT: AtomicU32 = AtomicU32::new(0);
        let path = std::env::temp_dir().join(format!(
            "wahbad-replay-{tag}-{}-{}",
            std::process::id(),
            NEXT.fetch_add(1, Ordering::Relaxed)
        ));
        std::fs::create_dir_all(&path).unwrap();
        TempDir(path)
    }

    pub fn join(&self, name: &str) -> PathBuf {
        self.0.join(name)
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// The `[estimator]` table for a scenario: every sensor configured from
/// `Scenario::sensor_settings()` (kind, σ, rate), and the estimator's gyro
/// angle random walk set to the simulated gyro's (the scenario's
/// `arw_rad_sqrt_s`; the per-sample σ of the settings is `arw·√rate`, not the
/// ARW). The gyro gets 1 s of staleness allowance. The sun sensor loses the lamp during one rest and some slews, so its
/// staleness allowance is long: a nominal run raises no alert.
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
        if setting.kind != SensorKind::Gyro {
            sensor.insert("sigma".into(), setting.sigma.into());
        }
        sensor.insert("expected_rate_hz".into(), setting.rate_hz.into());
        match setting.kind {
            SensorKind::Sun => {
                sensor.insert("stale_ms".into(), 60_000i64.into());
            }
            // The closing tick lies past the last sample; a 100 Hz gyro would
            // otherwise be stale at once (3 periods = 30 ms).
            SensorKind::Gyro => {
                sensor.insert("stale_ms".into(), 1_000i64.into());
            }
            _ => {}
        }
        sensors.insert(setting.name.clone(), sensor.into());
    }
    let mut table = toml::Table::new();
    table.insert("gyro_arw".into(), scenario.gyro.arw_rad_sqrt_s.into());
    table.insert("sensors".into(), sensors.into());
    table
}

/// A `--config` file holding `table` as its `[estimator]` table.
pub fn write_config_file(path: &Path, table: &toml::Table) {
    let mut file = toml::Table::new();
    file.insert("estimator".into(), table.clone().into());
    std::fs::write(path, toml::to_string(&file).unwrap()).unwrap();
}

/// A short scenario: the default bench run cut to `duration_s`.
pub fn scenario(duration_s: f64, faults: bool) -> Scenario {
    let mut scenario = if faults {
        Scenario::default()
    } else {
        Scenario::nominal()
    };
    scenario.duration_s = duration_s;
    scenario
}

/// Writes the scenario's messages as a log (frame records, receive time =
/// data time), a final tick that closes the last epoch, and the end record.
pub fn write_sim_log(path: &Path, scenario: &Scenario, table: &toml::Table) -> usize {
    let header = LogHeader {
        created_ns: 0,
        program: "wahbad tests".into(),
        protocol: wahbad_protocol::PROTOCOL_VERSION,
        origin: "test-simulator".into(),
        config: toml::to_string(table).unwrap(),
    };
    let mut writer = LogWriter::create(path, &header).unwrap();
    let mut n = 0;
    let sim = Simulator::new(scenario).unwrap();
    let end = sim.duration_ns();
    for msg in sim {
        let frame = encode_frame(&msg);
        let t = match &msg {
            wahbad_protocol::Message::Obs(o) => o.t,
            wahbad_protocol::Message::Rate(r) => r.t,
            wahbad_protocol::Message::Truth(t) => t.t,
            _ => 0,
        };
        writer.write_frame(t, &frame[4..]).unwrap();
        n += 1;
    }
    // As the live core closes a recording: the epoch holding the newest data, plus L.
    let period = 100_000_000;
    let close = (end + period - 1) / period * period + 50_000_000;
    writer.write_tick(end, close).unwrap();
    writer.close("finished", end).unwrap();
    n
}

/// Runs `wahbad replay ARGS` to completion.
pub fn replay(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .arg("replay")
        .args(args)
        .output()
        .expect("run wahbad replay")
}

pub fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}
