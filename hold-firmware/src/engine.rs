//! One measurement: idle check, press, turn-on, release, hold — over
//! embedded-hal 1.0 pins, polled, with a glitch filter.
//!
//! Polarity: the trigger is active low (the engine pulls it low to press) and
//! the stage output is active low (low while the stage holds).

use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{InputPin, OutputPin};
use rc_model::Prepared;
use serde::{Deserialize, Serialize};

use crate::config::Config;
use crate::time::{Stopwatch, TickSource};
use crate::timer::SoftHold;
use crate::verdict::{Hint, Verdict};

/// Errors of the engine, generic over the pins' error type.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Error<E> {
    /// A pin operation failed.
    Pin(E),
    /// The model refused (for example a clock outside its range).
    Model(rc_model::Error),
}

impl<E: core::fmt::Debug> core::fmt::Display for Error<E> {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Error::Pin(e) => write!(f, "pin error: {e:?}"),
            Error::Model(e) => write!(f, "model: {e}"),
        }
    }
}

impl<E: core::fmt::Debug> core::error::Error for Error<E> {}

/// The result of one measurement.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Measurement {
    /// How long the trigger was held, ticks.
    pub press_ticks: u64,
    /// Turn-on latency, ticks (`None` if the output never turned on).
    pub on_ticks: Option<u64>,
    /// Hold after release, ticks (`None` if it did not end or was not reached).
    pub hold_ticks: Option<u64>,
    /// Level changes the glitch filter rejected.
    pub glitches: u16,
    /// The verdict.
    pub verdict: Verdict,
    /// Capacitance the hold implies, as a deviation from nominal in ppm
    /// (for short and long holds, when the model can invert them).
    pub c_deviation_ppm: Option<i64>,
    /// The likely cause of a failure.
    pub hint: Hint,
}

/// The glitch filter: a level counts only after it has been stable for
/// `glitch_ticks`; a change that does not last is counted and dropped.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Filter {
    pub(crate) level: bool,
    candidate: bool,
    since: u64,
    pub(crate) glitches: u16,
}

impl Filter {
    pub(crate) const fn new(level: bool) -> Filter {
        Filter { level, candidate: level, since: 0, glitches: 0 }
    }

    /// Feeds one raw sample taken at `t`; returns the time the new level
    /// began when the filtered level changes.
    pub(crate) fn sample(&mut self, raw: bool, t: u64, glitch_ticks: u64) -> Option<u64> {
        if raw == self.level {
            if self.candidate != self.level {
                self.glitches = self.glitches.saturating_add(1);
                self.candidate = self.level;
            }
            return None;
        }
        if self.candidate != raw {
            self.candidate = raw;
            self.since = t;
        }
        if t.saturating_sub(self.since) >= glitch_ticks {
            self.level = raw;
            return Some(self.since);
        }
        None
    }
}

/// The measurement with its verdict's diagnosis: the cause hint and, for
/// short and long holds, the capacitance the hold implies at `temp_mdeg_c`
/// (the hot path: [`Prepared::deviation_ppm_at`]).
#[allow(clippy::too_many_arguments)]
pub(crate) fn outcome(
    config: &Config,
    stage: &Prepared,
    temp_mdeg_c: i32,
    press_ticks: u64,
    on: Option<u64>,
    hold: Option<u64>,
    glitches: u16,
    verdict: Verdict,
) -> Measurement {
    let mut m = Measurement {
        press_ticks,
        on_ticks: on,
        hold_ticks: hold,
        glitches,
        verdict,
        c_deviation_ppm: None,
        hint: Hint::None,
    };
    m.hint = match verdict {
        Verdict::WithinWindow | Verdict::NotIdle => Hint::None,
        Verdict::NoResponse => Hint::NoChargePath,
        Verdict::StuckActive => Hint::OpenResistorOrShortedNode,
        Verdict::Chatter => Hint::NoisyOutput,
        Verdict::Short | Verdict::Long | Verdict::FastStart | Verdict::SlowStart => {
            let hold = hold.unwrap_or(0);
            let start_failed = matches!(verdict, Verdict::FastStart | Verdict::SlowStart);
            if !start_failed && hold.saturating_mul(20) < config.hold_min_ticks {
                Hint::OpenCapacitorOrDiode
            } else {
                let on_reading = match on {
                    Some(on) => config.on_reading(on),
                    None => None,
                };
                match stage.deviation_ppm_at(hold, temp_mdeg_c) {
                    Ok(dev) => {
                        let dev = i64::from(dev);
                        m.c_deviation_ppm = Some(dev);
                        Hint::from_times(dev, on_reading, start_failed)
                    }
                    // Outside the prepared range (a temperature the stage was not prepared for).
                    Err(_) if start_failed => Hint::ChargePath,
                    Err(_) => Hint::WrongPart,
                }
            }
        }
    };
    #[cfg(feature = "defmt")]
    defmt::info!("hold measurement: {} (hint {})", m.verdict.name(), m.hint.name());
    m
}

