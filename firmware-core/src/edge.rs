//! The embedded-hal 1.0 edge: the only place the core meets hardware traits.
//!
//! [`DriverBoard`] reads the interlock pin, builds a [`Sample`] from the
//! board's ADC counts, calls [`Controller::step`] and applies the [`Drive`]:
//! when the drive is disabled the enable line goes low *before* the DAC is
//! zeroed; when enabled the DAC is written *before* the enable line goes
//! high.
//!
//! Every failed hardware call is returned ([`EdgeError`] lists each one)
//! *and* latches a fault of its own in the controller, with a record in
//! its log: [`Fault::DacBus`], [`Fault::EnablePin`], [`Fault::InterlockPin`].
//! After any failure the edge still tries what the hardware may allow:
//! enable low, then DAC zero. A failed DAC write also holds the enable line
//! low until [`DriverBoard::reset_edge`]. Construction ([`DriverBoard::new`])
//! puts the hardware in the safe state first.
//!
//! The current DAC is anything implementing [`CurrentDac`]; two are provided:
//! [`SpiDac`] (an SPI DAC with the plain frame defined there) and [`PwmDac`]
//! (a PWM output filtered into a voltage, through [`SetDutyCycle`]).

use crate::config::ValidConfig;
use crate::controller::Controller;
use crate::fault::{Fault, FaultRecord, FaultSet};
use crate::io::{Drive, Sample};
use crate::request::{Rejection, Request};
use crate::units::Fx;
use embedded_hal::digital::{ErrorType, InputPin, OutputPin};
use embedded_hal::pwm::SetDutyCycle;
use embedded_hal::spi::SpiDevice;

/// A DAC that sets the current source.
pub trait CurrentDac {
    /// The DAC's error.
    type Error: core::fmt::Debug;
    /// Write a code (already clamped to the configured maximum by the core).
    fn set_code(&mut self, code: u16) -> Result<(), Self::Error>;
}

/// Width of an SPI DAC.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DacWidth {
    /// 12-bit DAC, 16-bit frame: `0b01` (load and update) in bits 15..14,
    /// zero in 13..12, the code in 11..0; most significant byte first.
    Bits12,
    /// 16-bit DAC, 24-bit frame: command byte `0x01` (load and update),
    /// then the code, most significant byte first.
    Bits16,
}

impl DacWidth {
    /// The largest code the frame carries.
    pub const fn full_scale(self) -> u16 {
        match self {
            DacWidth::Bits12 => 0x0FFF,
            DacWidth::Bits16 => 0xFFFF,
        }
    }
}

/// The configuration's largest DAC code does not fit the DAC's frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DacRangeError {
    /// The configuration's largest code (`calibration.dac.max_code`).
    pub max_code: u16,
    /// The largest code the DAC's frame carries.
    pub full_scale: u16,
}

impl core::fmt::Display for DacRangeError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        write!(
            f,
            "calibration.dac.max_code {} is above the DAC's full scale {}",
            self.max_code, self.full_scale
        )
    }
}

impl core::error::Error for DacRangeError {}

/// An SPI DAC using the frames of [`DacWidth`]. A code above the
/// configuration's largest code is clamped to it, never wrapped.
#[derive(Debug)]
pub struct SpiDac<S> {
    spi: S,
    width: DacWidth,
    max_code: u16,
}

impl<S: SpiDevice> SpiDac<S> {
    /// Wrap an SPI device for the configuration `cfg`; refused when the
    /// configuration's largest code does not fit the frame.
    pub fn new(spi: S, width: DacWidth, cfg: &ValidConfig) -> Result<Self, DacRangeError> {
        let max_code = cfg.config().calibration.dac.max_code;
        if max_code > width.full_scale() {
            return Err(DacRangeError {
                max_code,
                full_scale: width.full_scale(),
            });
        }
        Ok(SpiDac {
            spi,
            width,
            max_code,
        })
    }

    /// Give the SPI device back.
    pub fn release(self) -> S {
        self.spi
    }
}

impl<S: SpiDevice> CurrentDac for SpiDac<S> {
    type Error = S::Error;
    fn set_code(&mut self, code: u16) -> Result<(), Self::Error> {
        // At most the full scale of the frame (checked at construction).
        let code = code.min(self.max_code);
        match self.width {
            DacWidth::Bits12 => {
                let word = 0x4000 | code;
                self.spi.write(&word.to_be_bytes())
            }
            DacWidth::Bits16 => {
                let [hi, lo] = code.to_be_bytes();
                self.spi.write(&[0x01, hi, lo])
            }
        }
    }
}

/// A PWM channel used as a DAC: duty = code × max_duty / max_code.
#[derive(Debug)]
pub struct PwmDac<P> {
    pwm: P,
    max_code: u16,
}

