//! Oscillation, limit-cycle and ceiling detection on the full-rate signals
//! of a run (every tick, not the decimated trace): [`Watch`] collects the
//! ticks of each stretch of regulation and [`analyse`] judges the steady
//! end of each stretch.
//!
//! A stretch is a run of ticks in Regulating between scenario events (a
//! request, an ambient change or an injected fault starts a new one). Its
//! steady end is its last three quarters (the first quarter is the
//! transient of what started it), at most [`WINDOW_TICKS`] ticks, at least
//! [`MIN_TICKS`]. There:
//!
//! * the DAC code the core computed is detrended (least-squares line) and
//!   its normalised autocorrelation searched for a periodic peak
//!   ([`periodicity`], ≥ [`PERIODIC_CORRELATION`] after the first zero
//!   crossing);
//! * a periodic stretch whose RMS over the second half of the window is
//!   below [`RINGING_DECAY`] of the first half is **ringing** (decaying,
//!   a marginal loop); otherwise it is **sustained**: a **limit cycle**
//!   when its peak-to-peak amplitude exceeds [`LIMIT_CYCLE_MIN_STEPS`] DAC
//!   steps, **hunting** below (an integrating loop with a quantised DAC
//!   and a quantised monitor ADC moves by one code either side of its
//!   operating point, and none avoids it: common practice); an
//!   oscillation whose drive moves by the core's slew limit on some tick
//!   is **slew-bound**: it grew until the slew limit stopped it, the mark
//!   of a loop that is unstable in itself (a quantisation cycle of a
//!   stable loop stays far below the slew limit);
//! * a drive on the ceiling in force for at least [`PINNED_SHARE`] of the
//!   window is **pinned**: the loop does not regulate, and the power
//!   shortfall (setpoint minus the mean monitor reading, and the true
//!   front power beside it) is what the ceiling costs.
//!
//! Amplitudes are given as the drive's range (mA), in DAC steps, and as
//! the peak-to-peak of the true front-facet power; the period in ticks,
//! milliseconds and hertz.

use std::fmt;

use diodestat_core::Fx;

/// Normalised autocorrelation at the period for an oscillation to count
/// as periodic (our choice).
pub const PERIODIC_CORRELATION: f64 = 0.5;
/// Peak-to-peak amplitude, in DAC steps, above which a sustained periodic
/// oscillation is a limit cycle (our choice; hunting by one code either
/// side is common practice for an integrating loop with quantised
/// converters).
pub const LIMIT_CYCLE_MIN_STEPS: f64 = 2.5;
/// RMS of the second half of the window over the first below which a
/// periodic oscillation is ringing (decaying), not sustained (our choice).
pub const RINGING_DECAY: f64 = 0.5;
/// Share of the window with the drive on the ceiling for the drive to be
/// pinned there (our choice).
pub const PINNED_SHARE: f64 = 0.9;
/// Longest steady window analysed, ticks (the end of a longer stretch).
pub const WINDOW_TICKS: usize = 512;
/// Longest period searched by the run summary's detector, ticks (the
/// autocorrelation costs the window length per lag).
pub const MAX_PERIOD_TICKS: usize = 64;
/// Shortest steady window analysed, ticks (eight periods of the shortest
/// oscillation, two ticks, plus its lags).
pub const MIN_TICKS: usize = 24;

/// What the detector needs of one tick.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TickSample {
    /// The core is in Regulating.
    pub regulating: bool,
    /// DAC code the core computed this tick.
    pub dac_code: u16,
    /// Commanded drive, mA.
    pub cmd_ma: f64,
    /// Ceiling in force, mA.
    pub ceiling_ma: f64,
    /// True front-facet power at the end of the tick, mW.
    pub p_mw: f64,
    /// Monitor reading as the core sees it, mW.
    pub monitor_mw: f64,
    /// The requested power setpoint in APC, mW (`None` in ACC).
    pub setpoint_mw: Option<f64>,
}