/// The verdict on a completed hold; the turn-on latency `on` is judged too
/// when there is one (`None` for a retriggered hold).
#[allow(clippy::too_many_arguments)]
pub(crate) fn judge(
    config: &Config,
    stage: &Prepared,
    temp_mdeg_c: i32,
    press: u64,
    on: Option<u64>,
    hold: u64,
    glitches: u16,
    dropped: bool,
) -> Measurement {
    let c = config;
    let verdict = if glitches > c.chatter_limit || dropped {
        Verdict::Chatter
    } else {
        Verdict::of_times(on, hold, c.on_min_ticks, c.on_max_ticks, c.hold_min_ticks, c.hold_max_ticks)
    };
    outcome(config, stage, temp_mdeg_c, press, on, Some(hold), glitches, verdict)
}

/// The measuring engine: owns the trigger and output pins, a delay and a tick
/// source, and the prepared stage it measures.
pub struct Tester<TRIG, OUT, D, K> {
    trigger: TRIG,
    output: OUT,
    delay: D,
    clock: K,
    config: Config,
    stage: Prepared,
    temp_mdeg_c: i32,
}

impl<TRIG, OUT, D, K, E> Tester<TRIG, OUT, D, K>
where
    TRIG: OutputPin<Error = E>,
    OUT: InputPin<Error = E>,
    D: DelayNs,
    K: TickSource,
{
    /// Takes the peripherals, the timings and the prepared stage (both from
    /// one [`crate::Setup`]). Holds are judged at the stage's reference
    /// temperature until [`Tester::set_temperature`] says otherwise.
    pub fn new(trigger: TRIG, output: OUT, delay: D, clock: K, config: Config, stage: Prepared) -> Self {
        Tester { trigger, output, delay, clock, config, temp_mdeg_c: stage.ref_mdeg_c(), stage }
    }

    /// The stage's junction temperature, m°C, for the diagnosis of the next
    /// measurements (from a sensor beside the stage).
    pub fn set_temperature(&mut self, temp_mdeg_c: i32) {
        self.temp_mdeg_c = temp_mdeg_c;
    }

    /// Gives the peripherals back.
    pub fn release(self) -> (TRIG, OUT, D, K) {
        (self.trigger, self.output, self.delay, self.clock)
    }

    /// The settings.
    pub const fn config(&self) -> &Config {
        &self.config
    }

    /// The prepared stage holds are judged with.
    pub const fn stage(&self) -> &Prepared {
        &self.stage
    }

    /// Mutable access to the tick source (e.g. to read it between measurements).
    pub fn clock_mut(&mut self) -> &mut K {
        &mut self.clock
    }

    fn active(&mut self) -> Result<bool, Error<E>> {
        self.output.is_low().map_err(Error::Pin)
    }

    fn outcome(
        &self,
        press_ticks: u64,
        on: Option<u64>,
        hold: Option<u64>,
        glitches: u16,
        verdict: Verdict,
    ) -> Measurement {
        outcome(&self.config, &self.stage, self.temp_mdeg_c, press_ticks, on, hold, glitches, verdict)
    }

    /// Waits `ticks` with the trigger released, requiring the output to stay
    /// inactive; returns `false` if it turned active.
    fn idle_for(&mut self, ticks: u64, filter: &mut Filter) -> Result<bool, Error<E>> {
        let mut sw = Stopwatch::start(self.clock.now());
        loop {
            let t = sw.update(self.clock.now());
            if t >= ticks {
                return Ok(true);
            }
            let raw = self.active()?;
            if filter.sample(raw, t, self.config.glitch_ticks).is_some() && filter.level {
                return Ok(false);
            }
            self.delay.delay_ns(self.config.poll_ns);
        }
    }

    /// Presses for `press_ticks`; returns (turn-on time, press length, dropped out during the press).
    fn press(&mut self, filter: &mut Filter, require_on: bool) -> Result<(Option<u64>, u64, bool), Error<E>> {
        self.trigger.set_low().map_err(Error::Pin)?;
        let mut sw = Stopwatch::start(self.clock.now());
        let mut on = if filter.level { Some(0) } else { None };
        let mut dropped = false;
        loop {
            let t = sw.update(self.clock.now());
            let raw = self.active()?;
            if let Some(at) = filter.sample(raw, t, self.config.glitch_ticks) {
                if filter.level {
                    on = on.or(Some(at));
                } else {
                    dropped = true;
                }
            }
            if require_on && on.is_none() && t >= self.config.on_timeout_ticks {
                self.trigger.set_high().map_err(Error::Pin)?;
                return Ok((None, t, dropped));
            }
            if t >= self.config.press_ticks {
                self.trigger.set_high().map_err(Error::Pin)?;
                return Ok((on, t, dropped));
            }
            // Fine polls until the output turns on (its latency is judged), then the hold's.
            let poll = if filter.level { self.config.poll_ns } else { self.config.on_poll_ns };
            self.delay.delay_ns(poll);
        }
    }

    /// After a release: ticks until the output turns inactive, or `None` at the timeout.
    /// With `stop_after`, returns early (with `None`) once that many ticks passed.
    fn hold(&mut self, filter: &mut Filter, stop_after: Option<u64>) -> Result<Option<u64>, Error<E>> {
        let mut sw = Stopwatch::start(self.clock.now());
        loop {
            let t = sw.update(self.clock.now());
            let raw = self.active()?;
            if let Some(at) = filter.sample(raw, t, self.config.glitch_ticks) {
                if !filter.level {
                    return Ok(Some(at));
                }
            }
            if t >= stop_after.unwrap_or(self.config.hold_timeout_ticks) {
                return Ok(None);
            }
            self.delay.delay_ns(self.config.poll_ns);
        }
    }

    fn judge(&self, press: u64, on: Option<u64>, hold: u64, glitches: u16, dropped: bool) -> Measurement {
        judge(&self.config, &self.stage, self.temp_mdeg_c, press, on, hold, glitches, dropped)
    }

    /// One measurement: idle check, press, release, hold.
    ///
    /// # Errors
    /// [`Error::Pin`] when a pin operation fails (the trigger is released first where possible).
    pub fn measure(&mut self) -> Result<Measurement, Error<E>> {
        self.trigger.set_high().map_err(Error::Pin)?;
        let mut filter = Filter::new(false);
        if !self.idle_for(self.config.settle_ticks, &mut filter)? {
            return Ok(self.outcome(0, None, None, filter.glitches, Verdict::NotIdle));
        }
        let (on, press, dropped) = self.press(&mut filter, true)?;
        if on.is_none() {
            return Ok(self.outcome(press, None, None, filter.glitches, Verdict::NoResponse));
        }
        match self.hold(&mut filter, None)? {
            Some(hold) => Ok(self.judge(press, on, hold, filter.glitches, dropped)),
            None => Ok(self.outcome(press, on, None, filter.glitches, Verdict::StuckActive)),
        }
    }

    /// Checks that a second press `after_ticks` into the hold restarts it: the
    /// output must stay active from the first press through the second
    /// release, and the hold after the second release is judged like a
    /// normal one.
    ///
    /// # Errors
    /// As [`Tester::measure`].
    pub fn check_retrigger(&mut self, after_ticks: u64) -> Result<Retrigger, Error<E>> {
        self.trigger.set_high().map_err(Error::Pin)?;
        let mut filter = Filter::new(false);
        if !self.idle_for(self.config.settle_ticks, &mut filter)? {
            let m = self.outcome(0, None, None, filter.glitches, Verdict::NotIdle);
            return Ok(Retrigger { stayed_active: false, second: m });
        }
        let (on, _, _) = self.press(&mut filter, true)?;
        if on.is_none() {
            let m = self.outcome(0, None, None, filter.glitches, Verdict::NoResponse);
            return Ok(Retrigger { stayed_active: false, second: m });
        }
        // Wait into the hold; the output must not turn off before the second press.
        let ended = self.hold(&mut filter, Some(after_ticks))?;
        let (_, press, dropped) = self.press(&mut filter, false)?;
        let stayed_active = ended.is_none() && !dropped;
        let second = match self.hold(&mut filter, None)? {
            // The output was on before this press: no latency to judge.
            Some(hold) => Measurement { on_ticks: Some(0), ..self.judge(press, None, hold, filter.glitches, dropped) },
            None => self.outcome(press, Some(0), None, filter.glitches, Verdict::StuckActive),
        };
        Ok(Retrigger { stayed_active, second })
    }
}

