//! A software hold timer with the stage's behaviour: active while pressed,
//! then for the hold; a new press restarts it.

#[cfg(feature = "solver")]
use rc_model::Model;
use rc_model::{Error as ModelError, Prepared};

use crate::time::Stopwatch;

/// A retriggerable one-shot on the same tick source as the engine.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SoftHold {
    hold_ticks: u64,
    state: State,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
enum State {
    Idle,
    Pressed,
    Holding(Stopwatch),
}

impl SoftHold {
    /// A timer holding for `hold_ticks` after each release.
    #[must_use]
    pub const fn new(hold_ticks: u64) -> SoftHold {
        SoftHold { hold_ticks, state: State::Idle }
    }

    /// A timer that reproduces the stage's nominal hold (full press from empty).
    ///
    /// # Errors
    /// The model's evaluation errors, or a clock outside 1 kHz – 200 MHz.
    #[cfg(feature = "solver")]
    pub fn from_model(model: &Model, clock_hz: u32) -> Result<SoftHold, ModelError> {
        let e = model.evaluate()?;
        Ok(SoftHold::new(e.hold.ticks(clock_hz)?))
    }

    /// A timer that holds for the prepared stage's hold at its reference
    /// temperature, in ticks of the clock it was prepared for.
    ///
    /// # Errors
    /// As [`Prepared::hold_ticks_at`].
    pub fn from_prepared(stage: &Prepared) -> Result<SoftHold, ModelError> {
        Ok(SoftHold::new(stage.hold_ticks_at(stage.ref_mdeg_c())?))
    }

    /// The hold in ticks.
    #[must_use]
    pub const fn hold_ticks(&self) -> u64 {
        self.hold_ticks
    }

    /// The trigger was pressed at counter value `now`.
    pub fn press(&mut self, _now: u32) {
        self.state = State::Pressed;
    }

    /// The trigger was released at counter value `now`.
    pub fn release(&mut self, now: u32) {
        if self.state == State::Pressed {
            self.state = State::Holding(Stopwatch::start(now));
        }
    }

    /// Whether the output is active at counter value `now` (call at least
    /// once per 2^32 ticks while holding).
    pub fn active(&mut self, now: u32) -> bool {
        match &mut self.state {
            State::Idle => false,
            State::Pressed => true,
            State::Holding(sw) => {
                if sw.update(now) < self.hold_ticks {
                    true
                } else {
                    self.state = State::Idle;
                    false
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn retriggers_and_expires() {
        let mut t = SoftHold::new(100);
        assert!(!t.active(0));
        t.press(10);
        assert!(t.active(50));
        t.release(60);
        assert!(t.active(159));
        t.press(120); // retrigger during the hold
        assert!(t.active(300));
        t.release(300);
        assert!(t.active(399));
        assert!(!t.active(400));
        assert!(!t.active(500));
        // Across the counter wrap.
        t.press(u32::MAX - 20);
        t.release(u32::MAX - 10);
        assert!(t.active(50));
        assert!(!t.active(90));
    }
}
