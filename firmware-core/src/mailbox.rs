//! A bounded, lock-free, no-heap single-producer single-consumer mailbox,
//! for requests from thread mode to the tick interrupt (and answers back).
//!
//! [`Mailbox`] holds up to `N` messages of a [`Packed`] type in atomic
//! words. The producer only writes the tail index and the consumer only the
//! head index; each reads the other's with acquire ordering and publishes
//! its own with release ordering, so a message's words are complete before
//! the other side sees its index move. Only atomic loads and stores are
//! used, no compare-and-swap: it works on thumbv6m (Cortex-M0/M0+), which
//! has no CAS, as on thumbv7em and on hosts. No `unsafe`.
//!
//! One producer and one consumer: that is the caller's contract (with two
//! producers a message may be lost or overwritten; never memory unsafety).
//! A full mailbox refuses the message ([`Full`]); nothing blocks.

use core::marker::PhantomData;
use core::sync::atomic::{AtomicU32, Ordering};

use crate::fault::Fault;
use crate::io::{Mode, State};
use crate::request::{Rejection, Request};
use crate::units::Fx;

/// Words per message.
pub const MESSAGE_WORDS: usize = 4;

/// A message that packs into [`MESSAGE_WORDS`] 32-bit words and back.
pub trait Packed: Copy {
    /// The words of this message.
    fn pack(self) -> [u32; MESSAGE_WORDS];
    /// The message of these words; `None` for words no message packs to.
    fn unpack(words: [u32; MESSAGE_WORDS]) -> Option<Self>;
}

/// The mailbox was full; the message is handed back.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Full<T>(pub T);

impl<T> core::fmt::Display for Full<T> {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str("mailbox full")
    }
}

impl<T: core::fmt::Debug> core::error::Error for Full<T> {}

/// A bounded SPSC mailbox of `N` messages (`1 <= N <= 65 536`). Usable as a
/// `static`: [`Mailbox::new`] is `const`.
#[derive(Debug)]
pub struct Mailbox<T, const N: usize> {
    slots: [[AtomicU32; MESSAGE_WORDS]; N],
    /// Messages taken so far, modulo `2N`; written by the consumer only.
    head: AtomicU32,
    /// Messages put so far, modulo `2N`; written by the producer only.
    /// (Modulo `2N`, not 2^32: a full mailbox, `tail - head = N`, stays
    /// distinct from an empty one, and slots follow on across the wrap for
    /// any `N`.)
    tail: AtomicU32,
    /// Slots that did not unpack; written by the consumer only.
    garbled: AtomicU32,
    _message: PhantomData<T>,
}

impl<T: Packed, const N: usize> Default for Mailbox<T, N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<T: Packed, const N: usize> Mailbox<T, N> {
    const CAPACITY_FITS: () = assert!(N >= 1 && N <= 1 << 16, "1 <= N <= 65 536");
    /// `N` as an index (fits: at most 2^16).
    const SLOTS: u32 = N as u32;

    /// An empty mailbox.
    pub const fn new() -> Self {
        #[allow(clippy::let_unit_value)]
        let () = Self::CAPACITY_FITS;
        Mailbox {
            slots: [const { [const { AtomicU32::new(0) }; MESSAGE_WORDS] }; N],
            head: AtomicU32::new(0),
            tail: AtomicU32::new(0),
            garbled: AtomicU32::new(0),
            _message: PhantomData,
        }
    }

    /// Capacity, messages.
    pub const fn capacity(&self) -> usize {
        N
    }

    /// The slot of an index in `0..2N` (no division: ARMv6-M has none).
    fn slot(&self, index: u32) -> Option<&[AtomicU32; MESSAGE_WORDS]> {
        let i = if index >= Self::SLOTS {
            index - Self::SLOTS
        } else {
            index
        };
        self.slots.get(i as usize)
    }

    /// The index after `index`, modulo `2N`.
    fn next(index: u32) -> u32 {
        if index + 1 >= 2 * Self::SLOTS {
            0
        } else {
            index + 1
        }
    }

    /// Messages between `head` and `tail`.
    fn count(head: u32, tail: u32) -> u32 {
        if tail >= head {
            tail - head
        } else {
            tail + 2 * Self::SLOTS - head
        }
    }

    /// Producer: put a message, or hand it back when the mailbox is full.
    pub fn push(&self, msg: T) -> Result<(), Full<T>> {
        let tail = self.tail.load(Ordering::Relaxed);
        let head = self.head.load(Ordering::Acquire);
        if Self::count(head, tail) >= Self::SLOTS {
            return Err(Full(msg));
        }
        let Some(slot) = self.slot(tail) else {
            return Err(Full(msg));
        };
        for (cell, w) in slot.iter().zip(msg.pack()) {
            cell.store(w, Ordering::Relaxed);
        }
        self.tail.store(Self::next(tail), Ordering::Release);
        Ok(())
    }

