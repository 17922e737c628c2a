//! Faults, the set of active faults, and the fault log.
//!
//! Every protection is one variant of [`Fault`]. A tripped fault latches the
//! controller; the first one is kept apart in the [`FaultLog`] and later ones
//! go into a fixed-size ring that drops the oldest entry when full.

use crate::units::Fx;

/// One protection of the core. Each has its own limit and debounce in
/// [`crate::config::Protection`]; see [`crate::protect`] for the checks.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[repr(u8)]
pub enum Fault {
    /// Sensed drive current at or above the overcurrent limit (fast).
    Overcurrent = 0,
    /// Monitor (back-facet) power at or above the runaway limit (fast).
    MonitorRunaway = 1,
    /// Drive at or above the "light expected" level (or, in APC regulation,
    /// on a lower ceiling in force) while the monitor reads at or below its
    /// floor: open photodiode, no light, dead diode.
    MonitorLoss = 2,
    /// Temperature sensor reads at the open-circuit rail.
    SensorOpen = 3,
    /// Temperature sensor reads at the short-circuit rail.
    SensorShort = 4,
    /// Temperature at or above the derating cut-off.
    OverTemperature = 5,
    /// Safety interlock open while emitting (fast).
    InterlockOpen = 6,
    /// Supply at or below its minimum.
    SupplyUnder = 7,
    /// Supply at or above its maximum.
    SupplyOver = 8,
    /// Sensed current differs from the command beyond tolerance (fast once
    /// debounced): DAC or current-source failure.
    DriveMismatch = 9,
    /// A gap in the tick index: the board missed control ticks.
    MissedTicks = 10,
    /// The tick index repeated or went backward: the tick source stalled,
    /// or a sample was delivered twice.
    TickOrder = 11,
    /// The sensed current is more than the healthy diode needs for the
    /// measured power at the measured temperature, beyond the aging margin:
    /// a degrading monitor (the real power is above what it reads) or a
    /// diode at its end of life.
    PowerImplausible = 12,
    /// Forward voltage at the current source's compliance while driving:
    /// the diode (or its wiring) is open.
    DiodeOpen = 13,
    /// Forward voltage below its floor while driving: the diode is shorted.
    DiodeShort = 14,
    /// The board's external fault input is asserted (a hardware comparator
    /// trip, a watchdog pre-warning) (fast).
    ExternalFault = 15,
}

impl Fault {
    /// Every fault, in bit order.
    pub const ALL: [Fault; 16] = [
        Fault::Overcurrent,
        Fault::MonitorRunaway,
        Fault::MonitorLoss,
        Fault::SensorOpen,
        Fault::SensorShort,
        Fault::OverTemperature,
        Fault::InterlockOpen,
        Fault::SupplyUnder,
        Fault::SupplyOver,
        Fault::DriveMismatch,
        Fault::MissedTicks,
        Fault::TickOrder,
        Fault::PowerImplausible,
        Fault::DiodeOpen,
        Fault::DiodeShort,
        Fault::ExternalFault,
    ];

    /// Number of distinct faults.
    pub const COUNT: usize = Self::ALL.len();

    /// The mask of every fault (widen [`FaultSet`] before a 17th).
    pub(crate) const ALL_BITS: u16 = {
        assert!(Self::COUNT <= 16, "widen FaultSet beyond 16 faults");
        u16::MAX >> (16 - Self::COUNT)
    };

    /// A fast fault shuts the drive in the same `step` that sees the sample
    /// that trips it, after its debounce, which validation bounds to
    /// [`crate::config::FAST_DEBOUNCE_MAX_US`] (usually 1 tick).
    pub const fn is_fast(self) -> bool {
        matches!(
            self,
            Fault::Overcurrent
                | Fault::MonitorRunaway
                | Fault::InterlockOpen
                | Fault::DriveMismatch
                | Fault::ExternalFault
        )
    }

    /// A short, stable name (used in logs and reports).
    pub const fn name(self) -> &'static str {
        match self {
            Fault::Overcurrent => "overcurrent",
            Fault::MonitorRunaway => "monitor-runaway",
            Fault::MonitorLoss => "monitor-loss",
            Fault::SensorOpen => "sensor-open",
            Fault::SensorShort => "sensor-short",
            Fault::OverTemperature => "over-temperature",
            Fault::InterlockOpen => "interlock-open",
            Fault::SupplyUnder => "supply-under",
            Fault::SupplyOver => "supply-over",
            Fault::DriveMismatch => "drive-mismatch",
            Fault::MissedTicks => "missed-ticks",
            Fault::TickOrder => "tick-order",
            Fault::PowerImplausible => "power-implausible",
            Fault::DiodeOpen => "diode-open",
            Fault::DiodeShort => "diode-short",
            Fault::ExternalFault => "external-fault",
        }
    }

    /// Unit of [`FaultRecord::measured`] and [`FaultRecord::limit`].
    pub const fn unit(self) -> &'static str {
        match self {
            Fault::Overcurrent | Fault::DriveMismatch | Fault::PowerImplausible => "mA",
            Fault::MonitorRunaway | Fault::MonitorLoss => "mW",
            Fault::SensorOpen | Fault::SensorShort => "counts",
            Fault::OverTemperature => "degC",
            Fault::InterlockOpen => "closed(1)/open(0)",
            Fault::SupplyUnder | Fault::SupplyOver => "mV",
            Fault::MissedTicks => "ticks",
            Fault::TickOrder => "ticks (index step)",
            Fault::DiodeOpen | Fault::DiodeShort => "mV",
            Fault::ExternalFault => "asserted(1)",
        }
    }

    /// Bit of this fault in a [`FaultSet`] mask.
    pub(crate) const fn bit(self) -> u16 {
        1 << (self as u8)
    }
}

