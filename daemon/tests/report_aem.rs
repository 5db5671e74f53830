//! The CCSDS AEM writer's output read back by a parser written here, apart
//! from the writer: block order, required keywords, one data line per written
//! epoch, CCSDS time strings, and quaternions matching the solutions.
//!
//! Layout and keywords: CCSDS 504.0-B-1 (AEM version 1.0), recalled from
//! memory. Quaternion meaning: CCSDS 504.0-B-2 annex F2, whose frame
//! transformation matrix `M_BA(Q)` is used below to check the written
//! quaternions against our own attitude matrix `A(q)` (protocol.md), so the
//! check does not share the writer's conversion.

use std::time::{Duration, SystemTime};

use wahbad::report::aem::{write, write_created_at, AemError, AemOptions};
use wahbad_protocol::{Solution, SolutionStatus};

const NS: i64 = 1_000_000_000;

/// What the test parser makes of a message.
#[derive(Debug, Default)]
struct Parsed {
    header: Vec<(String, String)>,
    meta: Vec<(String, String)>,
    comments_in_meta: Vec<String>,
    data: Vec<(String, [f64; 4])>,
}

impl Parsed {
    fn meta_value(&self, key: &str) -> Option<&str> {
        self.meta
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }
    fn header_value(&self, key: &str) -> Option<&str> {
        self.header
            .iter()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }
}

#[derive(Debug, PartialEq, Clone, Copy)]
enum Block {
    Header,
    Meta,
    BetweenMetaAndData,
    Data,
    Done,
}

/// Reads a single-segment AEM in KVN, enforcing header → META_START ..
/// META_STOP → DATA_START .. DATA_STOP, nothing after.
fn parse(text: &str) -> Result<Parsed, String> {
    let mut parsed = Parsed::default();
    let mut block = Block::Header;
    for (line_no, raw) in text.lines().enumerate() {
        let line = raw.trim();
        let at = |msg: &str| format!("line {}: {msg}: {raw:?}", line_no + 1);
        if line.is_empty() {
            continue;
        }
        match (block, line) {
            (Block::Header, "META_START") => {
                block = Block::Meta;
                continue;
            }
            (Block::Meta, "META_STOP") => {
                block = Block::BetweenMetaAndData;
                continue;
            }
            (Block::BetweenMetaAndData, "DATA_START") => {
                block = Block::Data;
                continue;
            }
            (Block::Data, "DATA_STOP") => {
                block = Block::Done;
                continue;
            }
            (_, "META_START" | "META_STOP" | "DATA_START" | "DATA_STOP") => {
                return Err(at("block marker out of order"))
            }
            _ => {}
        }
        match block {
            Block::Header | Block::Meta => {
                if let Some(comment) = line.strip_prefix("COMMENT") {
                    // "COMMENT text": a keyword without "=", followed by free text.
                    let comment = comment.trim();
                    if comment.starts_with('=') {
                        return Err(at("COMMENT takes no '='"));
                    }
                    if block == Block::Meta {
                        parsed.comments_in_meta.push(comment.to_string());
                    }
                    continue;
                }
                let (key, value) = line
                    .split_once('=')
                    .ok_or_else(|| at("expected KEY = VALUE"))?;
                let (key, value) = (key.trim().to_string(), value.trim().to_string());
                if key.is_empty()
                    || !key
                        .chars()
                        .all(|c| c.is_ascii_uppercase() || c.is_ascii_digit() || c == '_')
                {
                    return Err(at("bad keyword"));
                }
                if block == Block::Header {
                    parsed.header.push((key, value));
                } else {
                    parsed.meta.push((key, value));
                }
            }
            Block::Data => {
                let fields: Vec<&str> = line.split_whitespace().collect();
                if fields.len() != 5 {
                    return Err(at("a QUATERNION data line has 5 fields"));
                }
                let mut q = [0.0; 4];
                for (slot, field) in q.iter_mut().zip(&fields[1..]) {
                    *slot = field.parse().map_err(|_| at("not a number"))?;
                }
                parsed.data.push((fields[0].to_string(), q));
            }
            Block::BetweenMetaAndData | Block::Done => return Err(at("content outside a block")),
        }
    }
    if block != Block::Done {
        return Err(format!("message ends inside {block:?}"));
    }
    Ok(parsed)
}

