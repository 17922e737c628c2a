//! Every protection in one place: the condition each one watches, its
//! limit, its debounce, and in which states it is armed.
//!
//! A limit is the first value that trips (upper limits trip at `>=`, lower
//! limits at `<=`). Conditions are evaluated in every state, so a clear or
//! an enable request can be refused while one is still present; a
//! protection *trips* only in the states where it is armed:
//!
//! | protection | armed in |
//! |---|---|
//! | overcurrent, monitor runaway, drive mismatch, external fault | every state (light or current while off is a hardware failure; so is a board fault input) |
//! | interlock, sensor open/short, over-temperature, supply, missed ticks, tick order | Arming, Ramping, Regulating, Stopping (in Off they refuse `Enable`) |
//! | monitor loss, power implausible, diode open/short | Ramping, Regulating (they need drive) |
//!
//! ## The leaky debounce and its bound
//!
//! Each protection has a level `L` (starting at 0). A tick with its
//! condition present adds the weight `w`
//! ([`crate::Protection::intermittent_weight`]), a tick without
//! takes 1 away (never below 0); it trips when `L >= w·N`, `N` its debounce
//! (the level is held at `w·N`). A steady condition therefore trips on its
//! `N`-th tick, exactly as a consecutive-tick debounce would, but a clean
//! tick no longer restarts the count.
//!
//! **Bound.** Over any `n` consecutive ticks in which the condition is
//! present on `k` of them, `L` rises by at least `(w + 1)·k − n` (a present
//! tick adds `w`, a clean one takes at most 1, and the floor at 0 only
//! helps). So while the protection is armed it has tripped by the first
//! tick at which `(w + 1)·k − n >= w·N`. For a condition present in a
//! fraction `d > 1/(w + 1)` of the ticks (`k >= d·n` over every such
//! stretch), that is within
//!
//! ```text
//! n_max = ceil( w·N / ((w + 1)·d − 1) ) ticks.
//! ```
//!
//! Example: `w = 3`, `N = 20`, `d = 0.95` (an open contact that reads light
//! one tick in twenty): at most 22 ticks; `d = 0.5`: at most 60 ticks. A
//! condition present in at most `1/(w + 1)` of the ticks may never trip.
//!
//! The fast protections ([`Fault::is_fast`]) have their `N` bounded by
//! validation ([`crate::FAST_DEBOUNCE_MAX_US`]), so their bound is
//! at most `w·N_max / ((w + 1)·d − 1)` ticks of a tick rate's 500 µs.
//!
//! Current-for-power plausibility ([`crate::Plausibility`]) is a
//! slow protection: it is evaluated every [`SLOW_EVERY`] ticks and its
//! condition is held in between (it counts on every tick like the others).

use crate::config::{Config, ForwardVoltage, Plausibility, Protection, Rail, ValidConfig};
use crate::fault::{FaultLog, FaultRecord, FaultSet, SLOTS};
use crate::io::State;
use crate::temp_table::Window;
use crate::units::{scale_counts, Fx};