impl core::fmt::Display for Fault {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(self.name())
    }
}

/// A set of faults as a bit mask (bit `n` is the fault with discriminant `n`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FaultSet(u16);

impl FaultSet {
    /// The empty set.
    pub const EMPTY: FaultSet = FaultSet(0);

    /// Whether `fault` is in the set.
    pub const fn contains(self, fault: Fault) -> bool {
        self.0 & fault.bit() != 0
    }

    /// Add `fault`.
    pub fn insert(&mut self, fault: Fault) {
        self.0 |= fault.bit();
    }

    /// Whether the set is empty.
    pub const fn is_empty(self) -> bool {
        self.0 == 0
    }

    /// The set of a raw bit mask (bits of no fault are dropped).
    pub(crate) const fn from_bits(bits: u16) -> FaultSet {
        FaultSet(bits & Fault::ALL_BITS)
    }

    /// The raw bit mask.
    pub const fn bits(self) -> u16 {
        self.0
    }

    /// The faults in the set, in bit order.
    pub fn iter(self) -> impl Iterator<Item = Fault> {
        Fault::ALL.into_iter().filter(move |f| self.contains(*f))
    }

    /// The first fault in bit order, if any.
    pub fn first(self) -> Option<Fault> {
        self.iter().next()
    }
}

/// One tripped fault: what, when, what was measured and which limit it crossed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FaultRecord {
    /// The fault.
    pub fault: Fault,
    /// Tick index of the sample that tripped it.
    pub tick: u32,
    /// The measured value, in [`Fault::unit`].
    pub measured: Fx,
    /// The configured limit it reached, in [`Fault::unit`].
    pub limit: Fx,
}

/// Capacity of the fault ring (later faults after the first one).
pub const FAULT_RING_LEN: usize = 16;

/// The fault log: the first fault since power-up (or since [`FaultLog::forget`])
/// kept apart, later ones in a bounded ring.
#[derive(Clone, Debug, Default)]
pub struct FaultLog {
    first: Option<FaultRecord>,
    later: heapless::Deque<FaultRecord, FAULT_RING_LEN>,
    dropped: u32,
}

impl FaultLog {
    /// An empty log.
    pub const fn new() -> Self {
        FaultLog {
            first: None,
            later: heapless::Deque::new(),
            dropped: 0,
        }
    }

    /// Record a fault. Never fails: when the ring is full the oldest later
    /// record is dropped and counted.
    pub fn record(&mut self, rec: FaultRecord) {
        if self.first.is_none() {
            self.first = Some(rec);
            return;
        }
        if self.later.is_full() {
            let _ = self.later.pop_front();
            self.dropped = self.dropped.saturating_add(1);
        }
        // Cannot fail: a slot was freed above if the ring was full.
        let _ = self.later.push_back(rec);
    }

    /// The first fault recorded.
    pub fn first(&self) -> Option<&FaultRecord> {
        self.first.as_ref()
    }

    /// Later faults, oldest first.
    pub fn later(&self) -> impl Iterator<Item = &FaultRecord> {
        self.later.iter()
    }

    /// How many later records were dropped because the ring was full.
    pub fn dropped(&self) -> u32 {
        self.dropped
    }

    /// Total records held (first plus later).
    pub fn len(&self) -> usize {
        usize::from(self.first.is_some()) + self.later.len()
    }

    /// Whether the log holds nothing.
    pub fn is_empty(&self) -> bool {
        self.first.is_none()
    }

    /// Forget every record (a service action; the controller never calls it).
    pub fn forget(&mut self) {
        *self = FaultLog::new();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(tick: u32) -> FaultRecord {
        FaultRecord {
            fault: Fault::Overcurrent,
            tick,
            measured: Fx::from_num(tick),
            limit: Fx::ZERO,
        }
    }

    #[test]
    fn first_is_kept_apart_and_ring_drops_oldest() {
        let mut log = FaultLog::new();
        assert!(log.is_empty());
        for t in 0..(FAULT_RING_LEN as u32 + 5) {
            log.record(rec(t));
        }
        assert_eq!(log.first().unwrap().tick, 0);
        assert_eq!(log.later().count(), FAULT_RING_LEN);
        assert_eq!(log.later().next().unwrap().tick, 5);
        assert_eq!(log.dropped(), 4);
        assert_eq!(log.len(), FAULT_RING_LEN + 1);
        log.forget();
        assert!(log.is_empty());
    }

    #[test]
    fn fault_set_bits() {
        let mut s = FaultSet::EMPTY;
        assert!(s.is_empty());
        s.insert(Fault::MissedTicks);
        s.insert(Fault::Overcurrent);
        assert!(s.contains(Fault::MissedTicks));
        assert!(!s.contains(Fault::SupplyOver));
        assert_eq!(s.first(), Some(Fault::Overcurrent));
        assert_eq!(s.iter().count(), 2);
        assert_eq!(s.bits(), 1 | (1 << 10));
    }

    #[test]
    fn fast_faults_are_the_four_named() {
        let fast: heapless::Vec<Fault, 16> =
            Fault::ALL.into_iter().filter(|f| f.is_fast()).collect();
        assert_eq!(
            fast.as_slice(),
            &[
                Fault::Overcurrent,
                Fault::MonitorRunaway,
                Fault::InterlockOpen,
                Fault::DriveMismatch,
                Fault::ExternalFault
            ]
        );
    }
}