/// Parses a CCSDS calendar time string `YYYY-MM-DDThh:mm:ss[.d…d]` into
/// (days since 1970-01-01 by counting, second of day, fraction ns). Written
/// independently of the daemon: days by summing month lengths.
fn ccsds_time(text: &str) -> Option<(i64, i64, i64)> {
    let b = text.as_bytes();
    if b.len() < 19
        || b[4] != b'-'
        || b[7] != b'-'
        || b[10] != b'T'
        || b[13] != b':'
        || b[16] != b':'
    {
        return None;
    }
    let num = |r: std::ops::Range<usize>| -> Option<i64> {
        let s = text.get(r)?;
        s.bytes()
            .all(|c| c.is_ascii_digit())
            .then(|| s.parse().ok())?
    };
    let (year, month, day) = (num(0..4)?, num(5..7)?, num(8..10)?);
    let (hour, minute, second) = (num(11..13)?, num(14..16)?, num(17..19)?);
    let frac_ns = match text.get(19..)? {
        "" => 0,
        rest => {
            let digits = rest.strip_prefix('.')?;
            if digits.is_empty() || digits.len() > 9 || !digits.bytes().all(|c| c.is_ascii_digit())
            {
                return None;
            }
            digits.parse::<i64>().ok()? * 10i64.pow(9 - digits.len() as u32)
        }
    };
    let leap = |y: i64| (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    let month_days = |y: i64, m: i64| match m {
        2 if leap(y) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    };
    if !(1..=12).contains(&month) || day < 1 || day > month_days(year, month) {
        return None;
    }
    if hour > 23 || minute > 59 || second > 59 || year < 1970 {
        return None;
    }
    let days = (1970..year)
        .map(|y| if leap(y) { 366 } else { 365 })
        .sum::<i64>()
        + (1..month).map(|m| month_days(year, m)).sum::<i64>()
        + day
        - 1;
    Some((days, hour * 3600 + minute * 60 + second, frac_ns))
}

fn instant_ns(text: &str) -> i128 {
    let (days, sod, frac) =
        ccsds_time(text).unwrap_or_else(|| panic!("not a CCSDS time string: {text:?}"));
    (days as i128 * 86_400 + sod as i128) * 1_000_000_000 + frac as i128
}

/// Our attitude matrix A(q), protocol.md: b = A r.
fn attitude_matrix(q: [f64; 4]) -> [[f64; 3]; 3] {
    let [w, x, y, z] = q;
    [
        [
            1.0 - 2.0 * (y * y + z * z),
            2.0 * (x * y - w * z),
            2.0 * (x * z + w * y),
        ],
        [
            2.0 * (x * y + w * z),
            1.0 - 2.0 * (x * x + z * z),
            2.0 * (y * z - w * x),
        ],
        [
            2.0 * (x * z - w * y),
            2.0 * (y * z + w * x),
            1.0 - 2.0 * (x * x + y * y),
        ],
    ]
}

/// CCSDS 504.0-B-2 annex F2: M_BA from (Q1, Q2, Q3, QC), X_B = M_BA X_A.
fn ccsds_matrix(q: [f64; 4]) -> [[f64; 3]; 3] {
    let [q1, q2, q3, qc] = q;
    [
        [
            q1 * q1 - q2 * q2 - q3 * q3 + qc * qc,
            2.0 * (q1 * q2 + q3 * qc),
            2.0 * (q1 * q3 - q2 * qc),
        ],
        [
            2.0 * (q1 * q2 - q3 * qc),
            -q1 * q1 + q2 * q2 - q3 * q3 + qc * qc,
            2.0 * (q2 * q3 + q1 * qc),
        ],
        [
            2.0 * (q1 * q3 + q2 * qc),
            2.0 * (q2 * q3 - q1 * qc),
            -q1 * q1 - q2 * q2 + q3 * q3 + qc * qc,
        ],
    ]
}

fn unit(q: [f64; 4]) -> [f64; 4] {
    let n = q.iter().map(|c| c * c).sum::<f64>().sqrt();
    let s = if q[0] < 0.0 { -1.0 / n } else { 1.0 / n };
    q.map(|c| c * s)
}

fn solution(t: i64, q: [f64; 4], status: SolutionStatus) -> Solution {
    Solution {
        t,
        q: unit(q),
        cov: [1e-10, 0.0, 0.0, 0.0, 1e-10, 0.0, 0.0, 0.0, 1e-10],
        status,
        inlier_fraction: 1.0,
        n: 10,
        n_inliers: 10,
        method: "svd".into(),
        iterations: 1,
        sensors: vec![],
        verdicts: None,
        propagated: None,
    }
}

/// 60 epochs at 10 Hz turning about a tilted axis, with a few left out.
fn solutions() -> Vec<Solution> {
    (0..60)
        .map(|i| {
            let angle = 0.05 * i as f64 - 1.0;
            let axis = [0.36, -0.48, 0.8];
            let (s, c) = (angle / 2.0).sin_cos();
            let status = match i {
                20..=22 => SolutionStatus::Insufficient,
                23 => SolutionStatus::Unobservable,
                30..=35 => SolutionStatus::Degraded,
                _ => SolutionStatus::Ok,
            };
            solution(
                i * NS / 10 + 250_000,
                [c, s * axis[0], s * axis[1], s * axis[2]],
                status,
            )
        })
        .collect()
}

fn opts(utc_epoch: &str) -> AemOptions {
    AemOptions {
        utc_epoch: utc_epoch.into(),
        ..AemOptions::default()
    }
}

#[test]
fn blocks_keywords_epochs_and_quaternions_read_back() {
    let solutions = solutions();
    let created = SystemTime::UNIX_EPOCH + Duration::from_secs(1_780_000_000);
    let text = write_created_at(&solutions, &opts("2026-03-15T08:30:00.5Z"), created).unwrap();
    let parsed = parse(&text).unwrap_or_else(|e| panic!("{e}\n{text}"));

    // Header: version first, then the mandatory keywords.
    assert_eq!(parsed.header[0], ("CCSDS_AEM_VERS".into(), "1.0".into()));
    let creation = parsed.header_value("CREATION_DATE").expect("CREATION_DATE");
    // 1 780 000 000 s after 1970: 2026-05-28T20:26:40 (Python datetime.utcfromtimestamp).
    assert_eq!(creation, "2026-05-28T20:26:40");
    assert_eq!(parsed.header_value("ORIGINATOR"), Some("WAHBAD"));

    // Metadata: every mandatory keyword, in the standard's order.
    let order = [
        "OBJECT_NAME",
        "OBJECT_ID",
        "REF_FRAME_A",
        "REF_FRAME_B",
        "ATTITUDE_DIR",
        "TIME_SYSTEM",
        "START_TIME",
        "STOP_TIME",
        "ATTITUDE_TYPE",
        "QUATERNION_TYPE",
    ];
    let keys: Vec<&str> = parsed.meta.iter().map(|(k, _)| k.as_str()).collect();
    assert_eq!(keys, order);
    assert_eq!(parsed.meta_value("OBJECT_NAME"), Some("BENCH-EM"));
    assert_eq!(parsed.meta_value("ATTITUDE_DIR"), Some("A2B"));
    assert_eq!(parsed.meta_value("TIME_SYSTEM"), Some("UTC"));
    assert_eq!(parsed.meta_value("ATTITUDE_TYPE"), Some("QUATERNION"));
    assert_eq!(parsed.meta_value("QUATERNION_TYPE"), Some("LAST"));
    assert_eq!(parsed.meta_value("REF_FRAME_B"), Some("SC_BODY_1"));
    assert!(parsed
        .comments_in_meta
        .iter()
        .any(|c| c.contains("not a SANA-registered frame")));
    assert!(parsed
        .comments_in_meta
        .iter()
        .any(|c| c.contains("4 unobservable or insufficient")));

    // One data line per ok/degraded solution, in order.
    let written: Vec<&Solution> = solutions
        .iter()
        .filter(|s| matches!(s.status, SolutionStatus::Ok | SolutionStatus::Degraded))
        .collect();
    assert_eq!(parsed.data.len(), written.len());
    assert_eq!(written.len(), 56);

    let epoch0 = instant_ns("2026-03-15T08:30:00.5");
    let mut previous = i128::MIN;
    for ((epoch, q), solution) in parsed.data.iter().zip(&written) {
        // Epochs: CCSDS time strings, strictly increasing, bench t after epoch 0.
        let ns = instant_ns(epoch);
        assert!(ns > previous, "{epoch} not after the previous epoch");
        previous = ns;
        assert_eq!(ns, epoch0 + solution.t as i128, "{epoch}");

        // Quaternion: Q1 Q2 Q3 QC with QC ≥ 0, unit, and the frame
        // transformation it stands for is our A(q).
        assert!(q[3] >= 0.0);
        let norm = q.iter().map(|c| c * c).sum::<f64>().sqrt();
        assert!((norm - 1.0).abs() < 1e-9);
        let (m, a) = (ccsds_matrix(*q), attitude_matrix(solution.q));
        for row in 0..3 {
            for col in 0..3 {
                assert!(
                    (m[row][col] - a[row][col]).abs() < 1e-9,
                    "{epoch}: M_BA {m:?} vs A {a:?}"
                );
            }
        }
        // Component by component: scalar last, vector part of the
        // conjugate (the A2B frame-rotation quaternion).
        let [w, x, y, z] = solution.q;
        for (got, want) in q.iter().zip([-x, -y, -z, w]) {
            assert!(
                (got - want).abs() < 1e-9,
                "{epoch}: {q:?} vs {:?}",
                solution.q
            );
        }
    }
    assert_eq!(
        parsed.meta_value("START_TIME"),
        Some(parsed.data[0].0.as_str())
    );
    assert_eq!(
        parsed.meta_value("STOP_TIME"),
        Some(parsed.data[parsed.data.len() - 1].0.as_str())
    );
    // t has 0.25 ms offsets: six fraction digits hold every epoch exactly.
    assert_eq!(parsed.data[0].0, "2026-03-15T08:30:00.500250");
}

#[test]
fn write_dates_the_message_now() {
    let before = SystemTime::now();
    let text = write(&solutions(), &AemOptions::default()).unwrap();
    let parsed = parse(&text).unwrap();
    let creation = instant_ns(parsed.header_value("CREATION_DATE").unwrap());
    let before_ns = before
        .duration_since(SystemTime::UNIX_EPOCH)
        .unwrap()
        .as_nanos() as i128;
    assert!(creation >= before_ns - 1_000_000_000 && creation <= before_ns + 3_600 * 1_000_000_000);
    // Default epoch 2026-01-01T00:00:00Z, whole milliseconds → 3 digits.
    let solutions = vec![solution(NS / 2, [1.0, 0.0, 0.0, 0.0], SolutionStatus::Ok)];
    let parsed = parse(&write(&solutions, &AemOptions::default()).unwrap()).unwrap();
    assert_eq!(parsed.data[0].0, "2026-01-01T00:00:00.500");
}

#[test]
fn bad_input_is_refused_with_a_reason() {
    let good = solutions();
    for bad in [
        "",
        "yesterday",
        "2026-02-30T00:00:00Z",
        "2026-01-01T00:00:00+02:00",
        "2026-01-01T25:00:00Z",
    ] {
        match write(&good, &opts(bad)) {
            Err(AemError::BadUtcEpoch { value, .. }) => assert_eq!(value, bad),
            other => panic!("{bad:?}: {other:?}"),
        }
    }
    assert_eq!(
        write(&[], &AemOptions::default()),
        Err(AemError::NoSolutions)
    );
    let none_usable = vec![
        solution(0, [1.0, 0.0, 0.0, 0.0], SolutionStatus::Insufficient),
        solution(NS, [1.0, 0.0, 0.0, 0.0], SolutionStatus::Unobservable),
    ];
    assert_eq!(
        write(&none_usable, &AemOptions::default()),
        Err(AemError::NoUsableSolutions { skipped: 2 })
    );
    let repeated = vec![
        solution(NS, [1.0, 0.0, 0.0, 0.0], SolutionStatus::Ok),
        solution(NS, [1.0, 0.0, 0.0, 0.0], SolutionStatus::Ok),
    ];
    assert!(matches!(
        write(&repeated, &AemOptions::default()),
        Err(AemError::EpochsNotIncreasing { .. })
    ));
    let mut nan = solution(0, [1.0, 0.0, 0.0, 0.0], SolutionStatus::Ok);
    nan.q[1] = f64::NAN;
    assert_eq!(
        write(&[nan], &AemOptions::default()),
        Err(AemError::BadQuaternion { t: 0 })
    );
    let two_lines = AemOptions {
        object_name: "EM\nMETA_STOP".into(),
        ..AemOptions::default()
    };
    assert!(matches!(
        write(&good, &two_lines),
        Err(AemError::BadField {
            field: "OBJECT_NAME",
            ..
        })
    ));
}

#[test]
fn the_test_parser_rejects_misordered_blocks() {
    // Guards the guard: the parser above must fail on a broken layout.
    let text = write(&solutions(), &AemOptions::default()).unwrap();
    let swapped = text.replacen("META_STOP", "DATA_START", 1);
    assert!(parse(&swapped).is_err());
    let truncated = text.replace("DATA_STOP\n", "");
    assert!(parse(&truncated).is_err());
    let trailing = format!("{text}OBJECT_NAME = X\n");
    assert!(parse(&trailing).is_err());
    assert!(ccsds_time("2026-02-29T00:00:00").is_none());
    assert_eq!(
        ccsds_time("1970-01-02T00:00:01.5"),
        Some((1, 1, 500_000_000))
    );
}
