//! The engine over `embedded-hal-async`: the output's edges are awaited
//! (`Wait`, typically an edge interrupt) instead of polled, each wait raced
//! against an async delay for its timeout. Same settings, same verdicts and
//! diagnosis as [`crate::Tester`]; times are taken when an edge arrives.

use core::future::{poll_fn, Future};
use core::pin::pin;
use core::task::Poll;

use embedded_hal::digital::{InputPin, OutputPin};
use embedded_hal_async::delay::DelayNs;
use embedded_hal_async::digital::Wait;
use rc_model::Prepared;

use crate::config::Config;
use crate::engine::{judge, outcome, Error, Measurement};
use crate::time::{Stopwatch, TickSource};
use crate::verdict::Verdict;

/// Whichever of two futures finishes first (`a` is polled first).
enum Either<A, B> {
    Left(A),
    Right(B),
}

async fn first<A: Future, B: Future>(a: A, b: B) -> Either<A::Output, B::Output> {
    let mut a = pin!(a);
    let mut b = pin!(b);
    poll_fn(move |cx| {
        if let Poll::Ready(v) = a.as_mut().poll(cx) {
            return Poll::Ready(Either::Left(v));
        }
        if let Poll::Ready(v) = b.as_mut().poll(cx) {
            return Poll::Ready(Either::Right(v));
        }
        Poll::Pending
    })
    .await
}

/// The async measuring engine. See [`crate::Tester`].
pub struct AsyncTester<TRIG, OUT, D, K> {
    trigger: TRIG,
    output: OUT,
    delay: D,
    clock: K,
    config: Config,
    stage: Prepared,
    temp_mdeg_c: i32,
}

impl<TRIG, OUT, D, K, E> AsyncTester<TRIG, OUT, D, K>
where
    TRIG: OutputPin<Error = E>,
    OUT: InputPin<Error = E> + Wait<Error = E>,
    D: DelayNs,
    K: TickSource,
{
    /// Takes the peripherals and the settings.
    pub fn new(trigger: TRIG, output: OUT, delay: D, clock: K, config: Config, stage: Prepared) -> Self {
        AsyncTester { trigger, output, delay, clock, config, temp_mdeg_c: stage.ref_mdeg_c(), stage }
    }

    /// The stage's junction temperature, m°C, for the diagnosis of the next
    /// measurements. See [`crate::Tester::set_temperature`].
    pub fn set_temperature(&mut self, temp_mdeg_c: i32) {
        self.temp_mdeg_c = temp_mdeg_c;
    }

    /// Gives the peripherals back.
    pub fn release(self) -> (TRIG, OUT, D, K) {
        (self.trigger, self.output, self.delay, self.clock)
    }

    /// The longest delay asked for at once, ticks: four seconds' worth, under
    /// the 4.29 s (`u32::MAX` ns) one `DelayNs` call can wait.
    fn chunk_ticks(&self) -> u64 {
        u64::from(self.config.clock_hz.max(1)) * 4
    }

    /// `ticks` (at most [`Self::chunk_ticks`]) as ns: below 4·10^9, and
    /// ticks·10^9 below 4·clock·10^9 ≤ 8·10^17 < 2^64 (no `u128` on the chip).
    fn ticks_to_ns(&self, ticks: u64) -> u32 {
        let clock = u64::from(self.config.clock_hz.max(1));
        u32::try_from(ticks.min(self.chunk_ticks()) * 1_000_000_000 / clock).unwrap_or(u32::MAX)
    }

    /// Waits `ticks`, in delays of at most four seconds each.
    async fn wait_ticks(&mut self, mut ticks: u64) {
        while ticks > 0 {
            let chunk = ticks.min(self.chunk_ticks());
            self.delay.delay_ns(self.ticks_to_ns(chunk)).await;
            ticks -= chunk;
        }
    }

    /// Waits up to `ticks` for the output to reach `active`; `true` if it did.
    /// A wait longer than one delay can last is raced in four-second pieces
    /// (one race with a single delay would give up after 4.29 s).
    async fn edge(&mut self, active: bool, mut ticks: u64) -> Result<bool, Error<E>> {
        loop {
            let chunk = ticks.min(self.chunk_ticks());
            let ns = self.ticks_to_ns(chunk);
            let wait = async {
                if active {
                    self.output.wait_for_low().await
                } else {
                    self.output.wait_for_high().await
                }
            };
            match first(wait, self.delay.delay_ns(ns)).await {
                Either::Left(r) => return r.map(|()| true).map_err(Error::Pin),
                Either::Right(()) => {}
            }
            ticks -= chunk;
            if ticks == 0 {
                return Ok(false);
            }
        }
    }

    /// Waits until the output has been `active` for the glitch time, up to
    /// `deadline` ticks on `sw`; returns when that level began. Levels that do
    /// not last are counted in `glitches`.
    async fn settle(
        &mut self,
        active: bool,
        sw: &mut Stopwatch,
        deadline: u64,
        glitches: &mut u16,
    ) -> Result<Option<u64>, Error<E>> {
        loop {
            let t = sw.update(self.clock.now());
            if t >= deadline {
                return Ok(None);
            }
            let now_active = self.output.is_low().map_err(Error::Pin)?;
            if now_active != active {
                if !self.edge(active, deadline - t).await? {
                    return Ok(None);
                }
                continue;
            }
            let began = sw.update(self.clock.now());
            if self.edge(!active, self.config.glitch_ticks).await? {
                *glitches = glitches.saturating_add(1);
                continue;
            }
            return Ok(Some(began));
        }
    }

    /// One measurement. See [`crate::Tester::measure`].
    ///
    /// # Errors
    /// [`Error::Pin`] when a pin operation fails.
    pub async fn measure(&mut self) -> Result<Measurement, Error<E>> {
        let (config, stage, temp) = (self.config, self.stage, self.temp_mdeg_c);
        let mut glitches = 0u16;
        self.trigger.set_high().map_err(Error::Pin)?;
        let mut sw = Stopwatch::start(self.clock.now());
        if self.settle(true, &mut sw, config.settle_ticks, &mut glitches).await?.is_some() {
            return Ok(outcome(&config, &stage, temp, 0, None, None, glitches, Verdict::NotIdle));
        }
        self.trigger.set_low().map_err(Error::Pin)?;
        let mut sw = Stopwatch::start(self.clock.now());
        let Some(on) = self.settle(true, &mut sw, config.on_timeout_ticks, &mut glitches).await? else {
            self.trigger.set_high().map_err(Error::Pin)?;
            let t = sw.update(self.clock.now());
            return Ok(outcome(&config, &stage, temp, t, None, None, glitches, Verdict::NoResponse));
        };
        // Hold the press; the output must not drop out meanwhile.
        let dropped = self.settle(false, &mut sw, config.press_ticks, &mut glitches).await?.is_some();
        let t = sw.update(self.clock.now());
        if t < config.press_ticks {
            self.wait_ticks(config.press_ticks - t).await;
        }
        let press = sw.update(self.clock.now());
        self.trigger.set_high().map_err(Error::Pin)?;
        let mut sw = Stopwatch::start(self.clock.now());
        match self.settle(false, &mut sw, config.hold_timeout_ticks, &mut glitches).await? {
            Some(hold) => Ok(judge(&config, &stage, temp, press, Some(on), hold, glitches, dropped)),
            None => Ok(outcome(&config, &stage, temp, press, Some(on), None, glitches, Verdict::StuckActive)),
        }
    }
}
