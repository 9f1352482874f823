//! Time as an argument: the [`Clock`] the scheduler asks for "now" and sleeps on.
//!
//! The wall clock implementation lives in `cli` (the only module that reads it). Tests and
//! simulations use [`SimulatedClock`], whose `sleep_until` jumps time forward at once, so weeks
//! of scheduling run in milliseconds.

use std::sync::Mutex;

use chrono::{DateTime, Duration, Utc};

/// Where the scheduler gets the time from.
pub trait Clock: Send + Sync {
    /// The current instant.
    fn now(&self) -> DateTime<Utc>;
    /// Blocks until `t` (returns at once when `t` is not in the future). Implementations may
    /// return early (for example when a stop was requested); callers re-check `now`.
    fn sleep_until(&self, t: DateTime<Utc>);
}

/// A clock that only moves when told to: `sleep_until` sets the time to its target.
#[derive(Debug)]
pub struct SimulatedClock {
    now: Mutex<DateTime<Utc>>,
}

impl SimulatedClock {
    /// A simulated clock standing at `start`.
    pub fn new(start: DateTime<Utc>) -> Self {
        SimulatedClock {
            now: Mutex::new(start),
        }
    }

    /// Moves the clock forward by `by` (an outage, say).
    pub fn advance(&self, by: Duration) {
        let mut now = self.now.lock().expect("clock lock");
        *now += by;
    }

    /// Sets the clock (never backwards).
    pub fn set(&self, t: DateTime<Utc>) {
        let mut now = self.now.lock().expect("clock lock");
        if t > *now {
            *now = t;
        }
    }
}

impl Clock for SimulatedClock {
    fn now(&self) -> DateTime<Utc> {
        *self.now.lock().expect("clock lock")
    }

    fn sleep_until(&self, t: DateTime<Utc>) {
        self.set(t);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::TimeZone;

    #[test]
    fn simulated_clock_jumps_and_never_goes_back() {
        let t0 = Utc.with_ymd_and_hms(2026, 11, 1, 0, 0, 0).unwrap();
        let c = SimulatedClock::new(t0);
        c.sleep_until(t0 + Duration::hours(5));
        assert_eq!(c.now(), t0 + Duration::hours(5));
        c.sleep_until(t0);
        assert_eq!(c.now(), t0 + Duration::hours(5));
        c.advance(Duration::days(2));
        assert_eq!(c.now(), t0 + Duration::hours(53));
    }
}