impl<P: SetDutyCycle> PwmDac<P> {
    /// Wrap a PWM channel; `max_code` is the configured DAC maximum.
    pub fn new(pwm: P, max_code: u16) -> Self {
        PwmDac { pwm, max_code }
    }
}

impl<P: SetDutyCycle> CurrentDac for PwmDac<P> {
    type Error = P::Error;
    fn set_code(&mut self, code: u16) -> Result<(), Self::Error> {
        let max_duty = u32::from(self.pwm.max_duty_cycle());
        let max_code = u32::from(self.max_code.max(1));
        let duty = (u32::from(code.min(self.max_code)) * max_duty) / max_code;
        self.pwm
            .set_duty_cycle(u16::try_from(duty).unwrap_or(u16::MAX))
    }
}

/// Which level of the interlock input means "closed" (emission permitted).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum InterlockLevel {
    /// High is closed.
    ClosedHigh,
    /// Low is closed.
    ClosedLow,
}

/// The board's ADC counts for one tick.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AdcCounts {
    /// Tick index.
    pub tick: u32,
    /// Monitor photodiode, counts.
    pub monitor: u16,
    /// Current sense, counts.
    pub current: u16,
    /// Temperature sensor, counts.
    pub temperature: u16,
    /// Supply, counts.
    pub supply: u16,
    /// Forward voltage, counts, on boards that measure it (`None`
    /// otherwise; see [`Sample::forward_counts`]).
    pub forward: Option<u16>,
    /// The board's external fault input (a hardware comparator trip, a
    /// watchdog pre-warning), as the board read it this tick: `true` is
    /// asserted (see [`Sample::external_fault`]).
    pub external_fault: bool,
}

/// Every hardware call that failed in one call of the edge. Each one has
/// already latched its own fault in the controller ([`EdgeError::faults`]),
/// logged with the tick index (0 for [`DriverBoard::new`]). At least one
/// field is set.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct EdgeError<D, P, I> {
    /// The interlock could not be read (it counted as open):
    /// [`Fault::InterlockPin`].
    pub interlock: Option<I>,
    /// A DAC write failed (the first failure of the call):
    /// [`Fault::DacBus`]; the enable line is held low until
    /// [`DriverBoard::reset_edge`].
    pub dac: Option<D>,
    /// The enable line could not be driven (the first failure of the
    /// call): [`Fault::EnablePin`].
    pub enable: Option<P>,
}

impl<D, P, I> EdgeError<D, P, I> {
    const fn none() -> Self {
        EdgeError {
            interlock: None,
            dac: None,
            enable: None,
        }
    }

    fn is_none(&self) -> bool {
        self.interlock.is_none() && self.dac.is_none() && self.enable.is_none()
    }

    /// The faults these failures latched.
    pub fn faults(&self) -> FaultSet {
        let mut set = FaultSet::EMPTY;
        for (failed, fault) in [
            (self.interlock.is_some(), Fault::InterlockPin),
            (self.dac.is_some(), Fault::DacBus),
            (self.enable.is_some(), Fault::EnablePin),
        ] {
            if failed {
                set.insert(fault);
            }
        }
        set
    }
}

/// The [`EdgeError`] of a board with these parts.
pub type EdgeErrorOf<D, EN, IL> =
    EdgeError<<D as CurrentDac>::Error, <EN as ErrorType>::Error, <IL as ErrorType>::Error>;

/// [`DriverBoard::new`] could not put the hardware in the safe state. The
/// board is handed back with the failures latched, so that the caller keeps
/// holding the hardware (and may retry with [`DriverBoard::tick`]).
#[derive(Debug)]
pub struct StartError<B, E> {
    /// The board, latched.
    pub board: B,
    /// What failed.
    pub error: E,
}

/// The controller with its DAC, enable line and interlock input.
#[derive(Debug)]
pub struct DriverBoard<D, EN, IL> {
    ctl: Controller,
    dac: D,
    enable: EN,
    interlock: IL,
    level: InterlockLevel,
    dac_failed: bool,
}

/// The board as built by [`DriverBoard::new`], or why it is not yet safe.
pub type StartResult<D, EN, IL> =
    Result<DriverBoard<D, EN, IL>, StartError<DriverBoard<D, EN, IL>, EdgeErrorOf<D, EN, IL>>>;

