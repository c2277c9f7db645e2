//! The same model in `f32`, for microcontrollers with an FPU (feature `f32`).
//!
//! Same entry points and result types as the fixed-point [`crate::Model`]:
//! swap `rc_model::Model` for `rc_model::float::Model`. `ln` and `exp` come
//! from `libm` (single precision, about 1 ulp); with the `f32-micromath`
//! feature they come from `micromath` instead, whose approximations trade
//! accuracy for size (documented `ln` error up to 1e-3 absolute, which `rchold
//! agree` measures as percent-level hold errors). Single precision itself
//! limits the hold to about 1e-7 / ln(V_start/V_T−) relative: tens of ppm when
//! the threshold sits close to the start voltage. The README reports the
//! measured figures.

#[cfg(feature = "f32-micromath")]
fn ln(x: f32) -> f32 {
    micromath::F32Ext::ln(x)
}
#[cfg(feature = "f32-micromath")]
fn exp(x: f32) -> f32 {
    micromath::F32Ext::exp(x)
}
#[cfg(not(feature = "f32-micromath"))]
fn ln(x: f32) -> f32 {
    libm::logf(x)
}
#[cfg(not(feature = "f32-micromath"))]
fn exp(x: f32) -> f32 {
    libm::expf(x)
}

use crate::error::{Error, Quantity};
use crate::model::{Evaluation, InverseC};
use crate::stage::{limits, Diode, Stage};
use crate::units::{Span, Voltage};

/// Boltzmann constant over elementary charge, V/K (SI-exact ratio, rounded to f32).
const K_OVER_Q: f32 = 8.617_333e-5;

/// Eight-point Gauss–Legendre nodes and weights on [0, 1]; the f32 rounding of
/// the Q62 table in [`crate::fixed::GAUSS8_Q62`].
const GAUSS8: [(f32, f32); 8] = [
    (0.019_855_07, 0.050_614_27),
    (0.101_666_76, 0.111_190_52),
    (0.237_233_8, 0.156_853_32),
    (0.408_282_68, 0.181_341_89),
    (0.591_717_3, 0.181_341_89),
    (0.762_766_2, 0.156_853_32),
    (0.898_333_2, 0.111_190_52),
    (0.980_144_9, 0.050_614_27),
];

#[derive(Debug, Clone, Copy)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
enum DiodeF {
    Drop(f32),
    Junction { is: f32, nvt: f32 },
}

/// A stage prepared for `f32` evaluation. See [`crate::Model`].
#[derive(Debug, Clone, Copy)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Model {
    stage: Stage,
    vdd: f32,
    r_eff: f32,
    rs: f32,
    r_ser: f32,
    c: f32,
    i_in: f32,
    i_lk: f32,
    diode: DiodeF,
    rise: f32,
    fall: f32,
    i_inf: f32,
    v_inf: f32,
}

fn span(seconds: f32) -> Result<Span, Error> {
    if seconds.is_nan() || seconds < 0.0 || !seconds.is_finite() {
        return Err(Error::Arithmetic);
    }
    // f32 → u128 via u64 ns and a 32-bit fraction; saturates only above 2^64 ns,
    // which the domain checks exclude.
    let ns = seconds * 1e9;
    let whole = ns as u64;
    let frac = ((ns - whole as f32) * 4_294_967_296.0) as u128;
    Span::from_ns_q32((u128::from(whole) << 32) + frac).ok_or(Error::Arithmetic)
}

fn volts(v: f32) -> Voltage {
    Voltage::from_uv_q32((f64::from(v) * 1e6 * 4_294_967_296.0) as i128)
}

