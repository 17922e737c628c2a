//! The board's converters and pins behind the core's embedded-hal edge, as
//! the simulator models them: the run drives the very `DriverBoard` a board
//! links ([`diodestat_core::DriverBoard`]), whose DAC, enable line and interlock
//! input are these parts. Each can fail its bus on demand (the scenario
//! fault kinds `dac-bus`, `enable-pin`, `interlock-pin`), and each holds
//! what real hardware would: a DAC whose write failed keeps the code it
//! had, an enable line whose write failed stays where it was.

use diodestat_core::{
    AdcCounts, Controller, CurrentDac, Drive, DriverBoard, EdgeErrorOf, InterlockLevel, Rejection,
    Request, Sample, StartError, ValidConfig,
};
use embedded_hal::digital::{Error, ErrorKind, ErrorType, InputPin, OutputPin};

/// A write or read on a failed bus.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BusFailed;

impl Error for BusFailed {
    fn kind(&self) -> ErrorKind {
        ErrorKind::Other
    }
}

/// The current DAC: the code it holds, and whether its bus has failed.
#[derive(Clone, Debug, Default)]
pub struct SimDac {
    /// The code the DAC outputs (the last write that reached it).
    pub code: u16,
    /// Writes fail (and leave `code` as it was).
    pub failed: bool,
}

impl CurrentDac for SimDac {
    type Error = BusFailed;
    fn set_code(&mut self, code: u16) -> Result<(), BusFailed> {
        if self.failed {
            Err(BusFailed)
        } else {
            self.code = code;
            Ok(())
        }
    }
}

/// The enable line of the current source.
#[derive(Clone, Debug, Default)]
pub struct SimEnable {
    /// The level on the line (the last write that reached it).
    pub high: bool,
    /// Writes fail (and leave the level as it was).
    pub failed: bool,
}

impl ErrorType for SimEnable {
    type Error = BusFailed;
}

impl OutputPin for SimEnable {
    fn set_low(&mut self) -> Result<(), BusFailed> {
        self.set(false)
    }
    fn set_high(&mut self) -> Result<(), BusFailed> {
        self.set(true)
    }
}

impl SimEnable {
    fn set(&mut self, high: bool) -> Result<(), BusFailed> {
        if self.failed {
            Err(BusFailed)
        } else {
            self.high = high;
            Ok(())
        }
    }
}

/// The interlock input, closed high.
#[derive(Clone, Debug, Default)]
pub struct SimInterlock {
    /// The interlock loop is closed.
    pub closed: bool,
    /// Reads fail.
    pub failed: bool,
}

impl ErrorType for SimInterlock {
    type Error = BusFailed;
}

impl InputPin for SimInterlock {
    fn is_high(&mut self) -> Result<bool, BusFailed> {
        if self.failed {
            Err(BusFailed)
        } else {
            Ok(self.closed)
        }
    }
    fn is_low(&mut self) -> Result<bool, BusFailed> {
        self.is_high().map(|h| !h)
    }
}

/// What the hardware outputs after a tick: the DAC's code and the enable
/// line's level, whatever the core asked for.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Outputs {
    /// DAC code.
    pub dac_code: u16,
    /// Enable line high.
    pub enable: bool,
}

/// Which bus of the board has failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Bus {
    /// The DAC's (SPI) bus.
    Dac,
    /// The enable line's output.
    Enable,
    /// The interlock input.
    Interlock,
}

/// The simulated board: the core's `DriverBoard` on the parts above.
#[derive(Clone, Debug)]
pub struct SimBoard {
    board: DriverBoard<SimDac, SimEnable, SimInterlock>,
}

/// Errors of the edge on these parts.
pub type SimEdgeError = EdgeErrorOf<SimDac, SimEnable, SimInterlock>;

impl SimBoard {
    /// A board running `cfg`, its hardware put in the safe state by the
    /// edge (healthy parts cannot fail this).
    pub fn new(cfg: ValidConfig) -> Self {
        let parts = (
            SimDac::default(),
            SimEnable::default(),
            SimInterlock {
                closed: true,
                failed: false,
            },
        );
        let board = match DriverBoard::new(
            Controller::new(cfg),
            parts.0,
            parts.1,
            parts.2,
            InterlockLevel::ClosedHigh,
        ) {
            Ok(b) => b,
            // Healthy parts report no failure; keep the latched board
            // all the same rather than panic.
            Err(StartError { board, .. }) => board,
        };
        SimBoard { board }
    }

    /// The controller.
    pub fn ctl(&self) -> &Controller {
        self.board.controller()
    }

    /// Pass a request through the edge.
    pub fn request(&mut self, req: Request) -> Result<(), Rejection> {
        self.board.request(req)
    }

    /// Fail (`true`) or repair a bus.
    pub fn set_failed(&mut self, bus: Bus, failed: bool) {
        let (dac, en, il) = self.board.parts_mut();
        match bus {
            Bus::Dac => dac.failed = failed,
            Bus::Enable => en.failed = failed,
            Bus::Interlock => il.failed = failed,
        }
    }