impl<D, EN, IL> DriverBoard<D, EN, IL>
where
    D: CurrentDac,
    EN: OutputPin,
    IL: InputPin,
{
    /// Put the pieces together and the hardware in the safe state: enable
    /// low, then DAC zero. A failure latches its fault (logged at tick 0)
    /// and comes back with the board in [`StartError`].
    // Both arms carry the board, which is the size; there is no heap to
    // box it into.
    #[allow(clippy::result_large_err)]
    pub fn new(
        ctl: Controller,
        dac: D,
        enable: EN,
        interlock: IL,
        level: InterlockLevel,
    ) -> StartResult<D, EN, IL> {
        let mut board = DriverBoard {
            ctl,
            dac,
            enable,
            interlock,
            level,
            dac_failed: false,
        };
        let mut err = EdgeError::none();
        board.shut(&mut err, 0);
        if err.is_none() {
            Ok(board)
        } else {
            Err(StartError { board, error: err })
        }
    }

    /// The controller (status, fault log).
    pub fn controller(&self) -> &Controller {
        &self.ctl
    }

    /// Pass a request to the controller. While a DAC failure holds the
    /// enable line low, clearing faults is refused with
    /// [`Fault::DacBus`] as the condition present.
    pub fn request(&mut self, req: Request) -> Result<(), Rejection> {
        if self.dac_failed && req == Request::ClearFaults {
            return Err(Rejection::ConditionPresent {
                fault: Fault::DacBus,
            });
        }
        self.ctl.request(req)
    }

    /// Whether a DAC failure holds the enable line low.
    pub fn dac_failed(&self) -> bool {
        self.dac_failed
    }

    /// Forget a DAC failure (after the board has checked the DAC). The
    /// controller stays latched until its faults are cleared.
    pub fn reset_edge(&mut self) {
        self.dac_failed = false;
    }

    /// One tick: read the interlock (a read error counts as open), step the
    /// controller, apply the drive. On any hardware error the returned
    /// error lists every failure, each latched, and the edge has tried
    /// enable low and DAC zero.
    pub fn tick(&mut self, adc: AdcCounts) -> Result<Drive, EdgeErrorOf<D, EN, IL>> {
        let mut err = EdgeError::none();
        let read = match self.level {
            InterlockLevel::ClosedHigh => self.interlock.is_high(),
            InterlockLevel::ClosedLow => self.interlock.is_low(),
        };
        let closed = read.unwrap_or_else(|e| {
            err.interlock = Some(e);
            false
        });
        let sample = Sample {
            tick: adc.tick,
            monitor_counts: adc.monitor,
            current_counts: adc.current,
            temp_counts: adc.temperature,
            supply_counts: adc.supply,
            interlock_closed: closed,
            forward_counts: adc.forward,
            external_fault: adc.external_fault,
        };
        let mut drive = self.ctl.step(&sample);
        // Latched after the step, as a trip in it would be: the drive of
        // this tick is zero, and the next sample is read with it.
        if err.interlock.is_some() {
            self.latch(Fault::InterlockPin, adc.tick, Fx::ZERO, Fx::ONE);
        }
        if self.dac_failed || err.interlock.is_some() {
            drive = self.off();
        }
        if drive.enable {
            match self.dac.set_code(drive.dac_code) {
                Err(e) => {
                    err.dac = Some(e);
                    self.dac_failed = true;
                    let max = self.ctl.config().config().calibration.dac.max_code;
                    self.latch(
                        Fault::DacBus,
                        adc.tick,
                        Fx::saturating_from_num(drive.dac_code),
                        Fx::saturating_from_num(max),
                    );
                    drive = self.off();
                }
                Ok(()) => {
                    if let Err(e) = self.enable.set_high() {
                        err.enable = Some(e);
                        self.latch(Fault::EnablePin, adc.tick, Fx::ONE, Fx::ZERO);
                        drive = self.off();
                    }
                }
            }
        }
        if !drive.enable {
            self.shut(&mut err, adc.tick);
            drive.status = self.ctl.status();
        }
        if err.is_none() {
            Ok(drive)
        } else {
            Err(err)
        }
    }

    /// The drive of a latched controller.
    fn off(&self) -> Drive {
        Drive {
            dac_code: 0,
            enable: false,
            status: self.ctl.status(),
        }
    }

    /// Enable low, then DAC zero; each failure latches its fault (noted in
    /// `err` unless one of its kind is there already).
    fn shut(&mut self, err: &mut EdgeErrorOf<D, EN, IL>, tick: u32) {
        if let Err(e) = self.enable.set_low() {
            err.enable.get_or_insert(e);
            self.latch(Fault::EnablePin, tick, Fx::ZERO, Fx::ZERO);
        }
        if let Err(e) = self.dac.set_code(0) {
            // A DAC that cannot be zeroed is not trusted with emission.
            err.dac.get_or_insert(e);
            self.dac_failed = true;
            let max = self.ctl.config().config().calibration.dac.max_code;
            self.latch(Fault::DacBus, tick, Fx::ZERO, Fx::saturating_from_num(max));
        }
    }

    /// Latch an edge fault with its record.
    #[cold]
    fn latch(&mut self, fault: Fault, tick: u32, measured: Fx, limit: Fx) {
        self.ctl.latch_edge_fault(FaultRecord {
            fault,
            tick,
            measured,
            limit,
        });
    }
}
