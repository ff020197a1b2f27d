//! The wait before the next attempt of a webhook delivery or an analysis job:
//! exponential back-off, capped, with "equal jitter".
//!
//! After failed attempt `n` (from 1) the ceiling is `c = min(max, base · 2^(n−1))` and the
//! wait is drawn uniformly from `[c/2, c]`: half of it grows for sure, half is random.
//! The random half spreads the retries of many deliveries that failed together (a
//! receiver that was down) so that they do not all arrive at once when it comes back;
//! the fixed half keeps a wait from shrinking to nothing. Exponential back-off with
//! jitter, and this "equal jitter" variant of it, are common practice.

use std::time::Duration;

/// Back-off parameters.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Backoff {
    /// Ceiling after the first failed attempt.
    pub base: Duration,
    /// Largest ceiling.
    pub max: Duration,
}

impl Backoff {
    /// The ceiling after failed attempt `attempt` (from 1; 0 is taken as 1):
    /// `min(max, base · 2^(attempt−1))`, without overflow.
    pub fn ceiling(&self, attempt: u32) -> Duration {
        let doublings = attempt.max(1) - 1;
        let factor = 1u32.checked_shl(doublings).filter(|_| doublings < 32);
        factor
            .and_then(|f| self.base.checked_mul(f))
            .map_or(self.max, |d| d.min(self.max))
    }

    /// The wait after failed attempt `attempt` for a random `unit` in `[0, 1]`:
    /// `c/2 + unit · c/2` with `c` the [`Backoff::ceiling`]. A `unit` outside `[0, 1]`
    /// (or NaN) is clamped into it.
    pub fn delay_for(&self, attempt: u32, unit: f64) -> Duration {
        let c = self.ceiling(attempt);
        let unit = if unit.is_nan() {
            0.0
        } else {
            unit.clamp(0.0, 1.0)
        };
        let half = c / 2;
        half + (c - half).mul_f64(unit)
    }

    /// The wait after failed attempt `attempt`, with jitter from the operating system's
    /// random source (the ceiling itself if that source fails).
    pub fn delay(&self, attempt: u32) -> Duration {
        self.delay_for(attempt, random_unit().unwrap_or(1.0))
    }
}

/// `t + d`, saturating at the largest representable time (a far-future setting never
/// overflows the date).
pub fn later(t: time::OffsetDateTime, d: Duration) -> time::OffsetDateTime {
    time::Duration::try_from(d)
        .ok()
        .and_then(|d| t.checked_add(d))
        .unwrap_or_else(|| time::PrimitiveDateTime::MAX.assume_utc())
}

/// A uniform random number in `[0, 1)` from 53 random bits.
fn random_unit() -> Option<f64> {
    let mut b = [0u8; 8];
    getrandom::fill(&mut b).ok()?;
    let bits = u64::from_le_bytes(b) >> 11;
    // 2^53 values, exactly representable; divided by 2^53.
    Some(bits as f64 / (1u64 << 53) as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    const B: Backoff = Backoff {
        base: Duration::from_secs(10),
        max: Duration::from_secs(3600),
    };

    #[test]
    fn the_ceiling_doubles_from_base_up_to_the_cap() {
        // base · 2^(n−1): 10, 20, 40, …, 2560 s, then capped at 3600 s.
        let want = [10, 20, 40, 80, 160, 320, 640, 1280, 2560, 3600, 3600];
        for (i, w) in want.iter().enumerate() {
            let n = u32::try_from(i + 1).expect("small");
            assert_eq!(B.ceiling(n), Duration::from_secs(*w), "attempt {n}");
        }
        assert_eq!(B.ceiling(0), B.ceiling(1));
        // No overflow, however many attempts.
        for n in [31, 32, 33, 64, 1000, u32::MAX] {
            assert_eq!(B.ceiling(n), B.max, "attempt {n}");
        }
        let huge = Backoff {
            base: Duration::MAX / 2,
            max: Duration::MAX,
        };
        assert_eq!(huge.ceiling(3), Duration::MAX);
    }

    #[test]
    fn every_delay_is_between_half_the_ceiling_and_the_ceiling() {
        for n in 1..=40 {
            let c = B.ceiling(n);
            assert_eq!(B.delay_for(n, 0.0), c / 2);
            assert_eq!(B.delay_for(n, 1.0), c);
            assert_eq!(B.delay_for(n, 2.0), c, "clamped");
            assert_eq!(B.delay_for(n, f64::NAN), c / 2, "NaN is clamped");
            for _ in 0..50 {
                let d = B.delay(n);
                assert!(
                    d >= c / 2 && d <= c,
                    "attempt {n}: {d:?} outside [{:?}, {c:?}]",
                    c / 2
                );
            }
        }
    }

    #[test]
    fn delays_grow_until_the_cap_and_stay_there() {
        // Below the cap c(n+1) = 2·c(n), so the smallest wait after attempt n+1
        // (c(n+1)/2) is the largest after attempt n (c(n)): waits never shrink.
        for n in 1..9 {
            assert!(B.ceiling(n + 1) < B.max, "attempt {n} is below the cap");
            assert_eq!(B.delay_for(n + 1, 0.0), B.delay_for(n, 1.0), "attempt {n}");
        }
        // At the cap: [1800, 3600] s for every attempt from the 10th on.
        for n in [10, 30, 500] {
            assert_eq!(B.delay_for(n, 0.0), Duration::from_secs(1800));
            assert_eq!(B.delay_for(n, 1.0), Duration::from_secs(3600));
        }
    }

    #[test]
    fn jitter_spreads_the_delays() {
        // 200 draws of a 2560 s ceiling: uniform on [1280, 2560] s, so their spread is far
        // from zero (the chance that all fall within one second is negligible).
        let draws: Vec<Duration> = (0..200).map(|_| B.delay(9)).collect();
        let lo = draws.iter().min().expect("draws");
        let hi = draws.iter().max().expect("draws");
        assert!(*hi - *lo > Duration::from_secs(1), "{lo:?}..{hi:?}");
        let unit = random_unit().expect("random source");
        assert!((0.0..1.0).contains(&unit));
    }
}
