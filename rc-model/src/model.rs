//! The forward and inverse hold model in fixed point.
//!
//! # Equations
//!
//! Symbols as in the circuit note: `R_eff = R ∥ R_leak`, `R_ser` the charge
//! path (driver `Ro` + charge resistor `Rch`, plus the junction's own series
//! resistance), `Rs` the resistance in series with `C`, `I_in` the constant
//! input leakage, `I_lk = I_in + Is` the constant current leaving the node
//! during the hold (a junction diode leaks `Is` in reverse).
//!
//! * Charge target (fixed drop): `V∞ = (Vdd − Vf − I_in·R_ser)·R_eff/(R_eff + R_ser)`.
//!   Junction: the self-consistent solution of
//!   `I·(R_eff + R_ser) + n·V_T·ln(1 + I/Is) = Vdd + I_in·R_eff`, `V∞ = (I − I_in)·R_eff`.
//! * Charge (fixed drop), capacitor voltage from `Vs`:
//!   `V_C(t) = V∞ + (Vs − V∞)·e^(−t/τc)`, `τc = C·(Rs + R_ser ∥ R_eff)`; the node
//!   sits above `V_C` by the Rs drop: `V_A = V∞ − (V∞ − V_C)·R_th/(Rs + R_th)`.
//! * Charge (junction): parametrised by the diode current `I`,
//!   `V_A(I) = Vdd − I·R_ser − n·V_T·ln(1 + I/Is)`, `i_C = I − I_in − V_A/R_eff`,
//!   `V_C = V_A − Rs·i_C`, and
//!   `t = C·∫ N(I)/i_C(I) dI` with `N = (R_ser + n·V_T/(I + Is))·(1 + Rs/R_eff) + Rs`,
//!   integrated in `u = ln(I − I∞)` by composite 8-point Gauss–Legendre
//!   (panels ≤ 2 wide), where the integrand is smooth and bounded.
//! * Hold: with `w = V + R_eff·I_lk` decaying with `τd = (R_eff + Rs)·C`,
//!   `t_hold = τd·ln((V_C0 + R_eff·I_lk)·R_eff / ((V_T− + R_eff·I_lk)·(R_eff + Rs)))`.
//!
//! Formats: see [`crate::fixed`].

use crate::error::{Error, Quantity};
use crate::fixed::{exp_neg_q62, ln_ratio_q62, mul_div, mul_div_signed, GAUSS8_Q62, ONE_Q62};
use crate::stage::{limits, Diode, Stage};
use crate::units::{Span, Voltage};

/// µV·2^32 per (fA·2^32 · mΩ·2^32): V = I·R / (1e12 · 2^32).
const IR_SCALE: u128 = 1_000_000_000_000 << 32;
/// Time: τ[ns·2^32] = R[mΩ·2^32] · C[fF·2^32] / (1e9·2^32).
const RC_SCALE: u128 = 1_000_000_000 << 32;
/// Smallest current distance from steady state the charge integral resolves:
/// 2^24 LSB = 2^-8 fA. Closer than that the capacitor counts as fully charged.
const D_FULL: u128 = 1 << 24;
/// Panel width of the composite quadrature: 2 (in ln units, Q62).
const PANEL_Q62: u128 = 2 << 62;

fn arith<T>(v: Option<T>) -> Result<T, Error> {
    v.ok_or(Error::Arithmetic)
}

/// Voltage across `r` carrying `i`: µV·2^32 from fA·2^32 and mΩ·2^32.
fn ir(i: i128, r: u128) -> Result<i128, Error> {
    arith(mul_div_signed(i, arith(i128::try_from(r).ok())?, IR_SCALE as i128))
}

/// Current through `r` with `v` across it: fA·2^32.
fn v_over_r(v: i128, r: u128) -> Result<i128, Error> {
    arith(mul_div_signed(v, IR_SCALE as i128, arith(i128::try_from(r).ok())?))
}

/// `a ∥ b` for resistances (0 if either is 0).
fn parallel(a: u128, b: u128) -> Result<u128, Error> {
    if a == 0 || b == 0 {
        return Ok(0);
    }
    arith(mul_div(a, b, a + b))
}

/// `t · ln` with `ln` in Q62 (non-negative).
fn scale_time(t: u128, ln_q62: i128) -> Result<u128, Error> {
    arith(mul_div(t, ln_q62.unsigned_abs(), ONE_Q62 as u128))
}

fn pos(v: i128) -> Result<u128, Error> {
    u128::try_from(v).map_err(|_| Error::Arithmetic)
}

