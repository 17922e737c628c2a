//! The latch across a reset: a controller latched by a real trip, its
//! record packed, "stored", and taken back by a new controller at boot;
//! corrupted records refused into a latch of their own; a property test
//! that a restored latch never clears itself.

mod common;

use common::*;
use diodestat_core::{
    Controller, Cursor, Entry, Fault, FaultRecord, FaultSet, Fx, LatchRecord, Mode, Rejection,
    Request, RestoreError, Sample, State, LATCH_RECORD_LEN,
};
use proptest::prelude::*;

/// A rig regulating in ACC, then tripped by the interlock opening.
fn tripped() -> Rig {
    let mut r = Rig::regulating_acc(demo(), Fx::from_num(30));
    r.step_with(|s| s.interlock_closed = false);
    assert_eq!(r.ctl.state(), State::Latched);
    r
}

#[test]
fn a_reset_in_the_latched_state_comes_back_latched() {
    let r = tripped();
    let stored = r.ctl.latch_record().to_bytes();
    // The reset: a new controller from the same configuration and the bytes.
    let (mut ctl, restored) = Controller::restored(demo(), &stored);
    let rec = restored.unwrap();
    assert_eq!(ctl.state(), State::Latched);
    assert_eq!(ctl.faults(), r.ctl.faults());
    assert!(ctl.faults().contains(Fault::InterlockOpen));
    assert_eq!(ctl.fault_log().first(), r.ctl.fault_log().first());
    assert_eq!(rec.first.map(|e| e.seq), Some(0));
    // Healthy samples do not unlatch it; enable is refused; no emission.
    for t in 0..200 {
        let d = ctl.step(&healthy_sample(&demo(), t));
        assert!(!d.enable);
        assert_eq!(d.status.state, State::Latched);
    }
    assert_eq!(
        ctl.request(Request::Enable),
        Err(Rejection::NotAllowed {
            state: State::Latched
        })
    );
    // A deliberate clear leaves it, as before the reset.
    ctl.request(Request::ClearFaults).unwrap();
    assert_eq!(ctl.state(), State::Off);
    // The sequence numbers go on after the restored ones.
    let mut r2 = Rig {
        ctl,
        ..Rig::new(demo())
    };
    r2.req(Request::SetMode(Mode::Acc));
    r2.req(Request::SetCurrent(Fx::from_num(30)));
    r2.req(Request::Enable);
    r2.run(200);
    r2.step_with(|s| s.interlock_closed = false);
    let seqs: Vec<u32> = r2
        .ctl
        .fault_log()
        .since(Cursor::default())
        .map(|e| e.seq)
        .collect();
    assert_eq!(seqs, [0, rec.next_seq]);
}

#[test]
fn a_record_stored_while_not_latched_starts_off() {
    let r = Rig::new(demo());
    let (ctl, restored) = Controller::restored(demo(), &r.ctl.latch_record().to_bytes());
    assert_eq!(restored.unwrap().faults, FaultSet::EMPTY);
    assert_eq!(ctl.state(), State::Off);
    assert!(ctl.fault_log().is_empty());
}

/// The controller a refused record gives: latched on record-corrupt with
/// the cause, and nothing else.
fn check_refused(stored: &[u8; LATCH_RECORD_LEN], cause: u8) -> Controller {
    let (mut ctl, restored) = Controller::restored(demo(), stored);
    assert_eq!(restored.unwrap_err().code(), cause);
    assert_eq!(ctl.state(), State::Latched);
    assert_eq!(
        ctl.faults().iter().collect::<Vec<_>>(),
        [Fault::RecordCorrupt]
    );
    let first = *ctl.fault_log().first().unwrap();
    assert_eq!(
        first,
        FaultRecord {
            fault: Fault::RecordCorrupt,
            tick: 0,
            measured: Fx::from_num(cause),
            limit: Fx::ZERO
        }
    );
    for t in 0..50 {
        assert!(!ctl.step(&healthy_sample(&demo(), t)).enable);
    }
    assert_eq!(ctl.state(), State::Latched);
    ctl
}

