//! Laser-diode current driver: DAC -> transconductance current source with a
//! first-order bandwidth, compliance limit and enable, plus the current-sense
//! resistor and amplifier.
//!
//! Setpoint = code / (2^bits - 1) * vref * g_m. The output follows the target
//! with the exact discretisation of a first-order lag,
//! i' = target + (i - target) exp(-dt / tau), tau = 1 / (2 pi f_bw); with
//! enable low the target is zero and the (fast) shutdown time constant applies.
//! The source can only put `supply - compliance_v` across the diode: beyond
//! that it is out of regulation and the diode current is set by the diode's
//! own I-V curve at that voltage.
//!
//! Inside a step the output is the exponential from the current at the
//! start of the step toward the target, not a jump at the start:
//! [`Driver::ramp_pieces`] cuts that exponential into pieces of equal
//! current change with their exact mean currents (for the rate equations,
//! so the diode sees the source's own rise and no turn-on spike a real
//! source could not make), and [`Driver::last_rate_per_s`] gives its rate
//! (for the monitor front end, which filters the continuous signal).

use serde::{Deserialize, Serialize};

use super::error::{ensure, PlantError};

/// Driver parameters.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DriverParams {
    /// DAC resolution, bits (1..=16).
    pub dac_bits: u8,
    /// DAC reference (full-scale output), V.
    pub dac_vref_v: f64,
    /// Current-source transconductance, A/V.
    pub transconductance_a_per_v: f64,
    /// Small-signal -3 dB bandwidth of the current loop, Hz.
    pub bandwidth_hz: f64,
    /// Voltage the current source needs across itself (headroom), V; the
    /// diode can be driven up to `supply - compliance_v`.
    pub compliance_v: f64,
    /// Current-sense resistor, ohm.
    pub sense_ohm: f64,
    /// Current-sense amplifier gain, V/V.
    pub sense_gain: f64,
    /// Output current when the source fails high (pass device fully on,
    /// limited by its own short-circuit limit), A.
    pub fail_high_current_a: f64,
    /// Time constant of the output collapse when enable goes low, s.
    pub shutdown_tau_s: f64,
    /// DAC output offset, V (added to every code's output; the current
    /// setpoint never goes below zero). 0 unless measured; a Monte Carlo
    /// part draws it from the module's tolerances.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub dac_offset_v: f64,
    /// Current-sense amplifier output offset, V (added to the sense
    /// voltage). 0 unless measured; drawn per Monte Carlo part.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub sense_offset_v: f64,
}

fn is_zero(v: &f64) -> bool {
    *v == 0.0
}

impl DriverParams {
    /// Checks the parameter ranges.
    pub fn validate(&self) -> Result<(), PlantError> {
        let pos = |v: f64| v > 0.0 && v.is_finite();
        ensure(
            (1..=16).contains(&self.dac_bits),
            "dac_bits",
            "must be 1..=16",
        )?;
        ensure(pos(self.dac_vref_v), "dac_vref_v", "must be > 0")?;
        ensure(
            pos(self.transconductance_a_per_v),
            "transconductance_a_per_v",
            "must be > 0",
        )?;
        ensure(pos(self.bandwidth_hz), "bandwidth_hz", "must be > 0")?;
        ensure(
            self.compliance_v >= 0.0 && self.compliance_v.is_finite(),
            "compliance_v",
            "must be >= 0",
        )?;
        ensure(pos(self.sense_ohm), "sense_ohm", "must be > 0")?;
        ensure(pos(self.sense_gain), "sense_gain", "must be > 0")?;
        ensure(
            self.fail_high_current_a >= 0.0 && self.fail_high_current_a.is_finite(),
            "fail_high_current_a",
            "must be >= 0",
        )?;
        ensure(
            self.dac_offset_v.is_finite(),
            "dac_offset_v",
            "must be finite",
        )?;
        ensure(
            self.sense_offset_v.is_finite(),
            "sense_offset_v",
            "must be finite",
        )?;
        ensure(pos(self.shutdown_tau_s), "shutdown_tau_s", "must be > 0")
    }

    /// Full-scale output current (code 2^bits - 1), A.
    pub fn full_scale_a(&self) -> f64 {
        self.dac_vref_v * self.transconductance_a_per_v
    }
}