    /// Consumer: take the oldest message, if any. A slot whose words do
    /// not unpack is consumed and counted ([`Mailbox::garbled`]).
    pub fn pop(&self) -> Option<T> {
        let mut head = self.head.load(Ordering::Relaxed);
        let tail = self.tail.load(Ordering::Acquire);
        while head != tail {
            let mut words = [0u32; MESSAGE_WORDS];
            if let Some(slot) = self.slot(head) {
                for (w, cell) in words.iter_mut().zip(slot.iter()) {
                    *w = cell.load(Ordering::Relaxed);
                }
            }
            head = Self::next(head);
            self.head.store(head, Ordering::Release);
            match T::unpack(words) {
                Some(msg) => return Some(msg),
                None => {
                    let g = self.garbled.load(Ordering::Relaxed);
                    self.garbled.store(g.saturating_add(1), Ordering::Relaxed);
                }
            }
        }
        None
    }

    /// Messages waiting (a snapshot: either side may move it at once).
    pub fn len(&self) -> usize {
        let tail = self.tail.load(Ordering::Acquire);
        let head = self.head.load(Ordering::Acquire);
        Self::count(head, tail) as usize
    }

    /// Whether no message waits (a snapshot).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Slots consumed that did not unpack (zero unless memory was
    /// corrupted or two producers raced).
    pub fn garbled(&self) -> u32 {
        self.garbled.load(Ordering::Relaxed)
    }
}

fn fx_word(v: Fx) -> u32 {
    v.to_bits() as u32
}

fn word_fx(w: u32) -> Fx {
    Fx::from_bits(w as i32)
}

impl Packed for Request {
    /// Word 0: the kind (1 enable, 2 disable, 3 power, 4 current, 5 APC,
    /// 6 ACC, 7 clear); word 1: the setpoint's raw [`Fx`] bits; words 2
    /// and 3: zero.
    fn pack(self) -> [u32; MESSAGE_WORDS] {
        let (kind, value) = match self {
            Request::Enable => (1, 0),
            Request::Disable => (2, 0),
            Request::SetPower(mw) => (3, fx_word(mw)),
            Request::SetCurrent(ma) => (4, fx_word(ma)),
            Request::SetMode(Mode::Apc) => (5, 0),
            Request::SetMode(Mode::Acc) => (6, 0),
            Request::ClearFaults => (7, 0),
        };
        [kind, value, 0, 0]
    }

    fn unpack(w: [u32; MESSAGE_WORDS]) -> Option<Self> {
        let [kind, value, 0, 0] = w else {
            return None;
        };
        let plain = |r| (value == 0).then_some(r);
        match kind {
            1 => plain(Request::Enable),
            2 => plain(Request::Disable),
            3 => Some(Request::SetPower(word_fx(value))),
            4 => Some(Request::SetCurrent(word_fx(value))),
            5 => plain(Request::SetMode(Mode::Apc)),
            6 => plain(Request::SetMode(Mode::Acc)),
            7 => plain(Request::ClearFaults),
            _ => None,
        }
    }
}

const STATES: [State; 6] = [
    State::Off,
    State::Arming,
    State::Ramping,
    State::Regulating,
    State::Stopping,
    State::Latched,
];

/// The answer to one request, from the tick back to thread mode.
impl Packed for Result<(), Rejection> {
    /// Word 0: the kind in bits 0..8 (1 accepted, 2 out of range, 3 not
    /// allowed, 4 condition present, 5 no sample yet) and the state or
    /// fault index in bits 8..16; words 1..4: the out-of-range values'
    /// raw [`Fx`] bits (requested, min, max), else zero.
    fn pack(self) -> [u32; MESSAGE_WORDS] {
        match self {
            Ok(()) => [1, 0, 0, 0],
            Err(Rejection::OutOfRange {
                requested,
                min,
                max,
            }) => [2, fx_word(requested), fx_word(min), fx_word(max)],
            Err(Rejection::NotAllowed { state }) => {
                let i = STATES.iter().position(|s| *s == state).unwrap_or(0) as u32;
                [3 | i << 8, 0, 0, 0]
            }
            Err(Rejection::ConditionPresent { fault }) => {
                [4 | u32::from(fault as u8) << 8, 0, 0, 0]
            }
            Err(Rejection::NoSampleYet) => [5, 0, 0, 0],
        }
    }