#[derive(Debug, Clone, Copy)]
enum DiodeQ {
    /// Fixed drop, µV·2^32.
    Drop(i128),
    /// Saturation current (fA·2^32) and n·V_T (µV·2^32).
    Junction { is: i128, nvt: i128 },
}

/// A stage prepared for evaluation: derived resistances, the diode in model
/// units and the steady state of a full press, computed once.
///
/// Build with [`Model::new`]; evaluate with [`Model::evaluate`] (from an empty
/// capacitor) or [`Model::evaluate_from`] (retrigger from a given voltage);
/// invert with [`Model::inverse_c`] and [`Model::inverse_r`].
#[derive(Debug, Clone, Copy)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Model {
    stage: Stage,
    #[cfg_attr(feature = "defmt", defmt(Debug2Format))]
    q: Derived,
}

#[derive(Debug, Clone, Copy)]
struct Derived {
    vdd: i128,
    r_eff: u128,
    rs: u128,
    r_ser: u128,
    c: u128,
    i_in: i128,
    i_lk: i128,
    diode: DiodeQ,
    rise: i128,
    fall: i128,
    /// Steady-state diode current (fA·2^32) and node voltage (µV·2^32).
    i_inf: i128,
    v_inf: i128,
}

/// Everything the forward model computes for one press and release.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Evaluation {
    /// Node voltage a press of unlimited length settles at (V∞).
    pub charge_target: Voltage,
    /// Charge time constant. Fixed drop: `C·(Rs + R_ser ∥ R_eff)`; junction:
    /// the same with the diode's small-signal resistance at the steady state
    /// added to `R_ser` (the slow final approach).
    pub charge_tau: Span,
    /// Time from the start of the press until the node crosses the rising
    /// threshold (zero when it starts above it).
    pub on_latency: Span,
    /// Capacitor voltage at the release instant.
    pub cap_at_release: Voltage,
    /// Node voltage just after release (after the step across `Rs`).
    pub node_at_release: Voltage,
    /// Discharge time constant `(R_eff + Rs)·C`.
    pub discharge_tau: Span,
    /// Hold: time from release until the node falls through V_T−.
    pub hold: Span,
    /// Total active time: press − turn-on latency + hold.
    pub active: Span,
}

/// Result of inverting a measured hold for the capacitance.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct InverseC {
    /// Effective capacitance in fF × 2^32.
    pub c_ff_q32: u128,
    /// Nominal capacitance of the stage in fF.
    pub nominal_ff: u64,
}

impl InverseC {
    /// Effective capacitance in whole fF, rounded.
    #[must_use]
    pub fn c_ff(&self) -> u64 {
        u64::try_from((self.c_ff_q32 + (1 << 31)) >> 32).unwrap_or(u64::MAX)
    }

    /// `C_eff / C_nominal − 1` in ppm, rounded toward zero.
    #[must_use]
    pub fn deviation_ppm(&self) -> i64 {
        let nom = u128::from(self.nominal_ff) << 32;
        let (diff, neg) = if self.c_ff_q32 >= nom { (self.c_ff_q32 - nom, false) } else { (nom - self.c_ff_q32, true) };
        let ppm = mul_div(diff, 1_000_000, nom).map_or(i64::MAX, |v| i64::try_from(v).unwrap_or(i64::MAX));
        if neg {
            -ppm
        } else {
            ppm
        }
    }
}

/// Result of inverting a measured hold for the discharge resistor.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct InverseR {
    /// Discharge resistor value that reproduces the hold, in mΩ (to 1 mΩ).
    pub r_mohm: u64,
    /// Nominal resistor of the stage in mΩ.
    pub nominal_mohm: u64,
}

/// Thermal voltage kT/q in µV·2^32 at `temp_mdeg_c`: k/q = 1.380649e-23 /
/// 1.602176634e-19 V/K (both SI-exact since 2019), so
/// `V_T[µV] = T[mK] · 1 380 649 000 / 16 021 766 340`.
fn thermal_voltage(temp_mdeg_c: i32) -> Result<i128, Error> {
    let t_mk = i128::from(temp_mdeg_c) + 273_150;
    let t_mk = pos(t_mk)?;
    let v = arith(mul_div(t_mk << 32, 1_380_649_000, 16_021_766_340))?;
    arith(i128::try_from(v).ok())
}