/// The protection table: one entry per [`Fault`], in bit order. An entry
/// gives everything about its protection:
///
/// - the doc, discriminant (its bit in a [`FaultSet`], fixed: records are
///   stored by it), `name` and `unit` (of its record);
/// - `speed`: `fast` ([`Fault::is_fast`]: debounce bounded by validation),
///   `slow` (evaluated every [`SLOW_EVERY`] ticks, held in between), `tick`
///   (any other sample protection) or `edge` (latched outside `step`,
///   [`Fault::is_latched_outside_step`]);
/// - `armed`: `always` (every state), `active` (Arming, Ramping,
///   Regulating, Stopping), `driving` (Ramping, Regulating) or `never` (an
///   edge fault, never a sample condition);
/// - `debounce`: its configuration key and its count in ticks
///   ([`Fault::debounce_ticks`]; validation refuses zero, and a fast
///   protection's count above [`crate::FAST_DEBOUNCE_MAX_US`]);
/// - `condition`: `tick |x| ..` (a comparison of the calibrated
///   [`Measurements`], in [`Ctx`] `x`, evaluated on every tick in
///   [`quiet`] and [`present_mask`]), `direct |r| ..` (read straight off
///   the sample, in [`Raw`] `r`, by [`Measurements::from_sample`]),
///   `forward |f| ..` (the same, on the forward-voltage channel while
///   driving, in [`Forward`] `f`), `slow |x| ..` (in [`Slow`], by
///   [`Protections::evaluate_slow`]) or `edge` (none);
/// - `record`: the measured value and the limit its trip records
///   ([`trip_values`]), in `unit`.
///
/// The leaky debounce and its bound, the arming masks and the log apply by
/// themselves.
macro_rules! protections {
    ($(
        $(#[doc = $doc:literal])*
        $variant:ident = $n:literal {
            name: $name:literal,
            unit: $unit:literal,
            speed: $speed:ident,
            armed: $armed:ident,
            debounce: $key:literal, |$dc:pat_param| $debounce:expr,
            condition: $kind:ident $(|$cx:ident| $cond:expr)?,
            record: |$rx:pat_param| $record:expr,
        }
    )*) => {
        /// One protection of the core (an entry of the protection table in
        /// `protect.rs`); its discriminant is its bit in a
        /// [`FaultSet`].
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
        #[cfg_attr(feature = "defmt", derive(defmt::Format))]
        #[repr(u8)]
        pub enum Fault {
            $( $(#[doc = $doc])* $variant = $n, )*
        }

        impl Fault {
            /// Every fault, in bit order.
            pub const ALL: [Fault; [$($n),*].len()] = [$(Fault::$variant),*];

            /// A short, stable name (used in logs and reports).
            pub const fn name(self) -> &'static str {
                match self { $(Fault::$variant => $name,)* }
            }

            /// Unit of [`FaultRecord::measured`] and [`FaultRecord::limit`].
            pub const fn unit(self) -> &'static str {
                match self { $(Fault::$variant => $unit,)* }
            }

            /// A fast fault shuts the drive in the same `step` that sees the
            /// sample that trips it, after its debounce, which validation
            /// bounds to [`crate::FAST_DEBOUNCE_MAX_US`] (usually 1
            /// tick).
            pub const fn is_fast(self) -> bool {
                match self { $(Fault::$variant => protections!(@is $speed fast),)* }
            }

            /// Whether this fault is latched outside [`crate::Controller::step`]
            /// (by the hardware edge on a failed call, [`crate::DriverBoard`], or at
            /// boot, [`crate::LatchRecord`]) rather than by a protection on a
            /// sample.
            pub const fn is_latched_outside_step(self) -> bool {
                match self { $(Fault::$variant => protections!(@is $speed edge),)* }
            }

            /// The configuration key of this fault's debounce, as in
            /// [`crate::Config`].
            pub const fn debounce_key(self) -> &'static str {
                match self { $(Fault::$variant => $key,)* }
            }

            /// The debounce of this fault in `c`, ticks.
            pub fn debounce_ticks(self, c: &Config) -> u16 {
                match self { $(Fault::$variant => { let $dc = c; $debounce })* }
            }
        }

        /// Faults armed in every state.
        const ALWAYS_ARMED: u32 = 0 $(| protections!(@bit_if $armed always $variant))*;
        /// Faults armed from Arming to Stopping.
        const ACTIVE_ARMED: u32 =
            ALWAYS_ARMED $(| protections!(@bit_if $armed active $variant))*;
        /// Faults armed while ramping or regulating.
        const DRIVING_ARMED: u32 =
            ACTIVE_ARMED $(| protections!(@bit_if $armed driving $variant))*;

        /// Whether no `tick` condition is present and `direct` is empty: the
        /// negation of every comparison in [`present_mask`], tested one
        /// after the other so that the usual tick stops at none and builds
        /// no mask.
        #[inline]
        fn quiet<F: Fn() -> Fx>(ctx: &Ctx<'_, F>) -> bool {
            ctx.direct == 0 $(&& protections!(@quiet $kind ctx $(|$cx| $cond)?))*
        }

        /// The conditions present in one sample, as a mask: `direct` and
        /// every `tick` condition.
        #[inline]
        fn present_mask<F: Fn() -> Fx>(ctx: &Ctx<'_, F>) -> u32 {
            ctx.direct $(| protections!(@mask $kind tick ctx $variant $(|$cx| $cond)?))*
        }

        /// The conditions read straight off the sample, as a mask.
        #[inline]
        fn direct_mask(raw: &Raw) -> u32 {
            0 $(| protections!(@mask $kind direct raw $variant $(|$cx| $cond)?))*
        }

        /// The forward-voltage conditions present, as a mask.
        #[inline]
        fn forward_mask(f: &Forward<'_>) -> u32 {
            0 $(| protections!(@mask $kind forward f $variant $(|$cx| $cond)?))*
        }

        /// The slow conditions present, as a mask.
        #[inline]
        fn slow_mask(ctx: &Slow) -> u32 {
            0 $(| protections!(@mask $kind slow ctx $variant $(|$cx| $cond)?))*
        }

        /// What the record of a tripped fault holds: the measured value
        /// and the limit it reached, in [`Fault::unit`]. Computed only when
        /// a fault trips; out of line, so that no record is computed before
        /// it is needed.
        #[inline(never)]
        fn trip_values(cfg: &ValidConfig, m: &Measurements, last_cmd_iu: Fx, fault: Fault) -> (Fx, Fx) {
            let ctx = Ctx::plain(cfg, m, last_cmd_iu);
            match fault {
                $(Fault::$variant => { let $rx = &ctx; $record })*
            }
        }
    };
    (@is $speed:ident $want:ident) => { protections!(@eq $speed $want) };
    (@eq fast fast) => { true };
    (@eq edge edge) => { true };
    (@eq $a:ident $b:ident) => { false };
    (@bit_if always always $v:ident) => { Fault::$v.bit() };
    (@bit_if active active $v:ident) => { Fault::$v.bit() };
    (@bit_if driving driving $v:ident) => { Fault::$v.bit() };
    (@bit_if $a:ident $b:ident $v:ident) => { 0 };
    (@quiet tick $ctx:ident |$cx:ident| $cond:expr) => { !{ let $cx = $ctx; $cond } };
    (@quiet $kind:ident $ctx:ident $($rest:tt)*) => { true };
    (@mask tick tick $ctx:ident $v:ident |$cx:ident| $cond:expr) => {
        if { let $cx = $ctx; $cond } { Fault::$v.bit() } else { 0 }
    };
    (@mask direct direct $ctx:ident $v:ident |$cx:ident| $cond:expr) => {
        if { let $cx = $ctx; $cond } { Fault::$v.bit() } else { 0 }
    };
    (@mask forward forward $ctx:ident $v:ident |$cx:ident| $cond:expr) => {
        if { let $cx = $ctx; $cond } { Fault::$v.bit() } else { 0 }
    };
    (@mask slow slow $ctx:ident $v:ident |$cx:ident| $cond:expr) => {
        if { let $cx = $ctx; $cond } { Fault::$v.bit() } else { 0 }
    };
    (@mask $kind:ident $want:ident $ctx:ident $($rest:tt)*) => { 0 };
}

