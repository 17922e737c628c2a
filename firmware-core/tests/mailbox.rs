//! The SPSC mailbox across two threads: a producer and a consumer on a
//! shared `static`, as thread mode and the tick interrupt use it. Every
//! message arrives once, in order, none lost, none made up.

use diodestat_core::{Full, Fx, Mailbox, Request};
use std::thread;

static BOX: Mailbox<Request, 8> = Mailbox::new();

#[test]
fn two_threads_pass_every_message_once_in_order() {
    const N: i32 = 200_000;
    let producer = thread::spawn(|| {
        let mut full = 0u64;
        for k in 0..N {
            let mut msg = Request::SetCurrent(Fx::from_bits(k));
            loop {
                match BOX.push(msg) {
                    Ok(()) => break,
                    Err(Full(m)) => {
                        msg = m;
                        full += 1;
                        thread::yield_now();
                    }
                }
            }
        }
        full
    });
    let consumer = thread::spawn(|| {
        let mut next = 0;
        while next < N {
            match BOX.pop() {
                Some(Request::SetCurrent(v)) => {
                    assert_eq!(v.to_bits(), next, "out of order or lost");
                    next += 1;
                }
                Some(other) => panic!("made up: {other:?}"),
                None => thread::yield_now(),
            }
        }
        next
    });
    let full = producer.join().unwrap();
    assert_eq!(consumer.join().unwrap(), N);
    assert!(BOX.is_empty());
    assert_eq!(BOX.garbled(), 0);
    // The test exercised the full mailbox too (not a proof of a race, a
    // sign the two threads interleaved).
    eprintln!("producer found the mailbox full {full} times");
}

mod model {
    //! Against a plain queue: any sequence of pushes and pops on a
    //! mailbox of capacity 3 gives what a bounded `VecDeque` gives.
    use super::*;
    use proptest::prelude::*;
    use std::collections::VecDeque;

    proptest! {
        #[test]
        fn behaves_as_a_bounded_queue(ops in proptest::collection::vec(any::<Option<i32>>(), 0..500)) {
            let m: Mailbox<Request, 3> = Mailbox::new();
            let mut q = VecDeque::new();
            for op in ops {
                match op {
                    Some(v) => {
                        let r = Request::SetPower(Fx::from_bits(v));
                        let model = if q.len() < 3 { q.push_back(r); Ok(()) } else { Err(Full(r)) };
                        prop_assert_eq!(m.push(r), model);
                    }
                    None => prop_assert_eq!(m.pop(), q.pop_front()),
                }
                prop_assert_eq!(m.len(), q.len());
            }
        }
    }
}
