//! The replay's attitude as a CCSDS Attitude Ephemeris Message (AEM), in its
//! keyword = value notation (KVN), after CCSDS 504.0-B, *Attitude Data
//! Messages*.
//!
//! What is written, and where each part comes from:
//!
//! - **Version 1.0 layout** (504.0-B-1, 2008; recalled from memory, not
//!   checked against the text): header `CCSDS_AEM_VERS`, `COMMENT`,
//!   `CREATION_DATE`, `ORIGINATOR`; one segment `META_START` … `META_STOP`
//!   with `OBJECT_NAME`, `OBJECT_ID`, `REF_FRAME_A`, `REF_FRAME_B`,
//!   `ATTITUDE_DIR`, `TIME_SYSTEM`, `START_TIME`, `STOP_TIME`,
//!   `ATTITUDE_TYPE`, `QUATERNION_TYPE` in that order; then `DATA_START`, one
//!   line `EPOCH Q1 Q2 Q3 QC` per epoch, `DATA_STOP`. Issue 2 (504.0-B-2,
//!   2024, version 2.0) drops `ATTITUDE_DIR` and `QUATERNION_TYPE` and fixes
//!   the order to Q1 Q2 Q3 QC, the direction to A → B: the data lines written
//!   here read the same under either version.
//! - **Quaternion convention** (504.0-B-2 annex F2, read from the text): the
//!   quaternion "from frame A to frame B" rotates A's basis vectors onto B's,
//!   `Q1..Q3 = e·sin(φ/2)`, `QC = cos(φ/2)`, and the coordinates transform as
//!   `X_B = M_BA X_A` with `M_BA[0][1] = 2(Q1Q2 + Q3QC)` etc. Our `q = [w, x,
//!   y, z]` has `A(q)` with `A[0][1] = 2(xy − wz)` and `b = A r`, i.e.
//!   `A(q) = M_BA` for A = reference, B = body. Matching the two matrices
//!   gives **`Q1 = −x, Q2 = −y, Q3 = −z, QC = w`**: the order moves the scalar
//!   last *and* the vector part changes sign (the CCSDS matrix is the
//!   transpose of the Hamilton rotation matrix of the same four numbers).
//!   `QUATERNION_TYPE = LAST` and `ATTITUDE_DIR = A2B` say so.
//! - **Frames**: `REF_FRAME_A = LAB_BENCH_REF` names the bench's reference
//!   frame (the frame of the observations' `r` vectors). It is not a frame of
//!   the SANA registry the standard points to; the name is ours and a comment
//!   in the message says what it is. `REF_FRAME_B = SC_BODY_1`, the
//!   registered name for a spacecraft body frame (recalled from memory), for
//!   the body frame of the unit on the table.
//! - **Time**: `TIME_SYSTEM = UTC`; bench time `t` (ns) is added to the UTC
//!   instant of bench time 0 given in [`AemOptions::utc_epoch`], on a scale
//!   without leap seconds. Epochs are CCSDS calendar time strings
//!   `YYYY-MM-DDThh:mm:ss.d…d` (§6.8.9) with 3, 6 or 9 fraction digits, the
//!   fewest that hold every epoch of the message exactly.
//! - **Which epochs**: only solutions with status `ok` or `degraded` (a
//!   published estimate of all three axes). `unobservable` epochs repeat an
//!   older estimate and `insufficient` ones have none, so both are left out,
//!   and a `COMMENT` in the metadata gives the count left out.

use std::time::SystemTime;

use wahbad_protocol::{Solution, SolutionStatus};

use super::utc;

/// The bench reference frame's name in `REF_FRAME_A` (not SANA-registered).
pub const REF_FRAME_A: &str = "LAB_BENCH_REF";
/// The body frame's name in `REF_FRAME_B`.
pub const REF_FRAME_B: &str = "SC_BODY_1";

/// What the message says about its origin, besides the solutions.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AemOptions {
    /// UTC instant of bench time 0, `YYYY-MM-DDTHH:MM:SS[.fff]Z` (the `Z` may
    /// be left out; up to nine fraction digits).
    pub utc_epoch: String,
    /// `OBJECT_NAME`: the unit on the table.
    pub object_name: String,
    /// `OBJECT_ID`: the standard recommends an international designator and
    /// `UNKNOWN` for objects that have none, as a bench unit.
    pub object_id: String,
    /// `ORIGINATOR`: who wrote the message.
    pub originator: String,
}

impl Default for AemOptions {
    fn default() -> Self {
        AemOptions {
            utc_epoch: "2026-01-01T00:00:00Z".into(),
            object_name: "BENCH-EM".into(),
            object_id: "UNKNOWN".into(),
            originator: "WAHBAD".into(),
        }
    }
}