protections! {
    /// Sensed drive current at or above the overcurrent limit (fast).
    Overcurrent = 0 {
        name: "overcurrent",
        unit: "iu",
        speed: fast,
        armed: always,
        debounce: "protection.overcurrent_debounce", |c| c.protection.overcurrent_debounce,
        condition: tick |x| x.m.current_iu >= x.p.overcurrent_iu,
        record: |x| (x.m.current_iu, x.p.overcurrent_iu),
    }
    /// Monitor (back-facet) power at or above the runaway limit (fast).
    MonitorRunaway = 1 {
        name: "monitor-runaway",
        unit: "ou",
        speed: fast,
        armed: always,
        debounce: "protection.runaway_debounce", |c| c.protection.runaway_debounce,
        condition: tick |x| x.m.monitor_ou >= x.p.runaway_ou,
        record: |x| (x.m.monitor_ou, x.p.runaway_ou),
    }
    /// Drive at or above the "light expected" level (or, in APC regulation,
    /// on a lower ceiling in force) while the monitor reads at or below its
    /// floor: open photodiode, no light, dead diode.
    MonitorLoss = 2 {
        name: "monitor-loss",
        unit: "ou",
        speed: tick,
        armed: driving,
        debounce: "protection.monitor_loss_debounce", |c| c.protection.monitor_loss_debounce,
        condition: tick |x| x.m.monitor_ou <= x.p.monitor_loss_floor_ou
            && x.last_cmd_iu > Fx::ZERO
            && x.last_cmd_iu >= (x.light_expected_iu)(),
        record: |x| (x.m.monitor_ou, x.p.monitor_loss_floor_ou),
    }
    /// Temperature sensor reads at the open-circuit rail.
    SensorOpen = 3 {
        name: "sensor-open",
        unit: "counts",
        speed: tick,
        armed: active,
        debounce: "protection.sensor_debounce", |c| c.protection.sensor_debounce,
        condition: direct |r| r.rails & Fault::SensorOpen.bit() != 0,
        record: |x| (counts(x.m.temp_counts), counts(x.open_rail_counts())),
    }
    /// Temperature sensor reads at the short-circuit rail.
    SensorShort = 4 {
        name: "sensor-short",
        unit: "counts",
        speed: tick,
        armed: active,
        debounce: "protection.sensor_debounce", |c| c.protection.sensor_debounce,
        condition: direct |r| r.rails & Fault::SensorShort.bit() != 0,
        record: |x| (counts(x.m.temp_counts), counts(x.short_rail_counts())),
    }
    /// Temperature at or above the derating cut-off (not while the sensor
    /// reads at a rail).
    OverTemperature = 5 {
        name: "over-temperature",
        unit: "degC",
        speed: tick,
        armed: active,
        debounce: "protection.over_temp_debounce", |c| c.protection.over_temp_debounce,
        condition: tick |x| x.direct & SENSOR_RAILS == 0 && x.m.temp_degc >= x.c.derating.cutoff_degc,
        record: |x| (x.m.temp_degc, x.c.derating.cutoff_degc),
    }
    /// Safety interlock open while emitting (fast).
    InterlockOpen = 6 {
        name: "interlock-open",
        unit: "closed(1)/open(0)",
        speed: fast,
        armed: active,
        debounce: "protection.interlock_debounce", |c| c.protection.interlock_debounce,
        condition: tick |x| !x.m.interlock_closed,
        record: |x| (Fx::from_num(u8::from(x.m.interlock_closed)), Fx::ONE),
    }
    /// Supply at or below its minimum.
    SupplyUnder = 7 {
        name: "supply-under",
        unit: "vu",
        speed: tick,
        armed: active,
        debounce: "protection.supply_debounce", |c| c.protection.supply_debounce,
        condition: tick |x| x.m.supply_vu <= x.p.supply_min_vu,
        record: |x| (x.m.supply_vu, x.p.supply_min_vu),
    }
    /// Supply at or above its maximum.
    SupplyOver = 8 {
        name: "supply-over",
        unit: "vu",
        speed: tick,
        armed: active,
        debounce: "protection.supply_debounce", |c| c.protection.supply_debounce,
        condition: tick |x| x.m.supply_vu >= x.p.supply_max_vu,
        record: |x| (x.m.supply_vu, x.p.supply_max_vu),
    }
    /// Sensed current differs from the command beyond tolerance (fast once
    /// debounced): DAC or current-source failure.
    DriveMismatch = 9 {
        name: "drive-mismatch",
        unit: "iu",
        speed: fast,
        armed: always,
        debounce: "protection.mismatch_debounce", |c| c.protection.mismatch_debounce,
        condition: tick |x| !mismatch_within(x.cfg, x.m, x.last_cmd_iu),
        record: |x| (mismatch_iu(x.m, x.last_cmd_iu), x.p.mismatch_tolerance_iu),
    }
    /// A gap in the tick index: the board missed control ticks.
    MissedTicks = 10 {
        name: "missed-ticks",
        unit: "ticks",
        speed: tick,
        armed: active,
        debounce: "(none: 1 tick)", |_| 1,
        condition: tick |x| x.m.missed_ticks >= u32::from(x.p.missed_tick_limit)
            && x.m.missed_ticks < TICK_ORDER_MISSED,
        record: |x| (
            saturating_fx(x.m.missed_ticks),
            saturating_fx(u32::from(x.p.missed_tick_limit)),
        ),
    }
    /// The tick index repeated or went backward: the tick source stalled,
    /// or a sample was delivered twice.
    TickOrder = 11 {
        name: "tick-order",
        unit: "ticks (index step)",
        speed: tick,
        armed: active,
        debounce: "(none: 1 tick)", |_| 1,
        // (At or above the missed-tick limit too, which is below
        // TICK_ORDER_MISSED: one comparison clears both on a usual tick.)
        condition: tick |x| x.m.missed_ticks >= u32::from(x.p.missed_tick_limit)
            && x.m.missed_ticks >= TICK_ORDER_MISSED,
        // The index step (0 repeated, negative backward) and the smallest
        // accepted step.
        record: |x| (Fx::saturating_from_num(x.m.missed_ticks.wrapping_add(1) as i32), Fx::ONE),
    }
    /// The sensed current is more than the healthy diode needs for the
    /// measured power at the measured temperature, beyond the aging margin:
    /// a degrading monitor (the real power is above what it reads) or a
    /// diode at its end of life.
    PowerImplausible = 12 {
        name: "power-implausible",
        unit: "iu",
        speed: slow,
        armed: driving,
        debounce: "plausibility.debounce",
            |c| c.plausibility.as_ref().map_or(1, |pl| pl.debounce),
        condition: slow |x| x.plausibility.is_some_and(|(_, fault, _)| fault),
        // The bound at the tripping sample.
        record: |x| (
            x.m.current_iu,
            x.c.plausibility.as_ref().map_or(Fx::MAX, |pl| plausibility(pl, x.m).2),
        ),
    }
    /// Forward voltage at the current source's compliance while driving:
    /// the diode (or its wiring) is open.
    DiodeOpen = 13 {
        name: "diode-open",
        unit: "vu",
        speed: tick,
        armed: driving,
        debounce: "forward_voltage.debounce", |c| c.forward_voltage.map_or(1, |f| f.debounce),
        condition: forward |f| f.mv >= f.fv.open_vu,
        record: |x| (x.m.forward_vu, x.c.forward_voltage.map_or(Fx::ZERO, |f| f.open_vu)),
    }
    /// Forward voltage below its floor while driving: the diode is shorted.
    DiodeShort = 14 {
        name: "diode-short",
        unit: "vu",
        speed: tick,
        armed: driving,
        debounce: "forward_voltage.debounce", |c| c.forward_voltage.map_or(1, |f| f.debounce),
        condition: forward |f| f.mv <= f.fv.short_vu,
        record: |x| (x.m.forward_vu, x.c.forward_voltage.map_or(Fx::ZERO, |f| f.short_vu)),
    }
    /// The board's external fault input is asserted (a hardware comparator
    /// trip, a watchdog pre-warning) (fast).
    ExternalFault = 15 {
        name: "external-fault",
        unit: "asserted(1)",
        speed: fast,
        armed: always,
        debounce: "protection.external_debounce", |c| c.protection.external_debounce,
        condition: direct |r| r.external,
        record: |x| (Fx::from_num(u8::from(x.m.external_fault)), Fx::ONE),
    }
    /// A write to the current DAC failed (the edge, [`crate::DriverBoard`]).
    /// Measured: the code written; limit: the configuration's largest code.
    DacBus = 16 {
        name: "dac-bus",
        unit: "code",
        speed: edge,
        armed: never,
        debounce: "(none: latched by the edge)", |_| 1,
        condition: edge,
        record: |_| (Fx::ZERO, Fx::ZERO),
    }
    /// The enable line could not be driven (the edge). Measured: the level
    /// the edge tried to drive; limit: the safe level, low (0).
    EnablePin = 17 {
        name: "enable-pin",
        unit: "high(1)/low(0)",
        speed: edge,
        armed: never,
        debounce: "(none: latched by the edge)", |_| 1,
        condition: edge,
        record: |_| (Fx::ZERO, Fx::ZERO),
    }
    /// The interlock input could not be read (the edge); the read counts
    /// as open. Measured: 0 (read as open); limit: 1 (closed).
    InterlockPin = 18 {
        name: "interlock-pin",
        unit: "closed(1)/open(0)",
        speed: edge,
        armed: never,
        debounce: "(none: latched by the edge)", |_| 1,
        condition: edge,
        record: |_| (Fx::ZERO, Fx::ZERO),
    }
    /// The latch record stored before a reset was refused at boot
    /// ([`crate::LatchRecord`]): the controller starts latched. Measured: the
    /// cause ([`crate::RestoreError::code`]); limit: 0.
    RecordCorrupt = 19 {
        name: "record-corrupt",
        unit: "cause(1 erased, 2 check, 3 format)",
        speed: edge,
        armed: never,
        debounce: "(none: latched by the edge)", |_| 1,
        condition: edge,
        record: |_| (Fx::ZERO, Fx::ZERO),
    }
}

