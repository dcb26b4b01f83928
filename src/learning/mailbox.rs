//! One-message slots between the training thread and a shard's thread.
//!
//! Sharded training passes one job and one answer at a time each way, four
//! times a step. A channel of the standard library allocates when a thread
//! first sleeps on it, at whatever step that happens to be; a mutex and a
//! condition variable never do. Waiting starts awake, because the message
//! usually comes within microseconds and a sleeping thread took longer
//! than that to wake.

use std::sync::{Condvar, Mutex, MutexGuard, PoisonError};
use std::time::{Duration, Instant};

/// Spinning this long first, then yielding the core at every turn.
const SPIN: Duration = Duration::from_micros(50);
/// Polling this long in all (the optimiser's update between steps takes
/// a fraction of a millisecond), then sleeping.
const POLL: Duration = Duration::from_micros(500);

/// A slot for one message from one thread to another, which either side
/// can close.
pub(crate) struct Mailbox<M> {
    slot: Mutex<Slot<M>>,
    filled: Condvar,
}

struct Slot<M> {
    message: Option<M>,
    closed: bool,
}

impl<M> Mailbox<M> {
    pub(crate) fn new() -> Self {
        Mailbox {
            slot: Mutex::new(Slot {
                message: None,
                closed: false,
            }),
            filled: Condvar::new(),
        }
    }

    /// The slot, whatever a panicking thread left it as: a message or the
    /// closing flag, each written whole.
    fn slot(&self) -> MutexGuard<'_, Slot<M>> {
        self.slot.lock().unwrap_or_else(PoisonError::into_inner)
    }

    /// Leaves `message` for the other side; false when the slot is closed
    /// (the other side is gone) or still holds a message (the two sides
    /// lost step, which the protocol rules out).
    pub(crate) fn send(&self, message: M) -> bool {
        let mut slot = self.slot();
        if slot.closed || slot.message.is_some() {
            return false;
        }
        slot.message = Some(message);
        drop(slot);
        self.filled.notify_one();
        true
    }

    /// The next message, once it is there; `None` when the slot is closed
    /// and empty.
    pub(crate) fn receive(&self) -> Option<M> {
        let start = Instant::now();
        loop {
            if let Some(taken) = Self::take(&mut self.slot()) {
                return taken;
            }
            let waited = start.elapsed();
            if waited > POLL {
                break;
            }
            if waited > SPIN {
                std::thread::yield_now();
            } else {
                std::hint::spin_loop();
            }
        }
        let mut slot = self.slot();
        loop {
            if let Some(taken) = Self::take(&mut slot) {
                return taken;
            }
            slot = self
                .filled
                .wait(slot)
                .unwrap_or_else(PoisonError::into_inner);
        }
    }

    /// `Some(message)`, `Some(None)` when closed and empty, `None` to wait.
    fn take(slot: &mut Slot<M>) -> Option<Option<M>> {
        match slot.message.take() {
            Some(message) => Some(Some(message)),
            None if slot.closed => Some(None),
            None => None,
        }
    }

    /// No more messages will come: a wait on the slot ends, once it is
    /// empty, with `None`.
    pub(crate) fn close(&self) {
        self.slot().closed = true;
        self.filled.notify_all();
    }
}

/// Closes its mailbox when dropped, however the thread that holds it ends
/// (a panic included), so that the other side does not wait for ever.
pub(crate) struct CloseOnDrop<'a, M>(pub(crate) &'a Mailbox<M>);

impl<M> Drop for CloseOnDrop<'_, M> {
    fn drop(&mut self) {
        self.0.close();
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn messages_pass_in_turn_between_threads() {
        let (there, back) = (Mailbox::new(), Mailbox::new());
        std::thread::scope(|scope| {
            scope.spawn(|| {
                let _closing = CloseOnDrop(&back);
                while let Some(n) = there.receive() {
                    assert!(back.send(n * 2));
                }
            });
            for n in 0..1000u64 {
                assert!(there.send(n));
                assert_eq!(back.receive(), Some(n * 2));
            }
            there.close();
        });
        // The other thread ended and closed its side.
        assert_eq!(back.receive(), None);
        assert!(!back.send(1));
    }

    #[test]
    fn a_full_slot_refuses_a_second_message() {
        let mailbox = Mailbox::new();
        assert!(mailbox.send(1));
        assert!(!mailbox.send(2));
        assert_eq!(mailbox.receive(), Some(1));
    }

    #[test]
    fn a_thread_that_panics_closes_its_side() {
        let answers = Mailbox::<u8>::new();
        std::thread::scope(|scope| {
            let worker = scope.spawn(|| {
                let _closing = CloseOnDrop(&answers);
                panic!("a shard's model panicked");
            });
            // Waits past the polling, asleep, until the panic closes it.
            assert_eq!(answers.receive(), None);
            assert!(worker.join().is_err());
        });
    }

    #[test]
    fn a_message_left_before_closing_is_still_received() {
        let mailbox = Mailbox::new();
        assert!(mailbox.send("last"));
        mailbox.close();
        assert_eq!(mailbox.receive(), Some("last"));
        assert_eq!(mailbox.receive(), None);
    }
}