impl Model {
    /// Checks and prepares a stage. Errors as [`crate::Model::new`].
    ///
    /// # Errors
    /// [`Error::OutOfDomain`], [`Error::NeverActivates`], [`Error::NoConvergence`].
    pub fn new(stage: &Stage) -> Result<Model, Error> {
        stage.check()?;
        let r = stage.r_mohm as f32 * 1e-3;
        let r_eff = match stage.leak_mohm {
            None => r,
            Some(l) => {
                let rl = l as f32 * 1e-3;
                r * rl / (r + rl)
            }
        };
        let (diode, rs_d) = match stage.diode {
            Diode::Drop { drop_uv } => (DiodeF::Drop(drop_uv as f32 * 1e-6), 0.0),
            Diode::Junction { is_fa, n_milli, rs_mohm } => {
                let t = stage.temp_mdeg_c as f32 * 1e-3 + 273.15;
                (
                    DiodeF::Junction { is: is_fa as f32 * 1e-15, nvt: n_milli as f32 * 1e-3 * K_OVER_Q * t },
                    rs_mohm as f32 * 1e-3,
                )
            }
        };
        let mut m = Model {
            stage: *stage,
            vdd: stage.vdd_uv as f32 * 1e-6,
            r_eff,
            rs: stage.series_mohm as f32 * 1e-3,
            r_ser: (stage.driver_mohm + stage.charge_mohm) as f32 * 1e-3 + rs_d,
            c: stage.c_ff as f32 * 1e-15,
            i_in: stage.leak_fa as f32 * 1e-15,
            i_lk: stage.hold_leak_fa() as f32 * 1e-15,
            diode,
            rise: stage.rise_uv as f32 * 1e-6,
            fall: stage.fall_uv as f32 * 1e-6,
            i_inf: 0.0,
            v_inf: 0.0,
        };
        match m.diode {
            DiodeF::Drop(vf) => {
                m.v_inf = ((m.vdd - vf - m.i_in * m.r_ser) * m.r_eff / (m.r_eff + m.r_ser)).max(0.0);
                m.i_inf = m.v_inf / m.r_eff + m.i_in;
            }
            DiodeF::Junction { .. } => {
                m.i_inf = m.diode_solve(m.r_eff + m.r_ser, m.vdd + m.i_in * m.r_eff)?;
                m.v_inf = (m.i_inf - m.i_in) * m.r_eff;
            }
        }
        if m.v_inf <= m.rise {
            return Err(Error::NeverActivates { target_uv: (m.v_inf * 1e6) as i64, rise_uv: stage.rise_uv });
        }
        Ok(m)
    }

    /// Solves `I·r_tot + n·V_T·ln(1 + I/Is) = e` (bracketed Newton).
    fn diode_solve(&self, r_tot: f32, e: f32) -> Result<f32, Error> {
        let DiodeF::Junction { is, nvt } = self.diode else { return Err(Error::Arithmetic) };
        if e <= 0.0 {
            return Ok(0.0);
        }
        let (mut lo, mut hi) = (0.0f32, e / r_tot);
        let mut x = hi;
        for _ in 0..100 {
            let f = x * r_tot + nvt * ln(1.0 + x / is) - e;
            if f > 0.0 {
                hi = x;
            } else {
                lo = x;
            }
            let next = x - f / (r_tot + nvt / (x + is));
            let next = if next <= lo || next >= hi { 0.5 * (lo + hi) } else { next };
            if (next - x).abs() <= 1e-7 * x.abs() {
                return Ok(next);
            }
            x = next;
        }
        Err(Error::NoConvergence)
    }

    fn node_at_current(&self, i: f32) -> f32 {
        match self.diode {
            DiodeF::Junction { is, nvt } => self.vdd - i * self.r_ser - nvt * ln(1.0 + i / is),
            DiodeF::Drop(vf) => self.vdd - vf - i * self.r_ser,
        }
    }

    /// `N·D/i_C` at distance `d` above the steady-state current.
    fn integrand(&self, d: f32) -> f32 {
        let DiodeF::Junction { is, nvt } = self.diode else { return 0.0 };
        let i = self.i_inf + d;
        let i_c = i - self.i_in - self.node_at_current(i) / self.r_eff;
        let n = (self.r_ser + nvt / (i + is)) * (1.0 + self.rs / self.r_eff) + self.rs;
        n * d / i_c
    }

    /// Charge time while `s` (ln of the current distance ratio) runs s0 → s1.
    fn integral(&self, d0: f32, s0: f32, s1: f32) -> f32 {
        let panels = ((s1 - s0) / 2.0).max(1.0) as u32 as f32 + 1.0;
        let width = (s1 - s0) / panels;
        let mut sum = 0.0;
        let mut p = 0.0;
        while p < panels {
            for (u, w) in GAUSS8 {
                let s = s0 + (p + u) * width;
                sum += w * width * self.integrand(d0 * exp(-s));
            }
            p += 1.0;
        }
        self.c * sum
    }