/// What a `tick`, `slow` condition or a record of the table reads: the
/// sample's measurements and the configuration.
struct Ctx<'a, F> {
    cfg: &'a ValidConfig,
    c: &'a Config,
    p: &'a Protection,
    m: &'a Measurements,
    /// The conditions read straight off the sample ([`direct_mask`]).
    direct: u32,
    /// The command that produced the sample, iu.
    last_cmd_iu: Fx,
    /// The command at or above which the monitor must see light, iu
    /// (evaluated only when needed).
    light_expected_iu: F,
}

impl<'a> Ctx<'a, fn() -> Fx> {
    /// A context without `direct` and the monitor-loss drive (for a
    /// record).
    fn plain(cfg: &'a ValidConfig, m: &'a Measurements, last_cmd_iu: Fx) -> Self {
        let c = cfg.config();
        Ctx {
            cfg,
            c,
            p: &c.protection,
            m,
            direct: 0,
            last_cmd_iu,
            light_expected_iu: || Fx::ZERO,
        }
    }
}

impl<F> Ctx<'_, F> {
    /// The temperature counts of the open-circuit rail.
    fn open_rail_counts(&self) -> u16 {
        let tc = &self.c.calibration.temperature;
        match tc.open_rail {
            Rail::High => tc.high_fault_counts,
            Rail::Low => tc.low_fault_counts,
        }
    }

    /// The temperature counts of the short-circuit rail.
    fn short_rail_counts(&self) -> u16 {
        let tc = &self.c.calibration.temperature;
        match tc.open_rail {
            Rail::High => tc.low_fault_counts,
            Rail::Low => tc.high_fault_counts,
        }
    }
}

/// What a `slow` condition of the table reads: the verdicts of the slow
/// evaluations, each made once per evaluation.
struct Slow {
    /// [`plausibility`] of the sample, when configured.
    plausibility: Option<(bool, bool, Fx)>,
}

/// What a `direct` condition of the table reads: the raw sample, before
/// calibration.
struct Raw {
    /// The sensor-rail conditions, as mask bits (the rail each reading is
    /// at, mapped to open or short at validation).
    rails: u32,
    /// The external fault input is asserted.
    external: bool,
}

/// The sensor-rail conditions (open, short) as a mask: a reading at a rail
/// is no temperature.
const SENSOR_RAILS: u32 = Fault::SensorOpen.bit() | Fault::SensorShort.bit();

/// What a `forward` condition of the table reads: the forward-voltage
/// channel, on a board that measures it, while the command that produced
/// the sample is at or above its `min_drive_iu` (driving).
struct Forward<'a> {
    /// The forward voltage, vu.
    mv: Fx,
    /// Its configuration.
    fv: &'a ForwardVoltage,
}

/// Counts above the Fx range (32 767) saturate in the records.
fn counts(n: u16) -> Fx {
    Fx::saturating_from_num(n)
}

/// Calibrated measurements of one sample, plus the tick gap.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Measurements {
    /// Monitor reading, front-facet ou.
    pub monitor_ou: Fx,
    /// Sensed drive current, iu.
    pub current_iu: Fx,
    /// Temperature, degC (meaningless while `sensor_at_rail`).
    pub temp_degc: Fx,
    /// Raw temperature counts.
    pub temp_counts: u16,
    /// Temperature sensor reads at a fault rail.
    pub sensor_at_rail: bool,
    /// Supply, vu.
    pub supply_vu: Fx,
    /// Interlock closed.
    pub interlock_closed: bool,
    /// Ticks missing before this sample: the index step less one (0 when
    /// it stepped by one). A repeated index reads `u32::MAX` and a backward
    /// one at least `2^31 - 1` ([`Fault::TickOrder`]).
    pub missed_ticks: u32,
    /// Forward voltage, vu (zero on a board without the channel).
    pub forward_vu: Fx,
    /// The external fault input is asserted.
    pub external_fault: bool,
}

/// How often the slow protections (current-for-power plausibility) are
/// evaluated, ticks (a power of two: the tick index's low bits are zero).
pub const SLOW_EVERY: u32 = 32;

/// A `missed_ticks` at or above this is a repeated or backward index.
const TICK_ORDER_MISSED: u32 = i32::MAX as u32;

/// What a temperature reading alone gives: the temperature and the sensor
/// rail conditions (the configuration is fixed, so the same reading always
/// gives the same).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct TempReading {
    /// The temperature, degC (meaningless while `rails` is not zero).
    pub degc: Fx,
    /// The sensor-rail conditions (open, short) of the reading, as mask
    /// bits: zero exactly when the sensor is not at a rail.
    pub rails: u32,
}