#[test]
fn a_corrupted_record_is_refused_safely() {
    let good = tripped().ctl.latch_record().to_bytes();
    // A flipped bit in the faults: the check catches it.
    let mut bad = good;
    bad[4] ^= 0x40;
    check_refused(&bad, 2);
    // A write cut short: the tail still erased.
    let mut torn = good;
    torn[16..].fill(0xFF);
    check_refused(&torn, 2);
    // Erased (nothing stored, or erased and reset before the write): also
    // a latch, cleared once by the user.
    let mut ctl = check_refused(&[0xFF; LATCH_RECORD_LEN], 1);
    ctl.request(Request::ClearFaults).unwrap();
    assert_eq!(ctl.state(), State::Off);
    assert!(matches!(
        LatchRecord::from_bytes(&[0; LATCH_RECORD_LEN]),
        Err(RestoreError::Check { .. })
    ));
}

fn any_sample() -> impl Strategy<Value = Sample> {
    (
        any::<u32>(),
        any::<[u16; 4]>(),
        any::<bool>(),
        any::<bool>(),
        proptest::option::of(any::<u16>()),
    )
        .prop_map(|(tick, c, il, ext, vf)| Sample {
            tick,
            monitor_counts: c[0],
            current_counts: c[1],
            temp_counts: c[2],
            supply_counts: c[3],
            interlock_closed: il,
            external_fault: ext,
            forward_counts: vf,
        })
}

fn any_request_but_clear() -> impl Strategy<Value = Request> {
    prop_oneof![
        Just(Request::Enable),
        Just(Request::Disable),
        any::<i32>().prop_map(|b| Request::SetPower(Fx::from_bits(b))),
        any::<i32>().prop_map(|b| Request::SetCurrent(Fx::from_bits(b))),
        Just(Request::SetMode(Mode::Apc)),
        Just(Request::SetMode(Mode::Acc)),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 128, ..ProptestConfig::default() })]

    /// Whatever it restored, and whatever the samples and requests after
    /// (short of a clear), the controller stays latched with at least the
    /// restored faults and never enables.
    #[test]
    fn a_restored_latch_never_clears_itself(
        bits in 1u32..(1 << Fault::COUNT),
        fault in 0u8..Fault::COUNT as u8,
        tick in any::<u32>(),
        corrupt in proptest::option::of((0..LATCH_RECORD_LEN, 1u8..=255)),
        steps in proptest::collection::vec(
            (any_sample(), proptest::option::of(any_request_but_clear())),
            1..300,
        ),
    ) {
        let mut faults = FaultSet::EMPTY;
        for f in Fault::ALL {
            if bits & (1 << f as u8) != 0 {
                faults.insert(f);
            }
        }
        let rec = LatchRecord {
            faults,
            first: Some(Entry {
                seq: 0,
                record: FaultRecord {
                    fault: Fault::from_index(fault).unwrap(),
                    tick,
                    measured: Fx::ONE,
                    limit: Fx::ZERO,
                },
            }),
            next_seq: 1,
        };
        let mut bytes = rec.to_bytes();
        if let Some((at, x)) = corrupt {
            bytes[at] ^= x;
        }
        let (mut ctl, restored) = Controller::restored(demo(), &bytes);
        let expected = match restored {
            Ok(r) => r.faults,
            Err(_) => {
                let mut s = FaultSet::EMPTY;
                s.insert(Fault::RecordCorrupt);
                s
            }
        };
        prop_assert!(corrupt.is_none() || restored.is_err());
        for (s, req) in steps {
            if let Some(req) = req {
                let _ = ctl.request(req);
            }
            let d = ctl.step(&s);
            prop_assert!(!d.enable);
            prop_assert_eq!(d.status.state, State::Latched);
            prop_assert!(expected.iter().all(|f| d.status.faults.contains(f)));
        }
    }
}