/// Driver state and fault hooks.
#[derive(Clone, Debug)]
pub struct Driver {
    params: DriverParams,
    max_code: u16,
    amps_per_code: f64,
    /// The DAC offset as output current, A.
    offset_a: f64,
    tau_s: f64,
    /// 1/tau of the current loop and of the shutdown, 1/s (computed once).
    on_rate_per_s: f64,
    off_rate_per_s: f64,
    on_dt: f64,
    on_decay: f64,
    off_dt: f64,
    off_decay: f64,
    i_lag: f64,
    i_out: f64,
    saturated: bool,
    /// The last step: output at its start, its target and the rate of the
    /// exponential between them, 1/s (0: the output was set, not lagged).
    last_from_a: f64,
    last_target_a: f64,
    last_rate_per_s: f64,
    /// Fault hook: the source fails high and drives `fail_high_current_a`;
    /// only the enable line stops it.
    pub fail_high: bool,
    /// Fault hook: the DAC output is stuck at this code.
    pub dac_stuck: Option<u16>,
    /// Fault hook: multiplier on the current-sense gain (1.0 healthy).
    pub sense_gain_error: f64,
}

impl Driver {
    /// Builds the driver (output off) after validating the parameters.
    pub fn new(params: DriverParams) -> Result<Self, PlantError> {
        params.validate()?;
        let max_code = ((1u32 << params.dac_bits) - 1) as u16;
        let amps_per_code = params.full_scale_a() / max_code as f64;
        let offset_a = params.dac_offset_v * params.transconductance_a_per_v;
        let tau_s = 1.0 / (core::f64::consts::TAU * params.bandwidth_hz);
        let off_rate_per_s = 1.0 / params.shutdown_tau_s;
        Ok(Self {
            params,
            max_code,
            amps_per_code,
            offset_a,
            tau_s,
            on_rate_per_s: 1.0 / tau_s,
            off_rate_per_s,
            on_dt: f64::NAN,
            on_decay: 0.0,
            off_dt: f64::NAN,
            off_decay: 0.0,
            i_lag: 0.0,
            i_out: 0.0,
            saturated: false,
            last_from_a: 0.0,
            last_target_a: 0.0,
            last_rate_per_s: 0.0,
            fail_high: false,
            dac_stuck: None,
            sense_gain_error: 1.0,
        })
    }

    /// Parameters in use.
    pub fn params(&self) -> &DriverParams {
        &self.params
    }

    /// Largest DAC code, 2^bits - 1.
    pub fn max_code(&self) -> u16 {
        self.max_code
    }

    /// Current setpoint of a DAC code (clamped to full scale), A.
    #[inline]
    pub fn setpoint_a(&self, dac_code: u16) -> f64 {
        let i = dac_code.min(self.max_code) as f64 * self.amps_per_code;
        if self.offset_a == 0.0 {
            i
        } else {
            (i + self.offset_a).max(0.0)
        }
    }

    /// Output current after the last step, A.
    #[inline]
    pub fn current_a(&self) -> f64 {
        self.i_out
    }

    /// Rate of the exponential the output followed in the last step, 1/s:
    /// `1/tau` of the current loop, or of the shutdown when enable was low;
    /// 0 when the output was set directly (compliance, no supply).
    #[inline]
    pub fn last_rate_per_s(&self) -> f64 {
        self.last_rate_per_s
    }

    /// The output of the last step of length `dt_s` as consecutive pieces
    /// `(length s, mean current A)`. The change from the start of the step
    /// toward the target is cut into `n` equal shares, `n` the change over
    /// [`RAMP_SHARE_OF_FULL_SCALE`] of full scale, rounded up, at most
    /// [`MAX_RAMP_PIECES`]: the first `n - 1` pieces each carry one share
    /// (the first ones short, where the exponential is steep), the next the
    /// last share over four time constants, the last the rest of the step
    /// (within e^-4 of that share of the output). Each mean is the exact
    /// mean of the exponential over its piece. A change of one share or
    /// less, or an output that was set rather than lagged, is one piece at
    /// the output current.
    pub fn ramp_pieces(&self, dt_s: f64) -> RampPieces {
        let r = self.last_rate_per_s;
        let (from, to) = (self.last_from_a, self.last_target_a);
        let share_a = RAMP_SHARE_OF_FULL_SCALE * self.params.full_scale_a();
        let n = ((self.i_out - from).abs() / share_a)
            .ceil()
            .min(MAX_RAMP_PIECES as f64) as usize;
        let single = r <= 0.0 || n <= 1;
        RampPieces {
            from,
            to,
            rate: r,
            dt: dt_s,
            t: 0.0,
            n,
            k: if single { n + 1 } else { 0 },
            single_a: single.then_some(self.i_out),
        }
    }