impl TempReading {
    /// Convert the temperature reading `counts`. `window` is the temperature
    /// table window of the previous conversion (updated; see
    /// [`crate::temp_table::degc_cached`]).
    #[inline]
    pub(crate) fn of(cfg: &ValidConfig, counts: u16, window: &mut Window) -> Self {
        let degc = cfg.counts_to_degc_cached(counts, window);
        let tc = &cfg.config().calibration.temperature;
        // The rail faults (open or short, per the configured open rail) as
        // mask bits derived at validation (both non-zero).
        let rails = if counts <= tc.low_fault_counts {
            cfg.t.low_rail_bit
        } else {
            0
        } | if counts >= tc.high_fault_counts {
            cfg.t.high_rail_bit
        } else {
            0
        };
        TempReading { degc, rails }
    }
}

impl Measurements {
    /// Calibrate a sample, whose temperature reading is `t`
    /// ([`TempReading::of`] its `temp_counts`); `last_cmd_iu` the command
    /// that produced the sample. Also returns the conditions read straight
    /// off the sample (sensor open, short; external fault; diode open,
    /// short) as a mask, for [`Protections::check`]; its sensor bits are
    /// empty exactly when `sensor_at_rail` is false.
    #[inline]
    pub(crate) fn from_sample(
        cfg: &ValidConfig,
        s: &crate::io::Sample,
        missed_ticks: u32,
        last_cmd_iu: Fx,
        t: TempReading,
    ) -> (Self, u32) {
        let rails = t.rails;
        // (`rails` already holds the sensor conditions of the table: the
        // union only spares their re-derivation.)
        let mut direct = rails
            | direct_mask(&Raw {
                rails,
                external: s.external_fault,
            });
        let mut forward_vu = Fx::ZERO;
        if let (Some(fv), Some(counts)) = (&cfg.config().forward_voltage, s.forward_counts) {
            forward_vu = scale_counts(
                i32::from(counts) - fv.cal.offset_counts,
                fv.cal.units_per_count,
            );
            if last_cmd_iu >= fv.min_drive_iu {
                direct |= forward_mask(&Forward { mv: forward_vu, fv });
            }
        }
        let m = Measurements {
            monitor_ou: cfg.monitor_ou(s.monitor_counts),
            current_iu: cfg.current_iu(s.current_counts),
            temp_degc: t.degc,
            temp_counts: s.temp_counts,
            sensor_at_rail: rails != 0,
            supply_vu: cfg.supply_vu(s.supply_counts),
            interlock_closed: s.interlock_closed,
            missed_ticks,
            forward_vu,
            external_fault: s.external_fault,
        };
        (m, direct)
    }
}

/// The leaky debounce level of every protection, and the slow conditions.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(crate) struct Protections {
    /// Indexed by a fault's bit; the slots of no fault stay zero (a bit
    /// index masked to 0..32 needs no bounds check).
    levels: [u32; SLOTS],
    /// Bit mask (as [`FaultSet`]) of the levels that are not zero.
    counting: u32,
    /// Slow conditions present at their latest evaluation, held.
    slow: u32,
    /// `counting | slow`: whether a tick without conditions has work.
    busy: u32,
}

/// Result of one evaluation.
pub(crate) struct Verdict {
    /// Conditions present in this sample (not debounced).
    pub present: FaultSet,
    /// Faults that tripped on this sample.
    pub tripped: FaultSet,
}

/// The faults armed in `state`, as a mask.
const fn armed(state: State) -> u32 {
    match state {
        State::Off | State::Latched => ALWAYS_ARMED,
        State::Arming | State::Stopping => ACTIVE_ARMED,
        State::Ramping | State::Regulating => DRIVING_ARMED,
    }
}

fn saturating_fx(v: u32) -> Fx {
    Fx::checked_from_num(v).unwrap_or(Fx::MAX)
}

/// `|sensed - commanded|`, iu.
fn mismatch_iu(m: &Measurements, last_cmd_iu: Fx) -> Fx {
    m.current_iu.saturating_sub(last_cmd_iu).saturating_abs()
}

/// `|sensed - commanded| < tolerance` (the absolute value saturating, as
/// [`mismatch_iu`]), as a window of the difference: the same test for
/// every tolerance (the negated tolerance is derived at validation,
/// wrapping, so a tolerance of `Fx::MIN` gives an empty window as the
/// saturated absolute value does).
#[inline]
fn mismatch_within(cfg: &ValidConfig, m: &Measurements, last_cmd_iu: Fx) -> bool {
    difference_within(
        m.current_iu,
        last_cmd_iu,
        cfg.config().protection.mismatch_tolerance_iu,
        cfg.t.neg_mismatch_tolerance_iu,
    )
}

/// `|a - b|` (saturating) below `tol`, with `neg_tol = tol.wrapping_neg()`.
#[inline]
fn difference_within(a: Fx, b: Fx, tol: Fx, neg_tol: Fx) -> bool {
    let diff = a.saturating_sub(b);
    diff > neg_tol && diff < tol
}

/// Record the `tripped` faults (a mask) in the log, in bit order. Out of
/// line: it runs on a step that trips.
#[cold]
#[inline(never)]
fn record_trips(
    log: &mut FaultLog,
    cfg: &ValidConfig,
    m: &Measurements,
    last_cmd_iu: Fx,
    tripped: u32,
    tick: u32,
) {
    let mut todo = tripped;
    while todo != 0 {
        let i = todo.trailing_zeros();
        todo &= todo - 1;
        if let Some(fault) = Fault::from_index(i as u8) {
            let (measured, limit) = trip_values(cfg, m, last_cmd_iu, fault);
            log.record(FaultRecord {
                fault,
                tick,
                measured,
                limit,
            });
        }
    }
}

/// Current-for-power plausibility of one sample: whether the sensed
/// current is above the warning bound and above the fault bound, and the
/// fault bound, iu (see [`Plausibility`]). Nothing is implausible while the
/// temperature sensor is at a rail (its own protection covers that).
pub(crate) fn plausibility(pl: &Plausibility, m: &Measurements) -> (bool, bool, Fx) {
    if m.sensor_at_rail {
        return (false, false, Fx::MAX);
    }
    let (threshold_iu, slope) = diode_at(pl, m.temp_degc);
    let power = m.monitor_ou.max(Fx::ZERO);
    // (Validation keeps every slope positive; a zero one reads as infinite.)
    let need_iu = threshold_iu.saturating_add(power.checked_div(slope).unwrap_or(Fx::MAX));
    let bound = |margin: Fx| {
        need_iu
            .saturating_add(need_iu.saturating_mul(margin))
            .saturating_add(pl.allowance_iu)
    };
    let fault_max = bound(pl.fault_margin);
    (
        m.current_iu > bound(pl.warning_margin),
        m.current_iu > fault_max,
        fault_max,
    )
}