    /// Press and release from an empty capacitor. See [`crate::Model::evaluate`].
    ///
    /// # Errors
    /// As [`crate::Model::evaluate`].
    pub fn evaluate(&self) -> Result<Evaluation, Error> {
        self.evaluate_from(Voltage::default())
    }

    /// Press and release from capacitor voltage `start`. See [`crate::Model::evaluate_from`].
    ///
    /// # Errors
    /// As [`crate::Model::evaluate_from`].
    pub fn evaluate_from(&self, start: Voltage) -> Result<Evaluation, Error> {
        let vs = (start.uv_q32() as f64 / 4_294_967_296.0 * 1e-6) as f32;
        if vs < 0.0 || vs >= self.v_inf {
            return Err(Error::OutOfDomain(Quantity::StartVoltage));
        }
        let press = self.stage.press_ns as f32 * 1e-9;
        let (latency, vc0, tau_c) = match self.diode {
            DiodeF::Drop(_) => self.charge_drop(vs, press, false),
            DiodeF::Junction { is, nvt } => {
                let rd = nvt / (self.i_inf + is);
                let rp = self.r_ser + rd;
                let tau = self.c * (self.rs + rp * self.r_eff / (rp + self.r_eff));
                let rs_par = if self.rs == 0.0 { 0.0 } else { self.rs * self.r_eff / (self.rs + self.r_eff) };
                let e0 = self.vdd - (vs - self.rs * self.i_in) * self.r_eff / (self.r_eff + self.rs);
                let i0 = self.diode_solve(self.r_ser + rs_par, e0)?;
                let i1 = self.diode_solve(self.r_ser, self.vdd - self.rise)?;
                let d0 = i0 - self.i_inf;
                let latency =
                    if i1 >= i0 || d0 <= 0.0 { 0.0 } else { self.integral(d0, 0.0, ln(d0 / (i1 - self.i_inf))) };
                // March panels of width 0.5 until the press is used up, then
                // Newton inside the last panel.
                let mut s = 0.0f32;
                let mut t = 0.0f32;
                let mut d = d0;
                if d0 > 0.0 {
                    let s_end = ln(d0 / (self.i_inf * 1e-7 + 1e-30));
                    while s < s_end {
                        let dt = self.integral(d0, s, s + 0.5);
                        if t + dt >= press {
                            let mut x = s;
                            let mut tx = t;
                            for _ in 0..8 {
                                let rate = self.c * self.integrand(d0 * exp(-x));
                                let nx = (x + (press - tx) / rate).clamp(s, s + 0.5);
                                tx += if nx >= x { self.integral(d0, x, nx) } else { -self.integral(d0, nx, x) };
                                x = nx;
                            }
                            s = x;
                            break;
                        }
                        t += dt;
                        s += 0.5;
                    }
                    d = if s >= s_end { 0.0 } else { d0 * exp(-s) };
                }
                let i = self.i_inf + d;
                let va = self.node_at_current(i);
                let i_c = i - self.i_in - va / self.r_eff;
                (latency, va - self.rs * i_c, tau)
            }
        };
        if latency > press {
            return Err(Error::PressTooShort { latency_ns: (latency * 1e9) as u64 });
        }
        let (hold, tau_d) = self.discharge(vc0)?;
        let hold_span = span(hold)?;
        let hold_ns = hold_span.ns();
        if !(limits::HOLD_NS_MIN..=limits::DAY_NS).contains(&hold_ns) {
            return Err(Error::HoldOutOfDomain { hold_ns });
        }
        Ok(Evaluation {
            charge_target: volts(self.v_inf),
            charge_tau: span(tau_c)?,
            on_latency: span(latency)?,
            cap_at_release: volts(vc0),
            node_at_release: volts((vc0 - self.rs * self.i_lk) * self.r_eff / (self.r_eff + self.rs)),
            discharge_tau: span(tau_d)?,
            hold: hold_span,
            active: span(press - latency + hold)?,
        })
    }