/// Kind of a periodic oscillation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum OscillationKind {
    /// Decaying: the second half of the window has this ratio of the RMS
    /// of the first.
    Ringing {
        /// RMS second half / first half.
        decay: f64,
    },
    /// Sustained, within [`LIMIT_CYCLE_MIN_STEPS`] DAC steps peak to peak.
    Hunting,
    /// Sustained, larger than the hunting of a quantised loop.
    LimitCycle,
}

/// A periodic oscillation at the steady end of a stretch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Oscillation {
    /// Ringing, hunting or limit cycle.
    pub kind: OscillationKind,
    /// Period, ticks.
    pub period_ticks: usize,
    /// Frequency, Hz.
    pub freq_hz: f64,
    /// Normalised autocorrelation at the period.
    pub correlation: f64,
    /// Lowest and highest commanded drive in the window, mA.
    pub drive_ma: (f64, f64),
    /// Peak-to-peak of the detrended DAC code, steps.
    pub pp_steps: f64,
    /// Peak-to-peak of the detrended true front power, mW.
    pub power_pp_mw: f64,
    /// The same, % of the mean power.
    pub power_pp_pct: f64,
    /// Share of the window with the drive on the ceiling.
    pub on_ceiling_share: f64,
    /// The drive moved by the slew limit on some tick of the window.
    pub slew_bound: bool,
}

/// The drive pinned on its ceiling at the steady end of a stretch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pinned {
    /// Ceiling in force (mean over the window), mA.
    pub ceiling_ma: f64,
    /// The power setpoint, mW (`None` in ACC).
    pub setpoint_mw: Option<f64>,
    /// Mean monitor reading, mW.
    pub reading_mw: f64,
    /// Mean true front power, mW.
    pub front_mw: f64,
}

impl Pinned {
    /// Setpoint minus the mean monitor reading, mW (`None` in ACC).
    pub fn shortfall_mw(&self) -> Option<f64> {
        self.setpoint_mw.map(|s| s - self.reading_mw)
    }
}

/// What the detector found in one stretch.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Finding {
    /// A periodic oscillation.
    Oscillation(Oscillation),
    /// The drive pinned on the ceiling.
    Pinned(Pinned),
}

/// A finding with the window it was found in.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Found {
    /// First tick of the window.
    pub from_tick: u64,
    /// Last tick of the window.
    pub to_tick: u64,
    /// Tick rate, Hz.
    pub tick_hz: f64,
    /// What was found.
    pub finding: Finding,
}

impl Found {
    /// A sustained oscillation larger than hunting.
    pub fn is_limit_cycle(&self) -> bool {
        matches!(
            self.finding,
            Finding::Oscillation(Oscillation {
                kind: OscillationKind::LimitCycle,
                ..
            })
        )
    }
}

impl fmt::Display for Found {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let ms = |t: u64| t as f64 * 1e3 / self.tick_hz;
        let at = format!("t={:.3}-{:.3} ms", ms(self.from_tick), ms(self.to_tick));
        match &self.finding {
            Finding::Oscillation(o) => {
                let what = match o.kind {
                    OscillationKind::LimitCycle => "LIMIT CYCLE (sustained oscillation)".into(),
                    OscillationKind::Hunting => {
                        "hunting by one DAC code (sustained, quantisation)".into()
                    }
                    OscillationKind::Ringing { decay } => format!(
                        "ringing (decaying: RMS of the later half {:.0} % of the earlier)",
                        100.0 * decay
                    ),
                };
                write!(
                    f,
                    "{at} {what}: period {} ticks = {:.3} ms ({:.1} Hz), drive {:.2}-{:.2} mA \
                     ({:.1} DAC steps peak to peak), optical power {:.3} mW peak to peak ({:.1} %)",
                    o.period_ticks,
                    o.period_ticks as f64 * 1e3 / self.tick_hz,
                    o.freq_hz,
                    o.drive_ma.0,
                    o.drive_ma.1,
                    o.pp_steps,
                    o.power_pp_mw,
                    o.power_pp_pct
                )?;
                if o.slew_bound {
                    write!(f, ", bounded by the slew limit (the loop is unstable)")?;
                }
                if o.on_ceiling_share > 0.0 {
                    write!(
                        f,
                        ", on the ceiling {:.0} % of ticks",
                        100.0 * o.on_ceiling_share
                    )?;
                }
                Ok(())
            }
            Finding::Pinned(p) => {
                write!(f, "{at} drive PINNED on its ceiling {:.2} mA", p.ceiling_ma)?;
                match (p.setpoint_mw, p.shortfall_mw()) {
                    (Some(sp), Some(short)) => write!(
                        f,
                        ": power {:.3} mW read ({:.3} mW front), {:.3} mW ({:.1} %) short of the \
                         {:.3} mW setpoint",
                        p.reading_mw,
                        p.front_mw,
                        short,
                        100.0 * short / sp,
                        sp
                    ),
                    _ => write!(
                        f,
                        ": the current request is beyond it, power {:.3} mW front",
                        p.front_mw
                    ),
                }
            }
        }
    }
}