    /// Advances the lag toward the target and returns the unlimited current.
    #[inline]
    fn advance_lag(&mut self, dac_code: u16, enable: bool, dt_s: f64) -> f64 {
        self.last_from_a = self.i_out;
        let (target, decay) = if !enable {
            if dt_s != self.off_dt {
                self.off_decay = (-dt_s / self.params.shutdown_tau_s).exp();
                self.off_dt = dt_s;
            }
            self.last_rate_per_s = self.off_rate_per_s;
            (0.0, self.off_decay)
        } else {
            self.last_rate_per_s = self.on_rate_per_s;
            if dt_s != self.on_dt {
                self.on_decay = (-dt_s / self.tau_s).exp();
                self.on_dt = dt_s;
            }
            let t = if self.fail_high {
                self.params.fail_high_current_a
            } else {
                // The source's hardware clamp (its short-circuit limit)
                // bounds whatever the DAC asks for, a stuck DAC included.
                self.setpoint_a(self.dac_stuck.unwrap_or(dac_code))
                    .min(self.params.fail_high_current_a)
            };
            (t, self.on_decay)
        };
        self.last_target_a = target;
        self.i_lag = target + (self.i_lag - target) * decay;
        self.i_lag
    }

    /// The output was set (limited), not lagged, in this step.
    #[inline]
    fn set_directly(&mut self) {
        self.last_rate_per_s = 0.0;
    }

    /// Advances the driver by `dt_s` and returns the diode current, A.
    ///
    /// `v_f_v` is the diode forward voltage at the present output current
    /// (the value of the previous step). When it exceeds the available
    /// `supply_v - compliance_v` the source is out of compliance and the
    /// current is cut to `i * V_avail / v_f_v` (the diode replaced by its
    /// static resistance V/I); the same bound stays in force while the source
    /// remains saturated. For a diode I-V curve (concave V(I) through the
    /// origin) this update approaches the exact compliance current
    /// monotonically over successive steps, never oscillating. Use
    /// [`Driver::step_with_load`] to solve the compliance point exactly.
    #[inline]
    pub fn step(
        &mut self,
        dac_code: u16,
        enable: bool,
        v_f_v: f64,
        supply_v: f64,
        dt_s: f64,
    ) -> f64 {
        let mut i = self.advance_lag(dac_code, enable, dt_s);
        let v_avail = supply_v - self.params.compliance_v;
        if v_avail <= 0.0 {
            i = 0.0;
            self.i_lag = 0.0;
            self.saturated = false;
            self.set_directly();
        } else if self.i_out > 0.0 && v_f_v > 0.0 && (v_f_v > v_avail || self.saturated) {
            let limit = self.i_out * v_avail / v_f_v;
            self.saturated = i > limit;
            if self.saturated {
                i = limit;
                self.i_lag = limit;
                self.set_directly();
            }
        } else {
            self.saturated = false;
        }
        self.i_out = i;
        i
    }