impl Model {
    /// Checks the stage and prepares it: derived resistances and the
    /// steady-state operating point of a full press.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] for an input outside the supported domain,
    /// [`Error::NeverActivates`] when the charge target does not exceed the
    /// rising threshold, [`Error::NoConvergence`] / [`Error::Arithmetic`]
    /// (not reached inside the domain).
    pub fn new(stage: &Stage) -> Result<Model, Error> {
        stage.check()?;
        let r = u128::from(stage.r_mohm) << 32;
        let r_eff = match stage.leak_mohm {
            None => r,
            Some(l) => {
                // R − R²/(R + Rl): exact to 1 LSB, R² < 2^138 is formed by mul_div.
                let rl = u128::from(l) << 32;
                r - arith(mul_div(r, r, r + rl))?
            }
        };
        let (diode, rs_d) = match stage.diode {
            Diode::Drop { drop_uv } => (DiodeQ::Drop(i128::from(drop_uv) << 32), 0u128),
            Diode::Junction { is_fa, n_milli, rs_mohm } => {
                let vt = thermal_voltage(stage.temp_mdeg_c)?;
                let nvt = vt * i128::from(n_milli) / 1000;
                (DiodeQ::Junction { is: i128::from(is_fa) << 32, nvt }, u128::from(rs_mohm) << 32)
            }
        };
        let mut q = Derived {
            vdd: i128::from(stage.vdd_uv) << 32,
            r_eff,
            rs: u128::from(stage.series_mohm) << 32,
            r_ser: ((u128::from(stage.driver_mohm) + u128::from(stage.charge_mohm)) << 32) + rs_d,
            c: u128::from(stage.c_ff) << 32,
            i_in: i128::from(stage.leak_fa) << 32,
            i_lk: i128::from(stage.hold_leak_fa()) << 32,
            diode,
            rise: i128::from(stage.rise_uv) << 32,
            fall: i128::from(stage.fall_uv) << 32,
            i_inf: 0,
            v_inf: 0,
        };
        let (i_inf, v_inf) = q.steady_state()?;
        q.i_inf = i_inf;
        q.v_inf = v_inf;
        if v_inf <= q.rise {
            return Err(Error::NeverActivates { target_uv: Voltage::from_uv_q32(v_inf).uv(), rise_uv: stage.rise_uv });
        }
        Ok(Model { stage: *stage, q })
    }

    /// The stage this model was built from.
    #[must_use]
    pub const fn stage(&self) -> &Stage {
        &self.stage
    }

    /// The node voltage a press of unlimited length settles at (V∞).
    #[must_use]
    pub const fn charge_target(&self) -> Voltage {
        Voltage::from_uv_q32(self.q.v_inf)
    }

    /// Press and release from an empty capacitor.
    ///
    /// # Errors
    /// [`Error::PressTooShort`], [`Error::NoHold`], [`Error::HoldOutOfDomain`];
    /// [`Error::NoConvergence`] / [`Error::Arithmetic`] are not reached inside the domain.
    pub fn evaluate(&self) -> Result<Evaluation, Error> {
        self.evaluate_from(Voltage::default())
    }

    /// Press and release starting from capacitor voltage `start` (a retrigger
    /// during a hold starts from the voltage the capacitor has fallen to).
    ///
    /// # Errors
    /// As [`Model::evaluate`]; [`Error::OutOfDomain`] with
    /// [`Quantity::StartVoltage`] if `start` is negative or not below V∞.
    pub fn evaluate_from(&self, start: Voltage) -> Result<Evaluation, Error> {
        let vs = start.uv_q32();
        if vs < 0 || vs >= self.q.v_inf {
            return Err(Error::OutOfDomain(Quantity::StartVoltage));
        }
        let press = u128::from(self.stage.press_ns) << 32;
        let (latency, v_c0, charge_tau) = match self.q.diode {
            DiodeQ::Drop(_) => self.q.charge_drop(vs, press)?,
            DiodeQ::Junction { .. } => self.q.charge_junction(vs, press)?,
        };
        if latency > press {
            let latency_ns = Span::from_ns_q32(latency).map_or(u64::MAX, Span::ns);
            return Err(Error::PressTooShort { latency_ns });
        }
        let (hold, v_a0, tau_d) = self.q.discharge(v_c0)?;
        let hold_span = arith(Span::from_ns_q32(hold))?;
        let hold_ns = hold_span.ns();
        if !(limits::HOLD_NS_MIN..=limits::DAY_NS).contains(&hold_ns) {
            return Err(Error::HoldOutOfDomain { hold_ns });
        }
        Ok(Evaluation {
            charge_target: Voltage::from_uv_q32(self.q.v_inf),
            charge_tau: arith(Span::from_ns_q32(charge_tau))?,
            on_latency: arith(Span::from_ns_q32(latency))?,
            cap_at_release: Voltage::from_uv_q32(v_c0),
            node_at_release: Voltage::from_uv_q32(v_a0),
            discharge_tau: arith(Span::from_ns_q32(tau_d))?,
            hold: hold_span,
            active: arith(Span::from_ns_q32(press - latency + hold))?,
        })
    }