/// A tick as [`Watch`] keeps it until its stretch is analysed.
pub trait WatchedTick: Copy {
    /// What turns a kept tick into the detector's [`TickSample`].
    type Scale: Copy + fmt::Debug;
    /// The tick as the detector sees it.
    fn sample(&self, scale: Self::Scale) -> TickSample;
}

impl WatchedTick for TickSample {
    type Scale = ();
    fn sample(&self, _: ()) -> TickSample {
        *self
    }
}

/// A tick of regulation as a run keeps it: the core's own fixed-point
/// values in the board's units, converted to mA and mW only when its
/// stretch is analysed. The conversion ([`fx_f64`] times the unit) is the
/// same arithmetic whenever it is done, so the detector sees the very
/// values a conversion at every tick would give.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CoreTick {
    /// True front-facet power at the end of the tick, mW.
    pub p_mw: f64,
    /// Commanded drive, current units.
    pub drive_iu: Fx,
    /// Ceiling in force, current units.
    pub ceiling_iu: Fx,
    /// Monitor reading, optical units.
    pub monitor_ou: Fx,
    /// The power target in APC, optical units (`None` in ACC).
    pub target_ou: Option<Fx>,
    /// DAC code the core computed this tick.
    pub dac_code: u16,
}

/// The board's units of a [`CoreTick`]: mA per current unit and mW per
/// optical unit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CoreScale {
    /// mA per current unit.
    pub ma_per_iu: f64,
    /// mW per optical unit.
    pub mw_per_ou: f64,
}

impl WatchedTick for CoreTick {
    type Scale = CoreScale;
    fn sample(&self, s: CoreScale) -> TickSample {
        TickSample {
            regulating: true,
            dac_code: self.dac_code,
            cmd_ma: fx_f64(self.drive_iu) * s.ma_per_iu,
            ceiling_ma: fx_f64(self.ceiling_iu) * s.ma_per_iu,
            p_mw: self.p_mw,
            monitor_mw: fx_f64(self.monitor_ou) * s.mw_per_ou,
            setpoint_mw: self.target_ou.map(|t| fx_f64(t) * s.mw_per_ou),
        }
    }
}

/// `v` as f64, exactly (an I16F16 is an i32 over 2^16: both steps are
/// exact in f64), without the generic conversion's rounding logic.
#[inline]
pub fn fx_f64(v: Fx) -> f64 {
    f64::from(v.to_bits()) * (1.0 / f64::from(1u32 << Fx::FRAC_NBITS))
}

/// Collects the ticks of a run and analyses each stretch of regulation as
/// it ends (see the module documentation). It keeps the ticks as `T`
/// ([`TickSample`], or the cheaper [`CoreTick`] of a run) and turns them
/// into samples only for the analysis.
#[derive(Clone, Debug)]
pub struct Watch<T: WatchedTick = TickSample> {
    tick_hz: f64,
    slew_ma_per_tick: f64,
    scale: T::Scale,
    /// The last ticks of the open stretch, a ring of [`WINDOW_TICKS`]
    /// (tick `k` of the stretch at `k % WINDOW_TICKS`), filled with the
    /// first tick kept and kept from one stretch to the next.
    buf: Vec<T>,
    /// Length of the open stretch, ticks, and its last tick.
    len: usize,
    last_tick: u64,
    found: Vec<Found>,
}

