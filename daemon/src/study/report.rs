//! The result table as text: CSV, JSON and a fixed-width summary for a terminal.

use std::fmt::Write as _;

use serde::{Deserialize, Serialize};

use super::Row;

/// The CSV columns, in order; the same names as the JSON keys.
pub const COLUMNS: [&str; 9] = [
    "method",
    "n",
    "outlier_share",
    "trials",
    "success_rate",
    "median_error_over_crb",
    "p95_error_over_crb",
    "median_error_rad",
    "median_time_us",
];

/// The JSON document: `{"rows": [...]}`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Table {
    /// The rows, in study order.
    pub rows: Vec<Row>,
}

/// The rows as CSV: a header line of [`COLUMNS`], then one line per row.
/// Numbers are written in Rust's shortest round-trip form.
pub fn to_csv(rows: &[Row]) -> String {
    let mut out = COLUMNS.join(",");
    out.push('\n');
    for r in rows {
        // Method names are `[a-z-]`, so no quoting is needed.
        let _ = writeln!(
            out,
            "{},{},{},{},{},{},{},{},{}",
            r.method,
            r.n,
            r.outlier_share,
            r.trials,
            r.success_rate,
            r.median_error_over_crb,
            r.p95_error_over_crb,
            r.median_error_rad,
            r.median_time_us
        );
    }
    out
}

/// The rows as pretty JSON (`{"rows":[...]}`).
pub fn to_json(rows: &[Row]) -> Result<String, serde_json::Error> {
    serde_json::to_string_pretty(&Table {
        rows: rows.to_vec(),
    })
}

/// A fixed-width table for a terminal, one line per row.
pub fn to_text(rows: &[Row]) -> String {
    let mut out = format!(
        "{:<11} {:>5} {:>8} {:>7} {:>9} {:>10} {:>10} {:>12} {:>10}\n",
        "method",
        "n",
        "outliers",
        "trials",
        "success",
        "med err/crb",
        "p95 err/crb",
        "med err rad",
        "med µs"
    );
    for r in rows {
        let _ = writeln!(
            out,
            "{:<11} {:>5} {:>8.3} {:>7} {:>8.1}% {:>10.3} {:>10.3} {:>12.3e} {:>10.1}",
            r.method,
            r.n,
            r.outlier_share,
            r.trials,
            100.0 * r.success_rate,
            r.median_error_over_crb,
            r.p95_error_over_crb,
            r.median_error_rad,
            r.median_time_us
        );
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row() -> Row {
        Row {
            method: "gnc-tls".into(),
            n: 50,
            outlier_share: 0.7,
            trials: 200,
            success_rate: 0.995,
            median_error_over_crb: 0.93,
            p95_error_over_crb: 1.8,
            median_error_rad: 1.2e-4,
            median_time_us: 85.5,
        }
    }

    #[test]
    fn csv_has_header_and_one_line_per_row() {
        let csv = to_csv(&[row(), row()]);
        let lines: Vec<&str> = csv.lines().collect();
        assert_eq!(lines[0], COLUMNS.join(","));
        assert_eq!(lines.len(), 3);
        assert_eq!(lines[1], "gnc-tls,50,0.7,200,0.995,0.93,1.8,0.00012,85.5");
    }

    #[test]
    fn json_keys_are_the_columns() {
        let json: serde_json::Value = serde_json::from_str(&to_json(&[row()]).unwrap()).unwrap();
        let obj = json["rows"][0].as_object().unwrap();
        let mut keys: Vec<&str> = obj.keys().map(String::as_str).collect();
        let mut expected = COLUMNS.to_vec();
        keys.sort_unstable();
        expected.sort_unstable();
        assert_eq!(keys, expected);
    }
}