    /// One tick through the edge: the interlock input is set from the
    /// sample, the other channels go in as ADC counts. Returns the drive
    /// the core computed (the edge's safe drive after an error), what the
    /// hardware outputs now, and the edge's error if a call failed.
    pub fn tick(&mut self, s: &Sample) -> (Drive, Outputs, Option<SimEdgeError>) {
        self.board.parts_mut().2.closed = s.interlock_closed;
        let (drive, err) = match self.board.tick(adc_counts(s)) {
            Ok(d) => (d, None),
            Err(e) => (
                Drive {
                    dac_code: 0,
                    enable: false,
                    status: self.board.controller().status(),
                },
                Some(e),
            ),
        };
        (drive, self.outputs(), err)
    }

    /// [`SimBoard::tick`] as a run needs it: the DAC code the core
    /// computed (0 after an edge error, the edge's safe drive) and what the
    /// hardware outputs now. The edge latches its errors in the core and its
    /// log, where the run reads them.
    #[inline]
    pub fn tick_outputs(&mut self, s: &Sample) -> (u16, Outputs) {
        self.board.parts_mut().2.closed = s.interlock_closed;
        let code = match self.board.tick(adc_counts(s)) {
            Ok(d) => d.dac_code,
            Err(_) => 0,
        };
        (code, self.outputs())
    }

    /// What the hardware outputs now.
    pub fn outputs(&self) -> Outputs {
        let (dac, en, _) = self.board.parts();
        Outputs {
            dac_code: dac.code,
            enable: en.high,
        }
    }
}

/// The converter channels of a sample as the edge takes them.
#[inline]
fn adc_counts(s: &Sample) -> AdcCounts {
    AdcCounts {
        tick: s.tick,
        monitor: s.monitor_counts,
        current: s.current_counts,
        temperature: s.temp_counts,
        supply: s.supply_counts,
        forward: s.forward_counts,
        external_fault: s.external_fault,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plant::{c_to_k, DemoModule};
    use crate::scenario::DiodeModel;
    use crate::sim::Plant;
    use diodestat_core::{Fault, Fx, Mode};

    /// A board regulating 20 mA in ACC on the visible demo module, with
    /// its plant; the outputs of the last tick.
    fn emitting() -> (SimBoard, Plant, Outputs, u32) {
        let m = DemoModule::visible();
        let c = crate::calibration::calibrate(diodestat_core::example::config(), &m)
            .validate()
            .unwrap();
        let dt = 1.0 / f64::from(c.config().tick_hz);
        let mut b = SimBoard::new(c);
        let mut p = Plant::new(&m, 25.0, 1).unwrap();
        b.request(Request::SetMode(Mode::Acc)).unwrap();
        b.request(Request::SetCurrent(Fx::from_num(20))).unwrap();
        let mut out = Outputs::default();
        for t in 0..4000 {
            if t == 1 {
                b.request(Request::Enable).unwrap();
            }
            let s = p.sample(t, dt);
            let (_, o, e) = b.tick(&s);
            assert!(e.is_none(), "{e:?}");
            out = o;
            p.advance(
                o.dac_code,
                o.enable,
                c_to_k(25.0),
                DiodeModel::QuasiStatic,
                dt,
            );
            if t > 2000 && o.enable {
                return (b, p, out, t);
            }
        }
        panic!("never emitted: {out:?}");
    }

    /// A failed DAC bus keeps the DAC at its code; the edge latches
    /// dac-bus and drops the enable line, which is what makes it safe.
    #[test]
    fn a_failed_dac_bus_is_made_safe_by_the_enable_line() {
        let (mut b, mut p, out, t) = emitting();
        assert!(out.dac_code > 0);
        b.set_failed(Bus::Dac, true);
        let s = p.sample(t + 1, 5e-5);
        let (d, o, e) = b.tick(&s);
        // The first write that fails is the next one the core asks for.
        if e.is_some() {
            assert!(!d.enable && !o.enable);
            assert!(b.ctl().faults().contains(Fault::DacBus));
        }
        let (_, o, _) = b.tick(&p.sample(t + 2, 5e-5));
        assert!(!o.enable, "{o:?}");
        assert!(b.ctl().faults().contains(Fault::DacBus));
    }

    /// With the DAC bus and the enable line both failed, the line stays
    /// high and the DAC keeps its code: the hardware cannot be made safe
    /// from firmware (the hardware current limit and interlock gating of
    /// enable must), and the outputs say so. Both faults are latched.
    #[test]
    fn failed_dac_and_enable_buses_hold_what_real_hardware_holds() {
        let (mut b, mut p, out, t) = emitting();
        b.set_failed(Bus::Dac, true);
        b.set_failed(Bus::Enable, true);
        let (d, o, e) = b.tick(&p.sample(t + 1, 5e-5));
        assert!(e.is_some());
        assert!(!d.enable);
        assert_eq!(o, out);
        assert!(b.ctl().faults().contains(Fault::EnablePin));
    }

    /// A failed interlock read counts as open: latched, enable low.
    #[test]
    fn a_failed_interlock_read_latches_and_drops_enable() {
        let (mut b, mut p, _, t) = emitting();
        b.set_failed(Bus::Interlock, true);
        let (_, o, e) = b.tick(&p.sample(t + 1, 5e-5));
        assert!(e.unwrap().interlock.is_some());
        assert!(!o.enable);
        assert!(b.ctl().faults().contains(Fault::InterlockPin));
    }
}
