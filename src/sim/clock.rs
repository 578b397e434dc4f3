//! The simulator's clock: virtual by default, optionally paced in real time.
//!
//! Virtual time advances only by modelled bus time and by explicit delays,
//! so a script that waits a second for a conversion runs in microseconds
//! and gives the same result every run. Paced time sleeps the host so that
//! virtual time never runs ahead of the wall clock.

use std::time::{Duration, Instant};

#[derive(Debug, Clone)]
pub struct Clock {
    now: Duration,
    paced_from: Option<Instant>,
}

impl Clock {
    pub fn new(realtime: bool) -> Self {
        Clock { now: Duration::ZERO, paced_from: realtime.then(Instant::now) }
    }

    pub fn now(&self) -> Duration {
        self.now
    }

    pub fn advance(&mut self, d: Duration) {
        self.now += d;
        if let Some(origin) = self.paced_from {
            let target = origin + self.now;
            let wall = Instant::now();
            if target > wall {
                std::thread::sleep(target - wall);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn virtual_time_does_not_sleep() {
        let mut c = Clock::new(false);
        let start = Instant::now();
        c.advance(Duration::from_secs(3600));
        assert_eq!(c.now(), Duration::from_secs(3600));
        assert!(start.elapsed() < Duration::from_secs(60));
    }

    #[test]
    fn paced_time_keeps_up_with_the_wall() {
        let mut c = Clock::new(true);
        let start = Instant::now();
        c.advance(Duration::from_millis(20));
        assert!(start.elapsed() >= Duration::from_millis(20));
    }
}
