//! Checks of the simulator's fault timeline: each fault corrupts exactly the
//! samples its fault log lists, only inside its span, and makes them
//! outliers (or, for a dropout, removes them).
//!
//! Method (derived): a run with one fault is compared with the fault-free
//! run of the same seed; the simulator draws the same noise either way, so
//! every difference is the fault's doing.

use std::collections::{BTreeMap, BTreeSet};

use nalgebra::Vector3;
use wahbad::simulate::{Fault, FaultEffect, FaultKind, FaultRecord, Preset, Scenario, Simulator};
use wahbad_protocol::message::Message;

/// A message's identity that does not depend on sequence numbers:
/// sensor, time, and rank among that sensor's messages at that time.
type Key = (String, i64, usize);

/// What a message measured, without its sequence number.
#[derive(Debug, Clone, PartialEq)]
enum Content {
    Obs {
        seq: u64,
        b: [f64; 3],
        r: [f64; 3],
        sigma: f64,
    },
    Rate {
        seq: u64,
        w: [f64; 3],
    },
}

struct Run {
    messages: BTreeMap<Key, Content>,
    log: Vec<FaultRecord>,
    simulator: Simulator,
}

fn run(scenario: &Scenario) -> Run {
    let mut simulator = Simulator::new(scenario).unwrap();
    let mut messages = BTreeMap::new();
    let mut last: Option<(String, i64)> = None;
    let mut rank = 0;
    for message in simulator.by_ref() {
        let (sensor, t, content) = match message {
            Message::Obs(obs) => (
                obs.sensor.to_string(),
                obs.t,
                Content::Obs {
                    seq: obs.seq,
                    b: obs.b,
                    r: obs.r,
                    sigma: obs.sigma.unwrap(),
                },
            ),
            Message::Rate(rate) => (
                rate.sensor.to_string(),
                rate.t,
                Content::Rate {
                    seq: rate.seq,
                    w: rate.w,
                },
            ),
            _ => continue,
        };
        let here = (sensor.clone(), t);
        rank = if last.as_ref() == Some(&here) {
            rank + 1
        } else {
            0
        };
        last = Some(here);
        messages.insert((sensor, t, rank), content);
    }
    let log = simulator.take_fault_log();
    Run {
        messages,
        log,
        simulator,
    }
}

fn same_measurement(a: &Content, b: &Content) -> bool {
    match (a, b) {
        (
            Content::Obs {
                b: b1,
                r: r1,
                sigma: s1,
                ..
            },
            Content::Obs {
                b: b2,
                r: r2,
                sigma: s2,
                ..
            },
        ) => b1 == b2 && r1 == r2 && s1 == s2,
        (Content::Rate { w: w1, .. }, Content::Rate { w: w2, .. }) => w1 == w2,
        _ => false,
    }
}

/// Residual of an obs against the truth, in units of its σ.
fn residual_in_sigma(simulator: &Simulator, t: i64, content: &Content) -> f64 {
    let Content::Obs { b, r, sigma, .. } = content else {
        panic!("a rate is not an obs");
    };
    let predicted = simulator.truth_at(t).transform_vector(&Vector3::from(*r));
    let b = Vector3::from(*b);
    b.cross(&predicted).norm().atan2(b.dot(&predicted)) / sigma
}

fn span_ns(fault: &Fault) -> std::ops::Range<i64> {
    (fault.start_s * 1e9).round() as i64..(fault.end_s * 1e9).round() as i64
}

/// Checks one single-fault preset against the nominal run; returns the
/// number of corrupted and of suppressed samples.
fn check_single_fault(preset: Preset, seed: u64) -> (usize, usize) {
    let mut faulty_scenario = Scenario::preset(preset);
    faulty_scenario.seed = seed;
    let mut nominal_scenario = Scenario::nominal();
    nominal_scenario.seed = seed;
    assert_eq!(faulty_scenario.faults.len(), 1);
    let fault = faulty_scenario.faults[0].clone();
    let kind = fault.effect.kind();
    let span = span_ns(&fault);
    let nominal = run(&nominal_scenario);
    let faulty = run(&faulty_scenario);

    let mut corrupted: BTreeSet<(String, u64)> = BTreeSet::new();
    let mut suppressed: BTreeSet<(String, i64)> = BTreeSet::new();
    for record in &faulty.log {
        assert_eq!((record.fault_idx, record.kind), (0, kind), "{record:?}");
        assert!(span.contains(&record.t), "{record:?} outside {span:?}");
        match record.seq {
            Some(seq) => assert!(
                corrupted.insert((record.sensor.clone(), seq)),
                "{record:?} twice"
            ),
            None => assert!(
                suppressed.insert((record.sensor.clone(), record.t)),
                "{record:?} twice"
            ),
        }
    }

    let mut n_corrupted_seen = 0;
    for (key, content) in &faulty.messages {
        let (sensor, t, _) = key;
        let seq = match content {
            Content::Obs { seq, .. } | Content::Rate { seq, .. } => *seq,
        };
        let listed = corrupted.contains(&(sensor.clone(), seq));
        let unchanged = nominal
            .messages
            .get(key)
            .is_some_and(|original| same_measurement(original, content));
        assert_eq!(
            listed, !unchanged,
            "{preset}: {key:?} listed {listed}, unchanged {unchanged}"
        );
        if listed {
            n_corrupted_seen += 1;
            assert!(span.contains(t));
            let residual = residual_in_sigma(&faulty.simulator, *t, content);
            assert!(residual > 10.0, "{preset}: {key:?} only {residual}σ off");
        }
        if kind != FaultKind::Dropout {
            // Nothing is withheld, so sequence numbers match the nominal run.
            if let Some(
                Content::Obs {
                    seq: nominal_seq, ..
                }
                | Content::Rate {
                    seq: nominal_seq, ..
                },
            ) = nominal.messages.get(key)
            {
                assert_eq!(seq, *nominal_seq, "{preset}: {key:?}");
            }
        }
    }
    assert_eq!(
        n_corrupted_seen,
        corrupted.len(),
        "{preset}: logged obs that were never sent"
    );

    // Nominal messages missing from the faulty run are exactly the suppressed samples.
    let mut missing: BTreeSet<(String, i64)> = BTreeSet::new();
    for key in nominal.messages.keys() {
        if !faulty.messages.contains_key(key) {
            missing.insert((key.0.clone(), key.1));
        }
    }
    assert_eq!(
        missing, suppressed,
        "{preset}: suppressed samples differ from the log"
    );
    (corrupted.len(), suppressed.len())
}

