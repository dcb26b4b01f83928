//! The bytes a strategy reports holding, against what a counting global
//! allocator sees live at the peak of the backward pass. One test only:
//! the allocator counts for the whole process.

use ndarray::ArrayD;
use revdiff::{Chain, Neg, Retention};
use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

struct Counting;
static LIVE: AtomicUsize = AtomicUsize::new(0);
static PEAK: AtomicUsize = AtomicUsize::new(0);

// A global allocator needs `unsafe impl`; this one only forwards to the
// system allocator and counts the bytes live.
#[allow(unsafe_code)]
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        let live = LIVE.fetch_add(layout.size(), Ordering::SeqCst) + layout.size();
        PEAK.fetch_max(live, Ordering::SeqCst);
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        LIVE.fetch_sub(layout.size(), Ordering::SeqCst);
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

#[test]
fn reported_checkpoint_bytes_match_what_the_allocator_sees() {
    // Stages that keep no memo (negation), so the states held are the
    // checkpoints the strategy stores, and wide enough that the few
    // temporaries of a pass are the only other large allocations.
    let width = 50_000;
    let state = width * std::mem::size_of::<f64>();
    let mut chain = Chain::<f64>::new(&[width]);
    for _ in 0..64 {
        chain.push_elementwise("neg", Neg).unwrap();
    }
    let x = ArrayD::from_elem(vec![width], 0.5);
    let dy = ArrayD::from_elem(vec![width], 1.0);
    for retention in [
        Retention::All,
        Retention::InputOnly,
        Retention::EveryKth(8),
        Retention::Binomial { states: 6 },
        Retention::Binomial { states: 2 },
    ] {
        chain.retaining(retention).unwrap();
        let before = LIVE.load(Ordering::SeqCst);
        PEAK.store(before, Ordering::SeqCst);
        let (dx, cost) = chain.gradient_and_cost(&x, &dy).unwrap();
        let extra = PEAK.load(Ordering::SeqCst) - before;
        drop(dx);
        // The stored states are really held at once...
        assert!(
            extra >= cost.peak_checkpoint_bytes,
            "{retention:?}: {extra} bytes seen, {} reported",
            cost.peak_checkpoint_bytes
        );
        // ...and nothing else of their size is, beyond a pass's few
        // temporaries (the output, the change, the state being advanced).
        assert!(
            extra <= cost.peak_checkpoint_bytes + 4 * state + 64 * 1024,
            "{retention:?}: {extra} bytes seen, {} reported",
            cost.peak_checkpoint_bytes
        );
    }
}