/// The healthy diode's threshold (iu) and slope (ou/iu) at `degc`: linear
/// between the points, held at the end points outside them.
fn diode_at(pl: &Plausibility, degc: Fx) -> (Fx, Fx) {
    let (Some(first), Some(last)) = (pl.points.first(), pl.points.last()) else {
        return (Fx::ZERO, Fx::MAX);
    };
    if degc <= first.degc {
        return (first.threshold_iu, first.slope_ou_per_iu);
    }
    for w in pl.points.windows(2) {
        if let [a, b] = w {
            if degc <= b.degc {
                let lerp = |ya: Fx, yb: Fx| {
                    let num = i64::from(degc.to_bits()) - i64::from(a.degc.to_bits());
                    let den = i64::from(b.degc.to_bits()) - i64::from(a.degc.to_bits());
                    let dy = i64::from(yb.to_bits()) - i64::from(ya.to_bits());
                    // 0 <= num <= den < 2^32 and |dy| < 2^32: the
                    // quotient is within |dy|.
                    let step = if den > 0 {
                        dy.saturating_mul(num) / den
                    } else {
                        0
                    };
                    Fx::from_bits(crate::units::sat_i32(
                        i64::from(ya.to_bits()).saturating_add(step),
                    ))
                };
                return (
                    lerp(a.threshold_iu, b.threshold_iu),
                    lerp(a.slope_ou_per_iu, b.slope_ou_per_iu),
                );
            }
        }
    }
    (last.threshold_iu, last.slope_ou_per_iu)
}

impl Protections {
    /// Forget all debounce history (after an accepted clear).
    pub(crate) fn reset(&mut self) {
        self.levels = [0; SLOTS];
        self.counting = 0;
        self.busy = self.slow;
    }

    /// Evaluate the slow protections on one sample (the controller calls
    /// this every [`SLOW_EVERY`] ticks); their conditions are held until the
    /// next evaluation. Returns the end-of-life warning.
    #[cold]
    #[inline(never)]
    pub(crate) fn evaluate_slow(&mut self, cfg: &ValidConfig, m: &Measurements) -> bool {
        let slow = Slow {
            plausibility: cfg
                .config()
                .plausibility
                .as_ref()
                .map(|pl| plausibility(pl, m)),
        };
        self.slow = slow_mask(&slow);
        self.busy = self.counting | self.slow;
        slow.plausibility.is_some_and(|(warn, _, _)| warn)
    }

    /// Evaluate every protection on one sample. `last_cmd_iu` is the current
    /// the source was commanded during the tick that produced the sample
    /// (zero when it was disabled); `light_expected_iu` the command at or
    /// above which the monitor must see light (see
    /// [`crate::controller`]: the configured monitor-loss drive, or a lower
    /// ceiling in force while regulating); `direct` the conditions read
    /// straight off the sample ([`Measurements::from_sample`]). Tripped
    /// faults not already in `active` are recorded in `log`, in bit order.
    ///
    /// The usual tick (no condition present, no level above zero) costs
    /// the comparisons of [`quiet`]; the mask is built only when a
    /// condition is present, and the levels are walked only when one is
    /// present or above zero, and then only for those faults.
    #[inline(always)]
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn check(
        &mut self,
        cfg: &ValidConfig,
        m: &Measurements,
        direct: u32,
        tick: u32,
        last_cmd_iu: Fx,
        light_expected_iu: impl Fn() -> Fx,
        state: State,
        active: FaultSet,
        log: &mut FaultLog,
    ) -> Verdict {
        let c = cfg.config();
        let ctx = Ctx {
            cfg,
            c,
            p: &c.protection,
            m,
            direct,
            last_cmd_iu,
            light_expected_iu,
        };
        let calm = quiet(&ctx);
        if calm && self.busy == 0 {
            return Verdict {
                present: FaultSet::EMPTY,
                tripped: FaultSet::EMPTY,
            };
        }
        // A level decaying after its condition went needs no mask.
        let present = if calm { 0 } else { present_mask(&ctx) } | self.slow;
        let may_trip = armed(state) & !active.bits();
        let tripped = self.walk(cfg.t.weight, &cfg.t.trip_at, present) & may_trip;
        if tripped != 0 {
            record_trips(log, cfg, m, last_cmd_iu, tripped, tick);
        }
        Verdict {
            // (Both masks hold faults' bits only.)
            present: FaultSet::of_faults(present),
            tripped: FaultSet::of_faults(tripped),
        }
    }