impl Watch<TickSample> {
    /// A watch for a run at `tick_hz` whose drive slews by at most
    /// `slew_ma_per_tick` in regulation.
    pub fn new(tick_hz: u32, slew_ma_per_tick: f64) -> Self {
        Watch::with_scale(tick_hz, slew_ma_per_tick, ())
    }

    /// The tick `tick`; a tick out of regulation ends the open stretch.
    pub fn push(&mut self, tick: u64, s: TickSample) {
        if !s.regulating {
            self.cut();
            return;
        }
        self.keep(tick, s);
    }
}

impl<T: WatchedTick> Watch<T> {
    /// [`Watch::new`] for ticks kept as `T`, turned into samples with
    /// `scale`.
    pub fn with_scale(tick_hz: u32, slew_ma_per_tick: f64, scale: T::Scale) -> Self {
        Watch {
            tick_hz: f64::from(tick_hz),
            slew_ma_per_tick,
            scale,
            buf: Vec::new(),
            len: 0,
            last_tick: 0,
            found: Vec::new(),
        }
    }

    /// The tick `tick`, in regulation (a tick out of it is a [`Watch::cut`]).
    #[inline]
    pub fn keep(&mut self, tick: u64, s: T) {
        if self.buf.is_empty() {
            self.buf = vec![s; WINDOW_TICKS];
        }
        self.buf[self.len % WINDOW_TICKS] = s;
        self.len += 1;
        self.last_tick = tick;
    }

    /// A scenario event: the open stretch ends before this tick.
    pub fn cut(&mut self) {
        if self.len > 0 {
            let n = (self.len - self.len / 4).min(WINDOW_TICKS);
            if n >= MIN_TICKS {
                // The last `n` ticks, oldest first.
                let w: Vec<TickSample> = (self.len - n..self.len)
                    .map(|k| self.buf[k % WINDOW_TICKS].sample(self.scale))
                    .collect();
                let from_tick = self.last_tick + 1 - n as u64;
                for finding in analyse(&w, self.tick_hz, self.slew_ma_per_tick) {
                    self.found.push(Found {
                        from_tick,
                        to_tick: self.last_tick,
                        tick_hz: self.tick_hz,
                        finding,
                    });
                }
            }
        }
        self.len = 0;
    }

    /// Close the open stretch and return everything found, in time order.
    pub fn finish(mut self) -> Vec<Found> {
        self.cut();
        self.found
    }
}

fn mean(xs: impl Iterator<Item = f64>) -> f64 {
    let (s, n) = xs.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    if n == 0 {
        f64::NAN
    } else {
        s / n as f64
    }
}

fn pp(xs: &[f64]) -> f64 {
    xs.iter().fold(f64::MIN, |a, &b| a.max(b)) - xs.iter().fold(f64::MAX, |a, &b| a.min(b))
}

fn rms(xs: &[f64]) -> f64 {
    (xs.iter().map(|x| x * x).sum::<f64>() / xs.len().max(1) as f64).sqrt()
}

