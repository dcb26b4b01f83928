//! A run-time chain of per-element stages allocates nothing in its reusing
//! passes once its workspace is filled, and its one-shot backward pass
//! allocates only the array it returns; a nested boxed map of scalar maps,
//! which sweeps its stages, allocates nothing after its first call. One
//! test only: the counting allocator counts for the whole process.

use ndarray::{ArrayD, IxDyn};
use revdiff::{Boxed, Chain, Compose, Exp, Map, Sin, Tanh, Workspace};
#[path = "common/allocation_count.rs"]
mod allocation_count;
use allocation_count::allocations;

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

    let before = allocations();
    for _ in 0..5 {
        chain.forward_reusing(&x, &mut work).unwrap();
        chain.backward_reusing(&x, &mut work, &dy, &mut dx).unwrap();
    }
    let made = allocations() - before;
    assert_eq!(made, 0, "allocations in five reusing pass pairs");
    assert_eq!(dx, first);

    // The one-shot backward pass keeps its workspace on the thread: after
    // its first call, the array it returns is its only allocation.
    assert_eq!(chain.backward(&x, &dy).unwrap(), first);
    let before = allocations();
    for _ in 0..5 {
        assert_eq!(chain.backward(&x, &dy).unwrap(), first);
    }
    let made = allocations() - before;
    assert_eq!(made, 5, "allocations in five one-shot backward passes");

    // A chain of scalar maps (per-element stages over one element) needs
    // no workspace: from its first call, the array it returns is its only
    // allocation up to 32 stages, and a vector of slopes is the one more
    // past that.
    for (count, per_call) in [(8, 1), (32, 1), (33, 2)] {
        let mut scalar = Chain::<f64>::new(&[1]);
        for _ in 0..count {
            scalar.push_per_element("sin", Sin).unwrap();
        }
        let (x, dy) = (
            ArrayD::from_elem(IxDyn(&[1]), 0.4),
            ArrayD::from_elem(IxDyn(&[1]), 1.0),
        );
        let before = allocations();
        let dx = scalar.backward(&x, &dy).unwrap();
        let made = allocations() - before;
        assert_eq!(
            made, per_call,
            "allocations in the first one-shot backward pass of {count} stages"
        );
        let (_, memo) = scalar.forward_memo(&x).unwrap();
        assert_eq!(dx, scalar.backward_memo(&memo, &dy).unwrap());
    }

    // A boxed map nested eight deep, of scalar maps, sweeps its stages:
    // after the first call of each pass (which lists the stages and fills
    // the workspace), nothing is allocated; through the maps' own passes
    // each level would box its memo.
    let mut boxed: Boxed<f64, f64> = Boxed::new(Sin).unwrap();
    for _ in 1..8 {
        boxed = Boxed::new(boxed.then(Tanh)).unwrap();
    }
    let (mut work, mut dx) = (Workspace::new(), 0.0);
    let first = boxed.backward(&0.4, &1.0).unwrap();
    boxed.forward_reusing(&0.4, &mut work).unwrap();
    boxed
        .backward_reusing(&0.4, &mut work, &1.0, &mut dx)
        .unwrap();
    let before = allocations();
    for _ in 0..5 {
        assert_eq!(boxed.backward(&0.4, &1.0).unwrap(), first);
        boxed.forward_reusing(&0.4, &mut work).unwrap();
        boxed
            .backward_reusing(&0.4, &mut work, &1.0, &mut dx)
            .unwrap();
        assert_eq!(dx, first);
    }
    let made = allocations() - before;
    assert_eq!(
        made, 0,
        "allocations in five rounds of a nested boxed map's passes"
    );
}