/// One step of a press schedule: press for `press_ticks`, then leave the
/// trigger released for `gap_ticks`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Step {
    /// Press length, ticks.
    pub press_ticks: u64,
    /// Released time after it, ticks.
    pub gap_ticks: u64,
}

/// The stage and a software timer run on the same presses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Comparison {
    /// Ticks the stage output was active.
    pub stage_active_ticks: u64,
    /// Ticks the software timer was active.
    pub timer_active_ticks: u64,
    /// Ticks the two disagreed.
    pub disagree_ticks: u64,
    /// Separate active intervals of the stage.
    pub stage_intervals: u16,
    /// Separate active intervals of the timer.
    pub timer_intervals: u16,
}

impl<TRIG, OUT, D, K, E> Tester<TRIG, OUT, D, K>
where
    TRIG: OutputPin<Error = E>,
    OUT: InputPin<Error = E>,
    D: DelayNs,
    K: TickSource,
{
    /// Runs `steps` on the stage and on `timer` side by side, sampling both
    /// at every poll, and reports how long each was active and how long
    /// they disagreed.
    ///
    /// # Errors
    /// [`Error::Pin`] when a pin operation fails.
    pub fn compare_soft(&mut self, timer: &mut SoftHold, steps: &[Step]) -> Result<Comparison, Error<E>> {
        let mut c = Comparison::default();
        let (mut was_stage, mut was_timer) = (false, false);
        let mut last = self.clock.now();
        for step in steps {
            for (pressed, ticks) in [(true, step.press_ticks), (false, step.gap_ticks)] {
                let now = self.clock.now();
                if pressed {
                    self.trigger.set_low().map_err(Error::Pin)?;
                    timer.press(now);
                } else {
                    self.trigger.set_high().map_err(Error::Pin)?;
                    timer.release(now);
                }
                let mut sw = Stopwatch::start(now);
                loop {
                    let now = self.clock.now();
                    let t = sw.update(now);
                    let dt = u64::from(now.wrapping_sub(last));
                    last = now;
                    let stage = self.active()?;
                    let soft = timer.active(now);
                    if was_stage {
                        c.stage_active_ticks += dt;
                    }
                    if was_timer {
                        c.timer_active_ticks += dt;
                    }
                    if was_stage != was_timer {
                        c.disagree_ticks += dt;
                    }
                    if stage && !was_stage {
                        c.stage_intervals = c.stage_intervals.saturating_add(1);
                    }
                    if soft && !was_timer {
                        c.timer_intervals = c.timer_intervals.saturating_add(1);
                    }
                    was_stage = stage;
                    was_timer = soft;
                    if t >= ticks {
                        break;
                    }
                    self.delay.delay_ns(self.config.poll_ns);
                }
            }
        }
        Ok(c)
    }
}

/// The result of a retrigger check.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Retrigger {
    /// The output stayed active from the first press through the second release.
    pub stayed_active: bool,
    /// The measurement of the hold after the second release.
    pub second: Measurement,
}

impl Retrigger {
    /// The stage restarted its hold on the second press.
    #[must_use]
    pub fn restarted(&self) -> bool {
        self.stayed_active && self.second.verdict.passes()
    }
}
