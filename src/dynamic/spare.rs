//! Workspaces kept between calls of a run-time chain's one-shot backward
//! pass ([`Map::backward`](crate::Map::backward) without a workspace of
//! the caller's), one small set per thread.
//!
//! The memo passes of a [`Chain`](crate::Chain) box every stage's memo and
//! allocate every stage's output and change: for short chains over small
//! arrays the allocator costs several times the arithmetic. Running the
//! reusing passes in a workspace kept here instead gives the same numbers
//! (the reusing and memo passes agree bit for bit) without those
//! allocations after the first call.
//!
//! The workspaces are per thread, so that the chain stays `Send` and
//! `Sync` (a [`Workspace`] is neither), and keyed by the chain's address
//! only as a hint: a workspace filled by another chain is refitted or
//! refilled by the forward pass, as any workspace is, so a stale key costs
//! allocations, never a wrong number.

use crate::workspace::Workspace;
use std::cell::RefCell;

/// How many chains' workspaces one thread keeps.
const KEPT_PER_THREAD: usize = 4;

/// One thread's kept workspaces, each with the key of the chain that last
/// used it (0: none; a chain's address is never 0).
struct Spare {
    keys: [usize; KEPT_PER_THREAD],
    work: [Workspace; KEPT_PER_THREAD],
    /// The slot to give up next when all are taken, in turn.
    next: usize,
}

thread_local! {
    static SPARE: RefCell<Spare> = const {
        RefCell::new(Spare {
            keys: [0; KEPT_PER_THREAD],
            work: [const { Workspace::new() }; KEPT_PER_THREAD],
            next: 0,
        })
    };
}

/// Runs `passes` with the workspace kept for `key` on this thread (a new
/// one the first time, or when a nested call holds it), and keeps it for
/// the next call.
pub(crate) fn with_spare_workspace<R>(key: usize, passes: impl FnOnce(&mut Workspace) -> R) -> R {
    // Taken out of its slot while the passes run, so that a nested call
    // (a stage that runs a chain of its own) finds it missing, not borrowed.
    let mut work = SPARE
        .try_with(|spare| {
            let spare = &mut *spare.borrow_mut();
            let at = spare.keys.iter().position(|&k| k == key)?;
            spare.keys[at] = 0;
            Some(std::mem::take(&mut spare.work[at]))
        })
        .ok()
        .flatten()
        .unwrap_or_default();
    let result = passes(&mut work);
    let given_up = SPARE.try_with(|spare| {
        let spare = &mut *spare.borrow_mut();
        let at = match spare.keys.iter().position(|&k| k == 0) {
            Some(free) => free,
            None => {
                spare.next = (spare.next + 1) % KEPT_PER_THREAD;
                spare.next
            }
        };
        spare.keys[at] = key;
        std::mem::replace(&mut spare.work[at], work)
    });
    // Dropped after the borrow ends: a workspace holds the user's types,
    // whose drop could in principle run a chain again.
    drop(given_up);
    result
}

/// Frees the workspaces the calling thread keeps for the one-shot backward
/// passes of run-time chains; the next such call allocates them again.
///
/// A [`Chain`](crate::Chain)'s [`backward`](crate::Map::backward) keeps the
/// buffers of its passes for the next call on the same thread when they
/// hold at most 1 MiB (three numbers per value between its stages: the
/// value, its change and a slope; larger chains use the memo passes, whose
/// allocations cost little beside their arithmetic), for at most four
/// chains per thread. This returns that memory at once. (A chain of
/// scalar maps over one-element arrays keeps nothing there: its one-shot
/// backward pass sweeps its stages with their slopes on the stack.)
///
/// ```
/// use revdiff::{Chain, Map, Sin, free_spare_workspaces};
/// use ndarray::ArrayD;
///
/// let mut chain = Chain::<f64>::new(&[3]);
/// chain.push_per_element("sin", Sin)?;
/// let x = ArrayD::from_elem(vec![3], 0.5);
/// let first = chain.backward(&x, &x)?; // keeps its buffers
/// free_spare_workspaces();
/// assert_eq!(chain.backward(&x, &x)?, first); // allocates them again
/// # Ok::<(), revdiff::Error>(())
/// ```
pub fn free_spare_workspaces() {
    let all = SPARE.try_with(|spare| {
        let spare = &mut *spare.borrow_mut();
        spare.keys = [0; KEPT_PER_THREAD];
        std::mem::take(&mut spare.work)
    });
    drop(all);
}
