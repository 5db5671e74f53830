//! Human lines for the live feed, as `wahbad watch` (and the demo) print them.
//!
//! One line per solution:
//!
//! ```text
//!   12.300s ok          q=[+0.923880 +0.000000 +0.000000 -0.382683] rpy321=(  +0.000,  +0.000, +45.000)deg 1sig=(  12.3,  12.1,  30.2)as in=15/16 0.94 auto
//! ```
//!
//! `rpy321` is roll, pitch, yaw in degrees of the body frame relative to the
//! reference frame, for the 3-2-1 (z, then y', then x'') rotation sequence,
//! read from `A(q)` (which maps reference to body). `1sig` is the 1-σ
//! attitude error per body axis in arcseconds, from the diagonal of `cov`.
//! Alerts get a line of their own set apart by `>>>` (raised) or `<<<` (cleared).

use wahbad_protocol::{Alert, AlertState, Lagged, Solution};

/// Arcseconds per radian (648000 / π).
const ARCSEC_PER_RAD: f64 = 648_000.0 / std::f64::consts::PI;

/// Most outliers named on one line.
const MAX_OUTLIERS_SHOWN: usize = 4;

/// The line explaining the columns, printed once at the start.
pub fn legend() -> &'static str {
    "# epoch[s] status q=[w x y z] rpy321=(roll,pitch,yaw) deg, 3-2-1 sequence, body rel. reference; \
     1sig=(x,y,z) arcsec; in=inliers/n fraction; method"
}

/// Roll, pitch, yaw (radians) of the 3-2-1 sequence from `q = [w, x, y, z]`.
pub fn roll_pitch_yaw(q: [f64; 4]) -> [f64; 3] {
    let [w, x, y, z] = q;
    // Entries of A(q) as in the protocol's conventions.
    let a00 = 1.0 - 2.0 * (y * y + z * z);
    let a01 = 2.0 * (x * y - w * z);
    let a02 = 2.0 * (x * z + w * y);
    let a12 = 2.0 * (y * z - w * x);
    let a22 = 1.0 - 2.0 * (x * x + y * y);
    // `+ 0.0` turns the -0.0 of a level attitude into 0.0 for display.
    let pitch = -a02.clamp(-1.0, 1.0).asin() + 0.0;
    let roll = a12.atan2(a22);
    let yaw = a01.atan2(a00);
    [roll, pitch, yaw]
}

/// 1-σ per body axis in arcseconds from a row-major covariance (rad²).
pub fn sigma_arcsec(cov: &[f64; 9]) -> [f64; 3] {
    [cov[0], cov[4], cov[8]].map(|var| var.max(0.0).sqrt() * ARCSEC_PER_RAD)
}

fn arcsec_field(value: f64) -> String {
    if value.is_finite() && value < 1e6 {
        format!("{value:6.1}")
    } else {
        "   inf".to_string()
    }
}

fn seconds(t_ns: i64) -> String {
    format!("{:9.3}s", t_ns as f64 * 1e-9)
}

/// One line for a solution.
pub fn solution_line(solution: &Solution) -> String {
    let [w, x, y, z] = solution.q;
    let [roll, pitch, yaw] = roll_pitch_yaw(solution.q).map(f64::to_degrees);
    let [sx, sy, sz] = sigma_arcsec(&solution.cov);
    let mut line = format!(
        "{} {:<12} q=[{w:+.6} {x:+.6} {y:+.6} {z:+.6}] rpy321=({roll:+8.3},{pitch:+8.3},{yaw:+8.3})deg \
         1sig=({},{},{})as in={}/{} {:.2} {}",
        seconds(solution.t),
        solution.status.as_str(),
        arcsec_field(sx),
        arcsec_field(sy),
        arcsec_field(sz),
        solution.n_inliers,
        solution.n,
        solution.inlier_fraction,
        solution.method,
    );
    if let Some(verdicts) = &solution.verdicts {
        let outliers: Vec<_> = verdicts.iter().filter(|v| !v.inlier).collect();
        if !outliers.is_empty() {
            line.push_str(" out:");
            for verdict in outliers.iter().take(MAX_OUTLIERS_SHOWN) {
                line.push_str(&format!(
                    " {}#{}({:.0}as)",
                    verdict.sensor,
                    verdict.seq,
                    verdict.residual * ARCSEC_PER_RAD
                ));
            }
            if outliers.len() > MAX_OUTLIERS_SHOWN {
                line.push_str(&format!(" +{}", outliers.len() - MAX_OUTLIERS_SHOWN));
            }
        }
    }
    line
}

/// One line for an alert, set apart from the solutions.
pub fn alert_line(alert: &Alert) -> String {
    let (mark, state) = match alert.state {
        AlertState::Raised => (">>>", "ALERT RAISED "),
        AlertState::Cleared => ("<<<", "alert cleared"),
    };
    let sensor = alert
        .sensor
        .as_deref()
        .map(|s| format!(" [{s}]"))
        .unwrap_or_default();
    format!(
        "{mark} {state} {}{sensor} at {} value {:.3} level {:.3}: {}",
        alert.kind,
        seconds(alert.t).trim_start(),
        alert.value,
        alert.threshold,
        alert.message
    )
}

