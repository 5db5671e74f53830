//! Running the Python reference scripts that live in `tests/python/`.
//!
//! Under `CI=true` a missing interpreter or package is a failure, never a skip:
//! the cross-checks are the point of these tests.

use std::path::PathBuf;
use std::process::{Command, Output};

/// Absolute path of a script in `tests/python/`.
pub fn script(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("python")
        .join(name)
}

/// The Python interpreter to use: `$PYTHON` or `python3`.
pub fn interpreter() -> String {
    std::env::var("PYTHON").unwrap_or_else(|_| "python3".to_string())
}

/// True when running under CI, where a missing Python dependency must fail.
pub fn in_ci() -> bool {
    std::env::var("CI")
        .map(|v| v == "true" || v == "1")
        .unwrap_or(false)
}

/// Checks that `python3` can import every module in `modules`.
///
/// Returns `false` (after printing why) when something is missing outside CI,
/// so the caller can return early; panics when something is missing under CI.
pub fn require_modules(modules: &[&str]) -> bool {
    let probe = format!("import {}", modules.join(", "));
    let result = Command::new(interpreter()).args(["-c", &probe]).output();
    let ok = matches!(&result, Ok(out) if out.status.success());
    if ok {
        return true;
    }
    let why = match result {
        Ok(out) => String::from_utf8_lossy(&out.stderr).into_owned(),
        Err(err) => err.to_string(),
    };
    if in_ci() {
        panic!("python modules {modules:?} are required under CI=true: {why}");
    }
    eprintln!("skipping: python modules {modules:?} unavailable ({why}); run `pip install -r tests/python/requirements.txt`");
    false
}

/// Runs `script` with `args`, feeding `stdin`, and returns its output; panics on failure.
pub fn run(script_name: &str, args: &[&str], stdin: &[u8]) -> Output {
    use std::io::Write;
    use std::process::Stdio;
    let mut child = Command::new(interpreter())
        .arg(script(script_name))
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start python");
    child
        .stdin
        .take()
        .expect("stdin")
        .write_all(stdin)
        .expect("write stdin");
    let out = child.wait_with_output().expect("wait python");
    assert!(
        out.status.success(),
        "{script_name} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    out
}