/// Why no message could be written.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum AemError {
    /// `utc_epoch` is not an ISO-8601 UTC instant.
    #[error("bad UTC epoch {value:?}: {reason} (expected YYYY-MM-DDTHH:MM:SS[.fff]Z)")]
    BadUtcEpoch {
        /// The text given.
        value: String,
        /// What is wrong with it.
        reason: &'static str,
    },
    /// The solution list is empty.
    #[error("no solutions to write")]
    NoSolutions,
    /// Every solution is `unobservable` or `insufficient`.
    #[error("none of the {skipped} solutions has status ok or degraded; nothing to write")]
    NoUsableSolutions {
        /// Solutions left out.
        skipped: usize,
    },
    /// Written epochs must increase strictly.
    #[error("epoch t = {t} ns does not follow the previous epoch t = {previous} ns")]
    EpochsNotIncreasing {
        /// The offending epoch, ns on the bench clock.
        t: i64,
        /// The epoch before it.
        previous: i64,
    },
    /// A quaternion that is not finite or has zero length.
    #[error("solution at t = {t} ns has a non-finite or zero quaternion")]
    BadQuaternion {
        /// Epoch of the solution, ns.
        t: i64,
    },
    /// The epoch lands outside the years 0000–9999 of a CCSDS time string.
    #[error("epoch t = {t} ns falls outside the years 0000-9999")]
    EpochOutOfRange {
        /// Epoch of the solution, ns (`i64::MIN` for the creation date).
        t: i64,
    },
    /// A free-text value that cannot sit on one KVN line.
    #[error("{field} {value:?} cannot be written: {reason}")]
    BadField {
        /// The keyword.
        field: &'static str,
        /// The text given.
        value: String,
        /// What is wrong with it.
        reason: &'static str,
    },
}

/// Writes the AEM of `solutions`, dated now.
pub fn write(solutions: &[Solution], opts: &AemOptions) -> Result<String, AemError> {
    write_created_at(solutions, opts, SystemTime::now())
}

/// Writes the AEM of `solutions` with `CREATION_DATE` = `created`, so a
/// caller (or a test) can make the output reproducible.
pub fn write_created_at(
    solutions: &[Solution],
    opts: &AemOptions,
    created: SystemTime,
) -> Result<String, AemError> {
    let epoch_ns = utc::parse(&opts.utc_epoch).map_err(|reason| AemError::BadUtcEpoch {
        value: opts.utc_epoch.clone(),
        reason,
    })?;
    check_field("OBJECT_NAME", &opts.object_name)?;
    check_field("OBJECT_ID", &opts.object_id)?;
    check_field("ORIGINATOR", &opts.originator)?;
    if solutions.is_empty() {
        return Err(AemError::NoSolutions);
    }

    let mut rows: Vec<(i64, i128, [f64; 4])> = Vec::with_capacity(solutions.len());
    for solution in solutions.iter().filter(|s| is_written(s.status)) {
        if let Some(&(previous, _, _)) = rows.last() {
            if solution.t <= previous {
                return Err(AemError::EpochsNotIncreasing {
                    t: solution.t,
                    previous,
                });
            }
        }
        let q = ccsds_quaternion(solution.q).ok_or(AemError::BadQuaternion { t: solution.t })?;
        rows.push((solution.t, epoch_ns + solution.t as i128, q));
    }
    let skipped = solutions.len() - rows.len();
    if rows.is_empty() {
        return Err(AemError::NoUsableSolutions { skipped });
    }

    let digits = fraction_digits(rows.iter().map(|r| r.1));
    let stamp =
        |t: i64, unix_ns: i128| utc::format(unix_ns, digits).ok_or(AemError::EpochOutOfRange { t });
    let created_ns = match created.duration_since(SystemTime::UNIX_EPOCH) {
        Ok(since) => since.as_nanos() as i128,
        Err(before) => -(before.duration().as_nanos() as i128),
    };
    let creation = utc::format(created_ns, 0).ok_or(AemError::EpochOutOfRange { t: i64::MIN })?;
    let epoch_text = utc::format(epoch_ns, 9).ok_or(AemError::EpochOutOfRange { t: 0 })?;
    let (first, last) = (rows[0], rows[rows.len() - 1]);
    let start = stamp(first.0, first.1)?;
    let stop = stamp(last.0, last.1)?;

    let mut out = String::with_capacity(200 + rows.len() * 90);
    kv(&mut out, "CCSDS_AEM_VERS", "1.0");
    out.push_str(&format!(
        "COMMENT Attitude estimated by wahbad {} on a test bench; bench time 0 = {epoch_text} UTC\n",
        env!("CARGO_PKG_VERSION")
    ));
    kv(&mut out, "CREATION_DATE", &creation);
    kv(&mut out, "ORIGINATOR", &opts.originator);
    out.push('\n');
    out.push_str("META_START\n");
    for line in [
        format!("COMMENT {REF_FRAME_A} is the bench reference frame (frame of the r vectors), not a SANA-registered frame"),
        format!("COMMENT {REF_FRAME_B} is the body frame of the unit on the table"),
        "COMMENT Quaternion A2B after 504.0-B-2 annex F2: X_B = M_BA(Q) X_A, QC scalar last".to_string(),
        "COMMENT UTC epochs from bench time on a scale without leap seconds".to_string(),
        format!("COMMENT Epochs with status ok or degraded only; {skipped} unobservable or insufficient epoch(s) left out"),
    ] {
        out.push_str(&line);
        out.push('\n');
    }
    kv(&mut out, "OBJECT_NAME", &opts.object_name);
    kv(&mut out, "OBJECT_ID", &opts.object_id);
    kv(&mut out, "REF_FRAME_A", REF_FRAME_A);
    kv(&mut out, "REF_FRAME_B", REF_FRAME_B);
    kv(&mut out, "ATTITUDE_DIR", "A2B");
    kv(&mut out, "TIME_SYSTEM", "UTC");
    kv(&mut out, "START_TIME", &start);
    kv(&mut out, "STOP_TIME", &stop);
    kv(&mut out, "ATTITUDE_TYPE", "QUATERNION");
    kv(&mut out, "QUATERNION_TYPE", "LAST");
    out.push_str("META_STOP\n\nDATA_START\n");
    for (t, unix_ns, q) in rows {
        let epoch = stamp(t, unix_ns)?;
        out.push_str(&format!(
            "{epoch} {:.12} {:.12} {:.12} {:.12}\n",
            q[0], q[1], q[2], q[3]
        ));
    }
    out.push_str("DATA_STOP\n");
    Ok(out)
}

