//! The scheduler: which periods are due at a given `now` (time is always an argument), catch-up of
//! missed periods in order, and leases so that no period runs twice at once.

pub mod clock;

pub use clock::{Clock, SimulatedClock};