/// Judge one steady window (see the module documentation): the drive
/// pinned on the ceiling, and a periodic oscillation of the DAC code.
pub fn analyse(w: &[TickSample], tick_hz: f64, slew_ma_per_tick: f64) -> Vec<Finding> {
    let mut out = Vec::new();
    if w.len() < MIN_TICKS {
        return out;
    }
    let on_ceiling = |s: &TickSample| s.cmd_ma >= s.ceiling_ma - 1e-3;
    let on_share = w.iter().filter(|s| on_ceiling(s)).count() as f64 / w.len() as f64;
    if on_share >= PINNED_SHARE {
        out.push(Finding::Pinned(Pinned {
            ceiling_ma: mean(w.iter().map(|s| s.ceiling_ma)),
            setpoint_mw: w.last().and_then(|s| s.setpoint_mw),
            reading_mw: mean(w.iter().map(|s| s.monitor_mw)),
            front_mw: mean(w.iter().map(|s| s.p_mw)),
        }));
    }
    let codes: Vec<f64> = w.iter().map(|s| f64::from(s.dac_code)).collect();
    let Some((period_ticks, correlation)) = periodicity_up_to(&codes, MAX_PERIOD_TICKS) else {
        return out;
    };
    let d = detrend(&codes);
    let half = d.len() / 2;
    let decay = rms(&d[half..]) / rms(&d[..half]);
    let pp_steps = pp(&d);
    let kind = if decay < RINGING_DECAY {
        OscillationKind::Ringing { decay }
    } else if pp_steps > LIMIT_CYCLE_MIN_STEPS {
        OscillationKind::LimitCycle
    } else {
        OscillationKind::Hunting
    };
    let p: Vec<f64> = w.iter().map(|s| s.p_mw).collect();
    let power_pp_mw = pp(&detrend(&p));
    let drive = w.iter().map(|s| s.cmd_ma);
    let max_move = w
        .windows(2)
        .map(|p| (p[1].cmd_ma - p[0].cmd_ma).abs())
        .fold(0.0, f64::max);
    out.push(Finding::Oscillation(Oscillation {
        kind,
        period_ticks,
        freq_hz: tick_hz / period_ticks as f64,
        correlation,
        drive_ma: (
            drive.clone().fold(f64::MAX, f64::min),
            drive.fold(f64::MIN, f64::max),
        ),
        pp_steps,
        power_pp_mw,
        power_pp_pct: 100.0 * power_pp_mw / mean(p.iter().copied()).abs(),
        on_ceiling_share: on_share,
        slew_bound: max_move >= 0.99 * slew_ma_per_tick,
    }));
    out
}

/// The period (ticks) and normalised autocorrelation of the strongest
/// periodic component of `xs` after removing its least-squares line: the
/// first autocorrelation peak after the first zero crossing that comes
/// within 10 % of the highest, lags up to a third of the length; `None` if
/// flat or no peak reaches [`PERIODIC_CORRELATION`].
pub fn periodicity(xs: &[f64]) -> Option<(usize, f64)> {
    periodicity_up_to(xs, xs.len() / 3)
}

/// [`periodicity`] with lags up to `max_lag` (and a third of the length).
pub fn periodicity_up_to(xs: &[f64], max_lag: usize) -> Option<(usize, f64)> {
    let d = detrend(xs);
    let n = d.len();
    let r0 = d.iter().map(|x| x * x).sum::<f64>() / n as f64;
    if n < 8 || r0 <= 1e-24 {
        return None;
    }
    let max_lag = max_lag.min(n / 3);
    let sums = lag_sums(&d, max_lag);
    let r = |k: usize| sums[k] / (n - k) as f64 / r0;
    let first_neg = (1..=max_lag).find(|&k| r(k) < 0.0)?;
    let rs: Vec<f64> = (first_neg..=max_lag).map(r).collect();
    let top = rs.iter().copied().fold(f64::MIN, f64::max);
    if top < PERIODIC_CORRELATION {
        return None;
    }
    // The fundamental: the first peak within 10 % of the highest (the
    // multiples of the period peak nearly as high).
    let i = (0..rs.len()).find(|&i| {
        rs[i] >= 0.9 * top
            && rs.get(i + 1).is_none_or(|n| *n <= rs[i])
            && (i == 0 || rs[i - 1] <= rs[i])
    })?;
    Some((first_neg + i, rs[i]))
}

/// `sums[k]` = the sum over i < n - k of `d[i] d[i + k]`, for the lags k
/// in `1..=max_lag` (`max_lag` at most a third of the length; `sums[0]`
/// is left 0), each added up in the order of i from -0.0 as
/// `Iterator::sum` does, so every sum is the very value of that sum.
/// Sixteen (then four) lags share one pass over the data: one load of
/// `d[i]` for their products with the sixteen neighbours `d[i + k..]`,
/// each lag in its own accumulator (lane by lane, so the compiler may pair
/// them in vector registers without changing any sum); the last few terms
/// of the shorter lags follow in order.
fn lag_sums(d: &[f64], max_lag: usize) -> Vec<f64> {
    let mut sums = vec![0.0; max_lag + 1];
    let mut k = 1;
    while k + 15 <= max_lag {
        sums[k..k + 16].copy_from_slice(&lag_pass::<16>(d, k));
        k += 16;
    }
    while k + 3 <= max_lag {
        sums[k..k + 4].copy_from_slice(&lag_pass::<4>(d, k));
        k += 4;
    }
    let n = d.len();
    for (lag, sum) in sums.iter_mut().enumerate().skip(k) {
        *sum = d[..n - lag]
            .iter()
            .zip(&d[lag..])
            .map(|(a, b)| a * b)
            .sum::<f64>();
    }
    sums
}

