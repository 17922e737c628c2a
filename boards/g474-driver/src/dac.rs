//! The on-chip DAC as the core's [`CurrentDac`]: DAC1 channel 1 (PA4),
//! buffered, 12-bit right-aligned, driving the current source's set input.

use core::convert::Infallible;

use diodestat_core::CurrentDac;
use embassy_stm32::dac::{DacChannel, Value};
use embassy_stm32::mode::Blocking;

/// DAC1 channel 1.
pub struct OnChipDac {
    ch: DacChannel<'static, Blocking>,
}

impl OnChipDac {
    /// Wrap a channel and set it to zero.
    pub fn new(mut ch: DacChannel<'static, Blocking>) -> Self {
        ch.set(Value::Bit12Right(0));
        OnChipDac { ch }
    }
}

impl CurrentDac for OnChipDac {
    type Error = Infallible;

    fn set_code(&mut self, code: u16) -> Result<(), Infallible> {
        // The core clamps the code to the configured maximum (4095 for 12
        // bits); the mask keeps a wider value from wrapping into low codes.
        self.ch.set(Value::Bit12Right(code.min(0x0FFF)));
        Ok(())
    }
}
