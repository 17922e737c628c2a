//! The four analog inputs of a tick, read by ADC1 in one burst: monitor
//! photodiode (PA0, IN1), current sense (PA1, IN2), NTC (PC0, IN6) and
//! supply divider (PC1, IN7).
//!
//! Blocking single conversions keep this example short (about 1 µs each
//! at 24.5 ADC cycles of sampling). A production board would trigger a
//! scan from the tick timer and collect it by DMA, or sample the current
//! sense with an injected conversion.

use diodestat_core::edge::AdcCounts;
use embassy_stm32::adc::{Adc, AnyAdcChannel, SampleTime};
use embassy_stm32::peripherals::ADC1;

/// Sampling time of every channel.
const SAMPLE_TIME: SampleTime = SampleTime::CYCLES24_5;

/// ADC1 and its four channels.
pub struct Sampler {
    adc: Adc<'static, ADC1>,
    monitor: AnyAdcChannel<'static, ADC1>,
    current: AnyAdcChannel<'static, ADC1>,
    temperature: AnyAdcChannel<'static, ADC1>,
    supply: AnyAdcChannel<'static, ADC1>,
}

impl Sampler {
    /// Put the converter and its channels together.
    pub fn new(
        adc: Adc<'static, ADC1>,
        monitor: AnyAdcChannel<'static, ADC1>,
        current: AnyAdcChannel<'static, ADC1>,
        temperature: AnyAdcChannel<'static, ADC1>,
        supply: AnyAdcChannel<'static, ADC1>,
    ) -> Self {
        Sampler {
            adc,
            monitor,
            current,
            temperature,
            supply,
        }
    }

    /// Read all four channels for tick `tick`.
    pub fn read(&mut self, tick: u32) -> AdcCounts {
        AdcCounts {
            tick,
            monitor: self.adc.blocking_read(&mut self.monitor, SAMPLE_TIME),
            current: self.adc.blocking_read(&mut self.current, SAMPLE_TIME),
            temperature: self.adc.blocking_read(&mut self.temperature, SAMPLE_TIME),
            supply: self.adc.blocking_read(&mut self.supply, SAMPLE_TIME),
            // This board measures no forward voltage and wires no external
            // fault input.
            forward: None,
            external_fault: false,
        }
    }
}