    /// The discharge in the terms of [`crate::Prepared`], after a press of the
    /// stage's length from empty: the start `V_C0 + R_eff·I_lk` and the end
    /// `(V_T− + R_eff·I_lk)·(R_eff + Rs)/R_eff`, both µV·2^32, and τd in
    /// ns·2^32, so that the hold is `τd·ln(start/end)`.
    ///
    /// # Errors
    /// As [`Model::evaluate`].
    pub(crate) fn discharge_terms(&self) -> Result<(u128, u128, u128), Error> {
        let e = self.evaluate()?;
        let q = &self.q;
        let lk = ir(q.i_lk, q.r_eff)?;
        let start = pos(e.cap_at_release.uv_q32() + lk)?;
        let end = arith(mul_div(pos(q.fall + lk)?, q.r_eff + q.rs, q.r_eff))?;
        Ok((start, end, e.discharge_tau.ns_q32()))
    }

    /// Capacitor voltage `elapsed` after a release that left it at
    /// `cap_at_release` (driver low, the node discharging through R, the
    /// leakage and Rs): `V_C(t) = (V_C0 + R_eff·I_lk)·e^(−t/τd) − R_eff·I_lk`.
    /// A retrigger at that instant is [`Model::evaluate_from`] this voltage.
    ///
    /// The result can fall below zero when a constant leakage current
    /// outlasts the charge; a real node is clamped there by the input's
    /// protection diode, which the model does not include.
    ///
    /// # Errors
    /// [`Error::Arithmetic`] (not reached inside the domain).
    pub fn cap_after(&self, cap_at_release: Voltage, elapsed: Span) -> Result<Voltage, Error> {
        let q = &self.q;
        let lk = ir(q.i_lk, q.r_eff)?;
        let tau_d = arith(mul_div(q.r_eff + q.rs, q.c, RC_SCALE))?;
        let x = arith(mul_div(elapsed.ns_q32(), ONE_Q62 as u128, tau_d))?;
        let decayed = arith(mul_div_signed(cap_at_release.uv_q32() + lk, pos_i(exp_neg_q62(x))?, ONE_Q62))?;
        Ok(Voltage::from_uv_q32(decayed - lk))
    }

