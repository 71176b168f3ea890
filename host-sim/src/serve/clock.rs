//! The real-time clock: one tick of the link every plant tick, on a
//! schedule fixed at start (tick `k` is due at `start + k·tick`), so that
//! a late tick does not push the later ones back. The sensor's time is
//! `k·tick` whatever the wall clock says: a late tick is run late, never
//! skipped, and counted.

use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};

use super::{Shared, POLL};

/// A tick that starts later than this fraction of the tick after it was
/// due counts as late.
pub const LATE_FRACTION: f64 = 0.1;

/// Whether a tick that started `lateness` after it was due is late.
pub fn is_late(lateness: Duration, tick: Duration) -> bool {
    lateness.as_secs_f64() > LATE_FRACTION * tick.as_secs_f64()
}

/// Tick until the server stops.
pub fn run_real_time(shared: &Shared, tick: Duration) {
    let start = Instant::now();
    let mut k: u32 = 0;
    while !shared.stopping() {
        let due = start + tick * k;
        let now = Instant::now();
        if now < due {
            std::thread::sleep((due - now).min(POLL));
            continue;
        }
        let lateness = now - due;
        let us = u64::try_from(lateness.as_micros()).unwrap_or(u64::MAX);
        shared
            .stats
            .max_lateness_us
            .fetch_max(us, Ordering::Relaxed);
        if is_late(lateness, tick) {
            shared.stats.late_ticks.fetch_add(1, Ordering::Relaxed);
        }
        shared.lock().tick();
        k = k.saturating_add(1);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn late_is_a_tenth_of_the_tick() {
        let tick = Duration::from_secs(1);
        assert!(!is_late(Duration::from_millis(100), tick));
        assert!(is_late(Duration::from_millis(101), tick));
        assert!(!is_late(Duration::ZERO, Duration::from_millis(10)));
    }
}
