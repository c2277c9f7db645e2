//! What the engine needs to know: timings in ticks, derived from the model.

use rc_model::window::Window;
use rc_model::{Error as ModelError, Evaluation, Model, Span};

/// Engine settings, all in ticks of the [`crate::TickSource`] unless the name says otherwise.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Config {
    /// Tick source frequency, Hz.
    pub clock_hz: u32,
    /// How long the output must stay inactive before a press (idle check).
    pub settle_ticks: u64,
    /// How long the trigger is held.
    pub press_ticks: u64,
    /// A level counts only after it has been stable this long (glitch filter).
    pub glitch_ticks: u64,
    /// Delay between two reads of the output, ns.
    pub poll_ns: u32,
    /// Give up waiting for the output to turn on after this long (≤ press).
    pub on_timeout_ticks: u64,
    /// Shortest hold that passes.
    pub hold_min_ticks: u64,
    /// Longest hold that passes.
    pub hold_max_ticks: u64,
    /// Give up waiting for the output to turn off after this long (stuck active).
    pub hold_timeout_ticks: u64,
    /// More filtered-out glitches than this make the verdict chatter.
    pub chatter_limit: u16,
}

/// Ticks of `span` at `clock_hz`, rounded.
fn ticks(span: Span, clock_hz: u32) -> Result<u64, ModelError> {
    span.ticks(clock_hz)
}

impl Config {
    /// Settings for a stage: the press lasts the stage's press, but at least
    /// the turn-on latency plus five charge time constants (so the capacitor
    /// is charged to within 1 % of its target whatever the stage file says);
    /// the pass window
    /// is the model window widened by `guard_ppm` on each side; timeouts leave
    /// room for a hold 16 times the window's maximum, so that a capacitor a
    /// decade too large reads as a long hold, not a stuck output.
    ///
    /// # Errors
    /// The model's errors for a clock outside 1 kHz – 200 MHz.
    pub fn from_window(
        nominal: &Evaluation,
        window: &Window,
        press: Span,
        clock_hz: u32,
        guard_ppm: u32,
        poll_ns: u32,
    ) -> Result<Config, ModelError> {
        let min = ticks(window.min, clock_hz)?;
        let max = ticks(window.max, clock_hz)?;
        let guard = |t: u64| t / 1_000_000 * u64::from(guard_ppm) + t % 1_000_000 * u64::from(guard_ppm) / 1_000_000;
        let latency = ticks(nominal.on_latency, clock_hz)?;
        let full_charge = ticks(nominal.charge_tau, clock_hz)?.saturating_mul(5).saturating_add(latency);
        let press_ticks = ticks(press, clock_hz)?.max(full_charge);
        let poll_ticks = u64::from(poll_ns) * u64::from(clock_hz) / 1_000_000_000;
        Ok(Config {
            clock_hz,
            settle_ticks: (max / 20).max(4 * poll_ticks).max(1),
            press_ticks,
            glitch_ticks: (4 * poll_ticks).max(1).min(min / 50 + 1),
            poll_ns,
            on_timeout_ticks: (latency.saturating_mul(10)).max(press_ticks / 2).min(press_ticks).max(1),
            hold_min_ticks: min.saturating_sub(guard(min)),
            hold_max_ticks: max.saturating_add(guard(max)),
            hold_timeout_ticks: max.saturating_mul(16).max(1),
            chatter_limit: 8,
        })
    }

    /// Settings straight from a model and its window.
    ///
    /// # Errors
    /// As [`Config::from_window`], and the model's evaluation errors.
    pub fn from_model(
        model: &Model,
        window: &Window,
        clock_hz: u32,
        guard_ppm: u32,
        poll_ns: u32,
    ) -> Result<Config, ModelError> {
        let e = model.evaluate()?;
        let press = Span::from_ns(model.stage().press_ns);
        Config::from_window(&e, window, press, clock_hz, guard_ppm, poll_ns)
    }

    /// Ticks as a model span.
    ///
    /// # Errors
    /// [`ModelError::OutOfDomain`] for a clock outside 1 kHz – 200 MHz.
    pub fn span(&self, ticks: u64) -> Result<Span, ModelError> {
        Span::from_ticks(ticks, self.clock_hz)
    }
}