    fn unpack(w: [u32; MESSAGE_WORDS]) -> Option<Self> {
        let [head, a, b, c] = w;
        let (kind, index) = (head & 0xFF, (head >> 8) as u8);
        let plain = head >> 8 == 0 && a == 0 && b == 0 && c == 0;
        let indexed = head >> 16 == 0 && a == 0 && b == 0 && c == 0;
        match kind {
            1 if plain => Some(Ok(())),
            2 if head == 2 => Some(Err(Rejection::OutOfRange {
                requested: word_fx(a),
                min: word_fx(b),
                max: word_fx(c),
            })),
            3 if indexed => STATES
                .get(usize::from(index))
                .map(|&state| Err(Rejection::NotAllowed { state })),
            4 if indexed => {
                Fault::from_index(index).map(|fault| Err(Rejection::ConditionPresent { fault }))
            }
            5 if plain => Some(Err(Rejection::NoSampleYet)),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    extern crate std;
    use super::*;
    use std::vec::Vec;

    #[test]
    fn first_in_first_out_and_full_hands_the_message_back() {
        let m: Mailbox<Request, 3> = Mailbox::new();
        assert!(m.is_empty());
        assert_eq!(m.pop(), None);
        m.push(Request::Enable).unwrap();
        m.push(Request::SetPower(Fx::from_num(5))).unwrap();
        m.push(Request::Disable).unwrap();
        assert_eq!(m.len(), 3);
        assert_eq!(
            m.push(Request::ClearFaults),
            Err(Full(Request::ClearFaults))
        );
        assert_eq!(m.pop(), Some(Request::Enable));
        m.push(Request::ClearFaults).unwrap();
        let rest: Vec<_> = core::iter::from_fn(|| m.pop()).collect();
        assert_eq!(
            rest,
            [
                Request::SetPower(Fx::from_num(5)),
                Request::Disable,
                Request::ClearFaults
            ]
        );
        assert!(m.is_empty());
    }

    #[test]
    fn the_indices_wrap_and_every_slot_is_used_in_turn() {
        let m: Mailbox<Request, 5> = Mailbox::new();
        // Rounds of fill and drain that cross the index wrap (at 2N = 10)
        // at every offset, with a capacity that does not divide 2^32.
        for round in 0..12u32 {
            for k in 0..5 {
                m.push(Request::SetCurrent(Fx::from_num(round * 10 + k)))
                    .unwrap();
            }
            assert!(m.push(Request::Enable).is_err());
            for k in 0..5 {
                assert_eq!(
                    m.pop(),
                    Some(Request::SetCurrent(Fx::from_num(round * 10 + k)))
                );
            }
            assert_eq!(m.pop(), None);
        }
    }

    #[test]
    fn a_garbled_slot_is_skipped_and_counted() {
        let m: Mailbox<Request, 4> = Mailbox::new();
        m.push(Request::Enable).unwrap();
        m.push(Request::Disable).unwrap();
        // Corrupt the first slot's kind.
        m.slots[0][0].store(99, Ordering::Relaxed);
        assert_eq!(m.pop(), Some(Request::Disable));
        assert_eq!(m.garbled(), 1);
        assert_eq!(m.pop(), None);
    }

    #[test]
    fn requests_round_trip_and_stray_words_do_not_unpack() {
        let all = [
            Request::Enable,
            Request::Disable,
            Request::SetPower(Fx::from_num(-3.5)),
            Request::SetPower(Fx::MAX),
            Request::SetCurrent(Fx::MIN),
            Request::SetMode(Mode::Apc),
            Request::SetMode(Mode::Acc),
            Request::ClearFaults,
        ];
        for r in all {
            assert_eq!(Request::unpack(r.pack()), Some(r));
        }
        for w in [
            [0, 0, 0, 0],
            [8, 0, 0, 0],
            [1, 1, 0, 0],
            [3, 0, 1, 0],
            [7, 0, 0, 1],
        ] {
            assert_eq!(Request::unpack(w), None, "{w:?}");
        }
    }

    #[test]
    fn answers_round_trip_and_stray_words_do_not_unpack() {
        let mut all: Vec<Result<(), Rejection>> = Vec::from([
            Ok(()),
            Err(Rejection::NoSampleYet),
            Err(Rejection::OutOfRange {
                requested: Fx::from_num(31),
                min: Fx::from_num(0.5),
                max: Fx::from_num(30),
            }),
        ]);
        all.extend(STATES.map(|state| Err(Rejection::NotAllowed { state })));
        all.extend(Fault::ALL.map(|fault| Err(Rejection::ConditionPresent { fault })));
        for a in all {
            assert_eq!(<Result<(), Rejection>>::unpack(a.pack()), Some(a));
        }
        for w in [
            [0, 0, 0, 0],
            [6, 0, 0, 0],
            [1 | 1 << 8, 0, 0, 0],
            [3 | 6 << 8, 0, 0, 0],
            [4 | 20 << 8, 0, 0, 0],
            [4 | 1 << 16, 0, 0, 0],
            [5, 0, 0, 1],
            [2 | 1 << 8, 0, 0, 0],
        ] {
            assert_eq!(<Result<(), Rejection>>::unpack(w), None, "{w:?}");
        }
    }
}
