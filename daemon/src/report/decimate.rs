//! Data time to pixel columns, and min/max decimation of a series per column,
//! so a run of tens of thousands of epochs draws as at most two points per
//! column and every extreme stays visible.

/// A span of data time cut into equal pixel columns.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Columns {
    t0: f64,
    span: f64,
    n_cols: usize,
}

/// What one column holds of a series.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Cell {
    /// No epoch falls in this column.
    Empty,
    /// Epochs fall here but none has a finite value: the line breaks.
    Gap,
    /// The smallest and largest finite value of the column's epochs.
    Range { lo: f64, hi: f64 },
}

impl Columns {
    /// `n_cols` columns over `[t0, t1]` seconds (an empty span is widened to 1 s).
    pub(crate) fn new(t0: f64, t1: f64, n_cols: usize) -> Self {
        let span = if t1 > t0 { t1 - t0 } else { 1.0 };
        Columns {
            t0,
            span,
            n_cols: n_cols.max(1),
        }
    }

    pub(crate) fn n_cols(&self) -> usize {
        self.n_cols
    }

    pub(crate) fn t0(&self) -> f64 {
        self.t0
    }

    pub(crate) fn span(&self) -> f64 {
        self.span
    }

    /// The column of time `t_s`, clamped to the span.
    pub(crate) fn index(&self, t_s: f64) -> usize {
        let u = ((t_s - self.t0) / self.span).clamp(0.0, 1.0);
        ((u * self.n_cols as f64) as usize).min(self.n_cols - 1)
    }
}

/// Min/max of `values[i]` (taken at `times[i]`) per column; non-finite values
/// mark gaps. Extra entries of the longer slice are ignored.
pub(crate) fn min_max(cols: &Columns, times: &[f64], values: &[f64]) -> Vec<Cell> {
    let mut cells = vec![Cell::Empty; cols.n_cols()];
    for (&t, &v) in times.iter().zip(values) {
        let cell = &mut cells[cols.index(t)];
        *cell = match (*cell, v.is_finite()) {
            (Cell::Range { lo, hi }, true) => Cell::Range {
                lo: lo.min(v),
                hi: hi.max(v),
            },
            (Cell::Range { .. }, false) => *cell,
            (_, true) => Cell::Range { lo: v, hi: v },
            (_, false) => Cell::Gap,
        };
    }
    cells
}

/// Runs of consecutive `true` columns as `(first, count)`.
pub(crate) fn runs(flags: &[bool]) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let mut start = None;
    for (idx, &on) in flags.iter().chain(std::iter::once(&false)).enumerate() {
        match (on, start) {
            (true, None) => start = Some(idx),
            (false, Some(first)) => {
                out.push((first, idx - first));
                start = None;
            }
            _ => {}
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keeps_the_extremes_of_each_column() {
        let cols = Columns::new(0.0, 10.0, 5);
        let times = [0.0, 0.5, 1.9, 2.0, 9.99, 10.0, 4.1];
        let values = [3.0, -1.0, 7.0, f64::NAN, 2.0, 5.0, 4.0];
        let cells = min_max(&cols, &times, &values);
        assert_eq!(cells[0], Cell::Range { lo: -1.0, hi: 7.0 });
        assert_eq!(cells[1], Cell::Gap);
        assert_eq!(cells[2], Cell::Range { lo: 4.0, hi: 4.0 });
        assert_eq!(cells[3], Cell::Empty);
        // t = 10 (the end) falls in the last column, not past it.
        assert_eq!(cells[4], Cell::Range { lo: 2.0, hi: 5.0 });
    }

    #[test]
    fn a_finite_value_outweighs_a_gap_in_the_same_column() {
        let cols = Columns::new(0.0, 1.0, 1);
        let cells = min_max(&cols, &[0.1, 0.2, 0.3], &[f64::NAN, 2.0, f64::INFINITY]);
        assert_eq!(cells[0], Cell::Range { lo: 2.0, hi: 2.0 });
    }

    #[test]
    fn runs_of_flags() {
        assert_eq!(
            runs(&[true, true, false, true, false, false, true]),
            vec![(0, 2), (3, 1), (6, 1)]
        );
        assert!(runs(&[false, false]).is_empty());
    }

    #[test]
    fn empty_span_is_widened() {
        let cols = Columns::new(5.0, 5.0, 10);
        assert_eq!(cols.span(), 1.0);
        assert_eq!(cols.index(5.0), 0);
        assert_eq!(cols.index(100.0), 9);
    }
}
