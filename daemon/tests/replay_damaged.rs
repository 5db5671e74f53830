//! `wahbad replay` on damaged and wrong files, with the real binary: a
//! truncated log, a corrupted record in the middle, an empty file, a file that
//! is not a log, a missing file. Damage is worked around with warnings naming
//! the file and the offset (exit 0, the good records used); an unusable file
//! is a clear error (exit 2).

mod replay_support;

use replay_support::*;

/// Epochs of a replay, from its summary file.
fn epochs(summary: &std::path::Path) -> u64 {
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(summary).unwrap()).unwrap();
    json["epochs"].as_u64().unwrap()
}

fn good_log(dir: &TempDir) -> (std::path::PathBuf, u64) {
    let scenario = scenario(10.0, false);
    let log = dir.join("good.wlog");
    write_sim_log(&log, &scenario, &estimator_table(&scenario));
    let summary = dir.join("good.json");
    let out = replay(&[
        log.to_str().unwrap(),
        "--summary",
        summary.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    assert!(text(&out.stderr).is_empty(), "{}", text(&out.stderr));
    (log, epochs(&summary))
}

#[test]
fn truncated_log_is_read_to_its_last_whole_record() {
    let dir = TempDir::new("torn");
    let (log, full) = good_log(&dir);
    let bytes = std::fs::read(&log).unwrap();
    let torn = dir.join("torn.wlog");
    // Cut 7 bytes into the last data record (before the end record, 40 bytes or so).
    std::fs::write(&torn, &bytes[..bytes.len() - 60]).unwrap();
    let summary = dir.join("torn.json");
    let out = replay(&[
        torn.to_str().unwrap(),
        "--summary",
        summary.to_str().unwrap(),
    ]);
    let stderr = text(&out.stderr);
    eprintln!("{stderr}");
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(
        stderr.contains(torn.to_str().unwrap()),
        "names the file: {stderr}"
    );
    assert!(
        stderr.contains("cut short") && stderr.contains("at offset"),
        "{stderr}"
    );
    assert!(stderr.contains("without a clean close"), "{stderr}");
    let got = epochs(&summary);
    // The closing tick is lost with the tail: at most the last epoch goes.
    assert!(got + 1 >= full && got <= full, "{got} of {full}");
}

#[test]
fn corrupted_record_in_the_middle_is_skipped_and_the_rest_used() {
    let dir = TempDir::new("corrupt");
    let (log, full) = good_log(&dir);
    let mut bytes = std::fs::read(&log).unwrap();
    let middle = bytes.len() / 2;
    for byte in &mut bytes[middle..middle + 3] {
        *byte ^= 0x5a;
    }
    let bad = dir.join("bad.wlog");
    std::fs::write(&bad, &bytes).unwrap();
    let summary = dir.join("bad.json");
    let out = replay(&[
        bad.to_str().unwrap(),
        "--summary",
        summary.to_str().unwrap(),
    ]);
    let stderr = text(&out.stderr);
    eprintln!("{stderr}");
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(stderr.contains(bad.to_str().unwrap()), "{stderr}");
    assert!(stderr.contains("damaged record at offset"), "{stderr}");
    assert!(stderr.contains("good records"), "{stderr}");
    // One or two records lost in 10 s of data: the epochs all but survive.
    let got = epochs(&summary);
    assert!(got + 2 >= full && got <= full, "{got} of {full}");
}

#[test]
fn empty_file_and_not_a_log_and_missing_file_exit_2_with_a_clear_message() {
    let dir = TempDir::new("wrong");
    let empty = dir.join("empty.wlog");
    std::fs::write(&empty, b"").unwrap();
    let out = replay(&[empty.to_str().unwrap()]);
    let stderr = text(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains(empty.to_str().unwrap()) && stderr.contains("empty"),
        "{stderr}"
    );

    let notes = dir.join("notes.txt");
    std::fs::write(&notes, b"t,q\n0,1 0 0 0\n").unwrap();
    let out = replay(&[notes.to_str().unwrap()]);
    let stderr = text(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(
        stderr.contains("notes.txt") && stderr.contains("not a wahbad log"),
        "{stderr}"
    );

    let missing = dir.join("missing.wlog");
    let out = replay(&[missing.to_str().unwrap()]);
    let stderr = text(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    assert!(stderr.contains("missing.wlog"), "{stderr}");
    assert!(
        out.stdout.is_empty(),
        "nothing on stdout for an unusable file"
    );
}