    /// The capacitance that explains a measured hold, all else as in the stage.
    ///
    /// Newton's method on `ln hold` against `ln C`, with the slope (the hold's
    /// elasticity in C) taken from a step of C·2^-20. For a full press the
    /// hold is proportional to C, the elasticity is 1 and the first step is
    /// exact; for a partial press the release voltage falls as C rises and the
    /// iteration takes a few more steps (at most 40).
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Hold`] for a measured hold
    /// outside 1 µs – 24 h, [`Quantity::C`] when the answer leaves 100 pF – 10 mF;
    /// [`Error::IllConditioned`] when the hold rises less than 1/8 as fast as
    /// C (a press far too short to charge the capacitor), where a measured
    /// hold cannot tell capacitances apart; otherwise as [`Model::evaluate`].
    pub fn inverse_c(&self, measured: Span) -> Result<InverseC, Error> {
        check_measured(measured)?;
        let target = measured.ns_q32();
        let (c_lo, c_hi) = (u128::from(limits::C_FF.0) << 32, u128::from(limits::C_FF.1) << 32);
        let mut model = *self;
        let mut c = self.q.c;
        for _ in 0..40 {
            model.q.c = c;
            let hold = model.evaluate()?.hold.ns_q32();
            if hold == target {
                break;
            }
            let dc = (c >> 20).max(1);
            model.q.c = c + dc;
            let hold_up = model.evaluate()?.hold.ns_q32();
            if hold_up <= hold {
                return Err(Error::IllConditioned);
            }
            // Elasticity e = (Δhold/hold)·(C/ΔC) in Q62.
            let e = arith(mul_div(arith(mul_div(hold_up - hold, ONE_Q62 as u128, hold))?, c, dc))?;
            if e < (ONE_Q62 as u128) / 8 {
                return Err(Error::IllConditioned);
            }
            let rel = arith(mul_div(target.abs_diff(hold), ONE_Q62 as u128, hold))?;
            let step = arith(mul_div(c, rel, e))?;
            let next = if target > hold { c.saturating_add(step) } else { c.saturating_sub(step) };
            if next < c_lo || next > c_hi {
                return Err(Error::OutOfDomain(Quantity::C));
            }
            let settled = next.abs_diff(c) <= (c >> 50).max(1);
            c = next;
            if settled {
                break;
            }
        }
        Ok(InverseC { c_ff_q32: c, nominal_ff: self.stage.c_ff })
    }

    /// The discharge resistor that explains a measured hold, all else as in
    /// the stage, found by bisection on whole mΩ over 1 kΩ – 100 MΩ (the hold
    /// rises with R throughout the domain).
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Hold`] for a measured hold
    /// outside 1 µs – 24 h, [`Quantity::R`] when no R in the domain explains it.
    pub fn inverse_r(&self, measured: Span) -> Result<InverseR, Error> {
        check_measured(measured)?;
        let hold_at = |r_mohm: u64| -> Result<Option<Span>, Error> {
            let mut s = self.stage;
            s.r_mohm = r_mohm;
            match Model::new(&s).and_then(|m| m.evaluate()) {
                Ok(e) => Ok(Some(e.hold)),
                Err(Error::NeverActivates { .. } | Error::NoHold | Error::HoldOutOfDomain { .. }) => Ok(None),
                Err(e) => Err(e),
            }
        };
        let (mut lo, mut hi) = limits::R_MOHM;
        // Invariant: hold(lo) < measured ≤ hold(hi); unusable R counts as too short
        // at the low end and too long at the high end.
        match hold_at(hi)? {
            Some(h) if h >= measured => {}
            _ => return Err(Error::OutOfDomain(Quantity::R)),
        }
        if let Some(h) = hold_at(lo)? {
            if h >= measured {
                return if h == measured {
                    Ok(InverseR { r_mohm: lo, nominal_mohm: self.stage.r_mohm })
                } else {
                    Err(Error::OutOfDomain(Quantity::R))
                };
            }
        }
        while hi - lo > 1 {
            let mid = lo + (hi - lo) / 2;
            match hold_at(mid)? {
                Some(h) if h >= measured => hi = mid,
                Some(_) => lo = mid,
                None => lo = mid,
            }
        }
        Ok(InverseR { r_mohm: hi, nominal_mohm: self.stage.r_mohm })
    }
}

fn check_measured(measured: Span) -> Result<(), Error> {
    let ns = measured.ns();
    if (limits::HOLD_NS_MIN..=limits::DAY_NS).contains(&ns) {
        Ok(())
    } else {
        Err(Error::OutOfDomain(Quantity::Hold))
    }
}

impl Derived {
    /// Steady state of a full press: diode current and node voltage.
    fn steady_state(&self) -> Result<(i128, i128), Error> {
        match self.diode {
            DiodeQ::Drop(vf) => {
                let num = self.vdd - vf - ir(self.i_in, self.r_ser)?;
                if num <= 0 {
                    return Ok((0, 0));
                }
                let v = arith(mul_div_signed(num, pos_i(self.r_eff)?, pos_i(self.r_eff + self.r_ser)?))?;
                let i = v_over_r(v, self.r_eff)? + self.i_in;
                Ok((i, v))
            }
            DiodeQ::Junction { .. } => {
                let e = self.vdd + ir(self.i_in, self.r_eff)?;
                let i = self.diode_solve(self.r_eff + self.r_ser, e)?;
                let v = ir(i - self.i_in, self.r_eff)?;
                Ok((i, v))
            }
        }
    }

    /// Solves `I·r_tot + n·V_T·ln(1 + I/Is) = e` for `I ≥ 0` (junction only):
    /// Newton's method kept inside a shrinking bracket, bisecting whenever a
    /// step would leave it. The left side rises monotonically in `I`.
    fn diode_solve(&self, r_tot: u128, e: i128) -> Result<i128, Error> {
        let DiodeQ::Junction { is, nvt } = self.diode else {
            return Err(Error::Arithmetic);
        };
        if e <= 0 {
            return Ok(0);
        }
        let f = |i: i128| -> Result<i128, Error> {
            let ln = arith(ln_ratio_q62(pos(i + is)?, pos(is)?))?;
            Ok(ir(i, r_tot)? + arith(mul_div_signed(nvt, ln, ONE_Q62))? - e)
        };
        let mut lo: i128 = 0;
        let mut hi: i128 = v_over_r(e, r_tot)? + 1;
        let mut x = hi;
        // Bisection alone halves a < 2^100 bracket in 100 steps; Newton needs far fewer.
        for _ in 0..160 {
            let fx = f(x)?;
            if fx == 0 {
                return Ok(x);
            }
            if fx > 0 {
                hi = x;
            } else {
                lo = x;
            }
            if hi - lo <= 1 {
                return Ok(lo);
            }
            // f'(x) in mΩ·2^32: r_tot + n·V_T/(x + Is)
            let slope = r_tot + pos(v_over_r(nvt, pos(x + is)?)?)?;
            let step = v_over_r(fx, slope)?;
            let next = x - step;
            x = if next <= lo || next >= hi { lo + (hi - lo) / 2 } else { next };
        }
        Err(Error::NoConvergence)
    }

