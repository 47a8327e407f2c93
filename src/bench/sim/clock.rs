//! Virtual time: a wall clock sped up by a factor, so a simulated run takes seconds.
//!
//! Built on `tokio::time::Instant`, so tests with paused tokio time run the simulation
//! deterministically and at once.

use tokio::time::Instant;

/// Virtual seconds since start, running `scale` times faster than the wall clock.
#[derive(Debug, Clone, Copy)]
pub struct SimClock {
    start: Instant,
    scale: f64,
}

impl SimClock {
    /// A clock starting now; `scale` is clamped to a positive value.
    pub fn new(scale: f64) -> SimClock {
        SimClock {
            start: Instant::now(),
            scale: if scale > 0.0 { scale } else { 1.0 },
        }
    }

    /// How many times faster than real time the clock runs.
    pub fn scale(&self) -> f64 {
        self.scale
    }

    /// Virtual seconds elapsed.
    pub fn now(&self) -> f64 {
        self.start.elapsed().as_secs_f64() * self.scale
    }

    /// The wall-clock instant at which virtual time reaches `t` seconds.
    pub fn instant_at(&self, t: f64) -> Instant {
        self.start + crate::bench::duration_s(t / self.scale)
    }

    /// Sleeps for `virtual_s` virtual seconds.
    pub async fn sleep(&self, virtual_s: f64) {
        tokio::time::sleep(crate::bench::duration_s(virtual_s / self.scale)).await
    }
}