/// One `KEY = value` line.
fn kv(out: &mut String, key: &str, value: &str) {
    out.push_str(key);
    out.push_str(" = ");
    out.push_str(value);
    out.push('\n');
}

/// Whether a solution of this status goes into the message.
pub fn is_written(status: SolutionStatus) -> bool {
    matches!(status, SolutionStatus::Ok | SolutionStatus::Degraded)
}

/// Our `[w, x, y, z]` (reference → body, `b = A r`) as the CCSDS A2B
/// quaternion `[Q1, Q2, Q3, QC]`, normalised, `QC ≥ 0`. `None` if not finite
/// or of zero length.
pub fn ccsds_quaternion(q: [f64; 4]) -> Option<[f64; 4]> {
    let norm = q.iter().map(|c| c * c).sum::<f64>().sqrt();
    if !norm.is_finite() || norm == 0.0 {
        return None;
    }
    // q and −q are the same attitude; keep the scalar non-negative.
    let s = if q[0] < 0.0 { -1.0 / norm } else { 1.0 / norm };
    let [w, x, y, z] = q.map(|c| c * s);
    Some([-x, -y, -z, w])
}

/// The fewest of 3, 6 or 9 fraction digits that hold every instant exactly.
fn fraction_digits(instants: impl Iterator<Item = i128>) -> u32 {
    let mut digits = 3;
    for ns in instants {
        let frac = ns.rem_euclid(1_000_000_000);
        if frac % 1_000 != 0 {
            return 9;
        }
        if frac % 1_000_000 != 0 {
            digits = 6;
        }
    }
    digits
}

fn check_field(field: &'static str, value: &str) -> Result<(), AemError> {
    let reason = if value.trim().is_empty() {
        "it is empty"
    } else if value.chars().any(char::is_control) {
        "it holds a control character (e.g. a line break)"
    } else if value.trim() != value {
        "it has leading or trailing spaces"
    } else {
        return Ok(());
    };
    Err(AemError::BadField {
        field,
        value: value.to_string(),
        reason,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ccsds_annex_f2_example() {
        // 504.0-B-2 annex F2.2: frame B is frame A turned +90° about Z, so
        // X_A = [1, 0, 0] has X_B = [0, −1, 0]; the quaternion from A to B is
        // Q = (0, 0, 0.7071, 0.7071). In our convention b = A r with
        // A = [[0, 1, 0], [−1, 0, 0], [0, 0, 1]], a Hamilton rotation of −90°
        // about Z: q = [cos 45°, 0, 0, −sin 45°].
        let h = std::f64::consts::FRAC_1_SQRT_2;
        let q = ccsds_quaternion([h, 0.0, 0.0, -h]).unwrap();
        for (got, want) in q.iter().zip([0.0, 0.0, h, h]) {
            assert!((got - want).abs() < 1e-15, "{q:?}");
        }
    }

    #[test]
    fn sign_and_norm_are_fixed() {
        let q = ccsds_quaternion([-2.0, 0.0, 0.0, 0.0]).unwrap();
        assert_eq!(q, [-0.0, -0.0, -0.0, 1.0]);
        assert!(ccsds_quaternion([0.0; 4]).is_none());
        assert!(ccsds_quaternion([f64::NAN, 0.0, 0.0, 1.0]).is_none());
    }

    #[test]
    fn fraction_digits_are_the_fewest_exact() {
        assert_eq!(fraction_digits([0, 100_000_000].into_iter()), 3);
        assert_eq!(fraction_digits([0, 100_500_000, 1_000].into_iter()), 6);
        assert_eq!(fraction_digits([0, 7].into_iter()), 9);
        assert_eq!(fraction_digits([-1_000_000].into_iter()), 3);
    }

    #[test]
    fn free_text_fields_stay_on_one_line() {
        assert!(check_field("OBJECT_NAME", "BENCH-EM").is_ok());
        assert!(check_field("OBJECT_NAME", "").is_err());
        assert!(check_field("OBJECT_NAME", "A\nB").is_err());
        assert!(check_field("OBJECT_NAME", " A").is_err());
    }
}