    /// Node voltage with diode current `i` flowing (junction): `V_A(I)`.
    fn node_at_current(&self, i: i128) -> Result<i128, Error> {
        let DiodeQ::Junction { is, nvt } = self.diode else {
            return Err(Error::Arithmetic);
        };
        let ln = arith(ln_ratio_q62(pos(i + is)?, pos(is)?))?;
        Ok(self.vdd - ir(i, self.r_ser)? - arith(mul_div_signed(nvt, ln, ONE_Q62))?)
    }

    /// Integrand of the junction charge time in `u = ln(I − I∞)`:
    /// `N(I)·(I − I∞)/i_C(I)` in mΩ·2^32, for distance `d = I − I∞ > 0`.
    fn charge_integrand(&self, d: u128) -> Result<u128, Error> {
        let DiodeQ::Junction { is, nvt } = self.diode else {
            return Err(Error::Arithmetic);
        };
        let i = self.i_inf + pos_i(d)?;
        let v_a = self.node_at_current(i)?;
        let i_c = i - self.i_in - v_over_r(v_a, self.r_eff)?;
        if i_c <= 0 {
            // Only within a few LSB of the steady state; the caller never goes there.
            return Err(Error::Arithmetic);
        }
        let rd = pos(v_over_r(nvt, pos(i + is)?)?)?;
        let n = arith(mul_div(self.r_ser + rd, self.r_eff + self.rs, self.r_eff))? + self.rs;
        arith(mul_div(n, d, i_c.unsigned_abs()))
    }

    /// Charge time (ns·2^32) while the current distance from steady state
    /// falls from `d_a·e^(−s0)` to `d_a·e^(−s1)`, `0 ≤ s0 ≤ s1` in Q62.
    fn charge_integral(&self, d_a: u128, s0: u128, s1: u128) -> Result<u128, Error> {
        if s1 <= s0 {
            return Ok(0);
        }
        let w = s1 - s0;
        let panels = w.div_ceil(PANEL_Q62);
        let width = w / panels + 1;
        let mut sum: u128 = 0;
        let mut p: u128 = 0;
        while p < panels {
            let start = s0 + p * width;
            let this = width.min(s1.saturating_sub(start));
            for &(node, weight) in &GAUSS8_Q62 {
                let s = start + arith(mul_div(this, node.unsigned_abs(), ONE_Q62 as u128))?;
                let d = arith(mul_div(d_a, exp_neg_q62(s), ONE_Q62 as u128))?;
                if d == 0 {
                    return Err(Error::Arithmetic);
                }
                let h = self.charge_integrand(d)?;
                let wgt = arith(mul_div(this, weight.unsigned_abs(), ONE_Q62 as u128))?;
                sum += arith(mul_div(h, wgt, ONE_Q62 as u128))?;
            }
            p += 1;
        }
        arith(mul_div(sum, self.c, RC_SCALE))
    }

    /// Fixed-drop charge phase: (latency, capacitor voltage at release, τc).
    fn charge_drop(&self, vs: i128, press: u128) -> Result<(u128, i128, u128), Error> {
        let r_th = parallel(self.r_ser, self.r_eff)?;
        let tau_c = arith(mul_div(self.rs + r_th, self.c, RC_SCALE))?;
        let v_inf = self.v_inf;
        // Latency: the node reaches V_T+ when V_C = V∞ − (V∞ − V_T+)(Rs + R_th)/R_th.
        let latency = if r_th == 0 || tau_c == 0 {
            0
        } else {
            let ln = arith(ln_ratio_q62(pos(v_inf - vs)?, pos(v_inf - self.rise)?))?
                - if self.rs == 0 { 0 } else { arith(ln_ratio_q62(self.rs + r_th, r_th))? };
            if ln <= 0 {
                0
            } else {
                scale_time(tau_c, ln)?
            }
        };
        let v_c0 = if tau_c == 0 {
            v_inf
        } else {
            let x = arith(mul_div(press, ONE_Q62 as u128, tau_c))?;
            let decay = exp_neg_q62(x);
            v_inf - arith(mul_div_signed(v_inf - vs, pos_i(decay)?, ONE_Q62))?
        };
        Ok((latency, v_c0, tau_c))
    }

