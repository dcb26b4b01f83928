//! The bytes a strategy reports holding, against what a counting global
//! allocator sees live at the peak of the backward pass. One test only:
//! the allocator counts for the whole process.

use ndarray::ArrayD;
use revdiff::{Chain, Compose, Exp, Map, Neg, Retention, Sin, Tanh, kept_bytes};
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

/// The largest live bytes above `before` while `f` runs, and its result.
fn peak_above<R>(f: impl FnOnce() -> R) -> (usize, R) {
    let before = LIVE.load(Ordering::SeqCst);
    PEAK.store(before, Ordering::SeqCst);
    let r = f();
    (PEAK.load(Ordering::SeqCst) - before, r)
}

#[test]
fn reported_bytes_match_what_the_allocator_sees() {
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
        let (extra, (dx, cost)) = peak_above(|| chain.gradient_and_cost(&x, &dy).unwrap());
        drop(dx);
        assert_eq!(cost.peak_memo_bytes, 0, "negation keeps no memo");
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

    // Stages that keep a memo the size of a state (sine keeps its slope,
    // tanh its output): the reported peak of checkpoints and memos together
    // is what is live, beyond the same few temporaries.
    let mut chain = Chain::<f64>::new(&[width]);
    for k in 0..48 {
        if k % 2 == 0 {
            chain.push_elementwise("sin", Sin).unwrap();
        } else {
            chain.push_elementwise("tanh", Tanh).unwrap();
        }
    }
    for retention in [
        Retention::All,
        Retention::InputOnly,
        Retention::EveryKth(8),
        Retention::Binomial { states: 5 },
    ] {
        chain.retaining(retention).unwrap();
        let (extra, (dx, cost)) = peak_above(|| chain.gradient_and_cost(&x, &dy).unwrap());
        drop(dx);
        assert!(cost.peak_memo_bytes >= state, "{retention:?}: {cost:?}");
        assert!(
            extra >= cost.peak_bytes,
            "{retention:?}: {extra} bytes seen, {} reported",
            cost.peak_bytes
        );
        assert!(
            extra <= cost.peak_bytes + 4 * state + 64 * 1024,
            "{retention:?}: {extra} bytes seen, {} reported",
            cost.peak_bytes
        );
    }
    // A static composite's memo, by `kept_bytes`, against the allocator:
    // the memo is what stays live after the forward pass.
    let model = Sin.then(Tanh).then(Exp).then(Sin);
    let xs = ndarray::Array1::from_elem(width, 0.25);
    for (name, reported, (extra, memo)) in [
        (
            "kept",
            kept_bytes(&model, &xs).unwrap(),
            peak_above(|| Box::new(model.forward_memo(&xs).unwrap()) as Box<dyn std::any::Any>),
        ),
        (
            "recomputed",
            kept_bytes(&model.recomputed(), &xs).unwrap(),
            peak_above(|| {
                Box::new(model.recomputed().forward_memo(&xs).unwrap()) as Box<dyn std::any::Any>
            }),
        ),
    ] {
        let live = LIVE.load(Ordering::SeqCst);
        drop(memo);
        let freed = live - LIVE.load(Ordering::SeqCst);
        // What the memo and output free is the memo's reported size plus
        // the output (one state).
        assert!(
            freed >= reported + state && freed <= reported + state + 1024,
            "{name}: {freed} bytes freed, {reported} reported"
        );
        assert!(extra >= freed, "{name}");
    }
}
