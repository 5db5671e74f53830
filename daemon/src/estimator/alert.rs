//! Alert state machines on data time: levels with hysteresis and hold time.
//!
//! A [`LevelAlert`] watches a value that should stay high (an inlier fraction).
//! It raises once the value has stayed below `level` for `hold` ns of data time,
//! and clears once it has stayed at or above `level + margin` for `hold` ns. A
//! sample that breaks the streak restarts the hold, so a value chattering around
//! the level never floods: one `raised` and one `cleared` per episode.

use wahbad_protocol::AlertState;

use super::config::LevelConfig;

/// Hysteresis-and-hold machine for one alert (one kind, one sensor).
#[derive(Debug, Clone, PartialEq)]
pub struct LevelAlert {
    level: f64,
    margin: f64,
    hold_ns: i64,
    raised: bool,
    /// Data time at which the current streak towards a change began.
    streak_since: Option<i64>,
}

impl LevelAlert {
    /// A machine in the cleared state.
    pub fn new(level: f64, margin: f64, hold_ns: i64) -> Self {
        LevelAlert {
            level,
            margin,
            hold_ns,
            raised: false,
            streak_since: None,
        }
    }

    /// A machine from its configuration (hold in ms).
    pub fn from_config(config: &LevelConfig) -> Self {
        Self::new(
            config.level,
            config.margin,
            config.hold_ms as i64 * 1_000_000,
        )
    }

    /// The level values are compared with.
    pub fn level(&self) -> f64 {
        self.level
    }

    /// Whether the alert is raised now.
    pub fn is_raised(&self) -> bool {
        self.raised
    }

    /// Feeds the value seen at data time `t` (non-decreasing); returns the change, if any.
    pub fn update(&mut self, t: i64, value: f64) -> Option<AlertState> {
        let towards_change = if self.raised {
            value >= self.level + self.margin
        } else {
            value < self.level
        };
        if !towards_change {
            self.streak_since = None;
            return None;
        }
        let since = *self.streak_since.get_or_insert(t);
        if t.saturating_sub(since) < self.hold_ns {
            return None;
        }
        self.streak_since = None;
        self.raised = !self.raised;
        Some(if self.raised {
            AlertState::Raised
        } else {
            AlertState::Cleared
        })
    }
}

/// Staleness of one configured sensor: raised at the first data time at which
/// the sensor has been silent for longer than its allowance, cleared by its next
/// message. The allowance is both its level and its hold.
#[derive(Debug, Clone, PartialEq)]
pub struct StaleAlert {
    allowance_ns: i64,
    raised: bool,
}

impl StaleAlert {
    /// A machine in the cleared state.
    pub fn new(allowance_ns: i64) -> Self {
        StaleAlert {
            allowance_ns,
            raised: false,
        }
    }

    /// Allowance, ns.
    pub fn allowance_ns(&self) -> i64 {
        self.allowance_ns
    }

    /// Whether the alert is raised now.
    pub fn is_raised(&self) -> bool {
        self.raised
    }

    /// The clock reached `now`; the sensor was last heard at `last_t`.
    pub fn on_clock(&mut self, now: i64, last_t: i64) -> Option<AlertState> {
        if !self.raised && now.saturating_sub(last_t) > self.allowance_ns {
            self.raised = true;
            return Some(AlertState::Raised);
        }
        None
    }

    /// The sensor sent a message.
    pub fn on_message(&mut self) -> Option<AlertState> {
        if self.raised {
            self.raised = false;
            return Some(AlertState::Cleared);
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const MS: i64 = 1_000_000;

    /// Runs `values` at 100 ms steps and returns the (t in ms, state) changes.
    fn run(alert: &mut LevelAlert, values: &[f64]) -> Vec<(i64, AlertState)> {
        values
            .iter()
            .enumerate()
            .filter_map(|(i, &v)| {
                alert
                    .update(i as i64 * 100 * MS, v)
                    .map(|s| (i as i64 * 100, s))
            })
            .collect()
    }

    #[test]
    fn dip_chatter_recover_gives_one_episode() {
        // Script derived in the test: level 0.6, margin 0.05, hold 300 ms, samples every 100 ms.
        let mut alert = LevelAlert::new(0.6, 0.05, 300 * MS);
        #[rustfmt::skip]
        let values = [
            0.9, 0.9,             // 0, 100: fine
            0.5, 0.5, 0.5,        // 200..400: below for 200 ms, not yet the hold
            0.61,                 // 500: streak broken (>= level)
            0.5, 0.5, 0.5, 0.5,   // 600..900: below since 600 -> raised at 900
            0.62, 0.64, 0.62,     // 1000..1200: above level but under level+margin: stays raised
            0.5,                  // 1300
            0.66, 0.7, 0.58,      // 1400..1600: clear streak from 1400 broken at 1600
            0.7, 0.7, 0.7, 0.7,   // 1700..2000: clear streak since 1700 -> cleared at 2000
            0.5, 0.9,             // 2100, 2200: one short dip, no new episode
        ];
        let changes = run(&mut alert, &values);
        assert_eq!(
            changes,
            vec![(900, AlertState::Raised), (2000, AlertState::Cleared)]
        );
        assert!(!alert.is_raised());
    }

    #[test]
    fn zero_hold_changes_on_the_first_sample() {
        let mut alert = LevelAlert::new(0.6, 0.1, 0);
        let changes = run(&mut alert, &[0.7, 0.59, 0.65, 0.69, 0.7, 0.2]);
        assert_eq!(
            changes,
            vec![
                (100, AlertState::Raised),
                (400, AlertState::Cleared),
                (500, AlertState::Raised)
            ]
        );
    }

    #[test]
    fn stale_raises_once_and_clears_on_return() {
        let mut stale = StaleAlert::new(300 * MS);
        assert_eq!(stale.on_clock(300 * MS, 0), None); // exactly the allowance: not yet
        assert_eq!(stale.on_clock(301 * MS, 0), Some(AlertState::Raised));
        assert_eq!(stale.on_clock(900 * MS, 0), None);
        assert_eq!(stale.on_message(), Some(AlertState::Cleared));
        assert_eq!(stale.on_message(), None);
    }
}
