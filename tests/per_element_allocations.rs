//! A run-time chain of per-element stages allocates nothing in its reusing
//! passes once its workspace is filled, and its one-shot backward pass
//! allocates only the array it returns. One test only: the counting
//! allocator counts for the whole process.

use ndarray::{ArrayD, IxDyn};
use revdiff::{Chain, Compose, Exp, Map, Sin, Tanh, Workspace};
use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicUsize, Ordering};

struct Counting;
static ALLOCATIONS: AtomicUsize = AtomicUsize::new(0);

// A global allocator needs `unsafe impl`; this one only forwards to the
// system allocator and counts the allocations.
#[allow(unsafe_code)]
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::SeqCst);
        unsafe { System.alloc(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

#[test]
fn reusing_passes_allocate_nothing_after_the_first_call() {
    let mut chain = Chain::<f64>::new(&[3]);
    for _ in 0..20 {
        chain.push_per_element("sin", Sin).unwrap();
        chain
            .push_per_element("tanh of exp", Exp.then(Tanh))
            .unwrap();
    }
    // An array stage between two runs.
    chain.push_elementwise("sin", Sin).unwrap();
    chain.push_per_element("sin", Sin).unwrap();
    let x = ArrayD::from_shape_vec(IxDyn(&[3]), vec![0.2, -0.4, 1.1]).unwrap();
    let dy = ArrayD::from_elem(IxDyn(&[3]), 1.0);
    let mut work = Workspace::new();
    let mut dx = ArrayD::zeros(IxDyn(&[3]));
    chain.forward_reusing(&x, &mut work).unwrap();
    chain.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
    let first = dx.clone();

    let before = ALLOCATIONS.load(Ordering::SeqCst);
    for _ in 0..5 {
        chain.forward_reusing(&x, &mut work).unwrap();
        chain.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
    }
    let allocations = ALLOCATIONS.load(Ordering::SeqCst) - before;
    assert_eq!(allocations, 0, "allocations in five reusing pass pairs");
    assert_eq!(dx, first);

    // The one-shot backward pass keeps its workspace on the thread: after
    // its first call, the array it returns is its only allocation.
    assert_eq!(chain.backward(&x, &dy).unwrap(), first);
    let before = ALLOCATIONS.load(Ordering::SeqCst);
    for _ in 0..5 {
        assert_eq!(chain.backward(&x, &dy).unwrap(), first);
    }
    let allocations = ALLOCATIONS.load(Ordering::SeqCst) - before;
    assert_eq!(
        allocations, 5,
        "allocations in five one-shot backward passes"
    );
}