#[test]
fn false_stars_corrupt_a_share_of_each_frame() {
    let (n_corrupted, n_suppressed) = check_single_fault(Preset::FalseStars, 21);
    eprintln!("false_stars: {n_corrupted} obs corrupted");
    // 10 s at 5 Hz, round(0.4 × 8) = 3 wrong stars per (full) frame.
    assert_eq!(n_suppressed, 0);
    assert!((140..=150).contains(&n_corrupted), "{n_corrupted}");
}

#[test]
fn lamp_reflection_misleads_the_sun_sensor() {
    let (n_corrupted, n_suppressed) = check_single_fault(Preset::LampReflection, 22);
    eprintln!("lamp_reflection: {n_corrupted} obs corrupted");
    // 8 s at 10 Hz with lamp and reflection in view all along.
    assert_eq!((n_corrupted, n_suppressed), (80, 0));
}

#[test]
fn coil_transient_biases_the_magnetometer() {
    let (n_corrupted, n_suppressed) = check_single_fault(Preset::CoilTransient, 23);
    eprintln!("coil_transient: {n_corrupted} obs corrupted");
    // 7 s at 10 Hz.
    assert_eq!((n_corrupted, n_suppressed), (70, 0));
}

#[test]
fn dropout_silences_the_star_camera() {
    let (n_corrupted, n_suppressed) = check_single_fault(Preset::Dropout, 24);
    eprintln!("dropout: {n_suppressed} frames suppressed");
    // 10 s at 5 Hz.
    assert_eq!((n_corrupted, n_suppressed), (0, 50));
}

#[test]
fn default_timeline_logs_every_fault_inside_its_span() {
    let scenario = Scenario::default();
    let faulty = run(&scenario);
    let mut kinds_seen = BTreeSet::new();
    for record in &faulty.log {
        let fault = &scenario.faults[record.fault_idx];
        assert_eq!(record.kind, fault.effect.kind());
        assert!(span_ns(fault).contains(&record.t), "{record:?}");
        kinds_seen.insert(record.kind);
    }
    assert_eq!(kinds_seen.len(), 4);
    // The star camera's sequence numbers run on without a gap across the dropout.
    let star_seqs: Vec<u64> = faulty
        .messages
        .iter()
        .filter(|(key, _)| key.0 == "star_cam")
        .map(|(_, content)| match content {
            Content::Obs { seq, .. } => *seq,
            Content::Rate { .. } => panic!("star camera rate"),
        })
        .collect();
    assert!(star_seqs
        .iter()
        .enumerate()
        .all(|(idx, &seq)| seq == idx as u64));
}

/// A timeline as the CLI would read it from a scenario file.
#[test]
fn custom_timeline_from_a_scenario_file() {
    let text = r#"{
        "duration_s": 20,
        "seed": 8,
        "faults": [
            {"kind": "dropout", "sensor": "gyro", "start_s": 5, "end_s": 6},
            {"kind": "coil_transient", "start_s": 10, "end_s": 12.5, "bias_deg": 20}
        ]
    }"#;
    let scenario: Scenario = serde_json::from_str(text).unwrap();
    let faulty = run(&scenario);
    let gyro_in_dropout = faulty
        .messages
        .keys()
        .filter(|(sensor, t, _)| sensor == "gyro" && (5_000_000_000..6_000_000_000).contains(t))
        .count();
    assert_eq!(gyro_in_dropout, 0);
    let n_suppressed = faulty
        .log
        .iter()
        .filter(|r| r.kind == FaultKind::Dropout)
        .count();
    assert_eq!(n_suppressed, 100);
    let transient: Vec<&FaultRecord> = faulty
        .log
        .iter()
        .filter(|r| r.kind == FaultKind::CoilTransient)
        .collect();
    assert_eq!(transient.len(), 25);
    for record in transient {
        let key = faulty
            .messages
            .iter()
            .find(|(key, content)| {
                key.0 == "mag"
                    && matches!(content, Content::Obs { seq, .. } if Some(*seq) == record.seq)
            })
            .unwrap();
        let residual = residual_in_sigma(&faulty.simulator, key.0 .1, key.1);
        // Derived: a 20° turn of the field is 28.6σ at σ = 0.7°, less the noise.
        assert!(residual > 20.0, "{residual}σ");
    }
    // An unknown sensor in a dropout is refused.
    let mut bad = scenario.clone();
    bad.faults.push(Fault {
        start_s: 1.0,
        end_s: 2.0,
        effect: FaultEffect::Dropout {
            sensor: "lidar".into(),
        },
    });
    assert!(Simulator::new(&bad).is_err());
}