    /// The hold alone, in seconds, after a press of the stage's length from an
    /// empty capacitor (fixed-drop diode): the fast path for statistics, with
    /// no turn-on latency, no time conversions and no domain check of the
    /// result. A junction diode takes the full [`Model::evaluate`].
    ///
    /// # Errors
    /// [`Error::NoHold`], [`Error::PressTooShort`], and [`Model::evaluate`]'s for a junction.
    pub fn hold_seconds(&self) -> Result<f32, Error> {
        let DiodeF::Drop(_) = self.diode else {
            return self.evaluate().map(|e| (e.hold.ns_q32() as f64 / 4_294_967_296.0 * 1e-9) as f32);
        };
        let press = self.stage.press_ns as f32 * 1e-9;
        let (latency, vc0, _) = self.charge_drop(0.0, press, true);
        if latency > press {
            return Err(Error::PressTooShort { latency_ns: (latency * 1e9) as u64 });
        }
        Ok(self.discharge(vc0)?.0)
    }

    /// Fixed-drop charge from capacitor voltage `vs` for `press` s: (turn-on
    /// latency, capacitor voltage at release, τc), all in s and V. With
    /// `quick`, a press longer than 40 τc counts as full and its latency —
    /// then certainly shorter than the press — is not computed.
    fn charge_drop(&self, vs: f32, press: f32, quick: bool) -> (f32, f32, f32) {
        let r_th = if self.r_ser == 0.0 { 0.0 } else { self.r_ser * self.r_eff / (self.r_ser + self.r_eff) };
        let tau = self.c * (self.rs + r_th);
        if quick && (tau == 0.0 || press > 40.0 * tau) {
            return (0.0, self.v_inf, tau);
        }
        let latency = if r_th == 0.0 {
            0.0
        } else {
            let vc1 = self.v_inf - (self.v_inf - self.rise) * (self.rs + r_th) / r_th;
            if vc1 <= vs {
                0.0
            } else {
                tau * ln((self.v_inf - vs) / (self.v_inf - vc1))
            }
        };
        let vc0 = if tau == 0.0 { self.v_inf } else { self.v_inf - (self.v_inf - vs) * exp(-press / tau) };
        (latency, vc0, tau)
    }

    /// Discharge from capacitor voltage `vc0`: (hold, τd) in s.
    fn discharge(&self, vc0: f32) -> Result<(f32, f32), Error> {
        let tau_d = (self.r_eff + self.rs) * self.c;
        let lk = self.r_eff * self.i_lk;
        let start = vc0 + lk;
        let end = (self.fall + lk) * (self.r_eff + self.rs) / self.r_eff;
        if start <= end {
            return Err(Error::NoHold);
        }
        Ok((tau_d * ln(start / end), tau_d))
    }

    /// The capacitance that explains a measured hold. See [`crate::Model::inverse_c`].
    ///
    /// # Errors
    /// As [`crate::Model::inverse_c`].
    pub fn inverse_c(&self, measured: Span) -> Result<InverseC, Error> {
        let ns = measured.ns();
        if !(limits::HOLD_NS_MIN..=limits::DAY_NS).contains(&ns) {
            return Err(Error::OutOfDomain(Quantity::Hold));
        }
        let target = (measured.ns_q32() as f64 / 4_294_967_296.0 * 1e-9) as f32;
        let seconds = |m: &Model| -> Result<f32, Error> {
            Ok((m.evaluate()?.hold.ns_q32() as f64 / 4_294_967_296.0 * 1e-9) as f32)
        };
        let mut m = *self;
        for _ in 0..24 {
            let h = seconds(&m)?;
            // Elasticity of the hold in C, from a 0.1 % step (see crate::Model::inverse_c).
            let c = m.c;
            m.c = c * 1.001;
            let e = (seconds(&m)? / h - 1.0) / 0.001;
            m.c = c;
            if e.is_nan() || e < 0.125 {
                return Err(Error::IllConditioned);
            }
            let next = c * (1.0 + (target / h - 1.0) / e);
            let done = ((next - c) / c).abs() < 1e-7;
            m.c = next;
            if done {
                break;
            }
        }
        let c_ff = m.c * 1e15;
        if c_ff.is_nan() || c_ff < limits::C_FF.0 as f32 || c_ff > limits::C_FF.1 as f32 {
            return Err(Error::OutOfDomain(Quantity::C));
        }
        Ok(InverseC { c_ff_q32: (f64::from(c_ff) * 4_294_967_296.0) as u128, nominal_ff: self.stage.c_ff })
    }
}
