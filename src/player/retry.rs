//! Retry policy for NACKed transactions.
//!
//! Contract: a policy allows `attempts` tries in all (at least one). Before
//! try n (n >= 2) the player waits `delay × backoff^(n-2)`, capped at
//! [`MAX_DELAY`]. Only NACKs are retried (see
//! [`Fault::is_nack`](crate::bus::Fault::is_nack)); every try is its own
//! frame in the log, marked with its attempt number.

use std::time::Duration;

use thiserror::Error;

/// No retry waits longer than this, however steep the backoff.
pub const MAX_DELAY: Duration = Duration::from_secs(10);
/// Upper bound on attempts, so a typo cannot retry forever.
pub const MAX_ATTEMPTS: u32 = 1000;

#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RetryPolicy {
    pub attempts: u32,
    pub delay: Duration,
    pub backoff: f64,
}

#[derive(Debug, Clone, PartialEq, Error)]
pub enum PolicyError {
    #[error("retry attempts must be 1-{MAX_ATTEMPTS}, got {0}")]
    Attempts(i64),
    #[error("retry delay must be 0-10000 ms, got {0}")]
    Delay(f64),
    #[error("retry backoff must be 1-16, got {0}")]
    Backoff(f64),
}

impl Default for RetryPolicy {
    /// One try: a NACK fails at once unless the script asks for retries.
    fn default() -> Self {
        RetryPolicy { attempts: 1, delay: Duration::ZERO, backoff: 1.0 }
    }
}

impl RetryPolicy {
    pub fn new(attempts: i64, delay_ms: f64, backoff: f64) -> Result<Self, PolicyError> {
        if !(1..=MAX_ATTEMPTS as i64).contains(&attempts) {
            return Err(PolicyError::Attempts(attempts));
        }
        if !(0.0..=10_000.0).contains(&delay_ms) {
            return Err(PolicyError::Delay(delay_ms));
        }
        if !(1.0..=16.0).contains(&backoff) {
            return Err(PolicyError::Backoff(backoff));
        }
        Ok(RetryPolicy { attempts: attempts as u32, delay: Duration::from_secs_f64(delay_ms / 1000.0), backoff })
    }

    /// The wait before try `attempt` (counted from 1; the first try has none).
    pub fn delay_before(&self, attempt: u32) -> Duration {
        if attempt < 2 {
            return Duration::ZERO;
        }
        let factor = self.backoff.powi(attempt as i32 - 2);
        self.delay.mul_f64(factor.min(1e6)).min(MAX_DELAY)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn backoff_grows_geometrically_and_is_capped() {
        let p = RetryPolicy::new(6, 2.0, 2.0).unwrap();
        let d: Vec<u128> = (1..=5).map(|a| p.delay_before(a).as_millis()).collect();
        assert_eq!(d, vec![0, 2, 4, 8, 16]);
        let steep = RetryPolicy::new(100, 1000.0, 16.0).unwrap();
        assert_eq!(steep.delay_before(50), MAX_DELAY);
    }

    #[test]
    fn bad_policies_are_refused() {
        assert_eq!(RetryPolicy::new(0, 1.0, 1.0), Err(PolicyError::Attempts(0)));
        assert!(RetryPolicy::new(3, -1.0, 1.0).is_err());
        assert!(RetryPolicy::new(3, 1.0, 0.5).is_err());
        assert!(RetryPolicy::new(3, f64::NAN, 1.0).is_err());
    }
}