    /// As [`Driver::step`] but with the diode I-V curve `v_of_i` (volts for
    /// a current in amperes, increasing): when the lagged current would need
    /// more than `supply_v - compliance_v`, the output is the current at which
    /// the diode voltage equals the available voltage (Illinois regula falsi
    /// to 1e-12 relative).
    pub fn step_with_load<F: Fn(f64) -> f64>(
        &mut self,
        dac_code: u16,
        enable: bool,
        v_of_i: F,
        supply_v: f64,
        dt_s: f64,
    ) -> f64 {
        let mut i = self.advance_lag(dac_code, enable, dt_s);
        let v_avail = supply_v - self.params.compliance_v;
        if v_avail <= 0.0 {
            i = 0.0;
            self.i_lag = 0.0;
            self.set_directly();
        } else if i > 0.0 && v_of_i(i) > v_avail {
            let (mut a, mut b) = (0.0, i);
            let (mut fa, mut fb) = (v_of_i(0.0) - v_avail, v_of_i(i) - v_avail);
            if fa >= 0.0 {
                i = 0.0;
            } else {
                let mut side = 0i32;
                for _ in 0..200 {
                    let c = (a * fb - b * fa) / (fb - fa);
                    let fc = v_of_i(c) - v_avail;
                    if fc > 0.0 {
                        b = c;
                        fb = fc;
                        if side == -1 {
                            fa *= 0.5;
                        }
                        side = -1;
                    } else {
                        a = c;
                        fa = fc;
                        if side == 1 {
                            fb *= 0.5;
                        }
                        side = 1;
                    }
                    if (b - a) <= 1e-12 * b || fc == 0.0 {
                        break;
                    }
                }
                i = a;
            }
            self.i_lag = i;
            self.set_directly();
        }
        self.i_out = i;
        i
    }

    /// Current-sense amplifier output for a diode current, V.
    #[inline]
    pub fn sense_voltage(&self, i_a: f64) -> f64 {
        i_a * self.params.sense_ohm * self.params.sense_gain * self.sense_gain_error
            + self.params.sense_offset_v
    }
}

/// Largest current change of one piece of [`Driver::ramp_pieces`], share of
/// the full-scale current (our choice: a step of the rate equations this
/// small rings by about 1 % of the output).
pub const RAMP_SHARE_OF_FULL_SCALE: f64 = 1.0 / 200.0;
/// Most pieces of equal current change [`Driver::ramp_pieces`] cuts the
/// rise of a step into (then one more to the end of the step).
pub const MAX_RAMP_PIECES: usize = 64;

/// The pieces of one driver step (see [`Driver::ramp_pieces`]).
#[derive(Clone, Debug)]
pub struct RampPieces {
    from: f64,
    to: f64,
    rate: f64,
    dt: f64,
    t: f64,
    k: usize,
    single_a: Option<f64>,
    n: usize,
}

impl Iterator for RampPieces {
    type Item = (f64, f64);