/// The sums of [`lag_sums`] for the `L` lags `k..k + L` in one pass.
#[inline]
fn lag_pass<const L: usize>(d: &[f64], k: usize) -> [f64; L] {
    let n = d.len();
    // The range every one of the lags covers.
    let m = n - k - (L - 1);
    let mut s = [-0.0f64; L];
    for (x, b) in d[..m].iter().zip(d[k..].windows(L)) {
        let b: &[f64; L] = b.try_into().expect("a window of L values");
        for j in 0..L {
            s[j] += x * b[j];
        }
    }
    for (j, sj) in s.iter_mut().enumerate().take(L - 1) {
        let lag = k + j;
        for i in m..n - lag {
            *sj += d[i] * d[i + lag];
        }
    }
    s
}

/// `xs` minus its least-squares straight line.
pub fn detrend(xs: &[f64]) -> Vec<f64> {
    let n = xs.len() as f64;
    if xs.len() < 2 {
        return vec![0.0; xs.len()];
    }
    let mx = (n - 1.0) / 2.0;
    let my = xs.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (i, y) in xs.iter().enumerate() {
        let dx = i as f64 - mx;
        sxy += dx * (y - my);
        sxx += dx * dx;
    }
    let b = sxy / sxx;
    xs.iter()
        .enumerate()
        .map(|(i, y)| y - my - b * (i as f64 - mx))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The batched lag sums are, bit for bit, the plain sums of products.
    #[test]
    fn lag_sums_are_the_plain_sums() {
        let mut r = crate::plant::Rng::new(5);
        for n in [8usize, 9, 13, 24, 100, 511, 512] {
            let d: Vec<f64> = (0..n).map(|_| r.normal() * 1e3 + r.uniform()).collect();
            for max_lag in [2, 3, 4, 5, 7, 8, 16, 17, 20, 33, 64].map(|m: usize| m.min(n / 3)) {
                let sums = lag_sums(&d, max_lag);
                assert_eq!(sums.len(), max_lag + 1);
                for k in 1..=max_lag {
                    let plain = d[..n - k]
                        .iter()
                        .zip(&d[k..])
                        .map(|(a, b)| a * b)
                        .sum::<f64>();
                    assert_eq!(sums[k].to_bits(), plain.to_bits(), "n {n} lag {k}");
                }
            }
        }
    }

    fn tick(code: u16, p_mw: f64) -> TickSample {
        TickSample {
            regulating: true,
            dac_code: code,
            cmd_ma: f64::from(code) * 0.01,
            ceiling_ma: 50.0,
            p_mw,
            monitor_mw: p_mw,
            setpoint_mw: Some(20.0),
        }
    }

    fn found(ticks: &[TickSample]) -> Vec<Found> {
        let mut w = Watch::new(1000, 20.0);
        for (i, s) in ticks.iter().enumerate() {
            w.push(i as u64, *s);
        }
        w.finish()
    }

    /// A drive swinging between two levels every tick is a limit cycle of
    /// period 2 with the full swing as its amplitude; found on the
    /// full-rate signal even though every fourth tick (a decimated plot)
    /// would show a flat line.
    #[test]
    fn two_level_swing_is_a_limit_cycle() {
        let t: Vec<TickSample> = (0..1000)
            .map(|i| {
                if i % 2 == 0 {
                    tick(3000, 12.0)
                } else {
                    tick(5000, 20.0)
                }
            })
            .collect();
        let f = found(&t);
        assert_eq!(f.len(), 1, "{f:?}");
        assert!(f[0].is_limit_cycle());
        let Finding::Oscillation(o) = f[0].finding else {
            panic!()
        };
        assert_eq!(o.period_ticks, 2);
        assert!((o.freq_hz - 500.0).abs() < 1e-9);
        assert_eq!(o.drive_ma, (30.0, 50.0));
        assert!(o.slew_bound, "a 20 mA move with a 20 mA/tick slew");
        assert!((o.pp_steps / 2000.0 - 1.0).abs() < 0.02, "{}", o.pp_steps);
        assert!((o.power_pp_mw / 8.0 - 1.0).abs() < 0.02);
        // The window is the last three quarters of the stretch, at most
        // WINDOW_TICKS.
        assert_eq!(
            (f[0].from_tick, f[0].to_tick),
            (1000 - WINDOW_TICKS as u64, 999)
        );
        let line = f[0].to_string();
        assert!(
            line.contains("LIMIT CYCLE") && line.contains("500.0 Hz"),
            "{line}"
        );
        let decimated: Vec<f64> = t.iter().step_by(4).map(|s| s.p_mw).collect();
        assert!(periodicity(&decimated).is_none());
    }

    /// One code either side is hunting; a decaying oscillation is ringing;
    /// a flat drive is nothing.
    #[test]
    fn hunting_ringing_and_quiet() {
        let hunt: Vec<TickSample> = (0..800)
            .map(|i| tick(2000 + [0, 1, 2, 1][i % 4], 10.0))
            .collect();
        let f = found(&hunt);
        assert!(
            matches!(
                f[0].finding,
                Finding::Oscillation(Oscillation {
                    kind: OscillationKind::Hunting,
                    period_ticks: 4,
                    ..
                })
            ),
            "{f:?}"
        );
        let ring: Vec<TickSample> = (0..800)
            .map(|i| {
                let x = 1000.0 * (-(i as f64) / 200.0).exp() * (i as f64 * 0.7).cos();
                tick((2000.0 + x).round() as u16, 10.0 + x * 0.01)
            })
            .collect();
        let f = found(&ring);
        assert!(
            matches!(
                f[0].finding,
                Finding::Oscillation(Oscillation {
                    kind: OscillationKind::Ringing { .. },
                    ..
                })
            ),
            "{f:?}"
        );
        let quiet: Vec<TickSample> = (0..800).map(|_| tick(2000, 10.0)).collect();
        assert!(found(&quiet).is_empty());
    }

    /// A drive on the ceiling is pinned, with the shortfall from the
    /// setpoint; a stretch too short for [`MIN_TICKS`] is not judged.
    #[test]
    fn pinned_with_shortfall() {
        let t: Vec<TickSample> = (0..400)
            .map(|_| TickSample {
                cmd_ma: 50.0,
                ..tick(5000, 17.0)
            })
            .collect();
        let f = found(&t);
        assert_eq!(f.len(), 1);
        let Finding::Pinned(p) = f[0].finding else {
            panic!("{f:?}")
        };
        assert!((p.shortfall_mw().unwrap() - 3.0).abs() < 1e-12);
        assert!(f[0].to_string().contains("3.000 mW (15.0 %) short"));
        assert!(found(&t[..MIN_TICKS]).is_empty());
        assert_eq!(found(&t[..MIN_TICKS * 4 / 3 + 1]).len(), 1);
    }

    /// A tick out of regulation or a cut ends a stretch: two stretches,
    /// two findings.
    #[test]
    fn stretches_are_judged_apart() {
        let mut w = Watch::new(1000, 20.0);
        for i in 0..600u64 {
            let s = if i % 2 == 0 {
                tick(3000, 12.0)
            } else {
                tick(5000, 20.0)
            };
            if i == 300 {
                w.cut();
            }
            w.push(i, s);
        }
        let f = w.finish();
        assert_eq!(f.len(), 2);
        assert_eq!((f[0].from_tick, f[0].to_tick), (75, 299));
        assert_eq!((f[1].from_tick, f[1].to_tick), (375, 599));
    }
}
