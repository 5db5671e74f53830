//! The warm `auto` epoch at window 200 against a plain least-squares solve
//! of the same window, timed in turns: every round times one epoch (with
//! verdicts), one epoch of a second estimator without verdicts, and one
//! least-squares solve, so that all three see the same state of a shared
//! machine, whose speed drifts by tens of percent over a minute. Prints one
//! JSON object: the medians and the 10th and 90th percentiles of each, the
//! ratio of the medians, and the median of the per-round ratios.
//!
//! `cargo bench -p wahbad --bench epoch_ratio [-- ROUNDS]` (default 6,000).
//! The scene and the epoch are those of the `estimator` bench
//! (`estimator_epoch_window200`); see `scene/mod.rs`.

use std::hint::black_box;
use std::time::Instant;

use wahbad::estimator::{Estimator, Input};
use wahbad::{Method, SolveParams, Solver};

mod scene;
use scene::{warmed, window_pairs};

/// A warmed estimator and the chunks it has not been fed yet (each closes one epoch).
struct Feed {
    verdicts: bool,
    estimator: Estimator,
    chunks: std::vec::IntoIter<Vec<Input>>,
}

impl Feed {
    fn new(verdicts: bool) -> Feed {
        let (estimator, chunks) = warmed(Method::Auto, false, verdicts);
        Feed {
            verdicts,
            estimator,
            chunks: chunks.into_iter(),
        }
    }

    /// Seconds one epoch took: the ingest of one chunk and dropping its
    /// outputs. A fresh warmed estimator, untimed, when the chunks run out.
    fn epoch_s(&mut self, out: &mut Vec<wahbad::estimator::Output>) -> f64 {
        let mut chunk = match self.chunks.next() {
            Some(chunk) => chunk,
            None => {
                *self = Feed::new(self.verdicts);
                self.chunks.next().expect("the scene has chunks")
            }
        };
        let start = Instant::now();
        for input in chunk.drain(..) {
            self.estimator.ingest(input, out).unwrap();
        }
        out.clear();
        start.elapsed().as_secs_f64()
    }
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    let idx = ((sorted.len() - 1) as f64 * p).round() as usize;
    sorted[idx]
}

fn summary(mut xs: Vec<f64>) -> serde_json::Value {
    xs.sort_by(f64::total_cmp);
    serde_json::json!({
        "p10": percentile(&xs, 0.1),
        "p50": percentile(&xs, 0.5),
        "p90": percentile(&xs, 0.9),
    })
}

fn main() {
    // `cargo bench` passes `--bench`; the first plain number is the round count.
    let rounds: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(6_000);
    let pairs = window_pairs(false);
    assert_eq!(pairs.len(), 200, "window size");
    let mut solver = Solver::new(SolveParams::default());
    let mut with = Feed::new(true);
    let mut without = Feed::new(false);
    let mut out = Vec::with_capacity(8);
    // Warm-up rounds, not kept.
    for _ in 0..200 {
        with.epoch_s(&mut out);
        without.epoch_s(&mut out);
        black_box(solver.solve(black_box(&pairs), Method::Ls, None).unwrap());
    }
    let (mut auto, mut auto_nv, mut ls, mut ratio) =
        (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for _ in 0..rounds {
        let e = with.epoch_s(&mut out);
        let e_nv = without.epoch_s(&mut out);
        let start = Instant::now();
        black_box(solver.solve(black_box(&pairs), Method::Ls, None).unwrap());
        let s = start.elapsed().as_secs_f64();
        auto.push(e * 1e6);
        auto_nv.push(e_nv * 1e6);
        ls.push(s * 1e6);
        ratio.push(e / s);
    }
    let median = |xs: &[f64]| {
        let mut v = xs.to_vec();
        v.sort_by(f64::total_cmp);
        percentile(&v, 0.5)
    };
    let ratio_of_medians = median(&auto) / median(&ls);
    let report = serde_json::json!({
        "rounds": rounds,
        "window": pairs.len(),
        "epoch_auto_us": summary(auto),
        "epoch_auto_no_verdicts_us": summary(auto_nv),
        "solve_ls_same_window_us": summary(ls),
        "auto_over_ls_ratio_of_medians": ratio_of_medians,
        "auto_over_ls_median_round_ratio": median(&ratio),
    });
    println!("{}", serde_json::to_string_pretty(&report).unwrap());
}