    /// Junction charge phase: (latency, capacitor voltage at release, τc).
    fn charge_junction(&self, vs: i128, press: u128) -> Result<(u128, i128, u128), Error> {
        let DiodeQ::Junction { is, nvt } = self.diode else {
            return Err(Error::Arithmetic);
        };
        // Small-signal τc at the steady state (reported, and a scale for the solver).
        let rd = pos(v_over_r(nvt, pos(self.i_inf + is)?)?)?;
        let tau_c = arith(mul_div(self.rs + parallel(self.r_ser + rd, self.r_eff)?, self.c, RC_SCALE))?;
        // Start current: V_C(I0) = Vs.
        let rs_par = parallel(self.rs, self.r_eff)?;
        let e0 = self.vdd
            - arith(mul_div_signed(vs - ir(self.i_in, self.rs)?, pos_i(self.r_eff)?, pos_i(self.r_eff + self.rs)?))?;
        let i0 = self.diode_solve(self.r_ser + rs_par, e0)?;
        let d0 = pos(i0 - self.i_inf)?;
        if d0 <= D_FULL {
            return Ok((0, self.v_inf, tau_c));
        }
        // Latency: current at which V_A = V_T+.
        let i1 = self.diode_solve(self.r_ser, self.vdd - self.rise)?;
        let latency = if i1 >= i0 {
            0
        } else {
            let d1 = pos(i1 - self.i_inf)?.max(1);
            let s1 = arith(ln_ratio_q62(d0, d1))?;
            self.charge_integral(d0, 0, pos(s1)?)?
        };
        // Release: march forward panel by panel (only positive pieces are
        // summed, so no cancellation), then a bracketed Newton search inside
        // the panel where the press ends. Past s_full the capacitor is full.
        let s_full = pos(arith(ln_ratio_q62(d0, D_FULL))?)?;
        let (mut s0, mut t0) = (0u128, 0u128);
        let s = loop {
            if s0 >= s_full {
                return Ok((latency, self.v_inf, tau_c));
            }
            let s1 = (s0 + PANEL_Q62).min(s_full);
            let t1 = t0 + self.charge_integral(d0, s0, s1)?;
            if t1 < press {
                s0 = s1;
                t0 = t1;
                continue;
            }
            break self.settle_in_panel(d0, (s0, t0), (s1, t1), press)?;
        };
        let d = arith(mul_div(d0, exp_neg_q62(s), ONE_Q62 as u128))?;
        let i = self.i_inf + pos_i(d)?;
        let v_a = self.node_at_current(i)?;
        let i_c = i - self.i_in - v_over_r(v_a, self.r_eff)?;
        let v_c = v_a - ir(i_c, self.rs)?;
        Ok((latency, v_c, tau_c))
    }

    /// Finds `s` in `[s0, s1]` with `T(s) = press`, where `T(s) = t0 +
    /// ∫_{s0}^{s} …` and `t0 ≤ press ≤ t1`: Newton's method kept inside the
    /// bracket, each `T` integrated afresh from `s0`.
    fn settle_in_panel(
        &self,
        d0: u128,
        (s0, t0): (u128, u128),
        (s1, t1): (u128, u128),
        press: u128,
    ) -> Result<u128, Error> {
        let (mut lo, mut hi) = (s0, s1);
        let span_t = (t1 - t0).max(1);
        let mut x = s0 + arith(mul_div(s1 - s0, press - t0, span_t))?;
        // The integrated time carries ~1e-12 relative truncation noise, so a
        // match to 2^-36 relative is as good as the arithmetic allows. 96 steps
        // always suffice: a bisection alone narrows a 2^63-wide panel to 2^20
        // in 43 steps.
        let good_enough = (press >> 36).max(1);
        for _ in 0..96 {
            let tx = t0 + self.charge_integral(d0, s0, x)?;
            if tx.abs_diff(press) <= good_enough {
                return Ok(x);
            }
            if tx < press {
                lo = x;
            } else {
                hi = x;
            }
            let d = arith(mul_div(d0, exp_neg_q62(x), ONE_Q62 as u128))?;
            // dT/ds in ns·2^32 per unit of s.
            let rate = arith(mul_div(self.charge_integrand(d)?, self.c, RC_SCALE))?.max(1);
            let ds = arith(mul_div(press.abs_diff(tx), ONE_Q62 as u128, rate))?;
            let next = if tx < press { x.saturating_add(ds) } else { x.saturating_sub(ds) };
            let next = if next > lo && next < hi { next } else { lo + (hi - lo) / 2 };
            if next.abs_diff(x) < (1 << 20) || hi - lo < (1 << 20) {
                // |Δs| < 2^-42: the current is settled to 2.3e-13 relative.
                return Ok(next);
            }
            x = next;
        }
        Err(Error::NoConvergence)
    }