    /// Move the levels of the faults present or counting (`present`: the
    /// conditions of this sample; `weight` and `trip_levels` (`trip_at`) as in
    /// [`crate::config`]'s per-tick quantities) and return those present
    /// whose level reached its `trip_at` (the caller keeps those it may
    /// trip). A level that falls is below its `trip_at`: only a present
    /// fault can reach it. Out of line: the usual tick does not come here.
    #[inline(never)]
    fn walk(&mut self, weight: u32, trip_levels: &[u32; SLOTS], present: u32) -> u32 {
        let mut reached = 0;
        let mut counting = 0;
        // The faults present rise (every other level is zero already or
        // falls below). (`todo` is not zero in the loops: its lowest bit
        // is below 32; both arrays have `SLOTS` entries: no check is left.)
        let mut todo = present;
        while todo != 0 {
            let i = todo.trailing_zeros() as usize % SLOTS;
            todo &= todo - 1;
            let (Some(level), Some(&trip_at)) = (self.levels.get_mut(i), trip_levels.get(i)) else {
                continue;
            };
            // (A level never exceeds its `trip_at`, at most 255 × 65 535
            // < 2^24, and `weight` is at most 255: no overflow.)
            let now = level.wrapping_add(weight).min(trip_at);
            *level = now;
            // The bit of fault `i` (a fault's bit is its discriminant).
            let b = 1u32 << i;
            if now >= trip_at {
                reached |= b;
            }
            if now != 0 {
                counting |= b;
            }
        }
        // The faults counting and not present fall.
        let mut todo = self.counting & !present;
        while todo != 0 {
            let i = todo.trailing_zeros() as usize % SLOTS;
            todo &= todo - 1;
            let Some(level) = self.levels.get_mut(i) else {
                continue;
            };
            let now = level.saturating_sub(1);
            *level = now;
            if now != 0 {
                counting |= 1u32 << i;
            }
        }
        self.counting = counting;
        self.busy = counting | self.slow;
        reached
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 64-bit LCG (Knuth's MMIX constants, `common practice`).
    struct Lcg(u64);

    impl Lcg {
        fn next(&mut self) -> u32 {
            self.0 = self
                .0
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (self.0 >> 32) as u32
        }

        /// Any `Fx`, or one within a few LSB or a few units of `near`.
        fn fx_near(&mut self, near: Fx) -> Fx {
            let r = self.next();
            match r % 4 {
                0 => Fx::from_bits(self.next() as i32),
                1 => near.saturating_add(Fx::from_bits(((r >> 8) % 7) as i32 - 3)),
                2 => near.saturating_add(Fx::from_bits(((r >> 8) % 0x4_0000) as i32 - 0x2_0000)),
                _ => [Fx::MIN, Fx::ZERO, Fx::MAX, near][(r >> 8) as usize % 4],
            }
        }
    }

    #[test]
    fn the_healthy_diode_is_interpolated_and_held_at_the_ends() {
        use crate::config::DiodePoint;
        let pt = |t: i32, th: i32, sl: f64| DiodePoint {
            degc: Fx::from_num(t),
            threshold_iu: Fx::from_num(th),
            slope_ou_per_iu: Fx::from_num(sl),
        };
        let pl = Plausibility {
            points: heapless::Vec::from_slice(&[pt(0, 20, 1.0), pt(40, 40, 0.5), pt(80, 80, 0.25)])
                .unwrap(),
            warning_margin: Fx::from_num(0.25),
            fault_margin: Fx::from_num(0.5),
            allowance_iu: Fx::ONE,
            debounce: 1,
        };
        let at = |t: i32| diode_at(&pl, Fx::from_num(t));
        let f = |th: f64, sl: f64| (Fx::from_num(th), Fx::from_num(sl));
        assert_eq!(at(-10), f(20.0, 1.0));
        assert_eq!(at(0), f(20.0, 1.0));
        assert_eq!(at(20), f(30.0, 0.75));
        assert_eq!(at(40), f(40.0, 0.5));
        assert_eq!(at(60), f(60.0, 0.375));
        assert_eq!(at(80), f(80.0, 0.25));
        assert_eq!(at(100), f(80.0, 0.25));
        // At 20 degC and 15 mW the healthy diode needs 30 + 15/0.75 = 50 mA:
        // the warning bound is 50 × 1.25 + 1 = 63.5 mA, the fault bound
        // 50 × 1.5 + 1 = 76 mA; each is the last plausible current.
        let m = |ma: Fx| Measurements {
            monitor_ou: Fx::from_num(15),
            current_iu: ma,
            temp_degc: Fx::from_num(20),
            ..Measurements::default()
        };
        let (warn, fault) = (Fx::from_num(63.5), Fx::from_num(76));
        assert_eq!(plausibility(&pl, &m(warn)), (false, false, fault));
        assert_eq!(
            plausibility(&pl, &m(warn + Fx::DELTA)),
            (true, false, fault)
        );
        assert_eq!(plausibility(&pl, &m(fault)), (true, false, fault));
        assert_eq!(
            plausibility(&pl, &m(fault + Fx::DELTA)),
            (true, true, fault)
        );
        // No verdict while the sensor is at a rail.
        let rail = Measurements {
            sensor_at_rail: true,
            ..m(Fx::MAX)
        };
        assert_eq!(plausibility(&pl, &rail), (false, false, Fx::MAX));
    }

    #[test]
    fn difference_window_equals_the_saturated_absolute_difference() {
        let mut rng = Lcg(11);
        let extremes = [
            Fx::MIN,
            Fx::from_bits(i32::MIN + 1),
            -Fx::ONE,
            Fx::ZERO,
            Fx::ONE,
            Fx::MAX,
        ];
        for _ in 0..300_000 {
            let a = rng.fx_near(Fx::ZERO);
            let b = rng.fx_near(a);
            let tol = if rng.next().is_multiple_of(8) {
                extremes[rng.next() as usize % extremes.len()]
            } else {
                rng.fx_near(Fx::from_num(5))
            };
            let want = a.saturating_sub(b).saturating_abs() < tol;
            assert_eq!(
                difference_within(a, b, tol, tol.wrapping_neg()),
                want,
                "{a} {b} {tol}"
            );
        }
    }

    /// The mask as first written: sensor rails from the open rail, the
    /// mismatch from the saturated absolute difference, the monitor-loss
    /// terms in their first order.
    fn reference_mask(
        cfg: &ValidConfig,
        m: &Measurements,
        last_cmd_iu: Fx,
        light_expected_iu: Fx,
    ) -> u32 {
        let c = cfg.config();
        let p = &c.protection;
        let tc = &c.calibration.temperature;
        let at_low = m.temp_counts <= tc.low_fault_counts;
        let at_high = m.temp_counts >= tc.high_fault_counts;
        let (open, short) = match tc.open_rail {
            Rail::High => (at_high, at_low),
            Rail::Low => (at_low, at_high),
        };
        let flag = |on: bool, fault: Fault| if on { fault.bit() } else { 0 };
        flag(m.current_iu >= p.overcurrent_iu, Fault::Overcurrent)
            | flag(m.monitor_ou >= p.runaway_ou, Fault::MonitorRunaway)
            | flag(
                last_cmd_iu >= light_expected_iu
                    && last_cmd_iu > Fx::ZERO
                    && m.monitor_ou <= p.monitor_loss_floor_ou,
                Fault::MonitorLoss,
            )
            | flag(open, Fault::SensorOpen)
            | flag(short, Fault::SensorShort)
            | flag(
                !m.sensor_at_rail && m.temp_degc >= c.derating.cutoff_degc,
                Fault::OverTemperature,
            )
            | flag(!m.interlock_closed, Fault::InterlockOpen)
            | flag(m.supply_vu <= p.supply_min_vu, Fault::SupplyUnder)
            | flag(m.supply_vu >= p.supply_max_vu, Fault::SupplyOver)
            | flag(
                mismatch_iu(m, last_cmd_iu) >= p.mismatch_tolerance_iu,
                Fault::DriveMismatch,
            )
            | flag(
                (u32::from(p.missed_tick_limit)..=i32::MAX as u32 - 1).contains(&m.missed_ticks),
                Fault::MissedTicks,
            )
            | flag(m.missed_ticks > i32::MAX as u32 - 1, Fault::TickOrder)
    }

    /// Over-temperature is suppressed only by a sensor at a rail, not by
    /// another direct condition (an asserted external input once hid it).
    #[test]
    fn over_temperature_is_seen_beside_an_external_fault() {
        let cfg = crate::example::config().validate().unwrap();
        let c = cfg.config();
        let m = Measurements {
            temp_degc: c.derating.cutoff_degc,
            current_iu: Fx::from_num(10),
            monitor_ou: Fx::from_num(1),
            supply_vu: (c.protection.supply_min_vu + c.protection.supply_max_vu) / 2,
            interlock_closed: true,
            external_fault: true,
            ..Measurements::default()
        };
        let mask = |direct: u32| {
            present_mask(&Ctx {
                cfg: &cfg,
                c,
                p: &c.protection,
                m: &m,
                direct,
                last_cmd_iu: m.current_iu,
                light_expected_iu: || Fx::MAX,
            })
        };
        let ext = Fault::ExternalFault.bit();
        let hot = Fault::OverTemperature.bit();
        assert_eq!(mask(ext), ext | hot);
        assert_eq!(mask(Fault::SensorOpen.bit()), Fault::SensorOpen.bit());
        let cooler = Measurements {
            temp_degc: c.derating.cutoff_degc - Fx::DELTA,
            ..m
        };
        let ctx = Ctx {
            m: &cooler,
            direct: ext,
            ..Ctx::plain(&cfg, &m, m.current_iu)
        };
        assert_eq!(present_mask(&ctx), ext);
    }

    #[test]
    fn mask_and_quiet_test_equal_the_reference_mask() {
        let mut rng = Lcg(23);
        for open_rail in [Rail::High, Rail::Low] {
            let mut c = crate::example::config();
            c.calibration.temperature.open_rail = open_rail;
            let cfg = c.validate().unwrap();
            let c = cfg.config().clone();
            let p = c.protection;
            let tc = &c.calibration.temperature;
            for _ in 0..200_000 {
                let last_cmd = rng.fx_near(Fx::from_num(40));
                let temp_counts = match rng.next() % 4 {
                    0 => rng.next() as u16,
                    1 => tc
                        .low_fault_counts
                        .saturating_add((rng.next() % 5) as u16)
                        .saturating_sub(2),
                    2 => tc
                        .high_fault_counts
                        .saturating_add((rng.next() % 5) as u16)
                        .saturating_sub(2),
                    _ => 2_048,
                };
                let sample = crate::io::Sample {
                    tick: 0,
                    monitor_counts: 0,
                    current_counts: 0,
                    temp_counts,
                    supply_counts: 0,
                    interlock_closed: true,
                    forward_counts: None,
                    external_fault: false,
                };
                let mut window = Window::NONE;
                let t = TempReading::of(&cfg, temp_counts, &mut window);
                let (base, rails) = Measurements::from_sample(&cfg, &sample, 0, Fx::ZERO, t);
                let choice = rng.next();
                let (monitor_near, current_near, supply_near) = (
                    [p.runaway_ou, p.monitor_loss_floor_ou][choice as usize % 2],
                    [p.overcurrent_iu, last_cmd][(choice >> 1) as usize % 2],
                    [p.supply_min_vu, p.supply_max_vu][(choice >> 2) as usize % 2],
                );
                let m = Measurements {
                    monitor_ou: rng.fx_near(monitor_near),
                    current_iu: rng.fx_near(current_near),
                    temp_degc: rng.fx_near(c.derating.cutoff_degc),
                    supply_vu: rng.fx_near(supply_near),
                    interlock_closed: !rng.next().is_multiple_of(16),
                    missed_ticks: match rng.next() % 8 {
                        0 => u32::MAX - rng.next() % 4,
                        1 => TICK_ORDER_MISSED - 1 + rng.next() % 3,
                        k => k - 2,
                    },
                    ..base
                };
                // Half the time the command matches the sensed current, so
                // that no mismatch hides the other comparisons from `quiet`.
                let last_cmd = if rng.next().is_multiple_of(2) {
                    m.current_iu
                } else {
                    last_cmd
                };
                let light = rng.fx_near(last_cmd);
                let want = reference_mask(&cfg, &m, last_cmd, light);
                let ctx = Ctx {
                    cfg: &cfg,
                    c: cfg.config(),
                    p: &cfg.config().protection,
                    m: &m,
                    direct: rails,
                    last_cmd_iu: last_cmd,
                    light_expected_iu: || light,
                };
                let got = present_mask(&ctx);
                assert_eq!(got, want, "{m:?} {last_cmd} {light}");
                assert_eq!(quiet(&ctx), want == 0);
            }
        }
    }

    /// The walk as it was before the present and falling faults got a
    /// loop each (and before `may_trip` moved to the caller), for the
    /// comparison below.
    fn walk_before(
        p: &mut Protections,
        weight: u32,
        trip_levels: &[u32; SLOTS],
        present: u32,
        may_trip: u32,
    ) -> u32 {
        let mut tripped = 0;
        let mut counting = 0;
        let mut todo = present | p.counting;
        while todo != 0 {
            let i = todo.trailing_zeros() as usize % SLOTS;
            todo &= todo - 1;
            let (Some(level), Some(&trip_at)) = (p.levels.get_mut(i), trip_levels.get(i)) else {
                continue;
            };
            let b = 1u32 << i;
            if present & b == 0 {
                *level = level.saturating_sub(1);
            } else {
                *level = level.wrapping_add(weight).min(trip_at);
                if *level >= trip_at && may_trip & b != 0 {
                    tripped |= b;
                }
            }
            if *level != 0 {
                counting |= b;
            }
        }
        p.counting = counting;
        p.busy = counting | p.slow;
        tripped
    }

    proptest::proptest! {
        /// The walk (levels, counting, busy and the faults tripped) equals
        /// the walk it replaced, tick after tick, for any weight, debounce
        /// counts, held slow conditions, conditions present and arming.
        #[test]
        fn walk_equals_the_walk_it_replaced(
            weight in 1u32..=255,
            debounces in proptest::collection::vec(1u32..=65_535, Fault::COUNT),
            short in proptest::collection::vec(1u32..=4, Fault::COUNT),
            slow in 0u32..=Fault::ALL_BITS,
            ticks in proptest::collection::vec((0u32..=Fault::ALL_BITS, proptest::num::u32::ANY), 1..60),
        ) {
            let mut trip_at = [0u32; SLOTS];
            for (i, t) in trip_at.iter_mut().enumerate().take(Fault::COUNT) {
                // Half the faults with a debounce of a few ticks, so that
                // levels reach their `trip_at` and fall from it.
                let n = if i % 2 == 0 { short[i] } else { debounces[i] };
                *t = weight * n;
            }
            let mut p = Protections { slow, busy: slow, ..Protections::default() };
            let mut q = p.clone();
            for (present, may_trip) in ticks {
                let want = walk_before(&mut q, weight, &trip_at, present, may_trip);
                let got = p.walk(weight, &trip_at, present) & may_trip;
                proptest::prop_assert_eq!(got, want);
                proptest::prop_assert_eq!(&p, &q);
            }
        }
    }
}