    fn next(&mut self) -> Option<(f64, f64)> {
        if let Some(i) = self.single_a.take() {
            return Some((self.dt, i));
        }
        if self.k > self.n || self.t >= self.dt {
            return None;
        }
        self.k += 1;
        // The share k/n of the change is done at t = -ln(1 - k/n) / rate;
        // the last share gets four time constants, then the rest.
        let end = if self.k < self.n {
            let share = self.k as f64 / self.n as f64;
            (-(1.0 - share).ln() / self.rate).min(self.dt)
        } else if self.k == self.n {
            (self.t + 4.0 / self.rate).min(self.dt)
        } else {
            self.dt
        };
        let (t0, h) = (self.t, end - self.t);
        self.t = end;
        if end >= self.dt {
            self.k = self.n + 1;
        }
        if h <= 0.0 {
            return None;
        }
        // Mean of to + (from - to) e^{-rate t} over [t0, end].
        let (e0, e1) = ((-self.rate * t0).exp(), (-self.rate * end).exp());
        Some((
            h,
            self.to + (self.from - self.to) * (e0 - e1) / (self.rate * h),
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn params() -> DriverParams {
        DriverParams {
            dac_bits: 12,
            dac_vref_v: 2.5,
            transconductance_a_per_v: 0.024,
            bandwidth_hz: 100e3,
            compliance_v: 0.8,
            sense_ohm: 10.0,
            sense_gain: 4.0,
            fail_high_current_a: 0.15,
            shutdown_tau_s: 1e-7,
            dac_offset_v: 0.0,
            sense_offset_v: 0.0,
        }
    }

    #[test]
    fn first_order_lag_is_exact() {
        let mut d = Driver::new(params()).unwrap();
        let tau = 1.0 / (2.0 * core::f64::consts::PI * 100e3);
        let i = d.step(4095, true, 2.0, 5.0, tau);
        assert!((i - 0.06 * (1.0 - (-1.0f64).exp())).abs() < 1e-15);
        let mut d2 = Driver::new(params()).unwrap();
        for _ in 0..10 {
            d2.step(4095, true, 2.0, 5.0, tau / 10.0);
        }
        assert!((d2.current_a() - i).abs() < 1e-15);
    }

    #[test]
    fn enable_low_stops_fail_high() {
        let mut d = Driver::new(params()).unwrap();
        d.fail_high = true;
        for _ in 0..100 {
            d.step(0, true, 2.0, 5.0, 1e-5);
        }
        assert!((d.current_a() - 0.15).abs() < 1e-9);
        let i = d.step(0, false, 2.0, 5.0, 1e-5);
        assert!(i < 1e-12);
    }

    /// A DAC stuck at full scale (60 mA) drives only the 50 mA hardware
    /// clamp, as a source failing high does.
    #[test]
    fn dac_stuck_at_full_scale_obeys_the_hardware_clamp() {
        let mut d = Driver::new(DriverParams {
            fail_high_current_a: 0.05,
            ..params()
        })
        .unwrap();
        d.dac_stuck = Some(4095);
        for _ in 0..100 {
            d.step(100, true, 2.0, 5.0, 1e-5);
        }
        assert!((d.current_a() - 0.05).abs() < 1e-9, "{}", d.current_a());
    }

    #[test]
    fn dac_stuck_and_sense_error() {
        let mut d = Driver::new(params()).unwrap();
        d.dac_stuck = Some(2048);
        for _ in 0..100 {
            d.step(100, true, 2.0, 5.0, 1e-5);
        }
        assert!((d.current_a() - d.setpoint_a(2048)).abs() < 1e-9);
        d.sense_gain_error = 1.1;
        assert!((d.sense_voltage(0.05) - 0.05 * 40.0 * 1.1).abs() < 1e-15);
    }

    /// The pieces of a step tile it, each carries 1/N of the change, and
    /// their mean currents integrate the exponential exactly (charge).
    #[test]
    fn ramp_pieces_tile_the_step_and_keep_its_charge() {
        let mut d = Driver::new(params()).unwrap();
        let dt = 50e-6;
        d.step(2000, true, 2.0, 5.0, dt);
        let target = d.setpoint_a(2000);
        // 29 mA of a 60 mA full scale: 98 shares of 0.3 mA, at most 64.
        let r = d.last_rate_per_s();
        let pieces: Vec<(f64, f64)> = d.ramp_pieces(dt).collect();
        assert_eq!(pieces.len(), MAX_RAMP_PIECES + 1);
        let total: f64 = pieces.iter().map(|p| p.0).sum();
        assert!((total - dt).abs() < 1e-18);
        let charge: f64 = pieces.iter().map(|p| p.0 * p.1).sum();
        let exact = target * dt - target * (1.0 - (-r * dt).exp()) / r;
        assert!(
            (charge - exact).abs() < 1e-12 * exact,
            "{charge} vs {exact}"
        );
        // Means rise monotonically toward the target, the first well below
        // it: a ramp, not a step at the start of the tick.
        assert!(pieces.windows(2).all(|w| w[1].1 > w[0].1));
        assert!(pieces[0].1 < 0.1 * target);
        // Settled: one piece at the output.
        d.step(2000, true, 2.0, 5.0, dt);
        let p: Vec<(f64, f64)> = d.ramp_pieces(dt).collect();
        assert_eq!(p, vec![(dt, d.current_a())]);
    }

    #[test]
    fn compliance_converges_to_diode_curve() {
        // Diode V = 0.05 ln(1 + I/1e-18) + 5 I; supply 2.9 V, headroom 0.8 V.
        let vf = |i: f64| 0.05 * (1.0 + i / 1e-18).ln() + 5.0 * i;
        let mut exact = Driver::new(params()).unwrap();
        let mut iter = Driver::new(params()).unwrap();
        for _ in 0..2000 {
            exact.step_with_load(4095, true, vf, 2.9, 1e-5);
            let v = vf(iter.current_a());
            iter.step(4095, true, v, 2.9, 1e-5);
        }
        let ie = exact.current_a();
        assert!((vf(ie) - 2.1).abs() < 1e-9, "exact compliance point");
        assert!(ie < 0.06);
        assert!(
            (iter.current_a() / ie - 1.0).abs() < 1e-6,
            "{} vs {ie}",
            iter.current_a()
        );
    }
}