    /// ln of the discharge ratio for a capacitor voltage `v_c0` at release (Q62).
    fn hold_ln(&self, v_c0: i128) -> Result<i128, Error> {
        let lk = ir(self.i_lk, self.r_eff)?;
        let (start, end) = (v_c0 + lk, self.fall + lk);
        // Also catches a capacitor that a very short press left at (a rounding
        // error around) zero volts.
        if start <= end {
            return Err(Error::NoHold);
        }
        let ln = arith(ln_ratio_q62(pos(start)?, pos(end)?))?
            - if self.rs == 0 { 0 } else { arith(ln_ratio_q62(self.r_eff + self.rs, self.r_eff))? };
        if ln <= 0 {
            return Err(Error::NoHold);
        }
        Ok(ln)
    }

    /// Discharge: (hold, node voltage just after release, τd).
    fn discharge(&self, v_c0: i128) -> Result<(u128, i128, u128), Error> {
        let tau_d = arith(mul_div(self.r_eff + self.rs, self.c, RC_SCALE))?;
        let ln = self.hold_ln(v_c0)?;
        let hold = scale_time(tau_d, ln)?;
        let v_a0 =
            arith(mul_div_signed(v_c0 - ir(self.i_lk, self.rs)?, pos_i(self.r_eff)?, pos_i(self.r_eff + self.rs)?))?;
        Ok((hold, v_a0, tau_d))
    }
}

fn pos_i(v: u128) -> Result<i128, Error> {
    i128::try_from(v).map_err(|_| Error::Arithmetic)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn junction_stage() -> Stage {
        Stage {
            vdd_uv: 2_048_995,
            r_mohm: 18_786_112_624,
            c_ff: 210_501,
            series_mohm: 0,
            charge_mohm: 0,
            driver_mohm: 1_551,
            leak_mohm: Some(330_244_726_430),
            leak_fa: 0,
            diode: Diode::Junction { is_fa: 66, n_milli: 1_799, rs_mohm: 9_492 },
            rise_uv: 1_000_326,
            fall_uv: 1_000_326,
            press_ns: 78,
            temp_mdeg_c: -1_731,
        }
    }

    /// The charge integrand against the same expression in f64.
    #[test]
    fn charge_integrand_matches_f64() {
        let m = Model::new(&junction_stage()).unwrap_or_else(|e| panic!("{e}"));
        let q = m.q;
        let DiodeQ::Junction { is, nvt } = q.diode else { panic!("junction") };
        let f = |x: i128| x as f64 / 4_294_967_296.0;
        let fu = |x: u128| x as f64 / 4_294_967_296.0;
        let (is_f, nvt_f, r_eff, r_ser, rs) = (f(is), f(nvt), fu(q.r_eff), fu(q.r_ser), fu(q.rs));
        let i_inf = f(q.i_inf);
        for d_fa in [1.0, 1e3, 1e6, 1e9, 1e10, 1e11, 3e11, 1e12, 1e13, 8e13] {
            let d = (d_fa * 4_294_967_296.0) as u128;
            let got = fu(q.charge_integrand(d).unwrap_or(0));
            let i = i_inf + d_fa;
            // µV and fA, mΩ: V = I·R/1e12
            let v_a = f(q.vdd) - i * r_ser / 1e12 - nvt_f * (1.0 + i / is_f).ln();
            let i_c = i - f(q.i_in) - v_a * 1e12 / r_eff;
            let n = (r_ser + nvt_f * 1e12 / (i + is_f)) * (1.0 + rs / r_eff) + rs;
            let want = n * d_fa / i_c;
            // f64 loses i·1e-16 to cancellation in i_c; allow for it.
            assert!(((got - want) / want).abs() < 1e-9 + 1e-14 * i / d_fa, "d={d_fa}: {got} vs {want}");
        }
    }
}
