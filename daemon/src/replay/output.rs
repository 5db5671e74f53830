//! The replay's files: `--solutions` (JSON lines, written as the replay goes)
//! and `--csv` (one row per epoch, written at the end when truth is known).
//!
//! JSON lines: one protocol message per line, `solution` or `alert`, as
//! `serde_json` writes the protocol crate's `Message` (the `type` key first;
//! floats in their shortest round-trip form, so a line parses back to the
//! very same `f64` bits).
//!
//! CSV columns ([`csv_header`]): `t_ns`, `t_s`, `qw`, `qx`, `qy`, `qz`,
//! `roll_321_deg`, `pitch_321_deg`, `yaw_321_deg` (3-2-1 sequence, body
//! relative to reference, as `watch` shows them), `sigma_x_arcsec`,
//! `sigma_y_arcsec`, `sigma_z_arcsec` (1σ per body axis from the diagonal of
//! `cov`), `inlier_fraction`, `status`, and, when the log holds truth,
//! `error_arcsec` (empty where the epoch has no truth).

use std::io::{self, Write};

use wahbad_protocol::{Message, Solution};

use crate::estimator::Output;
use crate::serve::display::{roll_pitch_yaw, sigma_arcsec};

/// Writes outputs as JSON lines.
pub struct JsonLines<W: Write> {
    out: W,
}

impl<W: Write> JsonLines<W> {
    /// Lines go to `out` (buffer it).
    pub fn new(out: W) -> Self {
        JsonLines { out }
    }

    /// Writes one output as one line.
    pub fn write(&mut self, output: &Output) -> io::Result<()> {
        let msg = match output {
            Output::Solution(solution) => Message::Solution(solution.clone()),
            Output::Alert(alert) => Message::Alert(alert.clone()),
        };
        serde_json::to_writer(&mut self.out, &msg).map_err(io::Error::other)?;
        self.out.write_all(b"\n")
    }

    /// Flushes and hands back the writer.
    pub fn finish(mut self) -> io::Result<W> {
        self.out.flush()?;
        Ok(self.out)
    }
}

/// The CSV header line (without newline).
pub fn csv_header(with_truth: bool) -> String {
    let mut header = String::from(
        "t_ns,t_s,qw,qx,qy,qz,roll_321_deg,pitch_321_deg,yaw_321_deg,\
         sigma_x_arcsec,sigma_y_arcsec,sigma_z_arcsec,inlier_fraction,status",
    );
    if with_truth {
        header.push_str(",error_arcsec");
    }
    header
}

/// Writes the CSV: the header, then one row per solution; `errors` (one per
/// solution, arcsec) adds the error column.
pub fn write_csv<W: Write>(
    out: &mut W,
    solutions: &[Solution],
    errors: Option<&[Option<f64>]>,
) -> io::Result<()> {
    writeln!(out, "{}", csv_header(errors.is_some()))?;
    for (idx, solution) in solutions.iter().enumerate() {
        let [w, x, y, z] = solution.q;
        let rpy = roll_pitch_yaw(solution.q).map(f64::to_degrees);
        let sigma = sigma_arcsec(&solution.cov);
        write!(
            out,
            "{},{},{w},{x},{y},{z},{},{},{},{},{},{},{},{}",
            solution.t,
            solution.t as f64 * 1e-9,
            rpy[0],
            rpy[1],
            rpy[2],
            sigma[0],
            sigma[1],
            sigma[2],
            solution.inlier_fraction,
            solution.status.as_str()
        )?;
        if let Some(errors) = errors {
            match errors.get(idx).copied().flatten() {
                Some(err) => write!(out, ",{err}")?,
                None => write!(out, ",")?,
            }
        }
        writeln!(out)?;
    }
    out.flush()
}