/// One line for a `lagged` notice.
pub fn lagged_line(lagged: &Lagged) -> String {
    format!(
        "--- fell behind: the daemon skipped {} messages for this subscriber",
        lagged.skipped
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use wahbad_protocol::{ObsVerdict, SolutionStatus};

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() < 1e-9
    }

    #[test]
    fn pure_axis_rotations_give_their_angle() {
        // Body yawed by +30° relative to the reference: reference vectors appear
        // rotated by -30° in the body, A = Rz(-30°), i.e. q = [cos 15°, 0, 0, -sin 15°].
        let half = 15f64.to_radians();
        let [roll, pitch, yaw] = roll_pitch_yaw([half.cos(), 0.0, 0.0, -half.sin()]);
        assert!(close(yaw.to_degrees(), 30.0) && close(roll, 0.0) && close(pitch, 0.0));
        let [roll, pitch, yaw] = roll_pitch_yaw([half.cos(), 0.0, -half.sin(), 0.0]);
        assert!(close(pitch.to_degrees(), 30.0) && close(roll, 0.0) && close(yaw, 0.0));
        let [roll, pitch, yaw] = roll_pitch_yaw([half.cos(), -half.sin(), 0.0, 0.0]);
        assert!(close(roll.to_degrees(), 30.0) && close(pitch, 0.0) && close(yaw, 0.0));
    }

    #[test]
    fn composed_sequence_is_recovered() {
        // A = R1(roll) R2(pitch) R3(yaw) (frame rotations); build it as a
        // product of the axis quaternions above and read the angles back.
        let (roll, pitch, yaw) = (10f64.to_radians(), -20f64.to_radians(), 135f64.to_radians());
        let axis = |angle: f64, idx: usize| {
            let mut q = [(angle / 2.0).cos(), 0.0, 0.0, 0.0];
            q[idx] = -(angle / 2.0).sin();
            q
        };
        let mul = |a: [f64; 4], b: [f64; 4]| {
            [
                a[0] * b[0] - a[1] * b[1] - a[2] * b[2] - a[3] * b[3],
                a[0] * b[1] + a[1] * b[0] + a[2] * b[3] - a[3] * b[2],
                a[0] * b[2] - a[1] * b[3] + a[2] * b[0] + a[3] * b[1],
                a[0] * b[3] + a[1] * b[2] - a[2] * b[1] + a[3] * b[0],
            ]
        };
        // Hamilton product: R(p ⊗ q) = R(p) R(q).
        let q = mul(mul(axis(roll, 1), axis(pitch, 2)), axis(yaw, 3));
        let got = roll_pitch_yaw(q);
        assert!(
            close(got[0], roll) && close(got[1], pitch) && close(got[2], yaw),
            "{got:?}"
        );
    }

    fn solution() -> Solution {
        Solution {
            t: 12_300_000_000,
            q: [1.0, 0.0, 0.0, 0.0],
            cov: [
                (10.0 / ARCSEC_PER_RAD).powi(2),
                0.0,
                0.0,
                0.0,
                (20.0 / ARCSEC_PER_RAD).powi(2),
                0.0,
                0.0,
                0.0,
                f64::INFINITY,
            ],
            status: SolutionStatus::Ok,
            inlier_fraction: 0.9375,
            n: 16,
            n_inliers: 15,
            method: "auto".into(),
            iterations: 3,
            sensors: vec![],
            verdicts: Some(
                vec![ObsVerdict {
                    sensor: "cam".into(),
                    seq: 42,
                    residual: 1e-3,
                    inlier: false,
                }]
                .into(),
            ),
            propagated: None,
        }
    }

    #[test]
    fn solution_line_has_every_field() {
        let line = solution_line(&solution());
        for part in [
            "12.300s",
            "ok",
            "q=[+1.000000 +0.000000 +0.000000 +0.000000]",
            "rpy321=(  +0.000,  +0.000,  +0.000)deg",
            "1sig=(  10.0,  20.0,   inf)as",
            "in=15/16 0.94",
            "auto",
            "out: cam#42(206as)",
        ] {
            assert!(line.contains(part), "{part:?} missing from {line:?}");
        }
    }

    #[test]
    fn alert_lines_are_set_apart() {
        let alert = Alert {
            t: 5_000_000_000,
            kind: "stale".into(),
            state: AlertState::Raised,
            value: 1.5,
            threshold: 1.0,
            sensor: Some("mag".into()),
            message: "mag silent".into(),
        };
        let line = alert_line(&alert);
        assert!(
            line.starts_with(">>> ALERT RAISED  stale [mag] at 5.000s"),
            "{line}"
        );
        let cleared = Alert {
            state: AlertState::Cleared,
            ..alert
        };
        assert!(alert_line(&cleared).starts_with("<<< alert cleared"));
    }
}
