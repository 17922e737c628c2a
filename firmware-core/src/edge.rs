//! The embedded-hal 1.0 edge: the only place the core meets hardware traits.
//!
//! [`DriverBoard`] reads the interlock pin, builds a [`Sample`] from the
//! board's ADC counts, calls [`Controller::step`] and applies the [`Drive`]:
//! when the drive is disabled the enable line goes low *before* the DAC is
//! zeroed; when enabled the DAC is written *before* the enable line goes
//! high. A failed DAC write holds the enable line low until [`DriverBoard::reset_edge`].
//!
//! The current DAC is anything implementing [`CurrentDac`]; two are provided:
//! [`SpiDac`] (an SPI DAC with the plain frame defined there) and [`PwmDac`]
//! (a PWM output filtered into a voltage, through [`SetDutyCycle`]).

use crate::controller::Controller;
use crate::io::{Drive, Sample};
use crate::request::{Rejection, Request};
use embedded_hal::digital::{InputPin, OutputPin};
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

/// An SPI DAC using the frames of [`DacWidth`].
#[derive(Debug)]
pub struct SpiDac<S> {
    spi: S,
    width: DacWidth,
}

impl<S: SpiDevice> SpiDac<S> {
    /// Wrap an SPI device.
    pub fn new(spi: S, width: DacWidth) -> Self {
        SpiDac { spi, width }
    }

    /// Give the SPI device back.
    pub fn release(self) -> S {
        self.spi
    }
}

impl<S: SpiDevice> CurrentDac for SpiDac<S> {
    type Error = S::Error;
    fn set_code(&mut self, code: u16) -> Result<(), Self::Error> {
        match self.width {
            DacWidth::Bits12 => {
                let word = 0x4000 | (code & 0x0FFF);
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
}

/// What went wrong at the edge.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum EdgeError<D, P> {
    /// The DAC write failed; the enable line is held low.
    Dac(D),
    /// The enable pin could not be driven.
    EnablePin(P),
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

impl<D, EN, IL> DriverBoard<D, EN, IL>
where
    D: CurrentDac,
    EN: OutputPin,
    IL: InputPin,
{
    /// Put the pieces together. The enable line is not touched until the
    /// first [`DriverBoard::tick`]; the board must hold it low at reset.
    pub fn new(ctl: Controller, dac: D, enable: EN, interlock: IL, level: InterlockLevel) -> Self {
        DriverBoard {
            ctl,
            dac,
            enable,
            interlock,
            level,
            dac_failed: false,
        }
    }

    /// The controller (status, fault log).
    pub fn controller(&self) -> &Controller {
        &self.ctl
    }

    /// Pass a request to the controller.
    pub fn request(&mut self, req: Request) -> Result<(), Rejection> {
        self.ctl.request(req)
    }

    /// Whether a DAC failure holds the enable line low.
    pub fn dac_failed(&self) -> bool {
        self.dac_failed
    }

    /// Forget a DAC failure (after the board has checked the DAC).
    pub fn reset_edge(&mut self) {
        self.dac_failed = false;
    }

    /// One tick: read the interlock (a read error counts as open), step the
    /// controller, apply the drive.
    pub fn tick(&mut self, adc: AdcCounts) -> Result<Drive, EdgeError<D::Error, EN::Error>> {
        let closed = match self.level {
            InterlockLevel::ClosedHigh => self.interlock.is_high(),
            InterlockLevel::ClosedLow => self.interlock.is_low(),
        }
        .unwrap_or(false);
        let sample = Sample {
            tick: adc.tick,
            monitor_counts: adc.monitor,
            current_counts: adc.current,
            temp_counts: adc.temperature,
            supply_counts: adc.supply,
            interlock_closed: closed,
            forward_counts: None,
            external_fault: false,
        };
        let mut drive = self.ctl.step(&sample);
        if self.dac_failed && drive.enable {
            // Never re-enable after a failed DAC write; stop the controller too.
            let _ = self.ctl.request(Request::Disable);
            drive.enable = false;
            drive.dac_code = 0;
        }
        if drive.enable {
            if let Err(e) = self.dac.set_code(drive.dac_code) {
                self.dac_failed = true;
                let _ = self.enable.set_low();
                let _ = self.ctl.request(Request::Disable);
                return Err(EdgeError::Dac(e));
            }
            self.enable.set_high().map_err(EdgeError::EnablePin)?;
        } else {
            let pin = self.enable.set_low();
            if let Err(e) = self.dac.set_code(0) {
                // A DAC that cannot be zeroed is not trusted with emission.
                self.dac_failed = true;
                return Err(EdgeError::Dac(e));
            }
            pin.map_err(EdgeError::EnablePin)?;
        }
        Ok(drive)
    }
}
